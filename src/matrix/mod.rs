//! Count matrices with sample and taxon metadata.
//!
//! A [`CountMatrix`] is what every analysis starts from: one row per sample
//! (an event, or events pooled per site and period), one column per taxon,
//! plus the metadata that `--by`, `--strata` and `--covariate` fields name.
//! Nothing here speaks SQL: the store hands over plain rows
//! ([`assemble::Records`]) and [`assemble::assemble`] builds the matrix.
//!
//! This module owns the matrix types, the unit of a row ([`Unit`]), the one
//! place where a field name resolves to per-row values
//! ([`CountMatrix::field_values`], [`CountMatrix::field_numeric`]) and the
//! matrix fingerprint ([`CountMatrix::fingerprint`]).

use std::collections::{BTreeMap, BTreeSet};

use nalgebra::DMatrix;
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

pub mod assemble;
pub mod error;
pub mod rank;

pub use error::MatrixError;

/// What one row of a matrix is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Unit {
    /// One sampling event per row.
    #[default]
    Event,
    /// Events pooled per site and (season) year.
    SiteYear,
    /// Events pooled per site, season year and season.
    SiteSeason,
    /// Events pooled per site over the whole selection.
    Site,
}

impl Unit {
    /// The name used on the command line and in JSON (`event`, `site-year`, …).
    pub fn as_str(self) -> &'static str {
        match self {
            Unit::Event => "event",
            Unit::SiteYear => "site-year",
            Unit::SiteSeason => "site-season",
            Unit::Site => "site",
        }
    }
}

/// Metadata carried with every row of a count matrix.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SampleMeta {
    /// Row label: the event code with `--unit event`, otherwise site and period
    /// (`S07/2016`, `S07/2016-spring`, `S07/2016-04..05`, or `S07` for `--unit site`).
    pub label: String,
    /// Site code.
    pub site: String,
    /// Site attributes (habitat, reach, …) in force on the dates of the row's
    /// events, key → value. A key whose value changed between the row's events
    /// is not here but in `attribute_changes`.
    pub attributes: BTreeMap<String, String>,
    /// Site attribute keys whose value changed between the events pooled into
    /// the row, key → the change in words (`degraded (events 2014-05-04), then
    /// restored from 2014-06-01 (events 2014-10-06)`). Using such a key
    /// (`--by`, strata, covariates) is refused: the row pools both sides of
    /// the change. Rules in
    /// docs/matrices.md, "Site attributes that change".
    #[serde(skip_serializing_if = "BTreeMap::is_empty")]
    pub attribute_changes: BTreeMap<String, String>,
    /// Year of the sample: the calendar year, except that with a `--months`
    /// window wrapping the year end (and for meteorological winter in
    /// `site-season` rows) it is the year in which the season began. For rows
    /// pooling several years (`--unit site`) the first of them.
    pub year: i32,
    /// Last year pooled into the row (equal to `year` except for `--unit site`).
    pub last_year: i32,
    /// Season name without the year: `spring`, `summer`, `autumn`, `winter`
    /// (meteorological seasons) or the `--months` window (`04..05`). `None` for
    /// rows that pool several seasons (`site-year` or `site` without a window).
    pub season: Option<String>,
    /// First event date (ISO 8601).
    pub first_date: String,
    /// Last event date (ISO 8601).
    pub last_date: String,
    /// Number of events pooled into this row.
    pub events_pooled: usize,
    /// Total effort of the pooled events (NaN when units differ within the row).
    pub effort: f64,
    /// Effort unit (units joined by `+` when several were pooled).
    pub effort_unit: String,
    /// Protocol code (or codes joined by `+` when several were pooled).
    pub protocol: String,
}

/// Metadata of a matrix column.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonMeta {
    /// The column name: the accepted (and, with `--rank`, rolled-up) taxon
    /// name, or for a taxon recorded above the roll-up rank its name followed
    /// by ` (unidentified)` (`Baetis (unidentified)`). Every output, the
    /// fingerprint included, uses this name.
    pub name: String,
    /// Rank of the taxon.
    pub rank: String,
    /// For a column of a taxon recorded above the roll-up rank, the taxon's
    /// own name (`Baetis`); `None` for every other column, whose `name` is the
    /// taxon's name. Rule in docs/matrices.md, "How a matrix is assembled".
    #[serde(skip_serializing_if = "Option::is_none")]
    pub unidentified: Option<String>,
}

impl TaxonMeta {
    /// The suffix of the column name of a taxon recorded above the roll-up rank.
    pub const UNIDENTIFIED: &'static str = " (unidentified)";

    /// The name of the stored taxon behind the column (`Baetis` for the
    /// column `Baetis (unidentified)`).
    pub fn taxon_name(&self) -> &str {
        self.unidentified.as_deref().unwrap_or(&self.name)
    }

    /// Whether the column holds a taxon recorded above the roll-up rank.
    pub fn is_unidentified(&self) -> bool {
        self.unidentified.is_some()
    }
}

/// A samples × taxa count matrix with metadata.
#[derive(Debug, Clone, PartialEq)]
pub struct CountMatrix {
    /// One entry per row.
    pub samples: Vec<SampleMeta>,
    /// One entry per column.
    pub taxa: Vec<TaxonMeta>,
    /// Counts (or counts per unit effort), samples in rows.
    pub values: DMatrix<f64>,
    /// Notes gathered while assembling (dropped rows, unrolled taxa…), for stderr and JSON.
    pub notes: Vec<String>,
}

/// Built-in field names, resolved before site attribute keys of the same name.
pub const BUILTIN_FIELDS: &[&str] = &[
    "label",
    "site",
    "year",
    "season",
    "protocol",
    "effort_unit",
    "effort",
    "events_pooled",
];

impl CountMatrix {
    /// The rows `idx` (in that order), every taxon kept, notes kept.
    pub fn select_rows(&self, idx: &[usize]) -> CountMatrix {
        CountMatrix {
            samples: idx.iter().map(|&i| self.samples[i].clone()).collect(),
            taxa: self.taxa.clone(),
            values: DMatrix::from_fn(idx.len(), self.values.ncols(), |i, j| {
                self.values[(idx[i], j)]
            }),
            notes: self.notes.clone(),
        }
    }

    /// The matrix without taxa whose column total is zero, and how many were dropped
    /// (a subset of rows often leaves taxa that were never seen in it; CA and CCA
    /// need none, and a per-taxon table should not list them).
    pub fn drop_empty_taxa(&self) -> (CountMatrix, usize) {
        let keep: Vec<usize> = (0..self.values.ncols())
            .filter(|&j| self.values.column(j).sum() > 0.0)
            .collect();
        let dropped = self.values.ncols() - keep.len();
        let m = CountMatrix {
            samples: self.samples.clone(),
            taxa: keep.iter().map(|&j| self.taxa[j].clone()).collect(),
            values: DMatrix::from_fn(self.values.nrows(), keep.len(), |i, j| {
                self.values[(i, keep[j])]
            }),
            notes: self.notes.clone(),
        };
        (m, dropped)
    }

    /// Row totals (sample sizes).
    pub fn totals(&self) -> Vec<f64> {
        (0..self.values.nrows())
            .map(|i| self.values.row(i).sum())
            .collect()
    }

    /// Every field name that [`CountMatrix::field_values`] accepts for this
    /// matrix: the built-in fields, then site attribute keys in byte order.
    pub fn field_names(&self) -> Vec<String> {
        let mut names: Vec<String> = BUILTIN_FIELDS.iter().map(|s| s.to_string()).collect();
        let keys: BTreeSet<&String> = self
            .samples
            .iter()
            .flat_map(|s| s.attributes.keys().chain(s.attribute_changes.keys()))
            .collect();
        for k in keys {
            if !BUILTIN_FIELDS.contains(&k.as_str()) {
                names.push(k.clone());
            }
        }
        names
    }

    /// Per-row values of a field, as text: `label`, `site`, `year`, `season`,
    /// `protocol`, `effort_unit`, `effort`, `events_pooled`, or a site
    /// attribute key (built-in names win over attribute keys of the same name).
    /// This is the one place where `--by`, `--strata` and `--covariate` names
    /// are resolved.
    ///
    /// # Errors
    /// [`MatrixError::UnknownField`] (listing the available fields) for an
    /// unknown name; [`MatrixError::FieldUnavailable`] when the field is not
    /// defined for some row (a season on rows pooling seasons, a year on rows
    /// pooling years, a site attribute missing for a site).
    pub fn field_values(&self, name: &str) -> Result<Vec<String>, MatrixError> {
        let unavailable = |label: &str, why: &str| MatrixError::FieldUnavailable {
            field: name.to_string(),
            label: label.to_string(),
            why: why.to_string(),
        };
        let mut out = Vec::with_capacity(self.samples.len());
        for s in &self.samples {
            let v = match name {
                "label" => s.label.clone(),
                "site" => s.site.clone(),
                "year" => {
                    if s.year != s.last_year {
                        return Err(unavailable(
                            &s.label,
                            "the row pools several years (choose a unit with one year per row)",
                        ));
                    }
                    s.year.to_string()
                }
                "season" => match &s.season {
                    Some(v) => v.clone(),
                    None => {
                        return Err(unavailable(
                            &s.label,
                            "the row pools several seasons (use --unit event or site-season, or a --months window)",
                        ));
                    }
                },
                "protocol" => s.protocol.clone(),
                "effort_unit" => s.effort_unit.clone(),
                "effort" => s.effort.to_string(),
                "events_pooled" => s.events_pooled.to_string(),
                key => match s.attributes.get(key) {
                    Some(v) => v.clone(),
                    None if s.attribute_changes.contains_key(key) => {
                        return Err(unavailable(
                            &s.label,
                            &format!(
                                "the row pools events before and after site {} changed its '{key}' ({}); \
                                 choose a unit that does not span the change (--unit event or site-season), \
                                 or select dates on one side of it with --from/--to",
                                s.site, s.attribute_changes[key]
                            ),
                        ));
                    }
                    None if self.field_names().iter().any(|n| n == key) => {
                        return Err(unavailable(
                            &s.label,
                            &format!("site {} has no attribute '{key}'", s.site),
                        ));
                    }
                    None => {
                        return Err(MatrixError::UnknownField {
                            name: key.to_string(),
                            available: self.field_names(),
                        });
                    }
                },
            };
            out.push(v);
        }
        if self.samples.is_empty() && !self.field_names().iter().any(|n| n == name) {
            return Err(MatrixError::UnknownField {
                name: name.to_string(),
                available: self.field_names(),
            });
        }
        Ok(out)
    }

    /// Per-row values of a field as numbers (for covariates): `year`, `effort`,
    /// `events_pooled`, or a site attribute whose every value parses as a
    /// finite number.
    ///
    /// # Errors
    /// Those of [`CountMatrix::field_values`], and
    /// [`MatrixError::NotNumeric`] naming the first row whose value is not a
    /// finite number.
    pub fn field_numeric(&self, name: &str) -> Result<Vec<f64>, MatrixError> {
        let text = self.field_values(name)?;
        text.iter()
            .zip(&self.samples)
            .map(|(v, s)| match v.trim().parse::<f64>() {
                Ok(x) if x.is_finite() => Ok(x),
                _ => Err(MatrixError::NotNumeric {
                    field: name.to_string(),
                    label: s.label.clone(),
                    value: v.clone(),
                }),
            })
            .collect()
    }

    /// The label of a period of years: `2008-2015`, or `2010` for one year.
    pub fn period_label(period: (i32, i32)) -> String {
        if period.0 == period.1 {
            period.0.to_string()
        } else {
            format!("{}-{}", period.0, period.1)
        }
    }

    /// The matrix with a field `period` (usable wherever a field name is: `--by
    /// period`), naming the period of years (inclusive ranges `(first, last)`)
    /// each row falls in, e.g. `2008-2015`. Rows outside every period are dropped
    /// with a note. The value is kept with the row's attributes under the key
    /// `period` and replaces a site attribute of that name (with a note).
    ///
    /// # Errors
    /// [`MatrixError::FieldUnavailable`] for overlapping or reversed periods and
    /// for a row whose years (`--unit site` pools several) fall in more than one
    /// period or straddle a period's end; [`MatrixError::Empty`] when no row is in
    /// any period.
    pub fn with_periods(&self, periods: &[(i32, i32)]) -> Result<CountMatrix, MatrixError> {
        let bad = |label: &str, why: String| MatrixError::FieldUnavailable {
            field: "period".into(),
            label: label.to_string(),
            why,
        };
        let mut sorted = periods.to_vec();
        sorted.sort_unstable();
        for (k, p) in sorted.iter().enumerate() {
            if p.0 > p.1 {
                return Err(bad(
                    "(all)",
                    format!("the period {}..{} ends before it starts", p.0, p.1),
                ));
            }
            if k > 0 && sorted[k - 1].1 >= p.0 {
                return Err(bad(
                    "(all)",
                    format!(
                        "the periods {}..{} and {}..{} overlap",
                        sorted[k - 1].0,
                        sorted[k - 1].1,
                        p.0,
                        p.1
                    ),
                ));
            }
        }
        let mut keep = Vec::new();
        let mut samples = Vec::new();
        let mut outside = Vec::new();
        let mut replaced = false;
        for (i, s) in self.samples.iter().enumerate() {
            let first = periods.iter().find(|p| p.0 <= s.year && s.year <= p.1);
            let last = periods
                .iter()
                .find(|p| p.0 <= s.last_year && s.last_year <= p.1);
            match (first, last) {
                (Some(a), Some(b)) if a == b => {
                    let mut m = s.clone();
                    replaced |= m.attribute_changes.remove("period").is_some();
                    replaced |= m
                        .attributes
                        .insert("period".into(), Self::period_label(*a))
                        .is_some();
                    samples.push(m);
                    keep.push(i);
                }
                (None, None) if s.year == s.last_year => outside.push(s.label.clone()),
                _ => {
                    return Err(bad(
                        &s.label,
                        format!(
                            "the row pools years {}..{}, which do not lie within one period \
                             (choose a unit with one year per row)",
                            s.year, s.last_year
                        ),
                    ));
                }
            }
        }
        if keep.is_empty() {
            return Err(MatrixError::Empty {
                why: "no row falls in any of the periods given".into(),
            });
        }
        let values = DMatrix::from_fn(keep.len(), self.values.ncols(), |i, j| {
            self.values[(keep[i], j)]
        });
        let mut notes = self.notes.clone();
        if !outside.is_empty() {
            let shown: Vec<&str> = outside.iter().take(5).map(String::as_str).collect();
            notes.push(format!(
                "{} outside every period dropped ({}{})",
                crate::words::count(outside.len(), "row", "rows"),
                shown.join(", "),
                if outside.len() > 5 { ", …" } else { "" }
            ));
        }
        if replaced {
            notes.push("the site attribute 'period' is replaced by the periods given".into());
        }
        Ok(CountMatrix {
            samples,
            taxa: self.taxa.clone(),
            values,
            notes,
        })
    }

    /// For each site attribute key of the rows, the SHA-256 (lowercase hex) of
    /// what the rows hold for it: for each row in order, its label's and then
    /// its value's byte length (u64 little-endian) and bytes, the value written
    /// `=VALUE`, `~CHANGE` for a key that changed within the row, or `-` when
    /// the row's site has no value. A stored run keeps these beside the
    /// fingerprint (which hashes no attribute), so that `runs verify` can say
    /// which attribute history changed since the run.
    pub fn attribute_digests(&self) -> BTreeMap<String, String> {
        let keys: BTreeSet<&String> = self
            .samples
            .iter()
            .flat_map(|s| s.attributes.keys().chain(s.attribute_changes.keys()))
            .collect();
        keys.into_iter()
            .map(|k| {
                let mut h = Sha256::new();
                let mut text = |s: &str| {
                    h.update((s.len() as u64).to_le_bytes());
                    h.update(s.as_bytes());
                };
                for s in &self.samples {
                    text(&s.label);
                    match (s.attributes.get(k), s.attribute_changes.get(k)) {
                        (Some(v), _) => text(&format!("={v}")),
                        (None, Some(c)) => text(&format!("~{c}")),
                        (None, None) => text("-"),
                    }
                }
                let hex: String = h.finalize().iter().map(|b| format!("{b:02x}")).collect();
                (k.clone(), hex)
            })
            .collect()
    }

    /// SHA-256 (lowercase hex) of a canonical serialisation of the row labels,
    /// the taxon names and the values, equal for equal matrices on any machine.
    ///
    /// The bytes hashed are, in order: the ASCII tag `tally-matrix-v1`; the
    /// number of rows and of columns as u64 little-endian; each row label and
    /// then each taxon name as its UTF-8 byte length (u64 little-endian)
    /// followed by its bytes; every value in row-major order as the IEEE-754
    /// bit pattern of the f64 (u64 little-endian), with `-0.0` written as
    /// `0.0` and every NaN as the bit pattern `0x7ff8000000000000`. Metadata
    /// other than labels (dates, effort, attributes) and the notes are not
    /// hashed. Documented in `docs/matrices.md`.
    pub fn fingerprint(&self) -> String {
        let mut h = Sha256::new();
        h.update(b"tally-matrix-v1");
        h.update((self.values.nrows() as u64).to_le_bytes());
        h.update((self.values.ncols() as u64).to_le_bytes());
        let mut text = |s: &str| {
            h.update((s.len() as u64).to_le_bytes());
            h.update(s.as_bytes());
        };
        for s in &self.samples {
            text(&s.label);
        }
        for t in &self.taxa {
            text(&t.name);
        }
        for i in 0..self.values.nrows() {
            for j in 0..self.values.ncols() {
                let v = self.values[(i, j)];
                let bits = if v.is_nan() {
                    0x7ff8_0000_0000_0000_u64
                } else if v == 0.0 {
                    0
                } else {
                    v.to_bits()
                };
                h.update(bits.to_le_bytes());
            }
        }
        h.finalize().iter().map(|b| format!("{b:02x}")).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn matrix(labels: &[String], taxa: &[String], values: &[Vec<f64>]) -> CountMatrix {
        let samples = labels
            .iter()
            .map(|l| SampleMeta {
                label: l.clone(),
                site: String::new(),
                attributes: BTreeMap::new(),
                attribute_changes: Default::default(),
                year: 2000,
                last_year: 2000,
                season: None,
                first_date: String::new(),
                last_date: String::new(),
                events_pooled: 1,
                effort: 1.0,
                effort_unit: String::new(),
                protocol: String::new(),
            })
            .collect();
        let taxa = taxa
            .iter()
            .map(|t| TaxonMeta {
                name: t.clone(),
                rank: String::new(),
                unidentified: None,
            })
            .collect();
        let values = DMatrix::from_fn(values.len(), values[0].len(), |i, j| values[i][j]);
        CountMatrix {
            samples,
            taxa,
            values,
            notes: vec![],
        }
    }

    #[test]
    fn fingerprint_matches_independent_implementation() {
        // Expected digests written by tests/reference/matrix_fingerprint.py
        // (Python hashlib + struct, following the layout documented in docs/matrices.md).
        let fixture: serde_json::Value = serde_json::from_str(include_str!(
            "../../tests/reference/matrix_fingerprint.json"
        ))
        .unwrap();
        let cases = fixture["cases"].as_array().unwrap();
        assert!(!cases.is_empty());
        for c in cases {
            let strings = |k: &str| -> Vec<String> {
                c[k].as_array()
                    .unwrap()
                    .iter()
                    .map(|v| v.as_str().unwrap().to_string())
                    .collect()
            };
            let values: Vec<Vec<f64>> = c["values"]
                .as_array()
                .unwrap()
                .iter()
                .map(|r| {
                    r.as_array()
                        .unwrap()
                        .iter()
                        .map(|v| v.as_f64().unwrap())
                        .collect()
                })
                .collect();
            let m = matrix(&strings("labels"), &strings("taxa"), &values);
            assert_eq!(m.fingerprint(), c["fingerprint"].as_str().unwrap());
        }
    }

    #[test]
    fn periods_become_a_field_and_rows_outside_are_dropped() {
        let s = |v: &[&str]| v.iter().map(|x| x.to_string()).collect::<Vec<_>>();
        let mut m = matrix(
            &s(&["a", "b", "c", "d"]),
            &s(&["x"]),
            &[vec![1.0], vec![2.0], vec![3.0], vec![4.0]],
        );
        for (smp, y) in m.samples.iter_mut().zip([2008, 2015, 2016, 2030]) {
            smp.year = y;
            smp.last_year = y;
        }
        let p = m.with_periods(&[(2008, 2015), (2016, 2025)]).unwrap();
        assert_eq!(
            p.field_values("period").unwrap(),
            s(&["2008-2015", "2008-2015", "2016-2025"])
        );
        assert_eq!(p.values.nrows(), 3);
        assert_eq!(p.values[(2, 0)], 3.0);
        assert!(p.notes.iter().any(|n| n.contains("1 row outside")));
        assert!(m.with_periods(&[(2008, 2016), (2016, 2025)]).is_err());
        assert!(m.with_periods(&[(1990, 1999)]).is_err());
        m.samples[0].last_year = 2016;
        assert!(m.with_periods(&[(2008, 2015), (2016, 2025)]).is_err());
    }

    #[test]
    fn fingerprint_separates_labels_taxa_and_signed_zero() {
        let s = |v: &[&str]| v.iter().map(|x| x.to_string()).collect::<Vec<_>>();
        let base = matrix(&s(&["a", "b"]), &s(&["x"]), &[vec![1.0], vec![0.0]]);
        let neg_zero = matrix(&s(&["a", "b"]), &s(&["x"]), &[vec![1.0], vec![-0.0]]);
        assert_eq!(base.fingerprint(), neg_zero.fingerprint());
        // Length prefixes keep "ab"+"" apart from "a"+"b".
        let shifted = matrix(&s(&["ab", ""]), &s(&["x"]), &[vec![1.0], vec![0.0]]);
        assert_ne!(base.fingerprint(), shifted.fingerprint());
        let renamed = matrix(&s(&["a", "b"]), &s(&["y"]), &[vec![1.0], vec![0.0]]);
        assert_ne!(base.fingerprint(), renamed.fingerprint());
    }
}
