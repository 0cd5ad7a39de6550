//! `tally import KIND FILE`: bring a CSV file into the store as one batch.

use std::io::Write;
use std::path::PathBuf;

use anyhow::anyhow;
use clap::ValueEnum;

use crate::store::import::{ImportKind, ImportOptions, import_path};
use crate::store::{Store, StoreError};

/// What the file holds (columns in docs/data-model.md).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum KindArg {
    /// code,name,latitude,longitude + attribute columns
    Sites,
    /// code,description,effort_unit
    Protocols,
    /// name,rank,parent,accepted
    Taxa,
    /// code,site,date,protocol,effort [+ time,replicate,notes]
    Events,
    /// event,taxon,count
    Counts,
    /// site,date,protocol,effort,taxon,count [+ replicate,time] (field sheets)
    Records,
    /// site,key,value,from: site attribute values and the date each holds from
    Attributes,
    /// A Darwin Core archive (zip) of sampling events: Event core, Occurrence extension
    Dwca,
}

impl From<KindArg> for ImportKind {
    fn from(k: KindArg) -> Self {
        match k {
            KindArg::Sites => ImportKind::Sites,
            KindArg::Protocols => ImportKind::Protocols,
            KindArg::Taxa => ImportKind::Taxa,
            KindArg::Events => ImportKind::Events,
            KindArg::Counts => ImportKind::Counts,
            KindArg::Records => ImportKind::Records,
            KindArg::Attributes => ImportKind::Attributes,
            KindArg::Dwca => ImportKind::Dwca,
        }
    }
}

/// Arguments of `tally import`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What the file holds.
    #[arg(value_enum)]
    pub kind: KindArg,
    /// The CSV file (comma, semicolon or tab separated; UTF-8), or the zip
    /// file of a Darwin Core archive.
    pub file: PathBuf,
    /// Create sites and taxa (and, from an archive, protocols) the file names
    /// but the store lacks (each is reported).
    #[arg(long)]
    pub create_missing: bool,
    /// Overwrite counts already stored for the same event and taxon.
    #[arg(long)]
    pub replace: bool,
    /// A cumulative file: skip rows identical to stored ones, refuse rows that
    /// contradict them, import the rest.
    #[arg(long)]
    pub skip_existing: bool,
    /// Field delimiter: ',', ';' or 'tab' [default: detected from the header line].
    #[arg(long, value_parser = parse_delimiter)]
    pub delimiter: Option<u8>,
}

fn parse_delimiter(s: &str) -> Result<u8, String> {
    match s {
        "tab" | "\\t" | "\t" => Ok(b'\t'),
        "comma" => Ok(b','),
        "semicolon" => Ok(b';'),
        _ if s.len() == 1 && s.is_ascii() && s != "\"" => Ok(s.as_bytes()[0]),
        _ => Err(format!(
            "'{s}' is not a delimiter; give one character, or 'tab'"
        )),
    }
}

/// Import the file and print a one-line account (plus one line per creation) on stderr.
///
/// # Errors
/// The file cannot be read or fails validation (nothing is written then).
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let opts = ImportOptions {
        create_missing: args.create_missing,
        replace: args.replace,
        skip_existing: args.skip_existing,
        delimiter: args.delimiter,
    };
    let kind = ImportKind::from(args.kind);
    if kind == ImportKind::Dwca {
        return archive(&args, store, out);
    }
    let report = import_path(store, kind, &args.file, &opts).map_err(|e| match e {
        e @ (StoreError::Invalid { .. } | StoreError::Io { .. }) => anyhow!(e),
        e => anyhow!(e).context(format!("importing {}", args.file.display())),
    })?;
    let Some(batch) = report.batch_id else {
        writeln!(
            out,
            "nothing new in {}: {} already stored; no batch recorded",
            report.file,
            crate::words::count(report.unchanged, "row", "rows")
        )?;
        return Ok(());
    };
    store.checkpoint()?;
    let mut parts = Vec::new();
    match kind {
        ImportKind::Records => {
            parts.push(format!(
                "{} new {}",
                report.written,
                crate::words::noun(&report.written, "event", "events")
            ));
            parts.push(crate::words::count(report.counts, "count", "counts"));
            // Every event of a counts file is stored; a records file names both.
            if report.counts_on_stored_events > 0 {
                parts.push(format!(
                    "{} on events already stored",
                    crate::words::count(report.counts_on_stored_events, "count", "counts")
                ));
            }
        }
        ImportKind::Counts => parts.push(crate::words::count(report.counts, "count", "counts")),
        _ => parts.push(format!("{} new {kind}", report.written)),
    }
    if report.codes > 0 {
        parts.push(crate::words::count(
            report.codes,
            "field code",
            "field codes",
        ));
    }
    // A cumulative import says first how the rows divide: new, or identical.
    let rows_new = if args.skip_existing {
        format!(
            "{} new, {} identical to the store (skipped); ",
            crate::words::count(report.rows.saturating_sub(report.unchanged), "row", "rows"),
            report.unchanged
        )
    } else {
        if report.unchanged > 0 {
            parts.push(format!("{} unchanged", report.unchanged));
        }
        String::new()
    };
    if report.replaced > 0 {
        parts.push(format!("{} replaced", report.replaced));
    }
    if !report.created.is_empty() {
        parts.push(format!("{} created", report.created.len()));
    }
    writeln!(
        out,
        "imported {} of {kind} from {} as batch {}: {rows_new}{}",
        crate::words::count(report.rows, "row", "rows"),
        report.file,
        batch,
        parts.join(", ")
    )?;
    for c in &report.created {
        writeln!(out, "created {c}")?;
    }
    Ok(())
}

/// `tally import dwca FILE.zip`: read the archive, then write it as one batch.
fn archive(args: &Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    if args.replace || args.skip_existing || args.delimiter.is_some() {
        anyhow::bail!(
            "--replace, --skip-existing and --delimiter are for CSV files; an archive brings \
             new events only, and its meta.xml declares its delimiters"
        );
    }
    let (data, notes) = crate::dwca::read::read_path(&args.file)?;
    let report = crate::store::exchange::import_archive(store, &data, args.create_missing)?;
    store.checkpoint()?;
    let b = &report.batch;
    let mut created = Vec::new();
    for (n, one, many) in [
        (report.sites_created, "site", "sites"),
        (report.protocols_created, "protocol", "protocols"),
        (report.taxa_created, "taxon", "taxa"),
    ] {
        if n > 0 {
            created.push(crate::words::count(n, one, many));
        }
    }
    writeln!(
        out,
        "imported {} from {} as batch {}: {}, {}{}",
        crate::words::count(b.rows, "row", "rows"),
        b.file,
        b.batch(),
        crate::words::count(b.written, "event", "events"),
        crate::words::count(b.counts, "count", "counts"),
        if created.is_empty() {
            String::new()
        } else {
            format!("; created {}", created.join(", "))
        }
    )?;
    if notes.absences > 0 {
        writeln!(
            out,
            "{} read as {} of a complete census (nothing stored)",
            crate::words::count(notes.absences, "absent occurrence", "absent occurrences"),
            crate::words::noun(&notes.absences, "a zero", "zeros")
        )?;
    }
    if notes.merged > 0 {
        writeln!(
            out,
            "{} added to another of the same event and taxon (life stages or sexes recorded apart)",
            crate::words::count(notes.merged, "occurrence", "occurrences")
        )?;
    }
    if notes.grouping_rows > 0 {
        writeln!(
            out,
            "{} only {} other events (parentEventID) and {} no occurrence: not stored",
            crate::words::count(notes.grouping_rows, "core row", "core rows"),
            crate::words::noun(&notes.grouping_rows, "groups", "group"),
            crate::words::noun(&notes.grouping_rows, "holds", "hold")
        )?;
    }
    if report.replicates_numbered > 0 {
        writeln!(
            out,
            "{} of the same site, date and protocol as another numbered as further replicates in their order in the archive",
            crate::words::count(report.replicates_numbered, "event", "events")
        )?;
    }
    if !report.kept_as_stored.is_empty() {
        let shown: Vec<&str> = report
            .kept_as_stored
            .iter()
            .take(8)
            .map(String::as_str)
            .collect();
        let more = report.kept_as_stored.len() - shown.len();
        writeln!(
            out,
            "already stored, kept as stored where the archive describes them otherwise: {}{}",
            shown.join(", "),
            if more > 0 {
                format!(" and {more} more")
            } else {
                String::new()
            }
        )?;
    }
    if !notes.terms_not_stored.is_empty() {
        writeln!(
            out,
            "not stored (tally has no place for them): {}",
            notes.terms_not_stored.join("; ")
        )?;
    }
    if !notes.extensions_not_read.is_empty() {
        writeln!(
            out,
            "extensions not read: {}",
            notes.extensions_not_read.join(", ")
        )?;
    }
    Ok(())
}
