//! `tally backup FILE`: an online copy of the store to a new file.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;

use super::common::refuse_output_path;
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
    refuse_output_path(&args.file, store.path(), args.force)?;
    // The copy is written beside the target and renamed over it when
    // complete, so an interrupted backup never leaves half a store.
    let partial = {
        let name = args
            .file
            .file_name()
            .map(|n| n.to_string_lossy().into_owned())
            .unwrap_or_default();
        args.file
            .with_file_name(format!(".{name}.{}.partial", std::process::id()))
    };
    for suffix in ["", "-wal", "-shm", "-journal"] {
        let mut p = partial.as_os_str().to_owned();
        p.push(suffix);
        let _ = std::fs::remove_file(PathBuf::from(p));
    }
    if let Err(e) = store.backup(&partial) {
        let _ = std::fs::remove_file(&partial);
        return Err(anyhow::Error::new(e).context(format!("backing up to {}", args.file.display())));
    }
    if args.file.exists() {
        // An earlier store's log files would be read as this copy's.
        for suffix in ["-wal", "-shm"] {
            let mut p = args.file.as_os_str().to_owned();
            p.push(suffix);
            let p = PathBuf::from(p);
            if p.exists() {
                std::fs::remove_file(&p).with_context(|| format!("removing {}", p.display()))?;
            }
        }
    }
    std::fs::rename(&partial, &args.file)
        .with_context(|| format!("backing up to {}", args.file.display()))?;
    writeln!(out, "copied the store to {}", args.file.display())?;
    Ok(())
}
