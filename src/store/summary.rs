//! What the store holds: totals, years, protocols and a site × year coverage grid.
//! Every number is computed by SQL.

use std::collections::HashMap;

use serde::Serialize;

use super::{Result, Store};

/// A protocol as summarised.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct ProtocolSummary {
    /// Protocol code.
    pub code: String,
    /// The unit its effort is measured in.
    pub effort_unit: String,
    /// Events under it.
    pub events: i64,
    /// Total effort of those events, in `effort_unit`.
    pub total_effort: f64,
}

/// Events per year at one site.
#[derive(Debug, Clone, Serialize, PartialEq, Eq)]
pub struct SiteCoverage {
    /// Site code.
    pub site: String,
    /// Events per year, aligned with [`Summary::years`].
    pub events: Vec<i64>,
}

/// What is stored.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct Summary {
    /// Number of sites.
    pub sites: i64,
    /// Number of sampling events.
    pub events: i64,
    /// Number of taxon names (synonyms included).
    pub taxa: i64,
    /// Number of stored counts (zeros written explicitly included).
    pub counts: i64,
    /// Number of import batches.
    pub batches: i64,
    /// First and last event dates, if any.
    pub first_date: Option<String>,
    /// Last event date.
    pub last_date: Option<String>,
    /// Years with at least one event, ascending.
    pub years: Vec<i32>,
    /// Each protocol with its effort unit, by code.
    pub protocols: Vec<ProtocolSummary>,
    /// Events per site per year, sites by code.
    pub coverage: Vec<SiteCoverage>,
}

impl Store {
    /// Summarise the store's content.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn summary(&self) -> Result<Summary> {
        let c = self.conn();
        let (sites, events, taxa, counts, batches, first_date, last_date) = c.query_row(
            "SELECT (SELECT COUNT(*) FROM site), (SELECT COUNT(*) FROM event), (SELECT COUNT(*) FROM taxon), \
             (SELECT COUNT(*) FROM count), (SELECT COUNT(*) FROM import_batch), \
             (SELECT MIN(date) FROM event), (SELECT MAX(date) FROM event)",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?, r.get(4)?, r.get(5)?, r.get(6)?)),
        )?;
        let years: Vec<i32> = c
            .prepare("SELECT DISTINCT CAST(substr(date, 1, 4) AS INTEGER) FROM event ORDER BY 1")?
            .query_map([], |r| r.get(0))?
            .collect::<rusqlite::Result<_>>()?;
        let protocols = c
            .prepare(
                "SELECT p.code, p.effort_unit, COUNT(e.id), COALESCE(SUM(e.effort), 0.0) FROM protocol p \
                 LEFT JOIN event e ON e.protocol_id = p.id GROUP BY p.id ORDER BY p.code",
            )?
            .query_map([], |r| {
                Ok(ProtocolSummary { code: r.get(0)?, effort_unit: r.get(1)?, events: r.get(2)?, total_effort: r.get(3)? })
            })?
            .collect::<rusqlite::Result<_>>()?;
        let column: HashMap<i32, usize> = years.iter().enumerate().map(|(i, y)| (*y, i)).collect();
        let mut coverage: Vec<SiteCoverage> = Vec::new();
        let mut stmt = c.prepare(
            "SELECT s.code, CAST(substr(e.date, 1, 4) AS INTEGER), COUNT(e.id) FROM site s \
             LEFT JOIN event e ON e.site_id = s.id GROUP BY s.id, 2 ORDER BY s.code, 2",
        )?;
        let mut rows = stmt.query([])?;
        while let Some(r) = rows.next()? {
            let site: String = r.get(0)?;
            let year: Option<i32> = r.get(1)?;
            let n: i64 = r.get(2)?;
            if coverage.last().is_none_or(|s| s.site != site) {
                coverage.push(SiteCoverage {
                    site,
                    events: vec![0; years.len()],
                });
            }
            if let Some(&i) = year.and_then(|y| column.get(&y)) {
                let last = coverage
                    .last_mut()
                    .expect("invariant: pushed above when empty");
                last.events[i] = n;
            }
        }
        Ok(Summary {
            sites,
            events,
            taxa,
            counts,
            batches,
            first_date,
            last_date,
            years,
            protocols,
            coverage,
        })
    }
}
