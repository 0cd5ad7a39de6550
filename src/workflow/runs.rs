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
            attributes: r.prepared.attribute_digests(),
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
    /// Site attribute keys whose values in force on the rows differ from
    /// those the run was stored with (an attribute history changed since:
    /// `sites set`, `import attributes`); empty when they agree or when the
    /// run was stored before tally recorded them.
    pub attributes_changed: Vec<String>,
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
    /// True when the fingerprint matches, no site attribute in force on the
    /// rows changed and no number differs.
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
                match (x.get(k), y.get(k)) {
                    (Some(u), Some(v)) => diff(&p, u, v, count, out),
                    // A field only one side has (added or renamed by a later version of
                    // tally) is reported, but is not a number that differs.
                    (u, v) => {
                        *count += 1;
                        out.push(Difference {
                            path: p,
                            stored: u.cloned().unwrap_or(Value::Null),
                            recomputed: v.cloned().unwrap_or(Value::Null),
                            text_only: true,
                        });
                    }
                }
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

/// The equivalent command line of a stored run ([`super::command::command_line`])
/// and the note on what it cannot express, from its stored spec and selection.
///
/// # Errors
/// [`WorkflowError::NotReplayable`] for a run without a typed spec; a stored
/// selection that does not deserialise.
pub fn command_of(r: &RunRecord) -> Result<(String, Option<String>)> {
    let spec = stored_spec(r.id, &r.kind, &r.parameters)?;
    let sel: Selection = serde_json::from_value(r.selection.clone())?;
    Ok(super::command::command_line(&spec, &sel))
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
    let attributes_changed: Vec<String> = match &r.attributes {
        None => Vec::new(),
        Some(stored) => {
            let now = prepared.attribute_digests();
            let mut keys: Vec<&String> = stored.keys().chain(now.keys()).collect();
            keys.sort();
            keys.dedup();
            keys.into_iter()
                .filter(|k| stored.get(*k) != now.get(*k))
                .cloned()
                .collect()
        }
    };
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
        identical: fingerprint_matches && attributes_changed.is_empty() && numbers_differing == 0,
        numbers_differing,
        max_relative_difference,
        stored_by: r.tool_version,
        stored_fingerprint: r.fingerprint,
        fingerprint,
        fingerprint_matches,
        attributes_changed,
        compared,
        differences,
    })
}

/// What a stored run was, in words, for listings: the analysis and its main
/// design choice, then the selection (`compare by period; reach=lower, kick,
/// per site and year, per effort`).
pub fn describe(r: &RunRecord) -> String {
    let p = &r.parameters;
    let text = |k: &str| p.get(k).and_then(Value::as_str);
    let mut what = r.kind.clone();
    if let Some(m) = text("method") {
        what = format!("{what} {m}");
    }
    if let Some(by) = text("by") {
        what = format!("{what} by {by}");
    } else if let Some(every) = text("every") {
        what = format!("{what} every {every}");
    }
    if let Some(periods) = p.get("periods").and_then(Value::as_array)
        && !periods.is_empty()
    {
        let spans: Vec<String> = periods
            .iter()
            .filter_map(|s| {
                let a = s.get(0)?.as_i64()?;
                let b = s.get(1)?.as_i64()?;
                Some(format!("{a}–{b}"))
            })
            .collect();
        what = format!("{what}, periods {}", spans.join(" and "));
    }
    let selection = serde_json::from_value::<Selection>(r.selection.clone())
        .map(|s| s.in_words())
        .unwrap_or_else(|_| "selection not readable".into());
    format!("{what}; {selection}")
}

/// Which stored number to follow across runs (`runs series`).
#[derive(Debug, Clone, Default)]
pub struct SeriesQuery {
    /// Kind of run.
    pub kind: String,
    /// Name of the stored number, as `runs show` lists it (for runs holding
    /// several comparisons, without the `GROUP vs REFERENCE.` prefix, given
    /// with `group` instead).
    pub value: String,
    /// Only runs made on exactly this selection (a saved selection's definition).
    pub selection: Option<Selection>,
    /// For runs holding several comparisons: the group compared with the reference.
    pub group: Option<String>,
    /// Only runs whose selection has each condition: a site condition
    /// (`reach=lower`) or a selection field (`protocol=kick`, `unit=site-year`).
    pub conditions: Vec<(String, String)>,
}

/// Whether the stored selection JSON `sel` has the condition `key=value`.
fn selection_has(sel: &Value, key: &str, value: &str) -> bool {
    let site_condition = sel
        .get("site_where")
        .and_then(Value::as_array)
        .is_some_and(|w| {
            w.iter().any(|pair| {
                pair.get(0).and_then(Value::as_str) == Some(key)
                    && pair.get(1).and_then(Value::as_str) == Some(value)
            })
        });
    let field = match sel.get(key) {
        Some(Value::String(s)) => s == value,
        Some(Value::Number(n)) => n.to_string() == value,
        Some(Value::Bool(b)) => b.to_string() == value,
        _ => false,
    };
    site_condition || field
}

/// A stored number across runs, ordered by the period each run's data covers.
/// Trend runs also give their per-period numbers (`size_part`: one point per
/// run and period, dated by the period).
///
/// # Errors
/// [`WorkflowError::Refused`] when no run of the kind is stored, when the
/// value name is not one that such runs store (the message lists those that
/// are), or when `group` names no comparison; store errors.
pub fn series(store: &Store, q: &SeriesQuery) -> Result<Vec<SeriesPoint>> {
    let names = store.run_value_names(&q.kind)?;
    if names.is_empty() {
        return Err(WorkflowError::Refused(format!(
            "no runs of kind '{}' are stored (`tally runs list` shows what is)",
            q.kind
        )));
    }
    // The full names to follow: the value itself, or GROUP vs REFERENCE.VALUE.
    let full: Vec<&String> = match &q.group {
        None => names.iter().filter(|n| **n == q.value).collect(),
        Some(g) => {
            let head = format!("{g} vs ");
            let tail = format!(".{}", q.value);
            names
                .iter()
                .filter(|n| n.starts_with(&head) && n.ends_with(&tail))
                .collect()
        }
    };
    // The per-period numbers of trend runs (`period.LABEL.NAME`).
    let per_period = q.kind == super::trend::KIND
        && q.group.is_none()
        && names
            .iter()
            .any(|n| super::trend::period_value(n).is_some_and(|(_, what)| what == q.value));
    if full.is_empty() && !per_period {
        let mut known: Vec<String> = names
            .iter()
            .map(|n| {
                if let Some((_, what)) = super::trend::period_value(n) {
                    what.to_string()
                } else if let Some((_, rest)) = n.split_once(" vs ")
                    && let Some((_, what)) = rest.split_once('.')
                {
                    what.to_string()
                } else {
                    n.clone()
                }
            })
            .collect();
        known.sort();
        known.dedup();
        let groups: Vec<&str> = {
            let mut g: Vec<&str> = names
                .iter()
                .filter_map(|n| n.split_once(" vs ").map(|(g, _)| g))
                .collect();
            g.sort_unstable();
            g.dedup();
            g
        };
        let mut msg = match &q.group {
            Some(g) => format!(
                "runs of kind '{}' store no number '{}' for group '{g}'",
                q.kind, q.value
            ),
            None => format!("runs of kind '{}' store no number '{}'", q.kind, q.value),
        };
        msg.push_str(&format!("; they store: {}", known.join(", ")));
        if !groups.is_empty() {
            msg.push_str(&format!(
                "; comparisons with the reference (give the group with --group): {}",
                groups.join(", ")
            ));
        }
        return Err(WorkflowError::Refused(msg));
    }
    let selection = q.selection.as_ref().map(serde_json::to_value).transpose()?;
    let mut points = Vec::new();
    for name in full {
        points.extend(store.series(&q.kind, name, selection.as_ref())?);
    }
    if per_period {
        points.extend(super::trend::period_series(
            store,
            &q.value,
            selection.as_ref(),
        )?);
    }
    if !q.conditions.is_empty() {
        let keep: std::collections::HashSet<i64> = store
            .runs(Some(&q.kind))?
            .into_iter()
            .filter(|r| {
                q.conditions
                    .iter()
                    .all(|(k, v)| selection_has(&r.selection, k, v))
            })
            .map(|r| r.id)
            .collect();
        points.retain(|p| keep.contains(&p.run_id));
    }
    sort_by_period(&mut points);
    Ok(points)
}

/// Order series points by the period their data cover, then by run id (the
/// order of [`Store::series`]).
pub fn sort_by_period(points: &mut [SeriesPoint]) {
    points.sort_by(|a, b| {
        (&a.period_end, &a.period_start, a.run_id).cmp(&(&b.period_end, &b.period_start, b.run_id))
    });
}

/// Runs removed by [`delete`] or [`prune`].
#[derive(Debug, Clone, Serialize)]
pub struct Removed {
    /// Their ids, ascending.
    pub runs: Vec<i64>,
    /// Stored numbers removed with them.
    pub values: usize,
    /// True when nothing was removed because only a listing was asked for.
    pub dry_run: bool,
}

/// Delete the stored runs `ids` (all or none).
///
/// # Errors
/// An id that is not a stored run (nothing is deleted); store errors.
pub fn delete(store: &mut Store, ids: &[i64]) -> Result<Removed> {
    let mut runs = ids.to_vec();
    runs.sort_unstable();
    runs.dedup();
    let values = store.delete_runs(&runs)?;
    Ok(Removed {
        runs,
        values,
        dry_run: false,
    })
}

/// Delete the runs stored before `before` (an ISO 8601 date), optionally only
/// of one kind; with `dry_run`, only say which they are.
///
/// # Errors
/// [`WorkflowError::Invalid`] for a date that is not a real ISO 8601 date
/// (the importer's rule, `store::import::parse_date`);
/// store errors.
pub fn prune(
    store: &mut Store,
    kind: Option<&str>,
    before: &str,
    dry_run: bool,
) -> Result<Removed> {
    let before = crate::store::import::parse_date(before)
        .map_err(|reason| WorkflowError::Invalid {
            option: "--before",
            reason,
        })?
        .text();
    let runs = store.runs_stored_before(kind, &before)?;
    if dry_run || runs.is_empty() {
        return Ok(Removed {
            runs,
            values: 0,
            dry_run,
        });
    }
    let values = store.delete_runs(&runs)?;
    Ok(Removed {
        runs,
        values,
        dry_run: false,
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
        assert!(d[0].text_only && !d[1].text_only);
    }
}
