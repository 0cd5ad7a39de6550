//! `tally export dwca FILE.zip [SELECTION]`: the selected events and their
//! counts as a Darwin Core archive of sampling events.

use std::io::Write;
use std::path::PathBuf;

use clap::{Subcommand, ValueEnum};

use super::common::write_atomically;
use super::selection::SelectionArgs;
use crate::dwca::eml::{Contact, Licence};
use crate::dwca::write::{ExportOptions, write_archive};
use crate::store::Store;

/// Arguments of `tally export`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// What to write.
    #[command(subcommand)]
    pub what: What,
}

/// The export formats.
#[derive(Debug, Subcommand)]
pub enum What {
    /// A Darwin Core archive (zip): an Event core with effort and an
    /// Occurrence extension with counts, for biodiversity data portals.
    Dwca(DwcaArgs),
}

/// The licence written into the archive's metadata.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum LicenceArg {
    /// Creative Commons Zero 1.0 (public domain).
    #[value(name = "CC0-1.0")]
    Cc0,
    /// Creative Commons Attribution 4.0.
    #[value(name = "CC-BY-4.0")]
    CcBy,
    /// Creative Commons Attribution-NonCommercial 4.0.
    #[value(name = "CC-BY-NC-4.0")]
    CcByNc,
}

impl From<LicenceArg> for Licence {
    fn from(l: LicenceArg) -> Self {
        match l {
            LicenceArg::Cc0 => Licence::Cc0,
            LicenceArg::CcBy => Licence::CcBy,
            LicenceArg::CcByNc => Licence::CcByNc,
        }
    }
}

/// `basisOfRecord` of the occurrences.
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum BasisArg {
    /// Organisms seen or caught and counted by people.
    #[value(name = "HumanObservation")]
    Human,
    /// Organisms recorded by a device (camera, sound recorder, counter).
    #[value(name = "MachineObservation")]
    Machine,
    /// Organisms kept as a sample (preserved, then counted).
    #[value(name = "MaterialSample")]
    Material,
}

impl BasisArg {
    fn term(self) -> &'static str {
        match self {
            BasisArg::Human => "HumanObservation",
            BasisArg::Machine => "MachineObservation",
            BasisArg::Material => "MaterialSample",
        }
    }
}

/// Arguments of `tally export dwca`.
#[derive(Debug, clap::Args)]
pub struct DwcaArgs {
    /// The archive to write (.zip).
    pub file: PathBuf,
    /// Dataset title [default: "Sampling events of STORE"].
    #[arg(long)]
    pub title: Option<String>,
    /// Dataset description (the abstract; lines become paragraphs).
    #[arg(long, value_name = "TEXT")]
    pub description: Option<String>,
    /// Who to contact about the data: "Name <address>" or a name.
    #[arg(long, value_name = "WHO")]
    pub contact: Option<String>,
    /// The licence of the data (portals need one).
    #[arg(long, value_enum, value_name = "LICENCE")]
    pub licence: Option<LicenceArg>,
    /// Also write an absence (count 0) for every taxon of the selection that
    /// an event did not record (complete census).
    #[arg(long)]
    pub absences: bool,
    /// basisOfRecord of every occurrence.
    #[arg(
        long,
        value_enum,
        default_value = "HumanObservation",
        value_name = "BASIS"
    )]
    pub basis_of_record: BasisArg,
    /// Replace an existing file (never the store).
    #[arg(long)]
    pub force: bool,
    /// Which events (row filters only).
    #[command(flatten)]
    pub selection: SelectionArgs,
}

/// Run `tally export`.
///
/// # Errors
/// The output path is refused; the selection is refused; I/O errors.
pub fn run(args: Args, store: &Store, out: &mut dyn Write) -> anyhow::Result<()> {
    match args.what {
        What::Dwca(a) => dwca(a, store, out).map(|_| ()),
    }
}

/// Write the archive `args` describe and its account to `out`.
///
/// # Errors
/// As [`run`].
pub fn dwca(
    args: DwcaArgs,
    store: &Store,
    out: &mut dyn Write,
) -> anyhow::Result<crate::dwca::write::ExportFigures> {
    let s = &args.selection;
    let shaping: Vec<&str> = [
        (s.rank.is_some(), "--rank"),
        (s.min_occurrences.is_some(), "--min-occurrences"),
        (s.identified_only, "--identified-only"),
        (s.unit.is_some(), "--unit"),
        (s.per_effort, "--per-effort"),
        (s.keep_empty, "--keep-empty"),
    ]
    .into_iter()
    .filter_map(|(given, flag)| given.then_some(flag))
    .collect();
    if !shaping.is_empty() {
        anyhow::bail!(
            "{} {} a matrix; an archive holds the events and counts as stored (every event, \
             empty ones too, every taxon as recorded). Leave {} out",
            shaping.join(", "),
            if shaping.len() == 1 {
                "shapes"
            } else {
                "shape"
            },
            if shaping.len() == 1 { "it" } else { "them" }
        );
    }
    let mut sel = s.resolve(store)?;
    if sel.rank.is_some()
        || sel.min_occurrences.is_some()
        || sel.identified_only
        || sel.unit.is_some()
        || sel.per_effort
        || sel.keep_empty
    {
        super::note(
            "the saved selection's matrix settings (rank, minimum occurrences, identified only, unit, per effort, empty rows) do not apply to an archive; its event filters do",
        );
    }
    sel.rank = None;
    sel.min_occurrences = None;
    sel.identified_only = false;
    sel.unit = None;
    sel.per_effort = false;
    sel.keep_empty = false;
    let store_name = store.path().and_then(|p| p.file_name()).map_or_else(
        || "the store".to_string(),
        |n| n.to_string_lossy().into_owned(),
    );
    let words = sel.in_words();
    let opts = ExportOptions {
        title: args
            .title
            .clone()
            .unwrap_or_else(|| format!("Sampling events of {store_name}")),
        description: args.description.clone().unwrap_or_else(|| {
            format!(
                "Sampling events ({words}) with their effort, and the counts of every taxon found in them. \
                 Every organism in a sample was identified and counted: a taxon not listed for an event was counted as zero."
            )
        }),
        contact: args.contact.as_deref().map(Contact::parse),
        licence: args.licence.map(Licence::from),
        absences: args.absences,
        basis_of_record: args.basis_of_record.term().to_string(),
        exported_at: chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
        selection_words: match super::selection::flags_of(&sel) {
            f if f.is_empty() => words.clone(),
            f => format!("{words} ({f})"),
        },
    };
    let figures = write_atomically(&args.file, store.path(), args.force, |file| {
        Ok(write_archive(
            store,
            &sel,
            &opts,
            std::io::BufWriter::new(file),
        )?)
    })?;
    writeln!(
        out,
        "wrote {}: {}, {} ({}{}), {} {} of {} at {}",
        args.file.display(),
        crate::words::count(figures.events, "event", "events"),
        crate::words::count(figures.occurrences, "occurrence", "occurrences"),
        crate::words::count(
            figures.occurrences - figures.absences,
            "presence",
            "presences"
        ),
        if figures.absences > 0 {
            format!(
                ", {}",
                crate::words::count(figures.absences, "absence", "absences")
            )
        } else {
            String::new()
        },
        figures.individuals,
        if figures.individuals == 1.0 {
            "individual"
        } else {
            "individuals"
        },
        crate::words::count(figures.taxa, "taxon", "taxa"),
        crate::words::count(figures.sites, "site", "sites"),
    )?;
    if figures.empty_events > 0 {
        writeln!(
            out,
            "{} found no organism: {} in event.txt with {} effort and {} no presence",
            crate::words::count(figures.empty_events, "event", "events"),
            crate::words::noun(&figures.empty_events, "it is", "they are"),
            crate::words::noun(&figures.empty_events, "its", "their"),
            crate::words::noun(&figures.empty_events, "has", "have")
        )?;
    }
    if opts.contact.is_none() {
        super::note(
            "eml.xml names no contact; portals need one: give --contact \"Name <address>\"",
        );
    }
    if opts.licence.is_none() {
        super::note(
            "eml.xml states no licence; portals need one: give --licence CC0-1.0, CC-BY-4.0 or CC-BY-NC-4.0",
        );
    }
    Ok(figures)
}
