//! Keeping a store sound: the integrity check (SQLite's structure, CHECK
//! constraints and foreign keys, and the rules of the taxonomy) and the online
//! backup.

use std::path::Path;

use serde::Serialize;

use super::{Result, Store, StoreError};

/// The findings of [`Store::check`].
#[derive(Debug, Clone, Default, Serialize, PartialEq, Eq)]
pub struct CheckReport {
    /// Lines of `PRAGMA integrity_check` other than "ok" (structure and CHECK constraints).
    pub integrity: Vec<String>,
    /// Rows violating a foreign key, as "table rowid N → parent".
    pub foreign_keys: Vec<String>,
    /// Problems of the taxonomy (loops, synonyms of synonyms, ranks out of
    /// order), one line each naming the chain (`store::taxa::integrity`).
    pub taxonomy: Vec<String>,
}

impl CheckReport {
    /// True when nothing was found.
    pub fn is_ok(&self) -> bool {
        self.integrity.is_empty() && self.foreign_keys.is_empty() && self.taxonomy.is_empty()
    }

    /// How many problems were found.
    pub fn problems(&self) -> usize {
        self.integrity.len() + self.foreign_keys.len() + self.taxonomy.len()
    }
}

impl Store {
    /// Run `PRAGMA integrity_check` and `PRAGMA foreign_key_check`, then the
    /// taxonomy rules (when the structure is sound enough to read).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn check(&self) -> Result<CheckReport> {
        let mut report = CheckReport::default();
        let mut stmt = self.conn().prepare("PRAGMA integrity_check")?;
        for line in stmt.query_map([], |r| r.get::<_, String>(0))? {
            let line = line?;
            if line != "ok" {
                report.integrity.push(line);
            }
        }
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
        if report.integrity.is_empty() {
            report.taxonomy = self
                .taxonomy()?
                .problems()
                .iter()
                .map(ToString::to_string)
                .collect();
        }
        Ok(report)
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
