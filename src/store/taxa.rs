//! Taxonomy upkeep: the taxon list with its use; renames, merges, moves and
//! their undoing.
//!
//! A rename changes a taxon's name in place (its counts follow, as they refer
//! to the taxon, not the name). A merge makes one taxon a synonym of another,
//! so queries count it under the accepted name; no count is rewritten, and the
//! old name stays visible. A move gives a taxon another parent. Each change is
//! tried on a copy of the taxonomy first and refused, naming the chain, when it
//! would add a problem ([`integrity`]); it is written with a `taxon_change` row
//! and one `taxon_change_effect` row per taxon it touched (values before and
//! after), so that `undo` can put them back.

pub mod codes;
pub mod integrity;

use rusqlite::{Connection, OptionalExtension, TransactionBehavior, params};
use serde::Serialize;

use super::{Result, Store, StoreError};
use integrity::{Node, Problem, Taxonomy, refusal};

/// One taxon of the store, with how much it is used.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonRow {
    /// Name.
    pub name: String,
    /// Rank (may be empty).
    pub rank: String,
    /// Parent name, if any.
    pub parent: Option<String>,
    /// Accepted name, when this name is a synonym.
    pub accepted: Option<String>,
    /// Field codes (upper case, sorted; docs/taxonomy.md, "Field codes").
    pub codes: Vec<String>,
    /// Count rows recorded under this name.
    pub count_rows: i64,
    /// First year in which it was recorded.
    pub first_year: Option<i32>,
    /// Last year in which it was recorded.
    pub last_year: Option<i32>,
}

/// One recorded change of the taxonomy.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TaxonChange {
    /// Change id (what `taxa undo` takes).
    pub id: i64,
    /// `rename`, `merge`, `move` or `undo`.
    pub kind: String,
    /// The name before (rename), the name merged (merge), the taxon moved
    /// (move); for an undo, the `from` of the change undone.
    pub from: String,
    /// The new name (rename), the accepted name (merge), the new parent (move;
    /// empty for the top); for an undo, the `to` of the change undone.
    pub to: String,
    /// When (RFC 3339, UTC).
    pub changed_at: String,
    /// The reason given.
    pub reason: String,
    /// For an undo: the change it reverses.
    pub undoes: Option<i64>,
    /// The undo that reversed this change, if any.
    pub undone_by: Option<i64>,
}

impl TaxonChange {
    /// The change in words: `merge Baetis into Baetis rhodani`.
    pub fn describe(&self) -> String {
        describe(&self.kind, &self.from, &self.to, self.undoes)
    }
}

fn describe(kind: &str, from: &str, to: &str, undoes: Option<i64>) -> String {
    match kind {
        "rename" => format!("rename {from} to {to}"),
        "merge" => format!("merge {from} into {to}"),
        "move" if to.is_empty() => format!("move {from} to the top"),
        "move" => format!("move {from} under {to}"),
        _ => format!("undo of change {}", undoes.unwrap_or_default()),
    }
}

/// The values of one taxon that changes set.
#[derive(Debug, Clone, PartialEq, Eq)]
struct Values {
    name: String,
    parent: Option<i64>,
    accepted: Option<i64>,
}

impl Values {
    fn of(n: &Node) -> Values {
        Values {
            name: n.name.clone(),
            parent: n.parent,
            accepted: n.accepted,
        }
    }

    /// Which of the three differ from `other`.
    fn differ(&self, other: &Values) -> [bool; 3] {
        [
            self.name != other.name,
            self.parent != other.parent,
            self.accepted != other.accepted,
        ]
    }
}

/// What one change did to one taxon.
#[derive(Debug, Clone)]
struct Effect {
    taxon: i64,
    before: Values,
    after: Values,
}

impl Effect {
    fn fields(&self) -> [bool; 3] {
        self.before.differ(&self.after)
    }
}

/// A change to one taxon; `None` leaves a value as it is.
#[derive(Debug, Clone, Default)]
struct Edit {
    taxon: i64,
    name: Option<String>,
    parent: Option<Option<i64>>,
    accepted: Option<Option<i64>>,
}

/// The change row to write.
struct Record<'a> {
    kind: &'static str,
    from: &'a str,
    to: &'a str,
    reason: &'a str,
    undoes: Option<i64>,
    /// The change in words, for a refusal: `merging Baetis into Baetis rhodani`.
    action: String,
    /// The taxon a loop is named from, when the change makes one.
    focus: Option<i64>,
}

pub(crate) fn now() -> String {
    chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Secs, true)
}

pub(crate) fn require_reason(reason: &str) -> Result<()> {
    if reason.trim().is_empty() {
        return Err(StoreError::Refused(
            "a reason is required (--reason TEXT); it is recorded with the change".into(),
        ));
    }
    Ok(())
}

pub(crate) fn load_taxonomy(conn: &Connection) -> Result<Taxonomy> {
    let mut stmt = conn.prepare("SELECT id, name, rank, parent_id, accepted_id FROM taxon")?;
    let nodes = stmt
        .query_map([], |r| {
            Ok(Node {
                id: r.get(0)?,
                name: r.get(1)?,
                rank: r.get(2)?,
                parent: r.get(3)?,
                accepted: r.get(4)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(Taxonomy::new(nodes))
}

fn load_effects(conn: &Connection, change: i64) -> Result<Vec<Effect>> {
    let mut stmt = conn.prepare(
        "SELECT taxon_id, name_before, name_after, parent_before, parent_after, \
                accepted_before, accepted_after \
         FROM taxon_change_effect WHERE change_id = ?1 ORDER BY taxon_id",
    )?;
    let rows = stmt
        .query_map(params![change], |r| {
            Ok(Effect {
                taxon: r.get(0)?,
                before: Values {
                    name: r.get(1)?,
                    parent: r.get(3)?,
                    accepted: r.get(5)?,
                },
                after: Values {
                    name: r.get(2)?,
                    parent: r.get(4)?,
                    accepted: r.get(6)?,
                },
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// The changes after `change` that are in effect (neither undone nor an undo),
/// each with what it did to one taxon.
fn later_effects(conn: &Connection, change: i64) -> Result<Vec<(i64, Effect)>> {
    let mut stmt = conn.prepare(
        "SELECT c.id, e.taxon_id, e.name_before, e.name_after, e.parent_before, \
                e.parent_after, e.accepted_before, e.accepted_after \
         FROM taxon_change c JOIN taxon_change_effect e ON e.change_id = c.id \
         WHERE c.id > ?1 AND c.kind <> 'undo' \
           AND NOT EXISTS (SELECT 1 FROM taxon_change u WHERE u.undoes = c.id) \
         ORDER BY c.id, e.taxon_id",
    )?;
    let rows = stmt
        .query_map(params![change], |r| {
            Ok((
                r.get(0)?,
                Effect {
                    taxon: r.get(1)?,
                    before: Values {
                        name: r.get(2)?,
                        parent: r.get(4)?,
                        accepted: r.get(6)?,
                    },
                    after: Values {
                        name: r.get(3)?,
                        parent: r.get(5)?,
                        accepted: r.get(7)?,
                    },
                },
            ))
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

fn ids_text(ids: &[i64]) -> String {
    ids.iter()
        .map(ToString::to_string)
        .collect::<Vec<_>>()
        .join(", ")
}

impl Store {
    /// Every taxon, by name, with its parent, accepted name and use.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn taxa(&self) -> Result<Vec<TaxonRow>> {
        let mut codes = codes::codes_by_taxon(self.conn())?;
        let mut stmt = self.conn().prepare(
            "SELECT t.name, t.rank, p.name, a.name, \
                    (SELECT COUNT(*) FROM count c WHERE c.taxon_id = t.id), \
                    (SELECT MIN(CAST(substr(e.date, 1, 4) AS INTEGER)) FROM count c \
                       JOIN event e ON e.id = c.event_id WHERE c.taxon_id = t.id), \
                    (SELECT MAX(CAST(substr(e.date, 1, 4) AS INTEGER)) FROM count c \
                       JOIN event e ON e.id = c.event_id WHERE c.taxon_id = t.id), \
                    t.id \
             FROM taxon t LEFT JOIN taxon p ON p.id = t.parent_id \
                          LEFT JOIN taxon a ON a.id = t.accepted_id \
             ORDER BY t.name",
        )?;
        let rows = stmt
            .query_map([], |r| {
                Ok(TaxonRow {
                    name: r.get(0)?,
                    rank: r.get(1)?,
                    parent: r.get(2)?,
                    accepted: r.get(3)?,
                    codes: codes.remove(&r.get::<_, i64>(7)?).unwrap_or_default(),
                    count_rows: r.get(4)?,
                    first_year: r.get(5)?,
                    last_year: r.get(6)?,
                })
            })?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(rows)
    }

    /// A copy of the taxon table for the rules of [`integrity`].
    ///
    /// # Errors
    /// SQLite errors.
    pub fn taxonomy(&self) -> Result<Taxonomy> {
        load_taxonomy(self.conn())
    }

    /// Rename a taxon; its counts, children and synonyms follow.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown name; [`StoreError::Refused`]
    /// when the new name is empty or taken, or the reason is empty.
    pub fn rename_taxon(&mut self, from: &str, to: &str, reason: &str) -> Result<TaxonChange> {
        let (id, from) = self.resolve_taxon(from)?;
        let from = from.as_str();
        let to = to.trim();
        if to.is_empty() {
            return Err(StoreError::Refused("the new name is empty".into()));
        }
        if to == from {
            return Err(StoreError::Refused(format!(
                "'{from}' has that name already; nothing to rename"
            )));
        }
        if self
            .conn()
            .query_row("SELECT 1 FROM taxon WHERE name = ?1", params![to], |_| {
                Ok(())
            })
            .optional()?
            .is_some()
        {
            return Err(StoreError::Refused(format!(
                "a taxon named '{to}' exists already; use `tally taxa merge {from} {to}` to count one under the other"
            )));
        }
        let edit = Edit {
            taxon: id,
            name: Some(to.to_string()),
            ..Edit::default()
        };
        self.record(
            Record {
                kind: "rename",
                from,
                to,
                reason,
                undoes: None,
                action: format!("renaming {from} to {to}"),
                focus: Some(id),
            },
            vec![edit],
        )
    }

    /// Make `from` a synonym of `into`, or of `into`'s accepted name when `into`
    /// is itself a synonym (the change records the name it resolved to).
    /// Synonyms of `from` are pointed at the same name, so no synonym ever
    /// points at a synonym.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for unknown names; [`StoreError::Refused`] when
    /// both names are the same taxon, when `from` is counted as that name
    /// already, when the merge would add a problem (a loop: merging a taxon
    /// into its own descendant), or when the reason is empty.
    pub fn merge_taxon(&mut self, from: &str, into: &str, reason: &str) -> Result<TaxonChange> {
        require_reason(reason)?;
        let (from_id, from) = self.resolve_taxon(from)?;
        let (into_id, into) = self.resolve_taxon(into)?;
        let (from, into) = (from.as_str(), into.as_str());
        let tax = self.taxonomy()?;
        let target_id = tax.accepted(into_id).unwrap_or(into_id);
        if target_id == from_id {
            return Err(StoreError::Refused(format!(
                "'{into}' is '{from}' or one of its synonyms; nothing to merge"
            )));
        }
        let target = tax
            .get(target_id)
            .map(|n| n.name.clone())
            .unwrap_or_default();
        if tax.get(from_id).and_then(|n| n.accepted) == Some(target_id) {
            return Err(StoreError::Refused(format!(
                "'{from}' is counted as '{target}' already; nothing to merge"
            )));
        }
        let mut edits = vec![Edit {
            taxon: from_id,
            accepted: Some(Some(target_id)),
            ..Edit::default()
        }];
        edits.extend(
            tax.nodes()
                .filter(|n| n.accepted == Some(from_id))
                .map(|n| Edit {
                    taxon: n.id,
                    accepted: Some(Some(target_id)),
                    ..Edit::default()
                }),
        );
        let action = if target == into {
            format!("merging {from} into {into}")
        } else {
            format!("merging {from} into {into} (counted as {target})")
        };
        self.record(
            Record {
                kind: "merge",
                from,
                to: &target,
                reason,
                undoes: None,
                action,
                focus: Some(target_id),
            },
            edits,
        )
    }

    /// Give `name` the parent `parent` (`None`: no parent). A parent that is a
    /// synonym is resolved to its accepted name.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for unknown names; [`StoreError::Refused`] when
    /// `name` is a synonym (its parent is not used), when the parent is the
    /// same, when the move would add a problem (a loop: moving a taxon under
    /// its own descendant; ranks out of order), or when the reason is empty.
    pub fn move_taxon(
        &mut self,
        name: &str,
        parent: Option<&str>,
        reason: &str,
    ) -> Result<TaxonChange> {
        require_reason(reason)?;
        let (id, name) = self.resolve_taxon(name)?;
        let name = name.as_str();
        let tax = self.taxonomy()?;
        if let Some(a) = tax.get(id).and_then(|n| n.accepted) {
            let a = tax.get(a).map(|n| n.name.clone()).unwrap_or_default();
            return Err(StoreError::Refused(format!(
                "'{name}' is a synonym of '{a}'; roll-up does not use a synonym's parent (move '{a}' instead)"
            )));
        }
        // The parent as named (a code stands for its taxon's name).
        let parent = match parent {
            Some(p) => Some(self.resolve_taxon(p)?),
            None => None,
        };
        let new_parent = parent
            .as_ref()
            .map(|(pid, _)| tax.accepted(*pid).unwrap_or(*pid));
        let parent = parent.as_ref().map(|(_, n)| n.as_str());
        let parent_name = new_parent
            .and_then(|p| tax.get(p))
            .map(|n| n.name.clone())
            .unwrap_or_default();
        if tax.get(id).and_then(|n| n.parent) == new_parent {
            return Err(StoreError::Refused(match new_parent {
                Some(_) => format!("'{name}' is under '{parent_name}' already; nothing to move"),
                None => format!("'{name}' has no parent already; nothing to move"),
            }));
        }
        let action = match (parent, new_parent) {
            (Some(p), Some(_)) if p != parent_name => {
                format!("moving {name} under {p} (accepted as {parent_name})")
            }
            (_, Some(_)) => format!("moving {name} under {parent_name}"),
            _ => format!("moving {name} to the top"),
        };
        self.record(
            Record {
                kind: "move",
                from: name,
                to: &parent_name,
                reason,
                undoes: None,
                action,
                focus: Some(id),
            },
            vec![Edit {
                taxon: id,
                parent: Some(new_parent),
                ..Edit::default()
            }],
        )
    }

    /// Reverse change `id`: put back the name, parent and accepted name of every
    /// taxon it touched, and record the undo.
    ///
    /// # Errors
    /// [`StoreError::NotFound`] for an unknown id; [`StoreError::Refused`] when
    /// the change is an undo, was undone already, was recorded before schema V4,
    /// when later changes depend on it (naming them), when a taxon it touched
    /// changed otherwise or is gone, when the undo would add a problem, or
    /// when the reason is empty.
    pub fn undo_taxon_change(&mut self, id: i64, reason: &str) -> Result<TaxonChange> {
        require_reason(reason)?;
        let change = self
            .taxon_changes()?
            .into_iter()
            .find(|c| c.id == id)
            .ok_or_else(|| StoreError::NotFound {
                what: "taxon change",
                name: id.to_string(),
            })?;
        let what = format!("change {id} ({})", change.describe());
        if let Some(u) = change.undoes {
            return Err(StoreError::Refused(format!(
                "{what} cannot be undone: an undo is not undone; to make change {u} again, run its command again"
            )));
        }
        if let Some(u) = change.undone_by {
            return Err(StoreError::Refused(format!(
                "{what} was undone already, by change {u}"
            )));
        }
        let effects = load_effects(self.conn(), id)?;
        if effects.is_empty() {
            return Err(StoreError::Refused(format!(
                "{what} was recorded before tally kept what a change did (store schema V4), so it cannot be undone; make the reverse change with rename, merge or move"
            )));
        }
        let mut dependents: Vec<i64> = later_effects(self.conn(), id)?
            .into_iter()
            .filter(|(_, later)| {
                effects.iter().any(|e| {
                    e.taxon == later.taxon
                        && e.fields()
                            .iter()
                            .zip(later.fields())
                            .any(|(&mine, theirs)| mine && theirs)
                })
            })
            .map(|(c, _)| c)
            .collect();
        dependents.dedup();
        if !dependents.is_empty() {
            return Err(StoreError::Refused(format!(
                "{what} cannot be undone: later change(s) {} changed the same taxa since; undo those first, newest first",
                ids_text(&dependents)
            )));
        }
        let tax = self.taxonomy()?;
        for e in &effects {
            let Some(now) = tax.get(e.taxon) else {
                return Err(StoreError::Refused(format!(
                    "{what} cannot be undone: taxon '{}' is no longer in the store",
                    e.after.name
                )));
            };
            if Values::of(now) != e.after {
                return Err(StoreError::Refused(format!(
                    "{what} cannot be undone: taxon '{}' was changed outside the change history since",
                    now.name
                )));
            }
        }
        let edits = effects
            .iter()
            .map(|e| Edit {
                taxon: e.taxon,
                name: Some(e.before.name.clone()),
                parent: Some(e.before.parent),
                accepted: Some(e.before.accepted),
            })
            .collect();
        self.record(
            Record {
                kind: "undo",
                from: &change.from,
                to: &change.to,
                reason,
                undoes: Some(id),
                action: format!("undoing {what}"),
                focus: None,
            },
            edits,
        )
    }

    /// Apply `edits` and write the change, in one transaction, after trying
    /// them on a copy of the taxonomy: refused when they would add a problem.
    fn record(&mut self, rec: Record<'_>, edits: Vec<Edit>) -> Result<TaxonChange> {
        require_reason(rec.reason)?;
        let tx = self
            .conn_mut()
            .transaction_with_behavior(TransactionBehavior::Immediate)?;
        let before = load_taxonomy(&tx)?;
        let mut after = before.clone();
        let mut effects = Vec::new();
        for edit in edits {
            let Some(node) = after.get_mut(edit.taxon) else {
                return Err(StoreError::NotFound {
                    what: "taxon",
                    name: format!("#{}", edit.taxon),
                });
            };
            let old = Values::of(node);
            let new = Values {
                name: edit.name.unwrap_or_else(|| old.name.clone()),
                parent: edit.parent.unwrap_or(old.parent),
                accepted: edit.accepted.unwrap_or(old.accepted),
            };
            if new == old {
                continue;
            }
            node.name.clone_from(&new.name);
            node.parent = new.parent;
            node.accepted = new.accepted;
            effects.push(Effect {
                taxon: edit.taxon,
                before: old,
                after: new,
            });
        }
        if effects.is_empty() {
            return Err(StoreError::Refused(format!(
                "{}: nothing would change",
                rec.action
            )));
        }
        for e in effects.iter().filter(|e| e.before.name != e.after.name) {
            if after
                .nodes()
                .any(|n| n.id != e.taxon && n.name == e.after.name)
            {
                return Err(StoreError::Refused(format!(
                    "{} would make two taxa named '{}'; nothing was changed",
                    rec.action, e.after.name
                )));
            }
            if let Some((code, taxon)) = codes::code_named(&tx, &e.after.name)? {
                return Err(StoreError::Refused(format!(
                    "{}: {}; nothing was changed",
                    rec.action,
                    codes::name_is_code(&e.after.name, &code, &taxon)
                )));
            }
        }
        let mut problems: Vec<Problem> = before.new_problems(&after);
        if let Some(focus) = rec.focus {
            for p in &mut problems {
                after.enter_at(p, focus);
            }
        }
        if let Some(mut msg) = refusal(&rec.action, &problems) {
            if let Some(undone) = rec.undoes {
                let involved: Vec<i64> = problems.iter().flat_map(|p| p.taxa()).copied().collect();
                let mut later: Vec<i64> = later_effects(&tx, undone)?
                    .into_iter()
                    .filter(|(_, e)| involved.contains(&e.taxon))
                    .map(|(c, _)| c)
                    .collect();
                later.dedup();
                if !later.is_empty() {
                    msg.push_str(&format!(
                        " (later change(s) {} touched these taxa; undo them first)",
                        ids_text(&later)
                    ));
                }
            }
            return Err(StoreError::Refused(msg));
        }
        let changed_at = now();
        tx.execute(
            "INSERT INTO taxon_change (kind, from_name, to_name, changed_at, reason, undoes) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6)",
            params![
                rec.kind, rec.from, rec.to, changed_at, rec.reason, rec.undoes
            ],
        )?;
        let id = tx.last_insert_rowid();
        {
            let mut effect = tx.prepare(
                "INSERT INTO taxon_change_effect (change_id, taxon_id, name_before, name_after, \
                 parent_before, parent_after, accepted_before, accepted_after) \
                 VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)",
            )?;
            let mut update = tx.prepare(
                "UPDATE taxon SET name = ?2, parent_id = ?3, accepted_id = ?4 WHERE id = ?1",
            )?;
            for e in &effects {
                effect.execute(params![
                    id,
                    e.taxon,
                    e.before.name,
                    e.after.name,
                    e.before.parent,
                    e.after.parent,
                    e.before.accepted,
                    e.after.accepted
                ])?;
                update.execute(params![
                    e.taxon,
                    e.after.name,
                    e.after.parent,
                    e.after.accepted
                ])?;
            }
        }
        tx.commit()?;
        Ok(TaxonChange {
            id,
            kind: rec.kind.to_string(),
            from: rec.from.to_string(),
            to: rec.to.to_string(),
            changed_at,
            reason: rec.reason.to_string(),
            undoes: rec.undoes,
            undone_by: None,
        })
    }

    /// Every recorded change, oldest first, with the undo that reversed it.
    ///
    /// # Errors
    /// SQLite errors.
    pub fn taxon_changes(&self) -> Result<Vec<TaxonChange>> {
        let mut stmt = self.conn().prepare(
            "SELECT c.id, c.kind, c.from_name, c.to_name, c.changed_at, c.reason, c.undoes, \
                    (SELECT u.id FROM taxon_change u WHERE u.undoes = c.id) \
             FROM taxon_change c ORDER BY c.id",
        )?;
        let rows = stmt
            .query_map([], |r| {
                Ok(TaxonChange {
                    id: r.get(0)?,
                    kind: r.get(1)?,
                    from: r.get(2)?,
                    to: r.get(3)?,
                    changed_at: r.get(4)?,
                    reason: r.get(5)?,
                    undoes: r.get(6)?,
                    undone_by: r.get(7)?,
                })
            })?
            .collect::<std::result::Result<Vec<_>, _>>()?;
        Ok(rows)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::testing::add_taxon;

    /// Baetidae > Baetis > three species; Ecdyonurus beside it.
    fn store() -> Store {
        let s = Store::open_in_memory().unwrap();
        add_taxon(&s, "Baetidae", "family", None, None).unwrap();
        add_taxon(&s, "Baetis", "genus", Some("Baetidae"), None).unwrap();
        for sp in ["Baetis rhodani", "Baetis muticus", "Baetis vernus"] {
            add_taxon(&s, sp, "species", Some("Baetis"), None).unwrap();
        }
        add_taxon(&s, "Heptageniidae", "family", None, None).unwrap();
        add_taxon(&s, "Ecdyonurus", "genus", Some("Heptageniidae"), None).unwrap();
        add_taxon(&s, "Old name", "", None, Some("Ecdyonurus")).unwrap();
        s
    }

    /// The content dump without the audit trail (which records the undo too).
    fn taxonomy_dump(s: &Store) -> String {
        let dump = s.content_dump().unwrap();
        let mut keep = true;
        let mut out = String::new();
        for line in dump.lines() {
            if let Some(table) = line.strip_prefix("## ") {
                keep = !table.starts_with("taxon_change");
            }
            if keep {
                out.push_str(line);
                out.push('\n');
            }
        }
        out
    }

    fn refused(r: Result<TaxonChange>) -> String {
        match r {
            Err(StoreError::Refused(m)) => m,
            other => panic!("expected a refusal, got {other:?}"),
        }
    }

    #[test]
    fn merging_a_genus_into_its_own_species_is_refused_naming_the_loop() {
        let mut s = store();
        let before = s.content_dump().unwrap();
        let m = refused(s.merge_taxon("Baetis", "Baetis rhodani", "lumped"));
        assert!(
            m.starts_with(
                "merging Baetis into Baetis rhodani would make a loop: \
                 Baetis rhodani → parent Baetis → accepted Baetis rhodani"
            ),
            "{m}"
        );
        assert_eq!(s.content_dump().unwrap(), before);
        // The ancestor into the descendant, two levels down, too.
        let m = refused(s.merge_taxon("Baetidae", "Baetis vernus", "lumped"));
        assert!(
            m.contains(
                "would make a loop: Baetis vernus → parent Baetis → parent Baetidae → accepted Baetis vernus"
            ),
            "{m}"
        );
        assert_eq!(s.content_dump().unwrap(), before);
    }

    #[test]
    fn a_move_under_a_descendant_or_below_a_lower_rank_is_refused() {
        let mut s = store();
        let before = s.content_dump().unwrap();
        let m = refused(s.move_taxon("Baetidae", Some("Baetis rhodani"), "test"));
        assert_eq!(
            m,
            "moving Baetidae under Baetis rhodani would make a loop: \
             Baetidae → parent Baetis rhodani → parent Baetis → parent Baetidae; nothing was changed"
        );
        let m = refused(s.move_taxon("Ecdyonurus", Some("Baetis"), "test"));
        assert!(
            m.contains("ranks out of order: Ecdyonurus (genus) → parent Baetis (genus)"),
            "{m}"
        );
        let m = refused(s.move_taxon("Old name", Some("Baetis"), "test"));
        assert!(m.contains("is a synonym of 'Ecdyonurus'"), "{m}");
        assert_eq!(s.content_dump().unwrap(), before);
    }

    #[test]
    fn a_reason_is_required_for_every_change() {
        let mut s = store();
        let before = s.content_dump().unwrap();
        for r in [
            s.rename_taxon("Baetis", "Baetis s.l.", ""),
            s.merge_taxon("Baetis vernus", "Baetis rhodani", " "),
            s.move_taxon("Ecdyonurus", None, ""),
        ] {
            assert!(refused(r).contains("a reason is required"));
        }
        assert_eq!(s.content_dump().unwrap(), before);
    }

    #[test]
    fn merging_into_a_synonym_counts_under_its_accepted_name() {
        let mut s = store();
        let c = s
            .merge_taxon("Baetis vernus", "Old name", "misidentified")
            .unwrap();
        assert_eq!((c.kind.as_str(), c.to.as_str()), ("merge", "Ecdyonurus"));
        let t = s.taxonomy().unwrap();
        let vernus = t.nodes().find(|n| n.name == "Baetis vernus").unwrap();
        let ecd = t.nodes().find(|n| n.name == "Ecdyonurus").unwrap();
        assert_eq!(vernus.accepted, Some(ecd.id));
    }

    #[test]
    fn rename_merge_and_move_are_undone_to_the_original_taxonomy() {
        let mut s = store();
        let original = taxonomy_dump(&s);
        let changes = [
            s.rename_taxon("Baetis", "Baetis s.l.", "new name").unwrap(),
            // Ecdyonurus has the synonym 'Old name': it is pointed at Baetis too.
            s.merge_taxon("Ecdyonurus", "Baetis s.l.", "lumped")
                .unwrap(),
            s.move_taxon("Baetis rhodani", None, "test").unwrap(),
        ];
        assert_ne!(taxonomy_dump(&s), original);
        assert!(s.taxonomy().unwrap().problems().is_empty());
        for c in changes.iter().rev() {
            let u = s.undo_taxon_change(c.id, "back").unwrap();
            assert_eq!(u.undoes, Some(c.id));
        }
        assert_eq!(taxonomy_dump(&s), original);
        let h = s.taxon_changes().unwrap();
        assert_eq!(h.len(), 6);
        assert_eq!(h[0].undone_by, Some(h[5].id));
        assert_eq!(h[2].undone_by, Some(h[3].id));
    }

    #[test]
    fn undo_is_refused_while_a_later_change_depends_on_it() {
        let mut s = store();
        let a = s.rename_taxon("Baetis", "Baetis s.l.", "one").unwrap();
        let b = s
            .rename_taxon("Baetis s.l.", "Baetis s.str.", "two")
            .unwrap();
        let c = s
            .merge_taxon("Baetis vernus", "Baetis rhodani", "three")
            .unwrap();
        let d = s
            .merge_taxon("Baetis rhodani", "Baetis muticus", "four")
            .unwrap();
        let before = s.content_dump().unwrap();
        let m = refused(s.undo_taxon_change(a.id, "back"));
        assert!(m.contains(&format!("later change(s) {}", b.id)), "{m}");
        // The second merge re-pointed the first one's synonym.
        let m = refused(s.undo_taxon_change(c.id, "back"));
        assert!(m.contains(&format!("later change(s) {}", d.id)), "{m}");
        assert_eq!(s.content_dump().unwrap(), before);
        s.undo_taxon_change(b.id, "back").unwrap();
        s.undo_taxon_change(a.id, "back").unwrap();
        let m = refused(s.undo_taxon_change(a.id, "again"));
        assert!(m.contains("was undone already"), "{m}");
    }

    #[test]
    fn an_undo_that_would_loop_names_the_later_change_in_the_way() {
        // R > A > B (no ranks); move B to R, then A under B: undoing the first
        // would put B back under A, which now sits under B.
        let mut s = Store::open_in_memory().unwrap();
        add_taxon(&s, "R", "", None, None).unwrap();
        add_taxon(&s, "A", "", Some("R"), None).unwrap();
        add_taxon(&s, "B", "", Some("A"), None).unwrap();
        let first = s.move_taxon("B", Some("R"), "one").unwrap();
        let second = s.move_taxon("A", Some("B"), "two").unwrap();
        let m = refused(s.undo_taxon_change(first.id, "back"));
        assert!(
            m.contains("would make a loop: A → parent B → parent A")
                && m.contains(&format!("later change(s) {} touched these taxa", second.id)),
            "{m}"
        );
    }

    #[test]
    fn a_v3_history_is_kept_by_the_v4_migration() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("v3.db");
        {
            let mut c = Connection::open(&path).unwrap();
            c.pragma_update(None, "application_id", crate::store::APPLICATION_ID)
                .unwrap();
            crate::store::embedded::migrations::runner()
                .set_target(refinery::Target::Version(3))
                .run(&mut c)
                .unwrap();
            c.execute(
                "INSERT INTO taxon_change (kind, from_name, to_name, changed_at, reason) \
                 VALUES ('merge', 'Aquarius', 'Gerris', '2024-01-01T00:00:00Z', 'lumped')",
                [],
            )
            .unwrap();
        }
        let mut s = Store::open(&path).unwrap();
        assert!(s.schema_version().unwrap() >= 4);
        let h = s.taxon_changes().unwrap();
        assert_eq!(
            (h[0].id, h[0].kind.as_str(), h[0].reason.as_str()),
            (1, "merge", "lumped")
        );
        assert!(refused(s.undo_taxon_change(1, "back")).contains("schema V4"));
        // `undoes` refers to the rebuilt table under its final name.
        let target: String = s
            .conn()
            .query_row(
                "SELECT \"table\" FROM pragma_foreign_key_list('taxon_change')",
                [],
                |r| r.get(0),
            )
            .unwrap();
        assert_eq!(target, "taxon_change");
    }

    #[test]
    fn changes_recorded_before_v4_cannot_be_undone() {
        let mut s = store();
        s.conn()
            .execute(
                "INSERT INTO taxon_change (kind, from_name, to_name, changed_at, reason) \
                 VALUES ('rename', 'X', 'Y', '2024-01-01T00:00:00Z', '')",
                [],
            )
            .unwrap();
        let m = refused(s.undo_taxon_change(1, "back"));
        assert!(m.contains("schema V4"), "{m}");
    }
}
