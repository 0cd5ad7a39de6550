//! Importing the reference lists: sites (with attributes), protocols and taxa.
//!
//! A row identical to a stored one is left alone (so a growing list can be
//! imported again); a row whose key is stored with other values is an error,
//! because changing a site, protocol or taxon in place would alter data of
//! earlier batches.

use std::collections::{HashMap, HashSet};

use rusqlite::{Transaction, params};

use super::{
    BatchMeta, Ids, ImportKind, ImportOptions, ImportReport, Table, Unique, parse_coordinate,
    parse_rows, shorten,
};
use crate::store::Result;
use crate::store::sheet::Issues;
use crate::store::taxa::codes::{name_is_code, parse_code};
use crate::store::taxa::integrity::{Node, ProblemKind, Taxonomy};
use crate::store::taxa::load_taxonomy;

/// One parsed row of a sites file.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct SiteRow {
    pub line: u64,
    pub code: String,
    pub name: String,
    pub latitude: Option<f64>,
    pub longitude: Option<f64>,
    /// Attribute (key, value) pairs with a non-empty value, sorted by key.
    pub attributes: Vec<(String, String)>,
}

/// Parse a sites file (pure).
pub(crate) fn parse_sites(
    bytes: &[u8],
    delimiter: Option<u8>,
    issues: &mut Issues,
) -> Vec<SiteRow> {
    let mut out = Vec::new();
    let mut seen = Unique::default();
    parse_rows(
        bytes,
        delimiter,
        ImportKind::Sites,
        issues,
        |c| {
            let [code, name, latitude, longitude] =
                ["code", "name", "latitude", "longitude"].map(|n| c.col(n));
            (code, name, latitude, longitude, c.extra.clone())
        },
        |(c_code, c_name, c_lat, c_lon, extra), row| {
            let code = row.get(*c_code);
            let mut ok = true;
            if code.is_empty() {
                row.issue("code", "empty; every site needs a code");
                ok = false;
            } else if !seen.once(row, "code", "site", code) {
                ok = false;
            }
            let latitude = row.parse(*c_lat, |s| parse_coordinate(s, "latitude", 90.0));
            let longitude = row.parse(*c_lon, |s| parse_coordinate(s, "longitude", 180.0));
            let (Some(latitude), Some(longitude), true) = (latitude, longitude, ok) else {
                return;
            };
            let mut attributes: Vec<(String, String)> = extra
                .iter()
                .filter_map(|(i, key)| {
                    Some(row.at(Some(*i)))
                        .filter(|v| !v.is_empty())
                        .map(|v| (key.clone(), v.to_string()))
                })
                .collect();
            attributes.sort();
            out.push(SiteRow {
                line: row.line,
                code: code.to_string(),
                name: row.get(*c_name).to_string(),
                latitude,
                longitude,
                attributes,
            });
        },
    );
    out
}

/// Import a sites file; `None` when problems were found.
pub(crate) fn import_sites(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    bytes: &[u8],
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Option<ImportReport>> {
    let rows = parse_sites(bytes, opts.delimiter, issues);
    let total = rows.len();
    let mut fresh = Vec::new();
    let mut unchanged = 0;
    {
        let mut find = tx.prepare(
            "SELECT id, name, latitude, longitude, import_batch_id FROM site WHERE code = ?1",
        )?;
        let mut attrs =
            tx.prepare(
                "SELECT key, value FROM site_attribute WHERE site_id = ?1 AND valid_from = '' ORDER BY key",
            )?;
        for row in rows {
            let stored = find
                .query_row([&row.code], |r| {
                    Ok((
                        r.get::<_, i64>(0)?,
                        r.get::<_, String>(1)?,
                        r.get::<_, Option<f64>>(2)?,
                        r.get::<_, Option<f64>>(3)?,
                        r.get::<_, Option<i64>>(4)?,
                    ))
                })
                .map(Some)
                .or_else(|e| {
                    if e == rusqlite::Error::QueryReturnedNoRows {
                        Ok(None)
                    } else {
                        Err(e)
                    }
                })?;
            let Some((id, name, lat, lon, batch)) = stored else {
                fresh.push(row);
                continue;
            };
            let stored_attrs: Vec<(String, String)> = attrs
                .query_map([id], |r| Ok((r.get(0)?, r.get(1)?)))?
                .collect::<rusqlite::Result<_>>()?;
            if name == row.name
                && lat == row.latitude
                && lon == row.longitude
                && stored_attrs == row.attributes
            {
                unchanged += 1;
            } else {
                issues.push(row.line, "code", already_stored("site", &row.code, batch));
            }
        }
    }
    if !issues.is_empty() {
        return Ok(None);
    }
    let mut report = meta.insert(tx, total, Vec::new(), Vec::new())?;
    let next: i64 = tx.query_row("SELECT COALESCE(MAX(id), 0) + 1 FROM site", [], |r| {
        r.get(0)
    })?;
    let mut site = tx.prepare(
        "INSERT INTO site(id, code, name, latitude, longitude, import_batch_id) VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
    )?;
    let mut attr =
        tx.prepare("INSERT INTO site_attribute(site_id, key, value) VALUES (?1, ?2, ?3)")?;
    for (k, row) in fresh.iter().enumerate() {
        let id = next + k as i64;
        site.execute(params![
            id,
            row.code,
            row.name,
            row.latitude,
            row.longitude,
            report.batch_id
        ])?;
        for (key, value) in &row.attributes {
            attr.execute(params![id, key, value])?;
        }
    }
    report.written = fresh.len();
    report.unchanged = unchanged;
    Ok(Some(report))
}

pub(super) fn already_stored(what: &str, key: &str, batch: Option<i64>) -> String {
    let from = batch.map_or(String::new(), |b| format!(" (batch {b})"));
    format!(
        "{what} '{}' is already stored{from} with other values; an import cannot change it \
         (undo that batch first, or leave the row as stored)",
        shorten(key)
    )
}

/// One parsed row of a protocols file.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ProtocolRow {
    pub line: u64,
    pub code: String,
    pub description: String,
    pub effort_unit: String,
}

/// Parse a protocols file (pure).
pub(crate) fn parse_protocols(
    bytes: &[u8],
    delimiter: Option<u8>,
    issues: &mut Issues,
) -> Vec<ProtocolRow> {
    let mut out = Vec::new();
    let mut seen = Unique::default();
    parse_rows(
        bytes,
        delimiter,
        ImportKind::Protocols,
        issues,
        |c| ["code", "description", "effort_unit"].map(|n| c.col(n)),
        |&[c_code, c_description, c_unit], row| {
            let code = row.get(c_code);
            let mut ok = true;
            if code.is_empty() {
                row.issue("code", "empty; every protocol needs a code");
                ok = false;
            } else if !seen.once(row, "code", "protocol", code) {
                ok = false;
            }
            let unit = row.required(
                c_unit,
                "empty; every protocol needs an effort unit (minutes, m2, traps...)",
            );
            if let (Some(unit), true) = (unit, ok) {
                out.push(ProtocolRow {
                    line: row.line,
                    code: code.to_string(),
                    description: row.get(c_description).to_string(),
                    effort_unit: unit.to_string(),
                });
            }
        },
    );
    out
}

/// Import a protocols file; `None` when problems were found.
pub(crate) fn import_protocols(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    bytes: &[u8],
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Option<ImportReport>> {
    let rows = parse_protocols(bytes, opts.delimiter, issues);
    let total = rows.len();
    let mut fresh = Vec::new();
    let mut unchanged = 0;
    {
        let mut find = tx.prepare(
            "SELECT description, effort_unit, import_batch_id FROM protocol WHERE code = ?1",
        )?;
        for row in rows {
            let stored = find
                .query_row([&row.code], |r| {
                    Ok((
                        r.get::<_, String>(0)?,
                        r.get::<_, String>(1)?,
                        r.get::<_, Option<i64>>(2)?,
                    ))
                })
                .map(Some)
                .or_else(|e| {
                    if e == rusqlite::Error::QueryReturnedNoRows {
                        Ok(None)
                    } else {
                        Err(e)
                    }
                })?;
            match stored {
                None => fresh.push(row),
                Some((d, u, _)) if d == row.description && u == row.effort_unit => unchanged += 1,
                Some((_, _, batch)) => issues.push(
                    row.line,
                    "code",
                    already_stored("protocol", &row.code, batch),
                ),
            }
        }
    }
    if !issues.is_empty() {
        return Ok(None);
    }
    let mut report = meta.insert(tx, total, Vec::new(), Vec::new())?;
    let mut ins = tx.prepare(
        "INSERT INTO protocol(code, description, effort_unit, import_batch_id) VALUES (?1, ?2, ?3, ?4)",
    )?;
    for row in &fresh {
        ins.execute(params![
            row.code,
            row.description,
            row.effort_unit,
            report.batch_id
        ])?;
    }
    report.written = fresh.len();
    report.unchanged = unchanged;
    Ok(Some(report))
}

/// One parsed row of a taxa file.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct TaxonRow {
    pub line: u64,
    pub name: String,
    pub rank: String,
    pub parent: Option<String>,
    pub accepted: Option<String>,
    /// A field code (upper case), if the row gives one.
    pub code: Option<String>,
}

/// Parse a taxa file (pure): forms only; names are checked against the store later.
pub(crate) fn parse_taxa(
    bytes: &[u8],
    delimiter: Option<u8>,
    issues: &mut Issues,
) -> Vec<TaxonRow> {
    let mut out = Vec::new();
    let mut seen = Unique::default();
    let mut seen_codes = Unique::default();
    parse_rows(
        bytes,
        delimiter,
        ImportKind::Taxa,
        issues,
        |c| ["name", "rank", "parent", "accepted", "code"].map(|n| c.col(n)),
        |&[c_name, c_rank, c_parent, c_accepted, c_code], row| {
            let Some(name) = row.required(c_name, "empty; every taxon needs a name") else {
                return;
            };
            if !seen.once(row, "name", "taxon", name) {
                return;
            }
            let code = match row.get(c_code) {
                "" => None,
                text => match parse_code(text) {
                    Ok(code) if seen_codes.once(row, "code", "field code", &code) => Some(code),
                    Ok(_) => return,
                    Err(why) => {
                        row.issue("code", why);
                        return;
                    }
                },
            };
            let opt = |c| Some(row.get(c).to_string()).filter(|s| !s.is_empty());
            let (parent, accepted) = (opt(c_parent), opt(c_accepted));
            if parent.as_deref() == Some(name) {
                row.issue(
                    "parent",
                    format!("'{}' cannot be its own parent", shorten(name)),
                );
                return;
            }
            if accepted.as_deref() == Some(name) {
                row.issue(
                    "accepted",
                    format!(
                        "'{}' cannot be its own accepted name; leave it empty",
                        shorten(name)
                    ),
                );
                return;
            }
            out.push(TaxonRow {
                line: row.line,
                name: name.to_string(),
                rank: row.get(c_rank).to_string(),
                parent,
                accepted,
                code,
            });
        },
    );
    out
}

/// A taxon as stored, by name.
struct StoredTaxon {
    rank: String,
    parent: Option<String>,
    accepted: Option<String>,
    batch: Option<i64>,
}

/// Import a taxa file; `None` when problems were found.
pub(crate) fn import_taxa(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    bytes: &[u8],
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Option<ImportReport>> {
    let rows = parse_taxa(bytes, opts.delimiter, issues);
    let total = rows.len();
    let mut stored: HashMap<String, StoredTaxon> = HashMap::new();
    {
        let mut stmt = tx.prepare(
            "SELECT t.name, t.rank, p.name, a.name, t.import_batch_id FROM taxon t \
             LEFT JOIN taxon p ON p.id = t.parent_id LEFT JOIN taxon a ON a.id = t.accepted_id",
        )?;
        let mut q = stmt.query([])?;
        while let Some(r) = q.next()? {
            stored.insert(
                r.get(0)?,
                StoredTaxon {
                    rank: r.get(1)?,
                    parent: r.get(2)?,
                    accepted: r.get(3)?,
                    batch: r.get(4)?,
                },
            );
        }
    }
    // Stored codes: code -> (taxon name, batch).
    let stored_codes: HashMap<String, (String, Option<i64>)> = {
        let mut stmt = tx.prepare(
            "SELECT c.code, t.name, c.import_batch_id FROM taxon_code c \
             JOIN taxon t ON t.id = c.taxon_id",
        )?;
        stmt.query_map([], |r| Ok((r.get(0)?, (r.get(1)?, r.get(2)?))))?
            .collect::<rusqlite::Result<_>>()?
    };
    // Rows already stored identically are dropped (a row giving a new code of
    // a stored taxon adds only the code); conflicting ones are errors.
    let mut fresh: Vec<TaxonRow> = Vec::new();
    let mut code_only: Vec<TaxonRow> = Vec::new();
    let mut unchanged = 0;
    for row in rows {
        match stored.get(&row.name) {
            None => fresh.push(row),
            Some(s)
                if s.rank == row.rank && s.parent == row.parent && s.accepted == row.accepted =>
            {
                match &row.code {
                    Some(c) if stored_codes.get(c).is_none_or(|(t, _)| *t != row.name) => {
                        code_only.push(row)
                    }
                    _ => unchanged += 1,
                }
            }
            Some(s) => issues.push(
                row.line,
                "name",
                already_stored("taxon", &row.name, s.batch),
            ),
        }
    }
    let in_file: HashMap<&str, &TaxonRow> = fresh.iter().map(|r| (r.name.as_str(), r)).collect();
    let known = |n: &str| in_file.contains_key(n) || stored.contains_key(n);
    // Names referred to but unknown: created on request.
    let mut created_names: Vec<String> = Vec::new();
    let mut created_set: HashSet<String> = HashSet::new();
    for row in &fresh {
        for (col, target) in [("parent", &row.parent), ("accepted", &row.accepted)] {
            let Some(t) = target else { continue };
            if known(t) || created_set.contains(t) {
                continue;
            }
            if let Some((owner, _)) = parse_code(t).ok().and_then(|c| stored_codes.get(&c)) {
                issues.push(
                    row.line,
                    col,
                    format!(
                        "'{}' is a field code of '{}'; this column takes names (write '{}')",
                        shorten(t),
                        shorten(owner),
                        shorten(owner)
                    ),
                );
                continue;
            }
            if opts.create_missing {
                created_set.insert(t.clone());
                created_names.push(t.clone());
            } else {
                issues.push(
                    row.line,
                    col,
                    format!(
                        "taxon '{}' is neither in this file nor in the store (add it, or use --create-missing)",
                        shorten(t)
                    ),
                );
            }
        }
    }
    // The accepted name of a synonym must itself be accepted.
    let accepted_of = |n: &str| -> Option<String> {
        in_file
            .get(n)
            .map(|r| r.accepted.clone())
            .unwrap_or_else(|| stored.get(n).and_then(|s| s.accepted.clone()))
    };
    for row in &fresh {
        if let Some(a) = &row.accepted
            && let Some(aa) = accepted_of(a)
        {
            issues.push(
                row.line,
                "accepted",
                format!(
                    "'{}' is itself a synonym of '{aa}'; a synonym must point at an accepted name ('{aa}')",
                    shorten(a),
                    aa = shorten(&aa)
                ),
            );
        }
    }
    // Parent chains must end: follow each new row's chain through file and store.
    let parent_of = |n: &str| -> Option<String> {
        in_file
            .get(n)
            .map(|r| r.parent.clone())
            .unwrap_or_else(|| stored.get(n).and_then(|s| s.parent.clone()))
    };
    let mut in_cycle: HashSet<String> = HashSet::new();
    for row in &fresh {
        if in_cycle.contains(&row.name) {
            continue;
        }
        let mut chain = vec![row.name.clone()];
        let mut cur = row.parent.clone();
        while let Some(p) = cur {
            if p == row.name {
                chain.push(p);
                issues.push(
                    row.line,
                    "parent",
                    format!(
                        "the parent chain loops: {}",
                        chain
                            .iter()
                            .map(|n| shorten(n))
                            .collect::<Vec<_>>()
                            .join(" → ")
                    ),
                );
                in_cycle.extend(chain);
                break;
            }
            if chain.contains(&p) || chain.len() > in_file.len() + stored.len() + 1 {
                break; // a loop not through this row; reported at its own members
            }
            chain.push(p.clone());
            cur = parent_of(&p);
        }
    }
    code_issues(&fresh, &code_only, &stored, &stored_codes, issues);
    // The rules `tally check` applies (loops through synonyms, rank order),
    // tried on the stored taxonomy with this file's rows added.
    if issues.is_empty() {
        taxonomy_issues(tx, &fresh, &created_names, issues)?;
    }
    if !issues.is_empty() {
        return Ok(None);
    }
    let created: Vec<String> = created_names.iter().map(|n| format!("taxon {n}")).collect();
    let mut report = meta.insert(tx, total, created, Vec::new())?;
    let mut ins =
        tx.prepare("INSERT INTO taxon(name, rank, import_batch_id) VALUES (?1, ?2, ?3)")?;
    for name in &created_names {
        ins.execute(params![name, "", report.batch_id])?;
    }
    for row in &fresh {
        ins.execute(params![row.name, row.rank, report.batch_id])?;
    }
    let ids = Ids::load(tx, Table::Taxon)?;
    let id = |n: &str| {
        ids.get(n)
            .expect("invariant: every referenced taxon was inserted or stored above")
    };
    let mut link = tx.prepare("UPDATE taxon SET parent_id = ?2, accepted_id = ?3 WHERE id = ?1")?;
    for row in &fresh {
        if row.parent.is_some() || row.accepted.is_some() {
            link.execute(params![
                id(&row.name),
                row.parent.as_deref().map(id),
                row.accepted.as_deref().map(id)
            ])?;
        }
    }
    let mut code =
        tx.prepare("INSERT INTO taxon_code(code, taxon_id, import_batch_id) VALUES (?1, ?2, ?3)")?;
    for row in fresh.iter().chain(&code_only) {
        if let Some(c) = &row.code {
            code.execute(params![c, id(&row.name), report.batch_id])?;
            report.codes += 1;
        }
    }
    report.written = fresh.len() + created_names.len();
    report.unchanged = unchanged;
    Ok(Some(report))
}

/// The field-code problems of a taxa file (docs/taxonomy.md, "Field codes"):
/// a code that is another taxon's code already, a code that reads like a
/// taxon name (stored or in the file), and a new name that reads like a
/// stored code.
fn code_issues(
    fresh: &[TaxonRow],
    code_only: &[TaxonRow],
    stored: &HashMap<String, StoredTaxon>,
    stored_codes: &HashMap<String, (String, Option<i64>)>,
    issues: &mut Issues,
) {
    let mut names: HashMap<String, &str> = stored
        .keys()
        .map(|n| (n.to_ascii_uppercase(), n.as_str()))
        .collect();
    for row in fresh {
        names.insert(row.name.to_ascii_uppercase(), &row.name);
        if let Ok(c) = parse_code(&row.name)
            && let Some((owner, _)) = stored_codes.get(&c)
        {
            issues.push(row.line, "name", name_is_code(&row.name, &c, owner));
        }
    }
    for row in fresh.iter().chain(code_only) {
        let Some(code) = &row.code else { continue };
        if let Some((owner, batch)) = stored_codes.get(code)
            && *owner != row.name
        {
            let from = batch.map_or(String::new(), |b| format!(" (batch {b})"));
            issues.push(
                row.line,
                "code",
                format!(
                    "{code} is the code of '{}' already{from}; a code stands for one taxon \
                     (use another code, or remove it there first with `tally taxa code`)",
                    shorten(owner)
                ),
            );
        } else if let Some(name) = names.get(code) {
            issues.push(
                row.line,
                "code",
                format!(
                    "{code} reads like the taxon name '{}'; a code must not equal a name \
                     (choose another code)",
                    shorten(name)
                ),
            );
        }
    }
}

/// The problems the new rows would add to the stored taxonomy, each reported at
/// the first new row of its chain.
pub(crate) fn taxonomy_issues(
    tx: &Transaction<'_>,
    fresh: &[TaxonRow],
    created: &[String],
    issues: &mut Issues,
) -> Result<()> {
    let before = load_taxonomy(tx)?;
    let mut ids: HashMap<&str, i64> = before.nodes().map(|n| (n.name.as_str(), n.id)).collect();
    let mut lines: HashMap<i64, u64> = HashMap::new();
    // New taxa get ids below every stored one, for the copy only.
    let mut next = before.nodes().map(|n| n.id).min().unwrap_or(0).min(0) - 1;
    for name in created {
        ids.insert(name, next);
        next -= 1;
    }
    for row in fresh {
        ids.insert(&row.name, next);
        lines.insert(next, row.line);
        next -= 1;
    }
    let mut nodes: Vec<Node> = before.nodes().cloned().collect();
    nodes.extend(created.iter().map(|name| Node {
        id: ids[name.as_str()],
        name: name.clone(),
        rank: String::new(),
        parent: None,
        accepted: None,
    }));
    nodes.extend(fresh.iter().map(|row| Node {
        id: ids[row.name.as_str()],
        name: row.name.clone(),
        rank: row.rank.clone(),
        parent: row.parent.as_deref().and_then(|p| ids.get(p).copied()),
        accepted: row.accepted.as_deref().and_then(|a| ids.get(a).copied()),
    }));
    for p in before.new_problems(&Taxonomy::new(nodes)) {
        let line = p
            .taxa()
            .iter()
            .find_map(|id| lines.get(id))
            .copied()
            .unwrap_or(0);
        let column = match p.kind {
            ProblemKind::SynonymLoop | ProblemKind::SynonymOfSynonym => "accepted",
            ProblemKind::ParentLoop | ProblemKind::RankOrder => "parent",
        };
        issues.push(line, column, p.to_string());
    }
    Ok(())
}
