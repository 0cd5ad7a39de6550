//! `tally check`: the store file against what the migrations make (schema),
//! its structure and CHECK constraints, foreign keys, the taxonomy (loops,
//! synonyms of synonyms, rank order) and the bookkeeping of import batches.

use std::io::Write;

use crate::store::Store;
use crate::store::maintenance::{CheckReport, damaged_message};

/// Arguments of `tally check`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Run the cheap part only: SQLite's quick check (structure, not index
    /// contents), the schema against the migrations, and foreign keys.
    #[arg(long)]
    pub quick: bool,
}

/// Run the checks; problems are printed one a line and make the command fail.
///
/// # Errors
/// Any problem found; SQLite or I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let r = store.check_with(args.quick)?;
    for note in &r.notes {
        super::note(&format!("batches: {note}"));
    }
    if r.is_ok() {
        if r.quick {
            writeln!(
                out,
                "quick check passed: schema ok, structure ok (quick_check), foreign keys ok; \
                 not checked: index contents, taxonomy, batches (`tally check` without \
                 --quick checks them)"
            )?;
        } else {
            writeln!(
                out,
                "store is sound: schema ok, integrity ok, foreign keys ok, taxonomy ok, batches ok"
            )?;
        }
        return Ok(());
    }
    write_problems(&r, out)?;
    let what = if r.quick { "the quick check: " } else { "" };
    if r.problems() == 0 {
        anyhow::bail!("{what}the store could not be checked in full");
    }
    let at_least = if r.integrity_limited { "at least " } else { "" };
    anyhow::bail!(
        "{what}the store has {at_least}{}",
        crate::words::count(r.problems(), "problem", "problems")
    )
}

/// One line per problem, prefixed by the check that found it, then the checks
/// that could not run.
fn write_problems(r: &CheckReport, out: &mut dyn Write) -> std::io::Result<()> {
    for line in &r.schema {
        writeln!(out, "schema: {line}")?;
    }
    for line in &r.integrity {
        writeln!(out, "integrity: {line}")?;
    }
    let rest = r.integrity_total - r.integrity.len();
    if rest > 0 {
        let at_least = if r.integrity_limited { "at least " } else { "" };
        writeln!(out, "integrity: … and {at_least}{rest} more")?;
    }
    if let Some(m) = &r.damaged {
        writeln!(out, "integrity: {}", damaged_message(m))?;
    }
    for line in &r.foreign_keys {
        writeln!(out, "foreign key: {line}")?;
    }
    for line in &r.taxonomy {
        writeln!(out, "taxonomy: {line}")?;
    }
    for line in &r.batches {
        writeln!(out, "batches: {line}")?;
    }
    for line in &r.not_checked {
        writeln!(out, "not checked: {line}")?;
    }
    Ok(())
}
