//! `tally init`: create an empty store.

use std::io::Write;
use std::path::Path;

use anyhow::Context;

use crate::store::Store;

/// Arguments of `tally init`.
#[derive(Debug, clap::Args)]
pub struct Args {}

/// Create the store at `db`.
///
/// # Errors
/// The file exists already, or cannot be created.
pub fn run(_args: Args, db: &Path, out: &mut dyn Write) -> anyhow::Result<()> {
    let store = Store::create(db).with_context(|| format!("creating store {}", db.display()))?;
    store.checkpoint()?;
    writeln!(
        out,
        "created store {} (schema version {})",
        db.display(),
        store.schema_version()?
    )?;
    Ok(())
}
