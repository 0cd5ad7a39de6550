//! `tally runs`: stored results — list, show, follow a number across runs.
//! (`runs verify` reassembles and recomputes; it lives in `cli::verify`.)

use std::io::Write;

use clap::Subcommand;
use serde_json::json;

use super::FormatArg;
use crate::report::format::{new_table, opt_num, write_json, write_table};
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

fn fmt_opt(v: Option<f64>) -> String {
    v.map(|x| format!("{x:.6}")).unwrap_or_else(|| "n/a".into())
}

/// Run `tally runs`.
///
/// # Errors
/// Store errors; an unknown run id.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    match args.action {
        Action::List { kind, format } => {
            let runs = store.runs(kind.as_deref())?;
            match format {
                FormatArg::Json => {
                    let list: Vec<_> = runs
                        .iter()
                        .map(|r| {
                            json!({"id": r.id, "kind": r.kind, "created_at": r.created_at,
                                "seed": r.seed, "fingerprint": r.fingerprint,
                                "period_start": r.period_start, "period_end": r.period_end,
                                "tool_version": r.tool_version})
                        })
                        .collect();
                    write_json(out, &json!(list))?;
                }
                FormatArg::Csv => {
                    let mut w = csv::Writer::from_writer(out);
                    w.write_record([
                        "id",
                        "kind",
                        "created_at",
                        "period_start",
                        "period_end",
                        "seed",
                        "fingerprint",
                    ])?;
                    for r in &runs {
                        w.write_record([
                            r.id.to_string(),
                            r.kind.clone(),
                            r.created_at.clone(),
                            r.period_start.clone().unwrap_or_default(),
                            r.period_end.clone().unwrap_or_default(),
                            r.seed.map(|s| s.to_string()).unwrap_or_default(),
                            r.fingerprint.clone(),
                        ])?;
                    }
                    w.flush()?;
                }
                FormatArg::Table => {
                    let mut t =
                        new_table(&["run", "kind", "stored", "data from", "data to", "seed"]);
                    for r in &runs {
                        t.add_row(vec![
                            r.id.to_string(),
                            r.kind.clone(),
                            r.created_at.clone(),
                            r.period_start.clone().unwrap_or_default(),
                            r.period_end.clone().unwrap_or_default(),
                            r.seed.map(|s| s.to_string()).unwrap_or_default(),
                        ]);
                    }
                    write_table(out, &t)?;
                }
            }
        }
        Action::Show { id, format } => {
            let r = store.run(id)?;
            match format {
                FormatArg::Json => write_json(out, &serde_json::to_value(&r)?)?,
                FormatArg::Csv => {
                    let mut w = csv::Writer::from_writer(out);
                    w.write_record(["name", "value"])?;
                    for (n, v) in &r.values {
                        w.write_record([n.clone(), v.map(|x| x.to_string()).unwrap_or_default()])?;
                    }
                    w.flush()?;
                }
                FormatArg::Table => {
                    writeln!(
                        out,
                        "run {} — {} (tally {}, stored {})",
                        r.id, r.kind, r.tool_version, r.created_at
                    )?;
                    writeln!(out, "selection:  {}", r.selection)?;
                    writeln!(out, "parameters: {}", r.parameters)?;
                    writeln!(
                        out,
                        "seed:       {}",
                        r.seed
                            .map(|s| s.to_string())
                            .unwrap_or_else(|| "none".into())
                    )?;
                    writeln!(
                        out,
                        "data:       {} .. {}, fingerprint {}",
                        r.period_start.as_deref().unwrap_or("?"),
                        r.period_end.as_deref().unwrap_or("?"),
                        r.fingerprint
                    )?;
                    let mut t = new_table(&["stored number", "value"]);
                    for (n, v) in &r.values {
                        t.add_row(vec![n.clone(), fmt_opt(*v)]);
                    }
                    write_table(out, &t)?;
                }
            }
        }
        Action::Verify { id, format } => super::verify::run(id, format, store, out)?,
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
            match format {
                FormatArg::Json => {
                    let list: Vec<_> = points
                        .iter()
                        .map(|p| json!({"run_id": p.run_id, "period_start": p.period_start,
                            "period_end": p.period_end, "created_at": p.created_at, "value": opt_num(p.value)}))
                        .collect();
                    write_json(out, &json!({"kind": kind, "value": value, "points": list}))?;
                }
                FormatArg::Csv => {
                    let mut w = csv::Writer::from_writer(out);
                    w.write_record(["run_id", "period_start", "period_end", "value"])?;
                    for p in &points {
                        w.write_record([
                            p.run_id.to_string(),
                            p.period_start.clone().unwrap_or_default(),
                            p.period_end.clone().unwrap_or_default(),
                            p.value.map(|x| x.to_string()).unwrap_or_default(),
                        ])?;
                    }
                    w.flush()?;
                }
                FormatArg::Table => {
                    let mut t = new_table(&["run", "data from", "data to", &value]);
                    for p in &points {
                        t.add_row(vec![
                            p.run_id.to_string(),
                            p.period_start.clone().unwrap_or_default(),
                            p.period_end.clone().unwrap_or_default(),
                            fmt_opt(p.value),
                        ]);
                    }
                    write_table(out, &t)?;
                }
            }
        }
    }
    Ok(())
}
