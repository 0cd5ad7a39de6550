//! `tally compare [SELECTION] --by FIELD`: the recommended size-and-shape
//! workflow in one command. (a) size: the size test of log totals with the
//! ratio of geometric means to the reference group and its bootstrap interval;
//! (b) shape: PERMANOVA under a shape-only dissimilarity (Hellinger by default),
//! with the dispersion test beside it, optionally after rarefying every sample to
//! the same number of individuals; (c) the combined dissimilarity (Bray-Curtis on
//! square roots by default) with its PERMANOVA and size/shape partition; (d) a
//! plain-language verdict per group against the reference and, with more than two
//! groups, for every pair with Holm-adjusted p-values.
//!
//! [`compute`] returns the JSON object (for the HTML report); [`compute_on`]
//! replays a stored run from its [`Params`] (`tally runs verify`).

use std::io::Write;

use anyhow::{Context, bail};
use clap::ValueEnum;
use serde::{Deserialize, Serialize};
use serde_json::{Value, json};

use super::FormatArg;
use super::common::{RunArgs, distance_parser, store_run, transform_parser};
use super::note;
use super::partition::{CAUTION, StoredValues, scheme_of};
use super::selection::{SelectionArgs, load_matrix};
use crate::analysis::dispersion::{DispersionOptions, DispersionResult, Permute, dispersion};
use crate::analysis::linear_model::{Grouping, SsType};
use crate::analysis::partition::{
    PartitionOptions, PartitionResult, ShapeAxes, SizeCoding, partition,
};
use crate::analysis::permanova::{PermanovaOptions, PermanovaResult, permanova_oneway};
use crate::analysis::permutation::{Scheme, holm};
use crate::analysis::rarefy::{mean_rarefied_distance, min_total};
use crate::analysis::size_test::{SizeTestOptions, SizeTestResult, size_test};
use crate::analysis::{Distance, DistanceMatrix, Transform};
use crate::matrix::CountMatrix;
use crate::report::format::{new_table, num, opt_num, write_json, write_table};
use crate::store::Store;

/// Kind under which compare runs are stored.
pub const KIND: &str = "compare";

/// Bootstrap resamples of the ratio interval.
pub const BOOTSTRAP: usize = 999;

/// The shape-only dissimilarity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum ShapeDistance {
    /// Hellinger: exactly blind to sample totals.
    Hellinger,
    /// Chi-square: blind to totals up to the column masses of the data set.
    ChiSquare,
}

impl From<ShapeDistance> for Distance {
    fn from(s: ShapeDistance) -> Self {
        match s {
            ShapeDistance::Hellinger => Distance::Hellinger,
            ShapeDistance::ChiSquare => Distance::ChiSquare,
        }
    }
}

pub use super::common::{Periods, parse_periods};

fn parse_rarefy(s: &str) -> Result<String, String> {
    let t = s.trim();
    if t == "min" || t.parse::<u64>().is_ok_and(|n| n > 0) {
        Ok(t.to_string())
    } else {
        Err(format!(
            "expected a number of individuals or 'min', got '{s}'"
        ))
    }
}

/// Arguments of `tally compare`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// The field whose values are the groups (e.g. period, reach, habitat, site).
    #[arg(long, value_name = "FIELD")]
    pub by: String,
    /// Permute only within the levels of this field (e.g. site).
    #[arg(long, value_name = "FIELD")]
    pub strata: Option<String>,
    /// The group the others are compared with [default: the first in sorted order].
    #[arg(long, value_name = "GROUP")]
    pub reference: Option<String>,
    /// Define the field `period` by year ranges, e.g. 2008..2015,2016..2025
    /// (labels 2008-2015, 2016-2025); rows outside every period are dropped.
    #[arg(long, value_name = "A..B,C..D", value_parser = parse_periods)]
    pub periods: Option<Periods>,
    /// Shape-only dissimilarity of the composition test.
    #[arg(long, value_enum, default_value_t = ShapeDistance::Hellinger)]
    pub shape_distance: ShapeDistance,
    /// Before the shape analysis, subsample every sample without replacement to N
    /// individuals (`min`: the smallest sample); needs whole counts (no --per-effort).
    #[arg(long, value_name = "N|min", value_parser = parse_rarefy)]
    pub rarefy: Option<String>,
    /// Rarefied draws whose dissimilarities are averaged.
    #[arg(long, value_name = "R", default_value_t = 10)]
    pub rarefy_reps: usize,
    /// Significance level used for the wording of the verdict (every p-value is printed).
    #[arg(long, value_name = "A", default_value_t = 0.05)]
    pub alpha: f64,
    /// Combined dissimilarity (size and shape together).
    #[arg(long, value_parser = distance_parser(), default_value = "bray-curtis")]
    pub distance: Distance,
    /// Transform before the combined dissimilarity.
    #[arg(long, value_parser = transform_parser(), default_value = "sqrt")]
    pub transform: Transform,
    /// Permutations, seed, storage, format.
    #[command(flatten)]
    pub run: RunArgs,
    /// Which events, and what one row is (last, so that its help heading does
    /// not carry over to the analysis flags).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

/// Every analysis parameter of a compare run (stored with the run; enough to replay it).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Params {
    /// Grouping field.
    pub by: String,
    /// Stratum field.
    pub strata: Option<String>,
    /// Reference group (`None`: the first level).
    pub reference: Option<String>,
    /// Year periods defining the field `period`.
    pub periods: Option<Vec<(i32, i32)>>,
    /// Shape-only dissimilarity.
    pub shape_distance: ShapeDistance,
    /// Rarefying depth (`"min"` or a number), if any.
    pub rarefy: Option<String>,
    /// Rarefied draws.
    pub rarefy_reps: usize,
    /// Significance level of the wording.
    pub alpha: f64,
    /// Combined dissimilarity name.
    pub distance: String,
    /// Transform name of the combined dissimilarity.
    pub transform: String,
    /// Permutations per test.
    pub permutations: usize,
    /// Bootstrap resamples of the size ratio interval.
    pub bootstrap: usize,
}

impl Params {
    /// The parameters of a command line.
    pub fn of(args: &Args) -> Params {
        Params {
            by: args.by.clone(),
            strata: args.strata.clone(),
            reference: args.reference.clone(),
            periods: args.periods.as_ref().map(|p| p.0.clone()),
            shape_distance: args.shape_distance,
            rarefy: args.rarefy.clone(),
            rarefy_reps: args.rarefy_reps,
            alpha: args.alpha,
            distance: Distance::from(args.distance).name().to_string(),
            transform: Transform::from(args.transform).name().to_string(),
            permutations: args.run.permutations,
            bootstrap: BOOTSTRAP,
        }
    }
}

/// A p-value for people: two significant digits, never rounded to zero.
pub fn fmt_p(p: f64) -> String {
    if !p.is_finite() {
        return "n/a".into();
    }
    let decimals = if p > 0.99 {
        3
    } else {
        (1 - p.log10().floor() as i32).max(2) as usize
    };
    let s = format!("{p:.decimals$}");
    let s = s.trim_end_matches('0');
    s.trim_end_matches('.').to_string()
}

/// One comparison of a group with its reference.
struct Comparison {
    group: String,
    reference: String,
    n: (usize, usize),
    ratio: f64,
    ci: (f64, f64),
    p_size: f64,
    p_shape: f64,
    f_shape: f64,
    p_disp: f64,
    adjusted: Option<(f64, f64, f64)>,
}

impl Comparison {
    fn effective(&self) -> (f64, f64, f64) {
        self.adjusted
            .unwrap_or((self.p_size, self.p_shape, self.p_disp))
    }

    fn verdict(&self, alpha: f64) -> (String, bool, bool, bool) {
        let (ps, pc, pd) = self.effective();
        let label = if self.adjusted.is_some() {
            "Holm-adjusted p"
        } else {
            "p"
        };
        let (ab, co, di) = (ps <= alpha, pc <= alpha, pd <= alpha);
        let size_word = if !ab {
            "abundance not different"
        } else if self.ratio < 1.0 {
            "abundance lower"
        } else {
            "abundance higher"
        };
        let mut text = format!(
            "{} against {}: {size_word} (×{:.2}, 95% CI {:.2}–{:.2}, {label} = {}); composition {} ({label} = {})",
            self.group,
            self.reference,
            self.ratio,
            self.ci.0,
            self.ci.1,
            fmt_p(ps),
            if co { "different" } else { "not different" },
            fmt_p(pc),
        );
        if di {
            text.push_str(&format!(
                "; the spread of composition differs too (dispersion {label} = {}), so a composition \
                 difference may be one of spread rather than of average composition",
                fmt_p(pd)
            ));
        }
        (text, ab, co, di)
    }

    fn json(&self, shape_distance: Distance, alpha: f64) -> Value {
        let (text, ab, co, di) = self.verdict(alpha);
        let adj = |k: usize| self.adjusted.map(|a| [a.0, a.1, a.2][k]);
        json!({
            "group": self.group,
            "reference": self.reference,
            "n": {"group": self.n.0, "reference": self.n.1},
            "size": {
                "ratio": num(self.ratio),
                "ci_low": num(self.ci.0),
                "ci_high": num(self.ci.1),
                "p_value": num(self.p_size),
                "p_adjusted": opt_num(adj(0)),
            },
            "shape": {
                "distance": shape_distance.name(),
                "pseudo_f": num(self.f_shape),
                "p_value": num(self.p_shape),
                "p_adjusted": opt_num(adj(1)),
                "dispersion_p_value": num(self.p_disp),
                "dispersion_p_adjusted": opt_num(adj(2)),
            },
            "abundance_differs": ab,
            "composition_differs": co,
            "dispersion_differs": di,
            "verdict": text,
        })
    }
}

struct Tests {
    size: SizeTestResult,
    shape: PermanovaResult,
    disp: DispersionResult,
}

/// Size, shape and dispersion tests of the rows `idx` (into the matrix) with
/// `shape_idx` (into the shape dissimilarity, which may lack rarefied-out rows).
#[allow(clippy::too_many_arguments)]
fn run_tests(
    totals: &[f64],
    labels: &[String],
    reference: &str,
    rows: &[usize],
    shape_d: &DistanceMatrix,
    shape_rows: &[usize],
    scheme: &Scheme,
    p: &Params,
    seed: u64,
) -> anyhow::Result<Tests> {
    let sub_labels: Vec<&str> = rows.iter().map(|&i| labels[i].as_str()).collect();
    let g = Grouping::from_labels(&sub_labels);
    let reference_code = g
        .levels()
        .iter()
        .position(|l| l == reference)
        .context("invariant: the reference is one of the groups compared")?;
    let t: Vec<f64> = rows.iter().map(|&i| totals[i]).collect();
    let size = size_test(
        &t,
        &g,
        &SizeTestOptions {
            permutations: p.permutations,
            seed,
            scheme: scheme.subset(rows),
            bootstrap: p.bootstrap,
            reference: reference_code,
            confidence: 0.95,
        },
        None,
    )
    .context("size test")?;
    // shape_rows[k] is the matrix row of shape_d's k-th sample.
    let sk: Vec<usize> = (0..shape_rows.len())
        .filter(|&k| rows.contains(&shape_rows[k]))
        .collect();
    let sd = shape_d.subset(&sk);
    let sl: Vec<&str> = sk.iter().map(|&k| labels[shape_rows[k]].as_str()).collect();
    let sg = Grouping::from_labels(&sl);
    if sg.n_groups() != g.n_groups() {
        bail!("after rarefying, a group has no samples left: rarefy to fewer individuals");
    }
    let srows: Vec<usize> = sk.iter().map(|&k| shape_rows[k]).collect();
    let sscheme = scheme.subset(&srows);
    let shape = permanova_oneway(
        &sd,
        &sg,
        &PermanovaOptions {
            permutations: p.permutations,
            seed,
            scheme: sscheme.clone(),
            ss_type: SsType::Sequential,
        },
        None,
    )
    .context("composition test (PERMANOVA)")?;
    let disp = dispersion(
        &sd,
        &sg,
        &DispersionOptions {
            permutations: p.permutations,
            seed,
            scheme: sscheme,
            permute: Permute::Residuals,
        },
        None,
    )
    .context("dispersion test")?;
    Ok(Tests { size, shape, disp })
}

fn comparison_of(t: &Tests, group: &str, reference: &str) -> Comparison {
    let find = |name: &str| t.size.groups.iter().find(|g| g.name == name);
    let (gm, rm) = (find(group), find(reference));
    Comparison {
        group: group.to_string(),
        reference: reference.to_string(),
        n: (gm.map_or(0, |g| g.n), rm.map_or(0, |g| g.n)),
        ratio: gm.map_or(f64::NAN, |g| g.ratio),
        ci: gm.map_or((f64::NAN, f64::NAN), |g| (g.ratio_low, g.ratio_high)),
        p_size: t.size.p_value,
        p_shape: t.shape.terms[0].p_value,
        f_shape: t.shape.terms[0].pseudo_f,
        p_disp: t.disp.p_value,
        adjusted: None,
    }
}

/// The whole workflow on matrix `m` (as assembled from the selection; `per_effort`
/// tells whether it holds counts per unit effort): the result JSON and the headline
/// numbers to store. Deterministic for a given matrix, parameters and seed.
///
/// # Errors
/// Unknown fields or groups, too few groups, rarefying per-effort values, kernel errors.
pub fn compute_on(
    m: &CountMatrix,
    per_effort: bool,
    p: &Params,
    seed: u64,
) -> anyhow::Result<(Value, StoredValues)> {
    if !(p.alpha > 0.0 && p.alpha < 1.0) {
        bail!("--alpha must be between 0 and 1, got {}", p.alpha);
    }
    let mut notes: Vec<String> = Vec::new();
    let m = match &p.periods {
        Some(ps) => {
            let pm = m.with_periods(ps)?;
            notes.extend(pm.notes.iter().skip(m.notes.len()).cloned());
            pm
        }
        None => m.clone(),
    };
    let labels = m.field_values(&p.by)?;
    let groups = Grouping::from_labels(&labels);
    let levels = groups.levels().to_vec();
    if levels.len() < 2 {
        bail!(
            "--by {} has a single value ({}) in this selection: there is nothing to compare",
            p.by,
            levels.first().map(String::as_str).unwrap_or("none")
        );
    }
    let reference = match &p.reference {
        Some(r) => {
            if !levels.contains(r) {
                bail!(
                    "--reference {r} is not a value of {} here (values: {})",
                    p.by,
                    levels.join(", ")
                );
            }
            r.clone()
        }
        None => levels[0].clone(),
    };
    let scheme = scheme_of(&m, p.strata.as_deref())?;
    let n = m.values.nrows();
    let totals = m.totals();
    let shape_distance = Distance::from(p.shape_distance);

    // (b) The shape dissimilarity, after rarefying if asked.
    let (shape_d, shape_rows, rarefied) = match &p.rarefy {
        Some(r) => {
            if per_effort {
                bail!(
                    "--rarefy subsamples individuals, so it needs whole counts, but the selection has \
                     --per-effort (counts per unit effort). Rarefy the raw counts instead (drop --per-effort): \
                     rarefying itself puts every sample on the same number of individuals"
                );
            }
            let depth = if r == "min" {
                min_total(&m.values)?
            } else {
                r.parse::<u64>().with_context(|| format!("--rarefy {r}"))?
            };
            let keep: Vec<usize> = (0..n).filter(|&i| totals[i] >= depth as f64).collect();
            let dropped: Vec<&str> = (0..n)
                .filter(|i| !keep.contains(i))
                .map(|i| m.samples[i].label.as_str())
                .collect();
            if !dropped.is_empty() {
                notes.push(format!(
                    "rarefying to {depth} individuals: {} sample(s) with fewer dropped from the shape analysis ({}{})",
                    dropped.len(),
                    dropped.iter().take(5).copied().collect::<Vec<_>>().join(", "),
                    if dropped.len() > 5 { ", …" } else { "" }
                ));
            }
            if keep.len() < 3 {
                bail!(
                    "rarefying to {depth} individuals leaves {} sample(s): rarefy to fewer",
                    keep.len()
                );
            }
            let sub = m.values.select_rows(keep.iter());
            let d = mean_rarefied_distance(
                &sub,
                depth,
                p.rarefy_reps,
                seed,
                shape_distance,
                Transform::None,
            )?;
            (
                d,
                keep,
                Some(json!({"depth": depth, "reps": p.rarefy_reps, "dropped": dropped})),
            )
        }
        None => (shape_distance.compute(&m.values)?, (0..n).collect(), None),
    };

    // (a), (b): global tests over all groups.
    let all: Vec<usize> = (0..n).collect();
    let global = run_tests(
        &totals,
        &labels,
        &reference,
        &all,
        &shape_d,
        &shape_rows,
        &scheme,
        p,
        seed,
    )?;

    // (c) The combined dissimilarity with its PERMANOVA and partition.
    let distance = Distance::from_name(&p.distance)
        .with_context(|| format!("unknown dissimilarity '{}'", p.distance))?;
    let transform = Transform::from_name(&p.transform)
        .with_context(|| format!("unknown transform '{}'", p.transform))?;
    let comb_d = distance.compute_after(transform, &m.values)?;
    let comb = permanova_oneway(
        &comb_d,
        &groups,
        &PermanovaOptions {
            permutations: p.permutations,
            seed,
            scheme: scheme.clone(),
            ss_type: SsType::Sequential,
        },
        None,
    )
    .context("PERMANOVA of the combined dissimilarity")?;
    let part: Option<PartitionResult> = match partition(
        &m.values,
        &comb_d,
        &PartitionOptions {
            size: SizeCoding::LogTotal,
            shape_axes: ShapeAxes::Auto { min_resid_df: 10 },
            permutations: p.permutations,
            seed,
            scheme: scheme.clone(),
        },
        None,
    ) {
        Ok(r) => Some(r),
        Err(e) => {
            notes.push(format!(
                "no size/shape partition of the combined dissimilarity: {e}"
            ));
            None
        }
    };

    // (d) Comparisons.
    let mut comparisons: Vec<Comparison> = Vec::new();
    if levels.len() == 2 {
        let other = levels
            .iter()
            .find(|l| **l != reference)
            .expect("invariant: two levels");
        comparisons.push(comparison_of(&global, other, &reference));
    } else {
        let mut pairs: Vec<(String, String)> = levels
            .iter()
            .filter(|l| **l != reference)
            .map(|l| (l.clone(), reference.clone()))
            .collect();
        for (x, a) in levels.iter().enumerate() {
            for b in levels.iter().skip(x + 1) {
                if *a != reference && *b != reference {
                    pairs.push((b.clone(), a.clone()));
                }
            }
        }
        for (g, r) in &pairs {
            let rows: Vec<usize> = (0..n)
                .filter(|&i| labels[i] == *g || labels[i] == *r)
                .collect();
            let t = run_tests(
                &totals,
                &labels,
                r,
                &rows,
                &shape_d,
                &shape_rows,
                &scheme,
                p,
                seed,
            )
            .with_context(|| format!("comparing {g} with {r}"))?;
            comparisons.push(comparison_of(&t, g, r));
        }
        let hs = holm(&comparisons.iter().map(|c| c.p_size).collect::<Vec<_>>());
        let hc = holm(&comparisons.iter().map(|c| c.p_shape).collect::<Vec<_>>());
        let hd = holm(&comparisons.iter().map(|c| c.p_disp).collect::<Vec<_>>());
        for (k, c) in comparisons.iter_mut().enumerate() {
            c.adjusted = Some((hs[k], hc[k], hd[k]));
        }
    }
    let comp_json: Vec<Value> = comparisons
        .iter()
        .map(|c| c.json(shape_distance, p.alpha))
        .collect();
    let verdict: Vec<String> = comparisons.iter().map(|c| c.verdict(p.alpha).0).collect();

    let two = levels.len() == 2;
    let first = &comparisons[0];
    let size = &global.size;
    let fractions = |f: &crate::analysis::partition::Fractions| {
        json!({"size_only": num(f.size_only), "shared": num(f.shared),
               "shape_only": num(f.shape_only), "unexplained": num(f.unexplained)})
    };
    let mut result = json!({
        "by": p.by,
        "reference": reference,
        "groups": size.groups.iter().map(|g| json!({"name": g.name, "n": g.n})).collect::<Vec<_>>(),
        "alpha": p.alpha,
        "size": {
            "ratio": if two { num(first.ratio) } else { Value::Null },
            "ci_low": if two { num(first.ci.0) } else { Value::Null },
            "ci_high": if two { num(first.ci.1) } else { Value::Null },
            "p_value": num(size.p_value),
            "f": num(size.f),
            "df": [size.df.0, size.df.1],
            "confidence": size.confidence,
            "bootstrap": size.bootstrap,
            "permutations": size.permutations,
            "exact": size.exact,
            "groups": size.groups.iter().map(|g| json!({
                "name": g.name, "n": g.n, "geometric_mean_total": num(g.geometric_mean),
                "ratio": num(g.ratio), "ci_low": num(g.ratio_low), "ci_high": num(g.ratio_high),
            })).collect::<Vec<_>>(),
        },
        "shape": {
            "distance": shape_distance.name(),
            "pseudo_f": num(global.shape.terms[0].pseudo_f),
            "r2": num(global.shape.terms[0].r2),
            "p_value": num(global.shape.terms[0].p_value),
            "permutations": global.shape.permutations,
            "exact": global.shape.exact,
            "dispersion_f": num(global.disp.f),
            "dispersion_p_value": num(global.disp.p_value),
            "dispersion_groups": global.disp.groups.iter().map(|g| json!({
                "name": g.name, "n": g.n, "mean_distance_to_centroid": num(g.mean_distance),
            })).collect::<Vec<_>>(),
            "rarefied": rarefied,
        },
        "combined": {
            "distance": distance.name(),
            "transform": transform.name(),
            "pseudo_f": num(comb.terms[0].pseudo_f),
            "r2": num(comb.terms[0].r2),
            "p_value": num(comb.terms[0].p_value),
            "fractions": part.as_ref().map(|r| fractions(&r.fit.fractions)),
            "adjusted_fractions": part.as_ref().map(|r| fractions(&r.fit.adjusted_fractions)),
            "partition_p_values": part.as_ref().map(|r| json!({
                "size_only": opt_num(r.size_only.p_value), "shape_only": opt_num(r.shape_only.p_value)})),
            "shape_axes": part.as_ref().map(|r| r.shape.axes),
        },
        "comparisons": comp_json,
        "verdict": verdict.join("\n"),
        "seed": seed,
        "scheme": global.size.scheme,
        "permutations": p.permutations,
        "notes": notes,
        "caution": CAUTION,
    });
    if two {
        result["abundance_differs"] = comp_json[0]["abundance_differs"].clone();
        result["composition_differs"] = comp_json[0]["composition_differs"].clone();
        result["dispersion_differs"] = comp_json[0]["dispersion_differs"].clone();
    }
    let mut values: Vec<(String, Option<f64>)> = vec![
        ("p.size".into(), Some(size.p_value)),
        ("p.shape".into(), Some(global.shape.terms[0].p_value)),
        ("p.dispersion".into(), Some(global.disp.p_value)),
        ("p.combined".into(), Some(comb.terms[0].p_value)),
    ];
    if let Some(r) = &part {
        let a = &r.fit.adjusted_fractions;
        values.push(("adj.size_only".into(), Some(a.size_only)));
        values.push(("adj.shared".into(), Some(a.shared)));
        values.push(("adj.shape_only".into(), Some(a.shape_only)));
        values.push(("adj.unexplained".into(), Some(a.unexplained)));
    }
    for c in &comparisons {
        let prefix = if two {
            String::new()
        } else {
            format!("{} vs {}.", c.group, c.reference)
        };
        values.push((format!("{prefix}size.ratio"), Some(c.ratio)));
        values.push((format!("{prefix}size.ci_low"), Some(c.ci.0)));
        values.push((format!("{prefix}size.ci_high"), Some(c.ci.1)));
        if !two {
            let (ps, pc, _) = c.effective();
            values.push((format!("{prefix}p.size"), Some(ps)));
            values.push((format!("{prefix}p.shape"), Some(pc)));
        }
    }
    Ok((result, values))
}

/// The compare result JSON for a command line, without printing or storing
/// (for the HTML report). Assembly notes go to stderr.
///
/// # Errors
/// As [`compute_on`], and selection errors.
pub fn compute(store: &Store, args: &Args) -> anyhow::Result<Value> {
    let sel = args.selection.resolve(store)?;
    let m = load_matrix(store, &sel)?;
    let (v, _) = compute_on(&m, sel.per_effort, &Params::of(args), args.run.seed())?;
    Ok(v)
}

/// A computed and (unless `--no-store`) stored comparison.
struct Executed {
    sel: crate::store::Selection,
    params: Params,
    seed: u64,
    result: Value,
    run_id: Option<i64>,
}

/// Assemble, compute, print the notes and store the run.
fn execute(store: &mut Store, args: &Args) -> anyhow::Result<Executed> {
    let sel = args.selection.resolve(store)?;
    let m = load_matrix(store, &sel)?;
    let params = Params::of(args);
    let seed = args.run.seed();
    let (result, values) = compute_on(&m, sel.per_effort, &params, seed)?;
    if let Some(Value::Array(ns)) = result.get("notes") {
        for n in ns.iter().filter_map(Value::as_str) {
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
        params,
        seed,
        result,
        run_id,
    })
}

/// Compute and store the run as `tally compare` does (unless `--no-store`),
/// without printing the table; returns the result JSON and the run id (for
/// the demo and the HTML report).
///
/// # Errors
/// As [`compute_on`]; selection and storage errors.
pub fn compute_and_store(store: &mut Store, args: &Args) -> anyhow::Result<(Value, Option<i64>)> {
    let e = execute(store, args)?;
    Ok((e.result, e.run_id))
}

/// Run `tally compare`.
///
/// # Errors
/// As [`compute_on`]; I/O and storage errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let Executed {
        sel,
        params,
        seed,
        result,
        ..
    } = execute(store, &args)?;
    let comps = result["comparisons"]
        .as_array()
        .cloned()
        .unwrap_or_default();
    let f = |v: &Value| {
        v.as_f64()
            .map(|x| format!("{x:.2}"))
            .unwrap_or_else(|| "n/a".into())
    };
    let pv = |v: &Value| v.as_f64().map(fmt_p).unwrap_or_else(|| "n/a".into());
    match args.run.format {
        FormatArg::Json => write_json(out, &result)?,
        FormatArg::Csv => {
            let mut w = csv::Writer::from_writer(out);
            w.write_record([
                "group",
                "reference",
                "n_group",
                "n_reference",
                "ratio",
                "ci_low",
                "ci_high",
                "p_size",
                "p_shape",
                "p_dispersion",
                "p_size_adjusted",
                "p_shape_adjusted",
                "abundance_differs",
                "composition_differs",
            ])?;
            let cell = |v: &Value| {
                if v.is_null() {
                    String::new()
                } else {
                    v.to_string().trim_matches('"').to_string()
                }
            };
            for c in &comps {
                w.write_record([
                    cell(&c["group"]),
                    cell(&c["reference"]),
                    cell(&c["n"]["group"]),
                    cell(&c["n"]["reference"]),
                    cell(&c["size"]["ratio"]),
                    cell(&c["size"]["ci_low"]),
                    cell(&c["size"]["ci_high"]),
                    cell(&c["size"]["p_value"]),
                    cell(&c["shape"]["p_value"]),
                    cell(&c["shape"]["dispersion_p_value"]),
                    cell(&c["size"]["p_adjusted"]),
                    cell(&c["shape"]["p_adjusted"]),
                    cell(&c["abundance_differs"]),
                    cell(&c["composition_differs"]),
                ])?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            let groups: Vec<String> = result["groups"]
                .as_array()
                .map(|a| {
                    a.iter()
                        .map(|g| format!("{} (n = {})", g["name"].as_str().unwrap_or(""), g["n"]))
                        .collect()
                })
                .unwrap_or_default();
            writeln!(
                out,
                "Comparing {} groups by {}: {}; reference {}",
                groups.len(),
                params.by,
                groups.join(", "),
                result["reference"].as_str().unwrap_or("")
            )?;
            let mut t = new_table(&[
                "comparison",
                "abundance ratio (95% CI)",
                "p abundance",
                "p composition",
                "p dispersion",
                "verdict",
            ]);
            for c in &comps {
                let adj = !c["size"]["p_adjusted"].is_null();
                let pair = |raw: &Value, a: &Value| {
                    if adj {
                        format!("{} (Holm {})", pv(raw), pv(a))
                    } else {
                        pv(raw)
                    }
                };
                let words = match (
                    c["abundance_differs"].as_bool(),
                    c["composition_differs"].as_bool(),
                ) {
                    (Some(true), Some(true)) => "abundance and composition differ",
                    (Some(true), _) => "abundance differs",
                    (_, Some(true)) => "composition differs",
                    _ => "neither differs",
                };
                t.add_row(vec![
                    format!(
                        "{} vs {}",
                        c["group"].as_str().unwrap_or(""),
                        c["reference"].as_str().unwrap_or("")
                    ),
                    format!(
                        "×{} ({}–{})",
                        f(&c["size"]["ratio"]),
                        f(&c["size"]["ci_low"]),
                        f(&c["size"]["ci_high"])
                    ),
                    pair(&c["size"]["p_value"], &c["size"]["p_adjusted"]),
                    pair(&c["shape"]["p_value"], &c["shape"]["p_adjusted"]),
                    pair(
                        &c["shape"]["dispersion_p_value"],
                        &c["shape"]["dispersion_p_adjusted"],
                    ),
                    words.to_string(),
                ]);
            }
            write_table(out, &t)?;
            let s = &result["size"];
            let sh = &result["shape"];
            let cb = &result["combined"];
            writeln!(
                out,
                "(a) Size: one-way F on log totals{} = {:.3}, p = {}.",
                if sel.per_effort {
                    " per unit effort"
                } else {
                    ""
                },
                s["f"].as_f64().unwrap_or(f64::NAN),
                pv(&s["p_value"])
            )?;
            writeln!(
                out,
                "(b) Shape: PERMANOVA under {}{}: pseudo-F = {:.3}, R² = {:.3}, p = {}; dispersion F = {:.3}, p = {}.",
                sh["distance"].as_str().unwrap_or(""),
                if sh["rarefied"].is_null() {
                    String::new()
                } else {
                    format!(
                        " after rarefying to {} individuals ({} draws averaged)",
                        sh["rarefied"]["depth"], sh["rarefied"]["reps"]
                    )
                },
                sh["pseudo_f"].as_f64().unwrap_or(f64::NAN),
                sh["r2"].as_f64().unwrap_or(f64::NAN),
                pv(&sh["p_value"]),
                sh["dispersion_f"].as_f64().unwrap_or(f64::NAN),
                pv(&sh["dispersion_p_value"]),
            )?;
            let af = &cb["adjusted_fractions"];
            let pct = |v: &Value| {
                v.as_f64()
                    .map(|x| format!("{:.1}%", 100.0 * x))
                    .unwrap_or_else(|| "n/a".into())
            };
            writeln!(
                out,
                "(c) Combined: {} after {}: pseudo-F = {:.3}, p = {}; adjusted fractions size only {}, shared {}, shape only {}, unexplained {}.",
                cb["distance"].as_str().unwrap_or(""),
                cb["transform"].as_str().unwrap_or(""),
                cb["pseudo_f"].as_f64().unwrap_or(f64::NAN),
                pv(&cb["p_value"]),
                pct(&af["size_only"]),
                pct(&af["shared"]),
                pct(&af["shape_only"]),
                pct(&af["unexplained"]),
            )?;
            writeln!(out, "(d) Verdict at alpha = {}:", params.alpha)?;
            for line in result["verdict"].as_str().unwrap_or("").lines() {
                writeln!(out, "  {line}")?;
            }
            writeln!(
                out,
                "Permutation p-values: {} permutations per test, scheme {}, seed {seed}; ratio intervals from {} bootstrap resamples within groups.",
                params.permutations,
                result["scheme"].as_str().unwrap_or(""),
                params.bootstrap
            )?;
            writeln!(out, "{CAUTION}")?;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn p_values_keep_two_significant_digits_and_never_round_to_zero() {
        assert_eq!(fmt_p(0.0003), "0.0003");
        assert_eq!(fmt_p(0.41), "0.41");
        assert_eq!(fmt_p(0.002), "0.002");
        assert_eq!(fmt_p(0.0123), "0.012");
        assert_eq!(fmt_p(0.998), "0.998");
        assert_eq!(fmt_p(1.0), "1");
        assert_eq!(fmt_p(1.0 / 100_000.0), "0.00001");
    }

    #[test]
    fn periods_parse_as_year_ranges() {
        assert_eq!(
            parse_periods("2008..2015,2016..2025").unwrap(),
            Periods(vec![(2008, 2015), (2016, 2025)])
        );
        assert_eq!(parse_periods("2010").unwrap(), Periods(vec![(2010, 2010)]));
        assert!(parse_periods("2015..2008").is_err());
        assert!(parse_periods("early,late").is_err());
    }
}
