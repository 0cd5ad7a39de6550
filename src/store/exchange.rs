//! The store's side of exchanging sampling-event data as a Darwin Core
//! archive (`crate::dwca` reads and writes the archive files themselves):
//!
//! - **out**: the selected events one at a time ([`Store::for_each_exchange_event`]),
//!   the counts of one event ([`Store::exchange_counts`]) and the taxonomy
//!   ([`Store::exchange_taxa`]), so an export holds one event in memory at a
//!   time, whatever the size of the store;
//! - **in**: [`import_archive`] writes an archive already read and checked for
//!   its own form ([`ArchiveData`]) as one batch of kind `dwca`, all or
//!   nothing: names are resolved against the store, missing sites, protocols
//!   and taxa are created only with `--create-missing`, events already stored
//!   are refused, and the new taxa must keep the taxonomy sound.
//!
//! The mapping between the two is documented in `docs/data-model.md`
//! ("Darwin Core archives").

use std::collections::{HashMap, HashSet};

use rusqlite::{Transaction, TransactionBehavior, params};

use super::import::reference::{TaxonRow, taxonomy_issues};
use super::import::{BatchMeta, ImportKind, ImportReport, MAX_REPORTED_ISSUES, commit_or_refuse};
use super::sheet::Issues;
use super::taxa::integrity::Node;
use super::{Result, Selection, Store, StoreError};

/// One stored event with everything an archive's event row says about it.
#[derive(Debug, Clone)]
pub struct ExchangeEvent {
    /// Row id (to fetch its counts).
    pub id: i64,
    /// The event code.
    pub code: String,
    /// Site code.
    pub site: String,
    /// Site name.
    pub site_name: String,
    /// WGS84 decimal degrees.
    pub latitude: Option<f64>,
    /// WGS84 decimal degrees.
    pub longitude: Option<f64>,
    /// ISO 8601 date.
    pub date: String,
    /// Time of day as stored.
    pub time: Option<String>,
    /// Protocol code.
    pub protocol: String,
    /// Protocol description.
    pub protocol_description: String,
    /// Effort in the protocol's unit.
    pub effort: f64,
    /// The protocol's effort unit.
    pub effort_unit: String,
    /// Replicate number.
    pub replicate: i64,
    /// Notes.
    pub notes: String,
}

impl Store {
    /// Call `f` with every event of `selection`'s row filters, in id order
    /// (one event in memory at a time). Returns the number of events.
    ///
    /// # Errors
    /// As [`Store::select_records`] for the selection; errors of `f`; SQLite errors.
    pub fn for_each_exchange_event<E: From<StoreError>>(
        &self,
        selection: &Selection,
        mut f: impl FnMut(&ExchangeEvent) -> std::result::Result<(), E>,
    ) -> std::result::Result<usize, E> {
        let (wh, params) = self.event_filter(selection)?;
        let sql = format!(
            "SELECT e.id, e.code, s.code, s.name, s.latitude, s.longitude, e.date, e.time, \
                    p.code, p.description, e.effort, p.effort_unit, e.replicate, e.notes \
             FROM event e JOIN site s ON s.id = e.site_id JOIN protocol p ON p.id = e.protocol_id\
             {wh} ORDER BY e.id"
        );
        let mut stmt = self.conn().prepare(&sql).map_err(StoreError::from)?;
        let mut rows = stmt
            .query(rusqlite::params_from_iter(params.iter()))
            .map_err(StoreError::from)?;
        let mut n = 0;
        while let Some(r) = rows.next().map_err(StoreError::from)? {
            let event = (|| -> rusqlite::Result<ExchangeEvent> {
                Ok(ExchangeEvent {
                    id: r.get(0)?,
                    code: r.get(1)?,
                    site: r.get(2)?,
                    site_name: r.get(3)?,
                    latitude: r.get(4)?,
                    longitude: r.get(5)?,
                    date: r.get(6)?,
                    time: r.get(7)?,
                    protocol: r.get(8)?,
                    protocol_description: r.get(9)?,
                    effort: r.get(10)?,
                    effort_unit: r.get(11)?,
                    replicate: r.get(12)?,
                    notes: r.get(13)?,
                })
            })()
            .map_err(StoreError::from)?;
            f(&event)?;
            n += 1;
        }
        Ok(n)
    }

    /// The stored counts of event `id`: (taxon id as recorded, value), in taxon id order.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn exchange_counts(&self, id: i64) -> Result<Vec<(i64, f64)>> {
        let mut stmt = self.conn().prepare_cached(
            "SELECT taxon_id, value FROM count WHERE event_id = ?1 ORDER BY taxon_id",
        )?;
        let rows = stmt
            .query_map([id], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<Vec<(i64, f64)>>>()?;
        Ok(rows)
    }

    /// The accepted taxa recorded with a count above zero in the events of
    /// `selection`'s row filters (synonyms resolved to their accepted taxon).
    ///
    /// # Errors
    /// As [`Store::select_records`]; SQLite errors.
    pub fn exchange_recorded_taxa(&self, selection: &Selection) -> Result<Vec<i64>> {
        let (wh, params) = self.event_filter(selection)?;
        let sql = format!(
            "SELECT DISTINCT COALESCE(t.accepted_id, t.id) FROM event e \
             JOIN count c ON c.event_id = e.id JOIN taxon t ON t.id = c.taxon_id{} c.value > 0 \
             ORDER BY 1",
            if wh.is_empty() {
                " WHERE".to_string()
            } else {
                format!("{wh} AND")
            }
        );
        let mut stmt = self.conn().prepare(&sql)?;
        let rows = stmt
            .query_map(rusqlite::params_from_iter(params.iter()), |r| r.get(0))?
            .collect::<rusqlite::Result<Vec<i64>>>()?;
        Ok(rows)
    }

    /// Every stored taxon (the taxonomy as its rules see it).
    ///
    /// # Errors
    /// SQLite errors.
    pub fn exchange_taxa(&self) -> Result<Vec<Node>> {
        Ok(super::taxa::load_taxonomy(self.conn())?
            .nodes()
            .cloned()
            .collect())
    }
}

/// The attribute history of one site (docs/data-model.md, "Site attributes that change").
pub use crate::matrix::assemble::History;

/// A place named by the archive's events.
#[derive(Debug, Clone, PartialEq)]
pub struct ArchiveSite {
    /// Where the site is first named (`part`, line).
    pub at: (String, u64),
    /// Site code (`locationID`, or derived from the locality).
    pub code: String,
    /// `locality`.
    pub name: String,
    /// `decimalLatitude`.
    pub latitude: Option<f64>,
    /// `decimalLongitude`.
    pub longitude: Option<f64>,
    /// Site attribute histories, from the values carried in
    /// `dynamicProperties` by the site's events.
    pub attributes: History,
}

/// A sampling protocol named by the archive's events.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct ArchiveProtocol {
    /// The code given in `dynamicProperties` (`protocolCode`), if any.
    pub code: Option<String>,
    /// `samplingProtocol`.
    pub description: String,
    /// `sampleSizeUnit`.
    pub unit: String,
}

/// A taxon named by the archive (an occurrence's name or a name of its
/// higher classification).
#[derive(Debug, Clone, PartialEq)]
pub struct ArchiveTaxon {
    /// Where the taxon is first named.
    pub at: (String, u64),
    /// `scientificName` (or the higher-classification column's value).
    pub name: String,
    /// `taxonRank` (or the column's rank), lower case; "" when unknown.
    pub rank: String,
    /// The nearest higher name of the classification columns.
    pub parent: Option<String>,
}

/// One sampling event of the archive.
#[derive(Debug, Clone, PartialEq)]
pub struct ArchiveEvent {
    /// The event's line in the core file ([`ArchiveData::event_part`]).
    pub line: u64,
    /// `eventID`.
    pub code: String,
    /// Site code.
    pub site: String,
    /// ISO 8601 date.
    pub date: String,
    /// Time of day.
    pub time: Option<String>,
    /// Index into [`ArchiveData::protocols`].
    pub protocol: usize,
    /// `sampleSizeValue`.
    pub effort: f64,
    /// Replicate number from `dynamicProperties`, if given.
    pub replicate: Option<i64>,
    /// `eventRemarks`.
    pub notes: String,
}

/// One count of the archive: the sum of the occurrences of one taxon in one event.
#[derive(Debug, Clone, PartialEq)]
pub struct ArchiveCount {
    /// The (first) occurrence's line in the extension file
    /// ([`ArchiveData::occurrence_part`]).
    pub line: u64,
    /// Index into [`ArchiveData::events`].
    pub event: usize,
    /// Index into [`ArchiveData::taxa`] (`scientificName`).
    pub taxon: usize,
    /// Individuals.
    pub value: f64,
}

/// An archive read and checked for its own form, ready to be written.
#[derive(Debug, Clone, Default)]
pub struct ArchiveData {
    /// The archive's file name as given.
    pub file: String,
    /// SHA-256 of the archive's bytes (hex).
    pub sha256: String,
    /// Data rows read (core and extension).
    pub rows: usize,
    /// The core file (as problems name it).
    pub event_part: String,
    /// The occurrence file (as problems name it).
    pub occurrence_part: String,
    /// Sites, in order of first mention.
    pub sites: Vec<ArchiveSite>,
    /// Protocols, in order of first mention.
    pub protocols: Vec<ArchiveProtocol>,
    /// Taxa, in order of first mention.
    pub taxa: Vec<ArchiveTaxon>,
    /// Events.
    pub events: Vec<ArchiveEvent>,
    /// Counts (present occurrences).
    pub counts: Vec<ArchiveCount>,
}

/// What an archive import wrote, beyond the plain [`ImportReport`].
#[derive(Debug, Clone, serde::Serialize)]
pub struct ArchiveReport {
    /// The batch and its figures (`written` = events, `counts` = counts).
    pub batch: ImportReport,
    /// Sites created.
    pub sites_created: usize,
    /// Protocols created.
    pub protocols_created: usize,
    /// Taxa created.
    pub taxa_created: usize,
    /// Events given a replicate number above 1 by their order among events
    /// of the same site, date and protocol (the archive did not state it).
    pub replicates_numbered: usize,
    /// Sites and taxa already stored that the archive describes otherwise
    /// (kept as stored): `"site S01 (locality, coordinates)"`.
    pub kept_as_stored: Vec<String>,
}

/// Write `data` into the store as one batch of kind `dwca`, all or nothing.
///
/// # Errors
/// [`StoreError::Invalid`] listing what cannot be resolved (unknown names
/// without `create_missing`, events already stored, a protocol stored with
/// another unit, a taxonomy the new taxa would break); nothing is written then.
/// SQLite errors.
pub fn import_archive(
    store: &mut Store,
    data: &ArchiveData,
    create_missing: bool,
) -> Result<ArchiveReport> {
    let mut issues = Issues::default();
    let tx = store
        .conn_mut()
        .transaction_with_behavior(TransactionBehavior::Immediate)?;
    let report = write_archive(&tx, data, create_missing, &mut issues)?;
    commit_or_refuse(tx, report, issues, &data.file)
}

/// Ids of a table by natural key, with the batch each row came from.
fn load_keys(tx: &Transaction<'_>, sql: &str) -> Result<HashMap<String, (i64, Option<i64>)>> {
    let mut stmt = tx.prepare(sql)?;
    let mut out = HashMap::new();
    let mut rows = stmt.query([])?;
    while let Some(r) = rows.next()? {
        out.insert(r.get(1)?, (r.get(0)?, r.get(2)?));
    }
    Ok(out)
}

fn unknown(what: &str, key: &str) -> String {
    format!("{what} '{key}' is not in the store; import it first, or use --create-missing")
}

/// The code a protocol without a stated code gets: its description, and its
/// unit when another protocol already has that code.
fn derived_protocol_code(p: &ArchiveProtocol, taken: &HashSet<String>) -> String {
    let base: String = p.description.chars().take(60).collect();
    if !taken.contains(&base) {
        return base;
    }
    let with_unit = format!("{base} ({})", p.unit);
    if !taken.contains(&with_unit) {
        return with_unit;
    }
    (2..)
        .map(|k| format!("{base} ({}) {k}", p.unit))
        .find(|c| !taken.contains(c))
        .expect("invariant: some numbered code is free")
}

fn write_archive(
    tx: &Transaction<'_>,
    data: &ArchiveData,
    create_missing: bool,
    issues: &mut Issues,
) -> Result<Option<ArchiveReport>> {
    let mut created: Vec<String> = Vec::new();

    // Sites.
    let stored_sites = load_keys(tx, "SELECT id, code, import_batch_id FROM site")?;
    let mut kept: Vec<String> = Vec::new();
    let mut stored_place: HashMap<String, (String, Option<f64>, Option<f64>)> = HashMap::new();
    {
        let mut stmt = tx.prepare("SELECT code, name, latitude, longitude FROM site")?;
        let mut rows = stmt.query([])?;
        while let Some(r) = rows.next()? {
            stored_place.insert(r.get(0)?, (r.get(1)?, r.get(2)?, r.get(3)?));
        }
    }
    let stored_attributes = super::sites::load_histories(tx)?;
    let mut new_sites: Vec<&ArchiveSite> = Vec::new();
    for s in &data.sites {
        if let Some((name, lat, lon)) = stored_place.get(&s.code) {
            let mut what = Vec::new();
            if !s.name.is_empty() && &s.name != name {
                what.push("locality");
            }
            if (s.latitude.is_some() || s.longitude.is_some())
                && (s.latitude != *lat || s.longitude != *lon)
            {
                what.push("coordinates");
            }
            let attrs = stored_attributes.get(&s.code).cloned().unwrap_or_default();
            if !s.attributes.is_empty() && s.attributes != attrs {
                what.push("attributes");
            }
            if !what.is_empty() {
                kept.push(format!("site {} ({})", s.code, what.join(", ")));
            }
            continue;
        }
        if create_missing {
            new_sites.push(s);
            created.push(format!("site {}", s.code));
        } else {
            issues.push_in(&s.at.0, s.at.1, "locationID", unknown("site", &s.code));
        }
    }

    // Protocols: a stated code must match the stored unit; otherwise a stored
    // protocol of the same description and unit is reused.
    let mut stored_protocols: HashMap<String, (i64, String, String)> = HashMap::new();
    {
        let mut stmt = tx.prepare("SELECT id, code, description, effort_unit FROM protocol")?;
        let mut rows = stmt.query([])?;
        while let Some(r) = rows.next()? {
            stored_protocols.insert(r.get(1)?, (r.get(0)?, r.get(2)?, r.get(3)?));
        }
    }
    let mut taken: HashSet<String> = stored_protocols.keys().cloned().collect();
    let mut protocol_code: Vec<String> = Vec::new();
    let mut new_protocols: Vec<(String, &ArchiveProtocol)> = Vec::new();
    for (k, p) in data.protocols.iter().enumerate() {
        let first = data
            .events
            .iter()
            .find(|e| e.protocol == k)
            .map(|e| (data.event_part.clone(), e.line))
            .unwrap_or_default();
        let code = match &p.code {
            Some(code) => {
                if let Some((_, _, unit)) = stored_protocols.get(code) {
                    if unit != &p.unit {
                        issues.push_in(
                            &first.0,
                            first.1,
                            "sampleSizeUnit",
                            format!(
                                "protocol '{code}' is stored with effort in {unit}, but the archive gives {}; \
                                 effort in different units cannot be compared",
                                p.unit
                            ),
                        );
                    }
                    code.clone()
                } else if new_protocols.iter().any(|(c, _)| c == code) {
                    issues.push_in(
                        &first.0,
                        first.1,
                        "dynamicProperties",
                        format!("protocol code '{code}' is given to two protocols (description or unit differ)"),
                    );
                    code.clone()
                } else {
                    taken.insert(code.clone());
                    new_protocols.push((code.clone(), p));
                    code.clone()
                }
            }
            None => match stored_protocols
                .iter()
                .filter(|(_, (_, d, u))| d == &p.description && u == &p.unit)
                .map(|(c, _)| c)
                .min()
            {
                Some(c) => c.clone(),
                None => {
                    let c = derived_protocol_code(p, &taken);
                    taken.insert(c.clone());
                    new_protocols.push((c.clone(), p));
                    c
                }
            },
        };
        protocol_code.push(code);
    }
    for (code, _) in &new_protocols {
        if create_missing {
            created.push(format!("protocol {code}"));
        } else {
            let k = protocol_code
                .iter()
                .position(|c| c == code)
                .expect("invariant: every new protocol has a code");
            let at = data
                .events
                .iter()
                .find(|e| e.protocol == k)
                .map(|e| (data.event_part.clone(), e.line))
                .unwrap_or_default();
            issues.push_in(&at.0, at.1, "samplingProtocol", unknown("protocol", code));
        }
    }

    // Taxa: names the store lacks are created with their rank and parent, and
    // must keep the taxonomy sound.
    let stored_taxa = load_keys(tx, "SELECT id, name, import_batch_id FROM taxon")?;
    let mut stored_rank: HashMap<String, (String, Option<String>)> = HashMap::new();
    {
        let mut stmt = tx.prepare(
            "SELECT t.name, t.rank, p.name FROM taxon t LEFT JOIN taxon p ON p.id = t.parent_id",
        )?;
        let mut rows = stmt.query([])?;
        while let Some(r) = rows.next()? {
            stored_rank.insert(r.get(0)?, (r.get(1)?, r.get(2)?));
        }
    }
    let codes: HashMap<String, String> = {
        let mut stmt = tx
            .prepare("SELECT c.code, t.name FROM taxon_code c JOIN taxon t ON t.id = c.taxon_id")?;
        stmt.query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
            .collect::<rusqlite::Result<_>>()?
    };
    let mut new_taxa: Vec<&ArchiveTaxon> = Vec::new();
    let counted: HashSet<usize> = data.counts.iter().map(|c| c.taxon).collect();
    // The taxa the counts need: the counted ones and their classification
    // above them (a taxon named only by absences is not created).
    let by_name: HashMap<&str, usize> = data
        .taxa
        .iter()
        .enumerate()
        .map(|(k, t)| (t.name.as_str(), k))
        .collect();
    let mut needed: HashSet<usize> = HashSet::new();
    for &k in &counted {
        let mut cur = Some(k);
        while let Some(i) = cur {
            if !needed.insert(i) {
                break;
            }
            cur = data.taxa[i]
                .parent
                .as_deref()
                .and_then(|p| by_name.get(p).copied());
        }
    }
    for (k, t) in data.taxa.iter().enumerate() {
        if !needed.contains(&k) {
            continue;
        }
        if let Some((rank, parent)) = stored_rank.get(&t.name) {
            let mut what = Vec::new();
            if !t.rank.is_empty() && !rank.eq_ignore_ascii_case(&t.rank) {
                what.push("rank");
            }
            if t.parent.is_some() && &t.parent != parent {
                what.push("parent");
            }
            if !what.is_empty() {
                kept.push(format!("taxon {} ({})", t.name, what.join(", ")));
            }
            continue;
        }
        if let Ok(code) = crate::store::taxa::codes::parse_code(&t.name)
            && let Some(owner) = codes.get(&code)
        {
            // A new name must not read like a field code (docs/taxonomy.md, "Field codes").
            let message = crate::store::taxa::codes::name_is_code(&t.name, &code, owner);
            issues.push_in(&t.at.0, t.at.1, "scientificName", message);
        } else if create_missing {
            new_taxa.push(t);
            created.push(format!("taxon {}", t.name));
        } else if counted.contains(&k) {
            issues.push_in(&t.at.0, t.at.1, "scientificName", unknown("taxon", &t.name));
        }
    }
    if !create_missing {
        // Higher names are only needed as parents of taxa being created.
        new_taxa.clear();
    }
    if issues.is_empty() && !new_taxa.is_empty() {
        let rows: Vec<TaxonRow> = new_taxa
            .iter()
            .enumerate()
            .map(|(k, t)| TaxonRow {
                line: k as u64 + 1,
                name: t.name.clone(),
                rank: t.rank.clone(),
                parent: t.parent.clone(),
                accepted: None,
                code: None,
            })
            .collect();
        let mut found = Issues::default();
        taxonomy_issues(tx, &rows, &[], &mut found)?;
        if !found.is_empty() {
            let (list, _) = found.first(MAX_REPORTED_ISSUES);
            for i in list {
                let t = &new_taxa[(i.line.max(1) - 1) as usize];
                issues.push_in(&t.at.0, t.at.1, "scientificName", i.message);
            }
        }
    }

    // Events: new codes only; replicate numbers free at their key.
    let stored_events = load_keys(tx, "SELECT id, code, import_batch_id FROM event")?;
    let mut stored_keys: HashMap<(String, String, String), Vec<i64>> = HashMap::new();
    {
        let mut stmt = tx.prepare(
            "SELECT s.code, e.date, p.code, e.replicate FROM event e \
             JOIN site s ON s.id = e.site_id JOIN protocol p ON p.id = e.protocol_id",
        )?;
        let mut rows = stmt.query([])?;
        while let Some(r) = rows.next()? {
            stored_keys
                .entry((r.get(0)?, r.get(1)?, r.get(2)?))
                .or_default()
                .push(r.get(3)?);
        }
    }
    let mut replicate: Vec<i64> = Vec::with_capacity(data.events.len());
    let mut numbered = 0;
    // Stated replicates first, so numbering fills around them.
    let mut used: HashMap<(String, String, String), HashSet<i64>> = HashMap::new();
    for e in &data.events {
        if let Some((_, batch)) = stored_events.get(&e.code) {
            let from = batch.map_or(String::new(), |b| format!(" (batch {b})"));
            issues.push_in(
                &data.event_part,
                e.line,
                "eventID",
                format!(
                    "event '{}' is already stored{from}; an archive import brings new events only",
                    e.code
                ),
            );
        }
        let key = (
            e.site.clone(),
            e.date.clone(),
            protocol_code[e.protocol].clone(),
        );
        let set = used.entry(key.clone()).or_insert_with(|| {
            stored_keys
                .get(&key)
                .into_iter()
                .flatten()
                .copied()
                .collect()
        });
        if let Some(r) = e.replicate
            && !set.insert(r)
        {
            issues.push_in(
                &data.event_part,
                e.line,
                "dynamicProperties",
                format!(
                    "replicate {r} of site {}, {} and protocol {} is already taken (in the store or by another event of the archive)",
                    e.site, e.date, key.2
                ),
            );
        }
    }
    for e in &data.events {
        let key = (
            e.site.clone(),
            e.date.clone(),
            protocol_code[e.protocol].clone(),
        );
        let r = match e.replicate {
            Some(r) => r,
            None => {
                let set = used
                    .get_mut(&key)
                    .expect("invariant: every key was seen above");
                let r = (1..)
                    .find(|r| !set.contains(r))
                    .expect("invariant: a free replicate number exists");
                set.insert(r);
                if r > 1 {
                    numbered += 1;
                }
                r
            }
        };
        replicate.push(r);
    }
    if !issues.is_empty() {
        return Ok(None);
    }

    // Write.
    let meta = BatchMeta {
        kind: ImportKind::Dwca,
        file: data.file.clone(),
        sha256: data.sha256.clone(),
        imported_at: chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true),
    };
    let mut report = meta.insert(tx, data.rows, created, Vec::new())?;
    let batch = report.batch_id;
    let mut site_id: HashMap<&str, i64> = stored_sites
        .iter()
        .map(|(k, (id, _))| (k.as_str(), *id))
        .collect();
    {
        let mut ins = tx.prepare(
            "INSERT INTO site(code, name, latitude, longitude, import_batch_id) VALUES (?1, ?2, ?3, ?4, ?5)",
        )?;
        let mut attr = tx.prepare(
            "INSERT INTO site_attribute(site_id, key, valid_from, value, import_batch_id) \
             VALUES (?1, ?2, ?3, ?4, ?5)",
        )?;
        for s in &new_sites {
            ins.execute(params![s.code, s.name, s.latitude, s.longitude, batch])?;
            let id = tx.last_insert_rowid();
            site_id.insert(&s.code, id);
            for (k, history) in &s.attributes {
                for v in history {
                    let from = v.from.as_deref().unwrap_or_default();
                    attr.execute(params![id, k, from, v.value, batch])?;
                }
            }
        }
    }
    let mut protocol_id: HashMap<String, i64> = stored_protocols
        .iter()
        .map(|(k, (id, _, _))| (k.clone(), *id))
        .collect();
    {
        let mut ins = tx.prepare(
            "INSERT INTO protocol(code, description, effort_unit, import_batch_id) VALUES (?1, ?2, ?3, ?4)",
        )?;
        for (code, p) in &new_protocols {
            ins.execute(params![code, p.description, p.unit, batch])?;
            protocol_id.insert(code.clone(), tx.last_insert_rowid());
        }
    }
    let mut taxon_id: HashMap<String, i64> = stored_taxa
        .iter()
        .map(|(k, (id, _))| (k.clone(), *id))
        .collect();
    {
        let mut ins =
            tx.prepare("INSERT INTO taxon(name, rank, import_batch_id) VALUES (?1, ?2, ?3)")?;
        for t in &new_taxa {
            ins.execute(params![t.name, t.rank, batch])?;
            taxon_id.insert(t.name.clone(), tx.last_insert_rowid());
        }
        let mut link = tx.prepare("UPDATE taxon SET parent_id = ?2 WHERE id = ?1")?;
        for t in &new_taxa {
            if let Some(p) = &t.parent {
                let parent = taxon_id
                    .get(p)
                    .expect("invariant: the parent of a new taxon is stored or new");
                link.execute(params![taxon_id[&t.name], parent])?;
            }
        }
    }
    let mut event_id: Vec<i64> = Vec::with_capacity(data.events.len());
    {
        let mut ins = tx.prepare(
            "INSERT INTO event(code, site_id, date, time, protocol_id, effort, replicate, notes, import_batch_id) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
        )?;
        for (e, r) in data.events.iter().zip(&replicate) {
            ins.execute(params![
                e.code,
                site_id[e.site.as_str()],
                e.date,
                e.time,
                protocol_id[&protocol_code[e.protocol]],
                e.effort,
                r,
                e.notes,
                batch
            ])?;
            event_id.push(tx.last_insert_rowid());
        }
    }
    {
        let mut ins = tx.prepare(
            "INSERT INTO count(event_id, taxon_id, value, import_batch_id) VALUES (?1, ?2, ?3, ?4)",
        )?;
        for c in &data.counts {
            ins.execute(params![
                event_id[c.event],
                taxon_id[&data.taxa[c.taxon].name],
                c.value,
                batch
            ])?;
        }
    }
    report.written = data.events.len();
    report.counts = data.counts.len();
    Ok(Some(ArchiveReport {
        batch: report,
        sites_created: new_sites.len(),
        protocols_created: new_protocols.len(),
        taxa_created: new_taxa.len(),
        replicates_numbered: numbered,
        kept_as_stored: kept,
    }))
}
