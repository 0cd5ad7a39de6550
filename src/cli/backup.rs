//! `tally backup FILE`: an online copy of the store to a new file.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;

use super::common::refuse_existing;
use crate::store::Store;

/// Arguments of `tally backup`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The new file to write.
    pub file: PathBuf,
    /// Replace an existing file (never the store being copied).
    #[arg(long)]
    pub force: bool,
}

/// Copy the store.
///
/// # Errors
/// The target exists (without `--force`) or is the store itself; I/O and SQLite errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    refuse_existing(&args.file, args.force)?;
    if args.file.exists() {
        let same = match (store.path(), args.file.canonicalize()) {
            (Some(own), Ok(target)) => own.canonicalize().is_ok_and(|o| o == target),
            _ => false,
        };
        if same {
            anyhow::bail!(
                "{} is the store being copied; back it up to another file",
                args.file.display()
            );
        }
        for suffix in ["", "-wal", "-shm"] {
            let mut p = args.file.as_os_str().to_owned();
            p.push(suffix);
            let p = PathBuf::from(p);
            if p.exists() {
                std::fs::remove_file(&p).with_context(|| format!("removing {}", p.display()))?;
            }
        }
    }
    store
        .backup(&args.file)
        .with_context(|| format!("backing up to {}", args.file.display()))?;
    writeln!(out, "copied the store to {}", args.file.display())?;
    Ok(())
}
