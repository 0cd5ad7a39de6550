//! Importing the field-sheet long format (records), which holds events and counts.
//!
//! Records rows are grouped into events by (site, date, protocol, replicate).
//! A new event's code is derived from that key, `SITE-YYYY-MM-DD-PROTOCOL-REPLICATE`
//! (e.g. `S07-2016-04-21-kick-1`); an event already stored under that key is
//! reused, and must have the same effort. Large files are parsed into compact rows
//! (names interned, dates packed) so a million rows fit comfortably in memory.

use std::collections::{HashMap, HashSet};

use rusqlite::{OptionalExtension, Transaction, params};

use super::sampling::{
    CountRow, Counted, finish_counts, resolve_protocols, resolve_sites, resolve_taxa,
};
use super::{
    BatchMeta, Ids, ImportKind, ImportOptions, ImportReport, Interner, IsoDate, Table, Unique,
    parse_count, parse_date, parse_effort, parse_replicate, parse_rows, parse_time, shorten,
};
use crate::store::Result;
use crate::store::sheet::Issues;

/// An event formed from records rows.
#[derive(Debug, Clone)]
struct RecordEvent {
    site: u32,
    date: IsoDate,
    protocol: u32,
    replicate: i64,
    effort: f64,
    time: Option<String>,
    /// The first line giving the time.
    time_line: Option<u64>,
    first_line: u64,
    /// The line of a row with empty taxon and count (nothing found).
    empty_line: Option<u64>,
    /// How many such rows the event has.
    empty_rows: usize,
    /// The first line listing a taxon.
    taxon_line: Option<u64>,
}

/// Everything a records file says, parsed.
#[derive(Default)]
struct Records {
    sites: Interner,
    protocols: Interner,
    taxa: Interner,
    events: Vec<RecordEvent>,
    /// The counts, by interned event and taxon.
    rows: Vec<CountRow>,
    /// Data rows in the file.
    seen: usize,
}

/// Parse a records file (pure): fields checked, rows grouped into events.
fn parse_records(bytes: &[u8], delimiter: Option<u8>, issues: &mut Issues) -> Records {
    let mut r = Records::default();
    let mut keys: HashMap<(u32, IsoDate, u32, i64), u32> = HashMap::new();
    let mut last_key: Option<((u32, IsoDate, u32, i64), u32)> = None;
    r.seen = parse_rows(
        bytes,
        delimiter,
        ImportKind::Records,
        issues,
        |c| {
            [
                "site",
                "date",
                "protocol",
                "effort",
                "taxon",
                "count",
                "replicate",
                "time",
            ]
            .map(|n| c.col(n))
        },
        |&[
            c_site,
            c_date,
            c_protocol,
            c_effort,
            c_taxon,
            c_count,
            c_replicate,
            c_time,
        ],
         row| {
            let line = row.line;
            let site = row.required(c_site, "empty; expected a site code");
            let protocol = row.required(c_protocol, "empty; expected a protocol code");
            let date = row.parse(c_date, parse_date);
            let effort = row.parse(c_effort, parse_effort);
            let replicate = row.parse(c_replicate, parse_replicate);
            let time = row.parse(c_time, parse_time);
            let (taxon, count) = (row.get(c_taxon), row.get(c_count));
            let value = match (taxon.is_empty(), count.is_empty()) {
                (true, true) => Some(None),
                (true, false) => {
                    row.issue(
                        "taxon",
                        "empty but a count is given; name the taxon, or leave both empty when nothing was found",
                    );
                    None
                }
                (false, true) => {
                    row.issue(
                        "count",
                        format!(
                            "empty; expected a count ≥ 0 for taxon '{}' (write 0 if none)",
                            shorten(taxon)
                        ),
                    );
                    None
                }
                (false, false) => match parse_count(count) {
                    Ok(v) => Some(Some(v)),
                    Err(m) => {
                        row.issue("count", m);
                        None
                    }
                },
            };
            let (
                Some(site),
                Some(protocol),
                Some(date),
                Some(effort),
                Some(replicate),
                Some(time),
                Some(value),
            ) = (site, protocol, date, effort, replicate, time, value)
            else {
                return;
            };
            let s = r.sites.intern(site, line);
            let p = r.protocols.intern(protocol, line);
            let next = r.events.len() as u32;
            let key = (s, date, p, replicate);
            let e = match last_key {
                Some((k, e)) if k == key => e,
                _ => *keys.entry(key).or_insert(next),
            };
            last_key = Some((key, e));
            if e == next {
                r.events.push(RecordEvent {
                    site: s,
                    date,
                    protocol: p,
                    replicate,
                    effort,
                    time: time.clone(),
                    time_line: time.as_ref().map(|_| line),
                    first_line: line,
                    empty_line: None,
                    empty_rows: 0,
                    taxon_line: None,
                });
            }
            let ev = &mut r.events[e as usize];
            if ev.effort != effort {
                row.issue(
                    "effort",
                    format!(
                        "{effort} differs from {} on line {} for the same event (site, date, protocol, replicate); \
                         one event has one effort",
                        ev.effort, ev.first_line
                    ),
                );
                return;
            }
            match (&ev.time, &time) {
                (Some(a), Some(b)) if a != b => {
                    row.issue(
                        "time",
                        format!(
                            "'{b}' differs from '{a}' on line {} for the same event",
                            ev.first_line
                        ),
                    );
                    return;
                }
                (None, Some(_)) => {
                    ev.time = time;
                    ev.time_line = Some(line);
                }
                _ => {}
            }
            match value {
                None => {
                    ev.empty_line.get_or_insert(line);
                    ev.empty_rows += 1;
                }
                Some(value) => {
                    ev.taxon_line.get_or_insert(line);
                    let taxon = r.taxa.intern(taxon, line);
                    r.rows.push(CountRow {
                        line,
                        event: e,
                        taxon,
                        value,
                    });
                }
            }
        },
    );
    // A row saying nothing was found contradicts counts of the same event in the file.
    let mut listed: HashMap<u32, Vec<u64>> = r
        .events
        .iter()
        .enumerate()
        .filter(|(_, ev)| ev.empty_line.is_some() && ev.taxon_line.is_some())
        .map(|(e, _)| (e as u32, Vec::new()))
        .collect();
    if !listed.is_empty() {
        for c in &r.rows {
            if let Some(lines) = listed.get_mut(&c.event) {
                lines.push(c.line);
            }
        }
    }
    for (e, ev) in r.events.iter().enumerate() {
        if let (Some(empty), Some(lines)) = (ev.empty_line, listed.get(&(e as u32))) {
            issues.push(
                empty,
                "taxon",
                format!(
                    "event {} has counts on {}; a row saying nothing was found contradicts them",
                    r.describe(ev),
                    line_list(lines)
                ),
            );
        }
    }
    r
}

impl Records {
    /// An event as the file gives it, for messages: `S08 2016-04-21 kick 1`.
    fn describe(&self, ev: &RecordEvent) -> String {
        format!(
            "{} {} {} {}",
            shorten(&self.sites.names[ev.site as usize]),
            ev.date.text(),
            shorten(&self.protocols.names[ev.protocol as usize]),
            ev.replicate
        )
    }
}

/// "line 4" or "lines 4, 5" (the first ten, then how many more).
fn line_list(lines: &[u64]) -> String {
    const SHOWN: usize = 10;
    let mut s = lines
        .iter()
        .take(SHOWN)
        .map(u64::to_string)
        .collect::<Vec<_>>()
        .join(", ");
    if lines.len() > SHOWN {
        s.push_str(&format!(" and {} more", lines.len() - SHOWN));
    }
    if lines.len() == 1 {
        format!("line {s}")
    } else {
        format!("lines {s}")
    }
}

/// The code of a new event formed from a records file.
fn derived_code(site: &str, date: IsoDate, protocol: &str, replicate: i64) -> String {
    format!("{site}-{}-{protocol}-{replicate}", date.text())
}

/// Import a records file; `None` when problems were found.
pub(crate) fn import_records(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    bytes: &[u8],
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Option<ImportReport>> {
    let rec = parse_records(bytes, opts.delimiter, issues);
    let total = rec.seen;
    let mut created = Vec::new();
    let mut sites = Ids::load(tx, Table::Site)?;
    let protocols = Ids::load(tx, Table::Protocol)?;
    let mut taxa = Ids::load(tx, Table::Taxon)?;
    let site_of = resolve_sites(&rec.sites, &mut sites, opts, "site", issues, &mut created);
    let protocol_of = resolve_protocols(&rec.protocols, &protocols, issues);
    let taxon_of = resolve_taxa(tx, &rec.taxa, &mut taxa, opts, issues, &mut created)?;

    // Events: reuse a stored one with the same key, or number a new one.
    let mut next_event: i64 =
        tx.query_row("SELECT COALESCE(MAX(id), 0) + 1 FROM event", [], |r| {
            r.get(0)
        })?;
    let mut event_of: Vec<Option<i64>> = Vec::with_capacity(rec.events.len());
    let mut new_events: Vec<(i64, String, usize)> = Vec::new();
    let mut stored_events = HashSet::new();
    let mut unchanged = 0;
    {
        let mut by_key = tx.prepare(
            "SELECT id, code, effort, time, import_batch_id FROM event \
             WHERE site_id = ?1 AND date = ?2 AND protocol_id = ?3 AND replicate = ?4",
        )?;
        let mut by_code = tx.prepare("SELECT 1 FROM event WHERE code = ?1")?;
        let mut stored_counts = tx.prepare(
            "SELECT COUNT(*), GROUP_CONCAT(DISTINCT import_batch_id) FROM count WHERE event_id = ?1",
        )?;
        let mut codes = Unique::default();
        for (k, ev) in rec.events.iter().enumerate() {
            let (Some(site), Some(protocol)) =
                (site_of[ev.site as usize], protocol_of[ev.protocol as usize])
            else {
                event_of.push(None);
                continue;
            };
            if !sites.is_new(site) {
                type Stored = (i64, String, f64, Option<String>, Option<i64>);
                let stored: Option<Stored> = by_key
                    .query_row(params![site, ev.date.text(), protocol, ev.replicate], |r| {
                        Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?, r.get(4)?))
                    })
                    .optional()?;
                if let Some((id, code, effort, time, batch)) = stored {
                    if effort != ev.effort {
                        let from = batch.map_or(String::new(), |b| format!(" by batch {b}"));
                        issues.push(
                            ev.first_line,
                            "effort",
                            format!(
                                "event '{}' is already stored{from} with effort {effort}, not {}; \
                                 one event has one effort",
                                shorten(&code),
                                ev.effort
                            ),
                        );
                        event_of.push(None);
                        continue;
                    }
                    // A cumulative file describes a stored event as stored: the
                    // same time of day too (empty when the event has none).
                    if opts.skip_existing && time != ev.time {
                        let from = batch.map_or(String::new(), |b| format!(" by batch {b}"));
                        let shown = |t: &Option<String>| {
                            t.as_deref()
                                .map_or("no time".to_string(), |t| format!("time '{t}'"))
                        };
                        issues.push(
                            ev.time_line.unwrap_or(ev.first_line),
                            "time",
                            format!(
                                "event '{}' is already stored{from} with {}, not {}; \
                                 a cumulative import cannot change a stored event",
                                shorten(&code),
                                shown(&time),
                                shown(&ev.time)
                            ),
                        );
                        event_of.push(None);
                        continue;
                    }
                    // A row saying nothing was found contradicts counts already stored
                    // (counts of the file for the event were reported while parsing).
                    if let (Some(empty), None) = (ev.empty_line, ev.taxon_line) {
                        let (n, batches): (i64, Option<String>) =
                            stored_counts.query_row([id], |r| Ok((r.get(0)?, r.get(1)?)))?;
                        if n > 0 {
                            let by = batches.map_or(String::new(), |b| {
                                let b = b.replace(',', ", ");
                                if b.contains(',') {
                                    format!(" by batches {b}")
                                } else {
                                    format!(" by batch {b}")
                                }
                            });
                            issues.push(
                                empty,
                                "taxon",
                                format!(
                                    "event {} (stored as '{}') has {n} count(s) stored{by}; \
                                     a row saying nothing was found contradicts them",
                                    rec.describe(ev),
                                    shorten(&code)
                                ),
                            );
                            event_of.push(None);
                            continue;
                        }
                        // Nothing found, as stored: these rows add nothing.
                        unchanged += ev.empty_rows;
                    }
                    stored_events.insert(id);
                    event_of.push(Some(id));
                    continue;
                }
            }
            let code = derived_code(
                &rec.sites.names[ev.site as usize],
                ev.date,
                &rec.protocols.names[ev.protocol as usize],
                ev.replicate,
            );
            let taken = by_code.query_row([&code], |_| Ok(())).optional()?.is_some();
            if taken || codes.first(code.clone(), ev.first_line).is_some() {
                issues.push(
                    ev.first_line,
                    "site",
                    format!(
                        "the derived event code '{}' is already used by another event; rename the site or protocol",
                        shorten(&code)
                    ),
                );
                event_of.push(None);
                continue;
            }
            new_events.push((next_event, code, k));
            event_of.push(Some(next_event));
            next_event += 1;
        }
    }
    let counted = Counted {
        total,
        rows: &rec.rows,
        event_of: &event_of,
        taxon_of: &taxon_of,
        taxa: &rec.taxa,
        stored_events: &stored_events,
        unchanged,
        created,
        sites: &sites,
        taxon_ids: &taxa,
    };
    finish_counts(tx, meta, opts, issues, counted, |batch| {
        let mut ins = tx.prepare(
            "INSERT INTO event(id, code, site_id, date, time, protocol_id, effort, replicate, import_batch_id) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
        )?;
        for (id, code, k) in &new_events {
            let ev = &rec.events[*k];
            let site =
                site_of[ev.site as usize].expect("invariant: new events have resolved sites");
            let protocol = protocol_of[ev.protocol as usize]
                .expect("invariant: new events have resolved protocols");
            ins.execute(params![
                id,
                code,
                site,
                ev.date.text(),
                ev.time,
                protocol,
                ev.effort,
                ev.replicate,
                batch
            ])?;
        }
        Ok(new_events.len())
    })
}
