//! `tally impact [SELECTION] --by FIELD --impact VALUE --before A..B --after C..D`:
//! clap arguments, their conversion to a [`Spec`], and dispatch. The analysis is
//! [`crate::workflow::impact`] (BACI); the table and CSV are
//! [`crate::report::text::impact`].

use std::io::Write;

use super::common::{Progress, RunArgs, finish, shape_distance_parser};
use super::note;
use super::selection::{SelectionArgs, prepare};
use crate::store::Store;
use crate::workflow::Analysis;
use crate::workflow::design::{ShapeDistance, parse_years};
use crate::workflow::impact::{ALPHA, BOOTSTRAP, Spec};

/// Arguments of `tally impact`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// The site-level field that says which sites are impact sites (e.g. a site
    /// attribute such as `role` or `treatment`).
    #[arg(long, value_name = "FIELD")]
    pub by: String,
    /// The value of --by that marks the impact sites; every other value is a control.
    #[arg(long, value_name = "VALUE")]
    pub impact: String,
    /// Years before the change, e.g. 2008..2015.
    #[arg(long, value_name = "A..B", value_parser = parse_years)]
    pub before: (i32, i32),
    /// Years after the change, e.g. 2016..2025.
    #[arg(long, value_name = "C..D", value_parser = parse_years)]
    pub after: (i32, i32),
    /// Significance level used for the wording of the verdict (every p-value is printed).
    #[arg(long, value_name = "A", default_value_t = ALPHA)]
    pub alpha: f64,
    /// The shape-only space the sites' composition shifts are measured in.
    #[arg(long, value_parser = shape_distance_parser(), default_value = "hellinger")]
    pub shape_distance: ShapeDistance,
    /// Taxa shown in the table, largest shares of the composition interaction
    /// first (CSV and JSON list every taxon).
    #[arg(long, value_name = "N", default_value_t = crate::workflow::compare::TAXA_SHOWN)]
    pub taxa: usize,
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
            impact: self.impact.clone(),
            before: self.before,
            after: self.after,
            alpha: self.alpha,
            permutations: self.run.permutations,
            seed,
            bootstrap: BOOTSTRAP,
            shape_distance: self.shape_distance,
        }
    }
}

/// Run `tally impact`: the BACI tests of size and shape, stored and printed.
///
/// # Errors
/// Unknown fields or values, roles that change within a site, a design without
/// impact or control sites, kernel refusals; SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    // Rows that caught nothing are data for the size test: keep them (the shape
    // tests leave them out with a note). The stored selection records this.
    let mut selection = args.selection.clone();
    selection.keep_empty = true;
    let prepared = prepare(store, &selection)?;
    let spec = args.spec(args.run.seed());
    let mut outcome = spec.run(&prepared, &Progress::new("impact"))?;
    outcome.taxa_shown = args.taxa;
    for n in &outcome.notes[prepared.notes.len().min(outcome.notes.len())..] {
        note(n);
    }
    finish(store, &args.run, &prepared, &spec, &outcome, out)
}
