//! `tally report`: gather the summary and the analyses of a selection and
//! write one self-contained HTML file (`report::html`).
//!
//! With `--by`: the store summary, a correspondence analysis, the totals, the
//! size and shape comparison (`tally compare`) and the five-way partition
//! (`tally partition --compare-distances`); with `--split-by`: the trends
//! (`tally trend`). Each part is computed by the same code as its command, from
//! the same arguments, and the report lists those command lines and run ids.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;
use serde_json::Value;

use super::FormatArg;
use super::common::RunArgs;
use super::common::{Periods, parse_periods};
use super::ordinate::write_new_file;
use super::selection::{SelectionArgs, flags_of};
use crate::analysis::trend::BreakpointSpec;
use crate::report::html::{self, Labelled, OrdinationPart, Part, ReportInput};
use crate::report::svg::{TotalsGroup, TotalsMeasure, TotalsPlot};
use crate::store::Store;
use crate::workflow::design::DistanceSpec;
use crate::workflow::ordinate::{self, Method};
use crate::workflow::{self, Analysis, Silent, runs, trend};

/// Arguments of `tally report`.
#[derive(Debug, Clone, clap::Args)]
#[command(group(clap::ArgGroup::new("grouping").required(true).args(["by", "split_by"])))]
pub struct Args {
    /// Which events, and what one row is.
    #[command(flatten)]
    pub selection: SelectionArgs,
    /// Compare the groups of this field (`period` with `--periods`).
    #[arg(long, value_name = "FIELD")]
    pub by: Option<String>,
    /// Follow each group of this field across the years.
    #[arg(long, value_name = "FIELD")]
    pub split_by: Option<String>,
    /// Year ranges defining the field `period`, e.g. 2008..2015,2016..2025.
    #[arg(long, value_name = "A..B,C..D", value_parser = parse_periods)]
    pub periods: Option<Periods>,
    /// The HTML file to write.
    #[arg(long, value_name = "FILE.html")]
    pub out: PathBuf,
    /// Replace an existing file.
    #[arg(long)]
    pub force: bool,
    /// Permutations, seed, storage of the runs made for the report.
    #[command(flatten)]
    pub run: RunArgs,
}

/// The `tally summary --format json` object of the store.
///
/// # Errors
/// SQLite errors.
pub fn summary_json(store: &mut Store) -> anyhow::Result<Value> {
    let mut buf = Vec::new();
    super::summary::run(
        super::summary::Args {
            format: FormatArg::Json,
        },
        store,
        &mut buf,
    )?;
    Ok(serde_json::from_slice(&buf)?)
}

/// The report part of an ordination outcome, with the CCA `test` shown under
/// its plot (`None` without two axes).
pub fn ordination_part(
    o: &ordinate::Outcome,
    label: &str,
    test: Option<&ordinate::Outcome>,
) -> Option<OrdinationPart> {
    Some(OrdinationPart {
        label: label.to_string(),
        plot: crate::report::text::ordinate::plot(o)?,
        result: o.clone(),
        test: test.cloned(),
    })
}

/// Box plots of the sample totals of an ordination's matrix, per group.
pub fn totals_part(o: &ordinate::Outcome, title: &str) -> Part<TotalsPlot> {
    let groups = o
        .groups
        .iter()
        .enumerate()
        .map(|(g, group)| TotalsGroup {
            name: group.group.clone(),
            values: o
                .samples
                .iter()
                .filter(|s| s.group_index == g)
                .map(|s| s.total)
                .collect(),
        })
        .collect();
    let measure = match &o.effort_unit {
        Some(unit) => TotalsMeasure::PerEffort {
            unit: unit.trim_end_matches('s').to_string(),
        },
        None => TotalsMeasure::Counts,
    };
    Part::Done(TotalsPlot {
        title: title.to_string(),
        subtitle: o.selection_text.clone(),
        measure,
        groups,
    })
}

// Each of these turns a command's JSON result into its report part.

/// One `tally compare` JSON result, labelled (e.g. `lower reach`).
pub fn compare_entry(label: &str, result: Value) -> Labelled {
    Labelled {
        label: label.to_string(),
        value: result,
    }
}

/// A `tally partition` JSON result (single or `--compare-distances`).
pub fn partition_entry(result: Value) -> Part<Value> {
    Part::Done(result)
}

/// The trends of the report: `tally trend --split-by FIELD --every year
/// --breakpoint auto` on the report's selection, one stored run per group
/// (unless `--no-store`, each id listed under `trends`).
///
/// # Errors
/// Selection, field and analysis errors; SQLite errors.
fn trend_groups(
    store: &mut Store,
    args: &Args,
    field: &str,
    run_ids: &mut Vec<(String, i64)>,
) -> anyhow::Result<Vec<trend::Group>> {
    let sel = trend::resolve(
        store,
        args.selection.selection.as_deref(),
        &args.selection.explicit(),
        trend::Every::Year,
    )?;
    let parts = trend::split(store, &sel, field)?;
    let mut spec = trend::Spec::new(args.run.permutations, args.run.seed());
    spec.breakpoint = Some(BreakpointSpec::Auto);
    let split = spec.run_split(field, &parts, &Silent)?;
    if !args.run.no_store {
        for id in runs::save(store, &split.to_save(&spec, &parts)?)? {
            run_ids.push(("trends".to_string(), id));
        }
    }
    Ok(split.groups)
}

/// The run id a command put in its JSON (`run_id`), if any.
pub fn run_id_of(v: &Value) -> Option<i64> {
    v.get("run_id").and_then(Value::as_i64)
}

/// Build the report input for `args`.
///
/// # Errors
/// Selection, field and kernel errors of the parts computed here.
pub fn build(store: &mut Store, args: &Args) -> anyhow::Result<ReportInput> {
    let summary = summary_json(store)?;
    let field = args
        .by
        .clone()
        .or_else(|| args.split_by.clone())
        .context("--by or --split-by is required")?;
    let prepared = workflow::prepare(store, &args.selection.resolve(store)?)?;
    // The periods of the ordination are applied by the one periods rule
    // (`Periods::apply`), as in the comparison.
    let ca = ordinate::Spec {
        method: Method::Ca,
        by: Some(field.clone()),
        periods: args.periods.clone(),
        constraints: Vec::new(),
        axes: 2,
        distance: DistanceSpec::default(),
        permutations: args.run.permutations,
        seed: None,
    };
    let o = ca
        .run(&prepared, &Silent)
        .context("ordination for the report")?;
    let selection_text = o.selection_text.clone();
    let flags = flags_of(&prepared.selection);
    let periods = args
        .periods
        .as_ref()
        .map(|p| {
            format!(
                " --periods {}",
                p.0.iter()
                    .map(|(a, b)| format!("{a}..{b}"))
                    .collect::<Vec<_>>()
                    .join(",")
            )
        })
        .unwrap_or_default();
    let mut parameters = vec![
        ("store summary".to_string(), "tally summary".to_string()),
        (
            "ordination".to_string(),
            format!("tally ordinate {flags} --method ca --by {field}{periods}"),
        ),
    ];
    let ordination = match ordination_part(&o, &format!("Correspondence analysis by {field}"), None)
    {
        Some(p) => Part::Done(vec![p]),
        None => Part::Unavailable("the correspondence analysis has fewer than two axes".into()),
    };
    let totals = totals_part(&o, &format!("Sample totals by {field}"));
    let mut run_ids = Vec::new();
    let (compare, partition) = match &args.by {
        Some(by) => {
            // The ordination above printed the assembly notes of this selection.
            let prepared = crate::workflow::prepare(store, &args.selection.resolve(store)?)?;
            let seed = args.run.seed();
            let mut c =
                crate::workflow::compare::Spec::new(by.clone(), args.run.permutations, seed);
            c.periods = args.periods.clone();
            let cr = c
                .run(&prepared, &Silent)
                .context("size and shape comparison for the report")?;
            let p = crate::workflow::partition::Spec::compared(args.run.permutations, seed);
            let pr = p
                .run(&prepared, &Silent)
                .context("size/shape partition for the report")?;
            if !args.run.no_store {
                let ids = runs::save(
                    store,
                    &[
                        runs::ToSave::new(&prepared, &c, &cr)?,
                        runs::ToSave::new(&prepared, &p, &pr)?,
                    ],
                )
                .context("storing the runs of the report")?;
                run_ids.push((format!("comparison by {by}"), ids[0]));
                run_ids.push(("size/shape partition".to_string(), ids[1]));
            }
            parameters.push((
                "comparison".to_string(),
                format!("tally compare {flags} --by {by}{periods}"),
            ));
            parameters.push((
                "partition".to_string(),
                format!("tally partition {flags} --compare-distances"),
            ));
            (
                Part::Done(vec![compare_entry(
                    &format!("by {by}"),
                    serde_json::to_value(&cr)?,
                )]),
                partition_entry(serde_json::to_value(&pr)?),
            )
        }
        None => (Part::NotRequested, Part::NotRequested),
    };
    let trends = match &args.split_by {
        Some(split) => {
            let groups =
                trend_groups(store, args, split, &mut run_ids).context("trends for the report")?;
            parameters.push((
                "trends".to_string(),
                format!("tally trend {flags} --split-by {split} --every year --breakpoint auto"),
            ));
            Part::Done(groups)
        }
        None => Part::NotRequested,
    };
    Ok(ReportInput {
        title: "Community change report".to_string(),
        selection_text,
        summary,
        compare,
        partition,
        ordination,
        totals,
        trends,
        run_ids,
        parameters,
        cautions: Vec::new(),
    })
}

/// Run `tally report`.
///
/// # Errors
/// As [`build`]; an existing output file without `--force`; I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    if args.out.exists() && !args.force {
        anyhow::bail!("{} exists; give --force to replace it", args.out.display());
    }
    let input = build(store, &args)?;
    let page = html::render(&input);
    write_new_file(&args.out, &page, args.force)?;
    writeln!(out, "report written to {}", args.out.display())?;
    Ok(())
}
