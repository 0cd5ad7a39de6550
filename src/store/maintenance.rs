//! Keeping a store sound: the check (the schema against the migrations,
//! SQLite's structure and CHECK constraints, foreign keys, the rules of the
//! taxonomy, the bookkeeping of import batches), the recognition of files that
//! are not sound tally stores before they are opened, and the online backup.

use std::collections::BTreeMap;
use std::io::Read;
use std::path::Path;

use rusqlite::{Connection, OptionalExtension};
use serde::Serialize;

use super::{APPLICATION_ID, Result, Store, StoreError};

/// How many lines of `PRAGMA integrity_check` a report lists; the rest are counted.
pub const LISTED_INTEGRITY_LINES: usize = 20;

/// The most errors SQLite is asked to find (the argument of `integrity_check(N)`;
/// its own default is 100). Reaching it means there may be more.
const INTEGRITY_LIMIT: usize = 1000;

/// The findings of [`Store::check`].
#[derive(Debug, Clone, Default, Serialize, PartialEq, Eq)]
pub struct CheckReport {
    /// True for the quick check ([`Store::check_with`]): `PRAGMA quick_check`,
    /// the schema and foreign keys only.
    pub quick: bool,
    /// Objects (tables, indexes, triggers, views) missing, extra or different
    /// from what the migrations make, one line each naming the object.
    pub schema: Vec<String>,
    /// The first [`LISTED_INTEGRITY_LINES`] lines of `PRAGMA integrity_check`
    /// (or `quick_check`) other than "ok": structure and CHECK constraints.
    pub integrity: Vec<String>,
    /// How many integrity lines there were in all (`integrity` holds the first).
    pub integrity_total: usize,
    /// True when SQLite stopped at [`INTEGRITY_LIMIT`] errors: there may be more.
    pub integrity_limited: bool,
    /// SQLite's message when reading the store failed because the file is
    /// damaged (`database disk image is malformed`); the checks after that
    /// point did not run.
    pub damaged: Option<String>,
    /// Rows violating a foreign key, as "table rowid N → parent".
    pub foreign_keys: Vec<String>,
    /// Problems of the taxonomy (loops, synonyms of synonyms, ranks out of
    /// order), one line each naming the chain (`store::taxa::integrity`).
    pub taxonomy: Vec<String>,
    /// Import batches whose rows disagree with their `import_batch` row.
    pub batches: Vec<String>,
    /// Observations that are not problems (a listed batch that holds no rows).
    pub notes: Vec<String>,
    /// Checks that could not run, with why ("taxonomy (no such table: taxon)").
    pub not_checked: Vec<String>,
}

impl CheckReport {
    /// True when nothing was found and every check ran.
    pub fn is_ok(&self) -> bool {
        self.problems() == 0 && self.not_checked.is_empty()
    }

    /// How many problems were found.
    pub fn problems(&self) -> usize {
        self.schema.len()
            + self.integrity_total
            + usize::from(self.damaged.is_some())
            + self.foreign_keys.len()
            + self.taxonomy.len()
            + self.batches.len()
    }
}

/// The message of a damaged store file: what it means and what to do.
pub fn damaged_message(sqlite: &str) -> String {
    StoreError::Damaged(sqlite.to_string()).to_string()
}

impl Store {
    /// The full check: [`Store::check_with`] with `quick` false.
    ///
    /// # Errors
    /// SQLite errors other than a damaged file (which is a finding).
    pub fn check(&self) -> Result<CheckReport> {
        self.check_with(false)
    }

    /// Compare the schema with a fresh in-memory store's, run `PRAGMA
    /// integrity_check` (`quick_check` when `quick`) and `PRAGMA
    /// foreign_key_check`; unless `quick`, then the taxonomy rules and the
    /// bookkeeping of import batches (when the structure is sound enough to
    /// read). A file SQLite finds damaged while checking is a finding
    /// ([`CheckReport::damaged`]), not an error.
    ///
    /// # Errors
    /// SQLite errors other than a damaged file.
    pub fn check_with(&self, quick: bool) -> Result<CheckReport> {
        let mut report = CheckReport {
            quick,
            ..CheckReport::default()
        };
        match self.run_checks(&mut report) {
            Ok(()) => Ok(report),
            Err(e) => match corrupt_message(&e) {
                Some(m) => {
                    report.damaged = Some(m);
                    Ok(report)
                }
                None => Err(e),
            },
        }
    }

    fn run_checks(&self, report: &mut CheckReport) -> Result<()> {
        report.schema = self.schema_differences()?;
        self.integrity(report)?;
        let mut stmt = self.conn().prepare("PRAGMA foreign_key_check")?;
        let mut rows = stmt.query([])?;
        while let Some(r) = rows.next()? {
            let table: String = r.get(0)?;
            let rowid: Option<i64> = r.get(1)?;
            let parent: String = r.get(2)?;
            let at = rowid.map_or_else(|| "a row".to_string(), |id| format!("rowid {id}"));
            report
                .foreign_keys
                .push(format!("{table} {at} → missing {parent}"));
        }
        if report.quick {
            return Ok(());
        }
        if report.integrity_total > 0 {
            let why = "the integrity check found problems";
            report.not_checked.push(format!("taxonomy ({why})"));
            report.not_checked.push(format!("batches ({why})"));
            return Ok(());
        }
        // A table the migrations make may be missing (the schema lines say
        // so); a check that cannot read it says so instead of failing.
        match self.taxonomy() {
            Ok(t) => report.taxonomy = t.problems().iter().map(ToString::to_string).collect(),
            Err(e) => not_checked(report, "taxonomy", e)?,
        }
        match self.codes_reading_like_names() {
            Ok(found) => report.taxonomy.extend(found),
            Err(e) => not_checked(report, "field codes", e)?,
        }
        if let Err(e) = self.batch_bookkeeping(report) {
            not_checked(report, "batches", e)?;
        }
        Ok(())
    }

    /// Field codes equal to a taxon name regardless of case, which the store
    /// never writes (docs/taxonomy.md, "Field codes") but SQL by hand can.
    fn codes_reading_like_names(&self) -> Result<Vec<String>> {
        let mut stmt = self.conn().prepare(
            "SELECT c.code, o.name, t.name FROM taxon_code c JOIN taxon o ON o.id = c.taxon_id \
             JOIN taxon t ON upper(t.name) = c.code ORDER BY c.code, t.name",
        )?;
        let rows = stmt
            .query_map([], |r| {
                let (code, owner, name): (String, String, String) =
                    (r.get(0)?, r.get(1)?, r.get(2)?);
                Ok(format!(
                    "field code {code} of {owner} reads like the taxon name {name}; \
                     remove the code (`tally taxa code '{owner}' {code} --remove`) or rename the taxon"
                ))
            })?
            .collect::<rusqlite::Result<Vec<_>>>()?;
        Ok(rows)
    }

    /// `PRAGMA integrity_check(N)` or `quick_check(N)` into `report`.
    fn integrity(&self, report: &mut CheckReport) -> Result<()> {
        let pragma = if report.quick {
            "quick_check"
        } else {
            "integrity_check"
        };
        let mut stmt = self
            .conn()
            .prepare(&format!("PRAGMA {pragma}({INTEGRITY_LIMIT})"))?;
        let mut lines = Vec::new();
        for row in stmt.query_map([], |r| r.get::<_, String>(0))? {
            // SQLite returns its findings in one or more rows, several lines
            // in a row, under a "*** in database main ***" heading.
            for line in row?.lines() {
                let line = line.trim();
                if !(line.is_empty() || line == "ok" || line.starts_with("*** in database")) {
                    lines.push(line.to_string());
                }
            }
        }
        report.integrity_total = lines.len();
        report.integrity_limited = lines.len() >= INTEGRITY_LIMIT;
        lines.truncate(LISTED_INTEGRITY_LINES);
        report.integrity = lines;
        Ok(())
    }

    /// The store's tables, indexes, triggers and views against those of a
    /// fresh in-memory store made by the same migrations: one line per object
    /// missing, extra or different.
    fn schema_differences(&self) -> Result<Vec<String>> {
        let fresh = Store::open_in_memory()?;
        let want = schema_objects(fresh.conn())?;
        let have = schema_objects(self.conn())?;
        let mut missing = Vec::new();
        let mut changed = Vec::new();
        let mut extra = Vec::new();
        for (key, w) in &want {
            match have.get(key) {
                None => missing.push(format!("{} {} is missing", key.1, key.2)),
                Some(h) if h != w => {
                    let from = match made_by(&key.1, &key.2) {
                        Some(v) => format!("migration V{v}"),
                        None => "the migrations".to_string(),
                    };
                    changed.push(format!("{} {} differs from {from}", key.1, key.2));
                }
                Some(_) => {}
            }
        }
        for key in have.keys() {
            if !want.contains_key(key) {
                extra.push(format!(
                    "{} {} is extra (no migration makes it)",
                    key.1, key.2
                ));
            }
        }
        missing.extend(changed);
        missing.extend(extra);
        Ok(missing)
    }

    /// Rows naming a batch that is not listed, and each listed batch's rows
    /// against what its `import_batch` row says it wrote. Only what imports
    /// guarantee is compared: a batch never holds more rows of a table than
    /// its file had rows plus what it created on the way (each row of a file
    /// writes at most one site, protocol, taxon, event or count, and `--replace`
    /// moves a count to the batch whose file held it); the sites and protocols
    /// it created stay with it (codes never change and only undoing the batch
    /// deletes them); the taxa it created stay with it (names may change, so
    /// they are counted). A batch holding nothing is a note, not a problem:
    /// rows identical to stored ones are not written again, and `--replace`
    /// moves counts to a later batch.
    fn batch_bookkeeping(&self, report: &mut CheckReport) -> Result<()> {
        for (table, one, many) in BATCH_TABLES {
            // Table names are the literals of BATCH_TABLES, never user text.
            let sql = format!(
                "SELECT import_batch_id, COUNT(*) FROM {table} WHERE import_batch_id IS NOT NULL \
                 AND import_batch_id NOT IN (SELECT id FROM import_batch) GROUP BY 1 ORDER BY 1"
            );
            let mut stmt = self.conn().prepare(&sql)?;
            let mut rows = stmt.query([])?;
            while let Some(r) = rows.next()? {
                let batch: i64 = r.get(0)?;
                let n: i64 = r.get(1)?;
                report.batches.push(format!(
                    "{} name batch {batch}, which is not in the list of batches",
                    crate::words::count(n, one, many)
                ));
            }
        }
        for b in self.batches()? {
            let label = format!("batch {} ({})", b.id, b.file);
            let mut created: BTreeMap<&str, Vec<&str>> = BTreeMap::new();
            for c in &b.created {
                if let Some((kind, key)) = c.split_once(' ') {
                    created.entry(kind).or_default().push(key);
                }
            }
            let of = |kind: &str| created.get(kind).map_or(0, Vec::len) as i64;
            let held = [
                ("site", "sites", b.stored.sites),
                ("protocol", "protocols", b.stored.protocols),
                ("taxon", "taxa", b.stored.taxa),
                ("event", "events", b.stored.events),
                ("count", "counts", b.stored.counts),
            ];
            for (one, many, n) in held {
                let bound = b.rows + of(one);
                if n > bound {
                    report.batches.push(format!(
                        "{label} holds {}, more than the {} its file had{}",
                        crate::words::count(n, one, many),
                        crate::words::count(b.rows, "row", "rows"),
                        if of(one) > 0 {
                            format!(
                                " plus the {} it created",
                                crate::words::count(of(one), one, many)
                            )
                        } else {
                            String::new()
                        }
                    ));
                }
            }
            for (kind, table, key_col) in
                [("site", "site", "code"), ("protocol", "protocol", "code")]
            {
                for key in created.get(kind).into_iter().flatten() {
                    // Table and column names are the literals above.
                    let owner: Option<Option<i64>> = self
                        .conn()
                        .query_row(
                            &format!("SELECT import_batch_id FROM {table} WHERE {key_col} = ?1"),
                            [key],
                            |r| r.get(0),
                        )
                        .optional()?;
                    match owner {
                        None => report.batches.push(format!(
                            "{label} created {kind} {key}, which is no longer stored"
                        )),
                        Some(Some(id)) if id == b.id => {}
                        Some(other) => report.batches.push(format!(
                            "{label} created {kind} {key}, which now belongs to {}",
                            other
                                .map_or_else(|| "no batch".to_string(), |id| format!("batch {id}"))
                        )),
                    }
                }
            }
            if b.stored.taxa < of("taxon") {
                report.batches.push(format!(
                    "{label} created {} but holds {}",
                    crate::words::count(of("taxon"), "taxon", "taxa"),
                    b.stored.taxa
                ));
            }
            let s = b.stored;
            if b.rows > 0 && s.sites + s.protocols + s.taxa + s.events + s.counts == 0 {
                let mut stmt = self.conn().prepare_cached(
                    "SELECT DISTINCT b.id FROM import_batch b, json_each(b.created, '$.replaced') r \
                     WHERE json_extract(r.value, '$.batch') = ?1 ORDER BY 1",
                )?;
                let later: Vec<String> = stmt
                    .query_map([b.id], |r| r.get::<_, i64>(0))?
                    .map(|id| id.map(|id| id.to_string()))
                    .collect::<std::result::Result<_, _>>()?;
                let why = if later.is_empty() {
                    "rows identical to stored ones are not written again".to_string()
                } else {
                    format!(
                        "{} {} overwrote its counts with --replace",
                        if later.len() == 1 { "batch" } else { "batches" },
                        later.join(", ")
                    )
                };
                report.notes.push(format!(
                    "{label} holds no rows although its file had {} ({why}); \
                     `tally batches undo {}` would remove it from the list",
                    crate::words::count(b.rows, "row", "rows"),
                    b.id
                ));
            }
        }
        Ok(())
    }

    /// Copy the store, while open, to a new file at `dest` with SQLite's backup API.
    ///
    /// # Errors
    /// [`StoreError::Exists`] when `dest` exists; SQLite errors.
    pub fn backup(&self, dest: &Path) -> Result<()> {
        if dest.exists() {
            return Err(StoreError::Exists(dest.to_path_buf()));
        }
        self.conn()
            .backup("main", dest, None::<fn(rusqlite::backup::Progress)>)?;
        Ok(())
    }
}

/// Tables whose rows carry an `import_batch_id`, with their row nouns.
const BATCH_TABLES: [(&str, &str, &str); 6] = [
    ("site", "site", "sites"),
    ("protocol", "protocol", "protocols"),
    ("taxon", "taxon", "taxa"),
    ("event", "event", "events"),
    ("count", "count", "counts"),
    ("taxon_code", "field code", "field codes"),
];

/// Record that check `what` could not run because of `e`; a damaged file is
/// passed on (it ends the check).
fn not_checked(report: &mut CheckReport, what: &str, e: StoreError) -> Result<()> {
    if corrupt_message(&e).is_some() {
        return Err(e);
    }
    report.not_checked.push(format!("{what} ({e})"));
    Ok(())
}

/// (type, name) → (tbl_name, normalised sql) of a schema's tables, indexes,
/// triggers and views, without SQLite's own objects and refinery's history.
type SchemaObjects = BTreeMap<(u8, String, String), (String, String)>;

fn schema_objects(conn: &Connection) -> Result<SchemaObjects> {
    let mut stmt = conn.prepare(
        "SELECT type, name, tbl_name, sql FROM sqlite_schema \
         WHERE name NOT LIKE 'sqlite\\_%' ESCAPE '\\' \
         AND name <> 'refinery_schema_history' AND tbl_name <> 'refinery_schema_history'",
    )?;
    let mut out = SchemaObjects::new();
    let mut rows = stmt.query([])?;
    while let Some(r) = rows.next()? {
        let kind: String = r.get(0)?;
        let name: String = r.get(1)?;
        let table: String = r.get(2)?;
        let sql: Option<String> = r.get(3)?;
        // Tables first, then indexes, triggers and views (the order of lines).
        let rank = match kind.as_str() {
            "table" => 0,
            "index" => 1,
            "trigger" => 2,
            _ => 3,
        };
        out.insert(
            (rank, kind, name),
            (
                table.to_lowercase(),
                normalise_sql(sql.as_deref().unwrap_or("")),
            ),
        );
    }
    Ok(out)
}

/// SQL text as compared: runs of white space become one space (none next to
/// brackets, commas and semicolons), identifier quotes are dropped and letters
/// are lowercased, all outside string literals (identifiers and keywords are
/// case-insensitive in SQLite).
fn normalise_sql(sql: &str) -> String {
    let mut out = String::with_capacity(sql.len());
    let mut in_string = false;
    let mut space = false;
    for c in sql.chars() {
        if in_string {
            out.push(c);
            in_string = c != '\'';
            continue;
        }
        if c.is_whitespace() {
            space = true;
            continue;
        }
        if c == '"' || c == '`' {
            // A quoted identifier is the same identifier (ALTER TABLE … RENAME
            // writes the new name quoted).
            continue;
        }
        let tight = |c: char| matches!(c, '(' | ')' | ',' | ';');
        if space && !out.is_empty() && !tight(c) && !out.ends_with(tight) {
            out.push(' ');
        }
        space = false;
        in_string = c == '\'';
        out.extend(c.to_lowercase());
    }
    out
}

/// The last migration that creates, renames to or alters the object `name`
/// of type `kind`, read from the embedded migrations.
fn made_by(kind: &str, name: &str) -> Option<String> {
    let runner = super::embedded::migrations::runner();
    let mut found = None;
    for m in runner.get_migrations() {
        let Some(sql) = m.sql() else { continue };
        let words = sql_words(sql);
        let hit = words.windows(2).enumerate().any(|(i, w)| {
            let at = |k: usize| words.get(k).map(String::as_str);
            let named = |mut k: usize| {
                if at(k) == Some("if") && at(k + 1) == Some("not") && at(k + 2) == Some("exists") {
                    k += 3;
                }
                at(k) == Some(name)
            };
            match (w[0].as_str(), w[1].as_str()) {
                ("create", _) => {
                    let mut k = i + 1;
                    while matches!(at(k), Some("unique" | "temp" | "temporary")) {
                        k += 1;
                    }
                    at(k) == Some(kind) && named(k + 1)
                }
                ("rename", "to") => kind == "table" && at(i + 2) == Some(name),
                ("alter", "table") => kind == "table" && named(i + 2),
                _ => false,
            }
        });
        if hit {
            found = Some(m.version().to_string());
        }
    }
    found
}

/// The words of SQL text, lowercased and unquoted, without comments and
/// string literals.
fn sql_words(sql: &str) -> Vec<String> {
    let mut words = Vec::new();
    for line in sql.lines() {
        let line = line.split("--").next().unwrap_or("");
        let mut word = String::new();
        let mut in_string = false;
        for c in line.chars() {
            if in_string {
                in_string = c != '\'';
                continue;
            }
            if c.is_alphanumeric() || c == '_' {
                word.extend(c.to_lowercase());
                continue;
            }
            if !word.is_empty() {
                words.push(std::mem::take(&mut word));
            }
            in_string = c == '\'';
        }
        if !word.is_empty() {
            words.push(word);
        }
    }
    words
}

/// SQLite's message when `e` (or an error under it) says the file is damaged
/// (`SQLITE_CORRUPT`) or not a database (`SQLITE_NOTADB`).
pub(crate) fn corrupt_message(e: &StoreError) -> Option<String> {
    fn of(e: &rusqlite::Error) -> Option<String> {
        use rusqlite::ErrorCode::{DatabaseCorrupt, NotADatabase};
        match e {
            rusqlite::Error::SqliteFailure(f, msg)
                if matches!(f.code, DatabaseCorrupt | NotADatabase) =>
            {
                Some(msg.clone().unwrap_or_else(|| match f.code {
                    DatabaseCorrupt => "database disk image is malformed".to_string(),
                    _ => "file is not a database".to_string(),
                }))
            }
            _ => None,
        }
    }
    if let StoreError::Sqlite(s) = e {
        return of(s);
    }
    let mut source = std::error::Error::source(e);
    while let Some(s) = source {
        if let Some(found) = s.downcast_ref::<rusqlite::Error>().and_then(of) {
            return Some(found);
        }
        source = s.source();
    }
    None
}

/// `e`, or [`StoreError::Damaged`] when SQLite found the file damaged.
pub(crate) fn damaged_or(e: StoreError) -> StoreError {
    match corrupt_message(&e) {
        Some(m) => StoreError::Damaged(m),
        None => e,
    }
}

/// The header string of every SQLite database file.
const MAGIC: &[u8; 16] = b"SQLite format 3\0";

/// Look at the file at `path` (which exists and is not a directory) before
/// SQLite opens it, and say what it is when it cannot be a sound tally store:
/// an empty file, a file that is not SQLite, an SQLite database of another
/// program, or a file shorter than its header says.
///
/// The first 100 bytes of an SQLite file are its header, big-endian: the
/// header string "SQLite format 3\0" at offset 0, the page size at offset 16
/// (2 bytes; 1 means 65536), the file change counter at offset 24, the
/// database size in pages at offset 28 (valid only when the change counter
/// equals the version-valid-for number at offset 92), and the application id
/// at offset 68 (https://www.sqlite.org/fileformat.html, "The Database Header").
///
/// # Errors
/// [`StoreError::NotAStore`] or [`StoreError::Truncated`] saying what the file
/// is; [`StoreError::Io`] when it cannot be read.
pub(crate) fn recognise(path: &Path) -> Result<()> {
    let io = |source| StoreError::Io {
        file: path.display().to_string(),
        source,
    };
    let len = std::fs::metadata(path).map_err(io)?.len();
    let mut header = Vec::with_capacity(100);
    std::fs::File::open(path)
        .map_err(io)?
        .take(100)
        .read_to_end(&mut header)
        .map_err(io)?;
    let not_a_store = |why: String| StoreError::NotAStore(path.to_path_buf(), why);
    if len == 0 {
        return Err(not_a_store("an empty file".into()));
    }
    let magic_len = header.len().min(MAGIC.len());
    if header[..magic_len] != MAGIC[..magic_len] {
        let shown = 24;
        let start = header[..header.len().min(shown)].escape_ascii().to_string();
        let more = if len > shown as u64 { "…" } else { "" };
        return Err(not_a_store(format!(
            "not an SQLite file (starts with \"{start}{more}\")"
        )));
    }
    if header.len() < 100 {
        return Err(StoreError::Truncated(
            path.to_path_buf(),
            format!("a truncated SQLite file: {len} bytes, less than its 100-byte header"),
        ));
    }
    let u16_at = |k: usize| u16::from_be_bytes([header[k], header[k + 1]]);
    let u32_at =
        |k: usize| u32::from_be_bytes([header[k], header[k + 1], header[k + 2], header[k + 3]]);
    let page_size = match u16_at(16) {
        1 => 65_536,
        n => u64::from(n),
    };
    let pages = u64::from(u32_at(28));
    let application_id = u32_at(68) as i32;
    let size_valid = pages > 0 && u32_at(24) == u32_at(92);
    let expected = pages * page_size;
    // With a write-ahead log beside it, SQLite may still complete the file
    // from the log; only a lone file is judged by its length.
    let mut wal = path.as_os_str().to_owned();
    wal.push("-wal");
    let wal_pending = std::fs::metadata(&wal).is_ok_and(|m| m.len() > 0);
    if size_valid && page_size.is_power_of_two() && len < expected && !wal_pending {
        let what = if application_id == APPLICATION_ID {
            "a truncated tally store".to_string()
        } else {
            format!(
                "a truncated SQLite database of some other program (application id {})",
                show_id(application_id)
            )
        };
        return Err(StoreError::Truncated(
            path.to_path_buf(),
            format!(
                "{what}: {len} bytes of {expected} expected \
                 (page count {pages} × page size {page_size} in its header)"
            ),
        ));
    }
    if application_id != APPLICATION_ID {
        return Err(foreign(path, application_id));
    }
    Ok(())
}

/// [`StoreError::NotAStore`] for an SQLite database of another program,
/// naming its application id and its tables.
pub(crate) fn foreign(path: &Path, application_id: i32) -> StoreError {
    let tables = Connection::open_with_flags(path, rusqlite::OpenFlags::SQLITE_OPEN_READ_ONLY)
        .and_then(|c| {
            let mut stmt = c.prepare(
                "SELECT name FROM sqlite_schema WHERE type = 'table' \
                 AND name NOT LIKE 'sqlite\\_%' ESCAPE '\\' ORDER BY name",
            )?;
            stmt.query_map([], |r| r.get::<_, String>(0))?
                .collect::<rusqlite::Result<Vec<_>>>()
        });
    let tables = match tables {
        Ok(names) if names.is_empty() => "no tables".to_string(),
        Ok(names) => {
            let shown = 12;
            let mut s = format!("tables: {}", names[..names.len().min(shown)].join(", "));
            if names.len() > shown {
                s.push_str(&format!(" and {} more", names.len() - shown));
            }
            s
        }
        Err(e) => format!("tables unreadable: {e}"),
    };
    StoreError::NotAStore(
        path.to_path_buf(),
        format!(
            "an SQLite database of some other program (application id {}, {tables})",
            show_id(application_id)
        ),
    )
}

/// An application id as written in messages: hex, with its four bytes as
/// text when they are printable ASCII (tally's own is 0x54414c59, "TALY").
fn show_id(id: i32) -> String {
    let bytes = id.to_be_bytes();
    if id != 0 && bytes.iter().all(|b| b.is_ascii_graphic()) {
        format!("{id:#x} \"{}\"", String::from_utf8_lossy(&bytes))
    } else {
        format!("{id:#x}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sql_is_compared_without_layout_or_case() {
        assert_eq!(
            normalise_sql("CREATE INDEX  count_taxon ON count( taxon_id ,\n  event_id )"),
            normalise_sql("create index count_taxon on count(taxon_id, event_id)")
        );
        assert_eq!(
            normalise_sql("CREATE TABLE \"import_batch\" (id INTEGER)"),
            normalise_sql("CREATE TABLE import_batch(id integer)")
        );
        assert_ne!(
            normalise_sql("CHECK (kind IN ('A'))"),
            normalise_sql("CHECK (kind IN ('a'))")
        );
    }

    #[test]
    fn check_names_a_field_code_planted_equal_to_a_name() {
        let s = Store::open_in_memory().unwrap();
        crate::store::testing::add_taxon(&s, "Baetis", "genus", None, None).unwrap();
        crate::store::testing::add_taxon(&s, "Nepa", "genus", None, None).unwrap();
        s.conn()
            .execute(
                "INSERT INTO taxon_code(code, taxon_id) SELECT 'BAETIS', id FROM taxon WHERE name = 'Nepa'",
                [],
            )
            .unwrap();
        let r = s.check().unwrap();
        assert!(!r.is_ok());
        assert_eq!(
            r.taxonomy,
            [
                "field code BAETIS of Nepa reads like the taxon name Baetis; remove the code \
              (`tally taxa code 'Nepa' BAETIS --remove`) or rename the taxon"
            ]
        );
    }

    #[test]
    fn objects_are_traced_to_the_migration_that_made_them_last() {
        assert_eq!(made_by("index", "count_taxon").as_deref(), Some("1"));
        assert_eq!(made_by("table", "saved_selection").as_deref(), Some("2"));
        assert_eq!(made_by("table", "taxon_change").as_deref(), Some("4"));
        assert_eq!(made_by("table", "import_batch").as_deref(), Some("6"));
        assert_eq!(made_by("table", "site_change").as_deref(), Some("6"));
        assert_eq!(made_by("table", "taxon_code").as_deref(), Some("7"));
        assert_eq!(made_by("index", "taxon_code_batch").as_deref(), Some("7"));
        assert_eq!(made_by("table", "nothing"), None);
    }

    #[test]
    fn a_fresh_store_matches_its_migrations() {
        let s = Store::open_in_memory().unwrap();
        let r = s.check().unwrap();
        assert!(r.is_ok(), "{r:?}");
        s.conn()
            .execute_batch(
                "DROP INDEX count_batch; CREATE INDEX count_batch ON count(import_batch_id, value); \
                 DROP TABLE saved_selection; CREATE TABLE scratch(x);",
            )
            .unwrap();
        let r = s.check_with(true).unwrap();
        assert_eq!(
            r.schema,
            [
                "table saved_selection is missing",
                "index count_batch differs from migration V1",
                "table scratch is extra (no migration makes it)",
            ]
        );
    }
}
