//! Importing sampling data: events and counts files, and what the records
//! format shares with them: name resolution and the tail of every file holding
//! counts ([`finish_counts`]: count checks, then the writes).
//!
//! Counts are written sorted by (event, taxon), the order of the count table's
//! primary key, several hundred rows per prepared INSERT.

use std::collections::{HashMap, HashSet};

use rusqlite::{OptionalExtension, Transaction, params};

use super::{
    BatchMeta, Ids, ImportKind, ImportOptions, ImportReport, Interner, IsoDate, Replaced, Table,
    Unique, parse_count, parse_date, parse_effort, parse_replicate, parse_rows, parse_time,
    shorten,
};
use crate::store::Result;
use crate::store::sheet::Issues;
use crate::store::taxa::codes::{load_codes, resolve_with};

/// The message for a protocol the store does not know.
fn unknown_protocol(code: &str, more: &str) -> String {
    format!(
        "protocol '{}' is not in the store{more}; import it first with `tally import protocols` \
         (it cannot be created with --create-missing because a protocol needs an effort unit)",
        shorten(code)
    )
}

fn unknown_site(code: &str, more: &str) -> String {
    format!(
        "site '{}' is not in the store{more}; import it first, or use --create-missing",
        shorten(code)
    )
}

fn unknown_taxon(name: &str, more: &str) -> String {
    format!(
        "taxon '{}' is not in the store{more}; import it first, or use --create-missing",
        shorten(name)
    )
}

/// Resolve interned site names; unknown ones are created on request or reported once.
pub(super) fn resolve_sites(
    names: &Interner,
    ids: &mut Ids,
    opts: &ImportOptions,
    column: &str,
    issues: &mut Issues,
    created: &mut Vec<String>,
) -> Vec<Option<i64>> {
    (0..names.names.len() as u32)
        .map(|i| {
            let code = &names.names[i as usize];
            match ids.get(code) {
                Some(id) => Some(id),
                None if opts.create_missing => {
                    created.push(format!("site {code}"));
                    Some(ids.get_or_create(code).0)
                }
                None => {
                    issues.push(
                        names.first_line[i as usize],
                        column,
                        unknown_site(code, &names.more_rows(i)),
                    );
                    None
                }
            }
        })
        .collect()
}

/// Resolve interned taxon names, or field codes (the one rule,
/// `taxa::codes::resolve_with`: a name first, then a code); unknown ones are
/// created on request or reported once.
pub(super) fn resolve_taxa(
    tx: &Transaction<'_>,
    names: &Interner,
    ids: &mut Ids,
    opts: &ImportOptions,
    issues: &mut Issues,
    created: &mut Vec<String>,
) -> Result<Vec<Option<i64>>> {
    let codes = load_codes(tx)?;
    Ok((0..names.names.len() as u32)
        .map(|i| {
            let name = &names.names[i as usize];
            match resolve_with(name, |n| ids.get(n), |c| codes.get(c).copied()) {
                Some(id) => Some(id),
                None if opts.create_missing => {
                    created.push(format!("taxon {name}"));
                    Some(ids.get_or_create(name).0)
                }
                None => {
                    issues.push(
                        names.first_line[i as usize],
                        "taxon",
                        unknown_taxon(name, &names.more_rows(i)),
                    );
                    None
                }
            }
        })
        .collect())
}

pub(super) fn resolve_protocols(
    names: &Interner,
    ids: &Ids,
    issues: &mut Issues,
) -> Vec<Option<i64>> {
    (0..names.names.len() as u32)
        .map(|i| {
            let code = &names.names[i as usize];
            let id = ids.get(code);
            if id.is_none() {
                issues.push(
                    names.first_line[i as usize],
                    "protocol",
                    unknown_protocol(code, &names.more_rows(i)),
                );
            }
            id
        })
        .collect()
}

/// Write the sites and taxa created on the way.
fn write_created(tx: &Transaction<'_>, sites: &Ids, taxa: &Ids, batch: i64) -> Result<()> {
    let mut site = tx.prepare("INSERT INTO site(id, code, import_batch_id) VALUES (?1, ?2, ?3)")?;
    for (id, code) in &sites.new {
        site.execute(params![id, code, batch])?;
    }
    let mut taxon =
        tx.prepare("INSERT INTO taxon(id, name, import_batch_id) VALUES (?1, ?2, ?3)")?;
    for (id, name) in &taxa.new {
        taxon.execute(params![id, name, batch])?;
    }
    Ok(())
}

/// A count ready to check and write.
#[derive(Debug, Clone, Copy)]
struct NewCount {
    event: i64,
    taxon: i64,
    value: f64,
    line: u64,
}

/// What [`check_counts`] found among the counts of stored events.
#[derive(Debug, Default)]
struct Checked {
    /// Stored values overwritten (`replace`), for the batch notes.
    replaced: Vec<Replaced>,
    /// Counts equal to the stored ones, dropped (`skip_existing`).
    identical: usize,
}

/// Sort `counts` by (event, taxon), report pairs listed twice in the file, and
/// compare with counts already stored for `stored_events`. A stored count is
/// overwritten with `replace` (its old value returned for the batch notes);
/// with `skip_existing` an equal one is dropped from `counts` and a different
/// one is refused (unless `replace`); otherwise any stored count is refused.
fn check_counts(
    tx: &Transaction<'_>,
    counts: &mut Vec<NewCount>,
    stored_events: &HashSet<i64>,
    taxon_name: &dyn Fn(i64) -> String,
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Checked> {
    counts.sort_unstable_by_key(|c| (c.event, c.taxon, c.line));
    for w in counts.windows(2) {
        if w[0].event == w[1].event && w[0].taxon == w[1].taxon {
            issues.push(
                w[1].line,
                "taxon",
                format!(
                    "taxon '{}' is listed twice for the same event (first on line {})",
                    shorten(&taxon_name(w[1].taxon)),
                    w[0].line
                ),
            );
        }
    }
    let mut checked = Checked::default();
    if stored_events.is_empty() {
        return Ok(checked);
    }
    let mut stmt = tx.prepare(
        "SELECT value, import_batch_id FROM count WHERE event_id = ?1 AND taxon_id = ?2",
    )?;
    let mut keep = Vec::with_capacity(counts.len());
    for c in counts.iter() {
        let old: Option<(f64, Option<i64>)> = if stored_events.contains(&c.event) {
            stmt.query_row(params![c.event, c.taxon], |r| Ok((r.get(0)?, r.get(1)?)))
                .optional()?
        } else {
            None
        };
        let Some((value, batch)) = old else {
            keep.push(true);
            continue;
        };
        let name = taxon_name(c.taxon);
        let taxon = shorten(&name);
        let from = batch.map_or(String::new(), |b| format!(" by batch {b}"));
        if opts.skip_existing && value == c.value {
            checked.identical += 1;
            keep.push(false);
        } else if opts.replace {
            checked.replaced.push(Replaced {
                event: c.event,
                taxon: c.taxon,
                value,
                batch,
            });
            keep.push(true);
        } else if opts.skip_existing {
            issues.push(
                c.line,
                "count",
                format!(
                    "'{taxon}' is stored for this event with count {value}{from}, not {}; \
                     a cumulative import never changes a stored count (correct the file, \
                     or use --replace to overwrite it)",
                    c.value
                ),
            );
            keep.push(true);
        } else {
            issues.push(
                c.line,
                "taxon",
                format!(
                    "a count of '{taxon}' for this event is already stored{from} (value {value}); \
                     use --skip-existing to import only the rows not yet stored (a cumulative file), \
                     or --replace to overwrite stored counts"
                ),
            );
            keep.push(true);
        }
    }
    if checked.identical > 0 {
        let mut keep = keep.into_iter();
        counts.retain(|_| keep.next().unwrap_or(true));
    }
    Ok(checked)
}

/// Rows per multi-row INSERT when writing counts (4 parameters each).
pub(super) const COUNT_CHUNK: usize = 512;

/// Write counts (sorted by (event, taxon)) with a prepared multi-row INSERT
/// reused for every full chunk of [`COUNT_CHUNK`] rows, and one for the rest.
fn write_counts(
    tx: &Transaction<'_>,
    counts: &[NewCount],
    batch: i64,
    replace: bool,
) -> Result<()> {
    let sql = |n: usize| {
        let values = vec!["(?, ?, ?, ?)"; n].join(", ");
        let mut sql = format!(
            "INSERT INTO count(event_id, taxon_id, value, import_batch_id) VALUES {values}"
        );
        if replace {
            sql.push_str(
                " ON CONFLICT(event_id, taxon_id) DO UPDATE SET value = excluded.value, \
                 import_batch_id = excluded.import_batch_id",
            );
        }
        sql
    };
    let write = |stmt: &mut rusqlite::Statement<'_>, chunk: &[NewCount]| -> Result<()> {
        for (k, c) in chunk.iter().enumerate() {
            stmt.raw_bind_parameter(4 * k + 1, c.event)?;
            stmt.raw_bind_parameter(4 * k + 2, c.taxon)?;
            stmt.raw_bind_parameter(4 * k + 3, c.value)?;
            stmt.raw_bind_parameter(4 * k + 4, batch)?;
        }
        stmt.raw_execute()?;
        Ok(())
    };
    let mut chunks = counts.chunks_exact(COUNT_CHUNK);
    if chunks.len() > 0 {
        let mut stmt = tx.prepare(&sql(COUNT_CHUNK))?;
        for chunk in chunks.by_ref() {
            write(&mut stmt, chunk)?;
        }
    }
    let rest = chunks.remainder();
    if !rest.is_empty() {
        write(&mut tx.prepare(&sql(rest.len()))?, rest)?;
    }
    Ok(())
}

/// One parsed row of an events file.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct EventRow {
    pub line: u64,
    pub code: String,
    pub site: String,
    pub date: IsoDate,
    pub protocol: String,
    pub effort: f64,
    pub time: Option<String>,
    pub replicate: i64,
    pub notes: String,
}

/// Parse an events file (pure).
pub(crate) fn parse_events(
    bytes: &[u8],
    delimiter: Option<u8>,
    issues: &mut Issues,
) -> Vec<EventRow> {
    let mut out = Vec::new();
    let mut codes = Unique::default();
    let mut keys: Unique<(String, IsoDate, String, i64)> = Unique::default();
    parse_rows(
        bytes,
        delimiter,
        ImportKind::Events,
        issues,
        |c| {
            [
                "code",
                "site",
                "protocol",
                "date",
                "effort",
                "time",
                "replicate",
                "notes",
            ]
            .map(|n| c.col(n))
        },
        |&[
            c_code,
            c_site,
            c_protocol,
            c_date,
            c_effort,
            c_time,
            c_replicate,
            c_notes,
        ],
         row| {
            let code = row.required(c_code, "empty; every event needs a code");
            let site = row.required(c_site, "empty; every event needs a site code");
            let protocol = row.required(c_protocol, "empty; every event needs a protocol code");
            let date = row.parse(c_date, parse_date);
            let effort = row.parse(c_effort, parse_effort);
            let time = row.parse(c_time, parse_time);
            let replicate = row.parse(c_replicate, parse_replicate);
            let (
                Some(code),
                Some(site),
                Some(protocol),
                Some(date),
                Some(effort),
                Some(time),
                Some(replicate),
            ) = (code, site, protocol, date, effort, time, replicate)
            else {
                return;
            };
            if !codes.once(row, "code", "event", code) {
                return;
            }
            let key = (site.to_string(), date, protocol.to_string(), replicate);
            if let Some(first) = keys.first(key, row.line) {
                row.issue(
                    "replicate",
                    format!(
                        "line {first} has the same site, date, protocol and replicate; \
                         give a different replicate"
                    ),
                );
                return;
            }
            out.push(EventRow {
                line: row.line,
                code: code.to_string(),
                site: site.to_string(),
                date,
                protocol: protocol.to_string(),
                effort,
                time,
                replicate,
                notes: row.get(c_notes).to_string(),
            });
        },
    );
    out
}

/// Import an events file; `None` when problems were found.
pub(crate) fn import_events(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    bytes: &[u8],
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Option<ImportReport>> {
    let rows = parse_events(bytes, opts.delimiter, issues);
    let total = rows.len();
    let mut sites = Ids::load(tx, Table::Site)?;
    let protocols = Ids::load(tx, Table::Protocol)?;
    let mut created = Vec::new();
    let mut site_names = Interner::default();
    let mut protocol_names = Interner::default();
    let site_idx: Vec<u32> = rows
        .iter()
        .map(|r| site_names.intern(&r.site, r.line))
        .collect();
    let protocol_idx: Vec<u32> = rows
        .iter()
        .map(|r| protocol_names.intern(&r.protocol, r.line))
        .collect();
    let site_ids = resolve_sites(&site_names, &mut sites, opts, "site", issues, &mut created);
    let protocol_ids = resolve_protocols(&protocol_names, &protocols, issues);
    let mut fresh = Vec::new();
    let mut unchanged = 0;
    {
        let mut by_code = tx.prepare(
            "SELECT s.code, e.date, p.code, e.effort, e.time, e.replicate, e.notes, e.import_batch_id \
             FROM event e JOIN site s ON s.id = e.site_id JOIN protocol p ON p.id = e.protocol_id \
             WHERE e.code = ?1",
        )?;
        let mut by_key = tx.prepare(
            "SELECT code FROM event WHERE site_id = ?1 AND date = ?2 AND protocol_id = ?3 AND replicate = ?4",
        )?;
        for (k, row) in rows.into_iter().enumerate() {
            let (Some(site), Some(protocol)) = (
                site_ids[site_idx[k] as usize],
                protocol_ids[protocol_idx[k] as usize],
            ) else {
                continue;
            };
            type Stored = (
                String,
                String,
                String,
                f64,
                Option<String>,
                i64,
                String,
                Option<i64>,
            );
            let stored: Option<Stored> = by_code
                .query_row([&row.code], |r| {
                    Ok((
                        r.get(0)?,
                        r.get(1)?,
                        r.get(2)?,
                        r.get(3)?,
                        r.get(4)?,
                        r.get(5)?,
                        r.get(6)?,
                        r.get(7)?,
                    ))
                })
                .optional()?;
            if let Some(s) = stored {
                let opt = |t: &Option<String>| t.clone().unwrap_or_default();
                // The first column whose value differs from the stored event's.
                let differs = [
                    ("site", s.0 != row.site, s.0.clone()),
                    ("date", s.1 != row.date.text(), s.1.clone()),
                    ("protocol", s.2 != row.protocol, s.2.clone()),
                    ("effort", s.3 != row.effort, s.3.to_string()),
                    ("time", s.4 != row.time, opt(&s.4)),
                    ("replicate", s.5 != row.replicate, s.5.to_string()),
                    ("notes", s.6 != row.notes, s.6.clone()),
                ]
                .into_iter()
                .find(|(_, differs, _)| *differs);
                match differs {
                    None => unchanged += 1,
                    Some((column, _, stored)) => issues.push(
                        row.line,
                        column,
                        format!(
                            "event '{}' is already stored{} with {column} '{}'; an import cannot \
                             change a stored event (undo that batch first, or leave the row as stored)",
                            shorten(&row.code),
                            s.7.map_or(String::new(), |b| format!(" (batch {b})")),
                            shorten(&stored)
                        ),
                    ),
                }
                continue;
            }
            let clash: Option<String> = by_key
                .query_row(
                    params![site, row.date.text(), protocol, row.replicate],
                    |r| r.get(0),
                )
                .optional()?;
            if let Some(other) = clash {
                issues.push(
                    row.line,
                    "replicate",
                    format!(
                        "event '{}' is already stored for this site, date, protocol and replicate; \
                         give a different replicate",
                        shorten(&other)
                    ),
                );
                continue;
            }
            fresh.push((row, site, protocol));
        }
    }
    if !issues.is_empty() {
        return Ok(None);
    }
    let mut report = meta.insert(tx, total, created, Vec::new())?;
    write_created(tx, &sites, &Ids::empty(), report.batch())?;
    let mut ins = tx.prepare(
        "INSERT INTO event(code, site_id, date, time, protocol_id, effort, replicate, notes, import_batch_id) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
    )?;
    for (row, site, protocol) in &fresh {
        ins.execute(params![
            row.code,
            site,
            row.date.text(),
            row.time,
            protocol,
            row.effort,
            row.replicate,
            row.notes,
            report.batch_id
        ])?;
    }
    report.written = fresh.len();
    report.unchanged = unchanged;
    Ok(Some(report))
}

/// One count of a counts or records file, its event and taxon as interned names.
#[derive(Debug, Clone, Copy)]
pub(super) struct CountRow {
    pub(super) line: u64,
    pub(super) event: u32,
    pub(super) taxon: u32,
    pub(super) value: f64,
}

/// What the files holding counts (counts, records) have resolved when they
/// reach [`finish_counts`].
pub(super) struct Counted<'a> {
    /// Data rows in the file.
    pub(super) total: usize,
    /// The counts read.
    pub(super) rows: &'a [CountRow],
    /// Stored or new event id of each interned event (`None`: refused).
    pub(super) event_of: &'a [Option<i64>],
    /// Taxon id of each interned taxon name (`None`: refused).
    pub(super) taxon_of: &'a [Option<i64>],
    /// The taxon names read.
    pub(super) taxa: &'a Interner,
    /// Events already stored, whose counts may clash with stored ones.
    pub(super) stored_events: &'a HashSet<i64>,
    /// Rows found identical to the store before the counts are checked (a
    /// records file's nothing-found rows of stored events without counts).
    pub(super) unchanged: usize,
    /// Sites and taxa created on the way (`ImportReport::created`).
    pub(super) created: Vec<String>,
    /// Site and taxon ids, with the ones to create.
    pub(super) sites: &'a Ids,
    /// See `sites`.
    pub(super) taxon_ids: &'a Ids,
}

/// The tail every file holding counts shares: check the counts (pairs listed
/// twice, clashes with stored counts), and when no problem was found, write the
/// batch, the sites and taxa created, the new events (`write_events`, given the
/// batch id, returns how many it wrote) and the counts. `None` when problems
/// were found.
pub(super) fn finish_counts(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    opts: &ImportOptions,
    issues: &mut Issues,
    c: Counted<'_>,
    write_events: impl FnOnce(i64) -> Result<usize>,
) -> Result<Option<ImportReport>> {
    let mut counts: Vec<NewCount> = c
        .rows
        .iter()
        .filter_map(|r| {
            Some(NewCount {
                event: c.event_of[r.event as usize]?,
                taxon: c.taxon_of[r.taxon as usize]?,
                value: r.value,
                line: r.line,
            })
        })
        .collect();
    let names: HashMap<i64, &str> = c
        .taxon_of
        .iter()
        .zip(&c.taxa.names)
        .filter_map(|(id, n)| Some(((*id)?, n.as_str())))
        .collect();
    let name = |id: i64| {
        names
            .get(&id)
            .map_or_else(|| id.to_string(), |n| n.to_string())
    };
    let checked = check_counts(tx, &mut counts, c.stored_events, &name, opts, issues)?;
    if !issues.is_empty() {
        return Ok(None);
    }
    let mut report = meta.insert(tx, c.total, c.created, checked.replaced)?;
    let batch = report.batch();
    write_created(tx, c.sites, c.taxon_ids, batch)?;
    report.written = write_events(batch)?;
    write_counts(tx, &counts, batch, opts.replace)?;
    report.counts = counts.len();
    report.counts_on_stored_events = counts
        .iter()
        .filter(|n| c.stored_events.contains(&n.event))
        .count()
        - report.replaced;
    report.unchanged = c.unchanged + checked.identical;
    Ok(Some(report))
}

/// Import a counts file; `None` when problems were found.
pub(crate) fn import_counts(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    bytes: &[u8],
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Option<ImportReport>> {
    let mut events = Interner::default();
    let mut taxa = Interner::default();
    let mut rows = Vec::new();
    parse_rows(
        bytes,
        opts.delimiter,
        ImportKind::Counts,
        issues,
        |c| ["event", "taxon", "count"].map(|n| c.col(n)),
        |&[c_event, c_taxon, c_count], row| {
            let event = row.required(c_event, "empty; expected an event code");
            let taxon = row.required(c_taxon, "empty; expected a taxon name");
            let value = row.parse(c_count, parse_count);
            if let (Some(value), Some(event), Some(taxon)) = (value, event, taxon) {
                let line = row.line;
                rows.push(CountRow {
                    line,
                    event: events.intern(event, line),
                    taxon: taxa.intern(taxon, line),
                    value,
                });
            }
        },
    );
    let mut created = Vec::new();
    let mut taxon_ids = Ids::load(tx, Table::Taxon)?;
    let taxon_of = resolve_taxa(tx, &taxa, &mut taxon_ids, opts, issues, &mut created)?;
    let mut event_of = Vec::with_capacity(events.names.len());
    {
        let mut find = tx.prepare("SELECT id FROM event WHERE code = ?1")?;
        for (i, code) in events.names.iter().enumerate() {
            let id: Option<i64> = find.query_row([code], |r| r.get(0)).optional()?;
            if id.is_none() {
                issues.push(
                    events.first_line[i],
                    "event",
                    format!(
                        "event '{}' is not in the store{}; import the events file first",
                        shorten(code),
                        events.more_rows(i as u32)
                    ),
                );
            }
            event_of.push(id);
        }
    }
    let stored_events: HashSet<i64> = event_of.iter().flatten().copied().collect();
    let counted = Counted {
        total: rows.len(),
        rows: &rows,
        event_of: &event_of,
        taxon_of: &taxon_of,
        taxa: &taxa,
        stored_events: &stored_events,
        unchanged: 0,
        created,
        sites: &Ids::empty(),
        taxon_ids: &taxon_ids,
    };
    finish_counts(tx, meta, opts, issues, counted, |_| Ok(0))
}
