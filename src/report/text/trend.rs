//! Tables and CSV of trend outcomes: one trend, or the groups of `--split-by`.

use crate::analysis::size_test::SizeModel;
use std::io::{self, Write};

use super::Render;
use crate::report::format::{MISSING, csv_num, fmt_num, fmt_p, new_table, write_table};
use crate::workflow::trend::{Outcome, Split};

fn opt(v: Option<f64>) -> String {
    fmt_num(v.unwrap_or(f64::NAN))
}

/// The per-period table and the diagnosis line of one trend.
fn periods_table(o: &Outcome, out: &mut dyn Write) -> io::Result<()> {
    let mut t = new_table(&[
        "period",
        "n",
        "sites",
        "abundance",
        "95% interval",
        "change %",
        "shape distance",
        "size part",
        "shape part",
    ]);
    for p in &o.periods {
        let label = if p.baseline {
            format!("{} (baseline)", p.period)
        } else {
            p.period.clone()
        };
        let ci = match (p.abundance_ci_low, p.abundance_ci_high) {
            (Some(a), Some(b)) => format!("{}–{}", fmt_num(a), fmt_num(b)),
            _ => MISSING.into(),
        };
        let abundance = if p.too_few {
            "too few samples".to_string()
        } else {
            opt(p.abundance)
        };
        t.add_row(vec![
            label,
            p.n.to_string(),
            p.sites.to_string(),
            abundance,
            ci,
            opt(p.change_pct),
            opt(p.shape_distance),
            opt(p.size_part),
            opt(p.shape_part),
        ]);
    }
    write_table(out, &t)?;
    writeln!(out, "{}", diagnosis_line(o))
}

fn diagnosis_line(o: &Outcome) -> String {
    let s = &o.size_trend;
    let h = &o.shape_trend;
    let p = |v: f64| fmt_p(v, o.permutations);
    let mut line = format!(
        "diagnosis: {} — size {} % per year [{}, {}], p = {}; shape R² = {}, p = {}",
        o.diagnosis.name(),
        fmt_num(s.slope_pct_per_year),
        fmt_num(s.ci_low),
        fmt_num(s.ci_high),
        p(s.p_value),
        fmt_num(h.r2),
        p(h.p_value)
    );
    if let Some(b) = &o.breakpoints {
        line.push_str(&format!(
            "; breakpoints: size {} ({} %, p = {}), shape {} (R² = {}, p = {})",
            b.size.year,
            fmt_num(b.size.change_pct),
            p(b.size.p_value),
            b.shape.year,
            fmt_num(b.shape.r2),
            p(b.shape.p_value)
        ));
    }
    line.push_str(&format!("; alpha = {}", o.alpha));
    line
}

/// How the trend was tested: permutations, scheme, seed, rule, dissimilarities.
fn footer(o: &Outcome, out: &mut dyn Write) -> io::Result<()> {
    writeln!(
        out,
        "permutations: {} ({}), scheme: {}, seed {}",
        o.permutations,
        if o.exact {
            "every arrangement"
        } else {
            "random"
        },
        o.scheme,
        o.seed
    )?;
    if o.smallest_possible_p > o.alpha {
        writeln!(
            out,
            "year: this design cannot reach p ≤ {}: the smallest possible p-value is {}; a \
             p-value above {} here says nothing about the trend. More years are needed for a verdict",
            o.alpha,
            fmt_num(o.smallest_possible_p),
            o.alpha
        )?;
    }
    let abundance = match o.size_trend.model {
        SizeModel::Rate => {
            "abundance as pooled rate (Σ count ÷ Σ effort, rows that caught nothing included) with a ratio-estimator interval; slope from the Poisson count model with site effects"
        }
        SizeModel::Geometric => {
            "abundance as geometric mean with a t interval on the log scale; slope by OLS of log totals"
        }
    };
    writeln!(
        out,
        "rule: {} (alpha {}); {abundance}; size parts of {} on {} vs shape ({})",
        if o.breakpoints.is_some() {
            "an aspect changed when min(1, 2·min(p trend, p breakpoint)) ≤ alpha"
        } else {
            "an aspect changed when p trend ≤ alpha"
        },
        o.alpha,
        o.distances.combined.name(),
        o.distances.transform.name(),
        o.distances.shape.name()
    )
}

/// A `record` column says what a line is: `period` (the per-period table),
/// `taxon` (a taxon of the baseline contrast) or `taxon_trend` (its own trend,
/// with `--by-taxon`); the columns of the other kinds are empty.
const CSV_HEADER: [&str; 28] = [
    "record",
    "group",
    "period",
    "n",
    "sites",
    "baseline",
    "abundance",
    "abundance_ci_low",
    "abundance_ci_high",
    "change_pct",
    "shape_distance",
    "size_part",
    "shape_part",
    "diagnosis",
    "taxon",
    "rate_reference",
    "rate_group",
    "ratio",
    "ratio_ci_low",
    "ratio_ci_high",
    "share_change_pp",
    "shape_contribution",
    "size_contribution",
    "pct_per_year",
    "ci_low",
    "ci_high",
    "p_value",
    "p_adjusted",
];

/// The columns a `period` line leaves empty.
const TAXON_COLUMNS: usize = 14;

fn csv_rows<W: Write>(
    w: &mut crate::report::format::CsvOut<W>,
    group: &str,
    o: &Outcome,
) -> io::Result<()> {
    let c = |v: Option<f64>| csv_num(v.unwrap_or(f64::NAN));
    let blank = || std::iter::repeat_n(String::new(), TAXON_COLUMNS);
    for p in &o.periods {
        let mut row = vec![
            "period".to_string(),
            group.to_string(),
            p.period.clone(),
            p.n.to_string(),
            p.sites.to_string(),
            p.baseline.to_string(),
            c(p.abundance),
            c(p.abundance_ci_low),
            c(p.abundance_ci_high),
            c(p.change_pct),
            c(p.shape_distance),
            c(p.size_part),
            c(p.shape_part),
            o.diagnosis.name().to_string(),
        ];
        row.extend(blank());
        w.write_record(&row)?;
    }
    // The period columns a taxon line leaves empty (all but `group`).
    let lead = |record: &str, taxon: &str| -> Vec<String> {
        let mut row = vec![record.to_string(), group.to_string()];
        row.extend(std::iter::repeat_n(String::new(), 12));
        row.push(taxon.to_string());
        row
    };
    for t in &o.taxa {
        let ch = &t.change;
        let mut row = lead("taxon", &t.taxon);
        row.extend([
            csv_num(ch.rate_reference),
            csv_num(ch.rate_group),
            c(ch.ratio),
            c(ch.ratio_ci_low),
            c(ch.ratio_ci_high),
            csv_num(ch.share_change_pp),
            c(ch.shape_contribution),
            c(ch.size_contribution),
            String::new(),
            String::new(),
            String::new(),
            c(ch.p_value),
            c(ch.p_adjusted),
        ]);
        w.write_record(&row)?;
    }
    for t in o.by_taxon.iter().flat_map(|b| &b.taxa) {
        let r = &t.trend;
        let mut row = lead("taxon_trend", &t.taxon);
        row.extend(std::iter::repeat_n(String::new(), 8));
        row.extend([
            c(r.pct_per_year),
            c(r.ci_low),
            c(r.ci_high),
            c(r.p_value),
            c(r.p_adjusted),
        ]);
        w.write_record(&row)?;
    }
    Ok(())
}

/// The taxa behind the change from the baseline years (top 10).
fn taxa_since_baseline(o: &Outcome, out: &mut dyn Write) -> io::Result<()> {
    let span = |v: &[i32]| match (v.first(), v.last()) {
        (Some(a), Some(b)) if a != b => format!("{a}–{b}"),
        (Some(a), _) => a.to_string(),
        _ => String::new(),
    };
    let later: Vec<i32> = o
        .years
        .iter()
        .copied()
        .filter(|y| !o.baseline_years.contains(y))
        .collect();
    super::compare::taxa_table(
        &o.taxa,
        &format!(
            "{} against the baseline {}, whole years relabelled,",
            span(&later),
            span(&o.baseline_years)
        ),
        o.permutations,
        o.taxa_shown,
        "--taxa N shows more, --format json lists all",
        out,
    )
}

/// Each taxon's own trend (`--by-taxon`), largest changes first.
fn taxon_trends_table(o: &Outcome, out: &mut dyn Write) -> io::Result<()> {
    let Some(t) = &o.by_taxon else {
        return Ok(());
    };
    let shown = o.taxa_shown;
    if t.taxa.is_empty() || shown == 0 {
        return Ok(());
    }
    writeln!(
        out,
        "Each taxon's own trend (count model with site effects, whole years relabelled; largest changes first):"
    )?;
    let mut tab = new_table(&[
        "taxon",
        "organisms",
        "% / year",
        "95% interval",
        "p",
        "p (BH)",
    ]);
    let p = |v: Option<f64>| v.map_or(MISSING.to_string(), |v| fmt_p(v, t.permutations));
    for x in t.taxa.iter().take(shown) {
        let r = &x.trend;
        tab.add_row(vec![
            x.taxon.clone(),
            if (r.individuals - r.individuals.round()).abs() < 1e-6 {
                format!("{:.0}", r.individuals)
            } else {
                fmt_num(r.individuals)
            },
            r.pct_per_year
                .map_or_else(|| "not estimated".to_string(), fmt_num),
            match (r.ci_low, r.ci_high) {
                (Some(a), Some(b)) => format!("{} to {}", fmt_num(a), fmt_num(b)),
                _ => MISSING.into(),
            },
            p(r.p_value),
            p(r.p_adjusted),
        ]);
    }
    write_table(out, &tab)?;
    let none = t
        .taxa
        .iter()
        .filter(|x| x.trend.slope_log.is_none())
        .count();
    if t.taxa.len() > shown {
        writeln!(
            out,
            "{} more taxa: --taxa N shows more, --format json lists all.",
            t.taxa.len() - shown
        )?;
    }
    if none > 0 {
        writeln!(
            out,
            "{none} taxa have no trend estimate (too few years with organisms at their sites; --format json says why for each)."
        )?;
    }
    Ok(())
}

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        periods_table(self, out)?;
        taxa_since_baseline(self, out)?;
        taxon_trends_table(self, out)?;
        writeln!(out)?;
        footer(self, out)
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record(CSV_HEADER)?;
        csv_rows(&mut w, "", self)?;
        w.flush()
    }
}

impl Render for Split {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        for g in &self.groups {
            writeln!(out, "{} = {}", self.split_by, g.group)?;
            periods_table(&g.outcome, out)?;
            taxa_since_baseline(&g.outcome, out)?;
            taxon_trends_table(&g.outcome, out)?;
            writeln!(out)?;
        }
        let mut t = new_table(&[
            "group",
            "diagnosis",
            "size % / year",
            "95% interval",
            "size p",
            "shape R²",
            "shape p",
            "size break (p)",
            "shape break (p)",
        ]);
        for g in &self.groups {
            let o = &g.outcome;
            let p = |v: f64| fmt_p(v, o.permutations);
            let (bs, bh) = match &o.breakpoints {
                Some(b) => (
                    format!("{} ({})", b.size.year, p(b.size.p_value)),
                    format!("{} ({})", b.shape.year, p(b.shape.p_value)),
                ),
                None => (MISSING.into(), MISSING.into()),
            };
            t.add_row(vec![
                g.group.clone(),
                o.diagnosis.name().to_string(),
                fmt_num(o.size_trend.slope_pct_per_year),
                format!(
                    "{} to {}",
                    fmt_num(o.size_trend.ci_low),
                    fmt_num(o.size_trend.ci_high)
                ),
                p(o.size_trend.p_value),
                fmt_num(o.shape_trend.r2),
                p(o.shape_trend.p_value),
                bs,
                bh,
            ]);
        }
        write_table(out, &t)?;
        match self.groups.first() {
            Some(g) => footer(&g.outcome, out),
            None => Ok(()),
        }
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record(CSV_HEADER)?;
        for g in &self.groups {
            csv_rows(&mut w, &g.group, &g.outcome)?;
        }
        w.flush()
    }
}
