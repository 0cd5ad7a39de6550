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
    html::ReportInput {
        title: "Community change report".to_string(),
        selection_text: o.selection_text.clone(),
        summary: r.summary.clone(),
        compare,
        partition,
        ordination,
        totals: totals_part(o, &format!("Sample totals by {field}")),
        trends,
        run_ids: r
            .stored_parts()
            .into_iter()
            .zip(run_ids.iter().copied())
            .collect(),
        parameters: r.commands(),
        cautions: Vec::new(),
    }
}
