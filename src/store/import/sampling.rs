//! Importing sampling data: events and counts files, and the helpers the
//! records format shares with them (name resolution, count checks and writes).
//!
//! Counts are written sorted by (event, taxon), the order of the count table's
//! primary key, several hundred rows per prepared INSERT.

use std::collections::{HashMap, HashSet};

use rusqlite::{OptionalExtension, Transaction, params};

use super::{
    BatchMeta, Columns, Ids, ImportKind, ImportOptions, ImportReport, Interner, IsoDate, Replaced,
    Table, parse_count, parse_date, parse_effort, parse_replicate, parse_time,
};
use crate::store::Result;
use crate::store::sheet::{Issues, Sheet};

/// The message for a protocol the store does not know.
fn unknown_protocol(code: &str, more: &str) -> String {
    format!(
        "protocol '{code}' is not in the store{more}; import it first with `tally import protocols` \
         (it cannot be created with --create-missing because a protocol needs an effort unit)"
    )
}

fn unknown_site(code: &str, more: &str) -> String {
    format!("site '{code}' is not in the store{more}; import it first, or use --create-missing")
}

fn unknown_taxon(name: &str, more: &str) -> String {
    format!("taxon '{name}' is not in the store{more}; import it first, or use --create-missing")
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

pub(super) fn resolve_taxa(
    names: &Interner,
    ids: &mut Ids,
    opts: &ImportOptions,
    issues: &mut Issues,
    created: &mut Vec<String>,
) -> Vec<Option<i64>> {
    (0..names.names.len() as u32)
        .map(|i| {
            let name = &names.names[i as usize];
            match ids.get(name) {
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
        .collect()
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
pub(super) fn write_created(
    tx: &Transaction<'_>,
    sites: &Ids,
    taxa: &Ids,
    batch: i64,
) -> Result<()> {
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
pub(super) struct NewCount {
    pub(super) event: i64,
    pub(super) taxon: i64,
    pub(super) value: f64,
    pub(super) line: u64,
}

/// Sort `counts` by (event, taxon), report pairs listed twice in the file, and
/// compare with counts already stored for `stored_events`: a conflict is an
/// issue unless `replace`, in which case the old value is returned for the batch notes.
pub(super) fn check_counts(
    tx: &Transaction<'_>,
    counts: &mut [NewCount],
    stored_events: &HashSet<i64>,
    taxon_name: &dyn Fn(i64) -> String,
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Vec<Replaced>> {
    counts.sort_unstable_by_key(|c| (c.event, c.taxon, c.line));
    for w in counts.windows(2) {
        if w[0].event == w[1].event && w[0].taxon == w[1].taxon {
            issues.push(
                w[1].line,
                "taxon",
                format!(
                    "taxon '{}' is listed twice for the same event (first on line {})",
                    taxon_name(w[1].taxon),
                    w[0].line
                ),
            );
        }
    }
    let mut replaced = Vec::new();
    if stored_events.is_empty() {
        return Ok(replaced);
    }
    let mut stmt = tx.prepare(
        "SELECT value, import_batch_id FROM count WHERE event_id = ?1 AND taxon_id = ?2",
    )?;
    for c in counts.iter().filter(|c| stored_events.contains(&c.event)) {
        let old: Option<(f64, Option<i64>)> = stmt
            .query_row(params![c.event, c.taxon], |r| Ok((r.get(0)?, r.get(1)?)))
            .optional()?;
        let Some((value, batch)) = old else { continue };
        if opts.replace {
            replaced.push(Replaced {
                event: c.event,
                taxon: c.taxon,
                value,
                batch,
            });
        } else {
            let from = batch.map_or(String::new(), |b| format!(" by batch {b}"));
            issues.push(
                c.line,
                "taxon",
                format!(
                    "a count of '{}' for this event is already stored{from} (value {value}); \
                     use --replace to overwrite it",
                    taxon_name(c.taxon)
                ),
            );
        }
    }
    Ok(replaced)
}

/// Rows per multi-row INSERT when writing counts (4 parameters each).
pub(super) const COUNT_CHUNK: usize = 512;

/// Write counts (sorted by (event, taxon)) with a prepared multi-row INSERT
/// reused for every full chunk of [`COUNT_CHUNK`] rows, and one for the rest.
pub(super) fn write_counts(
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
    let Some(sheet) = Sheet::open(bytes, delimiter, issues) else {
        return out;
    };
    let Some(cols) = Columns::map(&sheet, ImportKind::Events, false, issues) else {
        return out;
    };
    let mut codes: HashMap<String, u64> = HashMap::new();
    let mut keys: HashMap<(String, IsoDate, String, i64), u64> = HashMap::new();
    sheet.rows(issues, |line, rec, issues| {
        let mut ok = true;
        let mut need = |col: &str, what: &str, issues: &mut Issues| {
            let v = cols.get(rec, col);
            if v.is_empty() {
                issues.push(line, col, format!("empty; every event needs {what}"));
                ok = false;
            }
            v
        };
        let code = need("code", "a code", issues);
        let site = need("site", "a site code", issues);
        let protocol = need("protocol", "a protocol code", issues);
        let date = parse_date(cols.get(rec, "date")).map_err(|m| issues.push(line, "date", m));
        let effort = parse_effort(cols.get(rec, "effort")).map_err(|m| issues.push(line, "effort", m));
        let time = parse_time(cols.get(rec, "time")).map_err(|m| issues.push(line, "time", m));
        let replicate = parse_replicate(cols.get(rec, "replicate")).map_err(|m| issues.push(line, "replicate", m));
        let (Ok(date), Ok(effort), Ok(time), Ok(replicate), true) = (date, effort, time, replicate, ok) else {
            return;
        };
        if let Some(first) = codes.get(code) {
            issues.push(line, "code", format!("event '{code}' is listed twice (first on line {first})"));
            return;
        }
        codes.insert(code.to_string(), line);
        let key = (site.to_string(), date, protocol.to_string(), replicate);
        if let Some(first) = keys.get(&key) {
            issues.push(
                line,
                "replicate",
                format!("line {first} has the same site, date, protocol and replicate; give a different replicate"),
            );
            return;
        }
        keys.insert(key, line);
        out.push(EventRow {
            line,
            code: code.to_string(),
            site: site.to_string(),
            date,
            protocol: protocol.to_string(),
            effort,
            time,
            replicate,
            notes: cols.get(rec, "notes").to_string(),
        });
    });
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
                let same = s.0 == row.site
                    && s.1 == row.date.text()
                    && s.2 == row.protocol
                    && s.3 == row.effort
                    && s.4 == row.time
                    && s.5 == row.replicate
                    && s.6 == row.notes;
                if same {
                    unchanged += 1;
                } else {
                    issues.push(
                        row.line,
                        "code",
                        super::reference::already_stored("event", &row.code, s.7),
                    );
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
                        "event '{other}' is already stored for this site, date, protocol and replicate; \
                         give a different replicate"
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
    write_created(tx, &sites, &Ids::empty(), report.batch_id)?;
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

/// One parsed row of a counts file.
#[derive(Debug, Clone, Copy)]
struct CountRow {
    line: u64,
    event: u32,
    taxon: u32,
    value: f64,
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
    if let Some(sheet) = Sheet::open(bytes, opts.delimiter, issues)
        && let Some(cols) = Columns::map(&sheet, ImportKind::Counts, false, issues)
    {
        sheet.rows(issues, |line, rec, issues| {
            let event = cols.get(rec, "event");
            let taxon = cols.get(rec, "taxon");
            if event.is_empty() {
                issues.push(line, "event", "empty; expected an event code");
            }
            if taxon.is_empty() {
                issues.push(line, "taxon", "empty; expected a taxon name");
            }
            let value =
                parse_count(cols.get(rec, "count")).map_err(|m| issues.push(line, "count", m));
            if let (Ok(value), false, false) = (value, event.is_empty(), taxon.is_empty()) {
                rows.push(CountRow {
                    line,
                    event: events.intern(event, line),
                    taxon: taxa.intern(taxon, line),
                    value,
                });
            }
        });
    }
    let total = rows.len();
    let mut created = Vec::new();
    let mut taxon_ids = Ids::load(tx, Table::Taxon)?;
    let taxon_of = resolve_taxa(&taxa, &mut taxon_ids, opts, issues, &mut created);
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
                        "event '{code}' is not in the store{}; import the events file first",
                        events.more_rows(i as u32)
                    ),
                );
            }
            event_of.push(id);
        }
    }
    let mut counts: Vec<NewCount> = rows
        .iter()
        .filter_map(|r| {
            Some(NewCount {
                event: event_of[r.event as usize]?,
                taxon: taxon_of[r.taxon as usize]?,
                value: r.value,
                line: r.line,
            })
        })
        .collect();
    let stored_events: HashSet<i64> = event_of.iter().flatten().copied().collect();
    let names: HashMap<i64, &str> = taxon_of
        .iter()
        .zip(&taxa.names)
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
    write_created(tx, &Ids::empty(), &taxon_ids, report.batch_id)?;
    write_counts(tx, &counts, report.batch_id, opts.replace)?;
    report.counts = counts.len();
    Ok(Some(report))
}
