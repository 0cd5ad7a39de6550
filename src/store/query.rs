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
    /// With `rank`, leave out the taxa recorded above it
    /// (`--identified-only`). Not written to JSON when off, so selections
    /// saved and runs stored before the flag read and replay unchanged.
    #[serde(skip_serializing_if = "std::ops::Not::not")]
    pub identified_only: bool,
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
    /// The switches `identified_only`, `per_effort` and `keep_empty` are on
    /// when either side has them on (a saved switch cannot be turned off by
    /// omission).
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
            identified_only: saved.identified_only || explicit.identified_only,
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
                        return refuse(date_problem(flag, text));
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
        if self.identified_only && self.rank.is_none() {
            return refuse(
                "--identified-only needs --rank RANK: a taxon is unidentified only with respect \
                 to the rank a matrix is rolled up to"
                    .into(),
            );
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
            identified_only: self.identified_only,
            per_effort: self.per_effort,
            keep_empty: self.keep_empty,
        }
    }

    /// The selection written back as command-line flags (`--protocol kick --unit
    /// site-year`), for listings, stored results and report provenance.
    pub fn to_flags(&self) -> String {
        let mut f: Vec<String> = Vec::new();
        for s in &self.sites {
            f.push(format!("--site {s}"));
        }
        for (k, v) in &self.site_where {
            f.push(format!("--site-where {k}={v}"));
        }
        if let Some(d) = &self.from {
            f.push(format!("--from {d}"));
        }
        if let Some(d) = &self.to {
            f.push(format!("--to {d}"));
        }
        if let Some((a, b)) = self.years {
            f.push(format!("--years {a}..{b}"));
        }
        if let Some((a, b)) = self.months {
            f.push(format!("--months {a}..{b}"));
        }
        if let Some(p) = &self.protocol {
            f.push(format!("--protocol {p}"));
        }
        if let Some(r) = &self.rank {
            f.push(format!("--rank {r}"));
        }
        if let Some(n) = self.min_occurrences {
            f.push(format!("--min-occurrences {n}"));
        }
        if self.identified_only {
            f.push("--identified-only".into());
        }
        if let Some(u) = self.unit {
            f.push(format!("--unit {}", u.as_str()));
        }
        if self.per_effort {
            f.push("--per-effort".into());
        }
        if self.keep_empty {
            f.push("--keep-empty".into());
        }
        f.join(" ")
    }

    /// The selection in plain words for listings (`reach=lower, kick, years
    /// 2010–2020, per site and year, per effort`); `whole store` when nothing
    /// was given.
    pub fn in_words(&self) -> String {
        let mut w: Vec<String> = Vec::new();
        for (k, v) in &self.site_where {
            w.push(format!("{k}={v}"));
        }
        if !self.sites.is_empty() {
            w.push(format!("sites {}", self.sites.join(", ")));
        }
        if let Some(p) = &self.protocol {
            w.push(p.clone());
        }
        if let Some((a, b)) = self.years {
            w.push(format!("years {a}–{b}"));
        }
        match (&self.from, &self.to) {
            (Some(a), Some(b)) => w.push(format!("{a} to {b}")),
            (Some(a), None) => w.push(format!("from {a}")),
            (None, Some(b)) => w.push(format!("to {b}")),
            (None, None) => {}
        }
        if let Some((a, b)) = self.months {
            w.push(format!("months {a}–{b}"));
        }
        if let Some(r) = &self.rank {
            w.push(format!("at {r} rank"));
        }
        if let Some(n) = self.min_occurrences {
            w.push(format!("taxa in at least {n} rows"));
        }
        if self.identified_only {
            w.push("identified taxa only".into());
        }
        if let Some(u) = self.unit {
            w.push(
                match u {
                    Unit::Event => "per event",
                    Unit::SiteYear => "per site and year",
                    Unit::SiteSeason => "per site and season",
                    Unit::Site => "per site",
                }
                .to_string(),
            );
        }
        if self.per_effort {
            w.push("per effort".into());
        }
        if self.keep_empty {
            w.push("empty rows kept".into());
        }
        if w.is_empty() {
            "whole store".into()
        } else {
            w.join(", ")
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
                // The value in force on the event's date (`matrix::value_on`):
                // the latest value of the key from on or before the date.
                sql: format!(
                    "(SELECT a.value FROM site_attribute a WHERE a.site_id = e.site_id AND a.key = ? \
                     AND a.valid_from <= e.date ORDER BY a.valid_from DESC LIMIT 1) IN ({marks})"
                ),
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
    /// [`StoreError::Refused`] for an invalid selection, an unknown site or
    /// protocol code, or a `--site-where` key or value no site has (each naming
    /// what exists and the closest);
    /// [`StoreError::EmptySelection`] naming the filter after which no event
    /// was left; SQLite errors.
    pub fn select_records(&self, selection: &Selection) -> Result<Records> {
        let conn = self.conn();
        let (wh, params) = self.event_filter(selection)?;
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
        let mut site_attributes = self.attribute_histories()?;
        site_attributes.retain(|code, _| sites.contains(code.as_str()));
        Ok(Records {
            events,
            counts,
            taxa,
            site_attributes,
        })
    }

    /// The `WHERE` clause (over `event e`) and bound parameters of the row
    /// filters of `selection`, after checking the selection: a site, protocol
    /// or `--site-where` key or value the store lacks is refused, naming what
    /// exists; a selection that matches no event is refused, naming the filter
    /// that emptied it.
    ///
    /// # Errors
    /// As [`Store::select_records`].
    pub(crate) fn event_filter(&self, selection: &Selection) -> Result<(String, Vec<Value>)> {
        let mut sel = selection.clone();
        sel.validate()?;
        let conn = self.conn();
        for code in &sel.sites {
            let n: i64 =
                conn.query_row("SELECT count(*) FROM site WHERE code = ?", [code], |r| {
                    r.get(0)
                })?;
            if n == 0 {
                let codes = self.codes("SELECT code FROM site ORDER BY code")?;
                return Err(StoreError::Refused(format!(
                    "--site {code}: no such site{} (`tally summary` lists the sites)",
                    known("sites", &codes, code)
                )));
            }
        }
        if let Some(p) = &sel.protocol {
            let n: i64 =
                conn.query_row("SELECT count(*) FROM protocol WHERE code = ?", [p], |r| {
                    r.get(0)
                })?;
            if n == 0 {
                let codes = self.codes("SELECT code FROM protocol ORDER BY code")?;
                return Err(StoreError::Refused(format!(
                    "--protocol {p}: no such protocol{}",
                    known("protocols", &codes, p)
                )));
            }
        }
        self.check_site_where(&sel.site_where)?;
        let filters = sel.filters();
        let (wh, params) = where_clause(&filters);
        let n: i64 = conn.query_row(
            &format!("SELECT count(*) FROM event e{wh}"),
            rusqlite::params_from_iter(params.iter()),
            |r| r.get(0),
        )?;
        if n == 0 {
            return Err(self.diagnose_empty(&filters)?);
        }
        Ok((wh, params))
    }

    /// The first column of every row of `sql` (no parameters).
    fn codes(&self, sql: &str) -> Result<Vec<String>> {
        let mut stmt = self.conn().prepare(sql)?;
        let rows = stmt
            .query_map([], |r| r.get::<_, String>(0))?
            .collect::<rusqlite::Result<Vec<String>>>()?;
        Ok(rows)
    }

    /// Refuse a `--site-where` key that no site has, or a value no site has for
    /// its key, naming the ones that exist and the closest.
    fn check_site_where(&self, pairs: &[(String, String)]) -> Result<()> {
        let conn = self.conn();
        let list = |sql: &str, arg: Option<&str>| -> Result<Vec<String>> {
            let mut stmt = conn.prepare(sql)?;
            let rows: rusqlite::Result<Vec<String>> = match arg {
                Some(a) => stmt.query_map([a], |r| r.get::<_, String>(0))?.collect(),
                None => stmt.query_map([], |r| r.get::<_, String>(0))?.collect(),
            };
            Ok(rows?)
        };
        for (k, v) in pairs {
            let keys = list("SELECT DISTINCT key FROM site_attribute ORDER BY key", None)?;
            if !keys.contains(k) {
                return Err(StoreError::Refused(format!(
                    "--site-where {k}={v}: no site has the attribute '{k}'{}",
                    known("attributes", &keys, k)
                )));
            }
            let values = list(
                "SELECT DISTINCT value FROM site_attribute WHERE key = ? ORDER BY value",
                Some(k),
            )?;
            if !values.contains(v) {
                return Err(StoreError::Refused(format!(
                    "--site-where {k}={v}: no site has {k} = '{v}'{}",
                    known(&format!("values of {k}"), &values, v)
                )));
            }
        }
        Ok(())
    }

    /// Find the first filter after which no event is left.
    fn diagnose_empty(&self, filters: &[Filter]) -> Result<StoreError> {
        let total: i64 = self
            .conn()
            .query_row("SELECT count(*) FROM event", [], |r| r.get(0))?;
        if total == 0 {
            return Ok(StoreError::Refused(
                "the selection is empty: the store holds no events yet (import events first)"
                    .into(),
            ));
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

/// "; attributes: a, b, c (closest: 'b')": what exists instead of `wrong`, at
/// most 12 names, with the closest by Jaro–Winkler similarity when it is close.
fn known(what: &str, names: &[String], wrong: &str) -> String {
    if names.is_empty() {
        return format!("; the store has no {what} yet");
    }
    let shown: Vec<&str> = names.iter().take(12).map(String::as_str).collect();
    let more = if names.len() > shown.len() {
        format!(" and {} more", names.len() - shown.len())
    } else {
        String::new()
    };
    let closest = names
        .iter()
        .map(|n| {
            (
                strsim::jaro_winkler(&n.to_lowercase(), &wrong.to_lowercase()),
                n,
            )
        })
        .filter(|(score, _)| *score >= 0.8)
        .max_by(|a, b| a.0.total_cmp(&b.0))
        .map(|(_, n)| format!(" (closest: '{n}')"))
        .unwrap_or_default();
    format!("; {what}: {}{more}{closest}", shown.join(", "))
}

/// Why `text` is not a date of `flag`: a well-formed date that does not exist
/// (2020-02-30) is named as such, with the last day of its month; anything else
/// is a format problem.
fn date_problem(flag: &str, text: &str) -> String {
    let parts: Vec<&str> = text.trim().split('-').collect();
    if let [y, m, d] = parts[..]
        && y.len() == 4
        && m.len() == 2
        && d.len() == 2
        && let (Ok(y), Ok(m), Ok(d)) = (y.parse::<i32>(), m.parse::<u32>(), d.parse::<u32>())
    {
        if !(1..=12).contains(&m) {
            return format!("{flag} '{text}': there is no month {m}; months run from 01 to 12");
        }
        let last = (28..=31)
            .rev()
            .find(|&day| chrono::NaiveDate::from_ymd_opt(y, m, day).is_some())
            .unwrap_or(28);
        if d == 0 || d > last {
            return format!(
                "{flag} '{text}': that day does not exist ({y}-{m:02} has {last} days)"
            );
        }
    }
    format!("{flag} '{text}': expected an ISO 8601 date YYYY-MM-DD")
}

#[cfg(test)]
mod tests {
    //! A hand-built store of three sites, two protocols, eight taxa (one
    //! synonym) and ten events. Every expected matrix below is written out by
    //! hand from the inserted rows (sums and quotients done on paper), not
    //! computed by tally.
    use super::*;
    use crate::matrix::CountMatrix;
    use crate::matrix::MatrixError;
    use crate::matrix::assemble::assemble;
    use crate::store::testing::{add_count, add_event, add_protocol, add_site, add_taxon};

    fn fixture() -> Store {
        let s = Store::open_in_memory().unwrap();
        add_protocol(&s, "kick", "minutes").unwrap();
        add_protocol(&s, "quadrat", "m2").unwrap();
        add_site(&s, "S1", &[("reach", "lower"), ("habitat", "riffle")]).unwrap();
        add_site(&s, "S2", &[("reach", "lower"), ("habitat", "pool")]).unwrap();
        add_site(&s, "S3", &[("reach", "upper"), ("habitat", "riffle")]).unwrap();
        add_taxon(&s, "Insecta", "class", None, None).unwrap();
        add_taxon(&s, "Baetidae", "family", Some("Insecta"), None).unwrap();
        add_taxon(&s, "Baetis", "genus", Some("Baetidae"), None).unwrap();
        add_taxon(&s, "Heptageniidae", "family", Some("Insecta"), None).unwrap();
        add_taxon(&s, "Rhithrogena", "genus", Some("Heptageniidae"), None).unwrap();
        add_taxon(&s, "Ecdyonurus", "genus", Some("Heptageniidae"), None).unwrap();
        add_taxon(&s, "Oldname", "genus", None, Some("Ecdyonurus")).unwrap();
        add_taxon(&s, "Oligochaeta", "class", None, None).unwrap();
        type EventRow<'a> = (
            &'a str,
            &'a str,
            &'a str,
            &'a str,
            f64,
            &'a [(&'a str, f64)],
        );
        let events: &[EventRow] = &[
            (
                "E1",
                "S1",
                "2015-04-10",
                "kick",
                3.0,
                &[("Baetis", 10.0), ("Rhithrogena", 2.0), ("Oldname", 4.0)],
            ),
            (
                "E2",
                "S1",
                "2015-05-12",
                "kick",
                2.0,
                &[("Baetis", 6.0), ("Ecdyonurus", 1.0)],
            ),
            (
                "E3",
                "S1",
                "2015-10-01",
                "kick",
                3.0,
                &[("Baetis", 3.0), ("Oligochaeta", 5.0)],
            ),
            (
                "E4",
                "S1",
                "2016-04-11",
                "kick",
                4.0,
                &[("Ecdyonurus", 8.0)],
            ),
            (
                "E5",
                "S2",
                "2015-04-20",
                "kick",
                3.0,
                &[("Baetis", 1.0), ("Oligochaeta", 2.0)],
            ),
            (
                "E6",
                "S2",
                "2015-11-20",
                "kick",
                3.0,
                &[("Rhithrogena", 7.0)],
            ),
            (
                "E7",
                "S2",
                "2016-01-15",
                "kick",
                2.0,
                &[("Rhithrogena", 3.0), ("Baetis", 2.0)],
            ),
            ("E8", "S2", "2016-02-20", "kick", 1.0, &[]),
            ("E9", "S3", "2015-04-15", "quadrat", 0.5, &[("Baetis", 4.0)]),
            ("E10", "S3", "2016-12-05", "kick", 3.0, &[("Oldname", 2.0)]),
        ];
        for (code, site, date, proto, effort, counts) in events {
            add_event(&s, code, site, date, proto, *effort).unwrap();
            for (t, v) in *counts {
                add_count(&s, code, t, *v).unwrap();
            }
        }
        s
    }

    fn build(s: &Store, sel: &Selection) -> std::result::Result<CountMatrix, MatrixError> {
        assemble(&s.select_records(sel).unwrap(), &sel.assembly_options())
    }

    fn labels(m: &CountMatrix) -> Vec<&str> {
        m.samples.iter().map(|s| s.label.as_str()).collect()
    }

    fn taxa(m: &CountMatrix) -> Vec<&str> {
        m.taxa.iter().map(|t| t.name.as_str()).collect()
    }

    fn rows(m: &CountMatrix) -> Vec<Vec<f64>> {
        (0..m.values.nrows())
            .map(|i| m.values.row(i).iter().copied().collect())
            .collect()
    }

    fn assert_rows_close(m: &CountMatrix, expected: &[&[f64]]) {
        let got = rows(m);
        assert_eq!(got.len(), expected.len(), "{got:?}");
        for (g, e) in got.iter().zip(expected) {
            assert_eq!(g.len(), e.len());
            for (a, b) in g.iter().zip(e.iter()) {
                assert!((a - b).abs() < 1e-12, "{got:?} vs {expected:?}");
            }
        }
    }

    #[test]
    fn events_with_synonym_resolved_and_empty_event_dropped() {
        let s = fixture();
        let m = build(&s, &Selection::default()).unwrap();
        assert_eq!(
            taxa(&m),
            ["Baetis", "Ecdyonurus", "Oligochaeta", "Rhithrogena"]
        );
        assert_eq!(
            labels(&m),
            ["E1", "E2", "E3", "E4", "E5", "E6", "E7", "E9", "E10"]
        );
        // E1 recorded Oldname 4, a synonym of Ecdyonurus: it counts under Ecdyonurus.
        assert_eq!(
            rows(&m),
            vec![
                vec![10.0, 4.0, 0.0, 2.0],
                vec![6.0, 1.0, 0.0, 0.0],
                vec![3.0, 0.0, 5.0, 0.0],
                vec![0.0, 8.0, 0.0, 0.0],
                vec![1.0, 0.0, 2.0, 0.0],
                vec![0.0, 0.0, 0.0, 7.0],
                vec![2.0, 0.0, 0.0, 3.0],
                vec![4.0, 0.0, 0.0, 0.0],
                vec![0.0, 2.0, 0.0, 0.0],
            ]
        );
        assert!(m.notes.iter().any(|n| n.contains("Oldname -> Ecdyonurus")));
        assert!(
            m.notes
                .iter()
                .any(|n| n.starts_with("warning") && n.contains("E8")),
            "{:?}",
            m.notes
        );
        let e1 = &m.samples[0];
        assert_eq!(
            (e1.site.as_str(), e1.year, e1.season.as_deref()),
            ("S1", 2015, Some("spring"))
        );
        assert_eq!(
            e1.attributes.get("reach").map(String::as_str),
            Some("lower")
        );
        assert_eq!(
            (e1.effort, e1.effort_unit.as_str(), e1.events_pooled),
            (3.0, "minutes", 1)
        );
    }

    #[test]
    fn keep_empty_keeps_the_all_zero_event() {
        let s = fixture();
        let sel = Selection {
            site_where: vec![("habitat".into(), "pool".into())],
            keep_empty: true,
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        assert_eq!(labels(&m), ["E5", "E6", "E7", "E8"]);
        assert_eq!(taxa(&m), ["Baetis", "Oligochaeta", "Rhithrogena"]);
        assert_eq!(rows(&m)[3], vec![0.0, 0.0, 0.0]);
    }

    #[test]
    fn roll_up_to_family_keeps_taxa_without_such_ancestor() {
        let s = fixture();
        let sel = Selection {
            rank: Some("family".into()),
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        // Oligochaeta is a class, above family: its own column, marked.
        assert_eq!(
            taxa(&m),
            ["Baetidae", "Heptageniidae", "Oligochaeta (unidentified)"]
        );
        assert_eq!(
            rows(&m),
            vec![
                vec![10.0, 6.0, 0.0],
                vec![6.0, 1.0, 0.0],
                vec![3.0, 0.0, 5.0],
                vec![0.0, 8.0, 0.0],
                vec![1.0, 0.0, 2.0],
                vec![0.0, 7.0, 0.0],
                vec![2.0, 3.0, 0.0],
                vec![4.0, 0.0, 0.0],
                vec![0.0, 2.0, 0.0],
            ]
        );
        assert!(
            m.notes.iter().any(
                |n| n.contains("above rank family") && n.contains("Oligochaeta (unidentified)")
            )
        );
        let bad = Selection {
            rank: Some("species".into()),
            ..Default::default()
        };
        assert!(matches!(
            build(&s, &bad),
            Err(MatrixError::UnknownRank { .. })
        ));
    }

    #[test]
    fn site_year_pools_counts_and_effort() {
        let s = fixture();
        let sel = Selection {
            protocol: Some("kick".into()),
            unit: Some(Unit::SiteYear),
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        assert_eq!(
            labels(&m),
            ["S1/2015", "S1/2016", "S2/2015", "S2/2016", "S3/2016"]
        );
        assert_eq!(
            taxa(&m),
            ["Baetis", "Ecdyonurus", "Oligochaeta", "Rhithrogena"]
        );
        assert_eq!(
            rows(&m),
            vec![
                vec![19.0, 5.0, 5.0, 2.0],
                vec![0.0, 8.0, 0.0, 0.0],
                vec![1.0, 0.0, 2.0, 7.0],
                vec![2.0, 0.0, 0.0, 3.0],
                vec![0.0, 2.0, 0.0, 0.0],
            ]
        );
        let pooled: Vec<(usize, f64)> = m
            .samples
            .iter()
            .map(|s| (s.events_pooled, s.effort))
            .collect();
        assert_eq!(pooled, [(3, 8.0), (1, 4.0), (2, 6.0), (2, 3.0), (1, 3.0)]);
        assert_eq!(
            (
                m.samples[0].first_date.as_str(),
                m.samples[0].last_date.as_str()
            ),
            ("2015-04-10", "2015-10-01")
        );
        assert_eq!(m.samples[0].season, None);
    }

    #[test]
    fn per_effort_divides_pooled_counts_by_pooled_effort() {
        let s = fixture();
        let sel = Selection {
            protocol: Some("kick".into()),
            unit: Some(Unit::SiteYear),
            per_effort: true,
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        // S1/2015: (19, 5, 5, 2) / 8 minutes; S2/2015: (1, 0, 2, 7) / 6; S2/2016: (2, 0, 0, 3) / 3.
        assert_rows_close(
            &m,
            &[
                &[2.375, 0.625, 0.625, 0.25],
                &[0.0, 2.0, 0.0, 0.0],
                &[1.0 / 6.0, 0.0, 2.0 / 6.0, 7.0 / 6.0],
                &[2.0 / 3.0, 0.0, 0.0, 1.0],
                &[0.0, 2.0 / 3.0, 0.0, 0.0],
            ],
        );
        // Without --protocol the quadrat event (m2) joins the kick events (minutes).
        let mixed = Selection {
            protocol: None,
            ..sel
        };
        assert_eq!(
            build(&s, &mixed),
            Err(MatrixError::MixedEffortUnits {
                units: vec!["m2".into(), "minutes".into()]
            })
        );
    }

    #[test]
    fn site_season_uses_meteorological_seasons() {
        let s = fixture();
        let sel = Selection {
            protocol: Some("kick".into()),
            unit: Some(Unit::SiteSeason),
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        assert_eq!(
            labels(&m),
            [
                "S1/2015-spring",
                "S1/2015-autumn",
                "S1/2016-spring",
                "S2/2015-spring",
                "S2/2015-autumn",
                "S2/2015-winter",
                "S3/2016-winter"
            ]
        );
        assert_eq!(
            rows(&m),
            vec![
                vec![16.0, 5.0, 0.0, 2.0],
                vec![3.0, 0.0, 5.0, 0.0],
                vec![0.0, 8.0, 0.0, 0.0],
                vec![1.0, 0.0, 2.0, 0.0],
                vec![0.0, 0.0, 0.0, 7.0],
                vec![2.0, 0.0, 0.0, 3.0],
                vec![0.0, 2.0, 0.0, 0.0],
            ]
        );
        // January and February 2016 belong to the winter that began in December 2015.
        let w = &m.samples[5];
        assert_eq!(
            (w.year, w.events_pooled, w.season.as_deref()),
            (2015, 2, Some("winter"))
        );
    }

    #[test]
    fn site_unit_pools_everything_and_flags_mixed_effort() {
        let s = fixture();
        let sel = Selection {
            unit: Some(Unit::Site),
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        assert_eq!(labels(&m), ["S1", "S2", "S3"]);
        assert_eq!(
            rows(&m),
            vec![
                vec![19.0, 13.0, 5.0, 2.0],
                vec![3.0, 0.0, 2.0, 10.0],
                vec![4.0, 2.0, 0.0, 0.0]
            ]
        );
        let s3 = &m.samples[2];
        assert!(s3.effort.is_nan());
        assert_eq!(
            (s3.protocol.as_str(), s3.effort_unit.as_str()),
            ("kick+quadrat", "m2+minutes")
        );
        assert_eq!((m.samples[0].year, m.samples[0].last_year), (2015, 2016));
        assert!(matches!(
            m.field_values("year"),
            Err(MatrixError::FieldUnavailable { .. })
        ));
    }

    #[test]
    fn wrapped_window_assigns_january_to_the_previous_season_year() {
        let s = fixture();
        let sel = Selection {
            months: Some((11, 2)),
            unit: Some(Unit::SiteYear),
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        // E6 2015-11-20, E7 2016-01-15, E8 2016-02-20 -> S2 season 2015; E10 2016-12-05 -> S3 season 2016.
        assert_eq!(labels(&m), ["S2/2015", "S3/2016"]);
        assert_eq!(taxa(&m), ["Baetis", "Ecdyonurus", "Rhithrogena"]);
        assert_eq!(rows(&m), vec![vec![2.0, 0.0, 10.0], vec![0.0, 2.0, 0.0]]);
        assert_eq!(m.samples[0].events_pooled, 3);
        assert_eq!(m.samples[0].season.as_deref(), Some("11..02"));

        let y2016 = Selection {
            years: Some((2016, 2016)),
            ..sel.clone()
        };
        let m = build(&s, &y2016).unwrap();
        assert_eq!(labels(&m), ["S3/2016"]);
        assert_eq!(rows(&m), vec![vec![2.0]]);

        let y2015 = Selection {
            years: Some((2015, 2015)),
            unit: Some(Unit::Event),
            ..sel
        };
        let m = build(&s, &y2015).unwrap();
        assert_eq!(labels(&m), ["E6", "E7"]);
        assert!(m.samples.iter().all(|x| x.year == 2015));
    }

    #[test]
    fn attribute_filters_and_across_keys_or_within_a_key() {
        let s = fixture();
        let sites = |pairs: &[(&str, &str)]| {
            let sel = Selection {
                site_where: pairs
                    .iter()
                    .map(|(k, v)| (k.to_string(), v.to_string()))
                    .collect(),
                unit: Some(Unit::Site),
                ..Default::default()
            };
            build(&s, &sel)
                .unwrap()
                .samples
                .iter()
                .map(|x| x.label.clone())
                .collect::<Vec<_>>()
        };
        assert_eq!(sites(&[("reach", "lower")]), ["S1", "S2"]);
        assert_eq!(sites(&[("reach", "lower"), ("habitat", "riffle")]), ["S1"]);
        assert_eq!(
            sites(&[("habitat", "pool"), ("habitat", "riffle")]),
            ["S1", "S2", "S3"]
        );
        assert_eq!(
            sites(&[
                ("habitat", "pool"),
                ("reach", "upper"),
                ("habitat", "riffle")
            ]),
            ["S3"]
        );
        let named = Selection {
            sites: vec!["S3".into(), "S1".into()],
            unit: Some(Unit::Site),
            ..Default::default()
        };
        assert_eq!(labels(&build(&s, &named).unwrap()), ["S1", "S3"]);
    }

    #[test]
    fn empty_selection_names_the_filter() {
        let s = fixture();
        let empty = |sel: Selection| match s.select_records(&sel) {
            Err(StoreError::EmptySelection {
                filter,
                matched_before,
            }) => (filter, matched_before),
            other => panic!("expected an empty selection, got {other:?}"),
        };
        // A value no site has is refused with the values that exist.
        let sel = Selection {
            site_where: vec![("reach".into(), "middle".into())],
            ..Default::default()
        };
        match s.select_records(&sel) {
            Err(StoreError::Refused(m)) => {
                assert!(m.contains("values of reach: lower, upper"), "{m}");
            }
            other => panic!("expected a refusal, got {other:?}"),
        }
        // Values that exist but leave nothing together name the filter.
        let sel = Selection {
            sites: vec!["S3".into()],
            site_where: vec![("reach".into(), "lower".into())],
            ..Default::default()
        };
        let (filter, before) = empty(sel);
        assert_eq!(filter, "--site-where reach=lower");
        assert!(before > 0);
        let sel = Selection {
            sites: vec!["S1".into()],
            years: Some((2020, 2021)),
            ..Default::default()
        };
        assert_eq!(empty(sel), ("--years 2020..2021".to_string(), 4));
        let sel = Selection {
            protocol: Some("quadrat".into()),
            months: Some((11, 2)),
            ..Default::default()
        };
        assert_eq!(empty(sel), ("--months 11..2".to_string(), 1));
        let sel = Selection {
            from: Some("2016-01-01".into()),
            to: Some("2016-03-31".into()),
            sites: vec!["S1".into()],
            ..Default::default()
        };
        assert_eq!(empty(sel), ("--to 2016-03-31".to_string(), 1));
        let unknown = Selection {
            sites: vec!["S9".into()],
            ..Default::default()
        };
        match s.select_records(&unknown) {
            Err(StoreError::Refused(m)) => {
                assert!(m.contains("no such site; sites: S1, S2, S3"), "{m}");
            }
            other => panic!("expected a refusal, got {other:?}"),
        }
        let bad = Selection {
            from: Some("2016-13-01".into()),
            ..Default::default()
        };
        assert!(matches!(
            s.select_records(&bad),
            Err(StoreError::Refused(_))
        ));
    }

    #[test]
    fn min_occurrences_drops_rare_taxa_then_empty_rows() {
        let s = fixture();
        // Presence in rows: Baetis 6, Ecdyonurus 4, Rhithrogena 3, Oligochaeta 2.
        let sel = Selection {
            min_occurrences: Some(4),
            ..Default::default()
        };
        let m = build(&s, &sel).unwrap();
        assert_eq!(taxa(&m), ["Baetis", "Ecdyonurus"]);
        // E6 held only Rhithrogena and E8 nothing: both are now empty and dropped.
        assert_eq!(
            labels(&m),
            ["E1", "E2", "E3", "E4", "E5", "E7", "E9", "E10"]
        );
        assert!(
            m.notes
                .iter()
                .any(|n| n.contains("Oligochaeta") && n.contains("Rhithrogena"))
        );
        assert!(m.notes.iter().any(|n| n.contains("E6, E8")));
    }

    #[test]
    fn saved_selection_round_trip_and_override_rule() {
        let mut s = fixture();
        let saved = Selection {
            sites: vec!["S1".into(), "S2".into()],
            years: Some((2015, 2016)),
            unit: Some(Unit::SiteYear),
            per_effort: true,
            protocol: Some("kick".into()),
            ..Default::default()
        };
        assert!(!s.save_selection("lower", &saved, false).unwrap());
        assert!(matches!(
            s.save_selection("lower", &saved, false),
            Err(StoreError::Refused(_))
        ));
        assert_eq!(s.selection("lower").unwrap(), saved);
        let explicit = Selection {
            sites: vec!["S3".into()],
            unit: Some(Unit::Event),
            ..Default::default()
        };
        let merged = Selection::merge(&s.selection("lower").unwrap(), &explicit);
        // Explicit lists replace the saved list; explicit values replace saved ones; the rest stays.
        let expected = Selection {
            sites: vec!["S3".into()],
            years: Some((2015, 2016)),
            unit: Some(Unit::Event),
            per_effort: true,
            protocol: Some("kick".into()),
            ..Default::default()
        };
        assert_eq!(merged, expected);
        assert_eq!(s.list_selections().unwrap().len(), 1);
        s.delete_selection("lower").unwrap();
        assert!(matches!(
            s.selection("lower"),
            Err(StoreError::NotFound { .. })
        ));
        assert!(matches!(
            s.save_selection("no spaces", &saved, false),
            Err(StoreError::Refused(_))
        ));
    }

    #[test]
    fn fingerprint_is_stable_and_sensitive_to_one_count() {
        let a = build(&fixture(), &Selection::default()).unwrap();
        let b = build(&fixture(), &Selection::default()).unwrap();
        assert_eq!(a.fingerprint(), b.fingerprint());
        let changed = fixture();
        changed
            .conn()
            .execute("UPDATE count SET value = 11 WHERE value = 10", [])
            .unwrap();
        let c = build(&changed, &Selection::default()).unwrap();
        assert_ne!(a.fingerprint(), c.fingerprint());
    }

    #[test]
    fn field_resolution_lists_available_fields() {
        let m = build(&fixture(), &Selection::default()).unwrap();
        assert_eq!(
            m.field_values("reach").unwrap()[..3],
            ["lower", "lower", "lower"]
        );
        assert_eq!(
            m.field_values("season").unwrap()[..3],
            ["spring", "spring", "autumn"]
        );
        assert_eq!(m.field_numeric("year").unwrap()[3], 2016.0);
        match m.field_values("depth") {
            Err(MatrixError::UnknownField { available, .. }) => {
                assert!(available.iter().any(|a| a == "habitat"));
                assert!(available.iter().any(|a| a == "year"));
            }
            other => panic!("{other:?}"),
        }
        assert!(matches!(
            m.field_numeric("habitat"),
            Err(MatrixError::NotNumeric { .. })
        ));
    }

    #[test]
    fn dates_that_do_not_exist_are_named_as_such() {
        // The Gregorian calendar: 2020 is a leap year, 2019 is not (common practice, no source).
        assert!(date_problem("--from", "2020-02-30").contains("2020-02 has 29 days"));
        assert!(date_problem("--from", "2019-02-29").contains("2019-02 has 28 days"));
        assert!(date_problem("--to", "2021-04-31").contains("30 days"));
        assert!(date_problem("--to", "2021-13-01").contains("no month 13"));
        assert!(date_problem("--to", "20210401").contains("expected an ISO 8601 date"));
    }
}
