//! `tally distances [SELECTION]`: the dissimilarity matrix between the rows of a
//! selection's count matrix, printed as a square table, a square CSV (first
//! column `sample`) or JSON (`samples`, `distance`, `transform`, `matrix`, …).
//! Descriptive, not a test: nothing is stored as a run.
//!
//! Also owns [`compute`], the one place where the analysis commands turn a count
//! matrix and the `--distance`/`--transform` flags into a [`DistanceMatrix`].

use std::io::Write;

use anyhow::Context;
use serde_json::json;

use super::FormatArg;
use super::common::DistanceArgs;
use super::selection::{SelectionArgs, load_matrix};
use crate::analysis::dissimilarity::{Distance, DistanceMatrix};
use crate::analysis::transform::Transform;
use crate::matrix::CountMatrix;
use crate::report::format::{new_table, num, write_json, write_table};
use crate::store::Store;

/// Arguments of `tally distances`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Output format.
    #[arg(long, value_enum, default_value_t)]
    pub format: FormatArg,
    /// Which events, and what one row is (listed last: its help heading
    /// would otherwise carry over to the flags after it).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

/// The dissimilarities between the rows of `m` under the flags' distance and
/// transform (the transform is applied first).
///
/// # Errors
/// The kernel's refusals (negative values, empty samples where the coefficient
/// needs a total…), with the distance and transform named.
pub fn compute(m: &CountMatrix, args: &DistanceArgs) -> anyhow::Result<DistanceMatrix> {
    let d = Distance::from(args.distance);
    let t = Transform::from(args.transform);
    d.compute_after(t, &m.values).with_context(|| {
        format!(
            "computing {} dissimilarities after transform '{}'",
            d.name(),
            t.name()
        )
    })
}

/// A dissimilarity for people: six decimals, trailing zeros kept for alignment.
fn fmt_d(v: f64) -> String {
    if v.is_finite() {
        format!("{v:.6}")
    } else {
        String::new()
    }
}

/// Print the dissimilarity matrix of the selection.
///
/// # Errors
/// Selection and assembly errors; [`compute`] errors; I/O errors.
pub fn run(args: Args, store: &Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let sel = args.selection.resolve(store)?;
    let m = load_matrix(store, &sel)?;
    let d = compute(&m, &args.distance)?;
    let labels: Vec<&str> = m.samples.iter().map(|s| s.label.as_str()).collect();
    let square = d.to_square();
    let distance = Distance::from(args.distance.distance);
    let transform = Transform::from(args.distance.transform);
    match args.format {
        FormatArg::Json => {
            let v = json!({
                "unit": sel.unit().as_str(),
                "selection": sel,
                "n": labels.len(),
                "samples": labels,
                "distance": distance.name(),
                "transform": transform.name(),
                "matrix": square
                    .iter()
                    .map(|r| r.iter().map(|&x| num(x)).collect::<Vec<_>>())
                    .collect::<Vec<_>>(),
                "fingerprint": m.fingerprint(),
                "notes": m.notes,
            });
            write_json(out, &v)?;
        }
        FormatArg::Csv => {
            let mut w = csv::Writer::from_writer(out);
            let mut header = vec!["sample".to_string()];
            header.extend(labels.iter().map(|l| l.to_string()));
            w.write_record(&header)?;
            for (l, r) in labels.iter().zip(&square) {
                let mut rec = vec![l.to_string()];
                rec.extend(r.iter().map(|x| {
                    if x.is_finite() {
                        format!("{x}")
                    } else {
                        String::new()
                    }
                }));
                w.write_record(&rec)?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            writeln!(
                out,
                "{} dissimilarities after transform '{}', {} {} rows",
                distance.name(),
                transform.name(),
                labels.len(),
                sel.unit().as_str()
            )?;
            let mut header = vec!["sample"];
            header.extend(labels.iter().copied());
            let mut t = new_table(&header);
            for (l, r) in labels.iter().zip(&square) {
                let mut row = vec![l.to_string()];
                row.extend(r.iter().map(|&x| fmt_d(x)));
                t.add_row(row);
            }
            write_table(out, &t)?;
        }
    }
    Ok(())
}
