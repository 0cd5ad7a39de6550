//! Selections: which events of the store a matrix is built from, and how.
//!
//! A [`Selection`] holds every SELECTION flag (see `docs/matrices.md`). Its row
//! filters become one SQL `WHERE` clause with bound parameters only (user text
//! never enters SQL); [`Store::select_records`] returns plain rows
//! ([`Records`]) for [`crate::matrix::assemble::assemble`], which does all the
//! pooling and arithmetic. An empty result is an error naming the filter that
//! emptied it.
//!
//! Filters: `sites` (any of the codes), `site_where` (pairs; pairs with the
//! same key are alternatives (OR), different keys must all hold (AND)),
//! `protocol`, `from`/`to` (inclusive ISO dates), `months` (a season window,
//! wrapping the year end when `A > B`), `years` (applied to the season year:
//! with a wrapping window a January sample belongs to the season that began
//! the previous year).

use std::collections::{BTreeMap, HashSet};

use rusqlite::types::Value;
use serde::{Deserialize, Serialize};

use super::{Result, Store, StoreError};
use crate::matrix::Unit;
use crate::matrix::assemble::{AssemblyOptions, CountRecord, EventRecord, Records, TaxonRecord};

/// A selection of the store and the shape of the matrix built from it.
///
/// Serialised as JSON for saved selections and stored runs; every field is
/// optional in JSON (missing fields take their defaults).
#[derive(Debug, Clone, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(default)]
pub struct Selection {
    /// Site codes (any of them); empty means every site.
    pub sites: Vec<String>,
    /// Site attribute conditions `(key, value)`: same key OR, different keys AND.
    pub site_where: Vec<(String, String)>,
    /// First date, inclusive (ISO 8601 `YYYY-MM-DD`).
    pub from: Option<String>,
    /// Last date, inclusive (ISO 8601 `YYYY-MM-DD`).
    pub to: Option<String>,
    /// Season years `A..B`, inclusive.
    pub years: Option<(i32, i32)>,
    /// Season window: months `A..B`, inclusive, wrapping the year end when `A > B`.
    pub months: Option<(u32, u32)>,
    /// Protocol code.
    pub protocol: Option<String>,
    /// Roll taxa up to this rank.
    pub rank: Option<String>,
    /// Drop taxa present in fewer rows than this.
    pub min_occurrences: Option<usize>,
    /// What one row is (`None`: not given; means `event`).
    pub unit: Option<Unit>,
    /// Divide pooled counts by pooled effort.
    pub per_effort: bool,
    /// Keep rows with no organisms.
    pub keep_empty: bool,
}

impl Selection {
    /// Combine a saved selection with explicitly given flags.
    ///
    /// The rule, field by field: a flag given explicitly replaces the saved
    /// value; a flag not given keeps it. Lists (`sites`, `site_where`) given
    /// explicitly replace the saved list as a whole (they do not extend it).
    /// The switches `per_effort` and `keep_empty` are on when either side has
    /// them on (a saved switch cannot be turned off by omission).
    pub fn merge(saved: &Selection, explicit: &Selection) -> Selection {
        fn pick<T: Clone>(s: &Option<T>, e: &Option<T>) -> Option<T> {
            e.clone().or_else(|| s.clone())
        }
        Selection {
            sites: if explicit.sites.is_empty() {
                saved.sites.clone()
            } else {
                explicit.sites.clone()
            },
            site_where: if explicit.site_where.is_empty() {
                saved.site_where.clone()
            } else {
                explicit.site_where.clone()
            },
            from: pick(&saved.from, &explicit.from),
            to: pick(&saved.to, &explicit.to),
            years: pick(&saved.years, &explicit.years),
            months: pick(&saved.months, &explicit.months),
            protocol: pick(&saved.protocol, &explicit.protocol),
            rank: pick(&saved.rank, &explicit.rank),
            min_occurrences: pick(&saved.min_occurrences, &explicit.min_occurrences),
            unit: pick(&saved.unit, &explicit.unit),
            per_effort: saved.per_effort || explicit.per_effort,
            keep_empty: saved.keep_empty || explicit.keep_empty,
        }
    }

    /// Check every field and bring dates to the canonical `YYYY-MM-DD` form.
    ///
    /// # Errors
    /// [`StoreError::Refused`] naming the flag and what was expected.
    pub fn validate(&mut self) -> Result<()> {
        let refuse = |m: String| Err(StoreError::Refused(m));
        for (flag, d) in [("--from", &mut self.from), ("--to", &mut self.to)] {
            if let Some(text) = d {
                match chrono::NaiveDate::parse_from_str(text.trim(), "%Y-%m-%d") {
                    Ok(date) => *text = date.format("%Y-%m-%d").to_string(),
                    Err(_) => {
                        return refuse(format!(
                            "{flag} '{text}': expected an ISO 8601 date YYYY-MM-DD"
                        ));
                    }
                }
            }
        }
        if let (Some(f), Some(t)) = (&self.from, &self.to)
            && f > t
        {
            return refuse(format!("--from {f} is after --to {t}"));
        }
        if let Some((a, b)) = self.years {
            if a > b {
                return refuse(format!(
                    "--years {a}..{b}: the first year is after the last"
                ));
            }
            if !(0..=9998).contains(&a) || !(0..=9998).contains(&b) {
                return refuse(format!(
                    "--years {a}..{b}: years must be between 0 and 9998"
                ));
            }
        }
        if let Some((a, b)) = self.months
            && (!(1..=12).contains(&a) || !(1..=12).contains(&b))
        {
            return refuse(format!("--months {a}..{b}: months are 1 to 12"));
        }
        if self.min_occurrences == Some(0) {
            return refuse("--min-occurrences must be at least 1".into());
        }
        if self.sites.iter().any(|s| s.is_empty()) {
            return refuse("--site: empty site code".into());
        }
        if self.site_where.iter().any(|(k, _)| k.is_empty()) {
            return refuse("--site-where: empty attribute key (expected KEY=VALUE)".into());
        }
        if self.rank.as_deref().is_some_and(|r| r.trim().is_empty()) {
            return refuse("--rank: empty rank".into());
        }
        Ok(())
    }

    /// The unit of a row (`event` when none was given).
    pub fn unit(&self) -> Unit {
        self.unit.unwrap_or_default()
    }

    /// The assembly part of the selection.
    pub fn assembly_options(&self) -> AssemblyOptions {
        AssemblyOptions {
            unit: self.unit(),
            months: self.months,
            rank: self.rank.clone(),
            min_occurrences: self.min_occurrences,
            per_effort: self.per_effort,
            keep_empty: self.keep_empty,
        }
    }

    /// The row filters in order, each with its SQL fragment over `event e`
    /// and its bound parameters.
    fn filters(&self) -> Vec<Filter> {
        let mut out = Vec::new();
        if !self.sites.is_empty() {
            let marks = vec!["?"; self.sites.len()].join(", ");
            out.push(Filter {
                name: format!("--site {}", self.sites.join(",")),
                sql: format!("e.site_id IN (SELECT id FROM site WHERE code IN ({marks}))"),
                params: self.sites.iter().map(|s| Value::Text(s.clone())).collect(),
            });
        }
        let mut by_key: BTreeMap<&str, Vec<&str>> = BTreeMap::new();
        for (k, v) in &self.site_where {
            let vals = by_key.entry(k.as_str()).or_default();
            if !vals.contains(&v.as_str()) {
                vals.push(v.as_str());
            }
        }
        for (k, vals) in by_key {
            let marks = vec!["?"; vals.len()].join(", ");
            let mut params = vec![Value::Text(k.to_string())];
            params.extend(vals.iter().map(|v| Value::Text(v.to_string())));
            out.push(Filter {
                name: format!("--site-where {k}={}", vals.join("|")),
                sql: format!("e.site_id IN (SELECT site_id FROM site_attribute WHERE key = ? AND value IN ({marks}))"),
                params,
            });
        }
        if let Some(p) = &self.protocol {
            out.push(Filter {
                name: format!("--protocol {p}"),
                sql: "e.protocol_id IN (SELECT id FROM protocol WHERE code = ?)".into(),
                params: vec![Value::Text(p.clone())],
            });
        }
        if let Some(f) = &self.from {
            out.push(Filter {
                name: format!("--from {f}"),
                sql: "e.date >= ?".into(),
                params: vec![Value::Text(f.clone())],
            });
        }
        if let Some(t) = &self.to {
            out.push(Filter {
                name: format!("--to {t}"),
                sql: "e.date <= ?".into(),
                params: vec![Value::Text(t.clone())],
            });
        }
        let month = "CAST(substr(e.date, 6, 2) AS INTEGER)";
        if let Some((a, b)) = self.months {
            let sql = if a <= b {
                format!("{month} BETWEEN ? AND ?")
            } else {
                format!("({month} >= ? OR {month} <= ?)")
            };
            out.push(Filter {
                name: format!("--months {a}..{b}"),
                sql,
                params: vec![Value::Integer(a.into()), Value::Integer(b.into())],
            });
        }
        if let Some((y0, y1)) = self.years {
            // Season year y: from y-01-01 to y-12-31, or with a wrapping window
            // a..b from y-a-01 to (y+1)-b-end. Combined with the months filter
            // this date range is exact and can use the date index.
            let (lo, hi) = match self.months {
                Some((a, b)) if a > b => (
                    format!("{y0:04}-{a:02}-01"),
                    format!("{:04}-{:02}-01", y1 + 1, b + 1),
                ),
                _ => (format!("{y0:04}-01-01"), format!("{:04}-01-01", y1 + 1)),
            };
            out.push(Filter {
                name: format!("--years {y0}..{y1}"),
                sql: "e.date >= ? AND e.date < ?".into(),
                params: vec![Value::Text(lo), Value::Text(hi)],
            });
        }
        out
    }
}

/// One row filter: its flag as the user wrote it, SQL over `event e`, parameters.
struct Filter {
    name: String,
    sql: String,
    params: Vec<Value>,
}

fn where_clause(filters: &[Filter]) -> (String, Vec<Value>) {
    if filters.is_empty() {
        return (String::new(), Vec::new());
    }
    let sql = format!(
        " WHERE {}",
        filters
            .iter()
            .map(|f| format!("({})", f.sql))
            .collect::<Vec<_>>()
            .join(" AND ")
    );
    let params = filters
        .iter()
        .flat_map(|f| f.params.iter().cloned())
        .collect();
    (sql, params)
}

impl Store {
    /// The plain rows of a selection: events passing every filter, their
    /// counts, the whole taxonomy and the attributes of the selected sites.
    ///
    /// # Errors
    /// [`StoreError::Refused`] for an invalid selection;
    /// [`StoreError::NotFound`] for an unknown site or protocol code;
    /// [`StoreError::EmptySelection`] naming the filter after which no event
    /// was left; SQLite errors.
    pub fn select_records(&self, selection: &Selection) -> Result<Records> {
        let mut sel = selection.clone();
        sel.validate()?;
        let conn = self.conn();
        for code in &sel.sites {
            let n: i64 =
                conn.query_row("SELECT count(*) FROM site WHERE code = ?", [code], |r| {
                    r.get(0)
                })?;
            if n == 0 {
                return Err(StoreError::NotFound {
                    what: "site",
                    name: code.clone(),
                });
            }
        }
        if let Some(p) = &sel.protocol {
            let n: i64 =
                conn.query_row("SELECT count(*) FROM protocol WHERE code = ?", [p], |r| {
                    r.get(0)
                })?;
            if n == 0 {
                return Err(StoreError::NotFound {
                    what: "protocol",
                    name: p.clone(),
                });
            }
        }
        let filters = sel.filters();
        let (wh, params) = where_clause(&filters);

        let mut events = Vec::new();
        {
            let sql = format!(
                "SELECT e.id, e.code, s.code, e.date, p.code, e.effort, p.effort_unit \
                 FROM event e JOIN site s ON s.id = e.site_id JOIN protocol p ON p.id = e.protocol_id{wh}"
            );
            let mut stmt = conn.prepare(&sql)?;
            let mut rows = stmt.query(rusqlite::params_from_iter(params.iter()))?;
            while let Some(r) = rows.next()? {
                events.push(EventRecord {
                    id: r.get(0)?,
                    code: r.get(1)?,
                    site: r.get(2)?,
                    date: r.get(3)?,
                    protocol: r.get(4)?,
                    effort: r.get(5)?,
                    effort_unit: r.get(6)?,
                });
            }
        }
        if events.is_empty() {
            return Err(self.diagnose_empty(&filters)?);
        }

        let mut counts = Vec::new();
        {
            let sql = format!(
                "SELECT c.event_id, c.taxon_id, c.value FROM event e JOIN count c ON c.event_id = e.id{wh}"
            );
            let mut stmt = conn.prepare(&sql)?;
            let mut rows = stmt.query(rusqlite::params_from_iter(params.iter()))?;
            while let Some(r) = rows.next()? {
                counts.push(CountRecord {
                    event_id: r.get(0)?,
                    taxon_id: r.get(1)?,
                    value: r.get(2)?,
                });
            }
        }

        let mut taxa = Vec::new();
        {
            let mut stmt = conn
                .prepare("SELECT id, name, rank, parent_id, accepted_id FROM taxon ORDER BY id")?;
            let mut rows = stmt.query([])?;
            while let Some(r) = rows.next()? {
                taxa.push(TaxonRecord {
                    id: r.get(0)?,
                    name: r.get(1)?,
                    rank: r.get(2)?,
                    parent_id: r.get(3)?,
                    accepted_id: r.get(4)?,
                });
            }
        }

        let sites: HashSet<&str> = events.iter().map(|e| e.site.as_str()).collect();
        let mut site_attributes: BTreeMap<String, BTreeMap<String, String>> = BTreeMap::new();
        {
            let mut stmt = conn.prepare(
                "SELECT s.code, a.key, a.value FROM site_attribute a JOIN site s ON s.id = a.site_id ORDER BY 1, 2",
            )?;
            let mut rows = stmt.query([])?;
            while let Some(r) = rows.next()? {
                let code: String = r.get(0)?;
                if sites.contains(code.as_str()) {
                    site_attributes
                        .entry(code)
                        .or_default()
                        .insert(r.get(1)?, r.get(2)?);
                }
            }
        }
        Ok(Records {
            events,
            counts,
            taxa,
            site_attributes,
        })
    }

    /// Find the first filter after which no event is left.
    fn diagnose_empty(&self, filters: &[Filter]) -> Result<StoreError> {
        let total: i64 = self
            .conn()
            .query_row("SELECT count(*) FROM event", [], |r| r.get(0))?;
        if total == 0 {
            return Ok(StoreError::EmptySelection {
                filter: "(none)".into(),
                matched_before: 0,
            });
        }
        let mut before = total;
        for k in 0..filters.len() {
            let (wh, params) = where_clause(&filters[..=k]);
            let n: i64 = self.conn().query_row(
                &format!("SELECT count(*) FROM event e{wh}"),
                rusqlite::params_from_iter(params.iter()),
                |r| r.get(0),
            )?;
            if n == 0 {
                return Ok(StoreError::EmptySelection {
                    filter: filters[k].name.clone(),
                    matched_before: usize::try_from(before).unwrap_or(0),
                });
            }
            before = n;
        }
        Ok(StoreError::Refused("the selection is empty".into()))
    }
}
