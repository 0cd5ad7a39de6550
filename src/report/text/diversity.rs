//! Table and CSV of a diversity outcome. The table shows the rows (or, with
//! `--every` / `--by`, the periods or groups, their trends or tests and the
//! reading of raw against equal-coverage richness); the CSV has one line per
//! row with every field.

use std::io::{self, Write};

use super::{DESIGN_ALPHA, Render, design_lines, permutations_line};
use crate::report::format::{MISSING, csv_num, fmt_num, fmt_p, new_table, write_table};
use crate::workflow::diversity::{Block, Measure, Outcome, Reading, Summary};

fn opt(v: Option<f64>) -> String {
    fmt_num(v.unwrap_or(f64::NAN))
}

fn pct(v: f64) -> String {
    format!("{} %", fmt_num(100.0 * v))
}

fn interval(lo: Option<f64>, hi: Option<f64>) -> String {
    match (lo, hi) {
        (Some(a), Some(b)) => format!("{}–{}", fmt_num(a), fmt_num(b)),
        _ => MISSING.into(),
    }
}

fn summary(s: &Summary) -> String {
    match s.mean {
        None => MISSING.into(),
        Some(m) if s.ci_low.is_some() => {
            format!("{} ({})", fmt_num(m), interval(s.ci_low, s.ci_high))
        }
        Some(m) => fmt_num(m),
    }
}

/// How a measure is named in tables.
pub fn measure_label(m: Measure, o: &Outcome) -> String {
    match m {
        Measure::Richness => "taxa seen (raw richness)".into(),
        Measure::CoverageRichness => match &o.coverage {
            Some(c) => format!("taxa at {} coverage", pct(c.level)),
            None => "taxa at equal coverage".into(),
        },
        Measure::HillQ1 => "Hill number q = 1".into(),
        Measure::HillQ2 => "Hill number q = 2".into(),
    }
}

fn blocks_table(o: &Outcome, blocks: &[Block], first: &str, out: &mut dyn Write) -> io::Result<()> {
    let cov = measure_label(Measure::CoverageRichness, o);
    let head = [
        first,
        "rows",
        "sites",
        "individuals",
        "taxa seen",
        "mean taxa per row (95% interval)",
        &format!("mean {cov} (95% interval)"),
        "mean Hill q = 1",
        "mean Hill q = 2",
    ];
    let mut t = new_table(&head);
    for b in blocks {
        t.add_row(vec![
            b.name.clone(),
            b.rows.to_string(),
            b.sites.to_string(),
            b.individuals.to_string(),
            b.taxa_seen.to_string(),
            summary(&b.richness),
            summary(&b.coverage_richness),
            summary(&b.hill_q1),
            summary(&b.hill_q2),
        ]);
    }
    write_table(out, &t)?;
    writeln!(
        out,
        "taxa seen: in any row of the {}; means are over rows with a value, with percentile intervals of {} bootstrap resamples of the rows (seed {})",
        if first == "period" { "period" } else { "group" },
        o.bootstrap,
        o.seed
    )
}

/// The reading of raw against equal-coverage richness, in words.
pub fn reading_line(o: &Outcome) -> Option<String> {
    let reading = o.reading?;
    let (raw, cov) = o.reading_p?;
    let level = o.coverage.as_ref().map_or(String::new(), |c| pct(c.level));
    let permutations = o
        .trends
        .iter()
        .flatten()
        .map(|t| t.trend.permutations)
        .chain(o.tests.iter().flatten().map(|t| t.permutations))
        .max()
        .unwrap_or(0);
    let p = |v: f64| fmt_p(v, permutations);
    let over_time = o.trends.is_some();
    // "fell 6.28 % from the first year to the last" / "differs between groups"
    let moved = |m: Measure| -> String {
        let t = o.trends.iter().flatten().find(|t| t.measure == m);
        match t {
            Some(t) if over_time => format!(
                "{} {} % from the first year to the last",
                if t.trend.change_pct < 0.0 {
                    "fell"
                } else {
                    "rose"
                },
                fmt_num(t.trend.change_pct.abs())
            ),
            _ => "differs between groups".to_string(),
        }
    };
    let unchanged = if over_time {
        "did not change"
    } else {
        "does not differ"
    };
    // Evenness: the Hill numbers of order 1 and 2, when they changed.
    let evenness = o
        .trends
        .iter()
        .flatten()
        .filter(|t| matches!(t.measure, Measure::HillQ1 | Measure::HillQ2))
        .filter(|t| t.trend.p_value <= o.alpha && t.trend.smallest_possible_p <= o.alpha)
        .map(|t| {
            format!(
                "Hill q = {} {} {} % (p = {})",
                if t.measure == Measure::HillQ1 { 1 } else { 2 },
                if t.trend.change_pct < 0.0 {
                    "fell"
                } else {
                    "rose"
                },
                fmt_num(t.trend.change_pct.abs()),
                p(t.trend.p_value)
            )
        })
        .collect::<Vec<_>>();
    let evenness = if evenness.is_empty() {
        String::new()
    } else {
        format!("; evenness changed: {}", evenness.join(", "))
    };
    let line = match reading {
        Reading::SizeOnly => format!(
            "reading: raw richness {} (p = {}), but richness at {level} coverage {unchanged} (p = {}): the {} comes from the number of individuals caught (size), not from taxa gained or lost",
            moved(Measure::Richness),
            p(raw),
            p(cov),
            if over_time { "change" } else { "difference" }
        ),
        Reading::BeyondSize => format!(
            "reading: richness at {level} coverage {} too (p = {}; raw richness p = {}): more than the change in numbers, the taxa themselves changed",
            moved(Measure::CoverageRichness),
            p(cov),
            p(raw)
        ),
        Reading::HiddenBySize => format!(
            "reading: raw richness shows no clear {} (p = {}), but richness at {level} coverage {} (p = {}): a change in numbers hides a change in taxa",
            if over_time { "change" } else { "difference" },
            p(raw),
            moved(Measure::CoverageRichness),
            p(cov)
        ),
        Reading::NoChange => format!(
            "reading: neither raw richness (p = {}) nor richness at {level} coverage (p = {}) shows a clear {} at alpha = {}",
            p(raw),
            p(cov),
            if over_time { "change" } else { "difference" },
            o.alpha
        ),
        Reading::CannotReachAlpha => format!(
            "reading: none: this design's smallest possible p-value is above alpha = {}, so no change can be called either way (raw richness p = {}, at {level} coverage p = {})",
            o.alpha,
            p(raw),
            p(cov)
        ),
    };
    Some(format!("{line}{evenness}"))
}

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        writeln!(
            out,
            "Diversity of {} {} rows (raw counts of individuals)",
            self.n,
            self.unit.as_str()
        )?;
        if let Some(c) = &self.coverage {
            let rule = match (c.rule, &c.set_by) {
                ("auto", Some(row)) => {
                    format!("auto: the lowest sample coverage among the rows, that of {row}")
                }
                _ => "as asked".to_string(),
            };
            writeln!(
                out,
                "compared at {} sample coverage ({rule}); {} row(s) reach it by rarefaction, {} by extrapolation, {} cannot",
                pct(c.level),
                c.interpolated,
                c.extrapolated,
                c.not_reached
            )?;
        }
        if let Some(periods) = &self.periods {
            blocks_table(self, periods, "period", out)?;
        } else if let Some(groups) = &self.groups {
            blocks_table(self, groups, "group", out)?;
        } else {
            let mut head = vec![
                "row".to_string(),
                "individuals".into(),
                "taxa seen".into(),
                "Hill q = 1".into(),
                "Hill q = 2".into(),
                "coverage".into(),
                "Chao1 (95% interval)".into(),
            ];
            if let Some(m) = self.rarefy_to {
                head.push(format!("taxa in {m} individuals (sd)"));
            }
            if self.coverage.is_some() {
                head.push(measure_label(Measure::CoverageRichness, self));
                head.push("at individuals".into());
            }
            let refs: Vec<&str> = head.iter().map(String::as_str).collect();
            let mut t = new_table(&refs);
            for r in &self.rows {
                let mut row = vec![
                    r.meta.label.clone(),
                    r.individuals.to_string(),
                    r.richness.to_string(),
                    opt(r.hill_q1),
                    opt(r.hill_q2),
                    r.coverage.map_or(MISSING.into(), pct),
                    match r.chao1 {
                        None => MISSING.into(),
                        Some(c) if r.chao1_ci_low.is_some() => {
                            format!(
                                "{} ({})",
                                fmt_num(c),
                                interval(r.chao1_ci_low, r.chao1_ci_high)
                            )
                        }
                        Some(c) => fmt_num(c),
                    },
                ];
                if self.rarefy_to.is_some() {
                    row.push(match (r.rarefied_richness, r.rarefied_sd) {
                        (Some(v), Some(sd)) => format!("{} ({})", fmt_num(v), fmt_num(sd)),
                        _ => "too few individuals".into(),
                    });
                }
                if self.coverage.is_some() {
                    row.push(opt(r.coverage_richness));
                    row.push(match (r.coverage_size, r.coverage_extrapolated) {
                        (Some(s), Some(true)) => format!("{} (extrapolated)", fmt_num(s)),
                        (Some(s), _) => fmt_num(s),
                        _ => MISSING.into(),
                    });
                }
                t.add_row(row);
            }
            write_table(out, &t)?;
        }
        if let Some(trends) = &self.trends {
            writeln!(out)?;
            writeln!(out, "trends across years (log-linear, site effects)")?;
            let mut t = new_table(&[
                "measure",
                "rows",
                "% per year (95% interval)",
                "change first to last year %",
                "p-value",
            ]);
            for m in trends {
                t.add_row(vec![
                    measure_label(m.measure, self),
                    m.trend.n.to_string(),
                    format!(
                        "{} ({} to {})",
                        fmt_num(m.trend.pct_per_year),
                        fmt_num(m.trend.ci_low),
                        fmt_num(m.trend.ci_high)
                    ),
                    fmt_num(m.trend.change_pct),
                    fmt_p(m.trend.p_value, m.trend.permutations),
                ]);
            }
            write_table(out, &t)?;
            if let Some(first) = trends.first() {
                writeln!(
                    out,
                    "{}",
                    permutations_line(
                        first.trend.permutations,
                        first.trend.exact,
                        self.trend_scheme.as_deref().unwrap_or(""),
                        self.seed
                    )
                )?;
                if first.trend.smallest_possible_p > DESIGN_ALPHA {
                    writeln!(
                        out,
                        "with {} years the smallest possible p-value is {}: no trend can be \
                         called at alpha = {DESIGN_ALPHA}; more years are needed",
                        first.trend.years.len(),
                        fmt_num(first.trend.smallest_possible_p)
                    )?;
                }
            }
        }
        if let Some(tests) = &self.tests {
            writeln!(out)?;
            writeln!(
                out,
                "groups compared (geometric means per row; ratio to the reference group with a 95% bootstrap interval)"
            )?;
            let mut t = new_table(&[
                "measure",
                "group",
                "rows",
                "geometric mean",
                "ratio (95% interval)",
                "F",
                "p-value",
            ]);
            for m in tests {
                for (k, g) in m.groups.iter().enumerate() {
                    let ratio = if g.name == m.reference {
                        "reference".to_string()
                    } else if g.ratio_low.is_finite() {
                        format!(
                            "{} ({}–{})",
                            fmt_num(g.ratio),
                            fmt_num(g.ratio_low),
                            fmt_num(g.ratio_high)
                        )
                    } else {
                        fmt_num(g.ratio)
                    };
                    t.add_row(vec![
                        if k == 0 {
                            measure_label(m.measure, self)
                        } else {
                            String::new()
                        },
                        g.name.clone(),
                        g.n.to_string(),
                        fmt_num(g.level),
                        ratio,
                        if k == 0 { fmt_num(m.f) } else { String::new() },
                        if k == 0 {
                            fmt_p(m.p_value, m.permutations)
                        } else {
                            String::new()
                        },
                    ]);
                }
            }
            write_table(out, &t)?;
            let smallest: Vec<f64> = self
                .design
                .iter()
                .map(|_| {
                    tests
                        .iter()
                        .map(|t| t.smallest_possible_p)
                        .fold(0.0, f64::max)
                })
                .collect();
            for line in design_lines(&self.design, &smallest, DESIGN_ALPHA) {
                writeln!(out, "{line}")?;
            }
        }
        if let Some(line) = reading_line(self) {
            writeln!(out, "{line}")?;
        }
        if self.periods.is_some() || self.groups.is_some() {
            writeln!(out, "per-row values: --format csv or --format json")?;
        }
        // Notes go to stderr (the command prints them), as for `trend`.
        Ok(())
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record([
            "row",
            "site",
            "year",
            "season",
            "effort",
            "effort_unit",
            "individuals",
            "richness",
            "hill_q1",
            "hill_q2",
            "coverage",
            "chao1",
            "chao1_ci_low",
            "chao1_ci_high",
            "rarefy_to",
            "rarefied_richness",
            "rarefied_sd",
            "coverage_level",
            "coverage_richness",
            "coverage_size",
            "coverage_extrapolated",
        ])?;
        let o = |v: Option<f64>| v.map_or(String::new(), csv_num);
        for r in &self.rows {
            w.write_record([
                r.meta.label.clone(),
                r.meta.site.clone(),
                r.meta.year.to_string(),
                r.meta.season.clone().unwrap_or_default(),
                csv_num(r.meta.effort),
                r.meta.effort_unit.clone(),
                r.individuals.to_string(),
                r.richness.to_string(),
                o(r.hill_q1),
                o(r.hill_q2),
                o(r.coverage),
                o(r.chao1),
                o(r.chao1_ci_low),
                o(r.chao1_ci_high),
                self.rarefy_to.map_or(String::new(), |m| m.to_string()),
                o(r.rarefied_richness),
                o(r.rarefied_sd),
                o(self.coverage.as_ref().map(|c| c.level)),
                o(r.coverage_richness),
                o(r.coverage_size),
                r.coverage_extrapolated
                    .map_or(String::new(), |e| e.to_string()),
            ])?;
        }
        w.flush()
    }
}
