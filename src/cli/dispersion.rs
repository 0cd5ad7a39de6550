//! `tally dispersion [SELECTION] --by FIELD`: clap arguments, their conversion to
//! a [`Spec`], and dispatch. The analysis is [`crate::workflow::dispersion`]; the
//! table and CSV are [`crate::report::text::dispersion`].

use std::io::Write;

use clap::ValueEnum;

use super::common::{DesignArgs, DistanceArgs, Progress, RunArgs, finish};
use super::selection::{SelectionArgs, prepare};
use crate::analysis::dispersion::Permute;
use crate::store::Store;
use crate::workflow::Analysis;
use crate::workflow::dispersion::Spec;

/// What is permuted, on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Default)]
pub enum PermuteArg {
    /// Distances minus their group mean (the usual choice).
    #[default]
    Residuals,
    /// The distances themselves, between groups.
    Values,
}

impl From<PermuteArg> for Permute {
    fn from(p: PermuteArg) -> Self {
        match p {
            PermuteArg::Residuals => Permute::Residuals,
            PermuteArg::Values => Permute::Values,
        }
    }
}

/// Arguments of `tally dispersion`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The factor whose groups are compared (a built-in field or a site attribute).
    #[arg(long, value_name = "FIELD")]
    pub by: String,
    /// How rows are exchanged.
    #[command(flatten)]
    pub design: DesignArgs,
    /// Also compare every pair of groups (Holm and Benjamini–Hochberg adjusted).
    #[arg(long)]
    pub pairwise: bool,
    /// What builds the null distribution of F: residuals (distance minus group mean)
    /// or the distances themselves.
    #[arg(long, value_enum, default_value_t)]
    pub null: PermuteArg,
    /// Dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Permutations, seed, storage, format.
    #[command(flatten)]
    pub run: RunArgs,
    /// Which events, and what one row is (listed last: its help heading
    /// would otherwise carry over to the flags after it).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

impl Args {
    /// The spec these arguments ask for, with `seed`.
    pub fn spec(&self, seed: u64) -> Spec {
        Spec {
            by: self.by.clone(),
            strata: self.design.strata.clone(),
            scheme: self.design.permute,
            pairwise: self.pairwise,
            permute: self.null.into(),
            distance: self.distance.spec(),
            permutations: self.run.permutations,
            seed,
        }
    }
}

/// Run the dispersion test of the selection, store it and print it.
///
/// # Errors
/// Selection and assembly errors; unknown or unusable fields; kernel refusals;
/// SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let prepared = prepare(store, &args.selection)?;
    crate::workflow::design::grouping(&prepared.matrix, &args.by, "--by")?;
    let spec = args.spec(args.run.seed());
    let outcome = spec.run(&prepared, &Progress::new("dispersion"))?;
    finish(store, &args.run, &prepared, &spec, &outcome, out)
}
