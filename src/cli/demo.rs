//! `tally demo`: build the invented Wren Valley demo store from the data
//! embedded in the binary, show what it holds, run the analyses of the
//! demo's stories (`demo::scenario`), store every run in one transaction,
//! write `tally-demo-report.html` next to the store and print a short account
//! of what was found.

use std::io::Write;
use std::path::{Path, PathBuf};

use anyhow::{Context, bail};

use crate::demo::{DemoFiles, scenario};
use crate::report::html;
use crate::store::Store;
use crate::store::import::{ImportKind, ImportOptions, import_bytes};
use crate::workflow::runs;

/// Arguments of `tally demo`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Replace the store at --db even when it holds more than the demo's own
    /// data (another program's data, taxonomy changes, saved selections).
    #[arg(long)]
    pub force: bool,
}

/// Where the demo store goes: `--db` when given on the command line (never
/// `$TALLY_DB`, so a real store named there cannot be replaced by accident),
/// else `./tally-demo.db`.
pub fn demo_path(flag: Option<&Path>) -> PathBuf {
    flag.map(Path::to_path_buf)
        .unwrap_or_else(|| PathBuf::from("tally-demo.db"))
}

/// What an existing tally store at the demo path holds beyond an untouched demo
/// store, in words (`None` when it holds nothing else: no import batch other
/// than the demo's own files, byte for byte, no taxonomy change, no saved
/// selection). Stored runs are not counted: the demo makes them again.
fn beyond_the_demo(store: &Store) -> anyhow::Result<Option<String>> {
    use sha2::{Digest, Sha256};
    let demo: Vec<(String, String)> = DemoFiles::embedded()
        .files()
        .into_iter()
        .map(|(name, text)| {
            let hash: String = Sha256::digest(text.as_bytes())
                .iter()
                .map(|b| format!("{b:02x}"))
                .collect();
            (name.to_string(), hash)
        })
        .collect();
    let batches = store.batches()?;
    let mut what = Vec::new();
    let foreign: Vec<String> = batches
        .iter()
        .filter(|b| {
            !demo
                .iter()
                .any(|(n, h)| *n == b.file && *h == b.content_sha256)
        })
        .map(|b| format!("batch {} ({})", b.id, b.file))
        .collect();
    if !foreign.is_empty() {
        what.push(format!(
            "import batches that are not the demo's: {}",
            foreign.join(", ")
        ));
    }
    let changes = store.taxon_changes()?.len();
    if changes > 0 {
        what.push(format!("{changes} taxonomy change(s)"));
    }
    let selections = store.list_selections()?.len();
    if selections > 0 {
        what.push(format!("{selections} saved selection(s)"));
    }
    Ok((!what.is_empty()).then(|| what.join("; ")))
}

/// Create a fresh store at `path`. An existing file is replaced only when it is
/// a tally store holding nothing but the demo's own data (or `force`); the
/// stored runs it loses are reported on stderr.
///
/// # Errors
/// The path holds something that is not a tally store, or a store with more
/// than the demo's data without `force`; SQLite errors.
pub fn fresh_store(path: &Path, force: bool) -> anyhow::Result<Store> {
    if path.exists() {
        let old = match Store::open(path) {
            Ok(s) => s,
            Err(e) => bail!(
                "{} exists and is not a tally store; not replacing it ({e})",
                path.display()
            ),
        };
        if let Some(what) = beyond_the_demo(&old)?
            && !force
        {
            bail!(
                "{} holds a store with more than the demo's data ({what}); not replacing it. \
                 Give the demo another --db path, or --force to replace this store",
                path.display()
            );
        }
        let runs = old.runs(None)?.len();
        drop(old);
        if runs > 0 {
            super::note(&format!(
                "replacing the demo store {}: its {runs} stored run(s) are removed and made again",
                path.display()
            ));
        }
        for suffix in ["", "-wal", "-shm"] {
            let mut p = path.as_os_str().to_owned();
            p.push(suffix);
            let p = PathBuf::from(p);
            if p.exists() {
                std::fs::remove_file(&p).with_context(|| format!("removing {}", p.display()))?;
            }
        }
    }
    Ok(Store::create(path)?)
}

/// Import the embedded demo files into `store`.
///
/// # Errors
/// Import errors (the embedded data is checked by the test suite).
pub fn load_demo(store: &mut Store) -> anyhow::Result<()> {
    let files = DemoFiles::embedded();
    let kinds = [
        ImportKind::Sites,
        ImportKind::Protocols,
        ImportKind::Taxa,
        ImportKind::Records,
        ImportKind::Attributes,
    ];
    for ((name, text), kind) in files.files().into_iter().zip(kinds) {
        let report = import_bytes(
            store,
            kind,
            name,
            text.as_bytes(),
            &ImportOptions::default(),
        )
        .with_context(|| format!("importing demo file {name}"))?;
        super::note(&format!(
            "imported {name}: {} rows (batch {})",
            report.rows,
            report.batch()
        ));
    }
    Ok(())
}

/// The abstract of the demo archive's metadata.
const DEMO_ABSTRACT: &str = "Invented data of the tally demo: kick samples and cylinder samples \
of stream invertebrates at 18 sites of the imaginary Wren Valley, spring and autumn, 2008 to 2025. \
No real place, survey or person is described.";

/// Where the demo's Darwin Core archive goes: next to the store.
pub fn archive_path(store: &Path) -> PathBuf {
    store.with_file_name("tally-demo-dwca.zip")
}

/// Where the demo report goes: next to the store.
pub fn report_path(store: &Path) -> PathBuf {
    store.with_file_name("tally-demo-report.html")
}

/// Run the demo.
///
/// # Errors
/// As [`fresh_store`], [`load_demo`] and [`scenario::run`]; SQLite and I/O errors.
pub fn run(args: Args, db_flag: Option<&Path>, out: &mut dyn Write) -> anyhow::Result<()> {
    let path = demo_path(db_flag);
    let mut store = fresh_store(&path, args.force)?;
    load_demo(&mut store)?;
    store.checkpoint()?;
    writeln!(
        out,
        "Wren Valley demo store (invented data): {}",
        path.display()
    )?;
    super::summary::run(
        super::summary::Args {
            format: super::FormatArg::Table,
        },
        &mut store,
        out,
    )?;
    let ran = scenario::run(&store).context("the demo's analyses")?;
    let ids = runs::save(&mut store, &ran.to_save()?).context("storing the demo's runs")?;
    let a = ran.analysis(&ids)?;
    let page = html::render(&a.report);
    let rp = report_path(&path);
    super::common::write_new_file(&rp, &page, Some(&path), true)?;
    let archive = archive_path(&path);
    let figures = super::export::dwca(
        super::export::DwcaArgs {
            file: archive.clone(),
            title: Some("Wren Valley invertebrate monitoring (invented demo data)".into()),
            description: Some(DEMO_ABSTRACT.into()),
            contact: Some(
                "Wren Valley monitoring team (invented) <data@wren-valley.example>".into(),
            ),
            licence: Some(super::export::LicenceArg::CcBy),
            absences: false,
            basis_of_record: super::export::BasisArg::Human,
            force: true,
            selection: super::selection::SelectionArgs::default(),
        },
        &store,
        &mut std::io::sink(),
    )
    .context("exporting the demo store as a Darwin Core archive")?;
    writeln!(out)?;
    writeln!(
        out,
        "What the demo found (kick samples per minute, site-years, {}):",
        scenario::periods_text()
    )?;
    for r in &a.reaches {
        writeln!(
            out,
            "  {} reach: totals per minute ×{:.2} (geometric means, descriptive); composition against period p = {} (CCA, {} permutations, seed {})",
            r.reach,
            r.totals_ratio,
            r.composition_p,
            scenario::PERMUTATIONS,
            scenario::SEED
        )?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "Size and shape, {} (tally compare):",
        scenario::periods_text()
    )?;
    for r in &a.reaches {
        let run = r
            .compare_run_id
            .map(|id| format!(" [run {id}]"))
            .unwrap_or_default();
        writeln!(out, "  {} reach: {}{run}", r.reach, r.verdict)?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "Across the years (tally trend, with a breakpoint search):"
    )?;
    for r in &a.reaches {
        writeln!(out, "  {} reach: {}", r.reach, r.diagnosis)?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "Diversity across the years, raw and at equal sample coverage (tally diversity):"
    )?;
    for r in &a.reaches {
        let reading = r
            .diversity
            .strip_prefix("reading: ")
            .unwrap_or(&r.diversity);
        writeln!(out, "  {} reach: {reading}", r.reach)?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "These are permutation tests on invented data; read docs/methods.md before drawing conclusions from real data."
    )?;
    writeln!(out, "report: {}", rp.display())?;
    writeln!(
        out,
        "archive: {} (Darwin Core, {} and {}; tally export dwca)",
        archive.display(),
        crate::words::count(figures.events, "event", "events"),
        crate::words::count(figures.occurrences, "occurrence", "occurrences")
    )?;
    writeln!(out, "store:  {}", path.display())?;
    writeln!(
        out,
        "next:   docs/demo.md walks through the same steps command by command"
    )?;
    Ok(())
}
