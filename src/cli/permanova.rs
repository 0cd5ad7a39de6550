//! `tally permanova [SELECTION] --by FIELD`: PERMANOVA of a selection's
//! dissimilarities by one factor, optionally with numeric covariates and
//! permutations restricted within strata; pairwise comparisons on request.
//! Prints a table, CSV or JSON and stores the result as a run (kind `permanova`).
//!
//! Path: without covariates the one-way kernel (label permutation, exact
//! enumeration of distinct labelings when they are few) is used, with or without
//! strata; with covariates the multi-term kernel (terms: the factor, then each
//! covariate; Freedman–Lane permutation of residuals).
//!
//! Also owns the helpers the dispersion command shares: field → [`Grouping`],
//! `--strata` → [`Scheme`], and number formatting for people.

use std::io::Write;

use anyhow::Context;
use clap::ValueEnum;
use serde_json::{Value, json};

use super::common::{DistanceArgs, Progress, RunArgs, store_and_print};
use super::selection::{SelectionArgs, load_matrix};
use crate::analysis::dissimilarity::Distance;
use crate::analysis::linear_model::{Design, Grouping, SsType, Term, TermSpec};
use crate::analysis::permanova::{
    PairTest, PermanovaOptions, PermanovaResult, pairwise, permanova, permanova_oneway,
};
use crate::analysis::permutation::Scheme;
use crate::analysis::transform::Transform;
use crate::matrix::CountMatrix;
use crate::report::format::{new_table, num, write_table};
use crate::store::Store;

/// The caution printed beside every PERMANOVA result.
pub const DISPERSION_CAUTION: &str = "PERMANOVA responds to differences in spread as well as \
     in location: groups with unequal dispersion can give a small p-value with identical \
     centroids. Run `tally dispersion` with the same flags beside it.";

/// Sums of squares on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Default)]
pub enum SsArg {
    /// Each term after the terms before it (the factor first, then covariates in order).
    #[default]
    Sequential,
    /// Each term after all the other terms.
    Marginal,
}

impl From<SsArg> for SsType {
    fn from(s: SsArg) -> Self {
        match s {
            SsArg::Sequential => SsType::Sequential,
            SsArg::Marginal => SsType::Marginal,
        }
    }
}

/// Arguments of `tally permanova`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The factor whose groups are compared (a built-in field or a site attribute).
    #[arg(long, value_name = "FIELD")]
    pub by: String,
    /// A numeric covariate added after the factor (repeatable).
    #[arg(long = "covariate", value_name = "FIELD")]
    pub covariates: Vec<String>,
    /// Permute only within the levels of this field.
    #[arg(long, value_name = "FIELD")]
    pub strata: Option<String>,
    /// Also compare every pair of groups (Holm and Benjamini–Hochberg adjusted).
    #[arg(long)]
    pub pairwise: bool,
    /// Sums of squares of the multi-term model.
    #[arg(long, value_enum, default_value_t)]
    pub ss: SsArg,
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

/// The grouping of the rows of `m` by `field`; `flag` names the option in errors.
///
/// # Errors
/// An unknown field (the message lists the available ones) or a field not
/// defined for some row.
pub(crate) fn grouping(m: &CountMatrix, field: &str, flag: &str) -> anyhow::Result<Grouping> {
    let labels = m
        .field_values(field)
        .with_context(|| format!("{flag} {field}"))?;
    Ok(Grouping::from_labels(&labels))
}

/// The exchangeability scheme: free, or within the levels of `strata`.
///
/// # Errors
/// As [`grouping`]; a refusal when `strata` is the `--by` field itself (no
/// sample could change group).
pub(crate) fn scheme(m: &CountMatrix, strata: Option<&str>, by: &str) -> anyhow::Result<Scheme> {
    Ok(match strata {
        None => Scheme::Free,
        Some(f) if f == by => {
            anyhow::bail!(
                "--strata {f}: the strata cannot be the --by field (no sample could change group)"
            )
        }
        Some(f) => Scheme::WithinStrata(grouping(m, f, "--strata")?.codes().to_vec()),
    })
}

/// A p-value for people: fixed decimals fine enough to show the smallest
/// attainable value `1/(P+1)` of `permutations` permutations, never rounded to 0.
pub(crate) fn fmt_p(p: f64, permutations: usize) -> String {
    if !p.is_finite() {
        return String::new();
    }
    let digits = ((permutations as f64 + 1.0).log10().ceil() as usize + 1).clamp(3, 12);
    format!("{p:.digits$}")
}

/// A statistic for people: six significant digits.
pub(crate) fn fmt_num(v: f64) -> String {
    if !v.is_finite() {
        return if v.is_nan() {
            String::new()
        } else {
            "inf".to_string()
        };
    }
    if v == 0.0 {
        return "0".to_string();
    }
    let mag = v.abs().log10().floor() as i32;
    if !(-4..=8).contains(&mag) {
        return format!("{v:.5e}");
    }
    let decimals = (5 - mag).max(0) as usize;
    format!("{v:.decimals$}")
}

/// Group names and sizes as JSON.
pub(crate) fn groups_json(g: &Grouping) -> Value {
    let sizes = g.sizes();
    Value::Array(
        g.levels()
            .iter()
            .zip(sizes)
            .map(|(l, n)| json!({"name": l, "n": n}))
            .collect(),
    )
}

/// `name n, name n, …` for people.
pub(crate) fn groups_line(g: &Grouping) -> String {
    g.levels()
        .iter()
        .zip(g.sizes())
        .map(|(l, n)| format!("{l} {n}"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Everything computed, ready to print.
struct Outcome {
    result: PermanovaResult,
    pairs: Option<Vec<PairTest>>,
    groups: Grouping,
    notes: Vec<String>,
}

fn compute(args: &Args, m: &CountMatrix, seed: u64) -> anyhow::Result<Outcome> {
    let groups = grouping(m, &args.by, "--by")?;
    let mut covariates = Vec::with_capacity(args.covariates.len());
    for c in &args.covariates {
        if c == &args.by || covariates.iter().any(|(name, _)| name == c) {
            anyhow::bail!("--covariate {c}: the field is already in the model");
        }
        let v = m
            .field_numeric(c)
            .with_context(|| format!("--covariate {c}"))?;
        covariates.push((c.clone(), v));
    }
    let scheme = scheme(m, args.strata.as_deref(), &args.by)?;
    let d = super::distances::compute(m, &args.distance)?;
    let opts = PermanovaOptions {
        permutations: args.run.permutations,
        seed,
        scheme,
        ss_type: args.ss.into(),
    };
    let progress = Progress::new("PERMANOVA");
    let cb = |done: usize, total: usize| progress.update(done, total);
    let mut result = if covariates.is_empty() {
        let mut r = permanova_oneway(&d, &groups, &opts, Some(&cb)).context("PERMANOVA")?;
        r.terms[0].name = args.by.clone();
        r
    } else {
        let mut terms = vec![Term::new(args.by.clone(), TermSpec::Factor(groups.clone()))];
        for (name, v) in covariates {
            terms.push(Term::new(name, TermSpec::Covariate(v)));
        }
        let design = Design::new(m.samples.len(), terms).context("building the model")?;
        permanova(&d, &design, &opts, Some(&cb)).context("PERMANOVA")?
    };
    // The one-way path has no sequential/marginal distinction; report what was asked.
    result.ss_type = opts.ss_type;
    let pairs = if args.pairwise {
        Some(pairwise(&d, &groups, &opts, Some(&cb)).context("pairwise PERMANOVA")?)
    } else {
        None
    };
    progress.finish();
    let mut notes = m.notes.clone();
    notes.push(DISPERSION_CAUTION.to_string());
    if args.pairwise && !args.covariates.is_empty() {
        notes.push(
            "pairwise comparisons use the factor alone (covariates are not in the pairwise models)"
                .to_string(),
        );
    }
    Ok(Outcome {
        result,
        pairs,
        groups,
        notes,
    })
}

fn pair_json(p: &PairTest) -> Value {
    json!({
        "a": p.a,
        "b": p.b,
        "n_a": p.n.0,
        "n_b": p.n.1,
        "pseudo_f": num(p.pseudo_f),
        "r2": num(p.r2),
        "p_value": num(p.p_value),
        "p_holm": num(p.p_holm),
        "p_bh": num(p.p_bh),
        "permutations": p.permutations,
        "exact": p.exact,
    })
}

fn result_json(args: &Args, m: &CountMatrix, o: &Outcome) -> Value {
    let r = &o.result;
    let mut v = json!({
        "n": m.samples.len(),
        "by": args.by,
        "covariates": args.covariates,
        "strata": args.strata,
        "distance": Distance::from(args.distance.distance).name(),
        "transform": Transform::from(args.distance.transform).name(),
        "groups": groups_json(&o.groups),
        "terms": r.terms.iter().map(|t| json!({
            "name": t.name,
            "df": t.df,
            "ss": num(t.ss),
            "r2": num(t.r2),
            "pseudo_f": num(t.pseudo_f),
            "p_value": num(t.p_value),
            "permutations": t.permutations,
            "exact": t.exact,
            "min_p": num(t.min_p),
        })).collect::<Vec<_>>(),
        "residual": {"df": r.residual.df, "ss": num(r.residual.ss)},
        "total": {"df": r.total.df, "ss": num(r.total.ss)},
        "ss_type": r.ss_type,
        "method": r.method,
        "permutations": r.permutations,
        "exact": r.exact,
        "seed": r.seed,
        "scheme": r.scheme,
        "fingerprint": m.fingerprint(),
        "notes": o.notes,
    });
    if let Some(pairs) = &o.pairs {
        v["pairs"] = Value::Array(pairs.iter().map(pair_json).collect());
    }
    v
}

fn run_values(o: &Outcome) -> Vec<(String, Option<f64>)> {
    let mut vals = Vec::new();
    for t in &o.result.terms {
        vals.push((format!("{}.pseudo_f", t.name), Some(t.pseudo_f)));
        vals.push((format!("{}.p_value", t.name), Some(t.p_value)));
        vals.push((format!("{}.r2", t.name), Some(t.r2)));
    }
    vals.push(("residual.ss".into(), Some(o.result.residual.ss)));
    vals.push(("total.ss".into(), Some(o.result.total.ss)));
    if let Some(pairs) = &o.pairs {
        for p in pairs {
            let key = format!("{} vs {}", p.a, p.b);
            vals.push((format!("{key}.pseudo_f"), Some(p.pseudo_f)));
            vals.push((format!("{key}.p_value"), Some(p.p_value)));
            vals.push((format!("{key}.p_holm"), Some(p.p_holm)));
        }
    }
    vals
}

fn write_csv(out: &mut dyn Write, o: &Outcome) -> anyhow::Result<()> {
    let r = &o.result;
    let mut w = csv::Writer::from_writer(out);
    w.write_record([
        "kind",
        "name",
        "group_a",
        "group_b",
        "df",
        "ss",
        "r2",
        "pseudo_f",
        "p_value",
        "p_holm",
        "p_bh",
        "permutations",
        "exact",
    ])?;
    let f = |v: f64| {
        if v.is_finite() {
            format!("{v}")
        } else {
            String::new()
        }
    };
    for t in &r.terms {
        w.write_record([
            "term".into(),
            t.name.clone(),
            String::new(),
            String::new(),
            t.df.to_string(),
            f(t.ss),
            f(t.r2),
            f(t.pseudo_f),
            f(t.p_value),
            String::new(),
            String::new(),
            t.permutations.to_string(),
            t.exact.to_string(),
        ])?;
    }
    for (kind, row) in [("residual", &r.residual), ("total", &r.total)] {
        let mut rec = vec![
            kind.to_string(),
            String::new(),
            String::new(),
            String::new(),
        ];
        rec.push(row.df.to_string());
        rec.push(f(row.ss));
        rec.extend(std::iter::repeat_n(String::new(), 7));
        w.write_record(&rec)?;
    }
    for p in o.pairs.iter().flatten() {
        w.write_record([
            "pair".into(),
            String::new(),
            p.a.clone(),
            p.b.clone(),
            String::new(),
            String::new(),
            f(p.r2),
            f(p.pseudo_f),
            f(p.p_value),
            f(p.p_holm),
            f(p.p_bh),
            p.permutations.to_string(),
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
        "PERMANOVA of {} dissimilarities (transform {}), {} {unit} rows, by {} ({} groups: {})",
        Distance::from(args.distance.distance).name(),
        Transform::from(args.distance.transform).name(),
        m.samples.len(),
        args.by,
        o.groups.n_groups(),
        groups_line(&o.groups),
    )?;
    let mut t = new_table(&["term", "df", "SS", "R²", "pseudo-F", "p-value"]);
    for term in &r.terms {
        t.add_row(vec![
            term.name.clone(),
            term.df.to_string(),
            fmt_num(term.ss),
            fmt_num(term.r2),
            fmt_num(term.pseudo_f),
            fmt_p(term.p_value, term.permutations),
        ]);
    }
    t.add_row(vec![
        "residual".into(),
        r.residual.df.to_string(),
        fmt_num(r.residual.ss),
        fmt_num(r.residual.ss / r.total.ss),
        String::new(),
        String::new(),
    ]);
    t.add_row(vec![
        "total".into(),
        r.total.df.to_string(),
        fmt_num(r.total.ss),
        "1".into(),
        String::new(),
        String::new(),
    ]);
    write_table(out, &t)?;
    let how = match r.method {
        crate::analysis::permanova::PermutationMethod::Labels => "group labels permuted",
        crate::analysis::permanova::PermutationMethod::FreedmanLane => {
            "residuals of each reduced model permuted (Freedman-Lane)"
        }
    };
    writeln!(
        out,
        "permutations: {} ({}), scheme: {}, seed: {}; {how}; {} sums of squares",
        r.permutations,
        if r.exact {
            "exact enumeration"
        } else {
            "random"
        },
        r.scheme,
        r.seed,
        match r.ss_type {
            SsType::Sequential => "sequential",
            SsType::Marginal => "marginal",
        }
    )?;
    if let Some(pairs) = &o.pairs {
        writeln!(out)?;
        writeln!(out, "pairwise comparisons")?;
        let mut t = new_table(&[
            "group a", "group b", "n", "pseudo-F", "R²", "p-value", "p Holm", "p BH",
        ]);
        for p in pairs {
            t.add_row(vec![
                p.a.clone(),
                p.b.clone(),
                format!("{}+{}", p.n.0, p.n.1),
                fmt_num(p.pseudo_f),
                fmt_num(p.r2),
                fmt_p(p.p_value, p.permutations),
                fmt_p(p.p_holm, p.permutations),
                fmt_p(p.p_bh, p.permutations),
            ]);
        }
        write_table(out, &t)?;
    }
    writeln!(out)?;
    writeln!(out, "caution: {DISPERSION_CAUTION}")?;
    Ok(())
}

/// Run the PERMANOVA of the selection and print it.
///
/// # Errors
/// Selection and assembly errors; unknown or unusable fields; kernel refusals
/// (fewer than 2 groups, no residual degrees of freedom…); SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let sel = args.selection.resolve(store)?;
    let m = load_matrix(store, &sel)?;
    // Fail on field names before drawing (and announcing) a seed.
    grouping(&m, &args.by, "--by")?;
    let seed = args.run.seed();
    let o = compute(&args, &m, seed)?;
    let result = result_json(&args, &m, &o);
    let parameters = json!({
        "by": args.by,
        "covariates": args.covariates,
        "strata": args.strata,
        "pairwise": args.pairwise,
        "ss": o.result.ss_type,
        "permutations": args.run.permutations,
        "distance": Distance::from(args.distance.distance).name(),
        "transform": Transform::from(args.distance.transform).name(),
    });
    store_and_print(
        store,
        &args.run,
        "permanova",
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn p_values_show_the_smallest_attainable_value() {
        // 1/(9999+1) = 0.0001 needs 4 decimals; one more keeps (b+1)/(P+1) readable.
        assert_eq!(fmt_p(1.0 / 10000.0, 9999), "0.00010");
        assert_eq!(fmt_p(0.05, 19), "0.050");
        assert_eq!(fmt_num(18.281987915), "18.2820");
        assert_eq!(fmt_num(0.000123456), "0.000123456");
    }
}
