//! `tally summary`: what the store holds, and which sites were sampled in which years.

use std::io::Write;

use serde_json::json;

use super::FormatArg;
use crate::report::format::{new_table, num, write_json, write_table};
use crate::store::Store;

/// Arguments of `tally summary`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Output format (csv prints the site × year grid of events).
    #[arg(long, value_enum, default_value_t)]
    pub format: FormatArg,
}

/// Print the summary.
///
/// # Errors
/// SQLite or I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let s = store.summary()?;
    match args.format {
        FormatArg::Json => {
            let protocols: Vec<_> = s
                .protocols
                .iter()
                .map(|p| {
                    json!({"code": p.code, "effort_unit": p.effort_unit, "events": p.events,
                           "total_effort": num(p.total_effort)})
                })
                .collect();
            let coverage: Vec<_> = s
                .coverage
                .iter()
                .map(|c| json!({"site": c.site, "events": c.events}))
                .collect();
            let v = json!({
                "sites": s.sites, "events": s.events, "taxa": s.taxa, "counts": s.counts,
                "batches": s.batches, "first_date": s.first_date, "last_date": s.last_date,
                "years": s.years, "protocols": protocols, "coverage": coverage,
            });
            write_json(out, &v)?;
        }
        FormatArg::Csv => {
            let mut w = crate::report::format::csv_writer(out);
            let mut header = vec!["site".to_string()];
            header.extend(s.years.iter().map(|y| y.to_string()));
            w.write_record(&header)?;
            for c in &s.coverage {
                let mut row = vec![c.site.clone()];
                row.extend(c.events.iter().map(|n| n.to_string()));
                w.write_record(&row)?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            let span = match (&s.first_date, &s.last_date) {
                (Some(a), Some(b)) => format!("{a} to {b}"),
                _ => "no events".to_string(),
            };
            writeln!(
                out,
                "{}, {}, {}, {} in {}; {span}",
                crate::words::count(s.sites, "site", "sites"),
                crate::words::count(s.events, "event", "events"),
                crate::words::count(s.taxa, "taxon", "taxa"),
                crate::words::count(s.counts, "count", "counts"),
                crate::words::count(s.batches, "batch", "batches")
            )?;
            if !s.protocols.is_empty() {
                let mut t = new_table(&["protocol", "effort unit", "events", "total effort"]);
                for p in &s.protocols {
                    t.add_row(vec![
                        p.code.clone(),
                        p.effort_unit.clone(),
                        p.events.to_string(),
                        format!("{}", p.total_effort),
                    ]);
                }
                write_table(out, &t)?;
            }
            if !s.coverage.is_empty() && !s.years.is_empty() {
                writeln!(out, "events per site and year:")?;
                let mut header = vec!["site".to_string()];
                header.extend(s.years.iter().map(|y| y.to_string()));
                let refs: Vec<&str> = header.iter().map(String::as_str).collect();
                let mut t = new_table(&refs);
                for c in &s.coverage {
                    let mut row = vec![c.site.clone()];
                    row.extend(c.events.iter().map(|n| {
                        if *n == 0 {
                            ".".to_string()
                        } else {
                            n.to_string()
                        }
                    }));
                    t.add_row(row);
                }
                write_table(out, &t)?;
            }
        }
    }
    Ok(())
}
