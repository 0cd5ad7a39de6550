//! `tally partition [SELECTION]`: how much of a dissimilarity is size (total
//! abundance), how much is shape (composition), how much cannot be assigned to
//! either, and how much neither explains — db-RDA variance partitioning with
//! raw and adjusted fractions and permutation tests of the two unique parts
//! (`analysis::partition`). `--compare-distances` runs it for several
//! dissimilarity/transform pairs in one table.
//!
//! The analysis parameters are a serialisable [`Params`] so that `tally runs
//! verify` can replay a stored run exactly ([`compute_on`]).

use std::io::Write;

use anyhow::Context;
use clap::ValueEnum;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::common::{DistanceArgs, Progress, RunArgs, store_run};
use super::selection::{SelectionArgs, load_matrix};
use super::{FormatArg, note};
use crate::analysis::partition::{
    Fractions, PartitionOptions, PartitionResult, ShapeAxes, SizeCoding, UniqueTest, partition,
};
use crate::analysis::permutation::Scheme;
use crate::analysis::{Distance, Transform};
use crate::matrix::CountMatrix;
use crate::report::format::{new_table, num, opt_num, write_json, write_table};
use crate::store::Store;

/// Kind under which partition runs are stored.
pub const KIND: &str = "partition";

/// The pairs of `--compare-distances`: (dissimilarity, transform).
pub const COMPARED: [(Distance, Transform); 5] = [
    (Distance::BrayCurtis, Transform::None),
    (Distance::BrayCurtis, Transform::FourthRoot),
    (Distance::Euclidean, Transform::Log1p),
    (Distance::ChiSquare, Transform::None),
    (Distance::Hellinger, Transform::None),
];

/// Headline numbers of a run (name, value), as stored in `run_value`.
pub type StoredValues = Vec<(String, Option<f64>)>;

/// The caution printed beside every size/shape result (METHODS.md §6.3).
pub const CAUTION: &str = "Caution: where total abundance changes, the spread of counts usually \
changes with it (a mean-variance relationship), and a distance-based analysis can then read a \
change of spread as a change of location (Warton & Hui 2017, Methods Ecol. Evol. 8:1408-1414). \
Read distance-based results together with the size test and the dispersion test.";

/// What "shared" means, printed with every partition.
pub const SHARED: &str = "\"Shared\" is variation that size and shape explain together: samples \
that differ in total also differ in composition, so this part cannot be assigned to either. \
Adjusted fractions can be negative (an estimate of a part near zero; reported as computed).";

/// How size enters (command-line spelling of [`SizeCoding`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum SizeArg {
    /// Natural log of the sample total.
    LogTotal,
    /// The sample total itself.
    Total,
}

impl From<SizeArg> for SizeCoding {
    fn from(s: SizeArg) -> Self {
        match s {
            SizeArg::LogTotal => SizeCoding::LogTotal,
            SizeArg::Total => SizeCoding::Total,
        }
    }
}

/// Arguments of `tally partition`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Size variable: the log of the sample total, or the total (per unit effort with --per-effort).
    #[arg(long, value_enum, default_value_t = SizeArg::LogTotal)]
    pub size: SizeArg,
    /// Represent shape by exactly K leading correspondence-analysis axes
    /// [default: all profile dimensions, unless fewer than 10 residual degrees
    /// of freedom would remain; then the leading axes that leave 10].
    #[arg(long, value_name = "K")]
    pub shape_axes: Option<usize>,
    /// Permute only within the levels of this field (e.g. site).
    #[arg(long, value_name = "FIELD")]
    pub strata: Option<String>,
    /// Partition several dissimilarity/transform pairs in one table: Bray-Curtis
    /// raw, Bray-Curtis fourth root, Euclidean log(x+1), chi-square, Hellinger.
    #[arg(long)]
    pub compare_distances: bool,
    /// Permutations, seed, storage, format.
    #[command(flatten)]
    pub run: RunArgs,
    /// Which events, and what one row is (last, so that its help heading does
    /// not carry over to the analysis flags).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

/// Every analysis parameter of a partition run (stored with the run; enough to replay it).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Params {
    /// Dissimilarity name (`Distance::name`), for a single partition.
    pub distance: String,
    /// Transform name (`Transform::name`).
    pub transform: String,
    /// Size coding.
    pub size: SizeArg,
    /// Fixed number of CA axes, or `None` for the automatic rule.
    pub shape_axes: Option<usize>,
    /// Stratum field of the permutations.
    pub strata: Option<String>,
    /// Whether the five pairs of [`COMPARED`] were partitioned instead.
    pub compare_distances: bool,
    /// Permutations per test.
    pub permutations: usize,
}

impl Params {
    /// The parameters of a command line.
    pub fn of(args: &Args) -> Params {
        Params {
            distance: Distance::from(args.distance.distance).name().to_string(),
            transform: Transform::from(args.distance.transform).name().to_string(),
            size: args.size,
            shape_axes: args.shape_axes,
            strata: args.strata.clone(),
            compare_distances: args.compare_distances,
            permutations: args.run.permutations,
        }
    }

    fn pairs(&self) -> anyhow::Result<Vec<(Distance, Transform)>> {
        if self.compare_distances {
            return Ok(COMPARED.to_vec());
        }
        let d = Distance::from_name(&self.distance)
            .with_context(|| format!("unknown dissimilarity '{}'", self.distance))?;
        let t = Transform::from_name(&self.transform)
            .with_context(|| format!("unknown transform '{}'", self.transform))?;
        Ok(vec![(d, t)])
    }
}

/// The exchangeability scheme of `--strata FIELD` (free without it).
///
/// # Errors
/// An unknown field or one not defined for every row.
pub fn scheme_of(m: &CountMatrix, strata: Option<&str>) -> anyhow::Result<Scheme> {
    Ok(match strata {
        None => Scheme::Free,
        Some(f) => {
            let labels = m.field_values(f)?;
            let g = crate::analysis::linear_model::Grouping::from_labels(&labels);
            Scheme::WithinStrata(g.codes().to_vec())
        }
    })
}

fn fractions_json(f: &Fractions) -> Value {
    json!({
        "size_only": num(f.size_only),
        "shared": num(f.shared),
        "shape_only": num(f.shape_only),
        "unexplained": num(f.unexplained),
    })
}

fn test_json(t: &UniqueTest) -> Value {
    json!({
        "pseudo_f": opt_num(t.pseudo_f),
        "p_value": opt_num(t.p_value),
        "df": t.df,
        "df_resid": t.df_resid,
        "permutations": t.permutations,
        "exact": t.exact,
    })
}

/// One partition result as the JSON object documented in `docs/cli.md`.
pub fn partition_json(
    r: &PartitionResult,
    distance: Distance,
    transform: Transform,
    size: SizeArg,
) -> Value {
    let f = &r.fit;
    json!({
        "distance": distance.name(),
        "transform": transform.name(),
        "size": size,
        "n": f.n,
        "total_variation": num(f.total_ss),
        "r2": {"size": num(f.r2_size), "shape": num(f.r2_shape), "both": num(f.r2_both)},
        "fractions": fractions_json(&f.fractions),
        "adjusted_fractions": fractions_json(&f.adjusted_fractions),
        "tests": {"size_only": test_json(&r.size_only), "shape_only": test_json(&r.shape_only)},
        "shape_axes": r.shape.axes,
        "shape_design": r.shape.kind,
        "shape_inertia_share": num(r.shape.inertia_share),
        "df_resid": f.df_resid,
        "one_block_explains_all": f.exhaustive,
        "seed": r.seed,
        "scheme": r.scheme,
        "notes": r.notes,
    })
}

/// Headline numbers of one partition, named with `prefix`.
fn values_of(r: &PartitionResult, prefix: &str) -> Vec<(String, Option<f64>)> {
    let a = &r.fit.adjusted_fractions;
    vec![
        (format!("{prefix}adj.size_only"), Some(a.size_only)),
        (format!("{prefix}adj.shape_only"), Some(a.shape_only)),
        (format!("{prefix}adj.shared"), Some(a.shared)),
        (format!("{prefix}adj.unexplained"), Some(a.unexplained)),
        (format!("{prefix}p.size_only"), r.size_only.p_value),
        (format!("{prefix}p.shape_only"), r.shape_only.p_value),
    ]
}

/// The partition(s) of `m` under `params` with `seed`: the result JSON and the
/// headline numbers to store. Deterministic for a given matrix, parameters and seed.
///
/// # Errors
/// Unknown names, a saturated design (with the reason), kernel errors.
pub fn compute_on(
    m: &CountMatrix,
    params: &Params,
    seed: u64,
) -> anyhow::Result<(Value, StoredValues, Vec<PartitionResult>)> {
    let scheme = scheme_of(m, params.strata.as_deref())?;
    let opts = PartitionOptions {
        size: params.size.into(),
        shape_axes: match params.shape_axes {
            Some(k) => ShapeAxes::Fixed(k),
            None => ShapeAxes::Auto { min_resid_df: 10 },
        },
        permutations: params.permutations,
        seed,
        scheme,
    };
    let progress = Progress::new("partition");
    let cb = |d: usize, t: usize| progress.update(d, t);
    let mut parts = Vec::new();
    let mut results = Vec::new();
    let mut values = Vec::new();
    for (d, t) in params.pairs()? {
        let dm = d
            .compute_after(t, &m.values)
            .with_context(|| format!("computing {} after {}", d.name(), t.name()))?;
        let r = partition(&m.values, &dm, &opts, Some(&cb)).map_err(|e| match e {
            crate::analysis::AnalysisError::Saturated { rank, n } if rank >= n || params.shape_axes.is_some() => {
                anyhow::anyhow!(
                    "model saturated: size and {} shape dimension(s) need {rank} model columns (intercept \
                     included) for {n} samples, leaving no residual variation to test against; select more \
                     samples or fewer shape axes (--shape-axes K with K <= {})",
                    rank.saturating_sub(2),
                    n.saturating_sub(3)
                )
            }
            crate::analysis::AnalysisError::Saturated { n, .. } => anyhow::anyhow!(
                "with {n} samples, size and even one shape axis would leave fewer than 10 residual degrees \
                 of freedom (adjusted fractions would be unstable); select more samples, or accept fewer \
                 residual degrees of freedom with --shape-axes K (K <= {})",
                n.saturating_sub(3)
            ),
            other => anyhow::Error::new(other),
        })?;
        let prefix = if params.compare_distances {
            format!("{}+{}.", d.name(), t.name())
        } else {
            String::new()
        };
        values.extend(values_of(&r, &prefix));
        parts.push(partition_json(&r, d, t, params.size));
        results.push(r);
    }
    progress.finish();
    let result = if params.compare_distances {
        json!({
            "partitions": parts,
            "seed": seed,
            "permutations": params.permutations,
            "n": m.values.nrows(),
            "caution": CAUTION,
            "shared_means": SHARED,
        })
    } else {
        let mut one = parts
            .pop()
            .expect("invariant: one pair without --compare-distances");
        one["permutations"] = json!(params.permutations);
        one["caution"] = json!(CAUTION);
        one["shared_means"] = json!(SHARED);
        one
    };
    Ok((result, values, results))
}

fn pct(v: f64) -> String {
    format!("{:.1}%", 100.0 * v)
}

fn p_text(t: &UniqueTest) -> String {
    match (t.pseudo_f, t.p_value) {
        (Some(f), Some(p)) => format!("F = {f:.3} (df {}, {}), p = {p}", t.df, t.df_resid),
        _ => "not applicable".into(),
    }
}

/// A computed and (unless `--no-store`) stored partition.
struct Executed {
    sel: crate::store::Selection,
    m: CountMatrix,
    params: Params,
    seed: u64,
    result: Value,
    results: Vec<PartitionResult>,
    run_id: Option<i64>,
}

/// Assemble, compute, print the notes and store the run.
fn execute(store: &mut Store, args: &Args) -> anyhow::Result<Executed> {
    let sel = args.selection.resolve(store)?;
    let m = load_matrix(store, &sel)?;
    let params = Params::of(args);
    let seed = args.run.seed();
    let (result, values, results) = compute_on(&m, &params, seed)?;
    for r in &results {
        for n in &r.notes {
            note(n);
        }
    }
    let parameters = serde_json::to_value(&params)?;
    let run_id = store_run(
        store,
        &args.run,
        KIND,
        &sel,
        &m,
        parameters,
        Some(seed),
        &result,
        values,
    )?;
    Ok(Executed {
        sel,
        m,
        params,
        seed,
        result,
        results,
        run_id,
    })
}

/// Compute and store the run as `tally partition` does (unless `--no-store`),
/// without printing the table; returns the result JSON and the run id (for
/// the demo and the HTML report).
///
/// # Errors
/// As [`compute_on`]; selection and storage errors.
pub fn compute_and_store(store: &mut Store, args: &Args) -> anyhow::Result<(Value, Option<i64>)> {
    let e = execute(store, args)?;
    Ok((e.result, e.run_id))
}

/// Run `tally partition`.
///
/// # Errors
/// Selection, assembly and analysis errors; I/O and storage errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let Executed {
        sel,
        m,
        params,
        seed,
        result,
        results,
        ..
    } = execute(store, &args)?;
    match args.run.format {
        FormatArg::Json => write_json(out, &result)?,
        FormatArg::Csv => {
            let mut w = csv::Writer::from_writer(out);
            w.write_record([
                "distance",
                "transform",
                "part",
                "fraction",
                "adjusted_fraction",
                "pseudo_f",
                "p_value",
            ])?;
            let list: Vec<&Value> = match result.get("partitions") {
                Some(Value::Array(a)) => a.iter().collect(),
                _ => vec![&result],
            };
            for p in list {
                for part in ["size_only", "shared", "shape_only", "unexplained"] {
                    let t = &p["tests"][part];
                    let cell = |v: &Value| {
                        if v.is_null() {
                            String::new()
                        } else {
                            v.to_string()
                        }
                    };
                    w.write_record([
                        p["distance"].as_str().unwrap_or_default().to_string(),
                        p["transform"].as_str().unwrap_or_default().to_string(),
                        part.to_string(),
                        cell(&p["fractions"][part]),
                        cell(&p["adjusted_fractions"][part]),
                        cell(&t["pseudo_f"]),
                        cell(&t["p_value"]),
                    ])?;
                }
            }
            w.flush()?;
        }
        FormatArg::Table => {
            if params.compare_distances {
                let mut t = new_table(&[
                    "dissimilarity",
                    "transform",
                    "size only",
                    "shared",
                    "shape only",
                    "unexplained",
                    "p size only",
                    "p shape only",
                    "shape axes",
                ]);
                for (r, (d, tr)) in results.iter().zip(COMPARED) {
                    let a = &r.fit.adjusted_fractions;
                    let p = |u: &UniqueTest| {
                        u.p_value
                            .map(|p| p.to_string())
                            .unwrap_or_else(|| "n/a".into())
                    };
                    t.add_row(vec![
                        d.name().to_string(),
                        tr.name().to_string(),
                        pct(a.size_only),
                        pct(a.shared),
                        pct(a.shape_only),
                        pct(a.unexplained),
                        p(&r.size_only),
                        p(&r.shape_only),
                        format!("{} ({})", r.shape.axes, pct(r.shape.inertia_share)),
                    ]);
                }
                writeln!(
                    out,
                    "Size/shape partition of {} samples (adjusted fractions)",
                    m.values.nrows()
                )?;
                write_table(out, &t)?;
                for (r, (d, tr)) in results.iter().zip(COMPARED) {
                    if r.fit.exhaustive {
                        writeln!(
                            out,
                            "{} after {}: one set explains the whole dissimilarity; its tests are not applicable.",
                            d.name(),
                            tr.name()
                        )?;
                    }
                }
            } else {
                let r = &results[0];
                let f = &r.fit;
                writeln!(
                    out,
                    "Size/shape partition of the {} dissimilarity (transform {}), {} samples",
                    params.distance, params.transform, f.n
                )?;
                let mut t = new_table(&["part", "fraction", "adjusted", "test"]);
                let rows = [
                    (
                        "size only",
                        f.fractions.size_only,
                        f.adjusted_fractions.size_only,
                        p_text(&r.size_only),
                    ),
                    (
                        "shared",
                        f.fractions.shared,
                        f.adjusted_fractions.shared,
                        "cannot be tested".into(),
                    ),
                    (
                        "shape only",
                        f.fractions.shape_only,
                        f.adjusted_fractions.shape_only,
                        p_text(&r.shape_only),
                    ),
                    (
                        "unexplained",
                        f.fractions.unexplained,
                        f.adjusted_fractions.unexplained,
                        String::new(),
                    ),
                ];
                for (name, raw, adj, test) in rows {
                    t.add_row(vec![name.to_string(), pct(raw), pct(adj), test]);
                }
                write_table(out, &t)?;
                if f.exhaustive {
                    writeln!(
                        out,
                        "One set explains the whole dissimilarity (no residual variation): the tests of the unique parts are not applicable."
                    )?;
                }
            }
            let r = &results[0];
            writeln!(
                out,
                "Size: {} of the sample total{}. Shape: {} ({} dimension(s), {} of profile inertia{}).",
                match params.size {
                    SizeArg::LogTotal => "log",
                    SizeArg::Total => "value",
                },
                if sel.per_effort {
                    " per unit effort"
                } else {
                    ""
                },
                if r.shape.kind == "profiles" {
                    "the profile space"
                } else {
                    "leading correspondence-analysis axes"
                },
                r.shape.axes,
                pct(r.shape.inertia_share),
                if params.compare_distances {
                    "; same design for every row"
                } else {
                    ""
                },
            )?;
            writeln!(
                out,
                "Tests: pseudo-F of each unique part given the other set, residuals of the reduced model permuted \
                 (Freedman-Lane); {} permutations, scheme {}, seed {seed}.",
                params.permutations, r.scheme
            )?;
            writeln!(out, "{SHARED}")?;
            writeln!(out, "{CAUTION} (`tally compare` runs both.)")?;
        }
    }
    Ok(())
}
