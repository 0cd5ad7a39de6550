//! Reading delimited text: the one place that builds CSV readers.
//!
//! A [`Sheet`] is an input file's header plus a stream of data rows. It strips a
//! UTF-8 byte-order mark, accepts LF and CRLF line ends, detects the delimiter
//! (comma, semicolon or tab) from the header line unless one is given, and turns every fault of the text itself (empty file,
//! header only, bytes that are not UTF-8, rows with too few or too many fields)
//! into a [`RowIssue`] naming the line and column. It knows nothing of the
//! store or of what the columns mean.

use csv::{ByteRecord, StringRecord};

use super::error::RowIssue;

/// The UTF-8 byte-order mark.
const BOM: &[u8] = b"\xEF\xBB\xBF";

/// The delimiters tally recognises on its own.
pub const DELIMITERS: [u8; 3] = [b',', b';', b'\t'];

/// A readable name for a delimiter byte, for messages.
pub fn delimiter_name(d: u8) -> String {
    match d {
        b',' => "comma".into(),
        b';' => "semicolon".into(),
        b'\t' => "tab".into(),
        other => format!("'{}'", other as char),
    }
}

/// Pick the delimiter from the header line: the most frequent of comma,
/// semicolon and tab outside double quotes (comma when none occurs).
pub fn detect_delimiter(text: &[u8]) -> u8 {
    let line_end = text.iter().position(|&b| b == b'\n').unwrap_or(text.len());
    let mut counts = [0usize; 3];
    let mut quoted = false;
    for &b in &text[..line_end] {
        if b == b'"' {
            quoted = !quoted;
        } else if !quoted && let Some(i) = DELIMITERS.iter().position(|&d| d == b) {
            counts[i] += 1;
        }
    }
    let mut best = 0;
    for i in 1..3 {
        if counts[i] > counts[best] {
            best = i;
        }
    }
    DELIMITERS[best]
}

/// Collected problems of one file: the first few kept, all of them counted.
#[derive(Debug, Default)]
pub struct Issues {
    kept: Vec<RowIssue>,
    total: usize,
}

/// How many issues are kept in memory before only counting (they are sorted by
/// line afterwards and the first 20 reported).
const KEEP: usize = 10_000;

impl Issues {
    /// Record one problem.
    pub fn push(&mut self, line: u64, column: &str, message: impl Into<String>) {
        self.push_in("", line, column, message);
    }

    /// Record one problem of the file `part` inside an archive (`column` is
    /// the term then).
    pub fn push_in(&mut self, part: &str, line: u64, column: &str, message: impl Into<String>) {
        self.total += 1;
        if self.kept.len() < KEEP {
            self.kept.push(RowIssue {
                part: part.to_string(),
                line,
                column: column.to_string(),
                message: message.into(),
            });
        }
    }

    /// True when no problem was recorded.
    pub fn is_empty(&self) -> bool {
        self.total == 0
    }

    /// The first `n` problems in line order, and the total.
    pub fn first(mut self, n: usize) -> (Vec<RowIssue>, usize) {
        self.kept
            .sort_by(|a, b| (&a.part, a.line).cmp(&(&b.part, b.line)));
        self.kept.truncate(n);
        (self.kept, self.total)
    }
}

/// An input file opened for reading: header known, rows still to come.
pub struct Sheet<'a> {
    reader: csv::Reader<&'a [u8]>,
    /// The text after any byte-order mark (line numbers are counted in it).
    text: &'a [u8],
    /// The header fields, trimmed, as written.
    pub header: Vec<String>,
    /// The delimiter in use.
    pub delimiter: u8,
}

impl<'a> Sheet<'a> {
    /// Open `bytes` as a delimited file. Problems with the header (empty file,
    /// bytes that are not UTF-8, empty or repeated column names) go to `issues`;
    /// `None` is returned when no row can be read at all.
    pub fn open(bytes: &'a [u8], delimiter: Option<u8>, issues: &mut Issues) -> Option<Sheet<'a>> {
        let text = bytes.strip_prefix(BOM).unwrap_or(bytes);
        if text.iter().all(|b| b.is_ascii_whitespace()) {
            issues.push(
                1,
                "",
                "the file is empty; expected a header row naming the columns",
            );
            return None;
        }
        let delimiter = delimiter.unwrap_or_else(|| detect_delimiter(text));
        let mut reader = csv::ReaderBuilder::new()
            .delimiter(delimiter)
            .has_headers(false)
            .flexible(true)
            .from_reader(text);
        let mut raw = ByteRecord::new();
        match reader.read_byte_record(&mut raw) {
            Ok(true) => {}
            Ok(false) => {
                issues.push(
                    1,
                    "",
                    "the file is empty; expected a header row naming the columns",
                );
                return None;
            }
            Err(e) => {
                issues.push(line_of(&e), "", format!("cannot read the header: {e}"));
                return None;
            }
        }
        let mut header = Vec::with_capacity(raw.len());
        for (i, field) in raw.iter().enumerate() {
            match std::str::from_utf8(field) {
                Ok(s) => header.push(s.trim().to_string()),
                Err(e) => {
                    issues.push(
                        1,
                        &format!("#{}", i + 1),
                        format!(
                            "the header is not valid UTF-8 (bad byte after {} valid bytes); \
                             save the file as UTF-8",
                            e.valid_up_to()
                        ),
                    );
                    return None;
                }
            }
        }
        let mut ok = true;
        for (i, name) in header.iter().enumerate() {
            if name.is_empty() {
                issues.push(1, &format!("#{}", i + 1), "empty column name in the header");
                ok = false;
            } else if header[..i].iter().any(|h| h.eq_ignore_ascii_case(name)) {
                issues.push(1, name, "this column name appears twice in the header");
                ok = false;
            }
        }
        ok.then_some(Sheet {
            reader,
            text,
            header,
            delimiter,
        })
    }

    /// Feed every data row with the header's number of fields to `f` as
    /// `(line, record)`; fields are as written (callers trim spaces). Rows that cannot be read, have the wrong number of
    /// fields or are not UTF-8 become issues and are skipped. A file without data
    /// rows is an issue too. Returns the number of data rows seen.
    pub fn rows(
        mut self,
        issues: &mut Issues,
        mut f: impl FnMut(u64, &StringRecord, &mut Issues),
    ) -> usize {
        let width = self.header.len();
        let mut raw = ByteRecord::new();
        let mut seen = 0usize;
        // Line numbers from byte offsets: the csv reader's own count is one short
        // after a CRLF line end, so newlines are counted here, incrementally.
        let (mut at, mut lines) = (0usize, 1u64);
        let text = self.text;
        let mut line_of_byte = |byte: usize| {
            let byte = byte.min(text.len());
            if byte > at {
                lines += text[at..byte].iter().filter(|&&b| b == b'\n').count() as u64;
                at = byte;
            }
            // A record "starting" on the LF of a CRLF pair starts on the next line.
            lines + u64::from(text.get(byte) == Some(&b'\n'))
        };
        loop {
            match self.reader.read_byte_record(&mut raw) {
                Ok(true) => {}
                Ok(false) => break,
                Err(e) => {
                    issues.push(line_of(&e), "", format!("cannot read the row: {e}"));
                    // The reader cannot resynchronise after a broken quote; stop here.
                    break;
                }
            }
            let line = raw
                .position()
                .map_or(0, |p| line_of_byte(p.byte() as usize));
            if raw.len() == 1 && raw.get(0).is_some_and(|f| f.trim_ascii().is_empty()) && width > 1
            {
                // A line holding only spaces.
                continue;
            }
            seen += 1;
            if raw.len() != width {
                let column = if raw.len() < width {
                    self.header[raw.len()].clone()
                } else {
                    format!("#{}", width + 1)
                };
                issues.push(
                    line,
                    &column,
                    format!(
                        "the row has {} field(s) but the header has {width} (delimiter {}); \
                         check for a missing or extra delimiter",
                        raw.len(),
                        delimiter_name(self.delimiter)
                    ),
                );
                continue;
            }
            match StringRecord::from_byte_record(std::mem::take(&mut raw)) {
                Ok(rec) => {
                    f(line, &rec, issues);
                    raw = rec.into_byte_record();
                }
                Err(e) => {
                    let field = e.utf8_error().field();
                    issues.push(
                        line,
                        &self.header[field],
                        format!(
                            "not valid UTF-8 (bad byte after {} valid bytes of the field); \
                             save the file as UTF-8",
                            e.utf8_error().valid_up_to()
                        ),
                    );
                    raw = e.into_byte_record();
                }
            }
        }
        if seen == 0 {
            issues.push(2, "", "the file has a header but no data rows");
        }
        seen
    }
}

fn line_of(e: &csv::Error) -> u64 {
    e.position().map_or(0, |p| p.line())
}

#[cfg(test)]
mod tests {
    use super::*;

    type Rows = Vec<(u64, Vec<String>)>;

    fn collect(bytes: &[u8]) -> (Vec<String>, Rows, Issues) {
        let mut issues = Issues::default();
        let mut rows = Vec::new();
        let header = match Sheet::open(bytes, None, &mut issues) {
            Some(s) => {
                let h = s.header.clone();
                s.rows(&mut issues, |l, r, _| {
                    rows.push((l, r.iter().map(String::from).collect()))
                });
                h
            }
            None => Vec::new(),
        };
        (header, rows, issues)
    }

    #[test]
    fn detects_each_delimiter_and_ignores_quoted_ones() {
        assert_eq!(detect_delimiter(b"a,b,c\n1;2;3;4;5"), b',');
        assert_eq!(detect_delimiter(b"a;b;c\n"), b';');
        assert_eq!(detect_delimiter(b"a\tb\tc"), b'\t');
        assert_eq!(detect_delimiter(b"\"x,y,z\";b;c"), b';');
        assert_eq!(detect_delimiter(b"single"), b',');
    }

    #[test]
    fn bom_and_crlf_are_accepted_and_lines_counted() {
        let (h, rows, issues) = collect(b"\xEF\xBB\xBFa,b\r\n1,2\r\n3,4\r\n");
        assert!(issues.is_empty());
        assert_eq!(h, ["a", "b"]);
        assert_eq!(rows[1], (3, vec!["3".to_string(), "4".to_string()]));
    }

    #[test]
    fn faults_of_the_text_become_issues_with_lines() {
        let (_, _, issues) = collect(b"");
        assert_eq!(issues.first(20).0[0].line, 1);
        let (_, _, issues) = collect(b"a,b\n");
        assert_eq!(issues.first(20).0[0].line, 2);
        let (_, rows, issues) = collect(b"a,b\n1,2\n3\n4,5,6\n7,\xFF\n8,9\n");
        assert_eq!(rows.len(), 2);
        let (list, total) = issues.first(20);
        assert_eq!(total, 3);
        assert_eq!((list[0].line, list[0].column.as_str()), (3, "b"));
        assert_eq!((list[1].line, list[1].column.as_str()), (4, "#3"));
        assert_eq!((list[2].line, list[2].column.as_str()), (5, "b"));
    }
}
