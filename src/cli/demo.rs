//! `tally demo`: build the invented Wren Valley demo store from the data
//! embedded in the binary, and show what it holds.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{Context, bail};

use crate::demo::DemoFiles;
use crate::store::Store;
use crate::store::import::{ImportKind, ImportOptions, import_bytes};

/// Arguments of `tally demo`.
#[derive(Debug, clap::Args)]
pub struct Args {}

/// Where the demo store goes: `--db` when given on the command line (never
/// `$TALLY_DB`, so a real store named there cannot be replaced by accident),
/// else `./tally-demo.db`.
pub fn demo_path(flag: Option<&Path>) -> PathBuf {
    flag.map(Path::to_path_buf)
        .unwrap_or_else(|| PathBuf::from("tally-demo.db"))
}

/// Create a fresh store at `path`, replacing an existing file only when it is a tally store.
///
/// # Errors
/// The path holds something that is not a tally store; SQLite errors.
pub fn fresh_store(path: &Path) -> anyhow::Result<Store> {
    if path.exists() {
        if let Err(e) = Store::open(path) {
            bail!(
                "{} exists and is not a tally store; not replacing it ({e})",
                path.display()
            );
        }
        for suffix in ["", "-wal", "-shm"] {
            let mut p = path.as_os_str().to_owned();
            p.push(suffix);
            let p = PathBuf::from(p);
            if p.exists() {
                std::fs::remove_file(&p).with_context(|| format!("removing {}", p.display()))?;
            }
        }
    }
    Ok(Store::create(path)?)
}

/// Import the embedded demo files into `store`.
///
/// # Errors
/// Import errors (the embedded data is checked by the test suite).
pub fn load_demo(store: &mut Store) -> anyhow::Result<()> {
    let files = DemoFiles::embedded();
    let kinds = [
        ImportKind::Sites,
        ImportKind::Protocols,
        ImportKind::Taxa,
        ImportKind::Records,
    ];
    for ((name, text), kind) in files.files().into_iter().zip(kinds) {
        let report = import_bytes(
            store,
            kind,
            name,
            text.as_bytes(),
            &ImportOptions::default(),
        )
        .with_context(|| format!("importing demo file {name}"))?;
        super::note(&format!(
            "imported {name}: {} rows (batch {})",
            report.rows, report.batch_id
        ));
    }
    Ok(())
}

/// Run the demo.
///
/// # Errors
/// As [`fresh_store`] and [`load_demo`].
pub fn run(_args: Args, db_flag: Option<&Path>, out: &mut dyn Write) -> anyhow::Result<()> {
    let path = demo_path(db_flag);
    let mut store = fresh_store(&path)?;
    load_demo(&mut store)?;
    store.checkpoint()?;
    writeln!(
        out,
        "Wren Valley demo store (invented data): {}",
        path.display()
    )?;
    super::summary::run(
        super::summary::Args {
            format: super::FormatArg::Table,
        },
        &mut store,
        out,
    )?;
    Ok(())
}
