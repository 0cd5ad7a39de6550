//! The store: the only code that speaks SQL.
//!
//! [`Store::create`] makes a new store file, [`Store::open`] opens an existing
//! one. Both set WAL journalling, run the embedded refinery migrations
//! (append-only files under `migrations/`) with foreign keys off and
//! switch foreign keys on after (`tally check` lists any broken reference). A file is
//! recognised as a tally store by its SQLite `application_id`.
use std::path::{Path, PathBuf};

use rusqlite::Connection;

pub mod batches;
pub mod error;
pub mod exchange;
pub mod import;
pub mod maintenance;
pub mod query;
pub mod runs;
pub mod selections;
pub(crate) mod sheet;
pub mod sites;
pub mod summary;
pub mod taxa;
#[doc(hidden)]
pub mod testing;

pub use error::{Result, RowIssue, StoreError};
pub use query::Selection;

mod embedded {
    refinery::embed_migrations!("migrations");
}

/// How long a connection waits for another writer before giving up, unless
/// [`Store::set_busy_timeout`] says otherwise: long enough for an import of a
/// few million rows to finish.
pub const DEFAULT_BUSY_SECONDS: u64 = 60;

/// SQLite `application_id` of tally stores ("TALY" in ASCII).
pub const APPLICATION_ID: i32 = 0x5441_4C59;

/// An open tally store.
pub struct Store {
    conn: Connection,
    path: Option<PathBuf>,
}

impl Store {
    /// Create a new store at `path`; refuses when a file already exists there.
    ///
    /// # Errors
    /// [`StoreError::Exists`] when the file exists; SQLite or migration errors.
    pub fn create(path: &Path) -> Result<Store> {
        if path.exists() {
            return Err(StoreError::Exists(path.to_path_buf()));
        }
        let conn = Connection::open(path)?;
        conn.pragma_update(None, "application_id", APPLICATION_ID)?;
        let mut store = Store {
            conn,
            path: Some(path.to_path_buf()),
        };
        store.prepare()?;
        Ok(store)
    }

    /// Open an existing store at `path`, applying any pending migrations.
    ///
    /// The file's header is read first (`maintenance::recognise`), so that a
    /// file that is not a tally store is described as what it is, and a
    /// truncated store is named as such rather than as "not a database".
    ///
    /// # Errors
    /// [`StoreError::Missing`] when there is no file; [`StoreError::NotAStore`]
    /// when the file is empty, not an SQLite file, or an SQLite database with
    /// another application id; [`StoreError::Truncated`] when it is shorter
    /// than its header says; [`StoreError::Damaged`] when SQLite finds it
    /// damaged while opening it; other SQLite or migration errors.
    pub fn open(path: &Path) -> Result<Store> {
        if !path.exists() {
            return Err(StoreError::Missing(path.to_path_buf()));
        }
        if path.is_dir() {
            return Err(StoreError::NotAStore(
                path.to_path_buf(),
                "a directory".into(),
            ));
        }
        maintenance::recognise(path)?;
        let not_a_store = |why: &str| StoreError::NotAStore(path.to_path_buf(), why.to_string());
        let conn = Connection::open_with_flags(
            path,
            rusqlite::OpenFlags::SQLITE_OPEN_READ_WRITE | rusqlite::OpenFlags::SQLITE_OPEN_NO_MUTEX,
        )
        .map_err(|_| not_a_store("it cannot be opened as an SQLite database"))?;
        let id: i32 = conn
            .pragma_query_value(None, "application_id", |r| r.get(0))
            .map_err(|e| match maintenance::damaged_or(e.into()) {
                e @ StoreError::Damaged(_) => e,
                _ => not_a_store("SQLite cannot read it as a database"),
            })?;
        if id != APPLICATION_ID {
            // The header said otherwise (its page 1 may be newer in the log).
            drop(conn);
            return Err(maintenance::foreign(path, id));
        }
        let mut store = Store {
            conn,
            path: Some(path.to_path_buf()),
        };
        store.prepare().map_err(maintenance::damaged_or)?;
        Ok(store)
    }

    /// An in-memory store with all migrations applied (for tests and scratch work).
    ///
    /// # Errors
    /// SQLite or migration errors.
    pub fn open_in_memory() -> Result<Store> {
        let conn = Connection::open_in_memory()?;
        conn.pragma_update(None, "application_id", APPLICATION_ID)?;
        let mut store = Store { conn, path: None };
        store.prepare()?;
        Ok(store)
    }

    fn prepare(&mut self) -> Result<()> {
        // Migrations that rebuild a table others refer to (V5) need foreign
        // keys off while they run (SQLite's documented procedure for schema
        // changes: https://www.sqlite.org/lang_altertable.html, "Making Other
        // Kinds Of Table Schema Changes"); `tally check` checks every reference.
        self.conn.pragma_update(None, "foreign_keys", false)?;
        self.conn
            .busy_timeout(std::time::Duration::from_secs(DEFAULT_BUSY_SECONDS))?;
        // Up to 64 MiB of page cache (allocated as used): a million-row import
        // touches three b-trees of the count table, which thrash the 2 MiB default.
        self.conn.pragma_update(None, "cache_size", -65_536)?;
        // Statement journals of multi-row INSERTs stay in memory instead of a temp file.
        self.conn.pragma_update(None, "temp_store", "MEMORY")?;
        if self.path.is_some() {
            let _mode: String =
                self.conn
                    .pragma_update_and_check(None, "journal_mode", "WAL", |r| r.get(0))?;
            self.conn.pragma_update(None, "synchronous", "NORMAL")?;
        }
        embedded::migrations::runner()
            .set_grouped(true)
            .run(&mut self.conn)?;
        // A migration that left a broken reference is found by `tally check`
        // (its foreign-key check), which must be able to open the store.
        self.conn.pragma_update(None, "foreign_keys", true)?;
        Ok(())
    }

    /// How long to wait for another writer before giving up.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn set_busy_timeout(&self, wait: std::time::Duration) -> Result<()> {
        self.conn.busy_timeout(wait)?;
        Ok(())
    }

    /// The underlying connection (store submodules only).
    pub(crate) fn conn(&self) -> &Connection {
        &self.conn
    }

    /// The underlying connection, mutable, for transactions (store submodules only).
    pub(crate) fn conn_mut(&mut self) -> &mut Connection {
        &mut self.conn
    }

    /// The file this store lives in, if any.
    pub fn path(&self) -> Option<&Path> {
        self.path.as_deref()
    }

    /// The highest applied migration version.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn schema_version(&self) -> Result<i64> {
        Ok(self.conn.query_row(
            "SELECT COALESCE(MAX(version), 0) FROM refinery_schema_history",
            [],
            |r| r.get(0),
        )?)
    }

    /// A canonical text dump of every table's content, ordered, for comparing
    /// a store before and after an operation (tests, `check`).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn content_dump(&self) -> Result<String> {
        let mut names: Vec<String> = Vec::new();
        {
            let mut stmt = self.conn.prepare(
                "SELECT name FROM sqlite_schema WHERE type = 'table' AND name NOT LIKE 'sqlite_%' \
                 AND name <> 'refinery_schema_history' ORDER BY name",
            )?;
            let rows = stmt.query_map([], |r| r.get::<_, String>(0))?;
            for r in rows {
                names.push(r?);
            }
        }
        let mut out = String::new();
        for name in names {
            out.push_str(&format!("## {name}\n"));
            // Table names come from sqlite_schema, not from users; quoted as identifiers.
            let sql = format!(
                "SELECT * FROM \"{}\" ORDER BY 1, 2",
                name.replace('"', "\"\"")
            );
            let mut stmt = self.conn.prepare(&sql)?;
            let ncol = stmt.column_count();
            let mut rows = stmt.query([])?;
            while let Some(row) = rows.next()? {
                let mut cells = Vec::with_capacity(ncol);
                for c in 0..ncol {
                    let v: rusqlite::types::Value = row.get(c)?;
                    cells.push(format!("{v:?}"));
                }
                out.push_str(&cells.join("|"));
                out.push('\n');
            }
        }
        Ok(out)
    }

    /// Flush the write-ahead log into the main file (called before a writing command exits).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn checkpoint(&self) -> Result<()> {
        if self.path.is_some() {
            self.conn
                .execute_batch("PRAGMA wal_checkpoint(TRUNCATE); PRAGMA optimize;")?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn migrations_apply_and_are_idempotent() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.db");
        let s = Store::create(&path).unwrap();
        let v = s.schema_version().unwrap();
        assert!(v >= 1);
        drop(s);
        let s = Store::open(&path).unwrap();
        assert_eq!(s.schema_version().unwrap(), v);
        let fk: i64 = s
            .conn()
            .pragma_query_value(None, "foreign_keys", |r| r.get(0))
            .unwrap();
        assert_eq!(fk, 1);
    }

    /// The tables of sites, sampling and counts and their batches.
    const SAMPLING_TABLES: [&str; 6] = [
        "import_batch",
        "site",
        "protocol",
        "taxon",
        "event",
        "count",
    ];

    /// A new store file at `path` with the migrations up to `version` applied.
    fn store_at_version(path: &Path, version: i32) -> Connection {
        let mut c = Connection::open(path).unwrap();
        c.pragma_update(None, "application_id", APPLICATION_ID)
            .unwrap();
        c.pragma_update(None, "foreign_keys", true).unwrap();
        embedded::migrations::runner()
            .set_target(refinery::Target::Version(version))
            .run(&mut c)
            .unwrap();
        c
    }

    /// Every row of `tables`, as text, table by table in id order.
    fn table_rows(c: &Connection, tables: &[&str]) -> Vec<String> {
        let mut out = Vec::new();
        for t in tables {
            let mut stmt = c.prepare(&format!("SELECT * FROM {t} ORDER BY 1")).unwrap();
            let n = stmt.column_count();
            let mut q = stmt.query([]).unwrap();
            while let Some(r) = q.next().unwrap() {
                let cells: Vec<String> = (0..n)
                    .map(|i| format!("{:?}", r.get::<_, rusqlite::types::Value>(i).unwrap()))
                    .collect();
                out.push(format!("{t}: {}", cells.join("|")));
            }
        }
        out
    }

    #[test]
    fn the_v5_migration_keeps_every_batch_and_reference() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("v4.db");
        let rows = |c: &Connection| table_rows(c, &SAMPLING_TABLES);
        let before = {
            let c = store_at_version(&path, 4);
            c.execute_batch(
                "INSERT INTO import_batch(id, kind, file, content_sha256, imported_at, rows) VALUES \
                   (1, 'sites', 's.csv', printf('%064d', 1), '2024-01-01T00:00:00Z', 1), \
                   (3, 'records', 'r.csv', printf('%064d', 3), '2024-01-02T00:00:00Z', 2); \
                 INSERT INTO site(id, code, import_batch_id) VALUES (1, 'S1', 1); \
                 INSERT INTO protocol(id, code, effort_unit, import_batch_id) VALUES (1, 'kick', 'minutes', 3); \
                 INSERT INTO taxon(id, name, import_batch_id) VALUES (1, 'Baetis', 3); \
                 INSERT INTO event(id, code, site_id, date, protocol_id, effort, import_batch_id) \
                   VALUES (1, 'E1', 1, '2020-04-01', 1, 3, 3); \
                 INSERT INTO count(event_id, taxon_id, value, import_batch_id) VALUES (1, 1, 7, 3);",
            )
            .unwrap();
            rows(&c)
        };
        let s = Store::open(&path).unwrap();
        assert!(s.schema_version().unwrap() >= 5);
        assert_eq!(rows(s.conn()), before);
        // References to the rebuilt table name it, and are enforced again.
        let target: String = s
            .conn()
            .query_row(
                "SELECT \"table\" FROM pragma_foreign_key_list('event') WHERE \"from\" = 'import_batch_id'",
                [],
                |r| r.get(0),
            )
            .unwrap();
        assert_eq!(target, "import_batch");
        assert!(
            s.conn()
                .execute("UPDATE site SET import_batch_id = 99 WHERE id = 1", [])
                .is_err()
        );
        s.conn()
            .execute(
                "INSERT INTO import_batch(kind, file, content_sha256, imported_at, rows) \
                 VALUES ('dwca', 'a.zip', printf('%064d', 4), '2024-01-03T00:00:00Z', 0)",
                [],
            )
            .unwrap();
    }

    /// Migration V6 (attribute histories) on a populated V5 store: every row
    /// of every other table is kept, each attribute becomes a "since always"
    /// value, and the records a selection reads (and so every matrix) equal
    /// those of a store made at the current version from the same rows.
    #[test]
    fn the_v6_migration_keeps_every_row_and_every_selection() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("v5.db");
        let content = "INSERT INTO import_batch(id, kind, file, content_sha256, imported_at, rows) VALUES \
               (1, 'sites', 's.csv', printf('%064d', 1), '2024-01-01T00:00:00Z', 2), \
               (2, 'records', 'r.csv', printf('%064d', 2), '2024-01-02T00:00:00Z', 4); \
             INSERT INTO site(id, code, import_batch_id) VALUES (1, 'S1', 1), (2, 'S2', 1); \
             INSERT INTO site_attribute(site_id, key, value) VALUES \
               (1, 'habitat', 'riffle'), (2, 'habitat', 'pool'), (2, 'reach', 'lower'); \
             INSERT INTO protocol(id, code, effort_unit, import_batch_id) VALUES (1, 'kick', 'minutes', 2); \
             INSERT INTO taxon(id, name, import_batch_id) VALUES (1, 'Baetis', 2), (2, 'Caenis', 2); \
             INSERT INTO event(id, code, site_id, date, protocol_id, effort, import_batch_id) VALUES \
               (1, 'E1', 1, '2020-04-01', 1, 3, 2), (2, 'E2', 2, '2020-04-02', 1, 2, 2); \
             INSERT INTO count(event_id, taxon_id, value, import_batch_id) VALUES \
               (1, 1, 7, 2), (1, 2, 1, 2), (2, 2, 4, 2);";
        let tables = |c: &Connection| table_rows(c, &SAMPLING_TABLES);
        let before = {
            let c = store_at_version(&path, 5);
            c.execute_batch(content).unwrap();
            tables(&c)
        };
        let migrated = Store::open(&path).unwrap();
        assert!(migrated.schema_version().unwrap() >= 6);
        assert_eq!(tables(migrated.conn()), before);
        let attrs: Vec<(i64, String, String, String)> = migrated
            .conn()
            .prepare("SELECT site_id, key, valid_from, value FROM site_attribute ORDER BY 1, 2")
            .unwrap()
            .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?)))
            .unwrap()
            .collect::<rusqlite::Result<_>>()
            .unwrap();
        let since_always = |site, key: &str, value: &str| {
            (site, key.to_string(), String::new(), value.to_string())
        };
        assert_eq!(
            attrs,
            [
                since_always(1, "habitat", "riffle"),
                since_always(2, "habitat", "pool"),
                since_always(2, "reach", "lower"),
            ]
        );
        let fresh = Store::open_in_memory().unwrap();
        fresh.conn().execute_batch(content).unwrap();
        for site_where in [
            vec![],
            vec![("habitat".to_string(), "riffle".to_string())],
            vec![("reach".to_string(), "lower".to_string())],
        ] {
            let sel = Selection {
                site_where: site_where.clone(),
                ..Selection::default()
            };
            let a = migrated.select_records(&sel).unwrap();
            assert_eq!(a, fresh.select_records(&sel).unwrap(), "{site_where:?}");
            assert!(!a.events.is_empty(), "{site_where:?}");
        }
    }

    #[test]
    fn refuses_missing_and_foreign_files() {
        let dir = tempfile::tempdir().unwrap();
        let missing = dir.path().join("none.db");
        assert!(matches!(Store::open(&missing), Err(StoreError::Missing(_))));
        let text = dir.path().join("notes.txt");
        std::fs::write(
            &text,
            "hello, this is not a database at all, just some text\n",
        )
        .unwrap();
        assert!(matches!(Store::open(&text), Err(StoreError::NotAStore(..))));
        let other = dir.path().join("other.db");
        Connection::open(&other)
            .unwrap()
            .execute_batch("CREATE TABLE x(a)")
            .unwrap();
        assert!(matches!(
            Store::open(&other),
            Err(StoreError::NotAStore(..))
        ));
    }

    #[test]
    fn impossible_dates_are_rejected_by_the_schema() {
        let s = Store::open_in_memory().unwrap();
        s.conn()
            .execute_batch(
                "INSERT INTO site(code) VALUES ('A'); \
                 INSERT INTO protocol(code, effort_unit) VALUES ('kick', 'minutes');",
            )
            .unwrap();
        let bad = s.conn().execute(
            "INSERT INTO event(code, site_id, date, protocol_id, effort) VALUES ('e', 1, '2021-02-30', 1, 3)",
            [],
        );
        assert!(bad.is_err());
        let good = s.conn().execute(
            "INSERT INTO event(code, site_id, date, protocol_id, effort) VALUES ('e', 1, '2021-02-28', 1, 3)",
            [],
        );
        assert!(good.is_ok());
    }
}
