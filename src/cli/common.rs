//! Flags and plumbing shared by every analysis command: permutations, seed,
//! storage of the run, dissimilarity and transform choices, progress on stderr.

use std::io::IsTerminal;

use anyhow::Context;
use clap::Args;
use clap::builder::TypedValueParser;

use crate::analysis::dissimilarity::Distance;
use crate::analysis::transform::Transform;
use crate::matrix::CountMatrix;
use crate::report::text::Render;
use crate::store::Store;
use crate::store::query::Selection;
use crate::store::runs::NewRun;
use crate::workflow::design::{DistanceSpec, ShapeDistance};
use crate::workflow::{Analysis, Prepared, runs};

use super::FormatArg;

/// Flags every analysis command takes besides the selection.
#[derive(Debug, Clone, Args)]
pub struct RunArgs {
    /// Number of random permutations for each test.
    #[arg(long, default_value_t = 9999)]
    pub permutations: usize,
    /// Seed of the random streams (a random seed is drawn, printed and stored when absent).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Do not store the result as a run.
    #[arg(long)]
    pub no_store: bool,
    /// Output format.
    #[arg(long, value_enum, default_value_t = FormatArg::Table)]
    pub format: FormatArg,
}

impl RunArgs {
    /// The seed to use: the given one, or a fresh random one (announced on stderr).
    pub fn seed(&self) -> u64 {
        match self.seed {
            Some(s) => s,
            None => {
                let s: u64 = rand::random();
                super::note(&format!("seed {s} (give --seed {s} to repeat this run)"));
                s
            }
        }
    }
}

/// clap's parser of `--distance`: the names of [`Distance::ALL`], so the
/// command line can never offer a coefficient the kernels lack, or miss one.
pub fn distance_parser() -> impl clap::builder::TypedValueParser<Value = Distance> {
    clap::builder::PossibleValuesParser::new(Distance::ALL.map(|d| d.name())).map(|s| {
        Distance::from_name(&s).expect("invariant: every possible value is a distance name")
    })
}

/// clap's parser of a shape-only dissimilarity (`--shape-distance`).
pub fn shape_distance_parser() -> impl clap::builder::TypedValueParser<Value = ShapeDistance> {
    clap::builder::PossibleValuesParser::new(ShapeDistance::ALL.map(|d| d.name())).map(|s| {
        ShapeDistance::ALL
            .into_iter()
            .find(|d| d.name() == s)
            .expect("invariant: every possible value is a shape distance name")
    })
}

/// clap's parser of `--transform`: the names of [`Transform::ALL`].
pub fn transform_parser() -> impl clap::builder::TypedValueParser<Value = Transform> {
    clap::builder::PossibleValuesParser::new(Transform::ALL.map(|t| t.name())).map(|s| {
        Transform::from_name(&s).expect("invariant: every possible value is a transform name")
    })
}

/// `--distance` and `--transform`.
#[derive(Debug, Clone, Args)]
pub struct DistanceArgs {
    /// Dissimilarity.
    #[arg(long, value_parser = distance_parser(), default_value = "bray-curtis")]
    pub distance: Distance,
    /// Transform applied to the counts before the dissimilarity.
    #[arg(long, value_parser = transform_parser(), default_value = "none")]
    pub transform: Transform,
}

impl DistanceArgs {
    /// The typed dissimilarity of a spec.
    pub fn spec(&self) -> DistanceSpec {
        DistanceSpec {
            distance: self.distance,
            transform: self.transform,
        }
    }
}

/// Store a run unless `--no-store`; prints the run id on stderr and returns it.
///
/// # Errors
/// SQLite errors.
#[allow(clippy::too_many_arguments)]
pub fn store_run(
    store: &mut Store,
    run: &RunArgs,
    kind: &str,
    selection: &Selection,
    matrix: &CountMatrix,
    parameters: serde_json::Value,
    seed: Option<u64>,
    result: &serde_json::Value,
    values: Vec<(String, Option<f64>)>,
) -> anyhow::Result<Option<i64>> {
    let period_start = matrix.samples.iter().map(|s| s.first_date.clone()).min();
    let period_end = matrix.samples.iter().map(|s| s.last_date.clone()).max();
    let id = store_run_dated(
        store,
        run,
        kind,
        selection,
        matrix,
        parameters,
        seed,
        result,
        values,
        (period_start, period_end),
    )?;
    if let Some(id) = id {
        super::note(&format!("stored as run {id}"));
    }
    Ok(id)
}

/// As [`store_run`], with the period the run covers given explicitly (e.g. one
/// year of a trend) and without the note on stderr (the caller announces).
///
/// # Errors
/// SQLite errors.
#[allow(clippy::too_many_arguments)]
pub fn store_run_dated(
    store: &mut Store,
    run: &RunArgs,
    kind: &str,
    selection: &Selection,
    matrix: &CountMatrix,
    parameters: serde_json::Value,
    seed: Option<u64>,
    result: &serde_json::Value,
    values: Vec<(String, Option<f64>)>,
    (period_start, period_end): (Option<String>, Option<String>),
) -> anyhow::Result<Option<i64>> {
    if run.no_store {
        return Ok(None);
    }
    let id = store
        .save_run(&NewRun {
            kind: kind.to_string(),
            selection: serde_json::to_value(selection)?,
            parameters,
            seed,
            fingerprint: matrix.fingerprint(),
            period_start,
            period_end,
            result: result.clone(),
            values,
        })
        .context("storing the run")?;
    store.checkpoint()?;
    Ok(Some(id))
}

/// A progress reporter for long permutation runs: a bar on stderr when stderr
/// is a terminal, nothing otherwise.
pub struct Progress {
    bar: Option<indicatif::ProgressBar>,
}

impl Progress {
    /// A reporter labelled `what`.
    pub fn new(what: &str) -> Progress {
        let bar = std::io::stderr().is_terminal().then(|| {
            let b = indicatif::ProgressBar::new(0);
            b.set_message(what.to_string());
            b
        });
        Progress { bar }
    }

    /// Update with (done, total).
    pub fn update(&self, done: usize, total: usize) {
        if let Some(b) = &self.bar {
            b.set_length(total as u64);
            b.set_position(done as u64);
        }
    }

    /// Remove the bar.
    pub fn finish(&self) {
        if let Some(b) = &self.bar {
            b.finish_and_clear();
        }
    }
}

impl crate::workflow::Progress for Progress {
    fn stage(&self, what: &str) {
        if let Some(b) = &self.bar {
            b.set_message(what.to_string());
        }
    }

    fn update(&self, done: usize, total: usize) {
        Progress::update(self, done, total);
    }

    fn finish(&self) {
        Progress::finish(self);
    }
}

/// The end of every analysis command: store the run (unless `--no-store`,
/// announcing its id on stderr), then print the outcome as a table, CSV or JSON
/// (the outcome's own serialisation with `run_id` added).
///
/// # Errors
/// Storage, serialisation and I/O errors.
pub fn finish<S: Analysis>(
    store: &mut Store,
    run: &RunArgs,
    prepared: &Prepared,
    spec: &S,
    outcome: &S::Outcome,
    out: &mut dyn std::io::Write,
) -> anyhow::Result<()>
where
    S::Outcome: Render,
{
    let run_id = if run.no_store {
        None
    } else {
        let id = runs::save(store, &[runs::ToSave::new(prepared, spec, outcome)?])
            .context("storing the run")?[0];
        super::note(&format!("stored as run {id}"));
        Some(id)
    };
    match run.format {
        FormatArg::Json => {
            let mut v = serde_json::to_value(outcome)?;
            v["run_id"] = serde_json::json!(run_id);
            crate::report::format::write_json(out, &v)?;
        }
        FormatArg::Csv => outcome.csv(out)?,
        FormatArg::Table => {
            outcome.table(out)?;
            if let Some(id) = run_id {
                writeln!(out, "run id: {id}")?;
            }
        }
    }
    Ok(())
}

/// Arguments of a command built from a command line, as the user would type it
/// after the command name (the demo and the report run commands this way, so
/// what they do is exactly what the printed command lines do).
///
/// # Errors
/// The words do not parse as arguments of `A`.
pub fn args_from<A: clap::Args + clap::FromArgMatches>(words: &[&str]) -> anyhow::Result<A> {
    let cmd = A::augment_args(clap::Command::new("tally"));
    let m = cmd.try_get_matches_from(std::iter::once("tally").chain(words.iter().copied()))?;
    Ok(A::from_arg_matches(&m)?)
}

pub use crate::workflow::design::{Periods, parse_periods};

/// The end of an analysis command: store the run (unless `--no-store`), put its
/// id in the result, and print the result in the requested format. `csv` and
/// `text` write the command's own CSV and table layouts.
///
/// # Errors
/// Storage and I/O errors, and those of the writers.
#[allow(clippy::too_many_arguments)]
pub fn store_and_print(
    store: &mut Store,
    run: &RunArgs,
    kind: &str,
    selection: &Selection,
    matrix: &CountMatrix,
    parameters: serde_json::Value,
    seed: u64,
    mut result: serde_json::Value,
    values: Vec<(String, Option<f64>)>,
    out: &mut dyn std::io::Write,
    csv: impl FnOnce(&mut dyn std::io::Write) -> anyhow::Result<()>,
    text: impl FnOnce(&mut dyn std::io::Write) -> anyhow::Result<()>,
) -> anyhow::Result<()> {
    let run_id = store_run(
        store,
        run,
        kind,
        selection,
        matrix,
        parameters,
        Some(seed),
        &result,
        values,
    )?;
    result["run_id"] = serde_json::json!(run_id);
    match run.format {
        FormatArg::Json => crate::report::format::write_json(out, &result)?,
        FormatArg::Csv => csv(out)?,
        FormatArg::Table => {
            text(out)?;
            if let Some(id) = run_id {
                writeln!(out, "run id: {id}")?;
            }
        }
    }
    Ok(())
}
