//! `tally runs verify ID`: reassemble a stored run's selection, check the matrix
//! fingerprint, recompute the analysis with the stored parameters and seed, and
//! report `identical` or every stored number that differs.
//!
//! Kinds `partition` and `compare` are replayed in-process from their stored
//! typed specs ([`runs::verify`]). Any
//! other kind is replayed when its parameters hold the command arguments under
//! `argv`: the same binary is run again on the same store with the stored seed,
//! `--no-store` and `--format json`, and its JSON is compared with the stored
//! result. Numbers are compared after the same JSON round trip the stored result
//! went through, so "identical" means bit-for-bit equal as stored.

use std::io::Write;

use anyhow::{Context, anyhow, bail};
use serde::Serialize;
use serde_json::Value;

use super::FormatArg;
use super::selection::load_matrix;
use crate::report::format::{new_table, write_json, write_table};
use crate::store::Store;
use crate::store::query::Selection;
use crate::workflow::runs;

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

/// Drop `--seed V`, `--format V`, `--db V` and `--no-store` from stored arguments
/// (the replay sets them itself).
fn replay_args(argv: &[String]) -> Vec<String> {
    let mut out = Vec::new();
    let mut skip = false;
    for a in argv {
        if skip {
            skip = false;
            continue;
        }
        match a.as_str() {
            "--seed" | "--format" | "--db" => skip = true,
            "--no-store" => {}
            s if s.starts_with("--seed=")
                || s.starts_with("--format=")
                || s.starts_with("--db=") => {}
            _ => out.push(a.clone()),
        }
    }
    out
}

/// The report of a run replayed in-process by [`runs::verify`].
fn in_process(w: runs::VerifyReport) -> VerifyReport {
    VerifyReport {
        run_id: w.run_id,
        kind: w.kind,
        stored_fingerprint: w.stored_fingerprint,
        fingerprint: w.fingerprint,
        fingerprint_matches: w.fingerprint_matches,
        compared: w.compared,
        differences: w
            .differences
            .into_iter()
            .map(|d| Difference {
                path: d.path,
                stored: d.stored,
                recomputed: d.recomputed,
                text_only: d.text_only,
            })
            .collect(),
        numbers_differing: w.numbers_differing,
        max_relative_difference: w.max_relative_difference,
        stored_by: w.stored_by,
        identical: w.identical,
    }
}

/// Verify run `id` against the store as it is now.
///
/// # Errors
/// An unknown run; a stored selection that no longer assembles; a kind that
/// cannot be replayed (named, with the reason); analysis errors of the replay.
pub fn verify(store: &Store, id: i64) -> anyhow::Result<VerifyReport> {
    let r = store.run(id)?;
    if crate::workflow::AnalysisSpec::KINDS.contains(&r.kind.as_str()) {
        return Ok(in_process(runs::verify(store, id)?));
    }
    let sel: Selection =
        serde_json::from_value(r.selection.clone()).context("reading the stored selection")?;
    let m = load_matrix(store, &sel).context("reassembling the stored selection")?;
    let fingerprint = m.fingerprint();
    let seed = r
        .seed
        .ok_or_else(|| anyhow!("run {id} has no stored seed"))?;
    // Runs of other kinds: rerun the binary on their recorded arguments.
    let result: Value = {
        let kind = r.kind.as_str();
        let Some(argv) = r.parameters.get("argv").and_then(Value::as_array) else {
            bail!(
                "runs of kind '{kind}' cannot be replayed: their parameters do not record the command arguments"
            );
        };
        let argv: Vec<String> = argv
            .iter()
            .filter_map(|a| a.as_str().map(String::from))
            .collect();
        let db = store
            .path()
            .ok_or_else(|| anyhow!("the store has no file to replay against"))?;
        let exe = std::env::current_exe().context("locating the tally binary")?;
        let output = std::process::Command::new(exe)
            .arg("--db")
            .arg(db)
            .args(replay_args(&argv))
            .args([
                "--seed",
                &seed.to_string(),
                "--no-store",
                "--format",
                "json",
            ])
            .output()
            .context("rerunning the stored command")?;
        if !output.status.success() {
            bail!(
                "rerunning the stored command failed: {}",
                String::from_utf8_lossy(&output.stderr).trim()
            );
        }
        serde_json::from_slice(&output.stdout).context("reading the rerun's JSON")?
    };
    // The same round trip as storage: serialise, then parse.
    let result: Value = serde_json::from_str(&result.to_string())?;
    let mut compared = 0;
    let mut differences = Vec::new();
    diff("", &r.result, &result, &mut compared, &mut differences);
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

/// Run `tally runs verify ID`: print the report; an error (exit code 1) when the
/// fingerprint changed or a number differs.
///
/// # Errors
/// As [`verify`]; a run that is not reproduced.
pub fn run(id: i64, format: FormatArg, store: &Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let rep = verify(store, id)?;
    match format {
        FormatArg::Json => write_json(out, &serde_json::to_value(&rep)?)?,
        FormatArg::Csv => {
            let mut w = csv::Writer::from_writer(&mut *out);
            w.write_record(["path", "stored", "recomputed"])?;
            if !rep.fingerprint_matches {
                w.write_record(["fingerprint", &rep.stored_fingerprint, &rep.fingerprint])?;
            }
            for d in &rep.differences {
                w.write_record([
                    d.path.clone(),
                    d.stored.to_string(),
                    d.recomputed.to_string(),
                ])?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            writeln!(out, "run {} ({})", rep.run_id, rep.kind)?;
            if rep.fingerprint_matches {
                writeln!(
                    out,
                    "data: the selection reassembles to the same matrix (fingerprint {})",
                    rep.fingerprint
                )?;
            } else {
                writeln!(
                    out,
                    "data: CHANGED — the selection now gives a different matrix (fingerprint stored {}, now {})",
                    rep.stored_fingerprint, rep.fingerprint
                )?;
            }
            let texts = rep.differences.len() - rep.numbers_differing;
            if rep.numbers_differing == 0 {
                writeln!(
                    out,
                    "result: every stored number was reproduced with the stored seed ({} entries compared)",
                    rep.compared
                )?;
            } else {
                writeln!(
                    out,
                    "result: {} of {} stored numbers differ:",
                    rep.numbers_differing, rep.compared
                )?;
                if let Some(rel) = rep.max_relative_difference {
                    writeln!(
                        out,
                        "largest relative difference {rel:.1e}{} (stored by tally {}, now {})",
                        if rel < 1e-12 {
                            ", at rounding level"
                        } else {
                            ""
                        },
                        rep.stored_by,
                        crate::VERSION
                    )?;
                }
            }
            if texts > 0 {
                writeln!(
                    out,
                    "{texts} text entries (wording, notes) differ; they do not change any number"
                )?;
            }
            if !rep.differences.is_empty() {
                let short = |v: &Value| {
                    let s = v.to_string();
                    if s.chars().count() > 60 {
                        format!("{}…", s.chars().take(60).collect::<String>())
                    } else {
                        s
                    }
                };
                let mut t = new_table(&["entry", "stored", "recomputed"]);
                for d in rep.differences.iter().take(50) {
                    t.add_row(vec![d.path.clone(), short(&d.stored), short(&d.recomputed)]);
                }
                write_table(out, &t)?;
                if rep.differences.len() > 50 {
                    writeln!(
                        out,
                        "… and {} more (see --format json)",
                        rep.differences.len() - 50
                    )?;
                }
            }
            writeln!(
                out,
                "{}",
                if rep.identical {
                    "identical"
                } else {
                    "not identical"
                }
            )?;
        }
    }
    if !rep.identical {
        out.flush()?;
        let why = match (rep.fingerprint_matches, rep.numbers_differing) {
            (false, 0) => "the data fingerprint changed".to_string(),
            (false, k) => format!("the data fingerprint changed and {k} stored numbers differ"),
            (true, k) => format!("{k} stored numbers differ"),
        };
        bail!("run {id} is not reproduced: {why}");
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use serde_json::json;

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

    #[test]
    fn replay_arguments_drop_what_the_replay_sets() {
        let a: Vec<String> = [
            "permanova",
            "--seed",
            "4",
            "--by",
            "reach",
            "--no-store",
            "--format=csv",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect();
        assert_eq!(replay_args(&a), vec!["permanova", "--by", "reach"]);
    }
}
