//! Table and CSV of a size-and-shape comparison outcome.

use std::io::{self, Write};

use super::{Render, design_lines};
use crate::analysis::size_test::SizeModel;
use crate::report::format::{MISSING, csv_num, fmt_p, new_table, write_table};
use crate::workflow::compare::Outcome;

/// A ratio or statistic with `decimals` decimals, [`MISSING`] when not computed.
fn fixed(v: f64, decimals: usize) -> String {
    if v.is_finite() {
        format!("{v:.decimals$}")
    } else {
        MISSING.to_string()
    }
}

fn pct(v: f64) -> String {
    if v.is_finite() {
        format!("{:.1}%", 100.0 * v)
    } else {
        MISSING.to_string()
    }
}

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        let groups: Vec<String> = self
            .groups
            .iter()
            .map(|g| format!("{} (n = {})", g.name, g.n))
            .collect();
        writeln!(
            out,
            "Comparing {} groups by {}: {}; reference {}",
            groups.len(),
            self.by,
            groups.join(", "),
            self.reference
        )?;
        let mut t = new_table(&[
            "comparison",
            "abundance ratio (95% CI)",
            "p abundance",
            "p composition",
            "p dispersion",
            "verdict",
        ]);
        for c in &self.comparisons {
            let pair = |raw: f64, adj: Option<f64>, perms: usize| match adj {
                Some(a) => format!("{} (Holm {})", fmt_p(raw, perms), fmt_p(a, perms)),
                None => fmt_p(raw, perms),
            };
            let words = match (c.abundance_differs, c.composition_differs) {
                (true, true) => "abundance and composition differ",
                (true, false) => "abundance differs",
                (false, true) => "composition differs",
                (false, false) => "neither differs",
            };
            t.add_row(vec![
                format!("{} vs {}", c.group, c.reference),
                format!(
                    "×{} ({}–{})",
                    fixed(c.size.ratio, 2),
                    fixed(c.size.ci_low, 2),
                    fixed(c.size.ci_high, 2)
                ),
                pair(c.size.p_value, c.size.p_adjusted, c.size.permutations),
                pair(c.shape.p_value, c.shape.p_adjusted, c.shape.permutations),
                pair(
                    c.shape.dispersion_p_value,
                    c.shape.dispersion_p_adjusted,
                    c.shape.dispersion_permutations,
                ),
                words.to_string(),
            ]);
        }
        write_table(out, &t)?;
        let (s, sh, cb) = (&self.size, &self.shape, &self.combined);
        let statistic = match s.model {
            SizeModel::Rate => format!(
                "pooled rates ({}), samples that caught nothing included; quasi-Poisson deviance F",
                if self.per_effort {
                    "count ÷ effort"
                } else {
                    "count per sample"
                }
            ),
            SizeModel::Geometric => format!(
                "geometric mean totals; one-way F on log totals{}",
                if self.per_effort {
                    " per unit effort"
                } else {
                    ""
                }
            ),
        };
        writeln!(
            out,
            "(a) Size: {statistic} = {}, p = {}.",
            fixed(s.f, 3),
            fmt_p(s.p_value, s.permutations)
        )?;
        writeln!(
            out,
            "(b) Shape: PERMANOVA under {}{}: pseudo-F = {}, R² = {}, p = {}; dispersion F = {}, p = {}.",
            sh.distance.name(),
            match &sh.rarefied {
                Some(r) => format!(
                    " after rarefying to {} individuals ({} draws averaged)",
                    r.depth, r.reps
                ),
                None => String::new(),
            },
            fixed(sh.pseudo_f, 3),
            fixed(sh.r2, 3),
            fmt_p(sh.p_value, sh.permutations),
            fixed(sh.dispersion_f, 3),
            fmt_p(sh.dispersion_p_value, sh.dispersion_permutations),
        )?;
        let af = |k: fn(&crate::analysis::partition::Fractions) -> f64| {
            cb.adjusted_fractions
                .as_ref()
                .map_or(MISSING.to_string(), |a| pct(k(a)))
        };
        writeln!(
            out,
            "(c) Combined: {} after {}: pseudo-F = {}, p = {}; adjusted fractions size only {}, shared {}, shape only {}, unexplained {}.",
            cb.distance.name(),
            cb.transform.name(),
            fixed(cb.pseudo_f, 3),
            fmt_p(cb.p_value, cb.permutations),
            af(|a| a.size_only),
            af(|a| a.shared),
            af(|a| a.shape_only),
            af(|a| a.unexplained),
        )?;
        writeln!(out, "(d) Verdict at alpha = {}:", self.alpha)?;
        for line in self.verdict.lines() {
            writeln!(out, "  {line}")?;
        }
        let arrangements = if s.exact && sh.exact {
            format!("exact enumeration of {} arrangements", s.permutations)
        } else {
            format!("{} permutations per test", self.permutations)
        };
        writeln!(
            out,
            "Permutation p-values: {arrangements}, scheme {}, seed {}; ratio intervals from {} bootstrap resamples of {}.",
            self.scheme, self.seed, s.bootstrap, s.resampled
        )?;
        for line in design_lines(
            &self.design,
            &[s.smallest_possible_p.max(sh.smallest_possible_p)],
            self.alpha,
        ) {
            writeln!(out, "{line}")?;
        }
        writeln!(out, "{}", self.caution)
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = csv::Writer::from_writer(out);
        w.write_record([
            "group",
            "reference",
            "n_group",
            "n_reference",
            "ratio",
            "ci_low",
            "ci_high",
            "p_size",
            "p_shape",
            "p_dispersion",
            "p_size_adjusted",
            "p_shape_adjusted",
            "abundance_differs",
            "composition_differs",
        ])?;
        let opt = |v: Option<f64>| v.map(csv_num).unwrap_or_default();
        for c in &self.comparisons {
            w.write_record([
                c.group.clone(),
                c.reference.clone(),
                c.n.group.to_string(),
                c.n.reference.to_string(),
                csv_num(c.size.ratio),
                csv_num(c.size.ci_low),
                csv_num(c.size.ci_high),
                csv_num(c.size.p_value),
                csv_num(c.shape.p_value),
                csv_num(c.shape.dispersion_p_value),
                opt(c.size.p_adjusted),
                opt(c.shape.p_adjusted),
                c.abundance_differs.to_string(),
                c.composition_differs.to_string(),
            ])?;
        }
        w.flush()
    }
}
