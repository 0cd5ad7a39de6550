//! A store selection written as a Darwin Core archive of sampling events.
//!
//! The events of the selection's row filters are read twice, one at a time
//! (once for `event.txt`, once for `occurrence.txt`), so memory does not grow
//! with the number of events or counts: what is held is the taxonomy, the site
//! attributes and the protocols. Each event row carries its effort; each
//! occurrence row the count of one accepted taxon in one event (counts
//! recorded under a synonym are added to the accepted name, and the name as
//! recorded is kept in `verbatimIdentification`). A stored zero is written as
//! an absence; with `absences`, so is every taxon of the selection that an
//! event did not record (complete census), unless a taxon above or below it
//! was recorded there (an organism identified only to its family is not an
//! absence of the genera in it).

use std::collections::{BTreeMap, BTreeSet, HashMap, HashSet};
use std::io::{Seek, Write};

use zip::write::SimpleFileOptions;

use super::eml::{self, Contact, Licence};
use super::{EVENT_TERMS, HIGHER_RANKS, INDIVIDUALS, OCCURRENCE_TERMS, meta};
use crate::matrix::assemble::entry_on;
use crate::store::exchange::{ExchangeEvent, History};
use crate::store::taxa::integrity::Node;
use crate::store::{Selection, Store, StoreError};

/// What can go wrong while writing an archive.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    /// The store refused the selection or failed.
    #[error(transparent)]
    Store(#[from] StoreError),
    /// Writing failed.
    #[error("writing the archive: {0}")]
    Io(#[from] std::io::Error),
    /// The zip layer failed.
    #[error("writing the archive: {0}")]
    Zip(#[from] zip::result::ZipError),
    /// A row could not be written.
    #[error("writing the archive: {0}")]
    Csv(#[from] csv::Error),
}

/// Choices of one export.
#[derive(Debug, Clone)]
pub struct ExportOptions {
    /// Dataset title.
    pub title: String,
    /// Dataset abstract.
    pub description: String,
    /// Contact and creator.
    pub contact: Option<Contact>,
    /// Licence.
    pub licence: Option<Licence>,
    /// Write an absence for every taxon of the selection an event did not record.
    pub absences: bool,
    /// `basisOfRecord` of every occurrence.
    pub basis_of_record: String,
    /// The time of the export (RFC 3339, UTC).
    pub exported_at: String,
    /// The selection in words, for `eml.xml`.
    pub selection_words: String,
}

/// The figures of an export.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize)]
pub struct ExportFigures {
    /// Event rows.
    pub events: usize,
    /// Occurrence rows (presences and absences).
    pub occurrences: usize,
    /// Occurrence rows that are absences.
    pub absences: usize,
    /// Individuals counted (the sum of every count).
    pub individuals: f64,
    /// Sites of the events.
    pub sites: usize,
    /// Accepted taxa with a presence.
    pub taxa: usize,
    /// Events with no organism found (no presence row).
    pub empty_events: usize,
}

/// The taxonomy as the archive needs it: accepted names, ranks and the
/// higher classification.
struct Names {
    by_id: HashMap<i64, Node>,
}

impl Names {
    fn new(taxa: Vec<Node>) -> Names {
        Names {
            by_id: taxa.into_iter().map(|t| (t.id, t)).collect(),
        }
    }

    fn accepted(&self, id: i64) -> i64 {
        self.by_id.get(&id).and_then(|t| t.accepted).unwrap_or(id)
    }

    fn name(&self, id: i64) -> &str {
        self.by_id.get(&id).map_or("", |t| t.name.as_str())
    }

    /// The accepted taxa above `id`, nearest first (loops cut).
    fn ancestors(&self, id: i64) -> Vec<i64> {
        let mut out = Vec::new();
        let mut cur = self.by_id.get(&id).and_then(|t| t.parent);
        while let Some(p) = cur {
            let p = self.accepted(p);
            if p == id || out.contains(&p) {
                break;
            }
            out.push(p);
            cur = self.by_id.get(&p).and_then(|t| t.parent);
        }
        out
    }

    /// The higher-classification columns of accepted taxon `id`, in
    /// [`HIGHER_RANKS`] order: the nearest name of each rank along the chain
    /// (the taxon itself included).
    fn classification(&self, id: i64) -> [String; 6] {
        let mut out: [String; 6] = Default::default();
        for t in std::iter::once(id).chain(self.ancestors(id)) {
            let rank = self.by_id.get(&t).map_or("", |x| x.rank.as_str());
            if let Some(k) = HIGHER_RANKS
                .iter()
                .position(|r| r.eq_ignore_ascii_case(rank.trim()))
                && out[k].is_empty()
            {
                out[k] = self.name(t).to_string();
            }
        }
        out
    }
}

/// A number as the shortest text that reads back to it.
fn number(v: f64) -> String {
    format!("{v}")
}

/// The event's `dynamicProperties`: the site attribute values in force on the
/// event's date (`site`), the dates from which the dated ones hold
/// (`siteFrom`, so an archive keeps the history exactly), the protocol code
/// and the replicate (docs/data-model.md, "Events").
fn dynamic_properties(e: &ExchangeEvent, history: Option<&History>) -> String {
    let mut m = serde_json::Map::new();
    let mut values = serde_json::Map::new();
    let mut from = serde_json::Map::new();
    for (key, h) in history.into_iter().flatten() {
        if let Some(v) = entry_on(h, &e.date) {
            values.insert(key.clone(), serde_json::Value::String(v.value.clone()));
            if let Some(f) = &v.from {
                from.insert(key.clone(), serde_json::Value::String(f.clone()));
            }
        }
    }
    if !values.is_empty() {
        m.insert("site".into(), serde_json::Value::Object(values));
    }
    if !from.is_empty() {
        m.insert("siteFrom".into(), serde_json::Value::Object(from));
    }
    m.insert(
        "protocolCode".into(),
        serde_json::Value::String(e.protocol.clone()),
    );
    m.insert("replicate".into(), serde_json::Value::from(e.replicate));
    serde_json::Value::Object(m).to_string()
}

fn tsv<W: Write>(w: W) -> csv::Writer<W> {
    csv::WriterBuilder::new()
        .delimiter(b'\t')
        .quote_style(csv::QuoteStyle::Necessary)
        .terminator(csv::Terminator::Any(b'\n'))
        .from_writer(w)
}

/// Write the archive of `selection` to `out`.
///
/// # Errors
/// The selection is refused (unknown names, no event); I/O and zip errors.
pub fn write_archive<W: Write + Seek>(
    store: &Store,
    selection: &Selection,
    opts: &ExportOptions,
    out: W,
) -> Result<ExportFigures, ExportError> {
    let names = Names::new(store.exchange_taxa()?);
    let attributes = store.attribute_histories()?;
    let file = SimpleFileOptions::default().compression_method(zip::CompressionMethod::Deflated);
    let mut zip = zip::ZipWriter::new(out);
    let mut figures = ExportFigures::default();

    // event.txt
    let mut sites: HashSet<String> = HashSet::new();
    let mut dates: Option<(String, String)> = None;
    let mut bounds: Option<[f64; 4]> = None;
    let mut protocols: BTreeSet<(String, String)> = BTreeSet::new();
    zip.start_file("event.txt", file)?;
    {
        let mut w = tsv(&mut zip);
        w.write_record(EVENT_TERMS)?;
        figures.events =
            store.for_each_exchange_event(selection, |e| -> Result<(), ExportError> {
                sites.insert(e.site.clone());
                dates = Some(match dates.take() {
                    None => (e.date.clone(), e.date.clone()),
                    Some((a, b)) => (a.min(e.date.clone()), b.max(e.date.clone())),
                });
                if let (Some(lat), Some(lon)) = (e.latitude, e.longitude) {
                    bounds = Some(match bounds {
                        None => [lon, lon, lat, lat],
                        Some([w, east, s, n]) => {
                            [w.min(lon), east.max(lon), s.min(lat), n.max(lat)]
                        }
                    });
                }
                let description = if e.protocol_description.trim().is_empty() {
                    e.protocol.clone()
                } else {
                    e.protocol_description.clone()
                };
                protocols.insert((description.clone(), e.effort_unit.clone()));
                let located = e.latitude.is_some() && e.longitude.is_some();
                w.write_record([
                    e.code.as_str(),
                    &e.date,
                    e.time.as_deref().unwrap_or(""),
                    &e.site,
                    &e.site_name,
                    &e.latitude.map(number).unwrap_or_default(),
                    &e.longitude.map(number).unwrap_or_default(),
                    if located { "WGS84" } else { "" },
                    &description,
                    &number(e.effort),
                    &e.effort_unit,
                    &format!("{} {}", number(e.effort), e.effort_unit),
                    &e.notes,
                    &dynamic_properties(e, attributes.get(&e.site)),
                ])?;
                Ok(())
            })?;
        w.flush()?;
    }
    figures.sites = sites.len();

    // occurrence.txt
    let recorded: Vec<i64> = if opts.absences {
        let mut v = store.exchange_recorded_taxa(selection)?;
        v.sort_by(|a, b| names.name(*a).cmp(names.name(*b)));
        v
    } else {
        Vec::new()
    };
    let ancestors: HashMap<i64, Vec<i64>> =
        recorded.iter().map(|&t| (t, names.ancestors(t))).collect();
    let mut present_taxa: HashSet<i64> = HashSet::new();
    zip.start_file("occurrence.txt", file)?;
    {
        let mut w = tsv(&mut zip);
        w.write_record(OCCURRENCE_TERMS)?;
        store.for_each_exchange_event(selection, |e| -> Result<(), ExportError> {
            // Counts of one accepted taxon (with its synonyms) added up.
            let mut by_taxon: BTreeMap<String, (i64, f64, Vec<String>)> = BTreeMap::new();
            for (taxon, value) in store.exchange_counts(e.id)? {
                let acc = names.accepted(taxon);
                let entry =
                    by_taxon
                        .entry(names.name(acc).to_string())
                        .or_insert((acc, 0.0, Vec::new()));
                entry.1 += value;
                if acc != taxon {
                    entry.2.push(names.name(taxon).to_string());
                }
            }
            let present: Vec<i64> = by_taxon
                .values()
                .filter(|(_, v, _)| *v > 0.0)
                .map(|(t, _, _)| *t)
                .collect();
            if present.is_empty() {
                figures.empty_events += 1;
            }
            let mut row = |taxon: i64, value: f64, verbatim: &str| -> Result<(), ExportError> {
                let name = names.name(taxon);
                let rank = names.by_id.get(&taxon).map_or("", |t| t.rank.as_str());
                let c = names.classification(taxon);
                let whole = value.fract() == 0.0 && value <= 9_007_199_254_740_992.0;
                let absent = value == 0.0;
                w.write_record([
                    e.code.as_str(),
                    &format!("{}:{name}", e.code),
                    &opts.basis_of_record,
                    name,
                    rank,
                    &c[0],
                    &c[1],
                    &c[2],
                    &c[3],
                    &c[4],
                    &c[5],
                    &if whole { number(value) } else { String::new() },
                    &number(value),
                    INDIVIDUALS,
                    if absent { "absent" } else { "present" },
                    verbatim,
                ])?;
                figures.occurrences += 1;
                if absent {
                    figures.absences += 1;
                } else {
                    present_taxa.insert(taxon);
                }
                figures.individuals += value;
                Ok(())
            };
            for (taxon, value, verbatim) in by_taxon.values() {
                let mut v = verbatim.clone();
                v.sort();
                v.dedup();
                row(*taxon, *value, &v.join(" | "))?;
            }
            let above_present: HashSet<i64> =
                present.iter().flat_map(|p| names.ancestors(*p)).collect();
            for &t in &recorded {
                if by_taxon.contains_key(names.name(t)) {
                    continue;
                }
                let related =
                    above_present.contains(&t) || present.iter().any(|p| ancestors[&t].contains(p));
                if !related {
                    row(t, 0.0, "")?;
                }
            }
            Ok(())
        })?;
        w.flush()?;
    }
    figures.taxa = present_taxa.len();

    zip.start_file("meta.xml", file)?;
    zip.write_all(meta::write(&EVENT_TERMS, &OCCURRENCE_TERMS).as_bytes())?;
    zip.start_file("eml.xml", file)?;
    let dataset = eml::Dataset {
        title: opts.title.clone(),
        description: opts.description.clone(),
        contact: opts.contact.clone(),
        licence: opts.licence,
        exported_at: opts.exported_at.clone(),
        selection: opts.selection_words.clone(),
        dates,
        bounds,
        protocols: protocols.into_iter().collect(),
    };
    zip.write_all(eml::write(&dataset).as_bytes())?;
    zip.finish()?;
    Ok(figures)
}
