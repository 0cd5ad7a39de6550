//! Small fixture writers for tests and benchmarks: insert sites, protocols,
//! taxa, events and counts with bound parameters, bypassing the importers.
//! Not part of the supported interface.

use super::{Result, Store, StoreError};

fn id_of(store: &Store, table: &'static str, code_col: &str, code: &str) -> Result<i64> {
    // Table and column names are fixed literals of this module, never user text.
    let sql = format!("SELECT id FROM {table} WHERE {code_col} = ?");
    store
        .conn()
        .query_row(&sql, [code], |r| r.get(0))
        .map_err(|_| StoreError::NotFound {
            what: table,
            name: code.to_string(),
        })
}

/// Insert a site with attributes `(key, value)`.
///
/// # Errors
/// SQLite errors (duplicate code, …).
pub fn add_site(store: &Store, code: &str, attributes: &[(&str, &str)]) -> Result<()> {
    store
        .conn()
        .execute("INSERT INTO site(code) VALUES (?)", [code])?;
    let id = store.conn().last_insert_rowid();
    for (k, v) in attributes {
        store.conn().execute(
            "INSERT INTO site_attribute(site_id, key, value) VALUES (?, ?, ?)",
            (id, k, v),
        )?;
    }
    Ok(())
}

/// Insert a protocol with its effort unit.
///
/// # Errors
/// SQLite errors.
pub fn add_protocol(store: &Store, code: &str, effort_unit: &str) -> Result<()> {
    store.conn().execute(
        "INSERT INTO protocol(code, effort_unit) VALUES (?, ?)",
        (code, effort_unit),
    )?;
    Ok(())
}

/// Insert a taxon; `parent` and `accepted` name taxa inserted before.
///
/// # Errors
/// An unknown parent or accepted name; SQLite errors.
pub fn add_taxon(
    store: &Store,
    name: &str,
    rank: &str,
    parent: Option<&str>,
    accepted: Option<&str>,
) -> Result<()> {
    let parent = parent
        .map(|p| id_of(store, "taxon", "name", p))
        .transpose()?;
    let accepted = accepted
        .map(|a| id_of(store, "taxon", "name", a))
        .transpose()?;
    store.conn().execute(
        "INSERT INTO taxon(name, rank, parent_id, accepted_id) VALUES (?, ?, ?, ?)",
        (name, rank, parent, accepted),
    )?;
    Ok(())
}

/// Insert an event (replicate 1).
///
/// # Errors
/// An unknown site or protocol; SQLite errors (bad date, effort ≤ 0, …).
pub fn add_event(
    store: &Store,
    code: &str,
    site: &str,
    date: &str,
    protocol: &str,
    effort: f64,
) -> Result<()> {
    let site = id_of(store, "site", "code", site)?;
    let protocol = id_of(store, "protocol", "code", protocol)?;
    store.conn().execute(
        "INSERT INTO event(code, site_id, date, protocol_id, effort) VALUES (?, ?, ?, ?, ?)",
        (code, site, date, protocol, effort),
    )?;
    Ok(())
}

/// Insert a count of `taxon` (by name) in `event` (by code).
///
/// # Errors
/// An unknown event or taxon; SQLite errors.
pub fn add_count(store: &Store, event: &str, taxon: &str, value: f64) -> Result<()> {
    let e = id_of(store, "event", "code", event)?;
    let t = id_of(store, "taxon", "name", taxon)?;
    store.conn().execute(
        "INSERT INTO count(event_id, taxon_id, value) VALUES (?, ?, ?)",
        (e, t, value),
    )?;
    Ok(())
}
