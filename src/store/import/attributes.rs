//! Importing site attribute histories: `site,key,value,from`.
//!
//! Each row says that from the date `from` (empty: since always) the site's
//! attribute `key` has `value`, until the next value of the key. The rules
//! (docs/data-model.md, "Site attributes that change"):
//!
//! - the site must be stored (an attributes file creates no site);
//! - key and value are not empty; `from` is empty or an ISO 8601 date;
//! - one (site, key, from) once in the file;
//! - a (site, key, from) already stored with the same value is left as it is
//!   (a growing history file can be imported again); with another value the
//!   row is refused: a stored value is corrected with `tally sites set`, which
//!   keeps an audit trail.
//!
//! The values written carry the batch id, so `batches undo` removes them.

use std::collections::HashMap;

use rusqlite::{OptionalExtension, Transaction, params};

use super::{BatchMeta, ImportKind, ImportOptions, ImportReport, Unique, parse_date, parse_rows};
use crate::store::Result;
use crate::store::sheet::{Issues, shorten};

/// One parsed row of an attributes file.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct AttributeRow {
    pub line: u64,
    pub site: String,
    pub key: String,
    pub value: String,
    /// ISO date, or "" for since always (as stored).
    pub from: String,
}

/// Parse an attributes file (pure).
pub(crate) fn parse_attributes(
    bytes: &[u8],
    delimiter: Option<u8>,
    issues: &mut Issues,
) -> Vec<AttributeRow> {
    let mut out = Vec::new();
    let mut seen: Unique<(String, String, String)> = Unique::default();
    parse_rows(
        bytes,
        delimiter,
        ImportKind::Attributes,
        issues,
        |c| ["site", "key", "value", "from"].map(|n| c.col(n)),
        |&[c_site, c_key, c_value, c_from], row| {
            let site = row.required(c_site, "empty; every row names a stored site code");
            let key = row.required(
                c_key,
                "empty; every row names the attribute (status, treatment, ...)",
            );
            let value = row.required(
                c_value,
                "empty; every row gives the value that holds from its date",
            );
            let from = match row.get(c_from) {
                "" => Some(String::new()),
                _ => row.parse(c_from, parse_date).map(|d| d.text()),
            };
            let (Some(site), Some(key), Some(value), Some(from)) = (site, key, value, from) else {
                return;
            };
            let k = (site.to_string(), key.to_string(), from.clone());
            if let Some(first) = seen.first(k, row.line) {
                let when = if from.is_empty() {
                    "since always".to_string()
                } else {
                    format!("from {from}")
                };
                row.issue(
                    "from",
                    format!(
                        "site '{}' has a value of '{}' {when} twice (first on line {first}); \
                         one value holds from one date",
                        shorten(site),
                        shorten(key)
                    ),
                );
                return;
            }
            out.push(AttributeRow {
                line: row.line,
                site: site.to_string(),
                key: key.to_string(),
                value: value.to_string(),
                from,
            });
        },
    );
    out
}

/// Import an attributes file; `None` when problems were found.
pub(crate) fn import_attributes(
    tx: &Transaction<'_>,
    meta: &BatchMeta,
    bytes: &[u8],
    opts: &ImportOptions,
    issues: &mut Issues,
) -> Result<Option<ImportReport>> {
    let rows = parse_attributes(bytes, opts.delimiter, issues);
    let total = rows.len();
    let mut fresh: Vec<(i64, AttributeRow)> = Vec::new();
    let mut unchanged = 0;
    {
        let mut site_id = tx.prepare("SELECT id FROM site WHERE code = ?1")?;
        let mut stored = tx.prepare(
            "SELECT value, import_batch_id FROM site_attribute \
             WHERE site_id = ?1 AND key = ?2 AND valid_from = ?3",
        )?;
        let mut ids: HashMap<String, Option<i64>> = HashMap::new();
        for row in rows {
            let id = match ids.get(&row.site) {
                Some(id) => *id,
                None => {
                    let id: Option<i64> =
                        site_id.query_row([&row.site], |r| r.get(0)).optional()?;
                    ids.insert(row.site.clone(), id);
                    id
                }
            };
            let Some(id) = id else {
                issues.push(
                    row.line,
                    "site",
                    format!(
                        "no site '{}' is stored; import the sites file first (an attributes file creates no site)",
                        shorten(&row.site)
                    ),
                );
                continue;
            };
            let existing: Option<(String, Option<i64>)> = stored
                .query_row(params![id, row.key, row.from], |r| {
                    Ok((r.get(0)?, r.get(1)?))
                })
                .optional()?;
            match existing {
                None => fresh.push((id, row)),
                Some((v, _)) if v == row.value => unchanged += 1,
                Some((v, batch)) => {
                    let when = if row.from.is_empty() {
                        "since always".to_string()
                    } else {
                        format!("from {}", row.from)
                    };
                    let source = batch.map_or(String::new(), |b| format!(" (batch {b})"));
                    issues.push(
                        row.line,
                        "value",
                        format!(
                            "site '{}' already has {} = '{}' {when}{source}; an import does not change \
                             a stored value: correct it with `tally sites set {} {}=VALUE{} --reason ...`",
                            shorten(&row.site),
                            shorten(&row.key),
                            shorten(&v),
                            shorten(&row.site),
                            shorten(&row.key),
                            if row.from.is_empty() {
                                String::new()
                            } else {
                                format!(" --from {}", row.from)
                            }
                        ),
                    );
                }
            }
        }
    }
    if !issues.is_empty() {
        return Ok(None);
    }
    let mut report = meta.insert(tx, total, Vec::new(), Vec::new())?;
    let mut insert = tx.prepare(
        "INSERT INTO site_attribute(site_id, key, valid_from, value, import_batch_id) \
         VALUES (?1, ?2, ?3, ?4, ?5)",
    )?;
    for (id, row) in &fresh {
        insert.execute(params![id, row.key, row.from, row.value, report.batch_id])?;
    }
    report.written = fresh.len();
    report.unchanged = unchanged;
    Ok(Some(report))
}
