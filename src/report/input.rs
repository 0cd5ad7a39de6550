//! From typed workflow outcomes to the parts of the HTML report
//! ([`html::ReportInput`]): the ordination panels, the totals box plots, and
//! the whole input of `tally report` from a [`workflow::report::Report`].
//!
//! [`workflow::report::Report`]: crate::workflow::report::Report

use super::html::{self, Labelled, OrdinationPart, Part, ReportInput};
use super::svg::{TotalsGroup, TotalsMeasure, TotalsPlot};
use crate::workflow::ordinate;
use crate::workflow::report::Report;

/// The report part of an ordination outcome, with the CCA `test` shown under
/// its plot (`None` without two axes).
pub fn ordination_part(
    o: &ordinate::Outcome,
    label: &str,
    test: Option<&ordinate::Outcome>,
) -> Option<OrdinationPart> {
    Some(OrdinationPart {
        label: label.to_string(),
        plot: super::text::ordinate::plot(o)?,
        result: o.clone(),
        test: test.cloned(),
    })
}

/// The sample totals of an ordination's matrix, per group (in group order).
pub fn totals_of(o: &ordinate::Outcome) -> Vec<(String, Vec<f64>)> {
    o.groups
        .iter()
        .enumerate()
        .map(|(g, group)| {
            (
                group.group.clone(),
                o.samples
                    .iter()
                    .filter(|s| s.group_index == g)
                    .map(|s| s.total)
                    .collect(),
            )
        })
        .collect()
}

/// Box plots of the sample totals of an ordination's matrix, per group.
pub fn totals_part(o: &ordinate::Outcome, title: &str) -> Part<TotalsPlot> {
    let groups = totals_of(o)
        .into_iter()
        .map(|(name, values)| TotalsGroup { name, values })
        .collect();
    let measure = match &o.effort_unit {
        Some(unit) => TotalsMeasure::PerEffort {
            unit: unit.trim_end_matches('s').to_string(),
        },
        None => TotalsMeasure::Counts,
    };
    Part::Done(TotalsPlot {
        title: title.to_string(),
        subtitle: o.selection_text.clone(),
        measure,
        groups,
    })
}

/// The input of the HTML report of `r`; `run_ids` are the ids its runs were
/// stored under, in the order of [`Report::to_save`] (empty when not stored).
pub fn report_input(r: &Report, run_ids: &[i64]) -> ReportInput {
    let field = &r.field;
    let o = &r.ordination.outcome;
    let ordination = match ordination_part(o, &format!("Correspondence analysis by {field}"), None)
    {
        Some(p) => Part::Done(vec![p]),
        None => Part::Unavailable("the correspondence analysis has fewer than two axes".into()),
    };
    let compare = match &r.compare {
        Some(c) => Part::Done(vec![Labelled {
            label: format!("by {}", c.spec.by),
            outcome: c.outcome.clone(),
        }]),
        None => Part::NotRequested,
    };
    let partition = match &r.partition {
        Some(p) => Part::Done(p.outcome.clone()),
        None => Part::NotRequested,
    };
    let trends = match &r.trends {
        Some(t) => Part::Done(t.split.groups.clone()),
        None => Part::NotRequested,
    };
    let diversity = match &r.diversity {
        Some(d) => Part::Done(diversity_groups(d)),
        None => Part::NotRequested,
    };
    html::ReportInput {
        title: "Community change report".to_string(),
        selection_text: o.selection_text.clone(),
        summary: r.summary.clone(),
        compare,
        partition,
        ordination,
        totals: totals_part(o, &format!("Sample totals by {field}")),
        trends,
        diversity,
        run_ids: r
            .stored_parts()
            .into_iter()
            .zip(run_ids.iter().copied())
            .collect(),
        parameters: r.commands(),
        cautions: Vec::new(),
    }
}

/// The groups of a report's diversity part: (group, outcome).
pub fn diversity_groups(
    d: &crate::workflow::report::Diversities,
) -> Vec<(String, crate::workflow::diversity::Outcome)> {
    d.parts
        .iter()
        .map(|(g, _)| g.clone())
        .zip(d.outcomes.iter().cloned())
        .collect()
}

/// The plot of a diversity outcome: its curves, the common coverage and, with
/// periods, the means per period.
pub fn diversity_plot(
    o: &crate::workflow::diversity::Outcome,
    title: &str,
) -> super::svg::DiversityPlot {
    use super::svg::{DiversityCurve, DiversityPeriod};
    let curves = o
        .curves
        .iter()
        .filter(|c| !c.points.is_empty())
        .map(|c| {
            let observed = c
                .points
                .iter()
                .find(|p| !p.extrapolated && p.size == c.individuals as f64)
                .map_or((c.individuals as f64, c.richness as f64, 1.0), |p| {
                    (p.size, p.richness, p.coverage)
                });
            DiversityCurve {
                label: c.name.clone(),
                points: c
                    .points
                    .iter()
                    .map(|p| (p.size, p.richness, p.coverage, p.extrapolated))
                    .collect(),
                observed,
            }
        })
        .collect();
    let triple = |s: &crate::workflow::diversity::Summary| -> Option<(f64, f64, f64)> {
        let m = s.mean?;
        Some((m, s.ci_low.unwrap_or(m), s.ci_high.unwrap_or(m)))
    };
    // Seasons of one year sit side by side within the year.
    let periods = o
        .periods
        .iter()
        .flatten()
        .filter_map(|b| {
            let year = f64::from(b.year?);
            Some(DiversityPeriod {
                period: year,
                raw: triple(&b.richness)?,
                at_coverage: triple(&b.coverage_richness),
            })
        })
        .collect::<Vec<_>>();
    let seasonal = o.periods.iter().flatten().any(|b| b.season.is_some());
    super::svg::DiversityPlot {
        title: title.to_string(),
        subtitle: format!(
            "{} {} rows{}",
            o.n,
            o.unit.as_str(),
            o.coverage.as_ref().map_or(String::new(), |c| format!(
                ", common coverage {:.1} %",
                100.0 * c.level
            ))
        ),
        curves,
        level: o.coverage.as_ref().map(|c| c.level),
        // One point per year: a seasonal series is drawn in the curves only.
        periods: if seasonal { Vec::new() } else { periods },
    }
}

/// One line of a taxon's own trend: "-12.3 %/year (-15.0 to -9.1), p (BH) 0.003",
/// or why it has none.
pub fn taxon_trend_words(t: &crate::analysis::trend::TaxonTrend, permutations: usize) -> String {
    use super::format::fmt_p;
    match (t.pct_per_year, t.ci_low, t.ci_high, t.p_adjusted) {
        (Some(s), Some(a), Some(b), Some(q)) => format!(
            "{s:+.1} %/year ({a:.1} to {b:.1}), p (BH) {}",
            fmt_p(q, permutations)
        ),
        _ => "no trend estimated".to_string(),
    }
}

/// The small multiples of `trend --by-taxon`: the `shown` taxa with the largest
/// changes (the outcome's order), `None` without per-taxon trends.
pub fn taxon_trends_plot(
    o: &crate::workflow::trend::Outcome,
    shown: usize,
) -> Option<super::svg::TaxonTrendsPlot> {
    let t = o.by_taxon.as_ref()?;
    let years: Vec<f64> = t.years.iter().map(|&y| f64::from(y)).collect();
    let panels: Vec<super::svg::TaxonPanel> = t
        .taxa
        .iter()
        .take(shown.max(1))
        .map(|x| super::svg::TaxonPanel {
            taxon: x.taxon.clone(),
            caption: taxon_trend_words(&x.trend, t.permutations),
            rates: years
                .iter()
                .zip(&x.trend.yearly_rates)
                .filter(|(_, r)| r.is_finite())
                .map(|(&y, &r)| (y, r))
                .collect(),
            slope_log: x.trend.slope_log,
            clear: x.trend.p_adjusted.is_some_and(|q| q <= o.alpha),
        })
        .filter(|p| !p.rates.is_empty())
        .collect();
    if panels.is_empty() {
        return None;
    }
    let (a, b) = (years.first()?, years.last()?);
    Some(super::svg::TaxonTrendsPlot {
        title: "Each taxon's own trend".to_string(),
        subtitle: format!(
            "{} taxa with the largest changes of {}, {a}–{b}, {} rows",
            panels.len(),
            t.taxa.len(),
            o.n
        ),
        rate_label: if o.per_effort {
            "organisms per unit of effort".to_string()
        } else {
            "organisms per row".to_string()
        },
        panels,
    })
}
