//! `tally demo`: build the invented Wren Valley demo store from the data
//! embedded in the binary, show what it holds, run the analyses of the
//! demo's stories, write `tally-demo-report.html` next to the store and print
//! a short account of what was found.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{Context, bail};

use super::common::Periods;
use super::common::RunArgs;
use super::selection::{SelectionArgs, UnitArg, flags_of};
use crate::analysis::trend::BreakpointSpec;
use crate::demo::DemoFiles;
use crate::matrix::Unit;
use crate::report::html::{self, Part};
use crate::report::svg::{TotalsGroup, TotalsMeasure, TotalsPlot};
use crate::store::import::{ImportKind, ImportOptions, import_bytes};
use crate::store::{Selection, Store};
use crate::workflow::design::DistanceSpec;
use crate::workflow::ordinate::{self, Method};
use crate::workflow::runs::{self, ToSave};
use crate::workflow::{self, Analysis, Silent, trend};

/// Arguments of `tally demo`.
#[derive(Debug, clap::Args)]
pub struct Args {}

/// Where the demo store goes: `--db` when given on the command line (never
/// `$TALLY_DB`, so a real store named there cannot be replaced by accident),
/// else `./tally-demo.db`.
pub fn demo_path(flag: Option<&Path>) -> PathBuf {
    flag.map(Path::to_path_buf)
        .unwrap_or_else(|| PathBuf::from("tally-demo.db"))
}

/// Create a fresh store at `path`, replacing an existing file only when it is a tally store.
///
/// # Errors
/// The path holds something that is not a tally store; SQLite errors.
pub fn fresh_store(path: &Path) -> anyhow::Result<Store> {
    if path.exists() {
        if let Err(e) = Store::open(path) {
            bail!(
                "{} exists and is not a tally store; not replacing it ({e})",
                path.display()
            );
        }
        for suffix in ["", "-wal", "-shm"] {
            let mut p = path.as_os_str().to_owned();
            p.push(suffix);
            let p = PathBuf::from(p);
            if p.exists() {
                std::fs::remove_file(&p).with_context(|| format!("removing {}", p.display()))?;
            }
        }
    }
    Ok(Store::create(path)?)
}

/// Import the embedded demo files into `store`.
///
/// # Errors
/// Import errors (the embedded data is checked by the test suite).
pub fn load_demo(store: &mut Store) -> anyhow::Result<()> {
    let files = DemoFiles::embedded();
    let kinds = [
        ImportKind::Sites,
        ImportKind::Protocols,
        ImportKind::Taxa,
        ImportKind::Records,
    ];
    for ((name, text), kind) in files.files().into_iter().zip(kinds) {
        let report = import_bytes(
            store,
            kind,
            name,
            text.as_bytes(),
            &ImportOptions::default(),
        )
        .with_context(|| format!("importing demo file {name}"))?;
        super::note(&format!(
            "imported {name}: {} rows (batch {})",
            report.rows, report.batch_id
        ));
    }
    Ok(())
}

/// Seed of every random stream the demo analyses use.
pub const DEMO_SEED: u64 = 20_080_415;
/// Permutations of the demo's tests.
pub const DEMO_PERMUTATIONS: usize = 999;
/// The before/after periods of the demo's stories.
pub const DEMO_PERIODS: [(i32, i32); 2] = [(2008, 2015), (2016, 2025)];

/// What the demo found for one reach.
#[derive(Debug, Clone)]
pub struct ReachFinding {
    /// Reach name.
    pub reach: String,
    /// Geometric mean of per-minute totals, second period over first (descriptive).
    pub totals_ratio: f64,
    /// CCA permutation p-value of composition against the period.
    pub composition_p: f64,
    /// Stored run of that test.
    pub run_id: Option<i64>,
    /// The verdict of `tally compare` (periods 2008–2015 against 2016–2025).
    pub verdict: String,
    /// Stored run of that comparison.
    pub compare_run_id: Option<i64>,
    /// The diagnosis of `tally trend` for the reach (abundance, composition, both, none).
    pub diagnosis: String,
}

/// The demo's analyses: the report input and the findings per reach.
#[derive(Debug, Clone)]
pub struct DemoAnalysis {
    /// Everything the report shows.
    pub report: html::ReportInput,
    /// One finding per reach (lower, middle, upper).
    pub reaches: Vec<ReachFinding>,
}

fn geometric_mean(v: &[f64]) -> f64 {
    (v.iter().map(|x| x.ln()).sum::<f64>() / v.len() as f64).exp()
}

/// Run the analyses of the demo's stories on a demo store: per reach, kick
/// samples per minute pooled per site and year, a correspondence analysis by
/// period, a CCA test of composition against the period, and the totals per
/// period; plus the store summary.
///
/// # Errors
/// Selection and kernel errors (the demo data is checked by the test suite).
pub fn analyse(store: &mut Store) -> anyhow::Result<DemoAnalysis> {
    let summary = workflow::summary::summary(store)?;
    let periods = Periods(DEMO_PERIODS.to_vec());
    let run = RunArgs {
        permutations: DEMO_PERMUTATIONS,
        seed: Some(DEMO_SEED),
        no_store: false,
        format: super::FormatArg::Json,
    };
    let mut parts = Vec::new();
    let mut boxes = Vec::new();
    let mut reaches = Vec::new();
    let mut run_ids = Vec::new();
    let mut parameters = vec![("store summary".to_string(), "tally summary".to_string())];
    let mut compare = Vec::new();
    let mut compared = Vec::new();
    for reach in ["lower", "middle", "upper"] {
        let sel = SelectionArgs {
            protocol: Some("kick".into()),
            per_effort: true,
            unit: Some(UnitArg::SiteYear),
            site_where: vec![("reach".into(), reach.into())],
            ..SelectionArgs::default()
        };
        let prepared = workflow::prepare(store, &sel.resolve(store)?)?;
        // Samples by period (CA), and composition against the period (CCA).
        let ca_spec = ordinate::Spec {
            method: Method::Ca,
            by: None,
            periods: Some(periods.clone()),
            constraints: Vec::new(),
            axes: 2,
            distance: DistanceSpec::default(),
            permutations: DEMO_PERMUTATIONS,
            seed: None,
        };
        let ca = ca_spec.run(&prepared, &Silent)?;
        let cca_spec = ordinate::Spec {
            method: Method::Cca,
            constraints: vec!["period".into()],
            seed: Some(DEMO_SEED),
            ..ca_spec
        };
        let cca = cca_spec.run(&prepared, &Silent)?;
        let test = &cca.cca().context("invariant: a CCA carries its test")?.test;
        let run_id = if run.no_store {
            None
        } else {
            runs::save(store, &[runs::ToSave::new(&prepared, &cca_spec, &cca)?])?
                .first()
                .copied()
        };
        let label = format!("{reach} reach");
        if let Some(id) = run_id {
            run_ids.push((format!("{label}: composition test"), id));
        }
        let flags = flags_of(&prepared.selection);
        parameters.push((
            format!("{label}: ordination"),
            format!("tally ordinate {flags} --method ca --periods 2008..2015,2016..2025"),
        ));
        parameters.push((
            format!("{label}: composition test"),
            format!("tally ordinate {flags} --method cca --constraint period --periods 2008..2015,2016..2025 --permutations {DEMO_PERMUTATIONS} --seed {DEMO_SEED}"),
        ));
        if let Some(p) = crate::report::input::ordination_part(
            &ca,
            &format!("{label}: samples by period"),
            Some(&cca),
        ) {
            parts.push(p);
        }
        let mut means = Vec::new();
        for (g, group) in ca.groups.iter().enumerate() {
            let v: Vec<f64> = ca
                .samples
                .iter()
                .filter(|s| s.group_index == g)
                .map(|s| s.total)
                .collect();
            means.push(geometric_mean(&v));
            boxes.push(TotalsGroup {
                name: format!("{reach} {}", group.group),
                values: v,
            });
        }
        reaches.push(ReachFinding {
            reach: reach.to_string(),
            totals_ratio: means[1] / means[0],
            composition_p: test.p_value,
            run_id,
            verdict: String::new(),
            compare_run_id: None,
            diagnosis: String::new(),
        });
        let mut spec = workflow::compare::Spec::new("period", DEMO_PERMUTATIONS, DEMO_SEED);
        spec.periods = Some(periods.clone());
        let prepared = workflow::prepare(store, &sel.resolve(store)?)?;
        let outcome = spec.run(&prepared, &Silent)?;
        parameters.push((
            format!("{label}: size and shape comparison"),
            format!(
                "tally compare {} --periods 2008..2015,2016..2025 --by period --permutations {DEMO_PERMUTATIONS} --seed {DEMO_SEED}",
                flags_of(&prepared.selection)
            ),
        ));
        if let Some(last) = reaches.last_mut() {
            last.verdict = outcome.verdict.clone();
        }
        compared.push((label, prepared, spec, outcome));
    }
    let partition_sel = workflow::resolve(
        store,
        None,
        &Selection {
            protocol: Some("kick".into()),
            per_effort: true,
            unit: Some(Unit::SiteYear),
            ..Selection::default()
        },
    )?;
    let partition_prepared = workflow::prepare(store, &partition_sel)?;
    let partition_spec = workflow::partition::Spec::compared(DEMO_PERMUTATIONS, DEMO_SEED);
    let partition_outcome = partition_spec.run(&partition_prepared, &Silent)?;
    // The comparisons and the partition are stored together, in one transaction.
    let mut to_save = Vec::new();
    for (_, prepared, spec, outcome) in &compared {
        to_save.push(ToSave::new(prepared, spec, outcome)?);
    }
    to_save.push(ToSave::new(
        &partition_prepared,
        &partition_spec,
        &partition_outcome,
    )?);
    let ids = runs::save(store, &to_save)?;
    drop(to_save);
    for ((label, _, _, outcome), (id, finding)) in
        compared.iter().zip(ids.iter().zip(reaches.iter_mut()))
    {
        run_ids.push((format!("{label}: size and shape comparison"), *id));
        finding.compare_run_id = Some(*id);
        compare.push(html::Labelled {
            label: label.clone(),
            outcome: outcome.clone(),
        });
    }
    run_ids.push((
        "size/shape partition of five dissimilarities".to_string(),
        ids[compared.len()],
    ));
    parameters.push((
        "size/shape partition".to_string(),
        format!(
            "tally partition {} --compare-distances --permutations {DEMO_PERMUTATIONS} --seed {DEMO_SEED}",
            flags_of(&partition_prepared.selection)
        ),
    ));
    let partition = Part::Done(partition_outcome.clone());
    let compare = Part::Done(compare);
    let trend_selection = Selection {
        protocol: Some("kick".into()),
        per_effort: true,
        unit: Some(Unit::SiteYear),
        ..Selection::default()
    };
    let mut trend_spec = trend::Spec::new(DEMO_PERMUTATIONS, DEMO_SEED);
    trend_spec.breakpoint = Some(BreakpointSpec::Auto);
    let trend_parts = trend::split(store, &trend_selection, "reach")?;
    let split = trend_spec.run_split("reach", &trend_parts, &Silent)?;
    for id in runs::save(store, &split.to_save(&trend_spec, &trend_parts)?)? {
        run_ids.push(("trends".to_string(), id));
    }
    for r in reaches.iter_mut() {
        if let Some(g) = split.groups.iter().find(|g| g.group == r.reach) {
            r.diagnosis = g.outcome.diagnosis.name().to_string();
        }
    }
    let trends = Part::Done(split.groups);
    parameters.push((
        "trends".to_string(),
        format!(
            "tally trend {} --every year --split-by reach --breakpoint auto --permutations {DEMO_PERMUTATIONS} --seed {DEMO_SEED}",
            flags_of(&trend_selection)
        ),
    ));
    let totals = Part::Done(TotalsPlot {
        title: "Organisms per minute, by reach and period".into(),
        subtitle: "kick samples pooled per site and year, per minute of kicking".into(),
        measure: TotalsMeasure::PerEffort {
            unit: "minute".into(),
        },
        groups: boxes,
    });
    Ok(DemoAnalysis {
        report: html::ReportInput {
            title: "Wren Valley river monitoring (invented demo data)".into(),
            selection_text: "Kick samples per minute of kicking, pooled per site and year, 2008–2025; before 2016 and from 2016 on".into(),
            summary,
            compare,
            partition,
            ordination: Part::Done(parts),
            totals,
            trends,
            run_ids,
            parameters,
            cautions: vec!["All data in this report is invented (the Wren Valley demo); it illustrates the tool and says nothing about any real river.".into()],
        },
        reaches,
    })
}

/// Where the demo report goes: next to the store.
pub fn report_path(store: &Path) -> PathBuf {
    store.with_file_name("tally-demo-report.html")
}

/// Run the demo.
///
/// # Errors
/// As [`fresh_store`], [`load_demo`] and [`analyse`]; I/O errors.
pub fn run(_args: Args, db_flag: Option<&Path>, out: &mut dyn Write) -> anyhow::Result<()> {
    let path = demo_path(db_flag);
    let mut store = fresh_store(&path)?;
    load_demo(&mut store)?;
    store.checkpoint()?;
    writeln!(
        out,
        "Wren Valley demo store (invented data): {}",
        path.display()
    )?;
    super::summary::run(
        super::summary::Args {
            format: super::FormatArg::Table,
        },
        &mut store,
        out,
    )?;
    let a = analyse(&mut store)?;
    let page = html::render(&a.report);
    let rp = report_path(&path);
    std::fs::write(&rp, page).with_context(|| format!("writing {}", rp.display()))?;
    writeln!(out)?;
    writeln!(
        out,
        "What the demo found (kick samples per minute, site-years, 2008–2015 against 2016–2025):"
    )?;
    for r in &a.reaches {
        writeln!(
            out,
            "  {} reach: totals per minute ×{:.2} (geometric means, descriptive); composition against period p = {} (CCA, {} permutations, seed {})",
            r.reach, r.totals_ratio, r.composition_p, DEMO_PERMUTATIONS, DEMO_SEED
        )?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "Size and shape, 2008–2015 against 2016–2025 (tally compare):"
    )?;
    for r in &a.reaches {
        let run = r
            .compare_run_id
            .map(|id| format!(" [run {id}]"))
            .unwrap_or_default();
        writeln!(out, "  {} reach: {}{run}", r.reach, r.verdict)?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "Across the years (tally trend, with a breakpoint search):"
    )?;
    for r in &a.reaches {
        writeln!(out, "  {} reach: {}", r.reach, r.diagnosis)?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "These are permutation tests on invented data; read docs/methods.md before drawing conclusions from real data."
    )?;
    writeln!(out, "report: {}", rp.display())?;
    writeln!(out, "store:  {}", path.display())?;
    writeln!(
        out,
        "next:   docs/demo.md walks through the same steps command by command"
    )?;
    Ok(())
}
