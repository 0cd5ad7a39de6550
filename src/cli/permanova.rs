//! `tally permanova [SELECTION] --by FIELD`: clap arguments, their conversion to a
//! [`Spec`], and dispatch. The analysis is [`crate::workflow::permanova`]; the
//! table and CSV are [`crate::report::text::permanova`].

use std::io::Write;

use clap::ValueEnum;

use super::common::{DesignArgs, DistanceArgs, Progress, RunArgs, finish};
use super::selection::{SelectionArgs, prepare};
use crate::analysis::linear_model::SsType;
use crate::store::Store;
use crate::workflow::Analysis;
use crate::workflow::permanova::Spec;

/// Sums of squares on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Default)]
pub enum SsArg {
    /// Each term after the terms before it (the factor first, then covariates in order).
    #[default]
    Sequential,
    /// Each term after all the other terms.
    Marginal,
}

impl From<SsArg> for SsType {
    fn from(s: SsArg) -> Self {
        match s {
            SsArg::Sequential => SsType::Sequential,
            SsArg::Marginal => SsType::Marginal,
        }
    }
}

/// Arguments of `tally permanova`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The factor whose groups are compared (a built-in field or a site attribute).
    #[arg(long, value_name = "FIELD")]
    pub by: String,
    /// A numeric covariate added after the factor (repeatable).
    #[arg(long = "covariate", value_name = "FIELD")]
    pub covariates: Vec<String>,
    /// How rows are exchanged.
    #[command(flatten)]
    pub design: DesignArgs,
    /// Also compare every pair of groups (Holm and Benjamini–Hochberg adjusted).
    #[arg(long)]
    pub pairwise: bool,
    /// Sums of squares of the multi-term model.
    #[arg(long, value_enum, default_value_t)]
    pub ss: SsArg,
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
            covariates: self.covariates.clone(),
            strata: self.design.strata.clone(),
            scheme: self.design.permute,
            pairwise: self.pairwise,
            ss: self.ss.into(),
            distance: self.distance.spec(),
            permutations: self.run.permutations,
            seed,
        }
    }
}

/// Run the PERMANOVA of the selection, store it and print it.
///
/// # Errors
/// Selection and assembly errors; unknown or unusable fields; kernel refusals
/// (fewer than 2 groups, no residual degrees of freedom…); SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let prepared = prepare(store, &args.selection)?;
    // Fail on field names before drawing (and announcing) a seed.
    crate::workflow::design::grouping(&prepared.matrix, &args.by, "--by")?;
    let spec = args.spec(args.run.seed());
    let outcome = spec.run(&prepared, &Progress::new("PERMANOVA"))?;
    finish(store, &args.run, &prepared, &spec, &outcome, out)
}
