//! `tally sites list|show|set|history|undo`: the sites as they are and as they
//! were. A site attribute value holds from a date until the next value of the
//! same key; every analysis uses the value in force on each event's date.
//! Corrections never rewrite an event or a count; each is recorded with its
//! reason and can be undone.

use std::io::Write;

use clap::Subcommand;
use serde_json::json;

use super::{FormatArg, note};
use crate::report::format::{new_table, write_json, write_table};
use crate::store::Store;
use crate::store::sites::{SiteChange, SiteDetail, SiteEdit, SiteSummary, YearVisits};

/// Arguments of `tally sites`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to do.
    #[command(subcommand)]
    pub action: Action,
}

/// Actions on sites.
#[derive(Debug, Subcommand)]
pub enum Action {
    /// Every site: name, coordinates, latest attributes, first and last visit, events.
    List {
        /// Output format.
        #[arg(long, value_enum, default_value_t)]
        format: FormatArg,
    },
    /// One site in full: attribute history, protocols used, visits per year, corrections.
    Show {
        /// The site code.
        code: String,
        /// Output format.
        #[arg(long, value_enum, default_value_t)]
        format: FormatArg,
    },
    /// Correct a site: attribute values from a date, its name or coordinates (recorded, reversible).
    Set {
        /// The site code.
        code: String,
        /// Attribute values to set, KEY=VALUE (from --from, or since always).
        #[arg(value_name = "KEY=VALUE")]
        values: Vec<String>,
        /// The first date (YYYY-MM-DD) the values hold; without it they hold since always.
        #[arg(long, value_name = "DATE")]
        from: Option<String>,
        /// Remove the value of KEY stored for --from (or since always).
        #[arg(long, value_name = "KEY")]
        remove: Vec<String>,
        /// A new name.
        #[arg(long)]
        name: Option<String>,
        /// New latitude (decimal degrees, WGS84); give --longitude with it.
        #[arg(long, requires = "longitude", allow_hyphen_values = true)]
        latitude: Option<f64>,
        /// New longitude (decimal degrees, WGS84); give --latitude with it.
        #[arg(long, requires = "latitude", allow_hyphen_values = true)]
        longitude: Option<f64>,
        /// Why (recorded with the change).
        #[arg(long)]
        reason: String,
    },
    /// Every recorded correction (of one site when CODE is given), with its id.
    History {
        /// Only this site.
        code: Option<String>,
        /// Output format.
        #[arg(long, value_enum, default_value_t)]
        format: FormatArg,
    },
    /// Reverse a correction (ids in `sites history`).
    Undo {
        /// The change id.
        change: i64,
        /// Why (recorded with the undo).
        #[arg(long)]
        reason: String,
    },
}

fn opt<T: ToString>(v: Option<T>) -> String {
    v.map(|x| x.to_string()).unwrap_or_default()
}

fn visits(s: &SiteSummary) -> String {
    match (&s.first_visit, &s.last_visit) {
        (Some(a), Some(b)) if a == b => a.clone(),
        (Some(a), Some(b)) => format!("{a} .. {b}"),
        _ => "never visited".into(),
    }
}

/// `key=value` pairs; a key with a dated value is marked `*` (see `sites show`).
fn attributes(s: &SiteSummary) -> String {
    s.attributes
        .iter()
        .map(|(k, v)| {
            let mark = if s.changing.contains(k) { "*" } else { "" };
            format!("{k}={v}{mark}")
        })
        .collect::<Vec<_>>()
        .join(", ")
}

fn write_list(out: &mut dyn Write, sites: &[SiteSummary], format: FormatArg) -> anyhow::Result<()> {
    match format {
        FormatArg::Json => write_json(out, &serde_json::to_value(sites)?)?,
        FormatArg::Csv => {
            let keys: std::collections::BTreeSet<&String> =
                sites.iter().flat_map(|s| s.attributes.keys()).collect();
            let mut w = crate::report::format::csv_writer(out);
            let mut header: Vec<String> = [
                "code",
                "name",
                "latitude",
                "longitude",
                "first_visit",
                "last_visit",
                "events",
            ]
            .map(String::from)
            .to_vec();
            header.extend(keys.iter().map(|k| k.to_string()));
            w.write_record(&header)?;
            for s in sites {
                let mut row = vec![
                    s.code.clone(),
                    s.name.clone(),
                    opt(s.latitude),
                    opt(s.longitude),
                    s.first_visit.clone().unwrap_or_default(),
                    s.last_visit.clone().unwrap_or_default(),
                    s.events.to_string(),
                ];
                row.extend(
                    keys.iter()
                        .map(|k| s.attributes.get(*k).cloned().unwrap_or_default()),
                );
                w.write_record(&row)?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            if sites.is_empty() {
                writeln!(
                    out,
                    "no sites yet (bring them in with `tally import sites FILE`)"
                )?;
                return Ok(());
            }
            let mut t = new_table(&[
                "site",
                "name",
                "lat",
                "lon",
                "attributes (latest)",
                "visited",
                "events",
            ]);
            for s in sites {
                t.add_row(vec![
                    s.code.clone(),
                    s.name.clone(),
                    opt(s.latitude),
                    opt(s.longitude),
                    attributes(s),
                    visits(s),
                    s.events.to_string(),
                ]);
            }
            write_table(out, &t)?;
            if sites.iter().any(|s| !s.changing.is_empty()) {
                writeln!(
                    out,
                    "* the value changed over time; analyses use the value in force on each event's date (`tally sites show CODE`)"
                )?;
            }
        }
    }
    Ok(())
}

fn write_detail(out: &mut dyn Write, d: &SiteDetail, format: FormatArg) -> anyhow::Result<()> {
    match format {
        FormatArg::Json => write_json(out, &serde_json::to_value(d)?)?,
        FormatArg::Csv => {
            // The attribute history, one value per line (the part a script needs).
            let mut w = crate::report::format::csv_writer(out);
            w.write_record(["site", "key", "from", "until", "value", "batch"])?;
            for h in &d.history {
                w.write_record([
                    d.site.code.clone(),
                    h.key.clone(),
                    h.from.clone().unwrap_or_default(),
                    h.until.clone().unwrap_or_default(),
                    h.value.clone(),
                    opt(h.batch),
                ])?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            let s = &d.site;
            writeln!(
                out,
                "site {}{}",
                s.code,
                if s.name.is_empty() {
                    String::new()
                } else {
                    format!(" — {}", s.name)
                }
            )?;
            match (s.latitude, s.longitude) {
                (Some(a), Some(b)) => writeln!(out, "at {a}, {b}")?,
                _ => writeln!(out, "no coordinates stored")?,
            }
            writeln!(
                out,
                "visited {} ({})",
                visits(s),
                crate::words::count(s.events, "event", "events")
            )?;
            writeln!(out)?;
            if d.history.is_empty() {
                writeln!(out, "no attributes")?;
            } else {
                let mut t = new_table(&["attribute", "value", "holds from", "until", "source"]);
                for h in &d.history {
                    t.add_row(vec![
                        h.key.clone(),
                        h.value.clone(),
                        h.from.clone().unwrap_or_else(|| "always".into()),
                        h.until.clone().unwrap_or_else(|| "now".into()),
                        h.batch.map_or_else(
                            || "sites file or correction".into(),
                            |b| format!("batch {b}"),
                        ),
                    ]);
                }
                write_table(out, &t)?;
            }
            if !d.protocols.is_empty() {
                writeln!(out)?;
                let mut t = new_table(&["protocol", "events", "first", "last"]);
                for p in &d.protocols {
                    t.add_row(vec![
                        p.protocol.clone(),
                        p.events.to_string(),
                        p.first.clone(),
                        p.last.clone(),
                    ]);
                }
                write_table(out, &t)?;
            }
            if !d.years.is_empty() {
                writeln!(out)?;
                // Consecutive years with the same visits and events share a
                // line, so a gap in the record (a year not sampled) stands out.
                let mut t = new_table(&["years", "visits a year", "events a year"]);
                for (first, last, visits, events) in year_runs(&d.years) {
                    let years = if first == last {
                        first.to_string()
                    } else {
                        format!("{first}-{last}")
                    };
                    t.add_row(vec![years, visits.to_string(), events.to_string()]);
                }
                write_table(out, &t)?;
            }
            if !d.changes.is_empty() {
                writeln!(out)?;
                writeln!(out, "corrections:")?;
                write_changes(out, &d.changes, FormatArg::Table)?;
            }
        }
    }
    Ok(())
}

fn write_changes(
    out: &mut dyn Write,
    changes: &[SiteChange],
    format: FormatArg,
) -> anyhow::Result<()> {
    match format {
        FormatArg::Json => write_json(out, &json!(changes))?,
        FormatArg::Csv => {
            let mut w = crate::report::format::csv_writer(out);
            w.write_record([
                "id",
                "site",
                "field",
                "key",
                "from",
                "before",
                "after",
                "changed_at",
                "reason",
                "undoes",
                "undone_by",
            ])?;
            for c in changes {
                w.write_record([
                    c.id.to_string(),
                    c.site.clone(),
                    c.field.clone(),
                    c.key.clone(),
                    c.from.clone(),
                    c.before.to_string(),
                    c.after.to_string(),
                    c.changed_at.clone(),
                    c.reason.clone(),
                    opt(c.undoes),
                    opt(c.undone_by),
                ])?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            if changes.is_empty() {
                writeln!(out, "no corrections recorded")?;
                return Ok(());
            }
            let mut t = new_table(&["id", "site", "change", "when", "reason", "undone by"]);
            for c in changes {
                let what = match c.undoes {
                    Some(u) => format!("undo of {u}: {}", c.describe()),
                    None => c.describe(),
                };
                t.add_row(vec![
                    c.id.to_string(),
                    c.site.clone(),
                    what,
                    c.changed_at.clone(),
                    c.reason.clone(),
                    opt(c.undone_by),
                ]);
            }
            write_table(out, &t)?;
        }
    }
    Ok(())
}

/// Runs of consecutive years with equal visits and events:
/// (first year, last year, visits, events).
fn year_runs(years: &[YearVisits]) -> Vec<(i32, i32, i64, i64)> {
    let mut runs: Vec<(i32, i32, i64, i64)> = Vec::new();
    for y in years {
        match runs.last_mut() {
            Some(r) if r.1 + 1 == y.year && (r.2, r.3) == (y.visits, y.events) => r.1 = y.year,
            _ => runs.push((y.year, y.year, y.visits, y.events)),
        }
    }
    runs
}

/// The edits of `sites set`: KEY=VALUE pairs, removals, name, coordinates.
fn edits(
    values: &[String],
    remove: &[String],
    from: Option<&str>,
    name: Option<String>,
    coordinates: Option<(f64, f64)>,
) -> anyhow::Result<Vec<SiteEdit>> {
    let mut out = Vec::new();
    if let Some(n) = name {
        out.push(SiteEdit::Name(n));
    }
    if let Some((latitude, longitude)) = coordinates {
        out.push(SiteEdit::Coordinates {
            latitude: Some(latitude),
            longitude: Some(longitude),
        });
    }
    for v in values {
        let Some((key, value)) = v.split_once('=') else {
            anyhow::bail!("'{v}' is not KEY=VALUE (e.g. status=restored)");
        };
        out.push(SiteEdit::Attribute {
            key: key.to_string(),
            from: from.map(str::to_string),
            value: Some(value.to_string()),
        });
    }
    for key in remove {
        out.push(SiteEdit::Attribute {
            key: key.clone(),
            from: from.map(str::to_string),
            value: None,
        });
    }
    if out.is_empty() {
        anyhow::bail!(
            "nothing to set: give KEY=VALUE, --remove KEY, --name or --latitude/--longitude"
        );
    }
    if from.is_some() && values.is_empty() && remove.is_empty() {
        anyhow::bail!(
            "--from dates an attribute value; it does not apply to a name or coordinates"
        );
    }
    Ok(out)
}

/// Run `tally sites`.
///
/// # Errors
/// Unknown sites or changes, refused corrections, SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    match args.action {
        Action::List { format } => write_list(out, &store.sites()?, format),
        Action::Show { code, format } => write_detail(out, &store.site_detail(&code)?, format),
        Action::History { code, format } => {
            if let Some(c) = &code {
                // An unknown code is an error, not an empty trail.
                store.site_detail(c)?;
            }
            write_changes(out, &store.site_changes(code.as_deref())?, format)
        }
        Action::Set {
            code,
            values,
            from,
            remove,
            name,
            latitude,
            longitude,
            reason,
        } => {
            let coordinates = latitude.zip(longitude);
            let list = edits(&values, &remove, from.as_deref(), name, coordinates)?;
            let changes = store.set_site(&code, &list, &reason)?;
            store.checkpoint()?;
            for c in &changes {
                note(&format!(
                    "site {}: {}; recorded as change {id} (`tally sites undo {id} --reason …` reverses it)",
                    c.site,
                    c.describe(),
                    id = c.id
                ));
            }
            if changes.iter().any(|c| c.field == "attribute") {
                note(
                    "analyses use the value in force on each event's date; stored runs that used it \
                     now show a change in `tally runs verify`",
                );
            }
            Ok(())
        }
        Action::Undo { change, reason } => {
            let c = store.undo_site_change(change, &reason)?;
            store.checkpoint()?;
            note(&format!(
                "change {change} is undone (site {}: {}); the undo is recorded as change {}",
                c.site,
                c.describe(),
                c.id
            ));
            Ok(())
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn equal_consecutive_years_share_a_line_and_a_gap_breaks_it() {
        let y = |year, visits, events| YearVisits {
            year,
            visits,
            events,
        };
        let years = [y(2008, 2, 2), y(2009, 2, 2), y(2011, 2, 2), y(2012, 3, 4)];
        assert_eq!(
            year_runs(&years),
            [(2008, 2009, 2, 2), (2011, 2011, 2, 2), (2012, 2012, 3, 4)]
        );
    }
}
