//! Import batches: listing them, and undoing one.
//!
//! Every row an import writes carries its batch id, so a batch can be removed
//! whole. Undo refuses when other data depends on the batch (counts of a later
//! batch on its events or taxa, events at its sites or under its protocols,
//! taxa pointing at its taxa, or a later batch that overwrote its counts) and
//! says which batch depends on it and how. Counts the batch overwrote with
//! `--replace` are put back.

use rusqlite::{OptionalExtension, TransactionBehavior, params};
use serde::Serialize;

use super::import::BatchNotes;
use super::{Result, Store, StoreError};

/// One import batch as listed.
#[derive(Debug, Clone, Serialize)]
pub struct Batch {
    /// Batch id.
    pub id: i64,
    /// Kind of file (`sites`, `records`, ...).
    pub kind: String,
    /// File name as given to the import.
    pub file: String,
    /// SHA-256 of the file's bytes, hex.
    pub content_sha256: String,
    /// When it was imported (RFC 3339, UTC).
    pub imported_at: String,
    /// Data rows in the file.
    pub rows: i64,
    /// Things created on the way (`"site S19"`).
    pub created: Vec<String>,
    /// Rows of each table that still carry this batch id: sites, protocols, taxa, events, counts.
    pub stored: BatchRows,
}

/// Rows per table belonging to one batch.
#[derive(Debug, Clone, Copy, Default, Serialize, PartialEq, Eq)]
pub struct BatchRows {
    /// Sites.
    pub sites: i64,
    /// Protocols.
    pub protocols: i64,
    /// Taxa.
    pub taxa: i64,
    /// Events.
    pub events: i64,
    /// Counts.
    pub counts: i64,
    /// Site attribute values (of an attributes file).
    pub attributes: i64,
    /// Field codes of taxa (of a taxa file).
    pub codes: i64,
}

/// What undoing a batch removed.
#[derive(Debug, Clone, Serialize)]
pub struct UndoReport {
    /// The batch removed.
    pub batch_id: i64,
    /// Its file.
    pub file: String,
    /// Rows removed per table.
    pub removed: BatchRows,
    /// Counts of earlier batches put back (overwritten by this batch with `--replace`).
    pub restored: usize,
}

const ROWS_SQL: &str = "SELECT (SELECT COUNT(*) FROM site WHERE import_batch_id = ?1), \
     (SELECT COUNT(*) FROM protocol WHERE import_batch_id = ?1), \
     (SELECT COUNT(*) FROM taxon WHERE import_batch_id = ?1), \
     (SELECT COUNT(*) FROM event WHERE import_batch_id = ?1), \
     (SELECT COUNT(*) FROM count WHERE import_batch_id = ?1), \
     (SELECT COUNT(*) FROM site_attribute WHERE import_batch_id = ?1), \
     (SELECT COUNT(*) FROM taxon_code WHERE import_batch_id = ?1)";

fn batch_rows(conn: &rusqlite::Connection, id: i64) -> Result<BatchRows> {
    Ok(conn.query_row(ROWS_SQL, [id], |r| {
        Ok(BatchRows {
            sites: r.get(0)?,
            protocols: r.get(1)?,
            taxa: r.get(2)?,
            events: r.get(3)?,
            counts: r.get(4)?,
            attributes: r.get(5)?,
            codes: r.get(6)?,
        })
    })?)
}

fn notes(json: &str) -> BatchNotes {
    // The column is written only by import (CHECK json_valid); an unreadable
    // shape is treated as "nothing created, nothing replaced".
    serde_json::from_str(json).unwrap_or_default()
}

/// Dependency queries: (SQL giving (dependent batch id, number of rows), how to say it).
const DEPENDENTS: [(&str, &str); 9] = [
    (
        "SELECT c.import_batch_id, COUNT(*) FROM count c JOIN event e ON e.id = c.event_id \
         WHERE e.import_batch_id = ?1 AND c.import_batch_id IS NOT ?1 GROUP BY 1 ORDER BY 1",
        "counts on events of this batch",
    ),
    (
        "SELECT c.import_batch_id, COUNT(*) FROM count c JOIN taxon t ON t.id = c.taxon_id \
         WHERE t.import_batch_id = ?1 AND c.import_batch_id IS NOT ?1 GROUP BY 1 ORDER BY 1",
        "counts of taxa of this batch",
    ),
    (
        "SELECT e.import_batch_id, COUNT(*) FROM event e JOIN site s ON s.id = e.site_id \
         WHERE s.import_batch_id = ?1 AND e.import_batch_id IS NOT ?1 GROUP BY 1 ORDER BY 1",
        "events at sites of this batch",
    ),
    (
        "SELECT e.import_batch_id, COUNT(*) FROM event e JOIN protocol p ON p.id = e.protocol_id \
         WHERE p.import_batch_id = ?1 AND e.import_batch_id IS NOT ?1 GROUP BY 1 ORDER BY 1",
        "events under protocols of this batch",
    ),
    (
        "SELECT t.import_batch_id, COUNT(*) FROM taxon t JOIN taxon p ON p.id = t.parent_id \
         WHERE p.import_batch_id = ?1 AND t.import_batch_id IS NOT ?1 GROUP BY 1 ORDER BY 1",
        "taxa whose parent is a taxon of this batch",
    ),
    (
        "SELECT t.import_batch_id, COUNT(*) FROM taxon t JOIN taxon a ON a.id = t.accepted_id \
         WHERE a.import_batch_id = ?1 AND t.import_batch_id IS NOT ?1 GROUP BY 1 ORDER BY 1",
        "synonyms of taxa of this batch",
    ),
    (
        "SELECT b.id, COUNT(*) FROM import_batch b, json_each(b.created, '$.replaced') r \
         WHERE json_extract(r.value, '$.batch') = ?1 GROUP BY 1 ORDER BY 1",
        "overwritten counts of this batch (--replace)",
    ),
    (
        "SELECT a.import_batch_id, COUNT(*) FROM site_attribute a JOIN site s ON s.id = a.site_id \
         WHERE s.import_batch_id = ?1 AND a.import_batch_id IS NOT NULL AND a.import_batch_id IS NOT ?1 \
         GROUP BY 1 ORDER BY 1",
        "attribute values at sites of this batch",
    ),
    (
        "SELECT c.import_batch_id, COUNT(*) FROM taxon_code c JOIN taxon t ON t.id = c.taxon_id \
         WHERE t.import_batch_id = ?1 AND c.import_batch_id IS NOT NULL AND c.import_batch_id IS NOT ?1 \
         GROUP BY 1 ORDER BY 1",
        "field codes of taxa of this batch",
    ),
];

/// Field codes added with `tally taxa code` to taxa that batch `?1` brought:
/// undoing the batch would drop them silently.
const CODED: &str = "SELECT c.code, t.name FROM taxon_code c JOIN taxon t ON t.id = c.taxon_id \
     WHERE t.import_batch_id = ?1 AND c.import_batch_id IS NULL ORDER BY c.code";

/// Corrections (`tally sites set`, not undone) of attribute values that batch
/// `?1` brought: undoing the batch would drop them silently.
const CORRECTED: &str = "SELECT c.id FROM site_change c JOIN site s ON s.code = c.site_code \
     JOIN site_attribute a ON a.site_id = s.id AND a.key = c.key AND a.valid_from = c.valid_from \
     WHERE a.import_batch_id = ?1 AND c.field = 'attribute' AND c.undoes IS NULL \
     AND NOT EXISTS (SELECT 1 FROM site_change u WHERE u.undoes = c.id) ORDER BY c.id";

impl Store {
    /// Every import batch, oldest first.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn batches(&self) -> Result<Vec<Batch>> {
        let mut stmt = self.conn().prepare(
            "SELECT id, kind, file, content_sha256, imported_at, rows, created FROM import_batch ORDER BY id",
        )?;
        let rows = stmt.query_map([], |r| {
            Ok((
                r.get::<_, i64>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, String>(2)?,
                r.get::<_, String>(3)?,
                r.get::<_, String>(4)?,
                r.get::<_, i64>(5)?,
                r.get::<_, String>(6)?,
            ))
        })?;
        let mut out = Vec::new();
        for row in rows {
            let (id, kind, file, content_sha256, imported_at, rows, created) = row?;
            let stored = batch_rows(self.conn(), id)?;
            out.push(Batch {
                id,
                kind,
                file,
                content_sha256,
                imported_at,
                rows,
                created: notes(&created).created,
                stored,
            });
        }
        Ok(out)
    }

    /// Why batch `id` cannot be undone: one sentence per dependent batch and kind
    /// of dependency, empty when it can.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn batch_dependents(&self, id: i64) -> Result<Vec<String>> {
        dependents(self.conn(), id)
    }

    /// Remove batch `id` and every row it wrote, in one transaction, putting back
    /// counts it overwrote.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown id; [`StoreError::Refused`] naming
    /// the dependent batches when other data depends on this one; SQLite errors.
    pub fn undo_batch(&mut self, id: i64) -> Result<UndoReport> {
        // What depends on the batch is read and acted on in one write
        // transaction, so an import committed in between cannot slip under it.
        let tx = self
            .conn_mut()
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        let found: Option<(String, String)> = tx
            .query_row(
                "SELECT file, created FROM import_batch WHERE id = ?1",
                [id],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )
            .optional()?;
        let Some((file, created)) = found else {
            return Err(StoreError::NotFound {
                what: "batch",
                name: id.to_string(),
            });
        };
        let reasons = dependents(&tx, id)?;
        if !reasons.is_empty() {
            return Err(StoreError::Refused(format!(
                "batch {id} ({file}) cannot be undone: {}; undo those batches first",
                reasons.join("; ")
            )));
        }
        let removed = batch_rows(&tx, id)?;
        let replaced = notes(&created).replaced;
        tx.execute("DELETE FROM count WHERE import_batch_id = ?1", [id])?;
        {
            let mut put_back =
                tx.prepare("INSERT INTO count(event_id, taxon_id, value, import_batch_id) VALUES (?1, ?2, ?3, ?4)")?;
            for r in &replaced {
                put_back.execute(params![r.event, r.taxon, r.value, r.batch])?;
            }
        }
        tx.execute("DELETE FROM event WHERE import_batch_id = ?1", [id])?;
        tx.execute(
            "DELETE FROM site_attribute WHERE import_batch_id = ?1",
            [id],
        )?;
        tx.execute("DELETE FROM taxon_code WHERE import_batch_id = ?1", [id])?;
        tx.execute(
            "UPDATE taxon SET parent_id = NULL, accepted_id = NULL WHERE import_batch_id = ?1",
            [id],
        )?;
        tx.execute("DELETE FROM taxon WHERE import_batch_id = ?1", [id])?;
        tx.execute("DELETE FROM protocol WHERE import_batch_id = ?1", [id])?;
        tx.execute("DELETE FROM site WHERE import_batch_id = ?1", [id])?;
        tx.execute("DELETE FROM import_batch WHERE id = ?1", [id])?;
        tx.commit()?;
        Ok(UndoReport {
            batch_id: id,
            file,
            removed,
            restored: replaced.len(),
        })
    }
}

/// [`Store::batch_dependents`] on `conn` (a transaction, when acting on it).
fn dependents(conn: &rusqlite::Connection, id: i64) -> Result<Vec<String>> {
    let mut reasons = Vec::new();
    for (sql, how) in DEPENDENTS {
        let mut stmt = conn.prepare(sql)?;
        let mut rows = stmt.query([id])?;
        while let Some(r) = rows.next()? {
            let other: Option<i64> = r.get(0)?;
            let n: i64 = r.get(1)?;
            let who = match other {
                Some(b) => {
                    let file: Option<String> = conn
                        .query_row("SELECT file FROM import_batch WHERE id = ?1", [b], |r| {
                            r.get(0)
                        })
                        .optional()?;
                    format!("batch {b} ({})", file.unwrap_or_default())
                }
                None => "data entered outside any batch".to_string(),
            };
            reasons.push(format!("{who} holds {n} {how}"));
        }
    }
    let corrected: Vec<String> = conn
        .prepare(CORRECTED)?
        .query_map([id], |r| r.get::<_, i64>(0))?
        .map(|r| r.map(|i| i.to_string()))
        .collect::<rusqlite::Result<_>>()?;
    if !corrected.is_empty() {
        reasons.push(format!(
            "site corrections {} changed values of this batch (undo them with `tally sites undo`)",
            corrected.join(", ")
        ));
    }
    let coded: Vec<(String, String)> = conn
        .prepare(CODED)?
        .query_map([id], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<rusqlite::Result<_>>()?;
    if !coded.is_empty() {
        let list: Vec<String> = coded.iter().map(|(c, t)| format!("{c} ({t})")).collect();
        reasons.push(format!(
            "field code(s) {} were added with `tally taxa code` to taxa of this batch \
             (remove them with `tally taxa code TAXON CODE --remove`)",
            list.join(", ")
        ));
    }
    Ok(reasons)
}
