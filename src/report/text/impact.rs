//! Table and CSV of an `impact` (BACI) outcome.

use std::io::{self, Write};

use super::{Render, design_lines, permutations_line};
use crate::report::format::{MISSING, csv_num, fmt_num, fmt_p, new_table, write_table};
use crate::workflow::impact::Outcome;

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        writeln!(
            out,
            "Before/after × control/impact (BACI) by {}: impact sites ({}) {}; control sites {}; {} rows; before {}..{}, after {}..{}",
            self.by,
            self.impact,
            self.sites.impact.join(", "),
            self.sites.control.join(", "),
            self.n,
            self.before.0,
            self.before.1,
            self.after.0,
            self.after.1,
        )?;
        let s = &self.size;
        let sh = &self.shape;
        let r = &s.pooled_rates;
        let mut t = new_table(&["", "before", "after", "after ÷ before"]);
        for (name, b, a) in [("control", r[0], r[1]), ("impact", r[2], r[3])] {
            t.add_row(vec![
                format!(
                    "{name} pooled rate{}",
                    if self.per_effort {
                        " (per effort)"
                    } else {
                        " (per row)"
                    }
                ),
                fmt_num(b),
                fmt_num(a),
                fmt_num(a / b),
            ]);
        }
        write_table(out, &t)?;
        let mut t = new_table(&["test", "effect", "statistic", "p-value"]);
        t.add_row(vec![
            "abundance changed differently (size)".into(),
            format!(
                "ratio of ratios ×{} (95% CI {}–{})",
                fmt_num(s.ratio_of_ratios),
                fmt_num(s.ci_low),
                fmt_num(s.ci_high)
            ),
            format!("score {}", fmt_num(s.score)),
            fmt_p(s.p_value, s.permutations),
        ]);
        t.add_row(vec![
            "composition changed differently (shape)".into(),
            format!(
                "mean shift control {}, impact {} ({})",
                fmt_num(sh.mean_shift[0]),
                fmt_num(sh.mean_shift[1]),
                self.shape_distance.name()
            ),
            format!("pseudo-F {}", fmt_num(sh.pseudo_f)),
            fmt_p(sh.p_value, sh.permutations),
        ]);
        t.add_row(vec![
            "spread of the shifts (dispersion)".into(),
            String::new(),
            format!("F {}", fmt_num(sh.dispersion_f)),
            fmt_p(sh.dispersion_p_value, sh.dispersion_permutations),
        ]);
        write_table(out, &t)?;
        writeln!(out, "Verdict at alpha = {}: {}", self.alpha, self.verdict)?;
        taxa_table(self, out)?;
        writeln!(
            out,
            "Size: log-linear count model with site and year effects and the impact × after term (Pearson dispersion {}; interval: {}{}); shape: each site's shift of {} centroid from before to after, compared between roles.",
            fmt_num(s.dispersion),
            s.ci_method,
            if s.bootstrap_fitted > 0 {
                format!(", {} resamples fitted", s.bootstrap_fitted)
            } else {
                String::new()
            },
            self.shape_distance.name()
        )?;
        writeln!(
            out,
            "{}",
            permutations_line(s.permutations, s.exact, &self.scheme, self.seed)
        )?;
        for line in design_lines(
            &self.design,
            &[s.smallest_possible_p.max(sh.smallest_possible_p)],
            self.alpha,
        ) {
            writeln!(out, "{line}")?;
        }
        writeln!(
            out,
            "Caution: a p-value is the chance of so large a difference if the impact sites had changed like the controls and sites were exchangeable; it is not the chance that nothing happened. Whether the controls are fair controls is a question for an expert review of the design."
        )
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record([
            "test",
            "effect",
            "ci_low",
            "ci_high",
            "statistic",
            "p_value",
            "permutations",
            "exact",
            "taxon",
            "shape_contribution",
            "size_contribution",
            "p_adjusted",
        ])?;
        let s = &self.size;
        let sh = &self.shape;
        w.write_record([
            "size".to_string(),
            csv_num(s.ratio_of_ratios),
            csv_num(s.ci_low),
            csv_num(s.ci_high),
            csv_num(s.score),
            csv_num(s.p_value),
            s.permutations.to_string(),
            s.exact.to_string(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
        ])?;
        w.write_record([
            "shape".to_string(),
            String::new(),
            String::new(),
            String::new(),
            csv_num(sh.pseudo_f),
            csv_num(sh.p_value),
            sh.permutations.to_string(),
            sh.exact.to_string(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
        ])?;
        w.write_record([
            "dispersion".to_string(),
            String::new(),
            String::new(),
            String::new(),
            csv_num(sh.dispersion_f),
            csv_num(sh.dispersion_p_value),
            sh.dispersion_permutations.to_string(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
            String::new(),
        ])?;
        let opt = |v: Option<f64>| v.map_or(String::new(), csv_num);
        for t in &self.taxa {
            let c = &t.change;
            w.write_record([
                "taxon".to_string(),
                opt(c.ratio_of_ratios),
                opt(c.ratio_ci_low),
                opt(c.ratio_ci_high),
                String::new(),
                opt(c.p_value),
                String::new(),
                String::new(),
                t.taxon.clone(),
                opt(c.shape_contribution),
                opt(c.size_contribution),
                opt(c.p_adjusted),
            ])?;
        }
        w.flush()
    }
}

/// The taxa behind the BACI contrast: the `taxa_shown` largest shares of the
/// composition interaction, with the four rates, the ratio of ratios and the
/// adjusted p of the taxon's own test.
fn taxa_table(o: &Outcome, out: &mut dyn Write) -> io::Result<()> {
    let shown = o.taxa_shown.min(o.taxa.len());
    if shown == 0 {
        return Ok(());
    }
    let mut order: Vec<_> = o.taxa.iter().collect();
    order.sort_by(|a, b| {
        b.change
            .shape_contribution
            .unwrap_or(0.0)
            .total_cmp(&a.change.shape_contribution.unwrap_or(0.0))
    });
    writeln!(
        out,
        "Taxa behind the contrast (largest shares of the composition interaction first; rates {}):",
        if o.per_effort {
            "per unit effort"
        } else {
            "per row"
        }
    )?;
    let mut t = new_table(&[
        "taxon",
        "control before",
        "control after",
        "impact before",
        "impact after",
        "ratio of ratios (95% CI)",
        "share change (points)",
        "share of shift",
        "share of size change",
        "p (BH)",
    ]);
    let pct = |v: Option<f64>| v.map_or(MISSING.to_string(), |v| format!("{:.1}%", 100.0 * v));
    let perms = o.size.permutations;
    for x in order.iter().take(shown) {
        let c = &x.change;
        t.add_row(vec![
            x.taxon.clone(),
            fmt_num(c.rate_control_before),
            fmt_num(c.rate_control_after),
            fmt_num(c.rate_impact_before),
            fmt_num(c.rate_impact_after),
            match (c.ratio_of_ratios, c.ratio_ci_low, c.ratio_ci_high) {
                (Some(r), Some(a), Some(b)) => {
                    format!("×{r:.2} ({a:.2}–{b:.2})")
                }
                (Some(r), _, _) => format!("×{r:.2}"),
                (None, _, _) => "absent from a cell".to_string(),
            },
            format!("{:+.1}", c.share_change_pp),
            pct(c.shape_contribution),
            pct(c.size_contribution),
            c.p_adjusted
                .map_or(MISSING.to_string(), |p| fmt_p(p, perms)),
        ]);
    }
    write_table(out, &t)?;
    if o.taxa.len() > shown {
        writeln!(
            out,
            "{} more taxa: --taxa N shows more, --format csv or json lists all.",
            o.taxa.len() - shown
        )?;
    }
    Ok(())
}
