//! `tally runs`: stored results — list, show, follow a number across runs;
//! printed by [`crate::report::text::runs`]. (`runs verify` reassembles and
//! recomputes; it lives in `cli::verify`.)

use std::io::Write;

use clap::Subcommand;
use serde_json::Value;

use super::FormatArg;
use crate::report::format::write_json;
use crate::report::text::Render;
use crate::report::text::runs::{RunList, Series};
use crate::store::Store;
use crate::workflow::runs;

/// Arguments of `tally runs`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to do.
    #[command(subcommand)]
    pub action: Action,
}

/// The `runs` actions.
#[derive(Debug, Subcommand)]
pub enum Action {
    /// List stored runs, newest first.
    List {
        /// Only runs of this kind (permanova, partition, compare, trend, …).
        #[arg(long)]
        kind: Option<String>,
        /// Output format.
        #[arg(long, value_enum, default_value_t = FormatArg::Table)]
        format: FormatArg,
    },
    /// Show one run: parameters, selection, seed, fingerprint and result.
    Show {
        /// Run id.
        id: i64,
        /// Output format (table prints the headline numbers; json the whole record).
        #[arg(long, value_enum, default_value_t = FormatArg::Table)]
        format: FormatArg,
    },
    /// Reassemble a run's selection, check its fingerprint and recompute it with
    /// the stored parameters and seed: `identical`, or what differs (exit code 1).
    Verify {
        /// Run id.
        id: i64,
        /// Output format.
        #[arg(long, value_enum, default_value_t = FormatArg::Table)]
        format: FormatArg,
    },
    /// A stored number across runs, ordered by the period each run's data covers
    /// (for `--kind trend`, a per-period value such as `size_part` gives one
    /// point per trend run and period, dated by the period).
    Series {
        /// Kind of run.
        #[arg(long)]
        kind: String,
        /// Name of the stored number (see `runs show ID`).
        #[arg(long)]
        value: String,
        /// Only runs made on this saved selection's definition.
        #[arg(long)]
        selection: Option<String>,
        /// For runs holding several comparisons (compare with three or more
        /// groups): follow the comparison of this group with the reference.
        #[arg(long)]
        group: Option<String>,
        /// Only runs whose selection has this condition: a site condition
        /// (`reach=lower`) or a selection field (`protocol=kick`,
        /// `unit=site-year`); repeat for several (all must hold).
        #[arg(long = "where", value_name = "KEY=VALUE", value_parser = super::selection::parse_key_value)]
        conditions: Vec<(String, String)>,
        /// Output format.
        #[arg(long, value_enum, default_value_t = FormatArg::Table)]
        format: FormatArg,
    },
    /// Delete stored runs and their numbers (all the ids given, or none).
    Delete {
        /// Run ids.
        #[arg(required = true)]
        ids: Vec<i64>,
    },
    /// Delete the runs stored before a date, optionally only of one kind.
    Prune {
        /// Only runs of this kind.
        #[arg(long)]
        kind: Option<String>,
        /// Runs stored before this date (YYYY-MM-DD) go.
        #[arg(long, value_name = "DATE")]
        before: String,
        /// List the runs that would go, and delete nothing.
        #[arg(long)]
        dry_run: bool,
    },
}

/// Print `r` in `format`; JSON is `json`.
fn print(
    out: &mut dyn Write,
    format: FormatArg,
    r: &dyn Render,
    json: impl FnOnce() -> serde_json::Result<Value>,
) -> anyhow::Result<()> {
    match format {
        FormatArg::Json => write_json(out, &json()?)?,
        FormatArg::Csv => r.csv(out)?,
        FormatArg::Table => r.table(out)?,
    }
    Ok(())
}

/// Say which runs went (or would go, with `--dry-run`).
fn print_removed(out: &mut dyn Write, r: &runs::Removed) -> anyhow::Result<()> {
    let ids: Vec<String> = r.runs.iter().map(i64::to_string).collect();
    let runs = if r.runs.len() == 1 { "run" } else { "runs" };
    if r.runs.is_empty() {
        writeln!(out, "no stored run matches; nothing deleted")?;
    } else if r.dry_run {
        writeln!(
            out,
            "would delete {} {runs}: {} (run again without --dry-run to delete them)",
            r.runs.len(),
            ids.join(", ")
        )?;
    } else {
        writeln!(
            out,
            "deleted {} {runs} ({}) and {} stored numbers",
            r.runs.len(),
            ids.join(", "),
            r.values
        )?;
    }
    Ok(())
}

/// Run `tally runs`.
///
/// # Errors
/// Store errors; an unknown run id.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    match args.action {
        Action::List { kind, format } => {
            let list = RunList(&store.runs(kind.as_deref())?);
            print(out, format, &list, || Ok(list.json()))
        }
        Action::Show { id, format } => {
            let r = store.run(id)?;
            print(out, format, &r, || {
                let mut v = serde_json::to_value(&r)?;
                if let Ok((command, note)) = runs::command_of(&r) {
                    v["command"] = serde_json::json!(command);
                    v["command_note"] = serde_json::json!(note);
                }
                Ok(v)
            })
        }
        Action::Verify { id, format } => super::verify::run(id, format, store, out),
        Action::Series {
            kind,
            value,
            selection,
            group,
            conditions,
            format,
        } => {
            let selection = match selection {
                Some(name) => Some(store.selection(&name)?),
                None => None,
            };
            let points = runs::series(
                store,
                &runs::SeriesQuery {
                    kind: kind.clone(),
                    value: value.clone(),
                    selection,
                    group,
                    conditions,
                },
            )?;
            let series = Series {
                kind: &kind,
                value: &value,
                points: &points,
            };
            print(out, format, &series, || Ok(series.json()))
        }
        Action::Delete { ids } => {
            let removed = runs::delete(store, &ids)?;
            print_removed(out, &removed)
        }
        Action::Prune {
            kind,
            before,
            dry_run,
        } => {
            let removed = runs::prune(store, kind.as_deref(), &before, dry_run)?;
            print_removed(out, &removed)
        }
    }
}
