//! `tally batches [undo ID]`: the import history, and removing one batch.

use std::io::Write;

use clap::Subcommand;
use serde_json::json;

use super::FormatArg;
use crate::report::format::{new_table, write_json, write_table};
use crate::store::Store;

/// Arguments of `tally batches`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Remove a batch instead of listing.
    #[command(subcommand)]
    pub action: Option<Action>,
    /// Output format of the list.
    #[arg(long, value_enum, default_value_t)]
    pub format: FormatArg,
}

/// What to do with batches.
#[derive(Debug, Subcommand)]
pub enum Action {
    /// Remove one batch and every row it wrote (refused when later data depends on it).
    Undo {
        /// The batch id (see `tally batches`).
        id: i64,
    },
}

/// List the batches, or undo one.
///
/// # Errors
/// Unknown batch, a refused undo (with the reason), SQLite or I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    if let Some(Action::Undo { id }) = args.action {
        let r = store.undo_batch(id)?;
        store.checkpoint()?;
        let m = r.removed;
        writeln!(
            out,
            "removed batch {} ({}): {}, {}, {}, {}, {}, {}, {}{}",
            r.batch_id,
            r.file,
            crate::words::count(m.sites, "site", "sites"),
            crate::words::count(m.protocols, "protocol", "protocols"),
            crate::words::count(m.taxa, "taxon", "taxa"),
            crate::words::count(m.events, "event", "events"),
            crate::words::count(m.counts, "count", "counts"),
            crate::words::count(m.attributes, "attribute value", "attribute values"),
            crate::words::count(m.codes, "field code", "field codes"),
            if r.restored > 0 {
                format!(
                    "; {} put back",
                    crate::words::count(r.restored, "overwritten count", "overwritten counts")
                )
            } else {
                String::new()
            }
        )?;
        return Ok(());
    }
    let batches = store.batches()?;
    match args.format {
        FormatArg::Json => {
            let list: Vec<_> = batches
                .iter()
                .map(|b| {
                    json!({
                        "id": b.id, "kind": b.kind, "file": b.file, "content_sha256": b.content_sha256,
                        "imported_at": b.imported_at, "rows": b.rows, "created": b.created,
                        "sites": b.stored.sites, "protocols": b.stored.protocols, "taxa": b.stored.taxa,
                        "events": b.stored.events, "counts": b.stored.counts, "attributes": b.stored.attributes,
                        "codes": b.stored.codes,
                    })
                })
                .collect();
            write_json(out, &serde_json::Value::Array(list))?;
        }
        FormatArg::Csv => {
            let mut w = crate::report::format::csv_writer(out);
            w.write_record([
                "id",
                "kind",
                "file",
                "imported_at",
                "rows",
                "sites",
                "protocols",
                "taxa",
                "events",
                "counts",
                "attributes",
                "codes",
                "content_sha256",
                "created",
            ])?;
            for b in &batches {
                let s = b.stored;
                w.write_record([
                    b.id.to_string(),
                    b.kind.clone(),
                    b.file.clone(),
                    b.imported_at.clone(),
                    b.rows.to_string(),
                    s.sites.to_string(),
                    s.protocols.to_string(),
                    s.taxa.to_string(),
                    s.events.to_string(),
                    s.counts.to_string(),
                    s.attributes.to_string(),
                    s.codes.to_string(),
                    b.content_sha256.clone(),
                    b.created.join("; "),
                ])?;
            }
            w.flush()?;
        }
        FormatArg::Table => {
            let mut t = new_table(&[
                "id",
                "kind",
                "file",
                "imported at (UTC)",
                "rows",
                "events",
                "counts",
                "created",
            ]);
            for b in &batches {
                t.add_row(vec![
                    b.id.to_string(),
                    b.kind.clone(),
                    b.file.clone(),
                    b.imported_at.clone(),
                    b.rows.to_string(),
                    b.stored.events.to_string(),
                    b.stored.counts.to_string(),
                    b.created.len().to_string(),
                ]);
            }
            if batches.is_empty() {
                writeln!(out, "no batches yet (bring data in with `tally import`)")?;
            } else {
                write_table(out, &t)?;
            }
        }
    }
    Ok(())
}
