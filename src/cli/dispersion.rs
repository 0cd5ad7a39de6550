//! `tally dispersion [SELECTION] --by FIELD`: the test of equal multivariate
//! spread between groups (distances of rows to their group centroid, one-way F,
//! permutation p-value), optionally pair by pair. Prints a table, CSV or JSON and
//! stores the result as a run (kind `dispersion`).

use std::io::Write;

use anyhow::Context;
use clap::ValueEnum;
use serde_json::{Value, json};

use super::common::{DistanceArgs, Progress, RunArgs, store_and_print};
use super::permanova::{fmt_num, fmt_p, grouping, groups_line, scheme};
use super::selection::{SelectionArgs, load_matrix};
use crate::analysis::dispersion::{
    DispersionOptions, DispersionPair, DispersionResult, Permute, dispersion, dispersion_pairwise,
};
use crate::analysis::dissimilarity::Distance;
use crate::analysis::linear_model::Grouping;
use crate::analysis::transform::Transform;
use crate::matrix::CountMatrix;
use crate::report::format::{new_table, num, write_table};
use crate::store::Store;

/// What is permuted, on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Default)]
pub enum PermuteArg {
    /// Distances minus their group mean (the usual choice).
    #[default]
    Residuals,
    /// The distances themselves, between groups.
    Values,
}

impl From<PermuteArg> for Permute {
    fn from(p: PermuteArg) -> Self {
        match p {
            PermuteArg::Residuals => Permute::Residuals,
            PermuteArg::Values => Permute::Values,
        }
    }
}

/// Arguments of `tally dispersion`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The factor whose groups are compared (a built-in field or a site attribute).
    #[arg(long, value_name = "FIELD")]
    pub by: String,
    /// Permute only within the levels of this field.
    #[arg(long, value_name = "FIELD")]
    pub strata: Option<String>,
    /// Also compare every pair of groups (Holm and Benjamini–Hochberg adjusted).
    #[arg(long)]
    pub pairwise: bool,
    /// What is permuted to build the null distribution of F.
    #[arg(long, value_enum, default_value_t)]
    pub permute: PermuteArg,
    /// Dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Permutations, seed, storage, format.
    #[command(flatten)]
    pub run: RunArgs,
    /// Which events, and what one row is (listed last: its help heading
    /// would otherwise carry over to the flags after it).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

struct Outcome {
    result: DispersionResult,
    pairs: Option<Vec<DispersionPair>>,
    groups: Grouping,
    notes: Vec<String>,
}

fn compute(args: &Args, m: &CountMatrix, seed: u64) -> anyhow::Result<Outcome> {
    let groups = grouping(m, &args.by, "--by")?;
    let opts = DispersionOptions {
        permutations: args.run.permutations,
        seed,
        scheme: scheme(m, args.strata.as_deref(), &args.by)?,
        permute: args.permute.into(),
    };
    let d = super::distances::compute(m, &args.distance)?;
    let progress = Progress::new("dispersion");
    let cb = |done: usize, total: usize| progress.update(done, total);
    let result = dispersion(&d, &groups, &opts, Some(&cb)).context("dispersion test")?;
    let pairs = if args.pairwise {
        Some(
            dispersion_pairwise(&d, &groups, &opts, Some(&cb))
                .context("pairwise dispersion tests")?,
        )
    } else {
        None
    };
    progress.finish();
    let mut notes = m.notes.clone();
    if result.clamped > 0 {
        notes.push(format!(
            "{} row(s) had a negative squared distance to their centroid (the dissimilarity \
             is not Euclidean) and were set to distance 0",
            result.clamped
        ));
    }
    Ok(Outcome {
        result,
        pairs,
        groups,
        notes,
    })
}

fn result_json(args: &Args, m: &CountMatrix, o: &Outcome) -> Value {
    let r = &o.result;
    let mut v = json!({
        "n": m.samples.len(),
        "by": args.by,
        "strata": args.strata,
        "distance": Distance::from(args.distance.distance).name(),
        "transform": Transform::from(args.distance.transform).name(),
        "groups": r.groups.iter().map(|g| json!({
            "name": g.name,
            "n": g.n,
            "mean_distance": num(g.mean_distance),
        })).collect::<Vec<_>>(),
        "f": num(r.f),
        "df": [r.df.0, r.df.1],
        "p_value": num(r.p_value),
        "permutations": r.permutations,
        "exact": r.exact,
        "min_p": num(r.min_p),
        "seed": r.seed,
        "scheme": r.scheme,
        "permute": r.permute,
        "clamped": r.clamped,
        "distances": m.samples.iter().zip(o.groups.codes()).zip(&r.distances).map(|((s, &c), &z)| json!({
            "label": s.label,
            "group": o.groups.levels()[c],
            "distance": num(z),
        })).collect::<Vec<_>>(),
        "fingerprint": m.fingerprint(),
        "notes": o.notes,
    });
    if let Some(pairs) = &o.pairs {
        v["pairs"] = Value::Array(
            pairs
                .iter()
                .map(|p| {
                    json!({
                        "a": p.a,
                        "b": p.b,
                        "f": num(p.f),
                        "p_value": num(p.p_value),
                        "p_holm": num(p.p_holm),
                        "p_bh": num(p.p_bh),
                        "exact": p.exact,
                    })
                })
                .collect(),
        );
    }
    v
}

fn run_values(o: &Outcome) -> Vec<(String, Option<f64>)> {
    let r = &o.result;
    let mut vals = vec![
        ("f".to_string(), Some(r.f)),
        ("p_value".to_string(), Some(r.p_value)),
    ];
    for g in &r.groups {
        vals.push((format!("{}.mean_distance", g.name), Some(g.mean_distance)));
    }
    for p in o.pairs.iter().flatten() {
        let key = format!("{} vs {}", p.a, p.b);
        vals.push((format!("{key}.f"), Some(p.f)));
        vals.push((format!("{key}.p_value"), Some(p.p_value)));
        vals.push((format!("{key}.p_holm"), Some(p.p_holm)));
    }
    vals
}

fn write_csv(out: &mut dyn Write, o: &Outcome) -> anyhow::Result<()> {
    let r = &o.result;
    let f = |v: f64| {
        if v.is_finite() {
            format!("{v}")
        } else {
            String::new()
        }
    };
    let mut w = csv::Writer::from_writer(out);
    w.write_record([
        "kind",
        "group_a",
        "group_b",
        "n",
        "mean_distance",
        "f",
        "p_value",
        "p_holm",
        "p_bh",
        "permutations",
        "exact",
    ])?;
    for g in &r.groups {
        w.write_record([
            "group".into(),
            g.name.clone(),
            String::new(),
            g.n.to_string(),
            f(g.mean_distance),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
        ])?;
    }
    w.write_record([
        "test".into(),
        String::new(),
        String::new(),
        r.groups.iter().map(|g| g.n).sum::<usize>().to_string(),
        String::new(),
        f(r.f),
        f(r.p_value),
        String::new(),
        String::new(),
        r.permutations.to_string(),
        r.exact.to_string(),
    ])?;
    for p in o.pairs.iter().flatten() {
        w.write_record([
            "pair".into(),
            p.a.clone(),
            p.b.clone(),
            String::new(),
            String::new(),
            f(p.f),
            f(p.p_value),
            f(p.p_holm),
            f(p.p_bh),
            String::new(),
            p.exact.to_string(),
        ])?;
    }
    w.flush()?;
    Ok(())
}

fn write_text(
    out: &mut dyn Write,
    args: &Args,
    m: &CountMatrix,
    unit: &str,
    o: &Outcome,
) -> anyhow::Result<()> {
    let r = &o.result;
    writeln!(
        out,
        "Dispersion about group centroids, {} dissimilarities (transform {}), {} {unit} rows, by {} ({} groups: {})",
        Distance::from(args.distance.distance).name(),
        Transform::from(args.distance.transform).name(),
        m.samples.len(),
        args.by,
        o.groups.n_groups(),
        groups_line(&o.groups),
    )?;
    let mut t = new_table(&["group", "n", "mean distance to centroid"]);
    for g in &r.groups {
        t.add_row(vec![
            g.name.clone(),
            g.n.to_string(),
            fmt_num(g.mean_distance),
        ]);
    }
    write_table(out, &t)?;
    writeln!(
        out,
        "F = {} on {} and {} df, p-value = {}",
        fmt_num(r.f),
        r.df.0,
        r.df.1,
        fmt_p(r.p_value, r.permutations)
    )?;
    writeln!(
        out,
        "permutations: {} ({}), scheme: {}, seed: {}; {} permuted",
        r.permutations,
        if r.exact {
            "exact enumeration"
        } else {
            "random"
        },
        r.scheme,
        r.seed,
        match r.permute {
            Permute::Residuals => "residuals from group means",
            Permute::Values => "distances",
        }
    )?;
    if let Some(pairs) = &o.pairs {
        writeln!(out)?;
        writeln!(out, "pairwise comparisons")?;
        let mut t = new_table(&["group a", "group b", "F", "p-value", "p Holm", "p BH"]);
        for p in pairs {
            t.add_row(vec![
                p.a.clone(),
                p.b.clone(),
                fmt_num(p.f),
                fmt_p(p.p_value, r.permutations),
                fmt_p(p.p_holm, r.permutations),
                fmt_p(p.p_bh, r.permutations),
            ]);
        }
        write_table(out, &t)?;
    }
    for n in &o.notes[m.notes.len()..] {
        writeln!(out, "note: {n}")?;
    }
    Ok(())
}

/// Run the dispersion test of the selection and print it.
///
/// # Errors
/// Selection and assembly errors; unknown or unusable fields; kernel refusals;
/// SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let sel = args.selection.resolve(store)?;
    let m = load_matrix(store, &sel)?;
    grouping(&m, &args.by, "--by")?;
    let seed = args.run.seed();
    let o = compute(&args, &m, seed)?;
    let result = result_json(&args, &m, &o);
    let parameters = json!({
        "by": args.by,
        "strata": args.strata,
        "pairwise": args.pairwise,
        "permute": o.result.permute,
        "permutations": args.run.permutations,
        "distance": Distance::from(args.distance.distance).name(),
        "transform": Transform::from(args.distance.transform).name(),
    });
    store_and_print(
        store,
        &args.run,
        "dispersion",
        &sel,
        &m,
        parameters,
        seed,
        result,
        run_values(&o),
        out,
        |w| write_csv(w, &o),
        |w| write_text(w, &args, &m, sel.unit().as_str(), &o),
    )
}
