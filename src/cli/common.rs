//! Flags and plumbing shared by every analysis command: permutations, seed,
//! storage of the run, dissimilarity and transform choices, progress on stderr.

use std::io::IsTerminal;

use anyhow::Context;
use clap::{Args, ValueEnum};

use crate::analysis::dissimilarity::Distance;
use crate::analysis::transform::Transform;
use crate::matrix::CountMatrix;
use crate::store::Store;
use crate::store::query::Selection;
use crate::store::runs::NewRun;

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

/// Dissimilarity choice on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum DistanceArg {
    /// Bray-Curtis (carries size and shape).
    BrayCurtis,
    /// Euclidean distance on the transformed data.
    Euclidean,
    /// Chi-square distance (correspondence-analysis definition; shape).
    ChiSquare,
    /// Hellinger distance (shape only).
    Hellinger,
    /// Jaccard, on presence/absence.
    Jaccard,
    /// Quantitative Kulczynski.
    Kulczynski,
    /// Manhattan (city-block) distance.
    Manhattan,
}

impl From<DistanceArg> for Distance {
    fn from(d: DistanceArg) -> Self {
        match d {
            DistanceArg::BrayCurtis => Distance::BrayCurtis,
            DistanceArg::Euclidean => Distance::Euclidean,
            DistanceArg::ChiSquare => Distance::ChiSquare,
            DistanceArg::Hellinger => Distance::Hellinger,
            DistanceArg::Jaccard => Distance::Jaccard,
            DistanceArg::Kulczynski => Distance::Kulczynski,
            DistanceArg::Manhattan => Distance::Manhattan,
        }
    }
}

/// Transform choice on the command line.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum TransformArg {
    /// No transform.
    None,
    /// Square root.
    Sqrt,
    /// Fourth root.
    FourthRoot,
    /// ln(x + 1).
    Log1p,
    /// Presence/absence.
    Presence,
    /// Relative abundances (row profiles).
    Profile,
    /// Square roots of row profiles.
    Hellinger,
}

impl From<TransformArg> for Transform {
    fn from(t: TransformArg) -> Self {
        match t {
            TransformArg::None => Transform::None,
            TransformArg::Sqrt => Transform::Sqrt,
            TransformArg::FourthRoot => Transform::FourthRoot,
            TransformArg::Log1p => Transform::Log1p,
            TransformArg::Presence => Transform::Presence,
            TransformArg::Profile => Transform::Profile,
            TransformArg::Hellinger => Transform::Hellinger,
        }
    }
}

/// `--distance` and `--transform`.
#[derive(Debug, Clone, Args)]
pub struct DistanceArgs {
    /// Dissimilarity.
    #[arg(long, value_enum, default_value_t = DistanceArg::BrayCurtis)]
    pub distance: DistanceArg,
    /// Transform applied to the counts before the dissimilarity.
    #[arg(long, value_enum, default_value_t = TransformArg::None)]
    pub transform: TransformArg,
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
    let mut parameters = parameters;
    // The command line, so `runs verify` can replay runs of any kind — only when
    // this very command made the run (not the demo or the report on its behalf).
    let argv: Vec<String> = std::env::args().skip(1).collect();
    if parameters.is_object() && parameters.get("argv").is_none() && argv.iter().any(|a| a == kind)
    {
        parameters["argv"] = serde_json::json!(argv);
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

/// Year ranges that define the field `period` (`2008..2015,2016..2025`).
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub struct Periods(pub Vec<(i32, i32)>);

impl Periods {
    /// Label of the range holding `year`, e.g. `2008-2015`.
    pub fn label_of(&self, year: i32) -> Option<String> {
        self.0
            .iter()
            .find(|(a, b)| (*a..=*b).contains(&year))
            .map(|(a, b)| CountMatrix::period_label((*a, *b)))
    }
}

/// Parse `A..B,C..D` into non-overlapping ranges.
///
/// # Errors
/// Malformed ranges, a range whose start is after its end, overlapping ranges.
pub fn parse_periods(s: &str) -> Result<Periods, String> {
    let mut out: Vec<(i32, i32)> = Vec::new();
    for part in s.split(',').map(str::trim).filter(|p| !p.is_empty()) {
        let (a, b) = match part.split_once("..") {
            Some((a, b)) => (a.trim(), b.trim()),
            None => (part, part),
        };
        let y = |t: &str| {
            t.parse::<i32>()
                .map_err(|_| format!("expected years A..B, got '{part}'"))
        };
        let (a, b) = (y(a)?, y(b)?);
        if a > b {
            return Err(format!("the first year is after the last in '{part}'"));
        }
        if out.iter().any(|(c, d)| a <= *d && *c <= b) {
            return Err(format!("period '{part}' overlaps another"));
        }
        out.push((a, b));
    }
    if out.is_empty() {
        return Err("no period given".into());
    }
    Ok(Periods(out))
}

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
