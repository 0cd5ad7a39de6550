//! Importing CSV files into the store: validate everything, then write it all
//! in one transaction, as one batch.
//!
//! Six kinds of file are read ([`ImportKind`]); their columns are listed in
//! `docs/data-model.md`. Each import runs in three steps:
//!
//! 1. **parse** (pure, no store): every kind reads its file through one
//!    prologue, `parse_rows` (the text through `Sheet` (`store::sheet`), the
//!    header mapped to the kind's columns; `Sheet` also applies the one rule
//!    for text to every field: trimmed, Unicode NFC, no control, zero-width or
//!    bidirectional characters, a length limit), and each field is checked for its
//!    own form (dates, numbers, ranges), every problem becoming a
//!    [`RowIssue`](super::RowIssue) with line, column and what was expected;
//!    keys listed twice are found with `Unique`;
//! 2. **resolve** (reads the store inside the write transaction): names are
//!    looked up, duplicates found, missing sites and taxa created on request;
//! 3. **write**, only when no problem was found: an `import_batch` row, then
//!    every row, with prepared statements reused per row. The two kinds holding
//!    counts (counts, records) share their checks and writes of counts
//!    (`sampling::finish_counts`).
//!
//! Any problem rolls the transaction back, so a failed import writes nothing.
//! This module owns the rules; the SQL for each kind is in its submodule.

use std::collections::HashMap;
use std::path::Path;

use rusqlite::{Transaction, TransactionBehavior, params};
use serde::Serialize;
use sha2::{Digest, Sha256};

use super::sheet::{FieldKind, Issues, Sheet, shorten};
use super::{Result, Store, StoreError};

pub use super::sheet::{MAX_NAME_CHARS, MAX_NOTES_CHARS, MAX_QUOTED_CHARS};

mod attributes;
mod records;
pub(crate) mod reference;
mod sampling;

/// How many problems an [`StoreError::Invalid`] carries (the total is counted).
pub const MAX_REPORTED_ISSUES: usize = 20;

/// What an input file holds.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum ImportKind {
    /// `code,name,latitude,longitude` plus attribute columns.
    Sites,
    /// `code,description,effort_unit`.
    Protocols,
    /// `name,rank,parent,accepted`.
    Taxa,
    /// `code,site,date,protocol,effort` plus optional `time,replicate,notes`.
    Events,
    /// `event,taxon,count`.
    Counts,
    /// The field-sheet long format `site,date,protocol,effort,taxon,count`
    /// plus optional `replicate,time`.
    Records,
    /// `site,key,value,from`: site attribute values and the date from which
    /// each holds (empty: since always).
    Attributes,
    /// A Darwin Core archive of sampling events (a zip file, not a CSV file;
    /// read by `crate::dwca` and written by [`crate::store::exchange`]).
    Dwca,
}

impl ImportKind {
    /// Every kind of CSV file, in the order files are usually imported.
    pub const ALL: [ImportKind; 7] = [
        ImportKind::Sites,
        ImportKind::Protocols,
        ImportKind::Taxa,
        ImportKind::Events,
        ImportKind::Counts,
        ImportKind::Records,
        ImportKind::Attributes,
    ];

    /// The kind's name as stored in `import_batch.kind` and typed on the command line.
    pub fn as_str(self) -> &'static str {
        match self {
            ImportKind::Sites => "sites",
            ImportKind::Protocols => "protocols",
            ImportKind::Taxa => "taxa",
            ImportKind::Events => "events",
            ImportKind::Counts => "counts",
            ImportKind::Records => "records",
            ImportKind::Attributes => "attributes",
            ImportKind::Dwca => "dwca",
        }
    }

    /// The kind named `s`, if any.
    pub fn from_name(s: &str) -> Option<ImportKind> {
        ImportKind::ALL
            .into_iter()
            .chain([ImportKind::Dwca])
            .find(|k| k.as_str() == s)
    }

    /// Columns the header must name.
    pub fn required_columns(self) -> &'static [&'static str] {
        match self {
            ImportKind::Sites => &["code", "name", "latitude", "longitude"],
            ImportKind::Protocols => &["code", "description", "effort_unit"],
            ImportKind::Taxa => &["name", "rank", "parent", "accepted"],
            ImportKind::Events => &["code", "site", "date", "protocol", "effort"],
            ImportKind::Counts => &["event", "taxon", "count"],
            ImportKind::Records => &["site", "date", "protocol", "effort", "taxon", "count"],
            ImportKind::Attributes => &["site", "key", "value", "from"],
            ImportKind::Dwca => &[],
        }
    }

    /// Columns the header may name as well.
    pub fn optional_columns(self) -> &'static [&'static str] {
        match self {
            ImportKind::Events => &["time", "replicate", "notes"],
            ImportKind::Records => &["replicate", "time"],
            ImportKind::Taxa => &["code"],
            _ => &[],
        }
    }
}

impl std::fmt::Display for ImportKind {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

/// Choices for one import.
#[derive(Debug, Clone, Default)]
pub struct ImportOptions {
    /// Create sites and taxa that the file names but the store lacks (each
    /// creation is reported). Protocols are never created this way: they need
    /// an effort unit.
    pub create_missing: bool,
    /// Overwrite counts of an (event, taxon) already stored instead of refusing.
    pub replace: bool,
    /// A cumulative file: rows identical to stored ones are skipped, a row
    /// contradicting a stored one is refused, and a file that adds nothing
    /// records no batch (see [`ImportReport::batch_id`]).
    pub skip_existing: bool,
    /// The delimiter; detected from the header line (comma, semicolon, tab) when `None`.
    pub delimiter: Option<u8>,
}

/// What an import wrote.
#[derive(Debug, Clone, Serialize)]
pub struct ImportReport {
    /// The batch the rows belong to; `None` when a cumulative import
    /// (`skip_existing`) found nothing new, so no batch was recorded.
    pub batch_id: Option<i64>,
    /// The kind of file.
    pub kind: ImportKind,
    /// The file name as given.
    pub file: String,
    /// Data rows in the file.
    pub rows: usize,
    /// Things created on the way because of `create_missing`, e.g. `"site S19"`,
    /// `"taxon Baetis"` (events formed from a records file are counted in `written`).
    pub created: Vec<String>,
    /// Sites, protocols, taxa or events written (new rows of the file's own kind,
    /// or events formed from a records file).
    pub written: usize,
    /// Count rows written (counts and records files).
    pub counts: usize,
    /// Of `counts`, those written on events stored before this import (a
    /// cumulative file adding taxa to a stored event).
    pub counts_on_stored_events: usize,
    /// Stored counts overwritten because of `replace`.
    pub replaced: usize,
    /// Rows identical to what is already stored, left as they were.
    pub unchanged: usize,
    /// Field codes written (taxa files; docs/taxonomy.md, "Field codes").
    pub codes: usize,
}

impl ImportReport {
    /// True when the import would write nothing but its batch row: no row of
    /// the file's kind, no count, nothing created or overwritten.
    pub fn adds_nothing(&self) -> bool {
        self.written == 0
            && self.counts == 0
            && self.codes == 0
            && self.created.is_empty()
            && self.replaced == 0
    }

    /// The batch of a report made by `BatchMeta::insert`, for the writes that follow it.
    pub(crate) fn batch(&self) -> i64 {
        self.batch_id
            .expect("invariant: BatchMeta::insert sets the batch; only import_once clears it, after every write")
    }
}

/// The largest file [`import_path`] reads: 2 GiB. A file is read whole into
/// memory (and parsed into rows beside it), so a larger one is refused before
/// reading, with the advice to split it.
pub const MAX_FILE_BYTES: u64 = 2 << 30;

/// The message for a file larger than [`MAX_FILE_BYTES`].
fn too_big(file: &str, size: u64) -> String {
    format!(
        "{file} is {size} bytes, more than the {MAX_FILE_BYTES} bytes (2 GiB) an import reads; \
         split it into smaller files (each with the header line) and import them one by one"
    )
}

/// Import the file at `path`.
///
/// # Errors
/// [`StoreError::Io`] when the file cannot be read; [`StoreError::Refused`]
/// when it is larger than [`MAX_FILE_BYTES`] (found from its metadata, before
/// reading); otherwise as [`import_bytes`].
pub fn import_path(
    store: &mut Store,
    kind: ImportKind,
    path: &Path,
    opts: &ImportOptions,
) -> Result<ImportReport> {
    use std::io::Read;
    let file = path.display().to_string();
    let io = |source| StoreError::Io {
        file: file.clone(),
        source,
    };
    let f = std::fs::File::open(path).map_err(io)?;
    let size = f.metadata().map_err(io)?.len();
    if size > MAX_FILE_BYTES {
        return Err(StoreError::Refused(too_big(&file, size)));
    }
    // The file may grow while it is read: read at most one byte past the limit.
    let mut bytes = Vec::with_capacity(usize::try_from(size).unwrap_or(0));
    f.take(MAX_FILE_BYTES + 1)
        .read_to_end(&mut bytes)
        .map_err(io)?;
    if bytes.len() as u64 > MAX_FILE_BYTES {
        return Err(StoreError::Refused(too_big(&file, bytes.len() as u64)));
    }
    import_bytes(store, kind, &file, &bytes, opts)
}

/// Import `bytes`, the content of a file called `file_name`, as one batch.
///
/// # Errors
/// [`StoreError::Invalid`] with the first [`MAX_REPORTED_ISSUES`] problems and
/// their total when anything is wrong; nothing is written then. SQLite errors.
pub fn import_bytes(
    store: &mut Store,
    kind: ImportKind,
    file_name: &str,
    bytes: &[u8],
    opts: &ImportOptions,
) -> Result<ImportReport> {
    if kind == ImportKind::Dwca {
        return Err(StoreError::Refused(
            "a Darwin Core archive is a zip file, not a CSV file: use `tally import dwca FILE.zip`"
                .into(),
        ));
    }
    let meta = BatchMeta {
        kind,
        file: file_name.to_string(),
        sha256: hex(&Sha256::digest(bytes)),
        imported_at: chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
    };
    // The file is parsed and checked before the store is touched, inside a
    // deferred transaction: the write lock is taken only by the first write,
    // so another writer is not kept waiting while a large file is read. When
    // another writer committed in between (SQLite then refuses the upgrade of
    // the read snapshot, SQLITE_BUSY_SNAPSHOT), the import runs once more
    // holding the lock from the start, so what it checked is what it writes.
    let mut attempt = 0;
    loop {
        let behavior = if attempt == 0 {
            TransactionBehavior::Deferred
        } else {
            TransactionBehavior::Immediate
        };
        match import_once(store, kind, file_name, bytes, opts, &meta, behavior) {
            Err(StoreError::Sqlite(e))
                if attempt == 0
                    && e.sqlite_error_code() == Some(rusqlite::ErrorCode::DatabaseBusy) =>
            {
                attempt += 1;
            }
            other => return other,
        }
    }
}

/// One try of [`import_bytes`] in a transaction of `behavior`.
fn import_once(
    store: &mut Store,
    kind: ImportKind,
    file_name: &str,
    bytes: &[u8],
    opts: &ImportOptions,
    meta: &BatchMeta,
    behavior: TransactionBehavior,
) -> Result<ImportReport> {
    let mut issues = Issues::default();
    let tx = store.conn_mut().transaction_with_behavior(behavior)?;
    let report = match kind {
        ImportKind::Sites => reference::import_sites(&tx, meta, bytes, opts, &mut issues)?,
        ImportKind::Protocols => reference::import_protocols(&tx, meta, bytes, opts, &mut issues)?,
        ImportKind::Taxa => reference::import_taxa(&tx, meta, bytes, opts, &mut issues)?,
        ImportKind::Events => sampling::import_events(&tx, meta, bytes, opts, &mut issues)?,
        ImportKind::Counts => sampling::import_counts(&tx, meta, bytes, opts, &mut issues)?,
        ImportKind::Records => records::import_records(&tx, meta, bytes, opts, &mut issues)?,
        ImportKind::Attributes => {
            attributes::import_attributes(&tx, meta, bytes, opts, &mut issues)?
        }
        ImportKind::Dwca => {
            return Err(StoreError::Refused(
                "a Darwin Core archive is read by `tally import dwca`".into(),
            ));
        }
    };
    // A cumulative file that adds nothing leaves no batch behind: the batch row
    // written with the report is rolled back with the transaction.
    if let Some(r) = report.as_ref()
        && opts.skip_existing
        && issues.is_empty()
        && r.adds_nothing()
    {
        drop(tx);
        return Ok(ImportReport {
            batch_id: None,
            ..r.clone()
        });
    }
    commit_or_refuse(tx, report, issues, file_name)
}

/// The end of every import: commit when a report was made and no problem was
/// found; otherwise roll back (dropping the transaction) and refuse with the
/// first [`MAX_REPORTED_ISSUES`] problems and their total.
///
/// # Errors
/// [`StoreError::Invalid`]; SQLite errors of the commit.
pub(crate) fn commit_or_refuse<T>(
    tx: Transaction<'_>,
    report: Option<T>,
    issues: Issues,
    file_name: &str,
) -> Result<T> {
    match report {
        Some(r) if issues.is_empty() => {
            tx.commit()?;
            Ok(r)
        }
        _ => {
            drop(tx);
            let (issues, total) = issues.first(MAX_REPORTED_ISSUES);
            Err(StoreError::Invalid {
                file: file_name.to_string(),
                issues,
                total,
            })
        }
    }
}

/// Facts about the file that go into its `import_batch` row.
pub(crate) struct BatchMeta {
    pub(crate) kind: ImportKind,
    pub(crate) file: String,
    pub(crate) sha256: String,
    pub(crate) imported_at: String,
}

/// A stored count overwritten by a `replace` import, kept in the batch's JSON so
/// that undoing the batch can put it back.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub(crate) struct Replaced {
    /// Event id.
    pub event: i64,
    /// Taxon id.
    pub taxon: i64,
    /// The value before.
    pub value: f64,
    /// The batch the value came from.
    pub batch: Option<i64>,
}

/// The JSON kept in `import_batch.created`.
#[derive(Debug, Default, Serialize, serde::Deserialize)]
pub(crate) struct BatchNotes {
    /// Things created on the way (`"site S19"`).
    #[serde(default)]
    pub created: Vec<String>,
    /// Counts of earlier batches this batch overwrote.
    #[serde(default)]
    pub replaced: Vec<Replaced>,
}

impl BatchMeta {
    /// Write the batch row and return its id and the report skeleton.
    pub(crate) fn insert(
        &self,
        tx: &Transaction<'_>,
        rows: usize,
        created: Vec<String>,
        replaced: Vec<Replaced>,
    ) -> Result<ImportReport> {
        let notes = BatchNotes { created, replaced };
        let json = serde_json::to_string(&notes).map_err(|e| StoreError::Refused(e.to_string()))?;
        tx.execute(
            "INSERT INTO import_batch(kind, file, content_sha256, imported_at, rows, created) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
            params![
                self.kind.as_str(),
                self.file,
                self.sha256,
                self.imported_at,
                rows as i64,
                json
            ],
        )?;
        Ok(ImportReport {
            batch_id: Some(tx.last_insert_rowid()),
            kind: self.kind,
            file: self.file.clone(),
            rows,
            replaced: notes.replaced.len(),
            created: notes.created,
            written: 0,
            counts: 0,
            counts_on_stored_events: 0,
            unchanged: 0,
            codes: 0,
        })
    }
}

pub(crate) fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// Where each known column sits in a row, from the header.
pub(crate) struct Columns {
    index: Vec<(&'static str, usize)>,
    /// Columns not named by the format (kept for sites, errors otherwise): (index, name).
    pub extra: Vec<(usize, String)>,
}

/// A known column of a kind: its name (as problems name it) and its position
/// in the header (`None` for an optional column the file lacks).
#[derive(Debug, Clone, Copy)]
pub(crate) struct Col {
    name: &'static str,
    idx: Option<usize>,
}

impl Columns {
    /// Map the header of `sheet` for `kind`; missing required columns (and, unless
    /// `allow_extra`, unknown ones) become issues on line 1. `None` when a required
    /// column is missing.
    fn map(
        sheet: &Sheet<'_>,
        kind: ImportKind,
        allow_extra: bool,
        issues: &mut Issues,
    ) -> Option<Columns> {
        let required = kind.required_columns();
        let optional = kind.optional_columns();
        let mut index = Vec::new();
        let mut extra = Vec::new();
        for (i, name) in sheet.header.iter().enumerate() {
            let lower = name.to_ascii_lowercase();
            match required.iter().chain(optional).find(|c| **c == lower) {
                Some(c) => index.push((*c, i)),
                None if allow_extra => extra.push((i, name.clone())),
                None => issues.push(
                    1,
                    &shorten(name),
                    format!(
                        "unknown column for a {kind} file; expected {}{}",
                        required.join(","),
                        if optional.is_empty() {
                            String::new()
                        } else {
                            format!(" (optional: {})", optional.join(","))
                        }
                    ),
                ),
            }
        }
        let mut complete = true;
        for c in required {
            if !index.iter().any(|(n, _)| n == c) {
                complete = false;
                let hint = if sheet.header.len() == 1 {
                    format!(
                        " (the header has a single column; is the delimiter {} right?)",
                        super::sheet::delimiter_name(sheet.delimiter)
                    )
                } else {
                    String::new()
                };
                issues.push(
                    1,
                    c,
                    format!(
                        "missing column; a {kind} file needs {}{hint}",
                        required.join(",")
                    ),
                );
            }
        }
        complete.then_some(Columns { index, extra })
    }

    /// The column `name` of the file's kind (a name the format lists).
    pub fn col(&self, name: &'static str) -> Col {
        Col {
            name,
            idx: self.index.iter().find(|(n, _)| *n == name).map(|(_, i)| *i),
        }
    }
}

/// One data row being read: its line and fields, and the file's problems, so
/// that a problem of a field is recorded with its line and column in one call.
pub(crate) struct Row<'r> {
    /// The line of the row in the file.
    pub line: u64,
    rec: &'r csv::StringRecord,
    issues: &'r mut Issues,
}

impl<'r> Row<'r> {
    /// The field of column `c`, spaces trimmed ("" when the file lacks the column).
    pub fn get(&self, c: Col) -> &'r str {
        self.at(c.idx)
    }

    /// The field at header position `idx`, spaces trimmed ("" when absent).
    pub fn at(&self, idx: Option<usize>) -> &'r str {
        idx.and_then(|i| self.rec.get(i)).map_or("", str::trim)
    }

    /// Record a problem of this row in `column`.
    pub fn issue(&mut self, column: &str, message: impl Into<String>) {
        self.issues.push(self.line, column, message);
    }

    /// The field of `c` read by `parse`; `None` when it fails, its message
    /// recorded as a problem of `c`.
    pub fn parse<T>(
        &mut self,
        c: Col,
        parse: impl FnOnce(&str) -> std::result::Result<T, String>,
    ) -> Option<T> {
        match parse(self.get(c)) {
            Ok(v) => Some(v),
            Err(m) => {
                self.issue(c.name, m);
                None
            }
        }
    }

    /// The field of `c`; `None` when it is empty, with the problem `message`.
    pub fn required(&mut self, c: Col, message: &'static str) -> Option<&'r str> {
        let v = self.get(c);
        if v.is_empty() {
            self.issue(c.name, message);
            None
        } else {
            Some(v)
        }
    }
}

/// The prologue every kind shares: open `bytes` as a file of `kind`, map its
/// header (sites keep unknown columns as attributes; other kinds refuse them),
/// let `columns` pick the columns it reads, and feed every readable data row to
/// `row` with them. Problems of the text, the header and the rows go to
/// `issues` with their line and column. Returns the number of data rows seen
/// (0 when the header cannot be used).
pub(crate) fn parse_rows<C>(
    bytes: &[u8],
    delimiter: Option<u8>,
    kind: ImportKind,
    issues: &mut Issues,
    columns: impl FnOnce(&Columns) -> C,
    mut row: impl FnMut(&C, &mut Row<'_>),
) -> usize {
    let Some(mut sheet) = Sheet::open(bytes, delimiter, issues) else {
        return 0;
    };
    let Some(cols) = Columns::map(&sheet, kind, kind == ImportKind::Sites, issues) else {
        return 0;
    };
    if let Some(i) = cols.col("notes").idx {
        sheet.set_kind(i, FieldKind::Notes);
    }
    let cols = columns(&cols);
    sheet.rows(issues, |line, rec, issues| {
        row(&cols, &mut Row { line, rec, issues });
    })
}

/// Keys named in one file with the first line naming each, to refuse a key
/// listed twice.
#[derive(Debug)]
pub(crate) struct Unique<K>(HashMap<K, u64>);

impl<K> Default for Unique<K> {
    fn default() -> Self {
        Unique(HashMap::new())
    }
}

impl<K: std::hash::Hash + Eq> Unique<K> {
    /// `None` the first time `key` is named (on `line`, which is kept); the
    /// first line naming it after that.
    pub fn first(&mut self, key: K, line: u64) -> Option<u64> {
        match self.0.entry(key) {
            std::collections::hash_map::Entry::Occupied(e) => Some(*e.get()),
            std::collections::hash_map::Entry::Vacant(e) => {
                e.insert(line);
                None
            }
        }
    }
}

impl Unique<String> {
    /// True the first time `key` is named; after that false, with the problem
    /// "WHAT 'KEY' is listed twice (first on line N)" in `column`.
    pub fn once(&mut self, row: &mut Row<'_>, column: &str, what: &str, key: &str) -> bool {
        match self.0.get(key) {
            Some(first) => {
                row.issue(
                    column,
                    format!(
                        "{what} '{}' is listed twice (first on line {first})",
                        shorten(key)
                    ),
                );
                false
            }
            None => {
                self.0.insert(key.to_string(), row.line);
                true
            }
        }
    }
}

/// A calendar date checked to exist, packed as `yyyymmdd`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub(crate) struct IsoDate(u32);

impl IsoDate {
    /// The `YYYY-MM-DD` text.
    pub fn text(self) -> String {
        format!(
            "{:04}-{:02}-{:02}",
            self.0 / 10_000,
            self.0 / 100 % 100,
            self.0 % 100
        )
    }
}

/// A strict ISO 8601 calendar date `YYYY-MM-DD` that exists.
pub(crate) fn parse_date(s: &str) -> std::result::Result<IsoDate, String> {
    let b = s.as_bytes();
    let digits = |r: std::ops::Range<usize>| b[r].iter().all(u8::is_ascii_digit);
    if s.is_empty() {
        return Err("empty; expected a date YYYY-MM-DD".into());
    }
    let shown = shorten(s);
    if b.len() != 10
        || b[4] != b'-'
        || b[7] != b'-'
        || !digits(0..4)
        || !digits(5..7)
        || !digits(8..10)
    {
        return Err(format!(
            "'{shown}' is not a date; expected YYYY-MM-DD (ISO 8601, e.g. 2016-04-21)"
        ));
    }
    let num =
        |r: std::ops::Range<usize>| b[r].iter().fold(0u32, |a, d| a * 10 + u32::from(d - b'0'));
    let (y, m, d) = (num(0..4), num(5..7), num(8..10));
    if !(1..=12).contains(&m) {
        return Err(format!("'{shown}' has month {m}; months run 01 to 12"));
    }
    if chrono::NaiveDate::from_ymd_opt(y as i32, m, d).is_none() {
        return Err(format!(
            "'{shown}' does not exist (day {d} is past the end of the month)"
        ));
    }
    Ok(IsoDate(y * 10_000 + m * 100 + d))
}

/// An optional time of day `HH:MM` or `HH:MM:SS`, returned as written.
pub(crate) fn parse_time(s: &str) -> std::result::Result<Option<String>, String> {
    if s.is_empty() {
        return Ok(None);
    }
    let parts: Vec<&str> = s.split(':').collect();
    let ok = (parts.len() == 2 || parts.len() == 3)
        && parts
            .iter()
            .all(|p| p.len() == 2 && p.bytes().all(|c| c.is_ascii_digit()))
        && parts[0].parse::<u32>().is_ok_and(|h| h < 24)
        && parts[1..]
            .iter()
            .all(|p| p.parse::<u32>().is_ok_and(|v| v < 60));
    if ok {
        Ok(Some(s.to_string()))
    } else {
        Err(format!(
            "'{}' is not a time of day; expected HH:MM or HH:MM:SS (24-hour)",
            shorten(s)
        ))
    }
}

/// The largest value the schema accepts for effort (and counts, which the
/// importer limits further: [`MAX_EXACT_COUNT`], [`MAX_COUNT`]).
const MAX_VALUE: f64 = 1.0e300;

/// The smallest sampling effort accepted, in the protocol's unit: 1e-9. Effort
/// divides counts, so an absurdly small (or subnormal) effort turns any count
/// into a huge density; a real effort that small belongs under a protocol with
/// a smaller unit.
pub const MIN_EFFORT: f64 = 1e-9;

/// The largest whole count: 2^53 = 9007199254740992. Every whole number up to
/// it is exactly an IEEE 754 binary64 value; above it some are not (2^53 + 1
/// is not), so a count there could be stored as another number.
pub const MAX_EXACT_COUNT: u64 = 1 << 53;

/// The largest count with a fractional part (a density, a cover value): 1e15,
/// below 2^53 so that such a count keeps at least two binary digits after the
/// point.
pub const MAX_COUNT: f64 = 1e15;

/// The range of counts, as the messages state it.
const COUNT_RANGE: &str = "a count is a whole number up to 9007199254740992 (2^53) \
                           or a number with a fraction up to 1e15";

fn parse_number(s: &str, what: &str) -> std::result::Result<f64, String> {
    if s.is_empty() {
        return Err(format!("empty; expected {what}"));
    }
    let shown = shorten(s);
    let unsigned = s.strip_prefix(['+', '-']).unwrap_or(s);
    if ["nan", "inf", "infinity"]
        .iter()
        .any(|w| unsigned.eq_ignore_ascii_case(w))
    {
        return Err(format!("'{shown}' is not a finite number; expected {what}"));
    }
    let plain = s
        .bytes()
        .all(|c| c.is_ascii_digit() || matches!(c, b'.' | b'-' | b'+' | b'e' | b'E'));
    match s.parse::<f64>() {
        Ok(v) if plain && v.is_finite() => Ok(v),
        Ok(_) if plain => Err(format!("'{shown}' is too large; expected {what}")),
        _ if s.contains(',') && s.replace(',', ".").parse::<f64>().is_ok() => Err(format!(
            "'{shown}' is not a number (use '.' as the decimal point); expected {what}"
        )),
        _ => Err(format!("'{shown}' is not a number; expected {what}")),
    }
}

/// The exact value a plain decimal (as [`parse_number`] accepts it: digits, at
/// most one point, an optional exponent) is written with.
#[derive(Debug, PartialEq, Eq)]
enum Written {
    /// A whole number, `None` when it is beyond `u128`.
    Whole(Option<u128>),
    /// A number with a nonzero fractional part.
    Fraction,
}

fn written_value(s: &str) -> Written {
    let s = s.trim_start_matches(['+', '-']);
    let (mantissa, exp) = s.split_once(['e', 'E']).unwrap_or((s, "0"));
    let exp: i64 = exp.parse().unwrap_or(if exp.starts_with('-') {
        i64::MIN / 2
    } else {
        i64::MAX / 2
    });
    let (int, frac) = mantissa.split_once('.').unwrap_or((mantissa, ""));
    let digits: Vec<u8> = int.bytes().chain(frac.bytes()).collect();
    if !digits.iter().all(u8::is_ascii_digit) {
        return Written::Fraction;
    }
    // Digits from `point` on are after the decimal point.
    let point = (int.len() as i64).saturating_add(exp);
    let n = digits.len() as i64;
    let split = point.clamp(0, n) as usize;
    if digits[split..].iter().any(|&d| d != b'0') {
        return Written::Fraction;
    }
    let mut value = Some(0u128);
    for &d in &digits[..split] {
        value = value.and_then(|v| v.checked_mul(10)?.checked_add(u128::from(d - b'0')));
    }
    // Zeros the exponent appends (none matter when the value is 0).
    let mut zeros = point.saturating_sub(n).max(0);
    while zeros > 0 && value.is_some_and(|v| v != 0) {
        value = value.and_then(|v| v.checked_mul(10));
        zeros -= 1;
    }
    Written::Whole(value)
}

/// A count: a whole number from 0 to [`MAX_EXACT_COUNT`] (2^53), stored
/// exactly, or a finite number ≥ 0 with a fraction up to [`MAX_COUNT`]
/// (1e15). A whole number above 2^53 is refused rather than rounded, however
/// it is written (`9007199254740993`, `9.007199254740993e15`).
pub(crate) fn parse_count(s: &str) -> std::result::Result<f64, String> {
    const WHAT: &str = "a count ≥ 0";
    let v = parse_number(s, WHAT)?;
    let shown = shorten(s);
    if v < 0.0 {
        return Err(format!("'{shown}' is negative; counts must be ≥ 0"));
    }
    if v <= MAX_COUNT {
        // Whole numbers here are below 2^53, so exact; `+ 0.0` turns -0 into 0.
        return Ok(v + 0.0);
    }
    // Near and above 2^53 the parsed value may be a rounding of what is
    // written (9007199254740993 parses to 2^53): decide on the text.
    match written_value(s) {
        Written::Whole(Some(n)) if n <= u128::from(MAX_EXACT_COUNT) => Ok(n as f64),
        Written::Whole(Some(n)) if (n as f64) as u128 != n => Err(format!(
            "'{shown}' cannot be stored exactly (counts above 2^53 lose digits); {COUNT_RANGE}"
        )),
        Written::Whole(_) => Err(format!("'{shown}' is too large; {COUNT_RANGE}")),
        Written::Fraction => Err(format!(
            "'{shown}' is too large for a count with a fraction; {COUNT_RANGE}"
        )),
    }
}

/// Sampling effort: finite, at least [`MIN_EFFORT`], at most 1e300.
pub(crate) fn parse_effort(s: &str) -> std::result::Result<f64, String> {
    const WHAT: &str = "the sampling effort, a number > 0 in the protocol's unit";
    let v = parse_number(s, WHAT)?;
    let shown = shorten(s);
    if v <= 0.0 {
        Err(format!("'{shown}' is not positive; effort must be > 0"))
    } else if v < MIN_EFFORT {
        Err(format!(
            "'{shown}' is below the smallest effort, {MIN_EFFORT:e} in the protocol's unit; \
             is it a typing error? (a real effort this small needs a protocol with a smaller unit)"
        ))
    } else if v > MAX_VALUE {
        Err(format!("'{shown}' is too large; expected {WHAT}"))
    } else {
        Ok(v)
    }
}

/// An optional coordinate in decimal degrees within ±`limit`.
pub(crate) fn parse_coordinate(
    s: &str,
    name: &str,
    limit: f64,
) -> std::result::Result<Option<f64>, String> {
    if s.is_empty() {
        return Ok(None);
    }
    let what = format!("{name} in decimal degrees between -{limit} and {limit} (or empty)");
    let v = parse_number(s, &what)?;
    if v.abs() > limit {
        Err(format!("'{}' is out of range; expected {what}", shorten(s)))
    } else {
        Ok(Some(v))
    }
}

/// A replicate number ≥ 1 (1 when empty).
pub(crate) fn parse_replicate(s: &str) -> std::result::Result<i64, String> {
    if s.is_empty() {
        return Ok(1);
    }
    match s.parse::<i64>() {
        Ok(v) if v >= 1 => Ok(v),
        _ => Err(format!(
            "'{}' is not a replicate number; expected a whole number ≥ 1 (or empty for 1)",
            shorten(s)
        )),
    }
}

/// Names mapped to small integers while parsing, so large files hold each name once.
#[derive(Debug, Default)]
pub(crate) struct Interner {
    map: HashMap<String, u32>,
    /// The index returned last (rows naming the same site or taxon often follow each other).
    last: Option<u32>,
    /// The names, by index.
    pub names: Vec<String>,
    /// The first line naming each.
    pub first_line: Vec<u64>,
    /// How many rows name each.
    pub uses: Vec<u64>,
}

impl Interner {
    /// The index of `s`, named on `line`, adding it when new.
    pub fn intern(&mut self, s: &str, line: u64) -> u32 {
        if let Some(i) = self.last.filter(|&i| self.names[i as usize] == s) {
            self.uses[i as usize] += 1;
            return i;
        }
        if let Some(&i) = self.map.get(s) {
            self.uses[i as usize] += 1;
            self.last = Some(i);
            return i;
        }
        let i = u32::try_from(self.names.len())
            .expect("invariant: fewer than 2^32 distinct names in one file");
        self.names.push(s.to_string());
        self.first_line.push(line);
        self.uses.push(1);
        self.map.insert(s.to_string(), i);
        self.last = Some(i);
        i
    }

    /// "" or " (and N more rows)" for messages about name `i`.
    pub fn more_rows(&self, i: u32) -> String {
        match self.uses[i as usize] {
            0 | 1 => String::new(),
            n => format!(" (and {} more row(s))", n - 1),
        }
    }
}

/// Ids of one table's rows by their natural key, with new rows numbered on.
pub(crate) struct Ids {
    map: HashMap<String, i64>,
    next: i64,
    /// Rows to create: (id, key, first line naming it).
    pub new: Vec<(i64, String)>,
}

/// The tables [`Ids`] can load.
#[derive(Clone, Copy)]
pub(crate) enum Table {
    Site,
    Protocol,
    Taxon,
}

impl Ids {
    /// Load every key of `table`.
    pub fn load(tx: &Transaction<'_>, table: Table) -> Result<Ids> {
        let sql = match table {
            Table::Site => "SELECT id, code FROM site",
            Table::Protocol => "SELECT id, code FROM protocol",
            Table::Taxon => "SELECT id, name FROM taxon",
        };
        let mut map = HashMap::new();
        let mut next = 1;
        let mut stmt = tx.prepare(sql)?;
        let mut rows = stmt.query([])?;
        while let Some(r) = rows.next()? {
            let id: i64 = r.get(0)?;
            map.insert(r.get(1)?, id);
            next = next.max(id + 1);
        }
        Ok(Ids {
            map,
            next,
            new: Vec::new(),
        })
    }

    /// A table with no rows and nothing to create.
    pub fn empty() -> Ids {
        Ids {
            map: HashMap::new(),
            next: 1,
            new: Vec::new(),
        }
    }

    /// The id of `key`, if stored or already created.
    pub fn get(&self, key: &str) -> Option<i64> {
        self.map.get(key).copied()
    }

    /// True when `key` was created by this import.
    pub fn is_new(&self, id: i64) -> bool {
        self.new.first().is_some_and(|(first, _)| id >= *first)
    }

    /// The id of `key`, created (and returned with `true`) when absent.
    pub fn get_or_create(&mut self, key: &str) -> (i64, bool) {
        if let Some(id) = self.get(key) {
            return (id, false);
        }
        let id = self.next;
        self.next += 1;
        self.map.insert(key.to_string(), id);
        self.new.push((id, key.to_string()));
        (id, true)
    }
}

#[cfg(test)]
mod tests;
