//! Table and CSV of a `runs verify` report: whether the stored selection still
//! gives the same matrix, and every stored number the replay did not reproduce.

use std::io::{self, Write};

use serde_json::Value;

use super::Render;
use crate::report::format::{new_table, write_table};
use crate::workflow::runs::VerifyReport;

/// Differences listed in the table (all of them are in the JSON).
const SHOWN: usize = 50;

/// A stored or recomputed entry for the table, cut after 60 characters.
fn short(v: &Value) -> String {
    let s = v.to_string();
    if s.chars().count() > 60 {
        format!("{}…", s.chars().take(60).collect::<String>())
    } else {
        s
    }
}

/// Why a run is not reproduced, for the error that ends the command.
pub fn not_reproduced(rep: &VerifyReport) -> String {
    let mut parts = Vec::new();
    if !rep.fingerprint_matches {
        parts.push("the data fingerprint changed".to_string());
    }
    if !rep.attributes_changed.is_empty() {
        parts.push(format!(
            "the history of site attribute {} changed",
            rep.attributes_changed.join(", ")
        ));
    }
    if rep.numbers_differing > 0 || parts.is_empty() {
        parts.push(crate::words::count(
            rep.numbers_differing,
            "stored number differs",
            "stored numbers differ",
        ));
    }
    parts.join(" and ")
}

impl Render for VerifyReport {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        writeln!(out, "run {} ({})", self.run_id, self.kind)?;
        if self.fingerprint_matches {
            writeln!(
                out,
                "data: the selection reassembles to the same matrix (fingerprint {})",
                self.fingerprint
            )?;
        } else {
            writeln!(
                out,
                "data: CHANGED — the selection now gives a different matrix (fingerprint stored {}, now {})",
                self.stored_fingerprint, self.fingerprint
            )?;
        }
        if !self.attributes_changed.is_empty() {
            writeln!(
                out,
                "site attributes: CHANGED — the values in force on the rows differ from when the run was stored, for {} \
                 (an attribute history was corrected or extended since: see `tally sites history`)",
                self.attributes_changed.join(", ")
            )?;
        }
        let texts = self.differences.len() - self.numbers_differing;
        if self.numbers_differing == 0 {
            writeln!(
                out,
                "result: every stored number was reproduced with the stored seed ({} entries compared)",
                self.compared
            )?;
        } else {
            writeln!(
                out,
                "result: {} of {} stored numbers differ:",
                self.numbers_differing, self.compared
            )?;
            if let Some(rel) = self.max_relative_difference {
                writeln!(
                    out,
                    "largest relative difference {rel:.1e}{} (stored by tally {}, now {})",
                    if rel < 1e-12 {
                        ", at rounding level"
                    } else {
                        ""
                    },
                    self.stored_by,
                    crate::VERSION
                )?;
            }
        }
        if texts > 0 {
            writeln!(
                out,
                "{texts} text entries (wording, notes) differ; they do not change any number"
            )?;
        }
        if !self.differences.is_empty() {
            let mut t = new_table(&["entry", "stored", "recomputed"]);
            for d in self.differences.iter().take(SHOWN) {
                t.add_row(vec![d.path.clone(), short(&d.stored), short(&d.recomputed)]);
            }
            write_table(out, &t)?;
            if self.differences.len() > SHOWN {
                writeln!(
                    out,
                    "… and {} more (see --format json)",
                    self.differences.len() - SHOWN
                )?;
            }
        }
        writeln!(
            out,
            "{}",
            if self.identical {
                "identical"
            } else {
                "not identical"
            }
        )
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record(["path", "stored", "recomputed"])?;
        if !self.fingerprint_matches {
            w.write_record(["fingerprint", &self.stored_fingerprint, &self.fingerprint])?;
        }
        for k in &self.attributes_changed {
            w.write_record([format!("attribute:{k}"), "stored".into(), "changed".into()])?;
        }
        for d in &self.differences {
            w.write_record([
                d.path.clone(),
                d.stored.to_string(),
                d.recomputed.to_string(),
            ])?;
        }
        w.flush()
    }
}
