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
    NewCount, check_counts, resolve_protocols, resolve_sites, resolve_taxa, write_counts,
    write_created,
};
use super::{
    BatchMeta, Columns, Ids, ImportKind, ImportOptions, ImportReport, Interner, IsoDate, Table,
    parse_count, parse_date, parse_effort, parse_replicate, parse_time,
};
use crate::store::Result;
use crate::store::sheet::{Issues, Sheet};

/// One parsed row of a records file.
#[derive(Debug, Clone, Copy)]
struct RecordRow {
    line: u64,
    event: u32,
    taxon: Option<u32>,
    value: f64,
}

/// An event formed from records rows.
#[derive(Debug, Clone)]
struct RecordEvent {
    site: u32,
    date: IsoDate,
    protocol: u32,
    replicate: i64,
    effort: f64,
    time: Option<String>,
    first_line: u64,
    /// The line of a row with empty taxon and count (nothing found).
    empty_line: Option<u64>,
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
    rows: Vec<RecordRow>,
    /// Data rows in the file.
    seen: usize,
}

/// Parse a records file (pure): fields checked, rows grouped into events.
fn parse_records(bytes: &[u8], delimiter: Option<u8>, issues: &mut Issues) -> Records {
    let mut r = Records::default();
    let Some(sheet) = Sheet::open(bytes, delimiter, issues) else {
        return r;
    };
    let Some(cols) = Columns::map(&sheet, ImportKind::Records, false, issues) else {
        return r;
    };
    let mut keys: HashMap<(u32, IsoDate, u32, i64), u32> = HashMap::new();
    let mut last_key: Option<((u32, IsoDate, u32, i64), u32)> = None;
    let [
        c_site,
        c_date,
        c_protocol,
        c_effort,
        c_taxon,
        c_count,
        c_replicate,
        c_time,
    ] = [
        "site",
        "date",
        "protocol",
        "effort",
        "taxon",
        "count",
        "replicate",
        "time",
    ]
    .map(|c| cols.idx(c));
    r.seen = sheet.rows(issues, |line, rec, issues| {
        let field = |i| Columns::at(rec, i);
        let site = field(c_site);
        let protocol = field(c_protocol);
        let taxon = field(c_taxon);
        let count = field(c_count);
        let mut ok = true;
        if site.is_empty() {
            issues.push(line, "site", "empty; expected a site code");
            ok = false;
        }
        if protocol.is_empty() {
            issues.push(line, "protocol", "empty; expected a protocol code");
            ok = false;
        }
        let date = parse_date(field(c_date)).map_err(|m| issues.push(line, "date", m));
        let effort = parse_effort(field(c_effort)).map_err(|m| issues.push(line, "effort", m));
        let replicate = parse_replicate(field(c_replicate)).map_err(|m| issues.push(line, "replicate", m));
        let time = parse_time(field(c_time)).map_err(|m| issues.push(line, "time", m));
        let value = match (taxon.is_empty(), count.is_empty()) {
            (true, true) => Ok(None),
            (true, false) => {
                issues.push(line, "taxon", "empty but a count is given; name the taxon, or leave both empty when nothing was found");
                Err(())
            }
            (false, true) => {
                issues.push(line, "count", format!("empty; expected a count ≥ 0 for taxon '{taxon}' (write 0 if none)"));
                Err(())
            }
            (false, false) => parse_count(count).map(Some).map_err(|m| issues.push(line, "count", m)),
        };
        let (Ok(date), Ok(effort), Ok(replicate), Ok(time), Ok(value), true) =
            (date, effort, replicate, time, value, ok)
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
                first_line: line,
                empty_line: None,
                taxon_line: None,
            });
        }
        let ev = &mut r.events[e as usize];
        if ev.effort != effort {
            issues.push(
                line,
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
                issues.push(line, "time", format!("'{b}' differs from '{a}' on line {} for the same event", ev.first_line));
                return;
            }
            (None, Some(_)) => ev.time = time,
            _ => {}
        }
        match value {
            None => {
                ev.empty_line.get_or_insert(line);
            }
            Some(v) => {
                ev.taxon_line.get_or_insert(line);
                let t = r.taxa.intern(taxon, line);
                r.rows.push(RecordRow { line, event: e, taxon: Some(t), value: v });
            }
        }
    });
    for ev in &r.events {
        if let (Some(empty), Some(listed)) = (ev.empty_line, ev.taxon_line) {
            issues.push(
                empty,
                "taxon",
                format!(
                    "empty taxon and count mean nothing was found, but line {listed} lists a taxon for the same event"
                ),
            );
        }
    }
    r
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
    let taxon_of = resolve_taxa(&rec.taxa, &mut taxa, opts, issues, &mut created);

    // Events: reuse a stored one with the same key, or number a new one.
    let mut next_event: i64 =
        tx.query_row("SELECT COALESCE(MAX(id), 0) + 1 FROM event", [], |r| {
            r.get(0)
        })?;
    let mut event_of: Vec<Option<i64>> = Vec::with_capacity(rec.events.len());
    let mut new_events: Vec<(i64, String, usize)> = Vec::new();
    let mut stored_events = HashSet::new();
    {
        let mut by_key = tx.prepare(
            "SELECT id, code, effort, import_batch_id FROM event \
             WHERE site_id = ?1 AND date = ?2 AND protocol_id = ?3 AND replicate = ?4",
        )?;
        let mut by_code = tx.prepare("SELECT 1 FROM event WHERE code = ?1")?;
        let mut codes: HashMap<String, u64> = HashMap::new();
        for (k, ev) in rec.events.iter().enumerate() {
            let (Some(site), Some(protocol)) =
                (site_of[ev.site as usize], protocol_of[ev.protocol as usize])
            else {
                event_of.push(None);
                continue;
            };
            if !sites.is_new(site) {
                let stored: Option<(i64, String, f64, Option<i64>)> = by_key
                    .query_row(params![site, ev.date.text(), protocol, ev.replicate], |r| {
                        Ok((r.get(0)?, r.get(1)?, r.get(2)?, r.get(3)?))
                    })
                    .optional()?;
                if let Some((id, code, effort, batch)) = stored {
                    if effort != ev.effort {
                        let from = batch.map_or(String::new(), |b| format!(" by batch {b}"));
                        issues.push(
                            ev.first_line,
                            "effort",
                            format!(
                                "event '{code}' is already stored{from} with effort {effort}, not {}; \
                                 one event has one effort",
                                ev.effort
                            ),
                        );
                        event_of.push(None);
                    } else {
                        stored_events.insert(id);
                        event_of.push(Some(id));
                    }
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
            if taken || codes.contains_key(&code) {
                issues.push(
                    ev.first_line,
                    "site",
                    format!("the derived event code '{code}' is already used by another event; rename the site or protocol"),
                );
                event_of.push(None);
                continue;
            }
            codes.insert(code.clone(), ev.first_line);
            new_events.push((next_event, code, k));
            event_of.push(Some(next_event));
            next_event += 1;
        }
    }
    let mut counts: Vec<NewCount> = rec
        .rows
        .iter()
        .filter_map(|r| {
            Some(NewCount {
                event: event_of[r.event as usize]?,
                taxon: taxon_of[r.taxon? as usize]?,
                value: r.value,
                line: r.line,
            })
        })
        .collect();
    let names: HashMap<i64, &str> = taxon_of
        .iter()
        .zip(&rec.taxa.names)
        .filter_map(|(id, n)| Some(((*id)?, n.as_str())))
        .collect();
    let name = |id: i64| {
        names
            .get(&id)
            .map_or_else(|| id.to_string(), |n| n.to_string())
    };
    let replaced = check_counts(tx, &mut counts, &stored_events, &name, opts, issues)?;
    if !issues.is_empty() {
        return Ok(None);
    }

    let mut report = meta.insert(tx, total, created, replaced)?;
    let batch = report.batch_id;
    write_created(tx, &sites, &taxa, batch)?;
    {
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
    }
    write_counts(tx, &counts, batch, opts.replace)?;
    report.written = new_events.len();
    report.counts = counts.len();
    Ok(Some(report))
}
