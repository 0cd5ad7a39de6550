//! Flags and plumbing shared by every analysis command: permutations, seed,
//! storage of the run, dissimilarity and transform choices, progress on stderr.

use std::io::IsTerminal;

use anyhow::Context;
use clap::Args;
use clap::builder::TypedValueParser;

use crate::analysis::dissimilarity::Distance;
use crate::analysis::size_test::SizeModel;
use crate::analysis::transform::Transform;
use crate::report::text::Render;
use crate::store::Store;
use crate::workflow::design::{DistanceSpec, PermuteDesign, ShapeDistance};
use crate::workflow::{Analysis, Prepared, runs};

use super::FormatArg;

/// How rows are exchanged in the permutation tests: `--permute` and `--strata`.
#[derive(Debug, Clone, Args)]
pub struct DesignArgs {
    /// How rows are exchanged: auto (whole sites for a term constant within sites,
    /// within sites for a term that varies within sites, free when every site gives one
    /// row), free, within-sites or whole-sites.
    #[arg(long, value_name = "DESIGN", default_value = "auto", value_parser = parse_permute)]
    pub permute: PermuteDesign,
    /// Permute only within the levels of this field instead (with --permute auto).
    #[arg(long, value_name = "FIELD")]
    pub strata: Option<String>,
}

/// clap's parser of `--size-model`.
pub fn parse_size_model(s: &str) -> Result<SizeModel, String> {
    match s {
        "rate" => Ok(SizeModel::Rate),
        "geometric" => Ok(SizeModel::Geometric),
        other => Err(format!(
            "unknown size model '{other}': use rate or geometric"
        )),
    }
}

/// clap's parser of `--permute`.
pub fn parse_permute(s: &str) -> Result<PermuteDesign, String> {
    s.parse()
}

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
        seed_or_draw(self.seed)
    }
}

/// [`RunArgs`] without `--format`, for a command whose output is a file
/// (`report`): permutations, seed and storage of the runs it makes.
#[derive(Debug, Clone, clap::Args)]
pub struct FileRunArgs {
    /// Number of random permutations for each test.
    #[arg(long, default_value_t = 9999)]
    pub permutations: usize,
    /// Seed of the random streams (a random seed is drawn, printed and stored when absent).
    #[arg(long)]
    pub seed: Option<u64>,
    /// Do not store the results as runs.
    #[arg(long)]
    pub no_store: bool,
}

impl FileRunArgs {
    /// The seed to use: the given one, or a fresh random one (announced on stderr).
    pub fn seed(&self) -> u64 {
        seed_or_draw(self.seed)
    }
}

/// `seed`, or a fresh random seed, announced on stderr with how to repeat the run.
fn seed_or_draw(seed: Option<u64>) -> u64 {
    match seed {
        Some(s) => s,
        None => {
            let s: u64 = rand::random();
            super::note(&format!("seed {s} (give --seed {s} to repeat this run)"));
            s
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
    let mut unsaved = None;
    let run_id = if run.no_store {
        None
    } else {
        match runs::save(store, &[runs::ToSave::new(prepared, spec, outcome)?]) {
            Ok(ids) => {
                super::note(&format!("stored as run {}", ids[0]));
                Some(ids[0])
            }
            // The result is computed: print it, then say it was not stored.
            Err(e) => {
                unsaved = Some(e);
                None
            }
        }
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
    if let Some(e) = unsaved {
        out.flush()?;
        let (line, _) =
            crate::workflow::command::command_line(&spec.clone().into(), &prepared.selection);
        return Err(anyhow::Error::new(e).context(format!(
            "the result above was computed but NOT stored as a run; to store it, run again when \
             the store can be written (the same seed gives the same numbers): {line}"
        )));
    }
    Ok(())
}

pub use crate::workflow::design::{Periods, parse_periods};

/// The overwrite rule of every command that writes a file (`report --out`,
/// `ordinate --plot`, `backup`, `export`): an existing file is replaced only
/// with `--force`, and the refusal comes before any work, so nothing is
/// written or stored. Part of [`refuse_output_path`], which every writer uses.
///
/// # Errors
/// `path` exists and `force` is not given.
pub fn refuse_existing(path: &std::path::Path, force: bool) -> anyhow::Result<()> {
    if path.exists() && !force {
        anyhow::bail!(
            "{} exists; nothing was written. Give another path, or --force to replace it",
            path.display()
        );
    }
    Ok(())
}

/// The one rule of every plot flag: tally draws SVG, so the file name must end
/// in `.svg` (a `.png` name would hold SVG text), and an existing file needs
/// `--force` ([`refuse_existing`]). Checked before any work.
///
/// # Errors
/// Another extension, or an existing file without `force`.
pub fn refuse_plot_path(
    flag: &str,
    path: &std::path::Path,
    store: Option<&std::path::Path>,
    force: bool,
) -> anyhow::Result<()> {
    if !path
        .extension()
        .and_then(|e| e.to_str())
        .is_some_and(|e| e.eq_ignore_ascii_case("svg"))
    {
        anyhow::bail!(
            "{flag} {}: tally draws SVG; nothing was written. Give a file name ending in .svg",
            path.display()
        );
    }
    refuse_output_path(path, store, force)
}

/// Write `text` to `path` through [`write_atomically`].
///
/// # Errors
/// As [`write_atomically`].
pub fn write_new_file(
    path: &std::path::Path,
    text: &str,
    store: Option<&std::path::Path>,
    force: bool,
) -> anyhow::Result<()> {
    write_atomically(path, store, force, |f| {
        std::io::Write::write_all(f, text.as_bytes())
            .with_context(|| format!("writing {}", path.display()))
    })
}

/// Why `path` may not be written, if it may not: it is the store `store` or
/// one of its `-wal`, `-shm` or `-journal` files (also through a link), a
/// link to nothing, something other than a plain file, or an existing file
/// without `force` ([`refuse_existing`]).
///
/// # Errors
/// As above, each with what to do instead.
pub fn refuse_output_path(
    path: &std::path::Path,
    store: Option<&std::path::Path>,
    force: bool,
) -> anyhow::Result<()> {
    let shown = path.display();
    if let Ok(m) = std::fs::symlink_metadata(path)
        && m.file_type().is_symlink()
        && !path.exists()
    {
        anyhow::bail!(
            "{shown} is a symbolic link to a file that does not exist; nothing was written. Give the real path"
        );
    }
    if path.exists() && !path.is_file() {
        anyhow::bail!("{shown} exists and is not a plain file; nothing was written");
    }
    if let Some(store) = store
        && let Ok(own) = store.canonicalize()
    {
        let target = resolved(path);
        for suffix in ["", "-wal", "-shm", "-journal"] {
            let mut p = own.as_os_str().to_owned();
            p.push(suffix);
            if target.as_deref() == Some(std::path::Path::new(&p)) {
                anyhow::bail!(
                    "{shown} is the store{}; nothing was written. Give another path",
                    if suffix.is_empty() {
                        String::new()
                    } else {
                        format!("'s {suffix} file")
                    }
                );
            }
        }
    }
    refuse_existing(path, force)
}

/// The absolute path `path` names (its folder resolved), if its folder exists.
fn resolved(path: &std::path::Path) -> Option<std::path::PathBuf> {
    if let Ok(p) = path.canonicalize() {
        return Some(p);
    }
    let parent = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => std::path::PathBuf::from("."),
    };
    Some(parent.canonicalize().ok()?.join(path.file_name()?))
}

/// Write `path` through `write`, under [`refuse_output_path`], atomically: the
/// content goes to a temporary file in the same folder, which replaces `path`
/// only when complete, so an interrupted run leaves no half-written file.
///
/// # Errors
/// As [`refuse_output_path`]; errors of `write`; I/O errors.
pub fn write_atomically<T>(
    path: &std::path::Path,
    store: Option<&std::path::Path>,
    force: bool,
    write: impl FnOnce(&mut std::fs::File) -> anyhow::Result<T>,
) -> anyhow::Result<T> {
    refuse_output_path(path, store, force)?;
    let target = resolved(path)
        .with_context(|| format!("writing {}: its folder does not exist", path.display()))?;
    let name = target
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_default();
    let tmp = target.with_file_name(format!(".{name}.{}.partial", std::process::id()));
    let result = (|| -> anyhow::Result<T> {
        let mut file = std::fs::OpenOptions::new()
            .write(true)
            .create_new(true)
            .open(&tmp)
            .with_context(|| format!("writing {}", tmp.display()))?;
        let value = write(&mut file)?;
        file.sync_all()
            .with_context(|| format!("writing {}", tmp.display()))?;
        std::fs::rename(&tmp, &target).with_context(|| format!("writing {}", path.display()))?;
        Ok(value)
    })();
    if result.is_err() {
        let _ = std::fs::remove_file(&tmp);
    }
    result
}
