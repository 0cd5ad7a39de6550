//! `tally distances [SELECTION]`: the dissimilarity matrix between the rows of a
//! selection's count matrix ([`DistanceSpec::compute`]), printed by
//! [`crate::report::text::distances`] as a square table, a square CSV (first
//! column `sample`) or JSON (`samples`, `distance`, `transform`, `matrix`, …).
//! Descriptive, not a test: nothing is stored as a run.

use std::io::Write;

use super::FormatArg;
use super::common::DistanceArgs;
use super::selection::{SelectionArgs, prepare};
use crate::report::format::write_json;
use crate::report::text::Render;
use crate::report::text::distances::Distances;
use crate::store::Store;
use crate::workflow::design::DistanceSpec;

/// Arguments of `tally distances`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Output format.
    #[arg(long, value_enum, default_value_t)]
    pub format: FormatArg,
    /// Which events, and what one row is (listed last: its help heading
    /// would otherwise carry over to the flags after it).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

/// Print the dissimilarity matrix of the selection.
///
/// # Errors
/// Selection and assembly errors; the kernel's refusals
/// ([`DistanceSpec::compute`]); I/O errors.
pub fn run(args: Args, store: &Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let prepared = prepare(store, &args.selection)?;
    let spec: DistanceSpec = args.distance.spec();
    let matrix = spec.compute(&prepared.matrix)?;
    let d = Distances {
        prepared: &prepared,
        spec,
        matrix: &matrix,
    };
    match args.format {
        FormatArg::Json => write_json(out, &d.json())?,
        FormatArg::Csv => d.csv(out)?,
        FormatArg::Table => d.table(out)?,
    }
    Ok(())
}
