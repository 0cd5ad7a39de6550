//! `tally check`: integrity check of the store file (structure, CHECK constraints,
//! foreign keys) and of its taxonomy (loops, synonyms of synonyms, rank order).

use std::io::Write;

use crate::store::Store;

/// Arguments of `tally check`.
#[derive(Debug, clap::Args)]
pub struct Args {}

/// Run the checks; problems are printed and make the command fail.
///
/// # Errors
/// Any problem found; SQLite or I/O errors.
pub fn run(_args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let r = store.check()?;
    if r.is_ok() {
        writeln!(
            out,
            "store is sound: integrity ok, foreign keys ok, taxonomy ok"
        )?;
        return Ok(());
    }
    for line in &r.integrity {
        writeln!(out, "integrity: {line}")?;
    }
    for line in &r.foreign_keys {
        writeln!(out, "foreign key: {line}")?;
    }
    for line in &r.taxonomy {
        writeln!(out, "taxonomy: {line}")?;
    }
    anyhow::bail!(
        "the store has {}",
        crate::words::count(r.problems(), "problem", "problems")
    )
}
