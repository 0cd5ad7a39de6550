//! Field codes for taxa (docs/taxonomy.md, "Field codes"): short codes such as
//! `BAERHO` that field sheets carry instead of names.
//!
//! A code is two to six ASCII letters or digits, stored in upper case and
//! matched regardless of case. A code stands for one taxon (a taxon may have
//! several), and is never also the name of a taxon, compared regardless of
//! case: otherwise `Baetis` and the code `BAETIS` would read alike. Wherever a
//! taxon is named (records and counts files, `tally taxa` commands), the name
//! is looked up first, then the code ([`resolve_with`], the one rule).

use std::collections::{BTreeMap, HashMap};

use rusqlite::{Connection, OptionalExtension, params};
use serde::Serialize;

use crate::store::{Result, Store, StoreError};

/// The shortest code.
pub const MIN_LEN: usize = 2;
/// The longest code.
pub const MAX_LEN: usize = 6;

/// One field code and the taxon it stands for.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct TaxonCode {
    /// The code, upper case.
    pub code: String,
    /// The taxon's name.
    pub taxon: String,
    /// The import batch that brought it (`None`: added with `tally taxa code`).
    pub batch: Option<i64>,
}

/// The stored form of `s` as a code (upper case), or why it is not one.
///
/// # Errors
/// A message naming the rule when `s` is not two to six ASCII letters or digits.
pub fn parse_code(s: &str) -> std::result::Result<String, String> {
    let n = s.chars().count();
    if !(MIN_LEN..=MAX_LEN).contains(&n) {
        return Err(format!(
            "'{}' is {n} character(s) long; a code has {MIN_LEN} to {MAX_LEN} letters or digits",
            crate::store::sheet::shorten(s)
        ));
    }
    if let Some(c) = s.chars().find(|c| !c.is_ascii_alphanumeric()) {
        return Err(format!(
            "'{}' holds '{c}'; a code has only the letters A-Z and the digits 0-9",
            crate::store::sheet::shorten(s)
        ));
    }
    Ok(s.to_ascii_uppercase())
}

/// The one rule for a taxon named by a person or a file: the name `s` first,
/// then `s` as a code (regardless of case). `by_name` and `by_code` look up a
/// name and an upper-case code.
pub(crate) fn resolve_with(
    s: &str,
    by_name: impl FnOnce(&str) -> Option<i64>,
    by_code: impl FnOnce(&str) -> Option<i64>,
) -> Option<i64> {
    by_name(s).or_else(|| parse_code(s).ok().and_then(|c| by_code(&c)))
}

/// Every code, with the id of its taxon.
pub(crate) fn load_codes(conn: &Connection) -> Result<HashMap<String, i64>> {
    let mut stmt = conn.prepare("SELECT code, taxon_id FROM taxon_code")?;
    let rows = stmt
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?)))?
        .collect::<std::result::Result<HashMap<_, _>, _>>()?;
    Ok(rows)
}

/// The codes of each taxon, sorted.
pub(crate) fn codes_by_taxon(conn: &Connection) -> Result<BTreeMap<i64, Vec<String>>> {
    let mut stmt = conn.prepare("SELECT taxon_id, code FROM taxon_code ORDER BY taxon_id, code")?;
    let mut out: BTreeMap<i64, Vec<String>> = BTreeMap::new();
    let mut rows = stmt.query([])?;
    while let Some(r) = rows.next()? {
        out.entry(r.get(0)?).or_default().push(r.get(1)?);
    }
    Ok(out)
}

/// The taxon whose code `name` is, regardless of case: a name that reads
/// like a code is refused.
pub(crate) fn code_named(conn: &Connection, name: &str) -> Result<Option<(String, String)>> {
    let Ok(code) = parse_code(name) else {
        return Ok(None);
    };
    Ok(conn
        .query_row(
            "SELECT c.code, t.name FROM taxon_code c JOIN taxon t ON t.id = c.taxon_id \
             WHERE c.code = ?1",
            params![code],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?)
}

/// The message refusing a taxon name that is a code already.
pub(crate) fn name_is_code(name: &str, code: &str, taxon: &str) -> String {
    format!(
        "'{name}' is the field code {code} of '{taxon}'; a name must not read like a code \
         (remove the code with `tally taxa code '{taxon}' {code} --remove`, or choose another name)"
    )
}

/// Why `code` (upper case) cannot be added to taxon `taxon_id`, if it cannot:
/// it is the code of a taxon already, or the name of one.
fn code_refusal(conn: &Connection, code: &str, taxon_id: i64) -> Result<Option<String>> {
    let owner: Option<(i64, String)> = conn
        .query_row(
            "SELECT t.id, t.name FROM taxon_code c JOIN taxon t ON t.id = c.taxon_id \
             WHERE c.code = ?1",
            params![code],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?;
    if let Some((id, name)) = owner {
        return Ok(Some(if id == taxon_id {
            format!("{code} is a code of '{name}' already; nothing to add")
        } else {
            format!(
                "{code} is the code of '{name}' already; a code stands for one taxon \
                 (remove it there first with `tally taxa code '{name}' {code} --remove`)"
            )
        }));
    }
    let named: Option<String> = conn
        .query_row(
            "SELECT name FROM taxon WHERE upper(name) = ?1",
            params![code],
            |r| r.get(0),
        )
        .optional()?;
    Ok(named.map(|n| {
        format!(
            "{code} reads like the taxon name '{n}'; a code must not equal a name (choose another code)"
        )
    }))
}

impl Store {
    /// The taxon `name_or_code` names: the name first, then a field code
    /// (regardless of case). Returns its id and name.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] when it is neither; SQLite errors.
    pub fn resolve_taxon(&self, name_or_code: &str) -> Result<(i64, String)> {
        let conn = self.conn();
        let mut failed = None;
        let mut by_name = |n: &str| {
            conn.query_row("SELECT id FROM taxon WHERE name = ?1", params![n], |r| {
                r.get(0)
            })
            .optional()
            .unwrap_or_else(|e| {
                failed = Some(e);
                None
            })
        };
        let id = resolve_with(name_or_code, &mut by_name, |c| {
            conn.query_row(
                "SELECT taxon_id FROM taxon_code WHERE code = ?1",
                params![c],
                |r| r.get(0),
            )
            .optional()
            .unwrap_or_default()
        });
        if let Some(e) = failed {
            return Err(e.into());
        }
        let Some(id) = id else {
            return Err(StoreError::NotFound {
                what: "taxon (name or code)",
                name: name_or_code.to_string(),
            });
        };
        let name: String =
            conn.query_row("SELECT name FROM taxon WHERE id = ?1", params![id], |r| {
                r.get(0)
            })?;
        Ok((id, name))
    }

    /// Every field code, by code.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn taxon_codes(&self) -> Result<Vec<TaxonCode>> {
        let mut stmt = self.conn().prepare(
            "SELECT c.code, t.name, c.import_batch_id FROM taxon_code c \
             JOIN taxon t ON t.id = c.taxon_id ORDER BY c.code",
        )?;
        let rows = stmt
            .query_map([], |r| {
                Ok(TaxonCode {
                    code: r.get(0)?,
                    taxon: r.get(1)?,
                    batch: r.get(2)?,
                })
            })?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(rows)
    }

    /// Give `taxon` (a name or a code) the field code `code` (any case; stored
    /// upper case).
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown taxon; [`StoreError::Refused`]
    /// when the code is malformed, is a code already, or reads like a taxon name.
    pub fn add_taxon_code(&mut self, taxon: &str, code: &str) -> Result<TaxonCode> {
        let code = parse_code(code.trim()).map_err(StoreError::Refused)?;
        let tx = self
            .conn_mut()
            .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?;
        let (id, name) = {
            // Resolved inside the write transaction, with the same rule.
            let by_name = |n: &str| {
                tx.query_row("SELECT id FROM taxon WHERE name = ?1", params![n], |r| {
                    r.get(0)
                })
                .optional()
                .ok()
                .flatten()
            };
            let by_code = |c: &str| load_codes(&tx).ok().and_then(|m| m.get(c).copied());
            let id = resolve_with(taxon, by_name, by_code).ok_or_else(|| StoreError::NotFound {
                what: "taxon (name or code)",
                name: taxon.to_string(),
            })?;
            let name: String =
                tx.query_row("SELECT name FROM taxon WHERE id = ?1", params![id], |r| {
                    r.get(0)
                })?;
            (id, name)
        };
        if let Some(why) = code_refusal(&tx, &code, id)? {
            return Err(StoreError::Refused(why));
        }
        tx.execute(
            "INSERT INTO taxon_code(code, taxon_id) VALUES (?1, ?2)",
            params![code, id],
        )?;
        tx.commit()?;
        Ok(TaxonCode {
            code,
            taxon: name,
            batch: None,
        })
    }

    /// Remove the field code `code` of `taxon` (a name or a code).
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown taxon; [`StoreError::Refused`]
    /// when `code` is not a code of that taxon.
    pub fn remove_taxon_code(&mut self, taxon: &str, code: &str) -> Result<TaxonCode> {
        let (id, name) = self.resolve_taxon(taxon)?;
        let code = parse_code(code.trim()).map_err(StoreError::Refused)?;
        let batch: Option<Option<i64>> = self
            .conn()
            .query_row(
                "SELECT import_batch_id FROM taxon_code WHERE code = ?1 AND taxon_id = ?2",
                params![code, id],
                |r| r.get(0),
            )
            .optional()?;
        let Some(batch) = batch else {
            let codes = codes_by_taxon(self.conn())?.remove(&id).unwrap_or_default();
            let has = if codes.is_empty() {
                "it has no code".to_string()
            } else {
                format!("its codes are {}", codes.join(", "))
            };
            return Err(StoreError::Refused(format!(
                "{code} is not a code of '{name}' ({has}); nothing to remove"
            )));
        };
        self.conn().execute(
            "DELETE FROM taxon_code WHERE code = ?1 AND taxon_id = ?2",
            params![code, id],
        )?;
        Ok(TaxonCode {
            code,
            taxon: name,
            batch,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::testing::add_taxon;

    fn store() -> Store {
        let s = Store::open_in_memory().unwrap();
        add_taxon(&s, "Baetis", "genus", None, None).unwrap();
        add_taxon(&s, "Baetis rhodani", "species", Some("Baetis"), None).unwrap();
        add_taxon(&s, "Old name", "", None, Some("Baetis")).unwrap();
        s
    }

    fn refused<T: std::fmt::Debug>(r: Result<T>) -> String {
        match r {
            Err(StoreError::Refused(m)) => m,
            other => panic!("expected a refusal, got {other:?}"),
        }
    }

    #[test]
    fn codes_are_two_to_six_letters_or_digits_stored_upper_case() {
        assert_eq!(parse_code("baerho").as_deref(), Ok("BAERHO"));
        assert_eq!(parse_code("B2").as_deref(), Ok("B2"));
        assert!(parse_code("B").unwrap_err().contains("1 character(s)"));
        assert!(
            parse_code("BAERHOD")
                .unwrap_err()
                .contains("7 character(s)")
        );
        assert!(parse_code("BA-RH").unwrap_err().contains("holds '-'"));
        assert!(parse_code("BÄRH").unwrap_err().contains("holds 'Ä'"));
        assert!(parse_code("BA RH").unwrap_err().contains("holds ' '"));
    }

    #[test]
    fn a_code_resolves_regardless_of_case_after_the_names() {
        let mut s = store();
        let c = s.add_taxon_code("Baetis rhodani", "baerho").unwrap();
        assert_eq!(
            (c.code.as_str(), c.taxon.as_str()),
            ("BAERHO", "Baetis rhodani")
        );
        let (id, name) = s.resolve_taxon("Baerho").unwrap();
        assert_eq!(name, "Baetis rhodani");
        assert_eq!(s.resolve_taxon("Baetis rhodani").unwrap().0, id);
        // A code of a synonym resolves to the synonym (matrices count it as
        // its accepted name, as they count the synonym's name).
        s.add_taxon_code("Old name", "OLD").unwrap();
        assert_eq!(s.resolve_taxon("old").unwrap().1, "Old name");
        assert!(matches!(
            s.resolve_taxon("BAEVER"),
            Err(StoreError::NotFound { .. })
        ));
        // A taxon named by its code.
        assert_eq!(
            s.add_taxon_code("BAERHO", "BR").unwrap().taxon,
            "Baetis rhodani"
        );
    }

    #[test]
    fn duplicate_codes_and_codes_reading_like_names_are_refused() {
        let mut s = store();
        s.add_taxon_code("Baetis rhodani", "BAERHO").unwrap();
        let before = s.content_dump().unwrap();
        let m = refused(s.add_taxon_code("Baetis", "baerho"));
        assert!(m.contains("is the code of 'Baetis rhodani' already"), "{m}");
        let m = refused(s.add_taxon_code("Baetis rhodani", "BAERHO"));
        assert!(m.contains("nothing to add"), "{m}");
        let m = refused(s.add_taxon_code("Baetis rhodani", "baetis"));
        assert!(m.contains("reads like the taxon name 'Baetis'"), "{m}");
        let m = refused(s.add_taxon_code("Baetis", "B.R"));
        assert!(m.contains("holds '.'"), "{m}");
        assert_eq!(s.content_dump().unwrap(), before);
        // A rename to a name that reads like a code is refused too.
        let m = refused(s.rename_taxon("Baetis", "Baerho", "test"));
        assert!(
            m.contains("is the field code BAERHO of 'Baetis rhodani'"),
            "{m}"
        );
        assert_eq!(s.content_dump().unwrap(), before);
    }

    #[test]
    fn a_code_is_removed_only_from_its_own_taxon() {
        let mut s = store();
        let empty = s.content_dump().unwrap();
        s.add_taxon_code("Baetis rhodani", "BAERHO").unwrap();
        let m = refused(s.remove_taxon_code("Baetis", "BAERHO"));
        assert!(m.contains("not a code of 'Baetis' (it has no code)"), "{m}");
        let r = s.remove_taxon_code("baerho", "baerho").unwrap();
        assert_eq!(r.taxon, "Baetis rhodani");
        assert_eq!(s.content_dump().unwrap(), empty);
        assert!(s.taxon_codes().unwrap().is_empty());
    }

    #[test]
    fn changes_accept_codes_and_record_names() {
        let mut s = store();
        s.add_taxon_code("Baetis rhodani", "BAERHO").unwrap();
        let c = s
            .rename_taxon("baerho", "Baetis rhodani s.l.", "test")
            .unwrap();
        assert_eq!(c.from, "Baetis rhodani");
        assert_eq!(s.resolve_taxon("BAERHO").unwrap().1, "Baetis rhodani s.l.");
        let c = s.merge_taxon("BAERHO", "Baetis", "lumped").unwrap();
        assert_eq!(
            (c.from.as_str(), c.to.as_str()),
            ("Baetis rhodani s.l.", "Baetis")
        );
    }
}
