//! Table and CSV of a size-and-shape comparison outcome.

use std::io::{self, Write};

use super::{Render, design_lines};
use crate::analysis::size_test::SizeModel;
use crate::report::format::{MISSING, csv_num, fmt_p, new_table, write_table};
use crate::workflow::compare::{Outcome, Taxon};

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

/// The taxa behind a contrast (`heading` says which): the `shown` largest
/// shares of the composition shift, with rates, ratio, share change and
/// adjusted p (to the resolution of `permutations`); `more` says where the
/// rest are.
pub fn taxa_table(
    taxa: &[Taxon],
    heading: &str,
    permutations: usize,
    shown: usize,
    more: &str,
    out: &mut dyn Write,
) -> io::Result<()> {
    if taxa.is_empty() || shown == 0 {
        return Ok(());
    }
    let mut order: Vec<_> = taxa.iter().collect();
    order.sort_by(|a, b| {
        b.change
            .shape_contribution
            .unwrap_or(0.0)
            .total_cmp(&a.change.shape_contribution.unwrap_or(0.0))
    });
    writeln!(
        out,
        "Taxa behind {heading} (largest shares of the composition shift first):"
    )?;
    let mut t = new_table(&[
        "taxon",
        "rate reference",
        "rate group",
        "ratio (95% CI)",
        "share change (points)",
        "share of shift",
        "share of size change",
        "p (BH)",
    ]);
    for x in order.iter().take(shown) {
        let ch = &x.change;
        t.add_row(vec![
            x.taxon.clone(),
            fixed(ch.rate_reference, 3),
            fixed(ch.rate_group, 3),
            match (ch.ratio, ch.ratio_ci_low, ch.ratio_ci_high) {
                (Some(r), Some(a), Some(b)) => {
                    format!("×{} ({}–{})", fixed(r, 2), fixed(a, 2), fixed(b, 2))
                }
                (Some(r), _, _) => format!("×{}", fixed(r, 2)),
                (None, _, _) => "absent from reference".to_string(),
            },
            format!("{:+.1}", ch.share_change_pp),
            ch.shape_contribution.map_or(MISSING.to_string(), pct),
            ch.size_contribution.map_or(MISSING.to_string(), pct),
            ch.p_adjusted
                .map_or(MISSING.to_string(), |p| fmt_p(p, permutations)),
        ]);
    }
    write_table(out, &t)?;
    if taxa.len() > shown {
        writeln!(out, "{} more taxa: {more}.", taxa.len() - shown)?;
    }
    Ok(())
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
            // The direction and size of an abundance difference, in words.
            let change = || {
                let pct = 100.0 * (c.size.ratio - 1.0);
                format!(
                    "{} organisms ({pct:+.0} %)",
                    if c.size.ratio < 1.0 { "fewer" } else { "more" }
                )
            };
            let words = match (c.abundance_differs, c.composition_differs) {
                (true, true) => format!("{} and composition differs", change()),
                (true, false) => change(),
                (false, true) => "composition differs".to_string(),
                (false, false) => "neither differs".to_string(),
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
                words,
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
        for c in &self.comparisons {
            taxa_table(
                &c.taxa,
                &format!("{} against {}", c.group, c.reference),
                c.size.permutations,
                self.taxa_shown,
                "--taxa N shows more, --format csv or json lists all",
                out,
            )?;
        }
        writeln!(out, "{}", self.caution)
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
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
            "taxon",
            "rate_reference",
            "rate_group",
            "taxon_ratio",
            "taxon_ratio_ci_low",
            "taxon_ratio_ci_high",
            "share_reference",
            "share_group",
            "share_change_pp",
            "shape_contribution",
            "size_contribution",
            "taxon_p_value",
            "taxon_p_adjusted",
        ])?;
        let opt = |v: Option<f64>| v.map(csv_num).unwrap_or_default();
        // One line per comparison and taxon: the comparison's columns repeated.
        for c in &self.comparisons {
            let rows: Vec<Option<&crate::workflow::compare::Taxon>> = if c.taxa.is_empty() {
                vec![None]
            } else {
                c.taxa.iter().map(Some).collect()
            };
            for x in rows {
                let mut record = vec![
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
                ];
                match x {
                    Some(x) => {
                        let ch = &x.change;
                        record.extend([
                            x.taxon.clone(),
                            csv_num(ch.rate_reference),
                            csv_num(ch.rate_group),
                            opt(ch.ratio),
                            opt(ch.ratio_ci_low),
                            opt(ch.ratio_ci_high),
                            csv_num(ch.share_reference),
                            csv_num(ch.share_group),
                            csv_num(ch.share_change_pp),
                            opt(ch.shape_contribution),
                            opt(ch.size_contribution),
                            opt(ch.p_value),
                            opt(ch.p_adjusted),
                        ]);
                    }
                    None => record.extend(std::iter::repeat_n(String::new(), 13)),
                }
                w.write_record(&record)?;
            }
        }
        w.flush()
    }
}
