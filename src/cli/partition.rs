//! `tally partition [SELECTION]`: clap arguments, their conversion to a
//! [`Spec`], and dispatch. The analysis (how much of a dissimilarity is size,
//! how much shape, how much shared, how much neither) is
//! [`crate::workflow::partition`]; the table and CSV are
//! [`crate::report::text::partition`].

use std::io::Write;

use clap::ValueEnum;

use super::common::{DesignArgs, DistanceArgs, Progress, RunArgs, finish};
use super::note;
use super::selection::{SelectionArgs, prepare};
use crate::analysis::partition::SizeCoding;
use crate::store::Store;
use crate::workflow::Analysis;
use crate::workflow::partition::{Dissimilarities, Spec};

/// How size enters (command-line spelling of [`SizeCoding`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum SizeArg {
    /// Natural log of the sample total.
    LogTotal,
    /// The sample total itself.
    Total,
}

impl From<SizeArg> for SizeCoding {
    fn from(s: SizeArg) -> Self {
        match s {
            SizeArg::LogTotal => SizeCoding::LogTotal,
            SizeArg::Total => SizeCoding::Total,
        }
    }
}

/// Arguments of `tally partition`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Size variable: the log of the sample total, or the total (per unit effort with --per-effort).
    #[arg(long, value_enum, default_value_t = SizeArg::LogTotal)]
    pub size: SizeArg,
    /// Represent shape by exactly K leading correspondence-analysis axes
    /// [default: all profile dimensions, unless fewer than 10 residual degrees
    /// of freedom would remain; then the leading axes that leave 10].
    #[arg(long, value_name = "K")]
    pub shape_axes: Option<usize>,
    /// How rows are exchanged in the tests of the unique parts.
    #[command(flatten)]
    pub design: DesignArgs,
    /// Partition several dissimilarity/transform pairs in one table: Bray-Curtis
    /// raw, Bray-Curtis fourth root, Euclidean log(x+1), chi-square, Hellinger.
    #[arg(long)]
    pub compare_distances: bool,
    /// Permutations, seed, storage, format.
    #[command(flatten)]
    pub run: RunArgs,
    /// Which events, and what one row is (last, so that its help heading does
    /// not carry over to the analysis flags).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

impl Args {
    /// The spec these arguments ask for, with `seed`.
    pub fn spec(&self, seed: u64) -> Spec {
        Spec {
            dissimilarities: if self.compare_distances {
                Dissimilarities::Compared
            } else {
                Dissimilarities::One(self.distance.spec())
            },
            size: self.size.into(),
            shape_axes: self.shape_axes,
            strata: self.design.strata.clone(),
            scheme: self.design.permute,
            permutations: self.run.permutations,
            seed,
        }
    }
}

/// Run `tally partition`: partition the selection, store the run and print it.
///
/// # Errors
/// Selection and assembly errors; an unknown strata field; a saturated design
/// (with the reason); kernel refusals; SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let prepared = prepare(store, &args.selection)?;
    let spec = args.spec(args.run.seed());
    let outcome = spec.run(&prepared, &Progress::new("partition"))?;
    for n in outcome.own_notes() {
        note(n);
    }
    finish(store, &args.run, &prepared, &spec, &outcome, out)
}
