//! Tables, CSV and JSON of stored runs: the list (`runs list`), one run
//! (`runs show`) and one stored number across runs (`runs series`).

use std::io::{self, Write};

use serde_json::{Value, json};

use super::Render;
use crate::report::format::{new_table, opt_num, write_table};
use crate::workflow::runs::{RunRecord, SeriesPoint, describe};

/// A stored number for people: six decimals, `n/a` when it was not computed.
fn fmt_opt(v: Option<f64>) -> String {
    v.map(|x| format!("{x:.6}")).unwrap_or_else(|| "n/a".into())
}

/// Stored runs, newest first (`runs list`).
#[derive(Debug, Clone, Copy)]
pub struct RunList<'a>(pub &'a [RunRecord]);

impl RunList<'_> {
    /// One object per run, without selection, parameters and result.
    pub fn json(&self) -> Value {
        let list: Vec<_> = self
            .0
            .iter()
            .map(|r| {
                json!({"id": r.id, "kind": r.kind, "what": describe(r), "created_at": r.created_at,
                    "seed": r.seed, "fingerprint": r.fingerprint,
                    "period_start": r.period_start, "period_end": r.period_end,
                    "tool_version": r.tool_version})
            })
            .collect();
        json!(list)
    }
}

impl Render for RunList<'_> {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut t = new_table(&["run", "what", "stored", "data from", "data to", "seed"]);
        for r in self.0 {
            t.add_row(vec![
                r.id.to_string(),
                describe(r),
                r.created_at.clone(),
                r.period_start.clone().unwrap_or_default(),
                r.period_end.clone().unwrap_or_default(),
                r.seed.map(|s| s.to_string()).unwrap_or_default(),
            ]);
        }
        write_table(out, &t)
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record([
            "id",
            "kind",
            "what",
            "created_at",
            "period_start",
            "period_end",
            "seed",
            "fingerprint",
        ])?;
        for r in self.0 {
            w.write_record([
                r.id.to_string(),
                r.kind.clone(),
                describe(r),
                r.created_at.clone(),
                r.period_start.clone().unwrap_or_default(),
                r.period_end.clone().unwrap_or_default(),
                r.seed.map(|s| s.to_string()).unwrap_or_default(),
                r.fingerprint.clone(),
            ])?;
        }
        w.flush()
    }
}

/// One stored run (`runs show`): its record and headline numbers. Its JSON is
/// the record's own serialisation.
impl Render for RunRecord {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        writeln!(
            out,
            "run {} — {} (tally {}, stored {})",
            self.id, self.kind, self.tool_version, self.created_at
        )?;
        writeln!(out, "selection:  {}", self.selection)?;
        writeln!(out, "parameters: {}", self.parameters)?;
        match crate::workflow::runs::command_of(self) {
            Ok((command, note)) => {
                writeln!(out, "command:    {command}")?;
                if let Some(n) = note {
                    writeln!(out, "            ({n})")?;
                }
            }
            Err(e) => writeln!(out, "command:    none ({e})")?,
        }
        writeln!(
            out,
            "seed:       {}",
            self.seed
                .map(|s| s.to_string())
                .unwrap_or_else(|| "none".into())
        )?;
        writeln!(
            out,
            "data:       {} .. {}, fingerprint {}",
            self.period_start.as_deref().unwrap_or("?"),
            self.period_end.as_deref().unwrap_or("?"),
            self.fingerprint
        )?;
        let mut t = new_table(&["stored number", "value"]);
        for (n, v) in &self.values {
            t.add_row(vec![n.clone(), fmt_opt(*v)]);
        }
        write_table(out, &t)
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record(["name", "value"])?;
        for (n, v) in &self.values {
            w.write_record([n.clone(), v.map(|x| x.to_string()).unwrap_or_default()])?;
        }
        w.flush()
    }
}

/// One stored number across runs, ordered by the period each run covers (`runs series`).
#[derive(Debug, Clone, Copy)]
pub struct Series<'a> {
    /// Kind of run.
    pub kind: &'a str,
    /// Name of the stored number.
    pub value: &'a str,
    /// The runs holding it.
    pub points: &'a [SeriesPoint],
}

impl Series<'_> {
    /// `kind`, `value` and one object per point.
    pub fn json(&self) -> Value {
        let list: Vec<_> = self
            .points
            .iter()
            .map(|p| {
                json!({"run_id": p.run_id, "period_start": p.period_start,
                "period_end": p.period_end, "created_at": p.created_at, "value": opt_num(p.value)})
            })
            .collect();
        json!({"kind": self.kind, "value": self.value, "points": list})
    }
}

impl Render for Series<'_> {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut t = new_table(&["run", "data from", "data to", self.value]);
        for p in self.points {
            t.add_row(vec![
                p.run_id.to_string(),
                p.period_start.clone().unwrap_or_default(),
                p.period_end.clone().unwrap_or_default(),
                fmt_opt(p.value),
            ]);
        }
        write_table(out, &t)
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record(["run_id", "period_start", "period_end", "value"])?;
        for p in self.points {
            w.write_record([
                p.run_id.to_string(),
                p.period_start.clone().unwrap_or_default(),
                p.period_end.clone().unwrap_or_default(),
                p.value.map(|x| x.to_string()).unwrap_or_default(),
            ])?;
        }
        w.flush()
    }
}
