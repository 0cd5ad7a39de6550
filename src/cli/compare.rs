//! `tally compare [SELECTION] --by FIELD`: clap arguments, their conversion to
//! a [`Spec`], and dispatch. The analysis (size test, shape PERMANOVA with the
//! dispersion test, the combined dissimilarity and its partition, the verdict)
//! is [`crate::workflow::compare`]; the table and CSV are
//! [`crate::report::text::compare`].

use std::io::Write;

use super::common::{
    DesignArgs, Progress, RunArgs, distance_parser, finish, shape_distance_parser,
};
use super::common::{Periods, parse_periods, parse_size_model, transform_parser};
use super::note;
use super::selection::SelectionArgs;
use crate::analysis::size_test::SizeModel;
use crate::analysis::{Distance, Transform};
use crate::store::Store;
use crate::workflow::Analysis;
use crate::workflow::compare::{BOOTSTRAP, Rarefy, RarefyDepth, Spec, parse_rarefy};
use crate::workflow::design::{DistanceSpec, ShapeDistance};

/// Arguments of `tally compare`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// The field whose values are the groups (e.g. period, reach, habitat, site).
    #[arg(long, value_name = "FIELD")]
    pub by: String,
    /// How rows are exchanged.
    #[command(flatten)]
    pub design: DesignArgs,
    /// Taxa shown per comparison in the table, largest shares of the composition
    /// shift first (JSON and CSV list every taxon).
    #[arg(long, value_name = "N", default_value_t = crate::workflow::compare::TAXA_SHOWN)]
    pub taxa: usize,
    /// How size is summarised: rate (pooled rate Σ count ÷ Σ effort of a log-linear
    /// count model; samples that caught nothing count) or geometric (geometric mean
    /// of the totals; strictly positive totals only).
    #[arg(long, value_name = "MODEL", default_value = "rate", value_parser = parse_size_model)]
    pub size_model: SizeModel,
    /// The group the others are compared with [default: the first in sorted order].
    #[arg(long, value_name = "GROUP")]
    pub reference: Option<String>,
    /// Define the field `period` by year ranges, e.g. 2008..2015,2016..2025
    /// (labels 2008-2015, 2016-2025); rows outside every period are dropped.
    #[arg(long, value_name = "A..B,C..D", value_parser = parse_periods)]
    pub periods: Option<Periods>,
    /// Shape-only dissimilarity of the composition test.
    #[arg(long, value_parser = shape_distance_parser(), default_value = "hellinger")]
    pub shape_distance: ShapeDistance,
    /// Before the shape analysis, subsample every sample without replacement to N
    /// individuals (`min`: the smallest sample); needs whole counts (no --per-effort).
    #[arg(long, value_name = "N|min", value_parser = parse_rarefy)]
    pub rarefy: Option<RarefyDepth>,
    /// Rarefied draws whose dissimilarities are averaged.
    #[arg(long, value_name = "R", default_value_t = crate::workflow::compare::RAREFY_REPS)]
    pub rarefy_reps: usize,
    /// Significance level used for the wording of the verdict (every p-value is printed).
    #[arg(long, value_name = "A", default_value_t = crate::workflow::compare::ALPHA)]
    pub alpha: f64,
    /// Combined dissimilarity (size and shape together).
    #[arg(long, value_parser = distance_parser(), default_value = "bray-curtis")]
    pub distance: Distance,
    /// Transform before the combined dissimilarity.
    #[arg(long, value_parser = transform_parser(), default_value = "sqrt")]
    pub transform: Transform,
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
            by: self.by.clone(),
            strata: self.design.strata.clone(),
            scheme: self.design.permute,
            size_model: self.size_model,
            reference: self.reference.clone(),
            periods: self.periods.clone(),
            shape_distance: self.shape_distance,
            rarefy: self.rarefy.map(|depth| Rarefy {
                depth,
                reps: self.rarefy_reps,
            }),
            alpha: self.alpha,
            combined: DistanceSpec {
                distance: self.distance,
                transform: self.transform,
            },
            permutations: self.run.permutations,
            bootstrap: BOOTSTRAP,
            seed,
        }
    }
}

/// Run `tally compare`: compare the groups, store the run and print it.
///
/// # Errors
/// Unknown fields or groups, too few groups, strata that leave the groups no
/// room to vary, rarefying per-effort values, kernel refusals; SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let spec = args.spec(args.run.seed());
    let prepared =
        crate::workflow::prepare(store, &spec.selection(&args.selection.resolve(store)?))?;
    for n in &prepared.notes {
        note(n);
    }
    let mut outcome = spec.run(&prepared, &Progress::new("compare"))?;
    outcome.taxa_shown = args.taxa;
    for n in outcome.own_notes() {
        note(n);
    }
    finish(store, &args.run, &prepared, &spec, &outcome, out)
}
