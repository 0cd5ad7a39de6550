//! Stored analysis runs: what was computed, on which data, with which
//! parameters and seed, and the full result. Headline numbers are also kept
//! one per row in `run_value`, so a number can be followed across runs
//! (`tally runs series`).

use std::collections::BTreeMap;

use rusqlite::{OptionalExtension, params};
use serde::Serialize;

use super::{Result, Store, StoreError};

/// A run to be stored.
#[derive(Debug, Clone)]
pub struct NewRun {
    /// Kind of analysis (`permanova`, `partition`, `compare`, `trend`, …).
    pub kind: String,
    /// The selection the matrix came from, as JSON.
    pub selection: serde_json::Value,
    /// Every parameter of the analysis, as JSON.
    pub parameters: serde_json::Value,
    /// Seed of the random streams, if the analysis used any.
    pub seed: Option<u64>,
    /// Fingerprint of the assembled matrix and its metadata.
    pub fingerprint: String,
    /// First date covered by the data (ISO 8601), for ordering series.
    pub period_start: Option<String>,
    /// Last date covered by the data (ISO 8601).
    pub period_end: Option<String>,
    /// The full result, as JSON.
    pub result: serde_json::Value,
    /// Headline numbers (name, value); `None` for a value that could not be computed.
    pub values: Vec<(String, Option<f64>)>,
    /// Digest of the site attributes in force on the matrix rows, key →
    /// SHA-256 (`Prepared::attribute_digests`), so that `runs verify` notices
    /// a later change of an attribute history.
    pub attributes: BTreeMap<String, String>,
}

/// A stored run.
#[derive(Debug, Clone, Serialize)]
pub struct RunRecord {
    /// Run id.
    pub id: i64,
    /// Kind of analysis.
    pub kind: String,
    /// Selection JSON.
    pub selection: serde_json::Value,
    /// Parameters JSON.
    pub parameters: serde_json::Value,
    /// Seed, if any.
    pub seed: Option<u64>,
    /// Data fingerprint.
    pub fingerprint: String,
    /// Version of tally that computed it.
    pub tool_version: String,
    /// When it was stored (RFC 3339, UTC).
    pub created_at: String,
    /// First date covered.
    pub period_start: Option<String>,
    /// Last date covered.
    pub period_end: Option<String>,
    /// Full result JSON.
    pub result: serde_json::Value,
    /// Headline numbers.
    pub values: Vec<(String, Option<f64>)>,
    /// Digest of the site attributes in force on the rows, key → SHA-256;
    /// `None` for runs stored before tally recorded it.
    pub attributes: Option<BTreeMap<String, String>>,
}

/// One point of a series: a stored number and the run it came from.
#[derive(Debug, Clone, Serialize)]
pub struct SeriesPoint {
    /// Run id.
    pub run_id: i64,
    /// First date covered by the run's data.
    pub period_start: Option<String>,
    /// Last date covered by the run's data.
    pub period_end: Option<String>,
    /// When the run was stored.
    pub created_at: String,
    /// The value (`None` when it could not be computed).
    pub value: Option<f64>,
}

fn seed_to_sql(seed: Option<u64>) -> Option<i64> {
    // Seeds are stored as the same 64 bits in SQLite's signed integer.
    seed.map(|s| s as i64)
}

fn seed_from_sql(seed: Option<i64>) -> Option<u64> {
    seed.map(|s| s as u64)
}

impl Store {
    /// Store a run and its headline numbers in one transaction; returns the run id.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn save_run(&mut self, run: &NewRun) -> Result<i64> {
        Ok(self.save_runs(std::slice::from_ref(run))?[0])
    }

    /// Store several runs (one command's) in one transaction: all or none.
    /// Returns their ids in order.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn save_runs(&mut self, runs: &[NewRun]) -> Result<Vec<i64>> {
        let now = chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true);
        let tx = self.conn_mut().transaction()?;
        let mut ids = Vec::with_capacity(runs.len());
        {
            let mut run_stmt = tx.prepare(
                "INSERT INTO run (kind, selection, parameters, seed, fingerprint, tool_version, \
                 created_at, period_start, period_end, result, attributes) \
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11)",
            )?;
            let mut value_stmt =
                tx.prepare("INSERT INTO run_value (run_id, name, value) VALUES (?1, ?2, ?3)")?;
            for run in runs {
                run_stmt.execute(params![
                    run.kind,
                    run.selection.to_string(),
                    run.parameters.to_string(),
                    seed_to_sql(run.seed),
                    run.fingerprint,
                    crate::VERSION,
                    now,
                    run.period_start,
                    run.period_end,
                    run.result.to_string(),
                    serde_json::to_string(&run.attributes)
                        .map_err(|e| StoreError::Refused(e.to_string()))?,
                ])?;
                let id = tx.last_insert_rowid();
                for (name, value) in &run.values {
                    let v = value.filter(|v| v.is_finite());
                    value_stmt.execute(params![id, name, v])?;
                }
                ids.push(id);
            }
        }
        tx.commit()?;
        Ok(ids)
    }

    /// Load one run with its values.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] when there is no such run; SQLite errors.
    pub fn run(&self, id: i64) -> Result<RunRecord> {
        let row = self
            .conn()
            .query_row(
                "SELECT id, kind, selection, parameters, seed, fingerprint, tool_version, \
                 created_at, period_start, period_end, result, attributes FROM run WHERE id = ?1",
                params![id],
                |r| {
                    Ok((
                        r.get::<_, i64>(0)?,
                        r.get::<_, String>(1)?,
                        r.get::<_, String>(2)?,
                        r.get::<_, String>(3)?,
                        r.get::<_, Option<i64>>(4)?,
                        r.get::<_, String>(5)?,
                        r.get::<_, String>(6)?,
                        r.get::<_, String>(7)?,
                        r.get::<_, Option<String>>(8)?,
                        r.get::<_, Option<String>>(9)?,
                        r.get::<_, String>(10)?,
                        r.get::<_, Option<String>>(11)?,
                    ))
                },
            )
            .optional()?
            .ok_or_else(|| StoreError::NotFound {
                what: "run",
                name: id.to_string(),
            })?;
        let json = |s: &str| serde_json::from_str(s).unwrap_or(serde_json::Value::Null);
        let mut stmt = self
            .conn()
            .prepare("SELECT name, value FROM run_value WHERE run_id = ?1 ORDER BY name")?;
        let values = stmt
            .query_map(params![id], |r| {
                Ok((r.get::<_, String>(0)?, r.get::<_, Option<f64>>(1)?))
            })?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(RunRecord {
            id: row.0,
            kind: row.1,
            selection: json(&row.2),
            parameters: json(&row.3),
            seed: seed_from_sql(row.4),
            fingerprint: row.5,
            tool_version: row.6,
            created_at: row.7,
            period_start: row.8,
            period_end: row.9,
            result: json(&row.10),
            values,
            attributes: row.11.and_then(|a| serde_json::from_str(&a).ok()),
        })
    }

    /// List runs, newest first, optionally of one kind.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn runs(&self, kind: Option<&str>) -> Result<Vec<RunRecord>> {
        let mut stmt = self
            .conn()
            .prepare("SELECT id FROM run WHERE (?1 IS NULL OR kind = ?1) ORDER BY id DESC")?;
        let ids = stmt
            .query_map(params![kind], |r| r.get::<_, i64>(0))?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        ids.into_iter().map(|id| self.run(id)).collect()
    }

    /// A stored number across runs of one kind, ordered by the period the data
    /// covers (then by run id). With `selection`, only runs whose stored
    /// selection JSON equals it.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn series(
        &self,
        kind: &str,
        value: &str,
        selection: Option<&serde_json::Value>,
    ) -> Result<Vec<SeriesPoint>> {
        let sel = selection.map(|s| s.to_string());
        let mut stmt = self.conn().prepare(
            "SELECT r.id, r.period_start, r.period_end, r.created_at, v.value \
             FROM run r JOIN run_value v ON v.run_id = r.id \
             WHERE r.kind = ?1 AND v.name = ?2 AND (?3 IS NULL OR r.selection = ?3) \
             ORDER BY r.period_end, r.period_start, r.id",
        )?;
        let rows = stmt
            .query_map(params![kind, value, sel], |r| {
                Ok(SeriesPoint {
                    run_id: r.get(0)?,
                    period_start: r.get(1)?,
                    period_end: r.get(2)?,
                    created_at: r.get(3)?,
                    value: r.get(4)?,
                })
            })?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(rows)
    }
}

impl Store {
    /// Names of the headline numbers stored with runs of `kind`, sorted.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn run_value_names(&self, kind: &str) -> Result<Vec<String>> {
        let mut stmt = self.conn().prepare(
            "SELECT DISTINCT v.name FROM run_value v JOIN run r ON r.id = v.run_id \
             WHERE r.kind = ?1 ORDER BY v.name",
        )?;
        let names = stmt
            .query_map(params![kind], |r| r.get::<_, String>(0))?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(names)
    }

    /// Ids of the runs stored before `before` (an ISO 8601 date or time,
    /// compared with the stored time), optionally of one kind, oldest first.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn runs_stored_before(&self, kind: Option<&str>, before: &str) -> Result<Vec<i64>> {
        let mut stmt = self.conn().prepare(
            "SELECT id FROM run WHERE (?1 IS NULL OR kind = ?1) AND created_at < ?2 ORDER BY id",
        )?;
        let ids = stmt
            .query_map(params![kind, before], |r| r.get::<_, i64>(0))?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(ids)
    }

    /// Delete the runs `ids` and their stored numbers in one transaction: all
    /// or none. Returns how many stored numbers went with them.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] naming the first id that is not a stored run
    /// (nothing is deleted then); SQLite errors.
    pub fn delete_runs(&mut self, ids: &[i64]) -> Result<usize> {
        let tx = self
            .conn_mut()
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let mut values = 0;
        {
            let mut exists = tx.prepare("SELECT 1 FROM run WHERE id = ?1")?;
            for id in ids {
                if !exists.exists(params![id])? {
                    return Err(StoreError::NotFound {
                        what: "run",
                        name: id.to_string(),
                    });
                }
            }
            let mut del_values = tx.prepare("DELETE FROM run_value WHERE run_id = ?1")?;
            let mut del_run = tx.prepare("DELETE FROM run WHERE id = ?1")?;
            for id in ids {
                values += del_values.execute(params![id])?;
                del_run.execute(params![id])?;
            }
        }
        tx.commit()?;
        Ok(values)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample(kind: &str, end: &str, v: f64) -> NewRun {
        NewRun {
            kind: kind.into(),
            selection: serde_json::json!({"years": [2010, 2012]}),
            parameters: serde_json::json!({"permutations": 99}),
            seed: Some(u64::MAX - 3),
            fingerprint: "ab".repeat(32),
            attributes: Default::default(),
            period_start: Some("2010-01-01".into()),
            period_end: Some(end.into()),
            result: serde_json::json!({"p_value": 0.01}),
            values: vec![
                ("p_value".into(), Some(v)),
                ("undefined".into(), Some(f64::NAN)),
            ],
        }
    }

    #[test]
    fn runs_round_trip_and_series_order_by_period() {
        let mut s = Store::open_in_memory().unwrap();
        let a = s.save_run(&sample("permanova", "2014-12-31", 0.2)).unwrap();
        let b = s.save_run(&sample("permanova", "2012-12-31", 0.1)).unwrap();
        let r = s.run(a).unwrap();
        assert_eq!(r.seed, Some(u64::MAX - 3));
        assert_eq!(r.result["p_value"], 0.01);
        assert!(r.values.contains(&("undefined".to_string(), None)));
        let series = s.series("permanova", "p_value", None).unwrap();
        assert_eq!(
            series.iter().map(|p| p.run_id).collect::<Vec<_>>(),
            vec![b, a]
        );
        assert_eq!(s.runs(Some("permanova")).unwrap().len(), 2);
        assert!(s.runs(Some("trend")).unwrap().is_empty());
        assert!(matches!(s.run(99), Err(StoreError::NotFound { .. })));
        assert_eq!(
            s.run_value_names("permanova").unwrap(),
            vec!["p_value".to_string(), "undefined".to_string()]
        );
    }

    #[test]
    fn deleting_runs_is_all_or_nothing() {
        let mut s = Store::open_in_memory().unwrap();
        let a = s.save_run(&sample("permanova", "2014-12-31", 0.2)).unwrap();
        let b = s.save_run(&sample("compare", "2012-12-31", 0.1)).unwrap();
        // An unknown id among known ones: nothing goes.
        assert!(matches!(
            s.delete_runs(&[a, 99]),
            Err(StoreError::NotFound { .. })
        ));
        assert_eq!(s.runs(None).unwrap().len(), 2);
        assert_eq!(s.delete_runs(&[a]).unwrap(), 2);
        assert_eq!(
            s.runs(None)
                .unwrap()
                .iter()
                .map(|r| r.id)
                .collect::<Vec<_>>(),
            vec![b]
        );
        assert!(s.run_value_names("permanova").unwrap().is_empty());
        // Everything was stored just now: nothing is older than 2000, all of it
        // is older than 9999.
        assert!(s.runs_stored_before(None, "2000-01-01").unwrap().is_empty());
        assert_eq!(
            s.runs_stored_before(Some("compare"), "9999-01-01").unwrap(),
            vec![b]
        );
        assert!(
            s.runs_stored_before(Some("trend"), "9999-01-01")
                .unwrap()
                .is_empty()
        );
    }
}
