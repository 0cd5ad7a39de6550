//! Count matrices with sample and taxon metadata.
//!
//! A [`CountMatrix`] is what every analysis starts from: one row per sample
//! (an event, or events pooled per site and period), one column per taxon,
//! plus the metadata that `--by`, `--strata` and `--covariate` fields name.
//! Nothing here speaks SQL: the store hands over plain rows.

use std::collections::BTreeMap;

use nalgebra::DMatrix;
use serde::Serialize;

/// Metadata carried with every row of a count matrix.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SampleMeta {
    /// Row label: the event code with `--unit event`, otherwise site and period (`S07/2016`).
    pub label: String,
    /// Site code.
    pub site: String,
    /// Site attributes (habitat, reach, …), key → value.
    pub attributes: BTreeMap<String, String>,
    /// Calendar year of the sample (for season windows that wrap the year end:
    /// the year in which the season began).
    pub year: i32,
    /// Season label, for season units (e.g. `2016-04..05`), else `None`.
    pub season: Option<String>,
    /// First event date (ISO 8601).
    pub first_date: String,
    /// Last event date (ISO 8601).
    pub last_date: String,
    /// Number of events pooled into this row.
    pub events_pooled: usize,
    /// Total effort of the pooled events.
    pub effort: f64,
    /// Effort unit.
    pub effort_unit: String,
    /// Protocol code (or codes joined by `+` when several were pooled).
    pub protocol: String,
}

/// Metadata of a matrix column.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonMeta {
    /// Accepted (and, with `--rank`, rolled-up) taxon name.
    pub name: String,
    /// Rank of the taxon.
    pub rank: String,
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

impl CountMatrix {
    /// Row totals (sample sizes).
    pub fn totals(&self) -> Vec<f64> {
        (0..self.values.nrows()).map(|i| self.values.row(i).sum()).collect()
    }
}
