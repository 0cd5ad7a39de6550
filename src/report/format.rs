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
    writeln!(out, "{table}")
}
