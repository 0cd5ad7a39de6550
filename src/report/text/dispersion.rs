//! Table and CSV of a dispersion outcome.

use std::io::{self, Write};

use super::{DESIGN_ALPHA, Render, design_lines, groups_line, permutations_line};
use crate::analysis::dispersion::Permute;
use crate::report::format::{csv_num, fmt_num, fmt_p, new_table, write_table};
use crate::workflow::dispersion::Outcome;

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        writeln!(
            out,
            "Dispersion about group centroids, {} dissimilarities (transform {}), {} {} rows, by {} ({} groups: {})",
            self.distance.name(),
            self.transform.name(),
            self.n,
            self.unit.as_str(),
            self.by,
            self.groups.len(),
            groups_line(self.groups.iter().map(|g| (g.name.as_str(), g.n))),
        )?;
        let mut t = new_table(&["group", "n", "mean distance to centroid"]);
        for g in &self.groups {
            t.add_row(vec![
                g.name.clone(),
                g.n.to_string(),
                fmt_num(g.mean_distance),
            ]);
        }
        write_table(out, &t)?;
        writeln!(
            out,
            "F = {} on {} and {} df, p-value = {}",
            fmt_num(self.f),
            self.df.0,
            self.df.1,
            fmt_p(self.p_value, self.permutations)
        )?;
        writeln!(
            out,
            "{}; {} permuted",
            permutations_line(self.permutations, self.exact, &self.scheme, self.seed),
            match self.permute {
                Permute::Residuals => "residuals from group means",
                Permute::Values => "distances",
            }
        )?;
        for line in design_lines(&self.design, &[self.min_p], DESIGN_ALPHA) {
            writeln!(out, "{line}")?;
        }
        if let Some(pairs) = &self.pairs {
            writeln!(out)?;
            writeln!(out, "pairwise comparisons")?;
            let mut t = new_table(&["group a", "group b", "F", "p-value", "p Holm", "p BH"]);
            for p in pairs {
                t.add_row(vec![
                    p.a.clone(),
                    p.b.clone(),
                    fmt_num(p.f),
                    fmt_p(p.p_value, self.permutations),
                    fmt_p(p.p_holm, self.permutations),
                    fmt_p(p.p_bh, self.permutations),
                ]);
            }
            write_table(out, &t)?;
        }
        for n in &self.notes[self.assembly_notes.min(self.notes.len())..] {
            writeln!(out, "note: {n}")?;
        }
        Ok(())
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record([
            "kind",
            "group_a",
            "group_b",
            "n",
            "mean_distance",
            "f",
            "p_value",
            "p_holm",
            "p_bh",
            "permutations",
            "exact",
        ])?;
        for g in &self.groups {
            w.write_record([
                "group".into(),
                g.name.clone(),
                String::new(),
                g.n.to_string(),
                csv_num(g.mean_distance),
                String::new(),
                String::new(),
                String::new(),
                String::new(),
                String::new(),
                String::new(),
            ])?;
        }
        w.write_record([
            "test".into(),
            String::new(),
            String::new(),
            self.n.to_string(),
            String::new(),
            csv_num(self.f),
            csv_num(self.p_value),
            String::new(),
            String::new(),
            self.permutations.to_string(),
            self.exact.to_string(),
        ])?;
        for p in self.pairs.iter().flatten() {
            w.write_record([
                "pair".into(),
                p.a.clone(),
                p.b.clone(),
                String::new(),
                String::new(),
                csv_num(p.f),
                csv_num(p.p_value),
                csv_num(p.p_holm),
                csv_num(p.p_bh),
                String::new(),
                p.exact.to_string(),
            ])?;
        }
        w.flush()
    }
}
