//! Saved selections: a name for a [`Selection`], kept in the store
//! (`saved_selection`, migration V2) as JSON.

use super::{Result, Selection, Store, StoreError};

/// A saved selection as listed.
#[derive(Debug, Clone, PartialEq)]
pub struct SavedSelection {
    /// Its name.
    pub name: String,
    /// The selection.
    pub selection: Selection,
    /// When it was first saved (RFC 3339, UTC).
    pub created_at: String,
    /// When it was last replaced (RFC 3339, UTC).
    pub updated_at: String,
}

/// Names are letters, digits, `-`, `_` and `.`, starting with a letter or digit.
fn check_name(name: &str) -> Result<()> {
    let ok = name.chars().next().is_some_and(|c| c.is_alphanumeric())
        && name
            .chars()
            .all(|c| c.is_alphanumeric() || matches!(c, '-' | '_' | '.'));
    if ok {
        Ok(())
    } else {
        Err(StoreError::Refused(format!(
            "selection name '{name}': use letters, digits, '-', '_' and '.', starting with a letter or digit"
        )))
    }
}

fn decode(name: &str, json: &str) -> Result<Selection> {
    serde_json::from_str(json)
        .map_err(|e| StoreError::Refused(format!("saved selection '{name}' cannot be read: {e}")))
}

impl Store {
    /// Save `selection` under `name`. An existing name is replaced only when
    /// `replace` is true (its creation time is kept). Returns true when a
    /// selection was replaced.
    ///
    /// # Errors
    /// [`StoreError::Refused`] for a bad name, an invalid selection, or an
    /// existing name without `replace`; SQLite errors.
    pub fn save_selection(
        &mut self,
        name: &str,
        selection: &Selection,
        replace: bool,
    ) -> Result<bool> {
        check_name(name)?;
        let mut sel = selection.clone();
        sel.validate()?;
        let json = serde_json::to_string(&sel).expect("invariant: a Selection always serialises");
        let now = chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true);
        let tx = self.conn_mut().transaction()?;
        let exists: bool = tx.query_row(
            "SELECT count(*) FROM saved_selection WHERE name = ?",
            [name],
            |r| r.get::<_, i64>(0),
        )? > 0;
        if exists && !replace {
            return Err(StoreError::Refused(format!(
                "a selection named '{name}' exists already (give --replace to overwrite it)"
            )));
        }
        if exists {
            tx.execute(
                "UPDATE saved_selection SET definition = ?, updated_at = ? WHERE name = ?",
                (&json, &now, name),
            )?;
        } else {
            tx.execute(
                "INSERT INTO saved_selection(name, definition, created_at, updated_at) VALUES (?, ?, ?, ?)",
                (name, &json, &now, &now),
            )?;
        }
        tx.commit()?;
        Ok(exists)
    }

    /// The selection saved under `name`.
    ///
    /// # Errors
    /// [`StoreError::NotFound`]; a definition that no longer reads; SQLite errors.
    pub fn selection(&self, name: &str) -> Result<Selection> {
        let json: Option<String> = self
            .conn()
            .query_row(
                "SELECT definition FROM saved_selection WHERE name = ?",
                [name],
                |r| r.get(0),
            )
            .map(Some)
            .or_else(|e| {
                if e == rusqlite::Error::QueryReturnedNoRows {
                    Ok(None)
                } else {
                    Err(e)
                }
            })?;
        match json {
            Some(j) => decode(name, &j),
            None => Err(StoreError::NotFound {
                what: "selection",
                name: name.to_string(),
            }),
        }
    }

    /// Every saved selection, by name (byte order).
    ///
    /// # Errors
    /// A definition that no longer reads; SQLite errors.
    pub fn list_selections(&self) -> Result<Vec<SavedSelection>> {
        let mut stmt = self.conn().prepare(
            "SELECT name, definition, created_at, updated_at FROM saved_selection ORDER BY name",
        )?;
        let rows = stmt.query_map([], |r| {
            Ok((
                r.get::<_, String>(0)?,
                r.get::<_, String>(1)?,
                r.get::<_, String>(2)?,
                r.get::<_, String>(3)?,
            ))
        })?;
        let mut out = Vec::new();
        for row in rows {
            let (name, json, created_at, updated_at) = row?;
            let selection = decode(&name, &json)?;
            out.push(SavedSelection {
                name,
                selection,
                created_at,
                updated_at,
            });
        }
        Ok(out)
    }

    /// Delete the selection saved under `name`.
    ///
    /// # Errors
    /// [`StoreError::NotFound`]; SQLite errors.
    pub fn delete_selection(&mut self, name: &str) -> Result<()> {
        let n = self
            .conn()
            .execute("DELETE FROM saved_selection WHERE name = ?", [name])?;
        if n == 0 {
            return Err(StoreError::NotFound {
                what: "selection",
                name: name.to_string(),
            });
        }
        Ok(())
    }
}
