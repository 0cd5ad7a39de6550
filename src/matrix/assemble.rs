//! Matrix assembly from plain store rows: synonym resolution, roll-up to a
//! rank, pooling of events into rows (`event`, `site-year`, `site-season`,
//! `site`), effort standardisation, taxon and empty-row filtering.
//!
//! Pure: no SQL, no printing. The store hands over [`Records`] (already
//! filtered by the selection); [`assemble`] returns a [`CountMatrix`] whose
//! notes say what was merged, rolled up or dropped.
//!
//! Order of the steps (each documented in `docs/matrices.md`):
//! 1. every recorded taxon is replaced by its accepted name (synonym chain);
//! 2. with a rank, accepted taxa are rolled up the parent chain; a taxon
//!    recorded above the rank is kept as its own column named
//!    `Name (unidentified)`, or left out with `identified_only`;
//! 3. events are grouped into rows by unit and their counts and effort summed;
//! 4. columns are the resulting taxa present (count > 0) in at least
//!    `min_occurrences` rows (at least one), in byte order of name;
//! 5. rows whose every remaining count is zero are dropped (noted) unless kept;
//! 6. with `per_effort`, each row is divided by its pooled effort.

use std::collections::{BTreeMap, BTreeSet, HashMap};

use nalgebra::DMatrix;

use super::rank::rank_level;
use super::{CountMatrix, MatrixError, SampleMeta, TaxonMeta, Unit};

/// One selected sampling event, as the store returns it.
#[derive(Debug, Clone, PartialEq)]
pub struct EventRecord {
    /// Store id (links counts to events).
    pub id: i64,
    /// Event code.
    pub code: String,
    /// Site code.
    pub site: String,
    /// ISO 8601 date `YYYY-MM-DD`.
    pub date: String,
    /// Protocol code.
    pub protocol: String,
    /// Effort (> 0) in the protocol's unit.
    pub effort: f64,
    /// The protocol's effort unit.
    pub effort_unit: String,
}

/// One count of one taxon in one event.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CountRecord {
    /// Event id.
    pub event_id: i64,
    /// Recorded taxon id (possibly a synonym).
    pub taxon_id: i64,
    /// Count (≥ 0).
    pub value: f64,
}

/// One taxon of the store's taxonomy.
#[derive(Debug, Clone, PartialEq)]
pub struct TaxonRecord {
    /// Store id.
    pub id: i64,
    /// Name.
    pub name: String,
    /// Rank (free text, compared case-insensitively).
    pub rank: String,
    /// Parent taxon id, for roll-up.
    pub parent_id: Option<i64>,
    /// Accepted taxon id when this name is a synonym.
    pub accepted_id: Option<i64>,
}

/// One value of a site attribute and the first date on which it holds; it
/// holds until the next value of the same key.
#[derive(Debug, Clone, PartialEq, Eq, PartialOrd, Ord)]
pub struct AttributeValue {
    /// First date (ISO 8601) on which the value holds; `None` for "since always".
    pub from: Option<String>,
    /// The value.
    pub value: String,
}

/// The attribute history of one site: key → values sorted by the date each
/// holds from, "since always" first.
pub type History = BTreeMap<String, Vec<AttributeValue>>;

/// The value in force on `date` (ISO 8601) in a history sorted by `from`
/// ("since always" first): the last value whose `from` is on or before the
/// date, or `None` when the date is before the first dated value and the key
/// has no "since always" value. The one rule for "in force"
/// (docs/data-model.md, "Site attributes that change").
pub fn value_on<'a>(history: &'a [AttributeValue], date: &str) -> Option<&'a str> {
    entry_on(history, date).map(|a| a.value.as_str())
}

/// The entry of `history` in force on `date` (see [`value_on`]).
pub fn entry_on<'a>(history: &'a [AttributeValue], date: &str) -> Option<&'a AttributeValue> {
    history
        .iter()
        .rev()
        .find(|a| a.from.as_deref().is_none_or(|f| f <= date))
}

/// Everything assembly needs, as plain rows.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct Records {
    /// Selected events.
    pub events: Vec<EventRecord>,
    /// Counts of the selected events (taxa not listed for an event count as zero).
    pub counts: Vec<CountRecord>,
    /// The whole taxonomy (synonym and parent chains may leave the selection).
    pub taxa: Vec<TaxonRecord>,
    /// Site code → attribute key → history (sorted by `from`, "since always"
    /// first), for the selected sites.
    pub site_attributes: BTreeMap<String, History>,
}

/// Assembly options (the part of a selection that is not a row filter).
#[derive(Debug, Clone, Default, PartialEq)]
pub struct AssemblyOptions {
    /// What one row is.
    pub unit: Unit,
    /// The `--months A..B` window, which defines seasons; `None` for
    /// meteorological seasons.
    pub months: Option<(u32, u32)>,
    /// Roll taxa up to this rank.
    pub rank: Option<String>,
    /// Drop taxa present in fewer rows than this.
    pub min_occurrences: Option<usize>,
    /// With a rank, leave out the taxa recorded above it (kept as
    /// `Name (unidentified)` columns otherwise).
    pub identified_only: bool,
    /// Divide pooled counts by pooled effort.
    pub per_effort: bool,
    /// Keep rows whose every count is zero.
    pub keep_empty: bool,
}

/// The season of a date: its season year, season name and order within the year.
///
/// With a window `(a, b)` every date is in the window's season (the caller has
/// filtered); when the window wraps the year end (`a > b`) a month `≤ b`
/// belongs to the season that began the previous year. Without a window the
/// meteorological seasons apply (spring Mar–May, summer Jun–Aug, autumn
/// Sep–Nov, winter Dec–Feb; January and February belong to the winter that
/// began the previous December).
pub fn season_of(year: i32, month: u32, window: Option<(u32, u32)>) -> (i32, String, u8) {
    match window {
        Some((a, b)) => {
            let sy = if a > b && month <= b { year - 1 } else { year };
            (sy, format!("{a:02}..{b:02}"), 0)
        }
        None => match month {
            3..=5 => (year, "spring".into(), 0),
            6..=8 => (year, "summer".into(), 1),
            9..=11 => (year, "autumn".into(), 2),
            12 => (year, "winter".into(), 3),
            _ => (year - 1, "winter".into(), 3),
        },
    }
}

/// Year and month of an ISO date.
fn year_month(e: &EventRecord) -> Result<(i32, u32), MatrixError> {
    let bad = || MatrixError::BadDate {
        event: e.code.clone(),
        date: e.date.clone(),
    };
    let b = e.date.as_bytes();
    if b.len() != 10 || b[4] != b'-' || b[7] != b'-' {
        return Err(bad());
    }
    let y: i32 = e.date[0..4].parse().map_err(|_| bad())?;
    let m: u32 = e.date[5..7].parse().map_err(|_| bad())?;
    if !(1..=12).contains(&m) {
        return Err(bad());
    }
    Ok((y, m))
}

/// Synonym and roll-up resolution of recorded taxa.
struct Taxonomy<'a> {
    by_id: HashMap<i64, &'a TaxonRecord>,
}

impl<'a> Taxonomy<'a> {
    fn get(&self, id: i64) -> Option<&'a TaxonRecord> {
        self.by_id.get(&id).copied()
    }

    /// Follow the synonym chain to the accepted taxon.
    fn accepted(&self, id: i64) -> Result<i64, MatrixError> {
        let mut cur = id;
        for _ in 0..=self.by_id.len() {
            match self.get(cur).and_then(|t| t.accepted_id) {
                Some(next) => cur = next,
                None => return Ok(cur),
            }
        }
        Err(MatrixError::TaxonCycle {
            name: self.name(id),
            chain: "accepted",
        })
    }

    /// The accepted ancestor-or-self at `rank`, or `None` when there is none.
    fn at_rank(&self, accepted: i64, rank: &str) -> Result<Option<i64>, MatrixError> {
        let mut cur = accepted;
        for _ in 0..=self.by_id.len() {
            let Some(t) = self.get(cur) else {
                return Ok(None);
            };
            if t.rank.trim().eq_ignore_ascii_case(rank.trim()) {
                return Ok(Some(cur));
            }
            match t.parent_id {
                Some(p) => cur = self.accepted(p)?,
                None => return Ok(None),
            }
        }
        Err(MatrixError::TaxonCycle {
            name: self.name(accepted),
            chain: "parent",
        })
    }

    fn name(&self, id: i64) -> String {
        self.get(id)
            .map(|t| t.name.clone())
            .unwrap_or_else(|| format!("#{id}"))
    }
}

/// Key of the row an event is pooled into.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
enum RowKey {
    Event(i64),
    SiteYear(String, i32),
    SiteSeason(String, i32, u8),
    Site(String),
}

struct Row {
    label: String,
    site: String,
    year: i32,
    last_year: i32,
    season: Option<String>,
    first_date: String,
    last_date: String,
    events: usize,
    effort: f64,
    units: BTreeSet<String>,
    protocols: BTreeSet<String>,
    /// Attribute key → the runs of equal values over the row's events in date
    /// order: the entry in force (`None`: no value), first and last event date.
    attributes: BTreeMap<String, Vec<(Option<AttributeValue>, String, String)>>,
}

impl Row {
    /// Record the attribute values in force on the date of one more event
    /// (events come in date order within a row).
    fn note_attributes(
        &mut self,
        history: Option<&BTreeMap<String, Vec<AttributeValue>>>,
        date: &str,
    ) {
        let Some(history) = history else { return };
        for (key, values) in history {
            let now = entry_on(values, date).cloned();
            let runs = self.attributes.entry(key.clone()).or_default();
            match runs.last_mut() {
                Some(last)
                    if last.0.as_ref().map(|a| &a.value) == now.as_ref().map(|a| &a.value) =>
                {
                    last.2 = date.to_string();
                }
                _ => runs.push((now, date.to_string(), date.to_string())),
            }
        }
    }

    /// The attributes with one value over the row, and the keys that changed
    /// within it with the change in words.
    fn attributes(&self) -> (BTreeMap<String, String>, BTreeMap<String, String>) {
        let mut single = BTreeMap::new();
        let mut changed = BTreeMap::new();
        for (key, runs) in &self.attributes {
            match runs.as_slice() {
                [(Some(v), _, _)] => {
                    single.insert(key.clone(), v.value.clone());
                }
                [(None, _, _)] | [] => {}
                _ => {
                    // "degraded (events 2014-05-04), then restored from 2014-06-01 (events 2014-10-06)"
                    let words: Vec<String> = runs
                        .iter()
                        .enumerate()
                        .map(|(i, (v, a, b))| {
                            let value = match v {
                                None => "no value".to_string(),
                                Some(AttributeValue {
                                    from: Some(f),
                                    value,
                                }) if i > 0 => {
                                    format!("{value} from {f}")
                                }
                                Some(v) => v.value.clone(),
                            };
                            let events = if a == b {
                                a.clone()
                            } else {
                                format!("{a}..{b}")
                            };
                            format!("{value} (events {events})")
                        })
                        .collect();
                    changed.insert(key.clone(), words.join(", then "));
                }
            }
        }
        (single, changed)
    }
}

/// Build the count matrix from selected rows.
///
/// Rows come in the order of their first event, events sorted by site code,
/// date, protocol and event code (byte order); columns in byte order of the
/// (accepted, rolled-up) taxon name.
///
/// # Errors
/// [`MatrixError::UnknownRank`] when no taxon has the requested rank;
/// [`MatrixError::RankNotInOrder`] with `identified_only` and a rank outside
/// the rank order;
/// [`MatrixError::MixedEffortUnits`] with `per_effort` over several effort
/// units; [`MatrixError::Empty`] when no event, taxon or non-empty row is
/// left; [`MatrixError::TaxonCycle`], [`MatrixError::UnknownTaxon`],
/// [`MatrixError::BadDate`] for inconsistent input.
pub fn assemble(records: &Records, opts: &AssemblyOptions) -> Result<CountMatrix, MatrixError> {
    let mut notes = Vec::new();
    if records.events.is_empty() {
        return Err(MatrixError::Empty {
            why: "no events were selected".into(),
        });
    }
    let tax = Taxonomy {
        by_id: records.taxa.iter().map(|t| (t.id, t)).collect(),
    };
    if let Some(rank) = &opts.rank {
        let ranks: BTreeSet<String> = records
            .taxa
            .iter()
            .map(|t| t.rank.trim().to_lowercase())
            .filter(|r| !r.is_empty())
            .collect();
        if !ranks.contains(&rank.trim().to_lowercase()) {
            return Err(MatrixError::UnknownRank {
                rank: rank.clone(),
                available: ranks.into_iter().collect(),
            });
        }
        if opts.identified_only && rank_level(rank).is_none() {
            return Err(MatrixError::RankNotInOrder { rank: rank.clone() });
        }
    }

    // Steps 1-2: recorded taxon id -> final taxon id, for the taxa that occur.
    let mut final_of: HashMap<i64, i64> = HashMap::new();
    let mut synonyms: BTreeSet<(String, String)> = BTreeSet::new();
    let mut unrolled: BTreeSet<String> = BTreeSet::new();
    // Accepted taxa with no ancestor at the rank whose own rank is above it
    // (docs/matrices.md, "How a matrix is assembled").
    let mut above: BTreeSet<i64> = BTreeSet::new();
    let mut rolled = 0usize;
    for c in &records.counts {
        if final_of.contains_key(&c.taxon_id) {
            continue;
        }
        if tax.get(c.taxon_id).is_none() {
            return Err(MatrixError::UnknownTaxon {
                event: c.event_id,
                taxon: c.taxon_id,
            });
        }
        let acc = tax.accepted(c.taxon_id)?;
        if acc != c.taxon_id {
            synonyms.insert((tax.name(c.taxon_id), tax.name(acc)));
        }
        let fin = match &opts.rank {
            None => acc,
            Some(rank) => match tax.at_rank(acc, rank)? {
                Some(r) => {
                    if r != acc {
                        rolled += 1;
                    }
                    r
                }
                None => {
                    let level = tax.get(acc).and_then(|t| rank_level(&t.rank));
                    match (level, rank_level(rank)) {
                        (Some(l), Some(r)) if l < r => {
                            above.insert(acc);
                        }
                        _ => {
                            unrolled.insert(tax.name(acc));
                        }
                    }
                    acc
                }
            },
        };
        final_of.insert(c.taxon_id, fin);
    }
    if !synonyms.is_empty() {
        let list: Vec<String> = synonyms
            .iter()
            .map(|(a, b)| format!("{a} -> {b}"))
            .collect();
        notes.push(format!(
            "synonyms counted under their accepted names: {}",
            list.join(", ")
        ));
    }
    if let Some(rank) = &opts.rank {
        if rolled > 0 {
            notes.push(format!("{rolled} recorded taxa rolled up to rank {rank}"));
        }
        if !unrolled.is_empty() {
            let list: Vec<&str> = unrolled.iter().map(String::as_str).collect();
            notes.push(format!(
                "{} taxa have no ancestor at rank {rank} and stay as they are: {}",
                unrolled.len(),
                list.join(", ")
            ));
        }
    }

    // Step 3: group events into rows.
    let mut events: Vec<&EventRecord> = records.events.iter().collect();
    events.sort_by(|a, b| {
        (&a.site, &a.date, &a.protocol, &a.code).cmp(&(&b.site, &b.date, &b.protocol, &b.code))
    });
    let mut rows: Vec<Row> = Vec::new();
    let mut row_of_key: HashMap<RowKey, usize> = HashMap::new();
    let mut row_of_event: HashMap<i64, usize> = HashMap::with_capacity(events.len());
    for e in &events {
        let (y, m) = year_month(e)?;
        let (sy, season, order) = season_of(y, m, opts.months);
        let window = opts.months.is_some();
        let (key, label, year, row_season) = match opts.unit {
            Unit::Event => (
                RowKey::Event(e.id),
                e.code.clone(),
                if window { sy } else { y },
                Some(season),
            ),
            Unit::SiteYear => {
                let yy = if window { sy } else { y };
                (
                    RowKey::SiteYear(e.site.clone(), yy),
                    format!("{}/{yy}", e.site),
                    yy,
                    window.then_some(season),
                )
            }
            Unit::SiteSeason => (
                RowKey::SiteSeason(e.site.clone(), sy, order),
                format!("{}/{sy}-{season}", e.site),
                sy,
                Some(season),
            ),
            Unit::Site => (
                RowKey::Site(e.site.clone()),
                e.site.clone(),
                if window { sy } else { y },
                window.then_some(season),
            ),
        };
        let idx = *row_of_key.entry(key).or_insert_with(|| {
            rows.push(Row {
                label,
                site: e.site.clone(),
                year,
                last_year: year,
                season: row_season,
                first_date: e.date.clone(),
                last_date: e.date.clone(),
                events: 0,
                effort: 0.0,
                units: BTreeSet::new(),
                protocols: BTreeSet::new(),
                attributes: BTreeMap::new(),
            });
            rows.len() - 1
        });
        let r = &mut rows[idx];
        r.note_attributes(records.site_attributes.get(&e.site), &e.date);
        r.year = r.year.min(year);
        r.last_year = r.last_year.max(year);
        if e.date < r.first_date {
            r.first_date = e.date.clone();
        }
        if e.date > r.last_date {
            r.last_date = e.date.clone();
        }
        r.events += 1;
        r.effort += e.effort;
        r.units.insert(e.effort_unit.clone());
        r.protocols.insert(e.protocol.clone());
        row_of_event.insert(e.id, idx);
    }

    // Dense accumulation over the final taxa, columns in byte order of the
    // column name.
    let column_name = |id: i64| {
        if above.contains(&id) {
            format!("{}{}", tax.name(id), TaxonMeta::UNIDENTIFIED)
        } else {
            tax.name(id)
        }
    };
    let mut final_ids: Vec<i64> = final_of
        .values()
        .copied()
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    final_ids.sort_by_key(|a| column_name(*a));
    let col_of_final: HashMap<i64, usize> = final_ids
        .iter()
        .enumerate()
        .map(|(j, id)| (*id, j))
        .collect();
    let ncol = final_ids.len();
    let mut dense = vec![0.0_f64; rows.len() * ncol];
    for c in &records.counts {
        let Some(&i) = row_of_event.get(&c.event_id) else {
            continue;
        };
        let j = col_of_final[&final_of[&c.taxon_id]];
        dense[i * ncol + j] += c.value;
    }

    // Step 4: columns present in at least `min_occurrences` rows.
    let min_occ = opts.min_occurrences.unwrap_or(1).max(1);
    let occ: Vec<usize> = (0..ncol)
        .map(|j| {
            (0..rows.len())
                .filter(|&i| dense[i * ncol + j] > 0.0)
                .count()
        })
        .collect();
    // Columns of taxa recorded above the rank (present in some row).
    let above_cols: Vec<usize> = (0..ncol)
        .filter(|&j| occ[j] > 0 && above.contains(&final_ids[j]))
        .collect();
    let left_out = |j: &usize| opts.identified_only && above_cols.contains(j);
    if let (Some(rank), true) = (&opts.rank, opts.identified_only && !above_cols.is_empty()) {
        notes.push(identified_only_note(
            rank,
            &above_cols,
            &final_ids,
            &column_name,
            &dense,
            rows.len(),
        ));
    }
    let keep_cols: Vec<usize> = (0..ncol)
        .filter(|j| occ[*j] >= min_occ && !left_out(j))
        .collect();
    if let (Some(rank), false) = (&opts.rank, opts.identified_only) {
        let kept: Vec<String> = keep_cols
            .iter()
            .filter(|j| above_cols.contains(j))
            .map(|&j| column_name(final_ids[j]))
            .collect();
        if !kept.is_empty() {
            notes.push(format!(
                "{} recorded above rank {rank} kept as {}: {} (--identified-only leaves {} out)",
                crate::words::count(kept.len(), "taxon", "taxa"),
                if kept.len() == 1 {
                    "its own column"
                } else {
                    "their own columns"
                },
                kept.join(", "),
                if kept.len() == 1 { "it" } else { "them" }
            ));
        }
    }
    if let Some(n) = opts.min_occurrences {
        let dropped: Vec<String> = (0..ncol)
            .filter(|j| occ[*j] > 0 && occ[*j] < min_occ && !left_out(j))
            .map(|j| column_name(final_ids[j]))
            .collect();
        if !dropped.is_empty() {
            notes.push(format!(
                "{} taxa present in fewer than {n} rows dropped: {}",
                dropped.len(),
                dropped.join(", ")
            ));
        }
    }
    if keep_cols.is_empty() {
        if let (Some(rank), true) = (&opts.rank, (0..ncol).all(|j| occ[j] == 0 || left_out(&j))) {
            return Err(MatrixError::Empty {
                why: format!(
                    "every taxon of the selection is recorded above rank {rank}, and \
                     --identified-only leaves them out"
                ),
            });
        }
        return Err(MatrixError::Empty {
            why: format!("no taxon is present in at least {min_occ} row(s) of the selection"),
        });
    }

    // Step 5: rows whose every remaining count is zero.
    let is_empty: Vec<bool> = (0..rows.len())
        .map(|i| keep_cols.iter().all(|&j| dense[i * ncol + j] == 0.0))
        .collect();
    let empty: Vec<usize> = (0..rows.len()).filter(|&i| is_empty[i]).collect();
    let keep_rows: Vec<usize> = (0..rows.len())
        .filter(|&i| opts.keep_empty || !is_empty[i])
        .collect();
    if !empty.is_empty() {
        let labels: Vec<&str> = empty.iter().map(|&i| rows[i].label.as_str()).collect();
        if opts.keep_empty {
            notes.push(format!(
                "{} rows with no organisms kept (they caught nothing): {}",
                empty.len(),
                labels.join(", ")
            ));
        } else {
            notes.push(format!(
                "warning: {} rows with no organisms dropped (their composition is undefined; --keep-empty keeps them): {}",
                empty.len(),
                labels.join(", ")
            ));
        }
    }
    if keep_rows.is_empty() {
        return Err(MatrixError::Empty {
            why: "every selected row has no organisms".into(),
        });
    }

    // Step 6: effort.
    if opts.per_effort {
        let units: BTreeSet<&String> = keep_rows
            .iter()
            .flat_map(|&i| rows[i].units.iter())
            .collect();
        if units.len() > 1 {
            return Err(MatrixError::MixedEffortUnits {
                units: units.into_iter().cloned().collect(),
            });
        }
    }
    let mixed: Vec<&str> = keep_rows
        .iter()
        .filter(|&&i| rows[i].units.len() > 1)
        .map(|&i| rows[i].label.as_str())
        .collect();
    if !mixed.is_empty() {
        notes.push(format!(
            "rows pooling different effort units have no total effort: {}",
            mixed.join(", ")
        ));
    }

    let values = DMatrix::from_fn(keep_rows.len(), keep_cols.len(), |r, c| {
        let (i, j) = (keep_rows[r], keep_cols[c]);
        let v = dense[i * ncol + j];
        if opts.per_effort {
            v / rows[i].effort
        } else {
            v
        }
    });
    let samples = keep_rows
        .iter()
        .map(|&i| {
            let r = &rows[i];
            let (attributes, attribute_changes) = r.attributes();
            SampleMeta {
                label: r.label.clone(),
                site: r.site.clone(),
                attributes,
                attribute_changes,
                year: r.year,
                last_year: r.last_year,
                season: r.season.clone(),
                first_date: r.first_date.clone(),
                last_date: r.last_date.clone(),
                events_pooled: r.events,
                effort: if r.units.len() == 1 {
                    r.effort
                } else {
                    f64::NAN
                },
                effort_unit: r.units.iter().cloned().collect::<Vec<_>>().join("+"),
                protocol: r.protocols.iter().cloned().collect::<Vec<_>>().join("+"),
            }
        })
        .collect();
    let taxa = keep_cols
        .iter()
        .map(|&j| {
            let t = tax
                .get(final_ids[j])
                .expect("invariant: final ids come from the taxon list");
            TaxonMeta {
                name: column_name(final_ids[j]),
                rank: t.rank.clone(),
                unidentified: above.contains(&final_ids[j]).then(|| t.name.clone()),
            }
        })
        .collect();
    Ok(CountMatrix {
        samples,
        taxa,
        values,
        notes,
    })
}

/// The note of `--identified-only`: the columns of taxa recorded above `rank`
/// it leaves out, and what they held (counts as recorded, before any division
/// by effort, over the rows before empty rows are dropped).
fn identified_only_note(
    rank: &str,
    cols: &[usize],
    final_ids: &[i64],
    column_name: &dyn Fn(i64) -> String,
    dense: &[f64],
    nrows: usize,
) -> String {
    let ncol = final_ids.len();
    let names: Vec<String> = cols.iter().map(|&j| column_name(final_ids[j])).collect();
    let cells = || (0..nrows).flat_map(move |i| cols.iter().map(move |&j| dense[i * ncol + j]));
    let total: f64 = cells().sum();
    let whole = cells().all(|v| v.fract() == 0.0) && total < 9.0e15;
    let samples = (0..nrows)
        .filter(|&i| cols.iter().any(|&j| dense[i * ncol + j] > 0.0))
        .count();
    let held = if whole {
        crate::words::count(total, "individual", "individuals")
    } else {
        format!("a total count of {total}")
    };
    format!(
        "--identified-only: left out {} recorded above {rank} ({}): {held} in {}",
        crate::words::count(names.len(), "taxon", "taxa"),
        names.join(", "),
        crate::words::count(samples, "sample", "samples")
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ev(id: i64, site: &str, date: &str) -> EventRecord {
        EventRecord {
            id,
            code: format!("e{id}"),
            site: site.into(),
            date: date.into(),
            protocol: "kick".into(),
            effort: 1.0,
            effort_unit: "minutes".into(),
        }
    }

    fn taxon(id: i64, name: &str, parent: Option<i64>, accepted: Option<i64>) -> TaxonRecord {
        TaxonRecord {
            id,
            name: name.into(),
            rank: "genus".into(),
            parent_id: parent,
            accepted_id: accepted,
        }
    }

    #[test]
    fn seasons_follow_the_documented_calendar() {
        // Meteorological seasons: Dec-Feb winter, belonging to the December's year.
        assert_eq!(season_of(2016, 1, None), (2015, "winter".into(), 3));
        assert_eq!(season_of(2016, 12, None), (2016, "winter".into(), 3));
        assert_eq!(season_of(2016, 3, None), (2016, "spring".into(), 0));
        assert_eq!(season_of(2016, 11, None), (2016, "autumn".into(), 2));
        // A window 11..2 wraps: February 2017 belongs to the season begun in November 2016.
        assert_eq!(season_of(2017, 2, Some((11, 2))).0, 2016);
        assert_eq!(season_of(2016, 11, Some((11, 2))).0, 2016);
        assert_eq!(season_of(2016, 5, Some((4, 5))), (2016, "04..05".into(), 0));
    }

    #[test]
    fn synonym_chains_are_followed_and_cycles_refused() {
        // C is a synonym of B, itself a synonym of A: counts of C and B land on A.
        let records = Records {
            events: vec![ev(1, "S", "2020-05-01")],
            counts: vec![
                CountRecord {
                    event_id: 1,
                    taxon_id: 3,
                    value: 2.0,
                },
                CountRecord {
                    event_id: 1,
                    taxon_id: 2,
                    value: 1.0,
                },
                CountRecord {
                    event_id: 1,
                    taxon_id: 1,
                    value: 4.0,
                },
            ],
            taxa: vec![
                taxon(1, "A", None, None),
                taxon(2, "B", None, Some(1)),
                taxon(3, "C", None, Some(2)),
            ],
            site_attributes: BTreeMap::new(),
        };
        let m = assemble(&records, &AssemblyOptions::default()).unwrap();
        assert_eq!(m.taxa.len(), 1);
        assert_eq!(m.values[(0, 0)], 7.0);

        let mut looped = records.clone();
        looped.taxa[0].accepted_id = Some(3);
        assert!(matches!(
            assemble(&looped, &AssemblyOptions::default()),
            Err(MatrixError::TaxonCycle { .. })
        ));
    }

    #[test]
    fn bad_dates_and_no_events_are_errors() {
        let mut r = Records {
            events: vec![ev(1, "S", "2020-5-01")],
            ..Default::default()
        };
        assert!(matches!(
            assemble(&r, &AssemblyOptions::default()),
            Err(MatrixError::BadDate { .. })
        ));
        r.events.clear();
        assert!(matches!(
            assemble(&r, &AssemblyOptions::default()),
            Err(MatrixError::Empty { .. })
        ));
    }

    /// Baetidae > Baetis > two species, a family with no lower records, and
    /// a taxon of unknown rank; counts on the genus and the family are
    /// unidentified at species rank.
    fn unidentified_records() -> Records {
        let ranked = |id, name: &str, rank: &str, parent| TaxonRecord {
            rank: rank.into(),
            ..taxon(id, name, parent, None)
        };
        let c = |event_id, taxon_id, value| CountRecord {
            event_id,
            taxon_id,
            value,
        };
        let mut events: Vec<EventRecord> = (1..=4)
            .map(|i| ev(i, "S", &format!("2020-05-0{i}")))
            .collect();
        events[2].effort = 2.0;
        Records {
            events,
            counts: vec![
                c(1, 3, 10.0),
                c(1, 2, 3.0),
                c(1, 5, 1.0),
                c(2, 4, 2.0),
                c(2, 5, 4.0),
                c(2, 6, 7.0),
                c(3, 2, 5.0),
                c(3, 3, 1.0),
                // Event 4 holds only an unidentified count.
                c(4, 2, 2.0),
            ],
            taxa: vec![
                ranked(1, "Baetidae", "family", None),
                ranked(2, "Baetis", "genus", Some(1)),
                ranked(3, "Baetis rhodani", "species", Some(2)),
                ranked(4, "Baetis vernus", "species", Some(2)),
                ranked(5, "Chironomidae", "Family", None),
                ranked(6, "Oligochaeta", "", None),
            ],
            site_attributes: BTreeMap::new(),
        }
    }

    fn at_species(identified_only: bool) -> AssemblyOptions {
        AssemblyOptions {
            rank: Some("species".into()),
            identified_only,
            ..Default::default()
        }
    }

    fn names(m: &CountMatrix) -> Vec<&str> {
        m.taxa.iter().map(|t| t.name.as_str()).collect()
    }

    #[test]
    fn taxa_recorded_above_the_rank_are_named_unidentified() {
        let r = unidentified_records();
        let m = assemble(&r, &at_species(false)).unwrap();
        // Byte order of the column name: " (" sorts before " r".
        assert_eq!(
            names(&m),
            [
                "Baetis (unidentified)",
                "Baetis rhodani",
                "Baetis vernus",
                "Chironomidae (unidentified)",
                "Oligochaeta",
            ]
        );
        let taxa: Vec<&str> = m.taxa.iter().map(TaxonMeta::taxon_name).collect();
        assert_eq!(
            taxa,
            [
                "Baetis",
                "Baetis rhodani",
                "Baetis vernus",
                "Chironomidae",
                "Oligochaeta"
            ]
        );
        let flags: Vec<bool> = m.taxa.iter().map(TaxonMeta::is_unidentified).collect();
        assert_eq!(flags, [true, false, false, true, false]);
        // The counts are the recorded ones, column by column.
        assert_eq!(m.values.column(0).iter().sum::<f64>(), 3.0 + 5.0 + 2.0);
        assert!(m.notes.iter().any(|n| n.contains(
            "2 taxa recorded above rank species kept as their own columns: \
             Baetis (unidentified), Chironomidae (unidentified) (--identified-only leaves them out)"
        )));
        // A taxon of unknown rank cannot be told to be above the rank: it
        // stays under its own name, listed as before.
        assert!(m.notes.iter().any(|n| n.contains(
            "1 taxa have no ancestor at rank species and stay as they are: Oligochaeta"
        )));
        // At genus rank the genus is the rank itself; only the family is above it.
        let g = assemble(
            &r,
            &AssemblyOptions {
                rank: Some("Genus".into()),
                ..Default::default()
            },
        )
        .unwrap();
        assert_eq!(
            names(&g),
            ["Baetis", "Chironomidae (unidentified)", "Oligochaeta"]
        );
        // Without a rank nothing is unidentified and names are the taxa's.
        let plain = assemble(&r, &AssemblyOptions::default()).unwrap();
        assert!(plain.taxa.iter().all(|t| !t.is_unidentified()));
        assert!(names(&plain).contains(&"Baetis"));
    }

    #[test]
    fn identified_only_leaves_out_the_unidentified_columns_and_says_what_they_held() {
        let r = unidentified_records();
        for per_effort in [false, true] {
            let opts = |identified_only| AssemblyOptions {
                per_effort,
                ..at_species(identified_only)
            };
            let full = assemble(&r, &opts(false)).unwrap();
            let raw = assemble(&r, &at_species(false)).unwrap();
            let m = assemble(&r, &opts(true)).unwrap();
            // Columns: those of the full matrix that are not unidentified.
            let expected: Vec<&str> = full
                .taxa
                .iter()
                .filter(|t| !t.is_unidentified())
                .map(|t| t.name.as_str())
                .collect();
            assert_eq!(names(&m), expected);
            // The note's figures, computed here from the matrix that keeps
            // them (raw counts: the note counts individuals, not rates).
            let cols: Vec<usize> = (0..raw.taxa.len())
                .filter(|&j| raw.taxa[j].is_unidentified())
                .collect();
            let individuals: f64 = cols.iter().map(|&j| raw.values.column(j).sum()).sum();
            let samples = (0..raw.values.nrows())
                .filter(|&i| cols.iter().any(|&j| raw.values[(i, j)] > 0.0))
                .count();
            let listed: Vec<&str> = cols.iter().map(|&j| raw.taxa[j].name.as_str()).collect();
            let note = format!(
                "--identified-only: left out {} taxa recorded above species ({}): {} individuals in {} samples",
                cols.len(),
                listed.join(", "),
                individuals,
                samples
            );
            assert!(m.notes.contains(&note), "{note}\n{:?}", m.notes);
            assert_eq!((cols.len(), individuals, samples), (2, 15.0, 4));
            // Event 4 held only Baetis: with it left out the row is empty and dropped.
            assert_eq!(m.samples.len(), 3);
            assert!(
                m.notes
                    .iter()
                    .any(|n| n.contains("rows with no organisms dropped") && n.contains("e4"))
            );
            assert!(!m.notes.iter().any(|n| n.contains("kept as")));
        }
    }

    #[test]
    fn identified_only_refuses_what_it_cannot_tell_or_leaves_nothing() {
        let mut r = unidentified_records();
        r.taxa[2].rank = "morphospecies".into();
        assert!(matches!(
            assemble(
                &r,
                &AssemblyOptions {
                    rank: Some("morphospecies".into()),
                    identified_only: true,
                    ..Default::default()
                }
            ),
            Err(MatrixError::RankNotInOrder { .. })
        ));
        // Only unidentified counts: nothing is left, and the error says why.
        let mut r = unidentified_records();
        r.counts.retain(|c| c.taxon_id == 2 || c.taxon_id == 5);
        match assemble(&r, &at_species(true)) {
            Err(MatrixError::Empty { why }) => assert!(why.contains("above rank species"), "{why}"),
            other => panic!("{other:?}"),
        }
        // Counts that are not whole numbers are not called individuals.
        let mut r = unidentified_records();
        r.counts[1].value = 2.5;
        let m = assemble(&r, &at_species(true)).unwrap();
        assert!(
            m.notes
                .iter()
                .any(|n| n.contains("a total count of 14.5 in 4 samples")),
            "{:?}",
            m.notes
        );
    }
}
