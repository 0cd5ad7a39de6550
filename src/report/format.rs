//! Output formats and the shared writers for tables, CSV and JSON.

use std::io::Write;

/// How a command prints its result.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum OutputFormat {
    /// A table for people (comfy-table).
    #[default]
    Table,
    /// CSV for scripts: header row, UTF-8, `\n`, `.` decimal point.
    Csv,
    /// One JSON object; never NaN or infinity (those become `null`).
    Json,
}

/// Write a JSON value with a trailing newline.
///
/// # Errors
/// I/O errors.
pub fn write_json(out: &mut dyn Write, value: &serde_json::Value) -> std::io::Result<()> {
    serde_json::to_writer_pretty(&mut *out, value).map_err(std::io::Error::other)?;
    writeln!(out)
}

/// A finite f64 as JSON, or `null` when it is NaN or infinite.
pub fn num(v: f64) -> serde_json::Value {
    serde_json::Number::from_f64(v)
        .map(serde_json::Value::Number)
        .unwrap_or(serde_json::Value::Null)
}

/// An optional f64 as JSON (`null` for `None` or a non-finite value).
pub fn opt_num(v: Option<f64>) -> serde_json::Value {
    v.map(num).unwrap_or(serde_json::Value::Null)
}

/// tally's table look: a rule under the header and one at the end, columns
/// separated by space only, so long tables stay readable and copyable.
pub const TABLE_STYLE: comfy_table::TableStyle = comfy_table::TableStyle::new()
    .header_separator(comfy_table::LineStyle::none().fill('─').junction('─'))
    .bottom_border(comfy_table::LineStyle::none().fill('─').junction('─'));

/// A table with tally's style.
pub fn new_table(header: &[&str]) -> comfy_table::Table {
    let mut t = comfy_table::Table::new();
    t.load_style(TABLE_STYLE);
    t.set_header(
        header
            .iter()
            .map(comfy_table::Cell::new)
            .collect::<Vec<_>>(),
    );
    t
}

/// Write a table followed by a newline.
///
/// # Errors
/// I/O errors.
pub fn write_table(out: &mut dyn Write, table: &comfy_table::Table) -> std::io::Result<()> {
    writeln!(out, "{}", terminal_safe(&table.to_string()))
}

/// Text for a terminal: control characters (C0 but newline and tab, DEL, C1),
/// bidirectional controls and zero-width characters are shown as `<U+XXXX>`
/// instead of acting on the terminal, so a name in the store cannot recolour,
/// move or reverse what tally prints. Every table, note and error goes through
/// it; CSV and JSON keep the text as stored.
///
/// # Examples
/// ```
/// use tally::report::format::terminal_safe;
/// assert_eq!(terminal_safe("Baetis\u{1b}[31m"), "Baetis<U+001B>[31m");
/// assert_eq!(terminal_safe("Baetis"), "Baetis");
/// ```
pub fn terminal_safe(text: &str) -> std::borrow::Cow<'_, str> {
    let unsafe_char = |c: char| {
        (c.is_control() && c != '\n' && c != '\t')
            || matches!(
                c,
                '\u{200B}'..='\u{200F}'
                    | '\u{202A}'..='\u{202E}'
                    | '\u{2066}'..='\u{2069}'
                    | '\u{061C}'
                    | '\u{FEFF}'
            )
    };
    if !text.chars().any(unsafe_char) {
        return std::borrow::Cow::Borrowed(text);
    }
    let mut out = String::with_capacity(text.len() + 16);
    for c in text.chars() {
        if unsafe_char(c) {
            out.push_str(&format!("<U+{:04X}>", u32::from(c)));
        } else {
            out.push(c);
        }
    }
    std::borrow::Cow::Owned(out)
}

/// The one CSV writer of tally's outputs ([`csv_writer`]): the `csv` crate's,
/// with every cell that a spreadsheet would run as a formula neutralised.
pub struct CsvOut<W: std::io::Write> {
    inner: csv::Writer<W>,
}

/// A CSV writer on `out`: a text cell that begins with `=`, `+`, `-`, `@`, a tab
/// or a carriage return, and is not a number, is written with a leading `'`,
/// so a spreadsheet shows it as text instead of evaluating it (the OWASP advice
/// on CSV injection; common practice, no source). Numbers, negative ones
/// included, are written as they are. JSON output keeps every text as stored.
pub fn csv_writer<W: std::io::Write>(out: W) -> CsvOut<W> {
    CsvOut {
        inner: csv::Writer::from_writer(out),
    }
}

/// `cell` as a spreadsheet will not evaluate it ([`csv_writer`]).
pub fn csv_cell(cell: &[u8]) -> std::borrow::Cow<'_, [u8]> {
    let risky = matches!(
        cell.first(),
        Some(b'=' | b'+' | b'-' | b'@' | b'\t' | b'\r')
    );
    let number = std::str::from_utf8(cell)
        .ok()
        .is_some_and(|t| t.trim().parse::<f64>().is_ok());
    if risky && !number {
        let mut v = Vec::with_capacity(cell.len() + 1);
        v.push(b'\'');
        v.extend_from_slice(cell);
        std::borrow::Cow::Owned(v)
    } else {
        std::borrow::Cow::Borrowed(cell)
    }
}

impl<W: std::io::Write> CsvOut<W> {
    /// Write one record, each cell through [`csv_cell`].
    ///
    /// # Errors
    /// The `csv` crate's: I/O, or a record of another width than the first.
    pub fn write_record<I, T>(&mut self, record: I) -> csv::Result<()>
    where
        I: IntoIterator<Item = T>,
        T: AsRef<[u8]>,
    {
        let cells: Vec<Vec<u8>> = record
            .into_iter()
            .map(|c| csv_cell(c.as_ref()).into_owned())
            .collect();
        self.inner.write_record(&cells)
    }

    /// Flush the underlying writer.
    ///
    /// # Errors
    /// I/O errors.
    pub fn flush(&mut self) -> std::io::Result<()> {
        self.inner.flush()
    }
}

/// Shown in tables where a number could not be computed.
pub const MISSING: &str = "—";

/// A permutation p-value for people: the one p-value formatter of tables,
/// reports and verdicts. It carries as many decimals as the smallest attainable
/// value `1/(P+1)` of `permutations` permutations needs (at least three), so a
/// p-value is never rounded to zero and never printed in scientific notation;
/// [`MISSING`] when it was not computed.
pub fn fmt_p(p: f64, permutations: usize) -> String {
    if !p.is_finite() {
        return MISSING.to_string();
    }
    let digits = ((permutations as f64 + 1.0).log10().ceil() as usize).clamp(3, 12);
    format!("{p:.digits$}")
}

/// A statistic for people: six significant digits, scientific notation only
/// for magnitudes below 1e-4 or above 1e8; [`MISSING`] when not computed.
pub fn fmt_num(v: f64) -> String {
    if !v.is_finite() {
        return if v.is_nan() {
            MISSING.to_string()
        } else {
            "inf".to_string()
        };
    }
    if v == 0.0 {
        return "0".to_string();
    }
    let mag = v.abs().log10().floor() as i32;
    if !(-4..=8).contains(&mag) {
        return format!("{v:.5e}");
    }
    let decimals = (5 - mag).max(0) as usize;
    format!("{v:.decimals$}")
}

/// A number for CSV: shortest round-trip form, empty when not computed.
pub fn csv_num(v: f64) -> String {
    if v.is_finite() {
        format!("{v}")
    } else {
        String::new()
    }
}

#[cfg(test)]
mod tests {

    #[test]
    fn formula_cells_are_neutralised_and_numbers_kept() {
        // Cells a spreadsheet evaluates begin with = + - @ tab or CR (OWASP, CSV
        // injection; common practice, no source).
        let c = |t: &str| String::from_utf8(csv_cell(t.as_bytes()).into_owned()).unwrap();
        assert_eq!(c("=1+1"), "'=1+1");
        assert_eq!(c("+x"), "'+x");
        assert_eq!(c("@SUM(A1)"), "'@SUM(A1)");
        assert_eq!(c("-Caenis"), "'-Caenis");
        assert_eq!(c("-0.25"), "-0.25");
        assert_eq!(c("+3"), "+3");
        assert_eq!(c("Baetis"), "Baetis");
        assert_eq!(c(""), "");
    }
    use super::*;

    #[test]
    fn p_values_show_the_smallest_attainable_value() {
        // 1/(9999+1) = 0.0001 needs 4 decimals.
        assert_eq!(fmt_p(1.0 / 10000.0, 9999), "0.0001");
        assert_eq!(fmt_p(0.05, 19), "0.050");
        assert_eq!(fmt_p(f64::NAN, 99), MISSING);
        assert_eq!(fmt_num(18.281987915), "18.2820");
        assert_eq!(fmt_num(0.000123456), "0.000123456");
        assert_eq!(csv_num(f64::NAN), "");
    }
}
