//! `tally matrix [SELECTION]`: print the assembled count matrix as a table,
//! CSV (first column `sample`, then with `--meta` the metadata columns, then
//! one column per taxon) or JSON (`samples`, `taxa`, `values`, `fingerprint`,
//! `notes`), written by [`crate::report::text::matrix`]. Formats are
//! described in `docs/matrices.md`.

use std::io::Write;

use super::FormatArg;
use super::selection::{SelectionArgs, prepare};
use crate::report::format::write_json;
use crate::report::text::Render;
use crate::report::text::matrix::Counts;
use crate::store::Store;

/// Arguments of `tally matrix`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Which events, and what one row is.
    #[command(flatten)]
    pub selection: SelectionArgs,
    /// Add the sample metadata columns (CSV and table).
    #[arg(long)]
    pub meta: bool,
    /// Output format.
    #[arg(long, value_enum, default_value_t)]
    pub format: FormatArg,
}

/// Print the matrix of the selection.
///
/// # Errors
/// Selection and assembly errors; I/O errors.
pub fn run(args: Args, store: &Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let prepared = prepare(store, &args.selection)?;
    let counts = Counts {
        prepared: &prepared,
        meta: args.meta,
    };
    match args.format {
        FormatArg::Json => write_json(out, &counts.json())?,
        FormatArg::Csv => counts.csv(out)?,
        FormatArg::Table => counts.table(out)?,
    }
    Ok(())
}
