//! Reading delimited text: the one place that builds CSV readers.
//!
//! A [`Sheet`] is an input file's header plus a stream of data rows. It strips a
//! UTF-8 byte-order mark, accepts LF, CRLF and CR line ends, detects the delimiter
//! (comma, semicolon or tab) from the header line unless one is given, and turns every fault of the text itself (empty file,
//! header only, bytes that are not UTF-8, rows with too few or too many fields)
//! into a [`RowIssue`] naming the line and column. It knows nothing of the
//! store or of what the columns mean.
//!
//! It is also the one place where every field is read, header names included,
//! so the rule for text ([`clean_field`]) is applied here once for every kind
//! of file: spaces around the field trimmed, the text put in Unicode
//! Normalization Form C, control, zero-width and bidirectional characters
//! refused, and the length limited ([`MAX_NAME_CHARS`], [`MAX_NOTES_CHARS`]).
//! Callers receive the cleaned fields.

use std::borrow::Cow;

use csv::{ByteRecord, StringRecord};
use unicode_normalization::{UnicodeNormalization, is_nfc};

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

/// The most characters a name (a site, protocol or event code, a taxon name, a
/// rank, an attribute key or value, a header name) or any other field holds,
/// counted after normalisation.
pub const MAX_NAME_CHARS: usize = 200;

/// The most characters a note (the `notes` column of an events file) holds.
pub const MAX_NOTES_CHARS: usize = 2000;

/// The most characters of a value a message quotes ([`shorten`]).
pub const MAX_QUOTED_CHARS: usize = 80;

/// A value as quoted in a message: whole when it has at most
/// [`MAX_QUOTED_CHARS`] characters, else its first 77 characters and "…", so
/// that a huge field is never echoed whole.
pub fn shorten(s: &str) -> Cow<'_, str> {
    match s.char_indices().nth(MAX_QUOTED_CHARS) {
        None => Cow::Borrowed(s),
        Some(_) => {
            let end = s
                .char_indices()
                .nth(MAX_QUOTED_CHARS - 3)
                .map_or(s.len(), |(i, _)| i);
            Cow::Owned(format!("{}…", &s[..end]))
        }
    }
}

/// What a field holds, for its length limit and the wording of problems.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FieldKind {
    /// A name or any other short field: at most [`MAX_NAME_CHARS`].
    Name,
    /// Free text notes: at most [`MAX_NOTES_CHARS`].
    Notes,
}

impl FieldKind {
    /// The most characters the field holds.
    pub fn max_chars(self) -> usize {
        match self {
            FieldKind::Name => MAX_NAME_CHARS,
            FieldKind::Notes => MAX_NOTES_CHARS,
        }
    }

    fn noun(self) -> &'static str {
        match self {
            FieldKind::Name => "names",
            FieldKind::Notes => "notes",
        }
    }
}

/// The readable name of a character a field may not hold, or `None` when it
/// may hold it: every control character (Unicode general category Cc: C0
/// U+0000–U+001F, U+007F and C1 U+0080–U+009F, tab and line ends included),
/// the zero-width characters U+200B–U+200D, U+2060 and U+FEFF, and the
/// bidirectional marks, embeddings, overrides and isolates U+200E, U+200F,
/// U+202A–U+202E, U+2066–U+2069 and U+061C. None of them is visible, so two
/// names differing only by one look alike, and the bidirectional ones can make
/// a name display as another (the character names are those of the Unicode
/// Standard; the choice of characters is common practice, no source).
pub fn refused_char(c: char) -> Option<&'static str> {
    Some(match c {
        '\0' => "null",
        '\t' => "tab",
        '\n' => "line feed",
        '\r' => "carriage return",
        '\u{1B}' => "escape",
        '\u{7F}' => "delete",
        '\u{85}' => "next line",
        c if c.is_control() => "control character",
        '\u{200B}' => "zero width space",
        '\u{200C}' => "zero width non-joiner",
        '\u{200D}' => "zero width joiner",
        '\u{2060}' => "word joiner",
        '\u{FEFF}' => "zero width no-break space",
        '\u{200E}' => "left-to-right mark",
        '\u{200F}' => "right-to-left mark",
        '\u{061C}' => "arabic letter mark",
        '\u{202A}' => "left-to-right embedding",
        '\u{202B}' => "right-to-left embedding",
        '\u{202C}' => "pop directional formatting",
        '\u{202D}' => "left-to-right override",
        '\u{202E}' => "right-to-left override",
        '\u{2066}' => "left-to-right isolate",
        '\u{2067}' => "right-to-left isolate",
        '\u{2068}' => "first strong isolate",
        '\u{2069}' => "pop directional isolate",
        _ => return None,
    })
}

/// A field as stored: spaces around it trimmed, in Unicode Normalization Form
/// C (canonical composition, Unicode Standard Annex #15), so that a letter
/// written composed ("é", U+00E9) and decomposed ("e" + U+0301) is one name.
/// Refused, with the reason: a field holding a character [`refused_char`]
/// names (the first one is named, with its position counted in characters from
/// 1 after trimming), or longer than `kind` allows after normalisation.
/// Borrowed when the trimmed field is already in that form.
pub fn clean_field(field: &str, kind: FieldKind) -> Result<Cow<'_, str>, String> {
    let s = field.trim();
    let max = kind.max_chars();
    let bad = |at: usize, c: char, name: &str| {
        format!(
            "contains U+{:04X} ({name}) at character {at}; {} may not hold control, \
             zero-width or bidirectional characters",
            c as u32,
            kind.noun()
        )
    };
    let long = |s: &str, n: usize| {
        format!(
            "'{}' is {n} characters long; {} hold at most {max} characters",
            shorten(s),
            kind.noun()
        )
    };
    if s.is_ascii() {
        // ASCII is in every normalization form; its only refused characters are controls.
        if let Some(i) = s.bytes().position(|b| b.is_ascii_control()) {
            let c = char::from(s.as_bytes()[i]);
            return Err(bad(
                i + 1,
                c,
                refused_char(c).unwrap_or("control character"),
            ));
        }
        return if s.len() > max {
            Err(long(s, s.len()))
        } else {
            Ok(Cow::Borrowed(s))
        };
    }
    if let Some((i, c, name)) = s
        .chars()
        .enumerate()
        .find_map(|(i, c)| refused_char(c).map(|name| (i, c, name)))
    {
        return Err(bad(i + 1, c, name));
    }
    let text: Cow<'_, str> = if is_nfc(s) {
        Cow::Borrowed(s)
    } else {
        Cow::Owned(s.nfc().collect())
    };
    let n = text.chars().count();
    if n > max {
        Err(long(&text, n))
    } else {
        Ok(text)
    }
}

/// Counts line ends (LF, CRLF and a lone CR, each one end) in a text read
/// front to back, to turn byte offsets into line numbers.
#[derive(Debug, Default)]
struct Lines {
    /// Bytes counted so far.
    at: usize,
    /// Line ends in `text[..at]`.
    ends: u64,
}

impl Lines {
    /// The 1-based line of the record whose reader position is `byte`: line
    /// ends the reader skipped from there (blank lines, the LF of a CRLF) are
    /// passed first, so the line is the one holding the record's first byte.
    fn line_of(&mut self, text: &[u8], byte: usize) -> u64 {
        let mut start = byte.min(text.len());
        while matches!(text.get(start), Some(b'\r' | b'\n')) {
            start += 1;
        }
        if start < self.at {
            *self = Lines::default();
        }
        for i in self.at..start {
            // A CR followed by LF ends its line at the LF.
            let end = text[i] == b'\n' || (text[i] == b'\r' && text.get(i + 1) != Some(&b'\n'));
            self.ends += u64::from(end);
        }
        self.at = start;
        self.ends + 1
    }
}

/// Pick the delimiter from the header line: the most frequent of comma,
/// semicolon and tab outside double quotes (comma when none occurs).
pub fn detect_delimiter(text: &[u8]) -> u8 {
    let line_end = text
        .iter()
        .position(|&b| b == b'\n' || b == b'\r')
        .unwrap_or(text.len());
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
    /// The header fields, cleaned by [`clean_field`].
    pub header: Vec<String>,
    /// The delimiter in use.
    pub delimiter: u8,
    /// What each column holds (all [`FieldKind::Name`] until told otherwise).
    kinds: Vec<FieldKind>,
}

impl<'a> Sheet<'a> {
    /// Open `bytes` as a delimited file. Problems with the header (empty file,
    /// bytes that are not UTF-8, names refused by [`clean_field`], empty or
    /// repeated column names) go to `issues`; `None` is returned when no row
    /// can be read at all.
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
                issues.push(
                    line_of(text, &e),
                    "",
                    format!("cannot read the header: {e}"),
                );
                return None;
            }
        }
        let mut header = Vec::with_capacity(raw.len());
        let mut ok = true;
        for (i, field) in raw.iter().enumerate() {
            let column = format!("#{}", i + 1);
            match std::str::from_utf8(field) {
                Ok(s) => match clean_field(s, FieldKind::Name) {
                    Ok(name) => header.push(name.into_owned()),
                    Err(m) => {
                        issues.push(1, &column, format!("the column name {m}"));
                        header.push(String::new());
                        ok = false;
                    }
                },
                Err(e) => {
                    issues.push(
                        1,
                        &column,
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
        if !ok {
            return None;
        }
        for (i, name) in header.iter().enumerate() {
            if name.is_empty() {
                issues.push(1, &format!("#{}", i + 1), "empty column name in the header");
                ok = false;
            } else if header[..i].iter().any(|h| h.eq_ignore_ascii_case(name)) {
                issues.push(
                    1,
                    &shorten(name),
                    "this column name appears twice in the header",
                );
                ok = false;
            }
        }
        let kinds = vec![FieldKind::Name; header.len()];
        ok.then_some(Sheet {
            reader,
            text,
            header,
            delimiter,
            kinds,
        })
    }

    /// Say that the column at header position `idx` holds `kind` of text.
    pub fn set_kind(&mut self, idx: usize, kind: FieldKind) {
        if let Some(k) = self.kinds.get_mut(idx) {
            *k = kind;
        }
    }

    /// Feed every data row with the header's number of fields to `f` as
    /// `(line, record)`, each field cleaned by [`clean_field`] (trimmed, in
    /// NFC). Rows that cannot be read, have the wrong number of fields, are not
    /// UTF-8 or hold a field [`clean_field`] refuses become issues and are
    /// skipped. A file without data rows is an issue too. Returns the number of
    /// data rows seen.
    pub fn rows(
        mut self,
        issues: &mut Issues,
        mut f: impl FnMut(u64, &StringRecord, &mut Issues),
    ) -> usize {
        let width = self.header.len();
        let mut raw = ByteRecord::new();
        let mut seen = 0usize;
        // Line numbers from byte offsets, counted here incrementally: the csv
        // reader's own count is one short after a CRLF line end and counts no
        // lone CR (while it does end records at one).
        let mut lines = Lines::default();
        loop {
            match self.reader.read_byte_record(&mut raw) {
                Ok(true) => {}
                Ok(false) => break,
                Err(e) => {
                    issues.push(
                        line_of(self.text, &e),
                        "",
                        format!("cannot read the row: {e}"),
                    );
                    // The reader cannot resynchronise after a broken quote; stop here.
                    break;
                }
            }
            let line = raw
                .position()
                .map_or(0, |p| lines.line_of(self.text, p.byte() as usize));
            if raw.len() == 1 && raw.get(0).is_some_and(|f| f.trim_ascii().is_empty()) && width > 1
            {
                // A line holding only spaces.
                continue;
            }
            seen += 1;
            if raw.len() != width {
                let column = if raw.len() < width {
                    shorten(&self.header[raw.len()]).into_owned()
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
                    match self.clean(line, &rec, issues) {
                        Some(None) => f(line, &rec, issues),
                        Some(Some(cleaned)) => f(line, &cleaned, issues),
                        None => {}
                    }
                    raw = rec.into_byte_record();
                }
                Err(e) => {
                    let field = e.utf8_error().field();
                    issues.push(
                        line,
                        &shorten(&self.header[field]),
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

    /// Every field of `rec` through [`clean_field`]: `None` when one is refused
    /// (each refusal recorded), `Some(None)` when every field is already as
    /// stored but for spaces around it, else the cleaned record.
    fn clean(
        &self,
        line: u64,
        rec: &StringRecord,
        issues: &mut Issues,
    ) -> Option<Option<StringRecord>> {
        let mut ok = true;
        let mut cleaned: Option<StringRecord> = None;
        for (i, field) in rec.iter().enumerate() {
            match clean_field(field, self.kinds[i]) {
                Err(m) => {
                    issues.push(line, &shorten(&self.header[i]), m);
                    ok = false;
                }
                Ok(Cow::Owned(text)) => {
                    let out = cleaned.get_or_insert_with(|| {
                        let mut out = StringRecord::with_capacity(rec.as_slice().len(), rec.len());
                        for earlier in rec.iter().take(i) {
                            out.push_field(earlier.trim());
                        }
                        out
                    });
                    out.push_field(&text);
                }
                Ok(Cow::Borrowed(text)) => {
                    if let Some(out) = cleaned.as_mut() {
                        out.push_field(text);
                    }
                }
            }
        }
        ok.then_some(cleaned)
    }
}

/// The line of a reader error, from its byte offset.
fn line_of(text: &[u8], e: &csv::Error) -> u64 {
    e.position()
        .map_or(0, |p| Lines::default().line_of(text, p.byte() as usize))
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

    #[test]
    fn lone_cr_crlf_and_lf_each_end_one_line() {
        // Lone CR (classic Mac OS), CRLF and LF each end one line: common
        // practice, no source.
        let (h, rows, issues) = collect(b"a;b\r1;2\r\r3;4\r\n5;6\n\n7;8");
        assert!(issues.is_empty());
        assert_eq!(h, ["a", "b"]);
        let lines: Vec<u64> = rows.iter().map(|r| r.0).collect();
        assert_eq!(lines, [2, 4, 5, 7]);
        assert_eq!(detect_delimiter(b"a;b\r1,2,3,4\r"), b';');
        // A quoted line end is counted too (and refused in the field).
        let (_, rows, issues) = collect(b"a,b\r\"x\ry\",2\r3,4\r");
        assert_eq!(rows, [(4, vec!["3".to_string(), "4".to_string()])]);
        let (list, _) = issues.first(20);
        assert_eq!((list[0].line, list[0].column.as_str()), (2, "a"));
    }

    #[test]
    fn clean_field_refuses_every_listed_character_and_nothing_else_common() {
        // The list of refused code points (docs/data-model.md, "Reading files").
        let refused = (0x00..=0x1F)
            .chain(0x7F..=0x9F)
            .chain(0x200B..=0x200F)
            .chain(0x202A..=0x202E)
            .chain([0x2060, 0x2066, 0x2067, 0x2068, 0x2069, 0x061C, 0xFEFF]);
        for cp in refused {
            let c = char::from_u32(cp).unwrap();
            let field = format!("a{c}b");
            let m = clean_field(&field, FieldKind::Name).unwrap_err();
            assert!(
                m.starts_with(&format!("contains U+{cp:04X} (")) && m.contains("at character 2"),
                "{m}"
            );
        }
        for ok in [
            "Baetis rhodani",
            "Ærø",
            "Šumava",
            "河川",
            "a\u{A0}b",
            "O'Brien's ford",
        ] {
            assert_eq!(clean_field(ok, FieldKind::Name).as_deref(), Ok(ok));
        }
        assert_eq!(
            clean_field("  A\u{30A}ngstr\u{f6}m ", FieldKind::Name).as_deref(),
            Ok("\u{C5}ngstr\u{f6}m")
        );
    }
}
