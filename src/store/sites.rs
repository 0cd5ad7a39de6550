//! Sites as they are and as they were: listings, attribute histories, and
//! corrections with an audit trail.
//!
//! A site attribute value holds from a date (`valid_from`, "" for since
//! always) until the next value of its key (migration V6). Corrections made
//! with `tally sites set` (a name, coordinates, an attribute value from a
//! date) are recorded in `site_change` with the value they replaced and the
//! reason given, and `tally sites undo` reverses one. None of this rewrites
//! an event or a count. Rules in
//! docs/data-model.md, "Site attributes that change".

use std::collections::BTreeMap;

use rusqlite::{Connection, OptionalExtension, Transaction, TransactionBehavior, params};
use serde::Serialize;
use serde_json::{Value, json};

use super::import::parse_date;
use super::sheet::{FieldKind, clean_field};
use super::taxa::{now, require_reason};
use super::{Result, Store, StoreError};
use crate::matrix::assemble::{AttributeValue, History};

/// One site as listed.
#[derive(Debug, Clone, Serialize)]
pub struct SiteSummary {
    /// Site code.
    pub code: String,
    /// Name ("" when none).
    pub name: String,
    /// Latitude (WGS84 degrees).
    pub latitude: Option<f64>,
    /// Longitude (WGS84 degrees).
    pub longitude: Option<f64>,
    /// The latest value of each attribute key (the one in force from its date on).
    pub attributes: BTreeMap<String, String>,
    /// Keys whose value changed at least once (they have a dated value).
    pub changing: Vec<String>,
    /// First event date.
    pub first_visit: Option<String>,
    /// Last event date.
    pub last_visit: Option<String>,
    /// Events stored at the site.
    pub events: i64,
}

/// One value of an attribute history.
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct HistoryEntry {
    /// Attribute key.
    pub key: String,
    /// First date the value holds; `None` for since always.
    pub from: Option<String>,
    /// Last date it holds (the day before the next value), `None` when it still holds.
    pub until: Option<String>,
    /// The value.
    pub value: String,
    /// The import batch that brought it (`None`: a sites file or `sites set`).
    pub batch: Option<i64>,
}

/// Events of one protocol at a site.
#[derive(Debug, Clone, Serialize)]
pub struct ProtocolUse {
    /// Protocol code.
    pub protocol: String,
    /// Events.
    pub events: i64,
    /// First and last event date.
    pub first: String,
    /// Last event date.
    pub last: String,
}

/// Visits of one year at a site.
#[derive(Debug, Clone, Serialize)]
pub struct YearVisits {
    /// Calendar year.
    pub year: i32,
    /// Distinct visit dates.
    pub visits: i64,
    /// Events (a visit may hold several protocols or replicates).
    pub events: i64,
}

/// One site in full.
#[derive(Debug, Clone, Serialize)]
pub struct SiteDetail {
    /// The listing line.
    pub site: SiteSummary,
    /// Every attribute value, by key then date.
    pub history: Vec<HistoryEntry>,
    /// Protocols used at the site.
    pub protocols: Vec<ProtocolUse>,
    /// Visits per year.
    pub years: Vec<YearVisits>,
    /// Corrections recorded for the site, oldest first.
    pub changes: Vec<SiteChange>,
}

/// One correction to make with [`Store::set_site`].
#[derive(Debug, Clone, PartialEq)]
pub enum SiteEdit {
    /// A new name.
    Name(String),
    /// New coordinates (WGS84 degrees); `None` removes one.
    Coordinates {
        /// Latitude.
        latitude: Option<f64>,
        /// Longitude.
        longitude: Option<f64>,
    },
    /// The value of `key` from `from` (`None`: since always); a `value` of
    /// `None` removes the value stored for that key and date.
    Attribute {
        /// Attribute key.
        key: String,
        /// First date the value holds (ISO 8601), `None` for since always.
        from: Option<String>,
        /// The value, or `None` to remove it.
        value: Option<String>,
    },
}

/// One recorded correction (or undo of one).
#[derive(Debug, Clone, Serialize, PartialEq)]
pub struct SiteChange {
    /// Change id (what `sites undo` takes).
    pub id: i64,
    /// Site code.
    pub site: String,
    /// `name`, `coordinates` or `attribute`.
    pub field: String,
    /// Attribute key ("" for a name or coordinates).
    pub key: String,
    /// Date the attribute value holds from ("" for since always, or not an attribute).
    pub from: String,
    /// The value before (JSON: text, `[lat, lon]`, or null for none).
    pub before: Value,
    /// The value after.
    pub after: Value,
    /// When (RFC 3339, UTC).
    pub changed_at: String,
    /// The reason given.
    pub reason: String,
    /// The change this one reverses, for an undo.
    pub undoes: Option<i64>,
    /// The undo that reversed this change, if any.
    pub undone_by: Option<i64>,
}

impl SiteChange {
    /// The change in words: `status from 2014-06-01: degraded → restored`.
    pub fn describe(&self) -> String {
        let shown = |v: &Value| match v {
            Value::Null => "(none)".to_string(),
            Value::String(s) => s.clone(),
            Value::Array(a) => a
                .iter()
                .map(|x| x.as_f64().map_or("(none)".into(), |f| f.to_string()))
                .collect::<Vec<_>>()
                .join(", "),
            other => other.to_string(),
        };
        let what = match self.field.as_str() {
            "attribute" if self.from.is_empty() => format!("{} since always", self.key),
            "attribute" => format!("{} from {}", self.key, self.from),
            other => other.to_string(),
        };
        format!("{what}: {} -> {}", shown(&self.before), shown(&self.after))
    }
}

/// The "until" of each entry of one key's history, sorted by date: the day
/// before the next entry's date.
fn with_until(mut entries: Vec<HistoryEntry>) -> Vec<HistoryEntry> {
    for i in 0..entries.len() {
        let next = entries
            .get(i + 1)
            .filter(|n| n.key == entries[i].key)
            .and_then(|n| n.from.clone());
        entries[i].until = next.map(|d| day_before(&d));
    }
    entries
}

/// The ISO date before `date` (itself when it does not parse).
fn day_before(date: &str) -> String {
    chrono::NaiveDate::parse_from_str(date, "%Y-%m-%d")
        .ok()
        .and_then(|d| d.pred_opt())
        .map_or_else(|| date.to_string(), |d| d.format("%Y-%m-%d").to_string())
}

fn read_change(r: &rusqlite::Row<'_>) -> rusqlite::Result<SiteChange> {
    let json = |i: usize| -> rusqlite::Result<Value> {
        let s: String = r.get(i)?;
        Ok(serde_json::from_str(&s).unwrap_or(Value::Null))
    };
    Ok(SiteChange {
        id: r.get(0)?,
        site: r.get(1)?,
        field: r.get(2)?,
        key: r.get(3)?,
        from: r.get(4)?,
        before: json(5)?,
        after: json(6)?,
        changed_at: r.get(7)?,
        reason: r.get(8)?,
        undoes: r.get(9)?,
        undone_by: r.get(10)?,
    })
}

const CHANGE_SQL: &str = "SELECT c.id, c.site_code, c.field, c.key, c.valid_from, c.before, c.after, \
     c.changed_at, c.reason, c.undoes, (SELECT u.id FROM site_change u WHERE u.undoes = c.id) \
     FROM site_change c";

/// The stored value of `field` at site `id`, as change JSON.
fn current(tx: &Transaction<'_>, id: i64, field: &str, key: &str, from: &str) -> Result<Value> {
    Ok(match field {
        "name" => json!(tx.query_row("SELECT name FROM site WHERE id = ?1", [id], |r| r
            .get::<_, String>(0))?),
        "coordinates" => {
            let (a, b): (Option<f64>, Option<f64>) = tx.query_row(
                "SELECT latitude, longitude FROM site WHERE id = ?1",
                [id],
                |r| Ok((r.get(0)?, r.get(1)?)),
            )?;
            json!([a, b])
        }
        _ => json!(
            tx.query_row(
                "SELECT value FROM site_attribute WHERE site_id = ?1 AND key = ?2 AND valid_from = ?3",
                params![id, key, from],
                |r| r.get::<_, String>(0),
            )
            .optional()?
        ),
    })
}

/// Write `value` (change JSON) into `field` of site `id`.
fn apply(
    tx: &Transaction<'_>,
    id: i64,
    field: &str,
    key: &str,
    from: &str,
    value: &Value,
) -> Result<()> {
    match field {
        "name" => {
            tx.execute(
                "UPDATE site SET name = ?2 WHERE id = ?1",
                params![id, value.as_str().unwrap_or("")],
            )?;
        }
        "coordinates" => {
            let at = |i: usize| value.get(i).and_then(Value::as_f64);
            tx.execute(
                "UPDATE site SET latitude = ?2, longitude = ?3 WHERE id = ?1",
                params![id, at(0), at(1)],
            )?;
        }
        _ => match value.as_str() {
            Some(v) => {
                let updated = tx.execute(
                    "UPDATE site_attribute SET value = ?4 WHERE site_id = ?1 AND key = ?2 AND valid_from = ?3",
                    params![id, key, from, v],
                )?;
                if updated == 0 {
                    tx.execute(
                        "INSERT INTO site_attribute(site_id, key, valid_from, value) VALUES (?1, ?2, ?3, ?4)",
                        params![id, key, from, v],
                    )?;
                }
            }
            None => {
                tx.execute(
                    "DELETE FROM site_attribute WHERE site_id = ?1 AND key = ?2 AND valid_from = ?3",
                    params![id, key, from],
                )?;
            }
        },
    }
    Ok(())
}

fn site_id(tx: &Transaction<'_>, code: &str) -> Result<i64> {
    tx.query_row("SELECT id FROM site WHERE code = ?1", [code], |r| r.get(0))
        .optional()?
        .ok_or_else(|| StoreError::NotFound {
            what: "site",
            name: code.to_string(),
        })
}

#[allow(clippy::too_many_arguments)]
fn record(
    tx: &Transaction<'_>,
    site: &str,
    field: &str,
    key: &str,
    from: &str,
    before: &Value,
    after: &Value,
    reason: &str,
    undoes: Option<i64>,
) -> Result<SiteChange> {
    tx.execute(
        "INSERT INTO site_change(site_code, field, key, valid_from, before, after, changed_at, reason, undoes) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9)",
        params![
            site,
            field,
            key,
            from,
            before.to_string(),
            after.to_string(),
            now(),
            reason.trim(),
            undoes
        ],
    )?;
    let id = tx.last_insert_rowid();
    Ok(tx.query_row(&format!("{CHANGE_SQL} WHERE c.id = ?1"), [id], read_change)?)
}

/// `edit` with its text through the input rule of every import
/// (`store::sheet::clean_field`), its date and coordinates checked.
fn checked(edit: &SiteEdit) -> Result<SiteEdit> {
    let text = |what: &str, v: &str| -> Result<String> {
        clean_field(v, FieldKind::Name)
            .map(|c| c.into_owned())
            .map_err(|m| StoreError::Refused(format!("{what}: {m}")))
    };
    Ok(match edit {
        SiteEdit::Name(n) => SiteEdit::Name(text("the name", n)?),
        SiteEdit::Coordinates {
            latitude,
            longitude,
        } => {
            for (v, name, limit) in [
                (latitude, "latitude", 90.0),
                (longitude, "longitude", 180.0),
            ] {
                if let Some(v) = v
                    && !(v.is_finite() && v.abs() <= limit)
                {
                    return Err(StoreError::Refused(format!(
                        "{name} {v} is out of range; expected decimal degrees between -{limit} and {limit}"
                    )));
                }
            }
            edit.clone()
        }
        SiteEdit::Attribute { key, from, value } => {
            let key = text("the attribute key", key)?;
            if key.is_empty() {
                return Err(StoreError::Refused(
                    "an attribute key may not be empty".into(),
                ));
            }
            let from = match from.as_deref().map(str::trim) {
                None | Some("") => None,
                Some(d) => Some(
                    parse_date(d)
                        .map_err(|m| StoreError::Refused(format!("--from: {m}")))?
                        .text(),
                ),
            };
            let value = match value {
                None => None,
                Some(v) => {
                    let v = text(&format!("the value of {key}"), v)?;
                    if v.is_empty() {
                        return Err(StoreError::Refused(format!(
                            "the value of {key} is empty; to remove a value use --remove {key}"
                        )));
                    }
                    Some(v)
                }
            };
            SiteEdit::Attribute { key, from, value }
        }
    })
}

/// Every stored attribute history: site code → key → values sorted by date,
/// "since always" (stored as '') first. Also read inside an import's
/// transaction (`c` may be a `Transaction`).
pub(crate) fn load_histories(c: &Connection) -> Result<BTreeMap<String, History>> {
    let mut stmt = c.prepare(
        "SELECT s.code, a.key, a.valid_from, a.value FROM site_attribute a \
         JOIN site s ON s.id = a.site_id ORDER BY s.code, a.key, a.valid_from",
    )?;
    let mut out: BTreeMap<String, History> = BTreeMap::new();
    let mut rows = stmt.query([])?;
    while let Some(r) = rows.next()? {
        let from: String = r.get(2)?;
        out.entry(r.get(0)?)
            .or_default()
            .entry(r.get(1)?)
            .or_default()
            .push(AttributeValue {
                from: (!from.is_empty()).then_some(from),
                value: r.get(3)?,
            });
    }
    Ok(out)
}

impl Store {
    /// Every stored attribute history: site code → key → values sorted by
    /// date, "since always" first.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn attribute_histories(&self) -> Result<BTreeMap<String, History>> {
        load_histories(self.conn())
    }

    /// Every site with its latest attribute values and visits, by code.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn sites(&self) -> Result<Vec<SiteSummary>> {
        let mut stmt = self.conn().prepare(
            "SELECT s.code, s.name, s.latitude, s.longitude, MIN(e.date), MAX(e.date), COUNT(e.id) \
             FROM site s LEFT JOIN event e ON e.site_id = s.id GROUP BY s.id ORDER BY s.code",
        )?;
        let mut out: Vec<SiteSummary> = stmt
            .query_map([], |r| {
                Ok(SiteSummary {
                    code: r.get(0)?,
                    name: r.get(1)?,
                    latitude: r.get(2)?,
                    longitude: r.get(3)?,
                    attributes: BTreeMap::new(),
                    changing: Vec::new(),
                    first_visit: r.get(4)?,
                    last_visit: r.get(5)?,
                    events: r.get(6)?,
                })
            })?
            .collect::<rusqlite::Result<_>>()?;
        let mut by_code: BTreeMap<String, usize> = BTreeMap::new();
        for (i, s) in out.iter().enumerate() {
            by_code.insert(s.code.clone(), i);
        }
        for (code, history) in self.attribute_histories()? {
            let s = &mut out[by_code[&code]];
            for (key, values) in history {
                if values.iter().any(|v| v.from.is_some()) {
                    s.changing.push(key.clone());
                }
                // Sorted by date: the last value of a key is the latest.
                if let Some(latest) = values.last() {
                    s.attributes.insert(key, latest.value.clone());
                }
            }
        }
        Ok(out)
    }

    /// One site in full: attribute history, protocols, visits per year, corrections.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown code; SQLite errors.
    pub fn site_detail(&self, code: &str) -> Result<SiteDetail> {
        let site = self
            .sites()?
            .into_iter()
            .find(|s| s.code == code)
            .ok_or_else(|| StoreError::NotFound {
                what: "site",
                name: code.to_string(),
            })?;
        let conn = self.conn();
        let mut stmt = conn.prepare(
            "SELECT a.key, a.valid_from, a.value, a.import_batch_id FROM site_attribute a \
             JOIN site s ON s.id = a.site_id WHERE s.code = ?1 ORDER BY a.key, a.valid_from",
        )?;
        let history: Vec<HistoryEntry> = stmt
            .query_map([code], |r| {
                let from: String = r.get(1)?;
                Ok(HistoryEntry {
                    key: r.get(0)?,
                    from: (!from.is_empty()).then_some(from),
                    until: None,
                    value: r.get(2)?,
                    batch: r.get(3)?,
                })
            })?
            .collect::<rusqlite::Result<_>>()?;
        let mut stmt = conn.prepare(
            "SELECT p.code, COUNT(*), MIN(e.date), MAX(e.date) FROM event e \
             JOIN protocol p ON p.id = e.protocol_id JOIN site s ON s.id = e.site_id \
             WHERE s.code = ?1 GROUP BY p.id ORDER BY p.code",
        )?;
        let protocols = stmt
            .query_map([code], |r| {
                Ok(ProtocolUse {
                    protocol: r.get(0)?,
                    events: r.get(1)?,
                    first: r.get(2)?,
                    last: r.get(3)?,
                })
            })?
            .collect::<rusqlite::Result<_>>()?;
        let mut stmt = conn.prepare(
            "SELECT CAST(substr(e.date, 1, 4) AS INTEGER), COUNT(DISTINCT e.date), COUNT(*) \
             FROM event e JOIN site s ON s.id = e.site_id WHERE s.code = ?1 GROUP BY 1 ORDER BY 1",
        )?;
        let years = stmt
            .query_map([code], |r| {
                Ok(YearVisits {
                    year: r.get(0)?,
                    visits: r.get(1)?,
                    events: r.get(2)?,
                })
            })?
            .collect::<rusqlite::Result<_>>()?;
        Ok(SiteDetail {
            site,
            history: with_until(history),
            protocols,
            years,
            changes: self.site_changes(Some(code))?,
        })
    }

    /// The recorded corrections, oldest first; of one site when `code` is given.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn site_changes(&self, code: Option<&str>) -> Result<Vec<SiteChange>> {
        let conn = self.conn();
        let rows = match code {
            Some(c) => conn
                .prepare(&format!(
                    "{CHANGE_SQL} WHERE c.site_code = ?1 ORDER BY c.id"
                ))?
                .query_map([c], read_change)?
                .collect::<rusqlite::Result<Vec<_>>>()?,
            None => conn
                .prepare(&format!("{CHANGE_SQL} ORDER BY c.id"))?
                .query_map([], read_change)?
                .collect::<rusqlite::Result<Vec<_>>>()?,
        };
        Ok(rows)
    }

    /// Make the corrections `edits` to site `code`, all or none, each recorded
    /// with `reason`; returns the changes recorded.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown site; [`StoreError::Refused`]
    /// without a reason, for a correction that changes nothing, for removing a
    /// value that is not stored, for an empty name or key; SQLite errors.
    pub fn set_site(
        &mut self,
        code: &str,
        edits: &[SiteEdit],
        reason: &str,
    ) -> Result<Vec<SiteChange>> {
        require_reason(reason)?;
        if edits.is_empty() {
            return Err(StoreError::Refused(
                "nothing to set: give KEY=VALUE, --name or --latitude/--longitude".into(),
            ));
        }
        let edits: Vec<SiteEdit> = edits.iter().map(checked).collect::<Result<_>>()?;
        let tx = self
            .conn_mut()
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        let id = site_id(&tx, code)?;
        let mut out = Vec::new();
        for edit in &edits {
            let (field, key, from, after) = match edit {
                SiteEdit::Name(n) => ("name", String::new(), String::new(), json!(n)),
                SiteEdit::Coordinates {
                    latitude,
                    longitude,
                } => (
                    "coordinates",
                    String::new(),
                    String::new(),
                    json!([latitude, longitude]),
                ),
                SiteEdit::Attribute { key, from, value } => (
                    "attribute",
                    key.clone(),
                    from.clone().unwrap_or_default(),
                    json!(value),
                ),
            };
            let before = current(&tx, id, field, &key, &from)?;
            if before == after {
                let what = SiteChange {
                    id: 0,
                    site: code.to_string(),
                    field: field.to_string(),
                    key: key.clone(),
                    from: from.clone(),
                    before: before.clone(),
                    after: after.clone(),
                    changed_at: String::new(),
                    reason: String::new(),
                    undoes: None,
                    undone_by: None,
                };
                let msg = if after.is_null() {
                    format!("site {code} has no value to remove for {}", what.describe())
                } else {
                    format!(
                        "site {code} already has that value ({}); nothing was changed",
                        what.describe()
                    )
                };
                return Err(StoreError::Refused(msg));
            }
            apply(&tx, id, field, &key, &from, &after)?;
            out.push(record(
                &tx, code, field, &key, &from, &before, &after, reason, None,
            )?);
        }
        tx.commit()?;
        Ok(out)
    }

    /// Reverse correction `id`: put back the value it replaced, recorded as a
    /// change of its own.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown change or a site no longer
    /// stored; [`StoreError::Refused`] for an undo, a change already undone,
    /// a value changed again since (undo the later change first), or no
    /// reason; SQLite errors.
    pub fn undo_site_change(&mut self, id: i64, reason: &str) -> Result<SiteChange> {
        require_reason(reason)?;
        let tx = self
            .conn_mut()
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        let c = tx
            .query_row(&format!("{CHANGE_SQL} WHERE c.id = ?1"), [id], read_change)
            .optional()?
            .ok_or_else(|| StoreError::NotFound {
                what: "site change",
                name: id.to_string(),
            })?;
        if let Some(u) = c.undoes {
            return Err(StoreError::Refused(format!(
                "change {id} is itself the undo of change {u}; to go back, set the value again with `tally sites set`"
            )));
        }
        if let Some(u) = c.undone_by {
            return Err(StoreError::Refused(format!(
                "change {id} was already undone by change {u}"
            )));
        }
        let site = site_id(&tx, &c.site)?;
        let now_value = current(&tx, site, &c.field, &c.key, &c.from)?;
        if now_value != c.after {
            let later: Vec<String> = tx
                .prepare(&format!(
                    "{CHANGE_SQL} WHERE c.site_code = ?1 AND c.field = ?2 AND c.key = ?3 AND c.valid_from = ?4 AND c.id > ?5"
                ))?
                .query_map(params![c.site, c.field, c.key, c.from, id], read_change)?
                .filter_map(|r| r.ok().map(|r| r.id.to_string()))
                .collect();
            let hint = if later.is_empty() {
                "it was changed since (by an import or a batch undo)".to_string()
            } else {
                format!("undo the later change {} first", later.join(", "))
            };
            return Err(StoreError::Refused(format!(
                "change {id} cannot be undone: site {} no longer holds what it set ({}); {hint}",
                c.site,
                c.describe()
            )));
        }
        apply(&tx, site, &c.field, &c.key, &c.from, &c.before)?;
        let undo = record(
            &tx,
            &c.site,
            &c.field,
            &c.key,
            &c.from,
            &c.after,
            &c.before,
            reason,
            Some(id),
        )?;
        tx.commit()?;
        Ok(undo)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn until_is_the_day_before_the_next_value_of_the_same_key() {
        let e = |key: &str, from: Option<&str>, value: &str| HistoryEntry {
            key: key.into(),
            from: from.map(str::to_string),
            until: None,
            value: value.into(),
            batch: None,
        };
        let h = with_until(vec![
            e("status", None, "degraded"),
            e("status", Some("2014-03-01"), "restored"),
            e("zone", Some("2000-01-01"), "a"),
        ]);
        // 2014 is not a leap year: the day before 1 March is 28 February.
        assert_eq!(h[0].until.as_deref(), Some("2014-02-28"));
        assert_eq!(h[1].until, None);
        assert_eq!(h[2].until, None);
    }
}
