//! `tally trend [SELECTION]`: clap arguments, their conversion to a [`Spec`],
//! and dispatch. The analysis is [`crate::workflow::trend`] (with
//! `--split-by`, one run per group, each on its own selection); the tables and
//! CSV are [`crate::report::text::trend`].

use std::io::Write;

use anyhow::Context;
use clap::builder::{PossibleValue, PossibleValuesParser, TypedValueParser};

use super::FormatArg;
use super::common::{
    Progress, RunArgs, distance_parser, finish, parse_permute, parse_size_model, refuse_plot_path,
    shape_distance_parser, transform_parser, write_new_file,
};
use super::selection::SelectionArgs;
use crate::analysis::dissimilarity::Distance;
use crate::analysis::size_test::SizeModel;
use crate::analysis::transform::Transform;
use crate::analysis::trend::BreakpointSpec;
use crate::report::text::Render;
use crate::store::Store;
use crate::workflow::design::{DistanceSpec, PermuteDesign, ShapeDistance, parse_years};
use crate::workflow::trend::{self, DEFAULT_ALPHA, DEFAULT_MIN_SAMPLES, Every, Spec};
use crate::workflow::{self, Analysis, Outcome, runs};

/// clap's parser of `--every`: the names of [`Every::ALL`] (also `diversity`'s).
pub fn every_parser() -> impl TypedValueParser<Value = Every> {
    PossibleValuesParser::new(Every::ALL.map(|e| PossibleValue::new(e.name()).help(e.help()))).map(
        |s| {
            Every::ALL
                .into_iter()
                .find(|e| e.name() == s)
                .expect("invariant: every possible value is a period name")
        },
    )
}

/// `tally trend` flags.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// What one period is [rows are pooled per site and period unless --unit is given].
    #[arg(long, value_parser = every_parser(), default_value = "year")]
    pub every: Every,
    /// Baseline years A..B, inclusive [default: the first three years].
    #[arg(long, value_name = "A..B", value_parser = parse_years)]
    pub baseline: Option<(i32, i32)>,
    /// Also search the year that best splits the series into before and after
    /// (`auto`), or test a given first "after" year.
    #[arg(long, value_name = "auto|YEAR", value_parser = trend::parse_breakpoint)]
    pub breakpoint: Option<BreakpointSpec>,
    /// Run the trend for each value of this field (site, protocol or a site
    /// attribute such as `reach`); each group is stored as its own run.
    #[arg(long, value_name = "FIELD")]
    pub split_by: Option<String>,
    /// Significance level of the diagnosis.
    #[arg(long, default_value_t = DEFAULT_ALPHA)]
    pub alpha: f64,
    /// Shape-only dissimilarity for the shape trend and the shape distance.
    #[arg(long, value_parser = shape_distance_parser(), default_value = "hellinger")]
    pub shape_distance: ShapeDistance,
    /// Combined dissimilarity, split into size and shape parts per period.
    #[arg(long, value_parser = distance_parser(), default_value = "bray-curtis")]
    pub distance: Distance,
    /// Transform applied before the combined dissimilarity.
    #[arg(long, value_parser = transform_parser(), default_value = "sqrt")]
    pub transform: Transform,
    /// Periods (and baselines) with fewer samples are listed without summaries.
    #[arg(long, value_name = "N", default_value_t = DEFAULT_MIN_SAMPLES)]
    pub min_samples: usize,
    /// How size is modelled: rate (counts with effort as an offset; rows that
    /// caught nothing count) or geometric (log totals; strictly positive only).
    #[arg(long, value_name = "MODEL", default_value = "rate", value_parser = parse_size_model)]
    pub size_model: SizeModel,
    /// How the year test permutes: auto or within-sites (whole years relabelled
    /// across all sites at once); free and whole-sites are refused with the reason.
    #[arg(long, value_name = "DESIGN", default_value = "auto", value_parser = parse_permute)]
    pub permute: PermuteDesign,
    /// Also fit each taxon's own size trend (% per year, interval, p and
    /// Benjamini–Hochberg adjusted p), largest changes first.
    #[arg(long)]
    pub by_taxon: bool,
    /// Taxa shown in the tables of taxa (JSON lists every taxon).
    #[arg(long, value_name = "N", default_value_t = crate::workflow::compare::TAXA_SHOWN)]
    pub taxa: usize,
    /// Write small multiples of the yearly rates of the --taxa taxa with the
    /// largest changes to this SVG file (implies --by-taxon).
    #[arg(long, value_name = "FILE.svg")]
    pub plot_taxa: Option<std::path::PathBuf>,
    /// Replace the --plot-taxa file if it exists.
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
            every: self.every,
            baseline: self.baseline,
            breakpoint: self.breakpoint,
            alpha: self.alpha,
            shape_distance: self.shape_distance,
            distance: DistanceSpec {
                distance: self.distance,
                transform: self.transform,
            },
            min_samples: self.min_samples,
            size_model: self.size_model,
            scheme: self.permute,
            permutations: self.run.permutations,
            seed,
            by_taxon: self.by_taxon || self.plot_taxa.is_some(),
        }
    }
}

fn notes(group: Option<&str>, notes: &[String]) {
    for n in notes {
        match group {
            Some(g) => super::note(&format!("{g}: {n}")),
            None => super::note(n),
        }
    }
}

/// Run `tally trend`: one trend, or one per group of `--split-by`; store each
/// as a run (in one transaction) and print them.
///
/// # Errors
/// Selection, assembly and field errors; a split field that cannot be a
/// selection; analysis refusals; SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    if let Some(p) = &args.plot_taxa {
        refuse_plot_path("--plot-taxa", p, store.path(), args.force)?;
    }
    let spec = args.spec(args.run.seed());
    let sel = trend::resolve(
        store,
        args.selection.selection.as_deref(),
        &args.selection.explicit(),
        &spec,
    )
    .context("resolving the selection")?;
    let progress = Progress::new("trend");
    let Some(field) = &args.split_by else {
        let prepared = workflow::prepare(store, &sel)?;
        let mut outcome = spec.run(&prepared, &progress)?;
        outcome.taxa_shown = args.taxa;
        notes(None, outcome.notes());
        if let Some(p) = &args.plot_taxa {
            let plot =
                crate::report::input::taxon_trends_plot(&outcome, args.taxa).ok_or_else(|| {
                    anyhow::anyhow!("--plot-taxa: no taxon has a yearly rate to draw")
                })?;
            let svg = crate::report::svg::taxon_trends_svg(&plot)?;
            write_new_file(p, &svg, store.path(), args.force)?;
            super::note(&format!("plot written to {}", p.display()));
        }
        return finish(store, &args.run, &prepared, &spec, &outcome, out);
    };
    if args.plot_taxa.is_some() {
        anyhow::bail!(
            "--plot-taxa draws one trend; with --split-by, run each group as its own selection"
        );
    }
    let parts = trend::split(store, &sel, field)?;
    let mut split = spec.run_split(field, &parts, &progress)?;
    for g in &mut split.groups {
        g.outcome.taxa_shown = args.taxa;
    }
    for g in &split.groups {
        notes(Some(&g.group), g.outcome.notes());
    }
    let ids = if args.run.no_store {
        Vec::new()
    } else {
        runs::save(store, &split.to_save(&spec, &parts)?).context("storing the runs")?
    };
    for (g, id) in split.groups.iter().zip(&ids) {
        super::note(&format!("stored as run {id} ({field} = {})", g.group));
    }
    match args.run.format {
        FormatArg::Json => {
            let mut v = serde_json::to_value(&split)?;
            if let Some(groups) = v["groups"].as_array_mut() {
                for (i, g) in groups.iter_mut().enumerate() {
                    g["run_id"] = serde_json::json!(ids.get(i));
                }
            }
            crate::report::format::write_json(out, &v)?;
        }
        FormatArg::Csv => split.csv(out)?,
        FormatArg::Table => {
            split.table(out)?;
            if !ids.is_empty() {
                let ids: Vec<String> = ids.iter().map(i64::to_string).collect();
                writeln!(out, "run ids: {}", ids.join(", "))?;
            }
        }
    }
    Ok(())
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
        Cli::try_parse_from(std::iter::once("trend").chain(words.iter().copied()))
            .unwrap()
            .args
    }

    #[test]
    fn default_flags_are_the_default_spec() {
        let a = parse(&["--permutations", "99"]);
        assert_eq!(a.spec(5), Spec::new(99, 5));
        let a = parse(&[
            "--every",
            "season",
            "--baseline",
            "2008..2010",
            "--breakpoint",
            "auto",
            "--shape-distance",
            "chi-square",
        ]);
        let s = a.spec(1);
        assert_eq!(
            (s.every, s.baseline, s.breakpoint, s.shape_distance),
            (
                Every::Season,
                Some((2008, 2010)),
                Some(BreakpointSpec::Auto),
                ShapeDistance::ChiSquare
            )
        );
    }
}
