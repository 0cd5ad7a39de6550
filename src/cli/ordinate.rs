//! `tally ordinate [SELECTION] --method pcoa|ca|cca`: clap arguments, their
//! conversion to a [`Spec`], dispatch, and writing the plot. The analysis is
//! [`crate::workflow::ordinate`]; the table, CSV and plot input are
//! [`crate::report::text::ordinate`]. CCA runs (which carry a test) are stored.

use std::io::Write;
use std::path::PathBuf;

use anyhow::{Context, anyhow};
use clap::ValueEnum;

use super::FormatArg;
use super::common::{DistanceArgs, Progress, RunArgs, finish, refuse_plot_path, write_new_file};
use super::selection::{SelectionArgs, prepare};
use crate::report::format::write_json;
use crate::report::svg::ordination_svg;
use crate::report::text::{Render, ordinate as text};
use crate::store::Store;
use crate::workflow::design::{Periods, parse_periods};
use crate::workflow::ordinate::{Method, Spec};
use crate::workflow::{Analysis, Silent};

/// Ordination method on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum MethodArg {
    /// Principal coordinates of the chosen dissimilarity.
    Pcoa,
    /// Correspondence analysis of the counts.
    Ca,
    /// Canonical correspondence analysis constrained by `--constraint` fields.
    Cca,
}

impl From<MethodArg> for Method {
    fn from(m: MethodArg) -> Self {
        match m {
            MethodArg::Pcoa => Method::Pcoa,
            MethodArg::Ca => Method::Ca,
            MethodArg::Cca => Method::Cca,
        }
    }
}

/// Arguments of `tally ordinate`.
#[derive(Debug, Clone, clap::Args)]
pub struct Args {
    /// Which events, and what one row is.
    #[command(flatten)]
    pub selection: SelectionArgs,
    /// Ordination method.
    #[arg(long, value_enum)]
    pub method: MethodArg,
    /// Field whose values colour the samples and get centroid ellipses
    /// (`period` when `--periods` is given).
    #[arg(long, value_name = "FIELD")]
    pub by: Option<String>,
    /// Year ranges defining the field `period`, e.g. 2008..2015,2016..2025;
    /// samples outside every range are left out.
    #[arg(long, value_name = "A..B,C..D", value_parser = parse_periods)]
    pub periods: Option<Periods>,
    /// CCA: a field constraining the axes (repeatable). Numeric fields enter
    /// as covariates, others as factors (one indicator per level but the first).
    #[arg(long = "constraint", value_name = "FIELD")]
    pub constraints: Vec<String>,
    /// Number of axes reported.
    #[arg(long, default_value_t = 2)]
    pub axes: usize,
    /// Draw the first two axes into this SVG file.
    #[arg(long, value_name = "FILE.svg")]
    pub plot: Option<PathBuf>,
    /// Replace an existing plot file.
    #[arg(long)]
    pub force: bool,
    /// Taxa listed in the table and named on the plot, largest contributions
    /// to the reported axes first (CSV and JSON list every taxon).
    #[arg(long, value_name = "N", default_value_t = crate::workflow::compare::TAXA_SHOWN)]
    pub taxa: usize,
    /// PCoA: the dissimilarity and transform.
    #[command(flatten)]
    pub distance: DistanceArgs,
    /// Permutations, seed, storage, output format.
    #[command(flatten)]
    pub run: RunArgs,
}

impl Args {
    /// The spec these arguments ask for; `seed` is used by the CCA test only.
    pub fn spec(&self, seed: Option<u64>) -> Spec {
        Spec {
            method: self.method.into(),
            by: self.by.clone(),
            periods: self.periods.clone(),
            constraints: self.constraints.clone(),
            axes: self.axes,
            distance: self.distance.spec(),
            permutations: self.run.permutations,
            seed,
        }
    }
}

/// Run `tally ordinate`: compute, write the plot, store a CCA run (unless
/// `--no-store`) and print.
///
/// # Errors
/// Selection and assembly errors; unknown fields; a CCA without constraints;
/// kernel refusals; an existing plot file without `--force`; a plot of fewer
/// than two axes; I/O and SQLite errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    if let Some(p) = &args.plot {
        refuse_plot_path("--plot", p, store.path(), args.force)?;
    }
    let prepared = prepare(store, &args.selection)?;
    let tested = args.method == MethodArg::Cca;
    let spec = args.spec(tested.then(|| args.run.seed()));
    let mut outcome = if tested {
        spec.run(&prepared, &Progress::new("permutations of the constraints"))?
    } else {
        spec.run(&prepared, &Silent)?
    };
    outcome.taxa_shown = args.taxa;
    for n in outcome.own_notes() {
        super::note(n);
    }
    if let Some(path) = &args.plot {
        let plot = text::plot(&outcome).ok_or_else(|| {
            anyhow!(
                "a plot needs two axes; this ordination has {}",
                outcome.n_axes()
            )
        })?;
        let svg = ordination_svg(&plot).context("drawing the ordination")?;
        write_new_file(path, &svg, store.path(), args.force)?;
        super::note(&format!("plot written to {}", path.display()));
    }
    if tested {
        return finish(store, &args.run, &prepared, &spec, &outcome, out);
    }
    match args.run.format {
        FormatArg::Json => write_json(out, &serde_json::to_value(&outcome)?)?,
        FormatArg::Csv => outcome.csv(out)?,
        FormatArg::Table => outcome.table(out)?,
    }
    Ok(())
}
