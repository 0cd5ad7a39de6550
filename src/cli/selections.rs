//! `tally selections save|list|show|delete`: named selections kept in the store.

use std::io::Write;

use clap::Subcommand;
use serde_json::json;

use super::FormatArg;
use super::selection::{SelectionArgs, flags_of};
use crate::report::format::{new_table, write_json, write_table};
use crate::store::Store;

/// Arguments of `tally selections`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to do.
    #[command(subcommand)]
    pub action: Action,
}

/// Actions on saved selections.
#[derive(Debug, Subcommand)]
pub enum Action {
    /// Save the SELECTION flags under a name (with --selection, starting from another saved one).
    Save {
        /// The name.
        name: String,
        /// The selection to save.
        #[command(flatten)]
        selection: Box<SelectionArgs>,
        /// Overwrite a selection of the same name.
        #[arg(long)]
        replace: bool,
    },
    /// List saved selections.
    List {
        /// Output format.
        #[arg(long, value_enum, default_value_t)]
        format: FormatArg,
    },
    /// Show one saved selection.
    Show {
        /// The name.
        name: String,
        /// Output format.
        #[arg(long, value_enum, default_value_t)]
        format: FormatArg,
    },
    /// Delete a saved selection.
    Delete {
        /// The name.
        name: String,
    },
}

/// Run a `selections` action.
///
/// # Errors
/// Unknown names, invalid selections, an existing name without `--replace`; I/O.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    match args.action {
        Action::Save {
            name,
            selection,
            replace,
        } => {
            // Only the flags given (over a saved selection, if named): defaults
            // such as the unit are applied by the command that uses it, so a
            // saved selection never turns `trend`'s site-year rows into events.
            let explicit = selection.explicit();
            let mut sel = match &selection.selection {
                Some(from) => crate::store::Selection::merge(&store.selection(from)?, &explicit),
                None => explicit,
            };
            sel.validate()?;
            let replaced = store.save_selection(&name, &sel, replace)?;
            store.checkpoint()?;
            let verb = if replaced { "replaced" } else { "saved" };
            writeln!(out, "{verb} selection {name}: {}", flags_of(&sel))?;
        }
        Action::List { format } => {
            let list = store.list_selections()?;
            match format {
                FormatArg::Json => {
                    let v: Vec<_> = list
                        .iter()
                        .map(|s| {
                            json!({"name": s.name, "selection": s.selection, "flags": flags_of(&s.selection),
                                   "created_at": s.created_at, "updated_at": s.updated_at})
                        })
                        .collect();
                    write_json(out, &json!({ "selections": v }))?;
                }
                FormatArg::Csv => {
                    let mut w = crate::report::format::csv_writer(out);
                    w.write_record(["name", "flags", "created_at", "updated_at"])?;
                    for s in &list {
                        w.write_record([
                            &s.name,
                            &flags_of(&s.selection),
                            &s.created_at,
                            &s.updated_at,
                        ])?;
                    }
                    w.flush()?;
                }
                FormatArg::Table => {
                    let mut t = new_table(&["name", "flags", "updated"]);
                    for s in &list {
                        t.add_row(vec![
                            s.name.clone(),
                            flags_of(&s.selection),
                            s.updated_at.clone(),
                        ]);
                    }
                    write_table(out, &t)?;
                }
            }
        }
        Action::Show { name, format } => {
            let sel = store.selection(&name)?;
            match format {
                FormatArg::Json => write_json(
                    out,
                    &json!({"name": name, "selection": sel, "flags": flags_of(&sel)}),
                )?,
                FormatArg::Csv => {
                    let mut w = crate::report::format::csv_writer(out);
                    w.write_record(["name", "flags"])?;
                    w.write_record([&name, &flags_of(&sel)])?;
                    w.flush()?;
                }
                FormatArg::Table => writeln!(out, "{name}: {}", flags_of(&sel))?,
            }
        }
        Action::Delete { name } => {
            store.delete_selection(&name)?;
            store.checkpoint()?;
            writeln!(out, "deleted selection {name}")?;
        }
    }
    Ok(())
}
