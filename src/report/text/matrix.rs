//! Table, CSV and JSON of `tally matrix`: the assembled count matrix of a
//! prepared selection, optionally with the sample metadata columns. The
//! layouts are described in `docs/matrices.md`.

use std::collections::BTreeSet;
use std::io::{self, Write};

use serde_json::{Value, json};

use super::Render;
use crate::matrix::{CountMatrix, SampleMeta};
use crate::report::format::{csv_num, new_table, num, write_table};
use crate::workflow::Prepared;

/// The count matrix of `prepared`, with the metadata columns when `meta`
/// (CSV and table only; the JSON always holds them).
#[derive(Debug, Clone, Copy)]
pub struct Counts<'a> {
    /// The selection and its count matrix.
    pub prepared: &'a Prepared,
    /// Add the sample metadata columns.
    pub meta: bool,
}

impl Counts<'_> {
    /// `unit`, `selection`, `samples` (metadata objects), `taxa`, `ranks`,
    /// `values` (rows, `null` where undefined), `fingerprint`, `notes`, and
    /// `unidentified` (column name → stored taxon) when some column holds a
    /// taxon recorded above the roll-up rank.
    pub fn json(&self) -> Value {
        let p = self.prepared;
        let m = &p.matrix;
        let mut v = json!({
            "unit": p.unit().as_str(),
            "selection": p.selection,
            "samples": m.samples.iter().map(sample_json).collect::<Vec<_>>(),
            "taxa": m.taxa.iter().map(|t| t.name.clone()).collect::<Vec<_>>(),
            "ranks": m.taxa.iter().map(|t| t.rank.clone()).collect::<Vec<_>>(),
            "values": (0..m.values.nrows())
                .map(|i| (0..m.values.ncols()).map(|j| num(m.values[(i, j)])).collect::<Vec<_>>())
                .collect::<Vec<_>>(),
            "fingerprint": m.fingerprint(),
            "notes": m.notes,
        });
        // Columns of taxa recorded above the roll-up rank: column name → the
        // stored taxon (only when there are any, so other matrices print as before).
        let unidentified: serde_json::Map<String, Value> = m
            .taxa
            .iter()
            .filter_map(|t| Some((t.name.clone(), Value::from(t.unidentified.clone()?))))
            .collect();
        if !unidentified.is_empty() {
            v["unidentified"] = Value::Object(unidentified);
        }
        v
    }
}

impl Render for Counts<'_> {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        let rows = text_rows(&self.prepared.matrix, self.meta, fmt_short);
        let header: Vec<&str> = rows[0].iter().map(String::as_str).collect();
        let mut t = new_table(&header);
        for r in &rows[1..] {
            t.add_row(r.clone());
        }
        write_table(out, &t)
    }

    /// First column `sample`, then with `meta` the metadata columns, then one
    /// column per taxon; numbers in their shortest round-trip form.
    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        for row in text_rows(&self.prepared.matrix, self.meta, csv_num) {
            w.write_record(&row)?;
        }
        w.flush()
    }
}

/// One sample's metadata as a JSON object.
fn sample_json(s: &SampleMeta) -> Value {
    let mut v = json!({
        "label": s.label,
        "site": s.site,
        "year": s.year,
        "last_year": s.last_year,
        "season": s.season,
        "first_date": s.first_date,
        "last_date": s.last_date,
        "events_pooled": s.events_pooled,
        "effort": num(s.effort),
        "effort_unit": s.effort_unit,
        "protocol": s.protocol,
        "attributes": s.attributes,
    });
    // Keys whose value changed between the events pooled into the row
    // (docs/matrices.md, "Site attributes that change").
    if !s.attribute_changes.is_empty() {
        v["attribute_changes"] = json!(s.attribute_changes);
    }
    v
}

/// A number for people: whole numbers as they are, others to 4 decimals.
fn fmt_short(v: f64) -> String {
    if !v.is_finite() {
        String::new()
    } else if v.fract() == 0.0 {
        format!("{v}")
    } else {
        let s = format!("{v:.4}");
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    }
}

/// Header and rows as text, for CSV (`csv_num`) and the table (`fmt_short`).
fn text_rows(m: &CountMatrix, meta: bool, fmt: fn(f64) -> String) -> Vec<Vec<String>> {
    let attr_keys: Vec<String> = m
        .samples
        .iter()
        .flat_map(|s| {
            s.attributes
                .keys()
                .chain(s.attribute_changes.keys())
                .cloned()
        })
        .collect::<BTreeSet<_>>()
        .into_iter()
        .collect();
    let mut header = vec!["sample".to_string()];
    if meta {
        for h in [
            "site",
            "year",
            "last_year",
            "season",
            "first_date",
            "last_date",
            "events_pooled",
            "effort",
            "effort_unit",
            "protocol",
        ] {
            header.push(h.to_string());
        }
        header.extend(attr_keys.iter().cloned());
    }
    header.extend(m.taxa.iter().map(|t| t.name.clone()));
    let mut rows = vec![header];
    for (i, s) in m.samples.iter().enumerate() {
        let mut r = vec![s.label.clone()];
        if meta {
            r.extend([
                s.site.clone(),
                s.year.to_string(),
                s.last_year.to_string(),
                s.season.clone().unwrap_or_default(),
                s.first_date.clone(),
                s.last_date.clone(),
                s.events_pooled.to_string(),
                fmt(s.effort),
                s.effort_unit.clone(),
                s.protocol.clone(),
            ]);
            r.extend(attr_keys.iter().map(|k| {
                // A changing key shows the change in words.
                s.attributes
                    .get(k)
                    .or_else(|| s.attribute_changes.get(k))
                    .cloned()
                    .unwrap_or_default()
            }));
        }
        r.extend((0..m.values.ncols()).map(|j| fmt(m.values[(i, j)])));
        rows.push(r);
    }
    rows
}
