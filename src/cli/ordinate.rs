//! `tally ordinate`: PCoA of a dissimilarity, correspondence analysis (CA) or
//! canonical correspondence analysis (CCA) of a selection, with axis
//! eigenvalues, sample coordinates, group centroids and their 95 % confidence
//! ellipses, the permutation test of the CCA constraints, and an SVG plot.
//!
//! [`compute`] does the work and returns an [`Ordination`] (also used by
//! `tally report` and `tally demo`); [`run`] prints, plots and stores.

pub use super::common::{Periods, parse_periods};
use std::collections::BTreeSet;
use std::io::Write;
use std::path::PathBuf;

use anyhow::{Context, bail};
use clap::ValueEnum;
use nalgebra::DMatrix;
use serde_json::{Value, json};

use super::FormatArg;
use super::common::{DistanceArgs, Progress, RunArgs, store_run};
use super::selection::{SelectionArgs, flags_of, load_matrix};
use crate::analysis::cca_test::{CcaTest, cca_permutation_test};
use crate::analysis::ellipse::{CentroidEllipse, group_ellipses};
use crate::analysis::ordination::{ca, cca};
use crate::analysis::permutation::PermutationOptions;
use crate::analysis::{Distance, Transform, pcoa};
use crate::matrix::{CountMatrix, Unit};
use crate::report::format::{new_table, num, write_json, write_table};
use crate::report::svg::{AxisSpec, OrdinationPlot, ScatterGroup, ordination_svg};
use crate::store::{Selection, Store};

/// Confidence level of the centroid ellipses.
pub const ELLIPSE_LEVEL: f64 = 0.95;

/// Ordination method.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum MethodArg {
    /// Principal coordinates of the chosen dissimilarity.
    Pcoa,
    /// Correspondence analysis of the counts.
    Ca,
    /// Canonical correspondence analysis constrained by `--constraint` fields.
    Cca,
}

impl MethodArg {
    /// Stable lowercase name.
    pub fn name(self) -> &'static str {
        match self {
            MethodArg::Pcoa => "pcoa",
            MethodArg::Ca => "ca",
            MethodArg::Cca => "cca",
        }
    }
}

/// Arguments of `tally ordinate`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Which events, and what one row is.
    #[command(flatten)]
    pub selection: SelectionArgs,
    /// Ordination method.
    #[arg(long, value_enum)]
    pub method: MethodArg,
    /// Field whose values colour the samples and get centroid ellipses
    /// (`period` when `--periods` is given).
    #[arg(long, value_name = "FIELD")]
    pub by: Option<String>,
    /// Year ranges defining the field `period`, e.g. 2008..2015,2016..2025;
    /// samples outside every range are left out.
    #[arg(long, value_name = "A..B,C..D", value_parser = parse_periods)]
    pub periods: Option<Periods>,
    /// CCA: a field constraining the axes (repeatable). Numeric fields enter
    /// as covariates, others as factors (one indicator per level but the first).
    #[arg(long = "constraint", value_name = "FIELD")]
    pub constraints: Vec<String>,
    /// Number of axes reported.
    #[arg(long, default_value_t = 2)]
    pub axes: usize,
    /// Draw the first two axes into this SVG file.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
    /// Replace an existing plot file.
    #[arg(long)]
    pub force: bool,
    /// PCoA: the dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Permutations, seed, storage, output format.
    #[command(flatten)]
    pub run: RunArgs,
}

/// How one constraint field entered the CCA.
#[derive(Debug, Clone)]
pub struct ConstraintInfo {
    /// Field name.
    pub field: String,
    /// `numeric` or `factor`.
    pub kind: &'static str,
    /// Columns it contributed (the covariate, or one per non-reference level).
    pub columns: Vec<String>,
}

/// A computed ordination (see [`compute`]).
#[derive(Debug, Clone)]
pub struct Ordination {
    /// The resolved selection.
    pub selection: Selection,
    /// The matrix analysed (samples outside `--periods` removed).
    pub matrix: CountMatrix,
    /// Method used.
    pub method: MethodArg,
    /// Axis eigenvalues (PCoA), principal inertias (CA) or canonical
    /// eigenvalues (CCA), for the reported axes.
    pub eigenvalues: Vec<f64>,
    /// Share of each reported axis (see `share_of`).
    pub shares: Vec<f64>,
    /// What the shares are shares of.
    pub share_of: &'static str,
    /// Sample coordinates on the reported axes (n × K).
    pub coords: DMatrix<f64>,
    /// Grouping field and group names (legend order); empty without `--by`.
    pub group_field: Option<String>,
    /// Group names in legend order.
    pub group_names: Vec<String>,
    /// Group index of each sample.
    pub group_of: Vec<usize>,
    /// Centroid ellipse of each group on the first two axes.
    pub ellipses: Vec<Option<CentroidEllipse>>,
    /// CCA: the permutation test of the constraints.
    pub test: Option<CcaTest>,
    /// CCA: the constraints as entered.
    pub constraints: Vec<ConstraintInfo>,
    /// Seed used (CCA only).
    pub seed: Option<u64>,
    /// Notes for the reader.
    pub notes: Vec<String>,
    /// The full result as JSON (keys documented in docs/cli.md).
    pub json: Value,
    /// The plot input (first two axes), when at least two axes exist.
    pub plot: Option<OrdinationPlot>,
}

/// The selection in plain words, for plot subtitles and the report.
pub fn describe_selection(sel: &Selection, m: &CountMatrix) -> String {
    let mut parts = Vec::new();
    parts.push(match &sel.protocol {
        Some(p) => format!("{p} samples"),
        None => "all protocols".to_string(),
    });
    for (k, v) in &sel.site_where {
        parts.push(format!("{k} {v}"));
    }
    if !sel.sites.is_empty() {
        parts.push(format!("sites {}", sel.sites.join(", ")));
    }
    let y0 = m.samples.iter().map(|s| s.year).min();
    let y1 = m.samples.iter().map(|s| s.last_year).max();
    if let (Some(a), Some(b)) = (y0, y1) {
        parts.push(CountMatrix::period_label((a, b)));
    }
    if let Some((a, b)) = sel.months {
        parts.push(format!("months {a}–{b}"));
    }
    parts.push(
        match sel.unit.unwrap_or_default() {
            Unit::Event => "one row per event",
            Unit::SiteYear => "pooled per site and year",
            Unit::SiteSeason => "pooled per site and season",
            Unit::Site => "pooled per site",
        }
        .to_string(),
    );
    if sel.per_effort {
        let units: BTreeSet<&str> = m.samples.iter().map(|s| s.effort_unit.as_str()).collect();
        let u: Vec<&str> = units.into_iter().collect();
        parts.push(format!("per {}", u.join("/")));
    }
    let sites: BTreeSet<&str> = m.samples.iter().map(|s| s.site.as_str()).collect();
    format!(
        "{} ({} samples, {} sites)",
        parts.join(", "),
        m.samples.len(),
        sites.len()
    )
}

/// Per-row text of `field`, with `period` resolved from `periods`.
fn field_text(
    m: &CountMatrix,
    field: &str,
    periods: Option<&Periods>,
) -> anyhow::Result<Vec<String>> {
    if field == "period"
        && let Some(p) = periods
    {
        return m
            .samples
            .iter()
            .map(|s| {
                let a = p.label_of(s.year);
                if a != p.label_of(s.last_year) {
                    bail!("row {} spans two periods", s.label);
                }
                a.ok_or_else(|| anyhow::anyhow!("row {} lies outside every period", s.label))
            })
            .collect();
    }
    Ok(m.field_values(field)?)
}

/// Sort group names: numerically when every name is a number, else as text.
fn sorted_levels(values: &[String]) -> Vec<String> {
    let mut lv: Vec<String> = values
        .iter()
        .cloned()
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    if lv.iter().all(|v| v.parse::<f64>().is_ok()) {
        lv.sort_by(|a, b| {
            let (x, y) = (
                a.parse::<f64>().unwrap_or(0.0),
                b.parse::<f64>().unwrap_or(0.0),
            );
            x.total_cmp(&y)
        });
    }
    lv
}

/// Keep only rows `idx` of a matrix.
fn keep_rows(m: &CountMatrix, idx: &[usize]) -> CountMatrix {
    CountMatrix {
        samples: idx.iter().map(|&i| m.samples[i].clone()).collect(),
        taxa: m.taxa.clone(),
        values: DMatrix::from_fn(idx.len(), m.values.ncols(), |i, j| m.values[(idx[i], j)]),
        notes: m.notes.clone(),
    }
}

/// Drop taxa with a zero column total (CA and CCA need none).
fn drop_empty_taxa(m: &CountMatrix) -> (DMatrix<f64>, usize) {
    let keep: Vec<usize> = (0..m.values.ncols())
        .filter(|&j| m.values.column(j).sum() > 0.0)
        .collect();
    let y = DMatrix::from_fn(m.values.nrows(), keep.len(), |i, j| m.values[(i, keep[j])]);
    (y, m.values.ncols() - keep.len())
}

/// The CCA environmental matrix: numeric fields as covariates, other fields
/// dummy-coded (first level, in sorted order, as reference).
fn constraint_matrix(
    m: &CountMatrix,
    fields: &[String],
    periods: Option<&Periods>,
) -> anyhow::Result<(DMatrix<f64>, Vec<ConstraintInfo>)> {
    let n = m.samples.len();
    let mut cols: Vec<Vec<f64>> = Vec::new();
    let mut info = Vec::new();
    for f in fields {
        let text = field_text(m, f, periods)?;
        let numeric: Option<Vec<f64>> = if f == "period" && periods.is_some() {
            None
        } else {
            text.iter()
                .map(|v| v.trim().parse::<f64>().ok().filter(|x| x.is_finite()))
                .collect()
        };
        match numeric {
            Some(v) => {
                cols.push(v);
                info.push(ConstraintInfo {
                    field: f.clone(),
                    kind: "numeric",
                    columns: vec![f.clone()],
                });
            }
            None => {
                let levels = sorted_levels(&text);
                if levels.len() < 2 {
                    bail!(
                        "constraint '{f}' has a single value ({}) in this selection",
                        levels.join("")
                    );
                }
                let mut names = Vec::new();
                for l in &levels[1..] {
                    cols.push(text.iter().map(|v| f64::from(u8::from(v == l))).collect());
                    names.push(format!("{f}={l}"));
                }
                info.push(ConstraintInfo {
                    field: f.clone(),
                    kind: "factor",
                    columns: names,
                });
            }
        }
    }
    let z = DMatrix::from_fn(n, cols.len(), |i, j| cols[j][i]);
    Ok((z, info))
}

/// Compute the ordination of `args` on `store` (no printing, no storing).
///
/// # Errors
/// An empty or unsuitable selection, unknown fields, a CCA without
/// constraints, kernel errors (with context).
pub fn compute(store: &Store, args: &Args) -> anyhow::Result<Ordination> {
    if args.axes == 0 {
        bail!("--axes must be at least 1");
    }
    let selection = args.selection.resolve(store)?;
    let full = load_matrix(store, &selection)?;
    let mut notes = Vec::new();
    let by = args
        .by
        .clone()
        .or_else(|| args.periods.as_ref().map(|_| "period".to_string()));
    // Samples outside every period are left out.
    let matrix = match &args.periods {
        Some(p) => {
            let keep: Vec<usize> = (0..full.samples.len())
                .filter(|&i| p.label_of(full.samples[i].year).is_some())
                .collect();
            if keep.len() < full.samples.len() {
                notes.push(format!(
                    "{} sample(s) outside the periods were left out",
                    full.samples.len() - keep.len()
                ));
            }
            keep_rows(&full, &keep)
        }
        None => full,
    };
    let n = matrix.samples.len();
    if n < 3 {
        bail!("the selection has {n} sample(s); an ordination needs at least 3");
    }
    let mut seed = None;
    let mut test = None;
    let mut constraints = Vec::new();
    let mut extra = serde_json::Map::new();
    let (eigen_all, shares_all, share_of, coords_all): (
        Vec<f64>,
        Vec<f64>,
        &'static str,
        DMatrix<f64>,
    ) = match args.method {
        MethodArg::Pcoa => {
            let distance: Distance = args.distance.distance.into();
            let transform: Transform = args.distance.transform.into();
            let d = distance
                .compute_after(transform, &matrix.values)
                .context("computing the dissimilarities")?;
            let p = pcoa(&d).context("principal coordinates")?;
            let k = p.coordinates.ncols();
            let pos: Vec<f64> = p.eigenvalues[..k].to_vec();
            let shares = pos
                .iter()
                .map(|v| {
                    if p.positive_sum > 0.0 {
                        v / p.positive_sum
                    } else {
                        0.0
                    }
                })
                .collect();
            let negatives: Vec<f64> = p.eigenvalues.iter().copied().filter(|v| *v < 0.0).collect();
            notes.push(format!(
                    "{} negative eigenvalue(s) carry {:.2}% of the absolute eigenvalue sum ({} is {}Euclidean)",
                    negatives.len(),
                    100.0 * p.negative_inertia_share,
                    distance.name(),
                    if negatives.is_empty() { "" } else { "not " }
                ));
            extra.insert("distance".into(), json!(distance.name()));
            extra.insert("transform".into(), json!(transform.name()));
            extra.insert(
                "negative_eigenvalue_share".into(),
                num(p.negative_inertia_share),
            );
            extra.insert(
                "negative_eigenvalues".into(),
                json!(negatives.iter().map(|v| num(*v)).collect::<Vec<_>>()),
            );
            extra.insert("positive_eigenvalue_sum".into(), num(p.positive_sum));
            extra.insert("total".into(), num(p.trace));
            (pos, shares, "positive eigenvalue sum", p.coordinates)
        }
        MethodArg::Ca => {
            let (y, dropped) = drop_empty_taxa(&matrix);
            if dropped > 0 {
                notes.push(format!(
                    "{dropped} taxon column(s) with no organisms left out"
                ));
            }
            let r = ca(&y).context("correspondence analysis")?;
            extra.insert("total".into(), num(r.total_inertia));
            extra.insert("chi_square".into(), num(r.chi_square));
            let shares = r.inertia_shares();
            (r.inertias.clone(), shares, "inertia", r.row_principal)
        }
        MethodArg::Cca => {
            if args.constraints.is_empty() {
                bail!("CCA needs at least one --constraint FIELD");
            }
            let (y, dropped) = drop_empty_taxa(&matrix);
            if dropped > 0 {
                notes.push(format!(
                    "{dropped} taxon column(s) with no organisms left out"
                ));
            }
            let (z, info) = constraint_matrix(&matrix, &args.constraints, args.periods.as_ref())?;
            constraints = info;
            let fit = cca(&y, &z).context("canonical correspondence analysis")?;
            let s = args.run.seed();
            seed = Some(s);
            let progress = Progress::new("permutations of the constraints");
            let update = |d: usize, t: usize| progress.update(d, t);
            let t = cca_permutation_test(
                &y,
                &z,
                &PermutationOptions {
                    permutations: args.run.permutations,
                    seed: s,
                },
                Some(&update),
            )
            .context("testing the constraints")?;
            progress.finish();
            extra.insert("total".into(), num(fit.total_inertia));
            extra.insert("constrained_inertia".into(), num(fit.constrained_inertia));
            extra.insert(
                "unconstrained_inertia".into(),
                num(fit.unconstrained_inertia),
            );
            extra.insert("constrained_share".into(), num(fit.constrained_share()));
            extra.insert(
                "unconstrained_eigenvalues".into(),
                json!(
                    fit.unconstrained_eigenvalues
                        .iter()
                        .map(|v| num(*v))
                        .collect::<Vec<_>>()
                ),
            );
            extra.insert(
                "test".into(),
                json!({
                    "statistic": "pseudo-F of constrained against residual inertia",
                    "pseudo_f": num(t.pseudo_f),
                    "df_constraints": t.rank,
                    "df_residual": t.n - t.rank - 1,
                    "p_value": num(t.permutation.p_value),
                    "permutations": t.permutation.permutations,
                    "exact": t.permutation.exact,
                    "seed": t.permutation.seed,
                    "scheme": t.permutation.scheme,
                    "min_p": num(t.permutation.min_p),
                }),
            );
            test = Some(t);
            let shares = fit
                .constrained_eigenvalues
                .iter()
                .map(|v| {
                    if fit.total_inertia > 0.0 {
                        v / fit.total_inertia
                    } else {
                        0.0
                    }
                })
                .collect();
            notes.push(
                "sample coordinates are weighted averages of the taxon scores (WA scores)".into(),
            );
            (
                fit.constrained_eigenvalues.clone(),
                shares,
                "total inertia",
                fit.site_wa,
            )
        }
    };
    let k = args.axes.min(coords_all.ncols());
    if k < args.axes {
        notes.push(format!("only {k} axis/axes with non-zero eigenvalue"));
    }
    let coords = coords_all.columns(0, k).into_owned();
    let eigenvalues = eigen_all[..k].to_vec();
    let shares = shares_all[..k].to_vec();

    // Groups and their ellipses.
    let (group_names, group_of) = match &by {
        Some(f) => {
            let text = field_text(&matrix, f, args.periods.as_ref())?;
            let levels = sorted_levels(&text);
            let of = text
                .iter()
                .map(|v| levels.iter().position(|l| l == v).unwrap_or(0))
                .collect();
            (levels, of)
        }
        None => (vec!["all samples".to_string()], vec![0; n]),
    };
    let ellipses = if k >= 2 {
        let x: Vec<f64> = coords.column(0).iter().copied().collect();
        let y: Vec<f64> = coords.column(1).iter().copied().collect();
        let mut e = group_ellipses(&x, &y, &group_of, ELLIPSE_LEVEL, 72)?;
        e.resize(group_names.len(), None);
        e
    } else {
        vec![None; group_names.len()]
    };
    let method_title = match args.method {
        MethodArg::Pcoa => format!(
            "Principal coordinates ({}{})",
            Distance::from(args.distance.distance).name(),
            match Transform::from(args.distance.transform) {
                Transform::None => String::new(),
                t => format!(", {} transform", t.name()),
            }
        ),
        MethodArg::Ca => "Correspondence analysis".to_string(),
        MethodArg::Cca => format!(
            "Canonical correspondence analysis, constrained by {}",
            args.constraints.join(", ")
        ),
    };
    let subtitle = describe_selection(&selection, &matrix);
    let plot = (k >= 2).then(|| OrdinationPlot {
        title: method_title.clone(),
        subtitle: subtitle.clone(),
        x_axis: AxisSpec {
            name: "Axis 1".into(),
            share: Some(shares[0]),
        },
        y_axis: AxisSpec {
            name: "Axis 2".into(),
            share: Some(shares[1]),
        },
        share_of: share_of.to_string(),
        ellipse_level: ELLIPSE_LEVEL,
        groups: group_names
            .iter()
            .enumerate()
            .map(|(g, name)| ScatterGroup {
                name: name.clone(),
                points: (0..n)
                    .filter(|&i| group_of[i] == g)
                    .map(|i| [coords[(i, 0)], coords[(i, 1)]])
                    .collect(),
                ellipse: ellipses[g].as_ref().map(|e| e.boundary.clone()),
            })
            .collect(),
    });
    if k < 2 && args.plot.is_some() {
        bail!("a plot needs two axes; this ordination has {k}");
    }

    let axes_json: Vec<Value> = (0..k)
        .map(|a| json!({"axis": a + 1, "eigenvalue": num(eigenvalues[a]), "share": num(shares[a])}))
        .collect();
    let samples_json: Vec<Value> = (0..n)
        .map(|i| {
            let s = &matrix.samples[i];
            json!({
                "label": s.label, "site": s.site, "year": s.year,
                "group": by.as_ref().map(|_| group_names[group_of[i]].clone()),
                "coordinates": coords.row(i).iter().map(|v| num(*v)).collect::<Vec<_>>(),
            })
        })
        .collect();
    let groups_json: Vec<Value> = group_names
        .iter()
        .enumerate()
        .map(|(g, name)| {
            let members = group_of.iter().filter(|&&x| x == g).count();
            let e = ellipses[g].as_ref().map(|e| {
                json!({"level": e.level, "centre": [num(e.centre[0]), num(e.centre[1])],
                       "semi_axes": [num(e.semi_axes[0]), num(e.semi_axes[1])], "angle": num(e.angle)})
            });
            json!({"group": name, "n": members, "ellipse": e})
        })
        .collect();
    let mut json = serde_json::Map::new();
    json.insert("method".into(), json!(args.method.name()));
    json.insert("selection".into(), json!(flags_of(&selection)));
    json.insert("selection_text".into(), json!(subtitle));
    json.insert("samples_n".into(), json!(n));
    json.insert("share_of".into(), json!(share_of));
    json.insert("axes".into(), json!(axes_json));
    json.extend(extra);
    if !constraints.is_empty() {
        json.insert(
            "constraints".into(),
            json!(
                constraints
                    .iter()
                    .map(|c| json!({"field": c.field, "kind": c.kind, "columns": c.columns}))
                    .collect::<Vec<_>>()
            ),
        );
    }
    json.insert("by".into(), json!(by));
    json.insert("groups".into(), json!(groups_json));
    json.insert("samples".into(), json!(samples_json));
    let mut all_notes = matrix.notes.clone();
    all_notes.extend(notes.iter().cloned());
    json.insert("notes".into(), json!(all_notes));

    Ok(Ordination {
        selection,
        matrix,
        method: args.method,
        eigenvalues,
        shares,
        share_of,
        coords,
        group_field: by,
        group_names,
        group_of,
        ellipses,
        test,
        constraints,
        seed,
        notes,
        json: Value::Object(json),
        plot,
    })
}

/// Write `text` to `path`, refusing to replace an existing file unless `force`.
///
/// # Errors
/// The file exists (without `force`); I/O errors.
pub fn write_new_file(path: &std::path::Path, text: &str, force: bool) -> anyhow::Result<()> {
    if path.exists() && !force {
        bail!("{} exists; give --force to replace it", path.display());
    }
    std::fs::write(path, text).with_context(|| format!("writing {}", path.display()))
}

/// Run `tally ordinate`.
///
/// # Errors
/// As [`compute`]; an existing plot file without `--force`; I/O and SQLite errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    if let Some(p) = &args.plot
        && p.exists()
        && !args.force
    {
        bail!("{} exists; give --force to replace it", p.display());
    }
    let mut o = compute(store, &args)?;
    for n in &o.notes {
        super::note(n);
    }
    if let (Some(path), Some(plot)) = (&args.plot, &o.plot) {
        let svg = ordination_svg(plot).context("drawing the ordination")?;
        write_new_file(path, &svg, args.force)?;
        super::note(&format!("plot written to {}", path.display()));
    }
    if let Some(t) = &o.test {
        let params = json!({
            "method": "cca", "constraints": args.constraints, "axes": args.axes,
            "periods": args.periods.as_ref().map(|p| p.0.clone()),
            "permutations": args.run.permutations,
        });
        let values = vec![
            (
                "constrained_share".to_string(),
                o.json["constrained_share"].as_f64(),
            ),
            ("pseudo_f".to_string(), Some(t.pseudo_f)),
            ("p_value".to_string(), Some(t.permutation.p_value)),
        ];
        let id = store_run(
            store,
            &args.run,
            "ordinate",
            &o.selection,
            &o.matrix,
            params,
            o.seed,
            &o.json,
            values,
        )?;
        if let Value::Object(m) = &mut o.json {
            m.insert("run_id".into(), json!(id));
        }
    }
    match args.run.format {
        FormatArg::Json => write_json(out, &o.json)?,
        FormatArg::Csv => write_csv(&o, out)?,
        FormatArg::Table => write_text(&o, out)?,
    }
    Ok(())
}

/// CSV: a `record` column (`eigenvalue`, `share`, then `sample`), the sample
/// label, site, year and group, then one column per axis.
fn write_csv(o: &Ordination, out: &mut dyn Write) -> anyhow::Result<()> {
    let k = o.coords.ncols();
    let mut w = csv::Writer::from_writer(out);
    let mut header: Vec<String> = ["record", "label", "site", "year", "group"]
        .map(String::from)
        .to_vec();
    header.extend((1..=k).map(|a| format!("axis{a}")));
    w.write_record(&header)?;
    let blank = || vec![String::new(); 4];
    for (name, vals) in [("eigenvalue", &o.eigenvalues), ("share", &o.shares)] {
        let mut row = vec![name.to_string()];
        row.extend(blank());
        row.extend(vals.iter().map(|v| v.to_string()));
        w.write_record(&row)?;
    }
    for (i, s) in o.matrix.samples.iter().enumerate() {
        let mut row = vec![
            "sample".to_string(),
            s.label.clone(),
            s.site.clone(),
            s.year.to_string(),
            if o.group_field.is_some() {
                o.group_names[o.group_of[i]].clone()
            } else {
                String::new()
            },
        ];
        row.extend(o.coords.row(i).iter().map(|v| v.to_string()));
        w.write_record(&row)?;
    }
    w.flush()?;
    Ok(())
}

fn write_text(o: &Ordination, out: &mut dyn Write) -> anyhow::Result<()> {
    let j = &o.json;
    writeln!(
        out,
        "{} of {}",
        o.method.name().to_uppercase(),
        j["selection_text"].as_str().unwrap_or("")
    )?;
    if let Some(t) = j["total"].as_f64() {
        writeln!(out, "total: {t:.6}; shares are of the {}", o.share_of)?;
    }
    let mut t = new_table(&["axis", "eigenvalue", "share", "cumulative"]);
    let mut cum = 0.0;
    for a in 0..o.eigenvalues.len() {
        cum += o.shares[a];
        t.add_row(vec![
            format!("{}", a + 1),
            format!("{:.6}", o.eigenvalues[a]),
            format!("{:.1}%", 100.0 * o.shares[a]),
            format!("{:.1}%", 100.0 * cum),
        ]);
    }
    write_table(out, &t)?;
    if let Some(s) = j["negative_eigenvalue_share"].as_f64() {
        writeln!(
            out,
            "negative eigenvalues: {:.2}% of the absolute eigenvalue sum",
            100.0 * s
        )?;
    }
    if let Some(test) = &o.test {
        writeln!(
            out,
            "constraints: {} ({} df) explain {:.1}% of the inertia ({:.6} of {:.6})",
            o.constraints
                .iter()
                .map(|c| c.field.as_str())
                .collect::<Vec<_>>()
                .join(", "),
            test.rank,
            100.0 * test.constrained_inertia / test.total_inertia,
            test.constrained_inertia,
            test.total_inertia
        )?;
        writeln!(
            out,
            "test: pseudo-F = {:.4}, p = {} ({} {}permutations, {}, seed {})",
            test.pseudo_f,
            test.permutation.p_value,
            test.permutation.permutations,
            if test.permutation.exact {
                "exact "
            } else {
                "random "
            },
            test.permutation.scheme,
            test.permutation.seed
        )?;
    }
    if o.coords.ncols() >= 2 {
        let mut g = new_table(&[
            "group",
            "samples",
            "centre 1",
            "centre 2",
            "95% ellipse semi-axes",
        ]);
        for (gi, name) in o.group_names.iter().enumerate() {
            let n = o.group_of.iter().filter(|&&x| x == gi).count();
            let (c1, c2, ax) = match &o.ellipses[gi] {
                Some(e) => (
                    format!("{:.4}", e.centre[0]),
                    format!("{:.4}", e.centre[1]),
                    format!("{:.4} × {:.4}", e.semi_axes[0], e.semi_axes[1]),
                ),
                None => ("".into(), "".into(), "none (fewer than 3 samples)".into()),
            };
            g.add_row(vec![name.clone(), n.to_string(), c1, c2, ax]);
        }
        write_table(out, &g)?;
    }
    writeln!(out, "sample coordinates: --format csv or --format json")?;
    Ok(())
}
