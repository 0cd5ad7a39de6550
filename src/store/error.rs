//! Errors raised by the store: SQLite, migrations, files that are not stores,
//! and import problems collected row by row.
use std::path::PathBuf;

/// One problem found while validating an input file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RowIssue {
    /// The file inside an archive the problem is in (`occurrence.txt`); empty
    /// for a plain file.
    pub part: String,
    /// 1-based line number in the file (the header is line 1); 0 when the whole file is at fault.
    pub line: u64,
    /// Column name, or empty when the problem concerns the whole row or file.
    pub column: String,
    /// What was wrong and what was expected.
    pub message: String,
}

impl std::fmt::Display for RowIssue {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        if !self.part.is_empty() {
            return match (self.line, self.column.is_empty()) {
                (0, true) => write!(f, "{}: {}", self.part, self.message),
                (0, false) => write!(f, "{}, term {}: {}", self.part, self.column, self.message),
                (l, true) => write!(f, "{} line {l}: {}", self.part, self.message),
                (l, false) => write!(
                    f,
                    "{} line {l}, term {}: {}",
                    self.part, self.column, self.message
                ),
            };
        }
        match (self.line, self.column.is_empty()) {
            (0, _) => write!(f, "{}", self.message),
            (l, true) => write!(f, "line {l}: {}", self.message),
            (l, false) => write!(f, "line {l}, column {}: {}", self.column, self.message),
        }
    }
}

/// Errors of the store layer.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum StoreError {
    /// An SQLite error.
    #[error(transparent)]
    Sqlite(#[from] rusqlite::Error),
    /// A migration failed.
    #[error("migrating the store: {0}")]
    Migration(#[from] refinery::Error),
    /// The store file does not exist.
    #[error("no store at {0} (create one with `tally init`)")]
    Missing(PathBuf),
    /// The file exists but is not a tally store; the text says what it is
    /// instead ("an empty file", "not an SQLite file (starts with …)", "an
    /// SQLite database of some other program (application id 0x0, tables: …)").
    #[error("{0} is not a tally store: {1}")]
    NotAStore(PathBuf, String),
    /// The file is a tally store (or an SQLite file) shorter than its header
    /// says; the text says by how much.
    #[error("{0} is {1}; restore from a backup")]
    Truncated(PathBuf, String),
    /// SQLite found the store file damaged (`SQLITE_CORRUPT`, `SQLITE_NOTADB`)
    /// while opening or reading it; the text is SQLite's message.
    #[error(
        "the store file is damaged (SQLite: {0}); restore the latest backup \
         (`tally backup` makes one) — nothing in it can be trusted"
    )]
    Damaged(String),
    /// `init` was asked to create a store where a file already exists.
    #[error("{0} already exists")]
    Exists(PathBuf),
    /// An input file failed validation; nothing was written.
    #[error("{file}: {} problem(s); nothing was imported\n{}", .total, format_issues(.issues, *.total))]
    Invalid {
        /// The file name as given.
        file: String,
        /// The first problems (at most 20).
        issues: Vec<RowIssue>,
        /// How many problems there were in all.
        total: usize,
    },
    /// A named thing was not found.
    #[error("{what} '{name}' not found")]
    NotFound {
        /// What kind of thing (batch, selection, run, taxon...).
        what: &'static str,
        /// Its name or id.
        name: String,
    },
    /// An operation was refused, with the reason.
    #[error("{0}")]
    Refused(String),
    /// A selection matched no event; names the filter after which none was left.
    #[error(
        "the selection is empty: no events left after {filter} ({matched_before} event(s) matched before it)"
    )]
    EmptySelection {
        /// The flag as written (`--site-where reach=lower`).
        filter: String,
        /// Events matching the filters before this one (all events for the first filter).
        matched_before: usize,
    },
    /// I/O on an input file.
    #[error("cannot read {file}")]
    Io {
        /// The file name.
        file: String,
        /// The underlying error.
        #[source]
        source: std::io::Error,
    },
}

fn format_issues(issues: &[RowIssue], total: usize) -> String {
    let mut s = issues
        .iter()
        .map(|i| format!("  {i}"))
        .collect::<Vec<_>>()
        .join("\n");
    if total > issues.len() {
        s.push_str(&format!("\n  ... and {} more", total - issues.len()));
    }
    s
}

/// Result type of the store layer.
pub type Result<T> = std::result::Result<T, StoreError>;
