//! `tally trend`: what has been happening year after year, and since when —
//! fewer animals (size), different animals (shape), or both. Builds the
//! per-sample inputs of [`crate::analysis::trend::trend`] from a selection
//! (optionally once per group of `--split-by`), prints the per-period table and
//! the diagnosis, and stores each trend and each period as runs.

use std::collections::BTreeMap;
use std::io::Write;

use anyhow::{Context, bail};
use clap::ValueEnum;
use serde_json::{Value, json};

use crate::analysis::dissimilarity::Distance;
use crate::analysis::linear_model::Grouping;
use crate::analysis::transform::Transform;
use crate::analysis::trend::{
    Baseline, BreakpointSpec, TrendData, TrendOptions, TrendResult, trend,
};
use crate::matrix::{CountMatrix, Unit};
use crate::report::format::{new_table, num, opt_num, write_json, write_table};
use crate::store::{Selection, Store};

use super::FormatArg;
use super::common::{RunArgs, distance_parser, store_run_dated, transform_parser};
use super::selection::{SelectionArgs, load_matrix};

/// What one period is.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum Every {
    /// One period per (season) year.
    Year,
    /// One period per season of each year.
    Season,
}

/// The shape-only dissimilarity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum ShapeDistanceArg {
    /// Hellinger distance.
    Hellinger,
    /// Chi-square distance.
    ChiSquare,
}

/// `tally trend` flags.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Which events, and what one row is.
    #[command(flatten)]
    pub selection: SelectionArgs,
    /// What one period is [rows are pooled per site and period unless --unit is given].
    #[arg(long, value_enum, default_value_t = Every::Year)]
    pub every: Every,
    /// Baseline years A..B, inclusive [default: the first three years].
    #[arg(long, value_name = "A..B", value_parser = parse_baseline)]
    pub baseline: Option<(i32, i32)>,
    /// Also search the year that best splits the series into before and after
    /// (`auto`), or test a given first "after" year.
    #[arg(long, value_name = "auto|YEAR", value_parser = parse_breakpoint)]
    pub breakpoint: Option<BreakpointSpec>,
    /// Run the trend for each value of this field (e.g. `reach`).
    #[arg(long, value_name = "FIELD")]
    pub split_by: Option<String>,
    /// Significance level of the diagnosis.
    #[arg(long, default_value_t = 0.05)]
    pub alpha: f64,
    /// Shape-only dissimilarity for the shape trend and the shape distance.
    #[arg(long, value_enum, default_value_t = ShapeDistanceArg::Hellinger)]
    pub shape_distance: ShapeDistanceArg,
    /// Combined dissimilarity, split into size and shape parts per period.
    #[arg(long, value_parser = distance_parser(), default_value = "bray-curtis")]
    pub distance: Distance,
    /// Transform applied before the combined dissimilarity.
    #[arg(long, value_parser = transform_parser(), default_value = "sqrt")]
    pub transform: Transform,
    /// Periods (and baselines) with fewer samples are listed without summaries.
    #[arg(long, value_name = "N", default_value_t = 3)]
    pub min_samples: usize,
    /// Permutations, seed, storage, format.
    #[command(flatten)]
    pub run: RunArgs,
}

fn parse_baseline(s: &str) -> Result<(i32, i32), String> {
    let num = |t: &str| {
        t.trim()
            .parse::<i32>()
            .map_err(|_| format!("expected years A..B, got '{s}'"))
    };
    let (a, b) = match s.split_once("..") {
        Some((a, b)) => (num(a)?, num(b)?),
        None => (num(s)?, num(s)?),
    };
    if a > b {
        return Err(format!("the first year is after the last in '{s}'"));
    }
    Ok((a, b))
}

fn parse_breakpoint(s: &str) -> Result<BreakpointSpec, String> {
    if s.eq_ignore_ascii_case("auto") {
        return Ok(BreakpointSpec::Auto);
    }
    s.trim()
        .parse::<i32>()
        .map(BreakpointSpec::Year)
        .map_err(|_| format!("expected 'auto' or a year, got '{s}'"))
}

/// One analysed group (the whole selection, or one value of `--split-by`).
struct Group {
    value: Option<String>,
    selection: Selection,
    matrix: CountMatrix,
    result: TrendResult,
    labels: Vec<String>,
    dates: Vec<(String, String)>,
    json: Value,
}

/// Chronological rank of a season name within its season year.
fn season_rank(name: &str) -> (usize, String) {
    let r = match name {
        "spring" => 0,
        "summer" => 1,
        "autumn" => 2,
        "winter" => 3,
        _ => 4,
    };
    (r, name.to_string())
}

const CI_METHOD: &str = "2.5 and 97.5 % points of slopes refitted to full-model residuals under the same year permutations";

fn resolve_selection(store: &Store, args: &Args) -> anyhow::Result<Selection> {
    let mut sa = args.selection.clone();
    if sa.unit.is_none() {
        let saved_unit = match &sa.selection {
            Some(name) => {
                store
                    .selection(name)
                    .with_context(|| format!("loading saved selection '{name}'"))?
                    .unit
            }
            None => None,
        };
        if saved_unit.is_none() {
            sa.unit = Some(match args.every {
                Every::Year => super::selection::UnitArg::SiteYear,
                Every::Season => super::selection::UnitArg::SiteSeason,
            });
        }
    }
    let sel = sa.resolve(store)?;
    if sel.unit == Some(Unit::Site) {
        bail!(
            "--unit site pools every year into one row; a trend needs a unit with one period per row"
        );
    }
    Ok(sel)
}

/// The selection of one group, for storage: a site-attribute split becomes a
/// `--site-where` filter, a site split a `--site` filter.
fn group_selection(base: &Selection, field: &str, value: &str, m: &CountMatrix) -> Selection {
    let mut s = base.clone();
    if field == "site" {
        s.sites = vec![value.to_string()];
    } else if m.samples.iter().any(|x| x.attributes.contains_key(field))
        && !crate::matrix::BUILTIN_FIELDS.contains(&field)
    {
        s.site_where.push((field.to_string(), value.to_string()));
    }
    s
}

fn submatrix(m: &CountMatrix, rows: &[usize]) -> CountMatrix {
    let keep: Vec<usize> = (0..m.values.ncols())
        .filter(|&j| rows.iter().any(|&i| m.values[(i, j)] > 0.0))
        .collect();
    CountMatrix {
        samples: rows.iter().map(|&i| m.samples[i].clone()).collect(),
        taxa: keep.iter().map(|&j| m.taxa[j].clone()).collect(),
        values: nalgebra::DMatrix::from_fn(rows.len(), keep.len(), |i, j| {
            m.values[(rows[i], keep[j])]
        }),
        notes: Vec::new(),
    }
}

fn analyse_group(
    args: &Args,
    m: &CountMatrix,
    seed: u64,
) -> anyhow::Result<(TrendResult, Vec<String>, Vec<(String, String)>)> {
    let n = m.samples.len();
    if n == 0 {
        bail!("no rows to analyse");
    }
    let totals = m.totals();
    if let Some(i) = totals.iter().position(|t| !(*t > 0.0)) {
        bail!(
            "row {} has no organisms: ln(abundance) is undefined (leave out --keep-empty)",
            m.samples[i].label
        );
    }
    let mut year = Vec::with_capacity(n);
    for s in &m.samples {
        if s.year != s.last_year {
            bail!(
                "row {} pools several years; choose a unit with one year per row",
                s.label
            );
        }
        year.push(s.year);
    }
    let season: Option<Vec<usize>> = match args.every {
        Every::Year => None,
        Every::Season => {
            let names: Vec<String> = m
                .field_values("season")
                .context("--every season needs one season per row")?;
            let mut distinct: Vec<(usize, String)> = names.iter().map(|s| season_rank(s)).collect();
            distinct.sort();
            distinct.dedup();
            Some(
                names
                    .iter()
                    .map(|s| {
                        distinct
                            .binary_search(&season_rank(s))
                            .expect("invariant: s is a distinct season")
                    })
                    .collect(),
            )
        }
    };
    let sites: Vec<&str> = m.samples.iter().map(|s| s.site.as_str()).collect();
    let site = Grouping::from_labels(&sites).codes().to_vec();
    let logs: Vec<f64> = totals.iter().map(|t| t.ln()).collect();
    let shape_d = match args.shape_distance {
        ShapeDistanceArg::Hellinger => Distance::Hellinger,
        ShapeDistanceArg::ChiSquare => Distance::ChiSquare,
    };
    let shape = shape_d
        .compute(&m.values)
        .context("shape-only dissimilarity")?;
    let combined = Distance::from(args.distance)
        .compute_after(Transform::from(args.transform), &m.values)
        .context("combined dissimilarity")?;
    let opts = TrendOptions {
        baseline: match args.baseline {
            Some((a, b)) => Baseline::Years(a, b),
            None => Baseline::FirstYears(3),
        },
        breakpoint: args.breakpoint,
        alpha: args.alpha,
        min_samples: args.min_samples,
        permutations: args.run.permutations,
        seed,
    };
    let data = TrendData {
        log_abundance: &logs,
        shape: &shape,
        combined: &combined,
        year: &year,
        season: season.as_deref(),
        site: &site,
    };
    let r = trend(&data, &opts)?;
    let season_names: BTreeMap<usize, String> = match &season {
        Some(codes) => codes
            .iter()
            .zip(m.samples.iter())
            .map(|(&c, s)| (c, s.season.clone().unwrap_or_default()))
            .collect(),
        None => BTreeMap::new(),
    };
    let mut labels = Vec::new();
    let mut dates = Vec::new();
    for p in &r.periods {
        labels.push(match p.season {
            Some(c) => format!(
                "{}-{}",
                p.year,
                season_names.get(&c).cloned().unwrap_or_default()
            ),
            None => p.year.to_string(),
        });
        let rows: Vec<usize> = (0..n)
            .filter(|&i| year[i] == p.year && season.as_ref().map(|s| s[i]) == p.season)
            .collect();
        let first = rows.iter().map(|&i| m.samples[i].first_date.clone()).min();
        let last = rows.iter().map(|&i| m.samples[i].last_date.clone()).max();
        dates.push((first.unwrap_or_default(), last.unwrap_or_default()));
    }
    Ok((r, labels, dates))
}

fn trend_json(
    args: &Args,
    r: &TrendResult,
    labels: &[String],
    dates: &[(String, String)],
) -> Value {
    let periods: Vec<Value> = r
        .periods
        .iter()
        .zip(labels)
        .zip(dates)
        .map(|((p, l), (a, b))| {
            json!({
                "period": l,
                "year": p.year,
                "n": p.n,
                "sites": p.sites,
                "baseline": p.baseline,
                "too_few": p.too_few,
                "n_reference": p.n_reference,
                "abundance": opt_num(p.abundance),
                "abundance_ci_low": opt_num(p.ci_low),
                "abundance_ci_high": opt_num(p.ci_high),
                "change_pct": opt_num(p.change_pct),
                "shape_distance": opt_num(p.shape_distance),
                "combined_distance": opt_num(p.combined_distance),
                "size_part": opt_num(p.size_part),
                "shape_part": opt_num(p.shape_part),
                "period_start": a,
                "period_end": b,
            })
        })
        .collect();
    let s = &r.size_trend;
    let h = &r.shape_trend;
    let mut out = json!({
        "diagnosis": r.diagnosis.name(),
        "alpha": num(r.alpha),
        "size_trend": {
            "slope_pct_per_year": num(s.slope_pct_per_year),
            "p_value": num(s.p_value),
            "ci_low": num(s.ci_low),
            "ci_high": num(s.ci_high),
            "ci_method": CI_METHOD,
            "slope_log": num(s.slope_log),
            "se_ols_log": num(s.se_ols),
            "pseudo_f": num(s.pseudo_f),
            "df_resid": s.df_resid,
        },
        "shape_trend": {
            "r2": num(h.r2),
            "p_value": num(h.p_value),
            "pseudo_f": num(h.pseudo_f),
            "df_resid": h.df_resid,
        },
        "decision": {
            "size_p": num(r.size_decision_p),
            "shape_p": num(r.shape_decision_p),
            "rule": if r.breakpoints.is_some() {
                "an aspect changed when min(1, 2 min(p_trend, p_breakpoint)) <= alpha"
            } else {
                "an aspect changed when p_trend <= alpha"
            },
        },
        "periods": periods,
        "n": r.n,
        "years": r.years,
        "sites": r.sites,
        "baseline_years": r.baseline_years,
        "permutations": r.permutations,
        "exact": r.exact,
        "seed": r.seed,
        "scheme": r.scheme,
        "distances": {
            "shape": match args.shape_distance {
                ShapeDistanceArg::Hellinger => "hellinger",
                ShapeDistanceArg::ChiSquare => "chi-square",
            },
            "combined": Distance::from(args.distance).name(),
            "transform": Transform::from(args.transform).name(),
        },
        "notes": r.notes,
    });
    if let Some(b) = &r.breakpoints {
        out["breakpoints"] = json!({
            "size": {"year": b.size.year, "p_value": num(b.size.p_value), "pseudo_f": num(b.size.pseudo_f),
                     "change_pct": num(b.size.effect), "candidates": b.size.candidates},
            "shape": {"year": b.shape.year, "p_value": num(b.shape.p_value), "pseudo_f": num(b.shape.pseudo_f),
                      "r2": num(b.shape.effect), "candidates": b.shape.candidates},
        });
    }
    out
}

fn analyse(store: &Store, args: &Args, seed: u64) -> anyhow::Result<(Vec<Group>, Value)> {
    let sel = resolve_selection(store, args)?;
    let matrix = load_matrix(store, &sel)?;
    let mut groups = Vec::new();
    let splits: Vec<(Option<String>, Vec<usize>)> = match &args.split_by {
        None => vec![(None, (0..matrix.samples.len()).collect())],
        Some(field) => {
            let values = matrix.field_values(field)?;
            let mut distinct = values.clone();
            distinct.sort();
            distinct.dedup();
            distinct
                .into_iter()
                .map(|v| {
                    let rows = (0..values.len()).filter(|&i| values[i] == v).collect();
                    (Some(v), rows)
                })
                .collect()
        }
    };
    for (value, rows) in splits {
        let m = submatrix(&matrix, &rows);
        let (result, labels, dates) =
            analyse_group(args, &m, seed).with_context(|| match &value {
                Some(v) => format!("trend of group {v}"),
                None => "trend".to_string(),
            })?;
        let mut json = trend_json(args, &result, &labels, &dates);
        let selection = match (&args.split_by, &value) {
            (Some(f), Some(v)) => {
                json = {
                    let mut o = serde_json::Map::new();
                    o.insert("group".into(), json!(v));
                    if let Value::Object(rest) = json {
                        o.extend(rest);
                    }
                    Value::Object(o)
                };
                group_selection(&sel, f, v, &matrix)
            }
            _ => sel.clone(),
        };
        groups.push(Group {
            value,
            selection,
            matrix: m,
            result,
            labels,
            dates,
            json,
        });
    }
    let json = match &args.split_by {
        None => groups[0].json.clone(),
        Some(f) => json!({
            "split_by": f,
            "groups": groups.iter().map(|g| g.json.clone()).collect::<Vec<_>>(),
            "alpha": num(args.alpha),
            "seed": seed,
            "permutations": args.run.permutations,
        }),
    };
    Ok((groups, json))
}

/// The trend of a selection as the JSON `tally trend --format json` prints
/// (for the HTML report). Nothing is printed or stored, except the note of a
/// freshly drawn seed when `--seed` is absent.
///
/// # Errors
/// Selection, assembly and analysis errors.
pub fn compute(store: &Store, args: &Args) -> anyhow::Result<Value> {
    let seed = args.run.seed();
    Ok(analyse(store, args, seed)?.1)
}

/// Compute and store the runs as `tally trend` does (one `trend` run per group
/// and one `trend-period` run per period, unless `--no-store`), without
/// printing; returns the JSON (for the demo and the HTML report).
///
/// # Errors
/// Selection, assembly, analysis and storage errors.
pub fn compute_and_store(store: &mut Store, args: &Args) -> anyhow::Result<Value> {
    let seed = args.run.seed();
    let (groups, json) = analyse(store, args, seed)?;
    for g in &groups {
        store_group(store, args, g, seed)?;
    }
    Ok(json)
}

fn parameters(args: &Args) -> Value {
    json!({
        "every": match args.every { Every::Year => "year", Every::Season => "season" },
        "baseline": args.baseline.map(|(a, b)| format!("{a}..{b}")),
        "breakpoint": args.breakpoint.map(|b| match b {
            BreakpointSpec::Auto => "auto".to_string(),
            BreakpointSpec::Year(y) => y.to_string(),
        }),
        "split_by": args.split_by,
        "alpha": args.alpha,
        "shape_distance": match args.shape_distance {
            ShapeDistanceArg::Hellinger => "hellinger",
            ShapeDistanceArg::ChiSquare => "chi-square",
        },
        "distance": Distance::from(args.distance).name(),
        "transform": Transform::from(args.transform).name(),
        "min_samples": args.min_samples,
        "permutations": args.run.permutations,
    })
}

fn store_group(store: &mut Store, args: &Args, g: &Group, seed: u64) -> anyhow::Result<()> {
    let r = &g.result;
    let mut params = parameters(args);
    params["group"] = json!(g.value);
    let mut values = vec![
        (
            "size.slope_pct_per_year".to_string(),
            Some(r.size_trend.slope_pct_per_year),
        ),
        ("size.ci_low".to_string(), Some(r.size_trend.ci_low)),
        ("size.ci_high".to_string(), Some(r.size_trend.ci_high)),
        ("size.p_value".to_string(), Some(r.size_trend.p_value)),
        ("shape.r2".to_string(), Some(r.shape_trend.r2)),
        ("shape.p_value".to_string(), Some(r.shape_trend.p_value)),
        ("decision.size_p".to_string(), Some(r.size_decision_p)),
        ("decision.shape_p".to_string(), Some(r.shape_decision_p)),
    ];
    if let Some(b) = &r.breakpoints {
        values.push(("breakpoint.size.year".into(), Some(f64::from(b.size.year))));
        values.push(("breakpoint.size.p_value".into(), Some(b.size.p_value)));
        values.push((
            "breakpoint.shape.year".into(),
            Some(f64::from(b.shape.year)),
        ));
        values.push(("breakpoint.shape.p_value".into(), Some(b.shape.p_value)));
    }
    let start = g.dates.iter().map(|d| d.0.clone()).min();
    let end = g.dates.iter().map(|d| d.1.clone()).max();
    let id = store_run_dated(
        store,
        &args.run,
        "trend",
        &g.selection,
        &g.matrix,
        params.clone(),
        Some(seed),
        &g.json,
        values,
        (start, end),
    )?;
    let Some(id) = id else { return Ok(()) };
    let mut ids = Vec::new();
    for ((p, label), (a, b)) in r.periods.iter().zip(&g.labels).zip(&g.dates) {
        let mut pp = params.clone();
        pp["period"] = json!(label);
        let result = json!({
            "trend_run": id,
            "group": g.value,
            "period": label,
            "n": p.n,
            "sites": p.sites,
            "baseline": p.baseline,
            "too_few": p.too_few,
            "abundance": opt_num(p.abundance),
            "change_pct": opt_num(p.change_pct),
            "shape_distance": opt_num(p.shape_distance),
            "size_part": opt_num(p.size_part),
            "shape_part": opt_num(p.shape_part),
        });
        let values = vec![
            ("abundance".to_string(), p.abundance),
            ("change_pct".to_string(), p.change_pct),
            ("shape_distance".to_string(), p.shape_distance),
            ("size_part".to_string(), p.size_part),
            ("shape_part".to_string(), p.shape_part),
            ("n".to_string(), Some(p.n as f64)),
        ];
        if let Some(pid) = store_run_dated(
            store,
            &args.run,
            "trend-period",
            &g.selection,
            &g.matrix,
            pp,
            Some(seed),
            &result,
            values,
            (Some(a.clone()), Some(b.clone())),
        )? {
            ids.push(pid);
        }
    }
    let what = g
        .value
        .as_ref()
        .map(|v| format!(" ({v})"))
        .unwrap_or_default();
    match (ids.first(), ids.last()) {
        (Some(a), Some(b)) => super::note(&format!(
            "stored as run {id}{what}; its periods as runs {a}–{b} (kind trend-period)"
        )),
        _ => super::note(&format!("stored as run {id}{what}")),
    }
    Ok(())
}

fn fmt(v: Option<f64>, digits: usize) -> String {
    match v {
        Some(x) if x.is_finite() => format!("{x:.digits$}"),
        _ => "–".to_string(),
    }
}

fn diagnosis_line(r: &TrendResult) -> String {
    let s = &r.size_trend;
    let h = &r.shape_trend;
    let mut line = format!(
        "diagnosis: {} — size {:+.2} % per year [{:.2}, {:.2}], p = {}; shape R² = {:.4}, p = {}",
        r.diagnosis.name(),
        s.slope_pct_per_year,
        s.ci_low,
        s.ci_high,
        s.p_value,
        h.r2,
        h.p_value
    );
    if let Some(b) = &r.breakpoints {
        line.push_str(&format!(
            "; breakpoints: size {} ({:+.1} %, p = {}), shape {} (R² = {:.4}, p = {})",
            b.size.year,
            b.size.effect,
            b.size.p_value,
            b.shape.year,
            b.shape.effect,
            b.shape.p_value
        ));
    }
    line.push_str(&format!("; alpha = {}", r.alpha));
    line
}

/// Run `tally trend`.
///
/// # Errors
/// Selection, assembly, analysis, storage and output errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let seed = args.run.seed();
    let (groups, json) = analyse(store, &args, seed)?;
    for g in &groups {
        store_group(store, &args, g, seed)?;
    }
    match args.run.format {
        FormatArg::Json => write_json(out, &json)?,
        FormatArg::Csv => {
            let mut w = csv::Writer::from_writer(out);
            w.write_record([
                "group",
                "period",
                "n",
                "sites",
                "baseline",
                "abundance",
                "abundance_ci_low",
                "abundance_ci_high",
                "change_pct",
                "shape_distance",
                "size_part",
                "shape_part",
                "diagnosis",
            ])?;
            let o = |v: Option<f64>| v.map(|x| x.to_string()).unwrap_or_default();
            for g in &groups {
                for (p, l) in g.result.periods.iter().zip(&g.labels) {
                    w.write_record([
                        g.value.clone().unwrap_or_default(),
                        l.clone(),
                        p.n.to_string(),
                        p.sites.to_string(),
                        p.baseline.to_string(),
                        o(p.abundance),
                        o(p.ci_low),
                        o(p.ci_high),
                        o(p.change_pct),
                        o(p.shape_distance),
                        o(p.size_part),
                        o(p.shape_part),
                        g.result.diagnosis.name().to_string(),
                    ])?;
                }
            }
            w.flush()?;
        }
        FormatArg::Table => {
            for g in &groups {
                if let (Some(f), Some(v)) = (&args.split_by, &g.value) {
                    writeln!(out, "{f} = {v}")?;
                }
                let mut t = new_table(&[
                    "period",
                    "n",
                    "sites",
                    "abundance",
                    "95% interval",
                    "change %",
                    "shape distance",
                    "size part",
                    "shape part",
                ]);
                for (p, l) in g.result.periods.iter().zip(&g.labels) {
                    let label = if p.baseline {
                        format!("{l} (baseline)")
                    } else {
                        l.clone()
                    };
                    let ci = match (p.ci_low, p.ci_high) {
                        (Some(a), Some(b)) => format!("{a:.1}–{b:.1}"),
                        _ => "–".into(),
                    };
                    let abundance = if p.too_few {
                        "too few samples".to_string()
                    } else {
                        fmt(p.abundance, 1)
                    };
                    t.add_row(vec![
                        label,
                        p.n.to_string(),
                        p.sites.to_string(),
                        abundance,
                        ci,
                        fmt(p.change_pct, 1),
                        fmt(p.shape_distance, 4),
                        fmt(p.size_part, 4),
                        fmt(p.shape_part, 4),
                    ]);
                }
                write_table(out, &t)?;
                writeln!(out, "{}", diagnosis_line(&g.result))?;
                writeln!(out)?;
            }
            if args.split_by.is_some() {
                let mut t = new_table(&[
                    "group",
                    "diagnosis",
                    "size % / year",
                    "95% interval",
                    "size p",
                    "shape R²",
                    "shape p",
                    "size break (p)",
                    "shape break (p)",
                ]);
                for g in &groups {
                    let r = &g.result;
                    let (bs, bh) = match &r.breakpoints {
                        Some(b) => (
                            format!("{} ({})", b.size.year, b.size.p_value),
                            format!("{} ({})", b.shape.year, b.shape.p_value),
                        ),
                        None => ("–".into(), "–".into()),
                    };
                    t.add_row(vec![
                        g.value.clone().unwrap_or_default(),
                        r.diagnosis.name().to_string(),
                        format!("{:+.2}", r.size_trend.slope_pct_per_year),
                        format!("{:.2} to {:.2}", r.size_trend.ci_low, r.size_trend.ci_high),
                        r.size_trend.p_value.to_string(),
                        format!("{:.4}", r.shape_trend.r2),
                        r.shape_trend.p_value.to_string(),
                        bs,
                        bh,
                    ]);
                }
                write_table(out, &t)?;
            }
            if let Some(g) = groups.first() {
                let r = &g.result;
                writeln!(
                    out,
                    "permutations: {} ({}), scheme: {}, seed {}",
                    r.permutations,
                    if r.exact {
                        "every arrangement"
                    } else {
                        "random"
                    },
                    r.scheme,
                    r.seed
                )?;
                writeln!(
                    out,
                    "rule: {} (alpha {}); abundance as geometric mean with a t interval on the log scale; size parts of {} on {} vs shape ({})",
                    if r.breakpoints.is_some() {
                        "an aspect changed when min(1, 2·min(p trend, p breakpoint)) ≤ alpha"
                    } else {
                        "an aspect changed when p trend ≤ alpha"
                    },
                    r.alpha,
                    Distance::from(args.distance).name(),
                    Transform::from(args.transform).name(),
                    match args.shape_distance {
                        ShapeDistanceArg::Hellinger => "hellinger",
                        ShapeDistanceArg::ChiSquare => "chi-square",
                    }
                )?;
            }
            for g in &groups {
                for n in &g.result.notes {
                    super::note(n);
                }
            }
        }
    }
    Ok(())
}
