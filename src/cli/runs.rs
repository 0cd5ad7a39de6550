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
use crate::workflow::trend;

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
        /// Output format.
        #[arg(long, value_enum, default_value_t = FormatArg::Table)]
        format: FormatArg,
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
            print(out, format, &r, || serde_json::to_value(&r))
        }
        Action::Verify { id, format } => super::verify::run(id, format, store, out),
        Action::Series {
            kind,
            value,
            selection,
            format,
        } => {
            let sel = match selection {
                Some(name) => Some(serde_json::to_value(store.selection(&name)?)?),
                None => None,
            };
            let mut points = store.series(&kind, &value, sel.as_ref())?;
            if points.is_empty() && kind == trend::KIND {
                // Per-period values of trend runs (`period.2016.size_part`), one
                // point per run and period, dated by the period.
                points = trend::period_series(store, &value, sel.as_ref())?;
            }
            let series = Series {
                kind: &kind,
                value: &value,
                points: &points,
            };
            print(out, format, &series, || Ok(series.json()))
        }
    }
}
