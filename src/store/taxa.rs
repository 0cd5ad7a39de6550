//! Taxonomy upkeep: the taxon list with its use, renames and merges.
//!
//! A rename changes a taxon's name in place (its counts follow, as they refer
//! to the taxon, not the name). A merge makes one taxon a synonym of another,
//! so queries count it under the accepted name; no count is rewritten, and the
//! old name stays visible. Both write a `taxon_change` row.

use rusqlite::{OptionalExtension, params};
use serde::Serialize;

use super::{Result, Store, StoreError};

/// One taxon of the store, with how much it is used.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonRow {
    /// Name.
    pub name: String,
    /// Rank (may be empty).
    pub rank: String,
    /// Parent name, if any.
    pub parent: Option<String>,
    /// Accepted name, when this name is a synonym.
    pub accepted: Option<String>,
    /// Count rows recorded under this name.
    pub count_rows: i64,
    /// First year in which it was recorded.
    pub first_year: Option<i32>,
    /// Last year in which it was recorded.
    pub last_year: Option<i32>,
}

/// One recorded change of the taxonomy.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonChange {
    /// `rename` or `merge`.
    pub kind: String,
    /// The name before (rename) or the name merged (merge).
    pub from: String,
    /// The new name (rename) or the accepted name (merge).
    pub to: String,
    /// When (RFC 3339, UTC).
    pub changed_at: String,
    /// The reason given.
    pub reason: String,
}

fn now() -> String {
    chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
}

impl Store {
    /// Every taxon, by name, with its parent, accepted name and use.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn taxa(&self) -> Result<Vec<TaxonRow>> {
        let mut stmt = self.conn().prepare(
            "SELECT t.name, t.rank, p.name, a.name, \
                    (SELECT COUNT(*) FROM count c WHERE c.taxon_id = t.id), \
                    (SELECT MIN(CAST(substr(e.date, 1, 4) AS INTEGER)) FROM count c \
                       JOIN event e ON e.id = c.event_id WHERE c.taxon_id = t.id), \
                    (SELECT MAX(CAST(substr(e.date, 1, 4) AS INTEGER)) FROM count c \
                       JOIN event e ON e.id = c.event_id WHERE c.taxon_id = t.id) \
             FROM taxon t LEFT JOIN taxon p ON p.id = t.parent_id \
                          LEFT JOIN taxon a ON a.id = t.accepted_id \
             ORDER BY t.name",
        )?;
        let rows = stmt
            .query_map([], |r| {
                Ok(TaxonRow {
                    name: r.get(0)?,
                    rank: r.get(1)?,
                    parent: r.get(2)?,
                    accepted: r.get(3)?,
                    count_rows: r.get(4)?,
                    first_year: r.get(5)?,
                    last_year: r.get(6)?,
                })
            })?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(rows)
    }

    fn taxon_id(&self, name: &str) -> Result<i64> {
        self.conn()
            .query_row("SELECT id FROM taxon WHERE name = ?1", params![name], |r| {
                r.get(0)
            })
            .optional()?
            .ok_or_else(|| StoreError::NotFound {
                what: "taxon",
                name: name.to_string(),
            })
    }

    /// Rename a taxon; its counts, children and synonyms follow.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown name; [`StoreError::Refused`]
    /// when the new name is empty or taken.
    pub fn rename_taxon(&mut self, from: &str, to: &str, reason: &str) -> Result<()> {
        let id = self.taxon_id(from)?;
        let to = to.trim();
        if to.is_empty() {
            return Err(StoreError::Refused("the new name is empty".into()));
        }
        if self.taxon_id(to).is_ok() {
            return Err(StoreError::Refused(format!(
                "a taxon named '{to}' exists already; use `tally taxa merge {from} {to}` to count one under the other"
            )));
        }
        let tx = self.conn_mut().transaction()?;
        tx.execute("UPDATE taxon SET name = ?1 WHERE id = ?2", params![to, id])?;
        tx.execute(
            "INSERT INTO taxon_change (kind, from_name, to_name, changed_at, reason) \
             VALUES ('rename', ?1, ?2, ?3, ?4)",
            params![from, to, now(), reason],
        )?;
        tx.commit()?;
        Ok(())
    }

    /// Make `from` a synonym of `into` (or of `into`'s accepted name when `into`
    /// is itself a synonym). Synonyms of `from` are pointed at the same name,
    /// so no synonym ever points at a synonym.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for unknown names; [`StoreError::Refused`] when
    /// both names are the same taxon.
    pub fn merge_taxon(&mut self, from: &str, into: &str, reason: &str) -> Result<String> {
        let from_id = self.taxon_id(from)?;
        let into_id = self.taxon_id(into)?;
        let (target_id, target): (i64, String) = self.conn().query_row(
            "SELECT COALESCE(a.id, t.id), COALESCE(a.name, t.name) FROM taxon t \
             LEFT JOIN taxon a ON a.id = t.accepted_id WHERE t.id = ?1",
            params![into_id],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )?;
        if target_id == from_id {
            return Err(StoreError::Refused(format!(
                "'{into}' is '{from}' or one of its synonyms; nothing to merge"
            )));
        }
        let tx = self.conn_mut().transaction()?;
        tx.execute(
            "UPDATE taxon SET accepted_id = ?1 WHERE id = ?2 OR accepted_id = ?2",
            params![target_id, from_id],
        )?;
        tx.execute(
            "INSERT INTO taxon_change (kind, from_name, to_name, changed_at, reason) \
             VALUES ('merge', ?1, ?2, ?3, ?4)",
            params![from, target, now(), reason],
        )?;
        tx.commit()?;
        Ok(target)
    }

    /// Every recorded rename and merge, oldest first.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn taxon_changes(&self) -> Result<Vec<TaxonChange>> {
        let mut stmt = self.conn().prepare(
            "SELECT kind, from_name, to_name, changed_at, reason FROM taxon_change ORDER BY id",
        )?;
        let rows = stmt
            .query_map([], |r| {
                Ok(TaxonChange {
                    kind: r.get(0)?,
                    from: r.get(1)?,
                    to: r.get(2)?,
                    changed_at: r.get(3)?,
                    reason: r.get(4)?,
                })
            })?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(rows)
    }
}
