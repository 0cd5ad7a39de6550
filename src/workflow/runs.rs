//! Stored runs: [`save`] writes the runs of one command in one transaction (one
//! checkpoint after it), each with its typed spec as parameters; [`verify`]
//! replays any stored run in-process: deserialise the spec, re-prepare the
//! stored selection, run, and compare every stored number.
//!
//! Numbers are compared after the same JSON round trip the stored result went
//! through, so "identical" means bit-for-bit equal as stored.

use std::collections::BTreeMap;

use serde::Serialize;
use serde_json::{Value, json};

use crate::store::Store;
use crate::store::query::Selection;
use crate::store::runs::NewRun;
/// The stored runs as the store reads them, for listings and series.
pub use crate::store::runs::{RunRecord, SeriesPoint};

use super::{Analysis, AnalysisSpec, Outcome, Prepared, Result, Silent, WorkflowError, prepare};

/// One run to store, serialised: the prepared data it ran on, its spec as
/// parameters, its outcome as result and headline values.
#[derive(Debug, Clone)]
pub struct ToSave<'a> {
    prepared: &'a Prepared,
    kind: &'static str,
    parameters: Value,
    seed: Option<u64>,
    result: Value,
    values: Vec<(String, Option<f64>)>,
}

impl<'a> ToSave<'a> {
    /// The run of `spec` on `prepared` with `outcome`.
    ///
    /// # Errors
    /// Serialisation errors.
    pub fn new<S: Analysis>(
        prepared: &'a Prepared,
        spec: &S,
        outcome: &S::Outcome,
    ) -> Result<Self> {
        Ok(ToSave {
            prepared,
            kind: S::KIND,
            parameters: serde_json::to_value::<AnalysisSpec>(spec.clone().into())?,
            seed: spec.seed(),
            result: serde_json::to_value(outcome)?,
            values: outcome.values(),
        })
    }
}

/// The stored form of an outcome: its JSON after the storage round trip.
///
/// # Errors
/// Serialisation errors.
pub fn result_json(outcome: &impl Serialize) -> Result<Value> {
    let v = serde_json::to_value(outcome)?;
    Ok(serde_json::from_str(&v.to_string())?)
}

/// Store the runs of one command in one transaction and checkpoint once;
/// returns their ids in order.
///
/// # Errors
/// Serialisation and SQLite errors; nothing is stored then.
pub fn save(store: &mut Store, runs: &[ToSave<'_>]) -> Result<Vec<i64>> {
    let mut new = Vec::with_capacity(runs.len());
    for r in runs {
        let (period_start, period_end) = r.prepared.period();
        new.push(NewRun {
            kind: r.kind.to_string(),
            selection: serde_json::to_value(&r.prepared.selection)?,
            parameters: r.parameters.clone(),
            seed: r.seed,
            fingerprint: r.prepared.fingerprint(),
            period_start,
            period_end,
            result: r.result.clone(),
            values: r.values.clone(),
        });
    }
    let ids = store.save_runs(&new)?;
    store.checkpoint()?;
    Ok(ids)
}

/// One stored number (or text) that the recomputation did not reproduce.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Difference {
    /// Where: a JSON path into the result (`combined.p_value`) or `value:NAME` for a
    /// stored headline number.
    pub path: String,
    /// As stored (`null` when absent).
    pub stored: Value,
    /// As recomputed (`null` when absent).
    pub recomputed: Value,
    /// True when both sides are text (wording, notes): reported, but a run whose
    /// numbers all agree is still reproduced.
    pub text_only: bool,
}

/// The outcome of verifying one run.
#[derive(Debug, Clone, Serialize)]
pub struct VerifyReport {
    /// Run id.
    pub run_id: i64,
    /// Kind of the run.
    pub kind: String,
    /// Fingerprint stored with the run.
    pub stored_fingerprint: String,
    /// Fingerprint of the matrix reassembled now.
    pub fingerprint: String,
    /// Whether the two fingerprints are equal.
    pub fingerprint_matches: bool,
    /// Leaves of the result and stored values compared.
    pub compared: usize,
    /// What differs.
    pub differences: Vec<Difference>,
    /// Differences that are not text-only.
    pub numbers_differing: usize,
    /// Largest relative difference `|a − b| / max(|a|, |b|)` among differing
    /// numbers (`None` when none differ); below about 1e-12 it is rounding, as
    /// when the run was stored by another version of tally.
    pub max_relative_difference: Option<f64>,
    /// Version of tally that stored the run.
    pub stored_by: String,
    /// True when the fingerprint matches and no number differs.
    pub identical: bool,
}

/// Walk two JSON trees and record differing leaves.
fn diff(path: &str, a: &Value, b: &Value, count: &mut usize, out: &mut Vec<Difference>) {
    match (a, b) {
        (Value::Object(x), Value::Object(y)) => {
            let mut keys: Vec<&String> = x.keys().chain(y.keys()).collect();
            keys.sort();
            keys.dedup();
            for k in keys {
                let p = if path.is_empty() {
                    k.clone()
                } else {
                    format!("{path}.{k}")
                };
                diff(
                    &p,
                    x.get(k).unwrap_or(&Value::Null),
                    y.get(k).unwrap_or(&Value::Null),
                    count,
                    out,
                );
            }
        }
        (Value::Array(x), Value::Array(y)) if x.len() == y.len() => {
            for (i, (u, v)) in x.iter().zip(y).enumerate() {
                diff(&format!("{path}[{i}]"), u, v, count, out);
            }
        }
        _ => {
            *count += 1;
            if a != b {
                out.push(Difference {
                    path: path.to_string(),
                    stored: a.clone(),
                    recomputed: b.clone(),
                    text_only: a.is_string() && b.is_string(),
                });
            }
        }
    }
}

/// The spec of a stored run.
///
/// # Errors
/// [`WorkflowError::NotReplayable`] when the parameters are not a spec of this
/// version of tally (runs stored before specs were typed).
pub fn stored_spec(id: i64, kind: &str, parameters: &Value) -> Result<AnalysisSpec> {
    serde_json::from_value::<AnalysisSpec>(parameters.clone()).map_err(|e| {
        WorkflowError::NotReplayable {
            id,
            reason: format!(
                "its parameters are not a {kind} specification of tally {} ({e}); \
                 it was probably stored by an earlier version: run the analysis again to store it anew",
                crate::VERSION
            ),
        }
    })
}

/// Verify run `id` against the store as it is now: reassemble its selection,
/// compare the fingerprint, replay its spec in-process and compare every stored
/// number and headline value.
///
/// # Errors
/// An unknown run; a stored selection that no longer assembles; a run whose
/// parameters are not a typed spec; analysis errors of the replay.
pub fn verify(store: &Store, id: i64) -> Result<VerifyReport> {
    let r = store.run(id)?;
    let spec = stored_spec(id, &r.kind, &r.parameters)?;
    let sel: Selection = serde_json::from_value(r.selection.clone())?;
    let prepared = prepare(store, &sel)?;
    let fingerprint = prepared.fingerprint();
    let outcome = spec.run(&prepared, &Silent)?;
    let result = result_json(&outcome)?;
    let mut compared = 0;
    let mut differences = Vec::new();
    diff("", &r.result, &result, &mut compared, &mut differences);
    let now: BTreeMap<String, Option<f64>> = outcome
        .values()
        .into_iter()
        .map(|(k, v)| (k, v.filter(|x| x.is_finite())))
        .collect();
    let stored: BTreeMap<String, Option<f64>> = r.values.iter().cloned().collect();
    let mut keys: Vec<&String> = now.keys().chain(stored.keys()).collect();
    keys.sort();
    keys.dedup();
    for k in keys {
        compared += 1;
        let (a, b) = (
            stored.get(k).copied().flatten(),
            now.get(k).copied().flatten(),
        );
        if a != b || stored.contains_key(k) != now.contains_key(k) {
            differences.push(Difference {
                path: format!("value:{k}"),
                stored: json!(a),
                recomputed: json!(b),
                text_only: false,
            });
        }
    }
    let fingerprint_matches = fingerprint == r.fingerprint;
    let numbers_differing = differences.iter().filter(|d| !d.text_only).count();
    let max_relative_difference = differences
        .iter()
        .filter_map(|d| match (d.stored.as_f64(), d.recomputed.as_f64()) {
            (Some(a), Some(b)) => Some((a - b).abs() / a.abs().max(b.abs()).max(f64::MIN_POSITIVE)),
            _ => None,
        })
        .reduce(f64::max);
    Ok(VerifyReport {
        run_id: id,
        kind: r.kind,
        identical: fingerprint_matches && numbers_differing == 0,
        numbers_differing,
        max_relative_difference,
        stored_by: r.tool_version,
        stored_fingerprint: r.fingerprint,
        fingerprint,
        fingerprint_matches,
        compared,
        differences,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn differences_are_found_by_path() {
        let a = json!({"x": 1.0, "y": {"z": [1, 2]}, "s": "a"});
        let b = json!({"x": 1.0, "y": {"z": [1, 3]}, "s": "a", "extra": true});
        let mut n = 0;
        let mut d = Vec::new();
        diff("", &a, &b, &mut n, &mut d);
        assert_eq!(n, 5);
        let paths: Vec<&str> = d.iter().map(|x| x.path.as_str()).collect();
        assert_eq!(paths, vec!["extra", "y.z[1]"]);
    }
}
