//! `tally taxa list|tree|code|rename|merge|move|undo|history`: taxonomy upkeep.
//! Wherever a command names a taxon, a field code stands for it too
//! (docs/taxonomy.md, "Field codes").
//! Changes never rewrite counts: a merged name becomes a synonym and is counted
//! under its accepted name by every query. Each change is checked against the
//! taxonomy's rules first, recorded with its reason, and can be undone.

use std::collections::{BTreeMap, BTreeSet};
use std::io::Write;

use clap::Subcommand;
use serde_json::json;

use super::{FormatArg, note};
use crate::report::format::{new_table, write_json, write_table};
use crate::store::Store;
use crate::store::taxa::integrity::Taxonomy;
use crate::store::taxa::{TaxonChange, TaxonRow};

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
    /// Give a taxon a field code (2-6 letters or digits), or remove one with --remove.
    Code {
        /// The taxon (a name, or one of its codes).
        taxon: String,
        /// The code (any case; stored upper case).
        code: String,
        /// Remove the code instead of adding it.
        #[arg(long)]
        remove: bool,
    },
    /// Give a taxon a new name (its counts follow).
    Rename {
        /// The current name.
        from: String,
        /// The new name.
        to: String,
        /// Why (recorded with the change).
        #[arg(long)]
        reason: String,
    },
    /// Count one taxon under another from now on (FROM becomes a synonym of INTO).
    Merge {
        /// The name to merge.
        from: String,
        /// The accepted name to count it under (a synonym stands for its accepted name).
        into: String,
        /// Why (recorded with the change).
        #[arg(long)]
        reason: String,
    },
    /// Give a taxon another parent (or none, with --no-parent).
    Move {
        /// The taxon to move.
        taxon: String,
        /// The new parent (a synonym stands for its accepted name).
        #[arg(long, required_unless_present = "no_parent")]
        parent: Option<String>,
        /// Make the taxon a top-level one.
        #[arg(long, conflicts_with = "parent")]
        no_parent: bool,
        /// Why (recorded with the change).
        #[arg(long)]
        reason: String,
    },
    /// Reverse a rename, merge or move (ids in `taxa history`).
    Undo {
        /// The change id.
        change: i64,
        /// Why (recorded with the undo).
        #[arg(long)]
        reason: String,
    },
    /// Every recorded change, with its id.
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

/// The tree as roll-up sees it: an accepted taxon sits under the accepted name
/// of its parent. Taxa whose chain loops are not reachable from the top; they
/// are counted in a note.
fn write_tree(out: &mut dyn Write, taxa: &[TaxonRow], tax: &Taxonomy) -> std::io::Result<()> {
    let by_name: BTreeMap<&str, &TaxonRow> = taxa.iter().map(|t| (t.name.as_str(), t)).collect();
    let mut children: BTreeMap<Option<&str>, Vec<&TaxonRow>> = BTreeMap::new();
    let mut synonyms: BTreeMap<&str, Vec<&str>> = BTreeMap::new();
    for n in tax.nodes() {
        let Some(t) = by_name.get(n.name.as_str()) else {
            continue;
        };
        match &t.accepted {
            Some(a) => synonyms.entry(a.as_str()).or_default().push(&t.name),
            None => {
                let parent = tax
                    .effective_parent(n.id)
                    .and_then(|p| tax.get(p))
                    .map(|p| p.name.as_str());
                children.entry(parent).or_default().push(t);
            }
        }
    }
    for list in children.values_mut() {
        list.sort_by(|a, b| a.name.cmp(&b.name));
    }
    for list in synonyms.values_mut() {
        list.sort_unstable();
    }
    fn walk<'a>(
        out: &mut dyn Write,
        node: Option<&str>,
        depth: usize,
        children: &BTreeMap<Option<&str>, Vec<&'a TaxonRow>>,
        synonyms: &BTreeMap<&str, Vec<&str>>,
        shown: &mut BTreeSet<&'a str>,
    ) -> std::io::Result<()> {
        for t in children.get(&node).map(Vec::as_slice).unwrap_or_default() {
            if !shown.insert(t.name.as_str()) {
                continue;
            }
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
            walk(out, Some(&t.name), depth + 1, children, synonyms, shown)?;
        }
        Ok(())
    }
    let mut shown = BTreeSet::new();
    walk(out, None, 0, &children, &synonyms, &mut shown)?;
    let accepted = taxa.iter().filter(|t| t.accepted.is_none()).count();
    if shown.len() < accepted {
        note(&format!(
            "{} accepted taxa are not shown: their parent chain loops (`tally check` names the loop)",
            accepted - shown.len()
        ));
    }
    Ok(())
}

fn write_history(
    out: &mut dyn Write,
    changes: &[TaxonChange],
    format: FormatArg,
) -> anyhow::Result<()> {
    let opt = |v: Option<i64>| v.map(|x| x.to_string()).unwrap_or_default();
    match format {
        FormatArg::Json => write_json(out, &json!(changes))?,
        FormatArg::Csv => {
            let mut w = crate::report::format::csv_writer(out);
            w.write_record([
                "id",
                "kind",
                "from",
                "to",
                "changed_at",
                "reason",
                "undoes",
                "undone_by",
            ])?;
            for c in changes {
                w.write_record([
                    c.id.to_string(),
                    c.kind.clone(),
                    c.from.clone(),
                    c.to.clone(),
                    c.changed_at.clone(),
                    c.reason.clone(),
                    opt(c.undoes),
                    opt(c.undone_by),
                ])?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            let by_id: BTreeMap<i64, &TaxonChange> = changes.iter().map(|c| (c.id, c)).collect();
            let mut tab = new_table(&["id", "change", "when", "reason", "undone by"]);
            for c in changes {
                let what = match c.undoes.and_then(|u| by_id.get(&u)) {
                    Some(u) => format!("{} ({})", c.describe(), u.describe()),
                    None => c.describe(),
                };
                tab.add_row(vec![
                    c.id.to_string(),
                    what,
                    c.changed_at.clone(),
                    c.reason.clone(),
                    opt(c.undone_by),
                ]);
            }
            write_table(out, &tab)?;
        }
    }
    Ok(())
}

fn write_list(out: &mut dyn Write, taxa: &[TaxonRow], format: FormatArg) -> anyhow::Result<()> {
    match format {
        FormatArg::Json => write_json(out, &serde_json::to_value(taxa)?)?,
        FormatArg::Csv => {
            let mut w = crate::report::format::csv_writer(out);
            w.write_record([
                "name",
                "rank",
                "parent",
                "accepted",
                "codes",
                "count_rows",
                "first_year",
                "last_year",
            ])?;
            for t in taxa {
                w.write_record([
                    t.name.clone(),
                    t.rank.clone(),
                    t.parent.clone().unwrap_or_default(),
                    t.accepted.clone().unwrap_or_default(),
                    t.codes.join(" "),
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
                "codes",
                "count rows",
                "recorded",
            ]);
            for t in taxa {
                tab.add_row(vec![
                    t.name.clone(),
                    t.rank.clone(),
                    t.parent.clone().unwrap_or_default(),
                    t.accepted.clone().unwrap_or_else(|| "itself".into()),
                    t.codes.join(" "),
                    t.count_rows.to_string(),
                    years(t),
                ]);
            }
            write_table(out, &tab)?;
        }
    }
    Ok(())
}

/// Run `tally taxa`.
///
/// # Errors
/// Unknown names, refused changes, SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let done = match args.action {
        Action::List { format } => return write_list(out, &store.taxa()?, format),
        Action::Tree => {
            write_tree(out, &store.taxa()?, &store.taxonomy()?)?;
            return Ok(());
        }
        Action::History { format } => return write_history(out, &store.taxon_changes()?, format),
        Action::Code {
            taxon,
            code,
            remove,
        } => {
            let msg = if remove {
                let c = store.remove_taxon_code(&taxon, &code)?;
                format!("removed the field code {} of '{}'", c.code, c.taxon)
            } else {
                let c = store.add_taxon_code(&taxon, &code)?;
                format!(
                    "'{}' has the field code {}; imports and `tally taxa` commands accept it for the name",
                    c.taxon, c.code
                )
            };
            store.checkpoint()?;
            note(&msg);
            return Ok(());
        }
        Action::Rename { from, to, reason } => {
            let c = store.rename_taxon(&from, &to, &reason)?;
            let msg = format!(
                "renamed taxon '{}' to '{}'; its counts follow",
                c.from, c.to
            );
            (c, msg)
        }
        Action::Merge { from, into, reason } => {
            let c = store.merge_taxon(&from, &into, &reason)?;
            let msg = format!(
                "'{}' is now counted as '{}' in every matrix; no count was rewritten",
                c.from, c.to
            );
            (c, msg)
        }
        Action::Move {
            taxon,
            parent,
            no_parent: _,
            reason,
        } => {
            let c = store.move_taxon(&taxon, parent.as_deref(), &reason)?;
            let msg = match parent {
                Some(_) => format!("'{}' now sits under '{}'", c.from, c.to),
                None => format!("'{}' now has no parent", c.from),
            };
            (c, msg)
        }
        Action::Undo { change, reason } => {
            let c = store.undo_taxon_change(change, &reason)?;
            store.checkpoint()?;
            let undone = store
                .taxon_changes()?
                .into_iter()
                .find(|u| u.id == change)
                .map(|u| u.describe())
                .unwrap_or_default();
            note(&format!(
                "change {change} ({undone}) is undone; the undo is recorded as change {}",
                c.id
            ));
            return Ok(());
        }
    };
    store.checkpoint()?;
    let (c, msg) = done;
    note(&format!(
        "{msg}; recorded as change {id} (`tally taxa undo {id} --reason …` reverses it)",
        id = c.id
    ));
    Ok(())
}
