//! `tally backup FILE`: an online copy of the store to a new file.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;

use crate::store::Store;

/// Arguments of `tally backup`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The new file to write (must not exist).
    pub file: PathBuf,
}

/// Copy the store.
///
/// # Errors
/// The target exists, or SQLite errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    store
        .backup(&args.file)
        .with_context(|| format!("backing up to {}", args.file.display()))?;
    writeln!(out, "copied the store to {}", args.file.display())?;
    Ok(())
}
