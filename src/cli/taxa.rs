//! `tally taxa list|tree|rename|merge|history`: taxonomy upkeep. Renames and
//! merges never rewrite counts: a merged name becomes a synonym and is counted
//! under its accepted name by every query; each change is recorded.

use std::collections::BTreeMap;
use std::io::Write;

use clap::Subcommand;
use serde_json::json;

use super::{FormatArg, note};
use crate::report::format::{new_table, write_json, write_table};
use crate::store::Store;
use crate::store::taxa::TaxonRow;

/// Arguments of `tally taxa`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to do.
    #[command(subcommand)]
    pub action: Action,
}

/// Actions on the taxonomy.
#[derive(Debug, Subcommand)]
pub enum Action {
    /// Every taxon with its rank, parent, accepted name and years of use.
    List {
        /// Output format.
        #[arg(long, value_enum, default_value_t)]
        format: FormatArg,
    },
    /// The parent hierarchy, indented; synonyms shown beside their accepted names.
    Tree,
    /// Give a taxon a new name (its counts follow).
    Rename {
        /// The current name.
        from: String,
        /// The new name.
        to: String,
        /// Why (recorded with the change).
        #[arg(long, default_value = "")]
        reason: String,
    },
    /// Count one taxon under another from now on (FROM becomes a synonym of INTO).
    Merge {
        /// The name to merge.
        from: String,
        /// The accepted name to count it under.
        into: String,
        /// Why (recorded with the change).
        #[arg(long, default_value = "")]
        reason: String,
    },
    /// Every recorded rename and merge.
    History {
        /// Output format.
        #[arg(long, value_enum, default_value_t)]
        format: FormatArg,
    },
}

fn years(t: &TaxonRow) -> String {
    match (t.first_year, t.last_year) {
        (Some(a), Some(b)) if a == b => a.to_string(),
        (Some(a), Some(b)) => format!("{a}-{b}"),
        _ => "not recorded".into(),
    }
}

fn write_tree(out: &mut dyn Write, taxa: &[TaxonRow]) -> std::io::Result<()> {
    let mut children: BTreeMap<Option<&str>, Vec<&TaxonRow>> = BTreeMap::new();
    let mut synonyms: BTreeMap<&str, Vec<&str>> = BTreeMap::new();
    for t in taxa {
        match &t.accepted {
            Some(a) => synonyms.entry(a.as_str()).or_default().push(&t.name),
            None => children.entry(t.parent.as_deref()).or_default().push(t),
        }
    }
    fn walk(
        out: &mut dyn Write,
        node: Option<&str>,
        depth: usize,
        children: &BTreeMap<Option<&str>, Vec<&TaxonRow>>,
        synonyms: &BTreeMap<&str, Vec<&str>>,
    ) -> std::io::Result<()> {
        for t in children.get(&node).map(Vec::as_slice).unwrap_or_default() {
            let rank = if t.rank.is_empty() {
                String::new()
            } else {
                format!(" ({})", t.rank)
            };
            let syn = synonyms
                .get(t.name.as_str())
                .map(|s| format!("  [also recorded as: {}]", s.join(", ")))
                .unwrap_or_default();
            writeln!(out, "{}{}{rank}{syn}", "  ".repeat(depth), t.name)?;
            walk(out, Some(&t.name), depth + 1, children, synonyms)?;
        }
        Ok(())
    }
    walk(out, None, 0, &children, &synonyms)
}

/// Run `tally taxa`.
///
/// # Errors
/// Unknown names, refused renames or merges, SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    match args.action {
        Action::List { format } => {
            let taxa = store.taxa()?;
            match format {
                FormatArg::Json => write_json(out, &serde_json::to_value(&taxa)?)?,
                FormatArg::Csv => {
                    let mut w = csv::Writer::from_writer(out);
                    w.write_record([
                        "name",
                        "rank",
                        "parent",
                        "accepted",
                        "count_rows",
                        "first_year",
                        "last_year",
                    ])?;
                    for t in &taxa {
                        w.write_record([
                            t.name.clone(),
                            t.rank.clone(),
                            t.parent.clone().unwrap_or_default(),
                            t.accepted.clone().unwrap_or_default(),
                            t.count_rows.to_string(),
                            t.first_year.map(|y| y.to_string()).unwrap_or_default(),
                            t.last_year.map(|y| y.to_string()).unwrap_or_default(),
                        ])?;
                    }
                    w.flush()?;
                }
                FormatArg::Table => {
                    let mut tab = new_table(&[
                        "taxon",
                        "rank",
                        "parent",
                        "counted as",
                        "count rows",
                        "recorded",
                    ]);
                    for t in &taxa {
                        tab.add_row(vec![
                            t.name.clone(),
                            t.rank.clone(),
                            t.parent.clone().unwrap_or_default(),
                            t.accepted.clone().unwrap_or_else(|| "itself".into()),
                            t.count_rows.to_string(),
                            years(t),
                        ]);
                    }
                    write_table(out, &tab)?;
                }
            }
        }
        Action::Tree => write_tree(out, &store.taxa()?)?,
        Action::Rename { from, to, reason } => {
            store.rename_taxon(&from, &to, &reason)?;
            store.checkpoint()?;
            note(&format!(
                "renamed taxon '{from}' to '{to}'; its counts follow"
            ));
        }
        Action::Merge { from, into, reason } => {
            let target = store.merge_taxon(&from, &into, &reason)?;
            store.checkpoint()?;
            note(&format!(
                "'{from}' is now counted as '{target}' in every matrix; no count was rewritten"
            ));
        }
        Action::History { format } => {
            let changes = store.taxon_changes()?;
            match format {
                FormatArg::Json => write_json(out, &json!(changes))?,
                FormatArg::Csv => {
                    let mut w = csv::Writer::from_writer(out);
                    w.write_record(["kind", "from", "to", "changed_at", "reason"])?;
                    for c in &changes {
                        w.write_record([&c.kind, &c.from, &c.to, &c.changed_at, &c.reason])?;
                    }
                    w.flush()?;
                }
                FormatArg::Table => {
                    let mut tab = new_table(&["change", "from", "to", "when", "reason"]);
                    for c in &changes {
                        tab.add_row(vec![
                            c.kind.clone(),
                            c.from.clone(),
                            c.to.clone(),
                            c.changed_at.clone(),
                            c.reason.clone(),
                        ]);
                    }
                    write_table(out, &tab)?;
                }
            }
        }
    }
    Ok(())
}
