//! Table and CSV of a PERMANOVA outcome.

use std::io::{self, Write};

use super::{DESIGN_ALPHA, Render, design_lines, groups_line, permutations_line};
use crate::analysis::linear_model::SsType;
use crate::analysis::permanova::PermutationMethod;
use crate::report::format::{csv_num, fmt_num, fmt_p, new_table, write_table};
use crate::workflow::permanova::{DISPERSION_CAUTION, Outcome};

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        let r = &self.result;
        writeln!(
            out,
            "PERMANOVA of {} dissimilarities (transform {}), {} {} rows, by {} ({} groups: {})",
            self.distance.name(),
            self.transform.name(),
            self.n,
            self.unit.as_str(),
            self.by,
            self.groups.len(),
            groups_line(self.groups.iter().map(|g| (g.name.as_str(), g.n))),
        )?;
        let mut t = new_table(&["term", "df", "SS", "R²", "pseudo-F", "p-value"]);
        for term in &r.terms {
            t.add_row(vec![
                term.name.clone(),
                term.df.to_string(),
                fmt_num(term.ss),
                fmt_num(term.r2),
                fmt_num(term.pseudo_f),
                fmt_p(term.p_value, term.permutations),
            ]);
        }
        t.add_row(vec![
            "residual".into(),
            r.residual.df.to_string(),
            fmt_num(r.residual.ss),
            fmt_num(r.residual.ss / r.total.ss),
            String::new(),
            String::new(),
        ]);
        t.add_row(vec![
            "total".into(),
            r.total.df.to_string(),
            fmt_num(r.total.ss),
            "1".into(),
            String::new(),
            String::new(),
        ]);
        write_table(out, &t)?;
        let how = match r.method {
            PermutationMethod::Labels => "group labels permuted",
            PermutationMethod::FreedmanLane => {
                "residuals of each reduced model permuted (Freedman-Lane)"
            }
        };
        writeln!(
            out,
            "{}; {how}; {} sums of squares",
            permutations_line(r.permutations, r.exact, &r.scheme, r.seed),
            match r.ss_type {
                SsType::Sequential => "sequential",
                SsType::Marginal => "marginal",
            }
        )?;
        let smallest: Vec<f64> = r.terms.iter().map(|t| t.min_p).collect();
        for line in design_lines(&self.design, &smallest, DESIGN_ALPHA) {
            writeln!(out, "{line}")?;
        }
        if let Some(pairs) = &self.pairs {
            writeln!(out)?;
            writeln!(out, "pairwise comparisons")?;
            let mut t = new_table(&[
                "group a", "group b", "n", "pseudo-F", "R²", "p-value", "p Holm", "p BH",
            ]);
            for p in pairs {
                t.add_row(vec![
                    p.a.clone(),
                    p.b.clone(),
                    format!("{}+{}", p.n.0, p.n.1),
                    fmt_num(p.pseudo_f),
                    fmt_num(p.r2),
                    fmt_p(p.p_value, p.permutations),
                    fmt_p(p.p_holm, p.permutations),
                    fmt_p(p.p_bh, p.permutations),
                ]);
            }
            write_table(out, &t)?;
        }
        writeln!(out)?;
        writeln!(out, "caution: {DISPERSION_CAUTION}")
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let r = &self.result;
        let mut w = crate::report::format::csv_writer(out);
        w.write_record([
            "kind",
            "name",
            "group_a",
            "group_b",
            "df",
            "ss",
            "r2",
            "pseudo_f",
            "p_value",
            "p_holm",
            "p_bh",
            "permutations",
            "exact",
        ])?;
        for t in &r.terms {
            w.write_record([
                "term".into(),
                t.name.clone(),
                String::new(),
                String::new(),
                t.df.to_string(),
                csv_num(t.ss),
                csv_num(t.r2),
                csv_num(t.pseudo_f),
                csv_num(t.p_value),
                String::new(),
                String::new(),
                t.permutations.to_string(),
                t.exact.to_string(),
            ])?;
        }
        for (kind, row) in [("residual", &r.residual), ("total", &r.total)] {
            let mut rec = vec![
                kind.to_string(),
                String::new(),
                String::new(),
                String::new(),
            ];
            rec.push(row.df.to_string());
            rec.push(csv_num(row.ss));
            rec.extend(std::iter::repeat_n(String::new(), 7));
            w.write_record(&rec)?;
        }
        for p in self.pairs.iter().flatten() {
            w.write_record([
                "pair".into(),
                String::new(),
                p.a.clone(),
                p.b.clone(),
                String::new(),
                String::new(),
                csv_num(p.r2),
                csv_num(p.pseudo_f),
                csv_num(p.p_value),
                csv_num(p.p_holm),
                csv_num(p.p_bh),
                p.permutations.to_string(),
                p.exact.to_string(),
            ])?;
        }
        w.flush()
    }
}
