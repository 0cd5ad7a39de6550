//! Command-line interface: clap definitions and dispatch. One file per command,
//! each with `Args` and `run`. No SQL and no maths here: commands call the
//! store, the matrix assembly and the analysis kernels, then the report writers.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::Context;
use clap::{Parser, Subcommand, ValueEnum};

use crate::report::OutputFormat;
use crate::store::Store;

pub mod backup;
pub mod batches;
pub mod check;
pub mod common;
pub mod compare;
pub mod demo;
pub mod dispersion;
pub mod distances;
pub mod diversity;
pub mod export;
pub mod impact;
pub mod import;
pub mod init;
pub mod matrix;
pub mod ordinate;
pub mod partition;
pub mod permanova;
pub mod report;
pub mod runs;
pub mod selection;
pub mod selections;
pub mod shell;
pub mod sites;
pub mod summary;
pub mod taxa;
pub mod trend;
pub mod verify;

/// tally: size and shape of community change for long-term monitoring programs.
#[derive(Debug, Parser)]
#[command(name = "tally", version, about, long_about = None)]
pub struct Cli {
    /// The store file [default: $TALLY_DB, else ./tally.db; for `demo`: ./tally-demo.db].
    #[arg(long, global = true)]
    pub db: Option<PathBuf>,
    /// Print no notes on stderr (errors are still printed; results are unchanged).
    #[arg(long, global = true)]
    pub quiet: bool,
    /// How long to wait for another program writing to the store before giving up.
    #[arg(
        long,
        global = true,
        value_name = "SECONDS",
        env = "TALLY_BUSY_TIMEOUT",
        default_value_t = 60
    )]
    pub busy_timeout: u64,
    /// The command.
    #[command(subcommand)]
    pub command: Command,
}

/// Output format flag shared by every command that prints a result.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum, Default)]
pub enum FormatArg {
    /// A table for people.
    #[default]
    Table,
    /// CSV for scripts.
    Csv,
    /// JSON for scripts.
    Json,
}

impl From<FormatArg> for OutputFormat {
    fn from(f: FormatArg) -> Self {
        match f {
            FormatArg::Table => OutputFormat::Table,
            FormatArg::Csv => OutputFormat::Csv,
            FormatArg::Json => OutputFormat::Json,
        }
    }
}

/// The commands, in the order of the work: keep the store, build matrices,
/// analyse, report, follow the stored runs.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Create an empty store.
    Init(init::Args),
    /// Bring a CSV file or a Darwin Core archive into the store (one batch, all or nothing).
    Import(import::Args),
    /// List import batches, or remove one with `batches undo ID`.
    Batches(batches::Args),
    /// What is stored: totals, years, protocols, events per site and year.
    Summary(summary::Args),
    /// Taxonomy upkeep: list, tree, rename, merge, move, undo, history.
    Taxa(taxa::Args),
    /// Sites and their attribute histories: list, show, set, history, undo.
    Sites(sites::Args),
    /// Check the store: schema, file integrity, foreign keys, taxonomy, batches.
    Check(check::Args),
    /// Copy the store to a new file while it is in use.
    Backup(backup::Args),
    /// Write the store's events and counts for others: a Darwin Core archive.
    Export(export::Args),
    /// Saved selections: save, list, show, delete.
    Selections(selections::Args),
    /// The assembled count matrix of a selection.
    Matrix(matrix::Args),
    /// Dissimilarities between the rows of a selection.
    Distances(distances::Args),
    /// Size and shape of the difference between groups, with a plain-language verdict.
    Compare(compare::Args),
    /// Split a dissimilarity into size only, shared, shape only and unexplained.
    Partition(partition::Args),
    /// PERMANOVA: do groups differ in composition (location of their centroids)?
    Permanova(permanova::Args),
    /// Do groups differ in multivariate spread (distances to their centroid)?
    Dispersion(dispersion::Args),
    /// Trends across years: fewer animals, different animals, or both, and since when.
    Trend(trend::Args),
    /// Richness and Hill numbers, raw and at equal sample coverage, per row, period or group.
    Diversity(diversity::Args),
    /// Before/after × control/impact (BACI): did the impact sites change differently?
    Impact(impact::Args),
    /// Ordination (PCoA, CA, CCA) with group centroid ellipses, taxa and an SVG plot.
    Ordinate(ordinate::Args),
    /// Write one self-contained HTML report of a selection.
    Report(report::Args),
    /// Stored results: list, show, verify, follow a number across runs.
    Runs(runs::Args),
    /// Build the invented Wren Valley demo store and analyse it.
    Demo(demo::Args),
    /// Print a shell completion script (bash, zsh, fish, powershell, elvish).
    Completions(shell::CompletionsArgs),
    /// Print the manual page (roff), e.g. `tally manual > tally.1`.
    Manual,
}

/// Run a parsed command line.
///
/// # Errors
/// Any runtime error, with context; `main` maps it to exit code 1.
pub fn run(cli: Cli) -> anyhow::Result<()> {
    let stdout = std::io::stdout();
    // On a terminal, control, bidirectional and zero-width characters are shown
    // as `<U+XXXX>` so that text from the store cannot act on the terminal; to a
    // file or a pipe the bytes pass unchanged.
    let terminal = std::io::IsTerminal::is_terminal(&stdout);
    let mut out = LineFilter::new(std::io::BufWriter::new(stdout.lock()), move |line: &str| {
        if terminal {
            crate::report::format::terminal_safe(line).into_owned()
        } else {
            line.to_string()
        }
    });
    QUIET.store(cli.quiet, std::sync::atomic::Ordering::Relaxed);
    BUSY_SECONDS.store(cli.busy_timeout, std::sync::atomic::Ordering::Relaxed);
    let db = store_path(cli.db.as_deref());
    let result = match cli.command {
        Command::Init(args) => init::run(args, &db, &mut out),
        Command::Import(args) => import::run(args, &mut open_store(&db)?, &mut std::io::stderr()),
        Command::Batches(args) => batches::run(args, &mut open_store(&db)?, &mut out),
        Command::Summary(args) => summary::run(args, &mut open_store(&db)?, &mut out),
        Command::Taxa(args) => taxa::run(args, &mut open_store(&db)?, &mut out),
        Command::Sites(args) => sites::run(args, &mut open_store(&db)?, &mut out),
        Command::Check(args) => check::run(args, &mut open_store(&db)?, &mut out),
        Command::Backup(args) => backup::run(args, &mut open_store(&db)?, &mut out),
        Command::Export(args) => export::run(args, &open_store(&db)?, &mut out),
        Command::Matrix(args) => matrix::run(args, &open_store(&db)?, &mut out),
        Command::Selections(args) => selections::run(args, &mut open_store(&db)?, &mut out),
        Command::Runs(args) => runs::run(args, &mut open_store(&db)?, &mut out),
        Command::Partition(args) => partition::run(args, &mut open_store(&db)?, &mut out),
        Command::Compare(args) => compare::run(args, &mut open_store(&db)?, &mut out),
        Command::Impact(args) => impact::run(args, &mut open_store(&db)?, &mut out),
        Command::Ordinate(args) => ordinate::run(args, &mut open_store(&db)?, &mut out),
        Command::Report(args) => report::run(args, &mut open_store(&db)?, &mut out),
        Command::Demo(args) => demo::run(args, cli.db.as_deref(), &mut out),
        Command::Distances(args) => distances::run(args, &open_store(&db)?, &mut out),
        Command::Permanova(args) => permanova::run(args, &mut open_store(&db)?, &mut out),
        Command::Dispersion(args) => dispersion::run(args, &mut open_store(&db)?, &mut out),
        Command::Trend(args) => trend::run(args, &mut open_store(&db)?, &mut out),
        Command::Diversity(args) => diversity::run(args, &mut open_store(&db)?, &mut out),
        Command::Completions(args) => shell::completions(&args, &mut out),
        Command::Manual => shell::manual(&mut out),
    };
    result?;
    out.flush()?;
    Ok(())
}

/// The store path: `--db`, else `$TALLY_DB`, else `./tally.db`.
pub fn store_path(flag: Option<&Path>) -> PathBuf {
    match flag {
        Some(p) => p.to_path_buf(),
        None => std::env::var_os("TALLY_DB")
            .filter(|v| !v.is_empty())
            .map(PathBuf::from)
            .unwrap_or_else(|| PathBuf::from("tally.db")),
    }
}

/// Open an existing store, with the store path in the error.
///
/// # Errors
/// A missing file or a file that is not a tally store.
pub fn open_store(path: &Path) -> anyhow::Result<Store> {
    let store = Store::open(path).with_context(|| format!("opening store {}", path.display()))?;
    store.set_busy_timeout(std::time::Duration::from_secs(
        BUSY_SECONDS.load(std::sync::atomic::Ordering::Relaxed),
    ))?;
    Ok(store)
}

/// `--busy-timeout` of this process.
static BUSY_SECONDS: std::sync::atomic::AtomicU64 =
    std::sync::atomic::AtomicU64::new(crate::store::DEFAULT_BUSY_SECONDS);

/// True when the error chain ends in a broken pipe (the reader went away): a success.
pub fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
    })
}

/// What to do about an error, when tally knows better than the error's own
/// words: a store another program kept locked past `--busy-timeout`.
pub fn advice(e: &anyhow::Error) -> Option<String> {
    let busy = e.chain().any(|c| {
        let sqlite = c.downcast_ref::<rusqlite::Error>().or_else(|| match c
            .downcast_ref::<crate::store::StoreError>()
        {
            Some(crate::store::StoreError::Sqlite(s)) => Some(s),
            _ => None,
        });
        matches!(
            sqlite.and_then(rusqlite::Error::sqlite_error_code),
            Some(rusqlite::ErrorCode::DatabaseBusy | rusqlite::ErrorCode::DatabaseLocked)
        )
    });
    busy.then(|| {
        format!(
            "another program kept the store locked for more than {} s (an import or another tally \
             command still writing; SQLite does not say which). Nothing was changed by this command. \
             Run it again when the other has finished, or wait longer with --busy-timeout SECONDS",
            BUSY_SECONDS.load(std::sync::atomic::Ordering::Relaxed)
        )
    })
}

/// A writer that passes whole lines through `filter` before `inner` (the one
/// line-buffered filter of the command layer: standard output on a terminal,
/// the sections of `tally manual`). The last line is filtered on flush or drop.
pub(crate) struct LineFilter<W: Write, F: FnMut(&str) -> String> {
    inner: W,
    filter: F,
    line: Vec<u8>,
}

impl<W: Write, F: FnMut(&str) -> String> LineFilter<W, F> {
    /// Filter the lines written to `inner` with `filter`.
    pub(crate) fn new(inner: W, filter: F) -> Self {
        LineFilter {
            inner,
            filter,
            line: Vec::new(),
        }
    }

    fn emit(&mut self) -> std::io::Result<()> {
        let text = String::from_utf8_lossy(&self.line);
        let out = (self.filter)(&text);
        self.inner.write_all(out.as_bytes())?;
        self.line.clear();
        Ok(())
    }
}

impl<W: Write, F: FnMut(&str) -> String> Write for LineFilter<W, F> {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        for &b in buf {
            self.line.push(b);
            if b == b'\n' {
                self.emit()?;
            }
        }
        Ok(buf.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        if !self.line.is_empty() {
            self.emit()?;
        }
        self.inner.flush()
    }
}

impl<W: Write, F: FnMut(&str) -> String> Drop for LineFilter<W, F> {
    fn drop(&mut self) {
        let _ = self.flush();
    }
}

/// Set by `--quiet`: notes are not printed.
static QUIET: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

/// The notes printed so far in this process.
static SEEN: std::sync::Mutex<Vec<String>> = std::sync::Mutex::new(Vec::new());

/// Print a note on stderr (notes and progress are talk, not data), once per
/// process however many analyses raise it, and not at all under `--quiet`.
pub fn note(msg: &str) {
    if QUIET.load(std::sync::atomic::Ordering::Relaxed) {
        return;
    }
    {
        let mut seen = SEEN
            .lock()
            .unwrap_or_else(std::sync::PoisonError::into_inner);
        if seen.iter().any(|m| m == msg) {
            return;
        }
        seen.push(msg.to_string());
    }
    #[allow(clippy::print_stderr)]
    {
        eprintln!("tally: {}", crate::report::format::terminal_safe(msg));
    }
}
