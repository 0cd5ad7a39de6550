//! `tally diversity [SELECTION]`: clap arguments, their conversion to a
//! [`Spec`], and dispatch. The analysis is [`crate::workflow::diversity`]; the
//! tables and CSV are [`crate::report::text::diversity`].

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;

use super::common::{DesignArgs, Progress, RunArgs, finish, refuse_plot_path, write_new_file};
use super::selection::SelectionArgs;
use super::trend::every_parser;
use crate::store::Store;
use crate::workflow::diversity::{
    self, CoverageTarget, DEFAULT_ALPHA, DEFAULT_BOOTSTRAP, Spec, parse_coverage,
};
use crate::workflow::trend::Every;
use crate::workflow::{self, Analysis, Outcome};

/// The `--coverage` choice (`none` is a value, so clap holds it in a newtype).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CoverageChoice(pub Option<CoverageTarget>);

fn coverage_parser(s: &str) -> Result<CoverageChoice, String> {
    parse_coverage(s).map(CoverageChoice)
}

/// `tally diversity` flags.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Compare rows at this sample coverage: auto (the lowest coverage among the
    /// rows, reached by rarefaction), a fraction (0.9) or percentage (90%;
    /// extrapolated up to twice a row's individuals where needed), or none.
    #[arg(long, value_name = "auto|C|none", default_value = "auto", value_parser = coverage_parser)]
    pub coverage: CoverageChoice,
    /// Also give each row's expected richness in a random subsample of M individuals.
    #[arg(long, value_name = "M")]
    pub rarefy_to: Option<u64>,
    /// Per-period means and trends across years [rows are pooled per site and
    /// period unless --unit is given].
    #[arg(long, value_parser = every_parser())]
    pub every: Option<Every>,
    /// Compare the groups of this field at equal coverage.
    #[arg(long, value_name = "FIELD")]
    pub by: Option<String>,
    /// How rows are exchanged in the group tests of --by.
    #[command(flatten)]
    pub design: DesignArgs,
    /// Significance level of the reading of raw against equal-coverage richness.
    #[arg(long, default_value_t = DEFAULT_ALPHA)]
    pub alpha: f64,
    /// Bootstrap resamples of the period and group means.
    #[arg(long, value_name = "B", default_value_t = DEFAULT_BOOTSTRAP)]
    pub bootstrap: usize,
    /// Write an SVG of the rarefaction and extrapolation curves (and, with
    /// --every, diversity through time) to this file.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
    /// Replace the --plot file if it exists.
    #[arg(long)]
    pub force: bool,
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
            rarefy_to: self.rarefy_to,
            coverage: self.coverage.0,
            every: self.every,
            by: self.by.clone(),
            strata: self.design.strata.clone(),
            scheme: self.design.permute,
            alpha: self.alpha,
            bootstrap: self.bootstrap,
            permutations: self.run.permutations,
            seed,
        }
    }
}

/// Run `tally diversity`, store the run and print it (and the plot).
///
/// # Errors
/// Selection, assembly and field errors; refusals of the analysis; an existing
/// plot file without `--force`; SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    if let Some(p) = &args.plot {
        refuse_plot_path("--plot", p, store.path(), args.force)?;
    }
    let spec = args.spec(args.run.seed());
    let sel = diversity::resolve(
        store,
        args.selection.selection.as_deref(),
        &args.selection.explicit(),
        &spec,
    )
    .context("resolving the selection")?;
    let prepared = workflow::prepare(store, &sel)?;
    let outcome = spec.run(&prepared, &Progress::new("diversity"))?;
    for n in outcome.notes() {
        super::note(n);
    }
    if let Some(p) = &args.plot {
        let plot = crate::report::input::diversity_plot(
            &outcome,
            "Richness by individuals and by coverage",
        );
        let svg = crate::report::svg::diversity_svg(&plot)?;
        write_new_file(p, &svg, store.path(), args.force)?;
        super::note(&format!("plot written to {}", p.display()));
    }
    finish(store, &args.run, &prepared, &spec, &outcome, out)
}

#[cfg(test)]
mod tests {
    use super::*;
    use clap::Parser;

    #[derive(Parser)]
    struct Cli {
        #[command(flatten)]
        args: Args,
    }

    fn parse(words: &[&str]) -> Args {
        Cli::try_parse_from(std::iter::once("diversity").chain(words.iter().copied()))
            .unwrap()
            .args
    }

    #[test]
    fn default_flags_are_the_default_spec() {
        assert_eq!(parse(&["--permutations", "99"]).spec(5), Spec::new(99, 5));
        let s = parse(&[
            "--coverage",
            "90%",
            "--every",
            "season",
            "--rarefy-to",
            "20",
        ])
        .spec(1);
        assert_eq!(
            (s.coverage, s.every, s.rarefy_to),
            (
                Some(CoverageTarget::Level(0.9)),
                Some(Every::Season),
                Some(20)
            )
        );
        assert_eq!(parse(&["--coverage", "none"]).spec(1).coverage, None);
    }
}
