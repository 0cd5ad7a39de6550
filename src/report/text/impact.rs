//! Table and CSV of an `impact` (BACI) outcome.

use std::io::{self, Write};

use super::{Render, design_lines, permutations_line};
use crate::report::format::{csv_num, fmt_num, fmt_p, new_table, write_table};
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
        let mut w = csv::Writer::from_writer(out);
        w.write_record([
            "test",
            "effect",
            "ci_low",
            "ci_high",
            "statistic",
            "p_value",
            "permutations",
            "exact",
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
        ])?;
        w.flush()
    }
}
