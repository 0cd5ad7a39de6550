//! Table and CSV of an ordination outcome, and the input of its plot
//! ([`plot`], drawn by [`crate::report::svg::ordination_svg`]).

use std::io::{self, Write};

use super::Render;
use crate::analysis::transform::Transform;
use crate::report::format::{csv_num, fmt_num, fmt_p, new_table, write_table};
use crate::report::svg::{AxisSpec, OrdinationPlot, ScatterGroup, TaxonMark};
use crate::workflow::ordinate::{ELLIPSE_LEVEL, Fit, Outcome};

/// The plot title: the method, with the dissimilarity or the constraints.
pub fn title(o: &Outcome) -> String {
    match &o.fit {
        Fit::Pcoa {
            distance,
            transform,
            ..
        } => format!(
            "Principal coordinates ({}{})",
            distance.name(),
            match transform {
                Transform::None => String::new(),
                t => format!(", {} transform", t.name()),
            }
        ),
        Fit::Ca { .. } => "Correspondence analysis".to_string(),
        Fit::Cca(c) => format!(
            "Canonical correspondence analysis, constrained by {}",
            c.constraints
                .iter()
                .map(|c| c.field.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        ),
    }
}

/// The plot of the first two axes: samples by group, each group's centroid
/// ellipse (`None` when the ordination has fewer than two axes).
pub fn plot(o: &Outcome) -> Option<OrdinationPlot> {
    if o.n_axes() < 2 {
        return None;
    }
    Some(OrdinationPlot {
        title: title(o),
        subtitle: o.selection_text.clone(),
        x_axis: AxisSpec {
            name: "Axis 1".into(),
            share: Some(o.axes[0].share),
        },
        y_axis: AxisSpec {
            name: "Axis 2".into(),
            share: Some(o.axes[1].share),
        },
        share_of: o.share_of.to_string(),
        ellipse_level: ELLIPSE_LEVEL,
        groups: o
            .groups
            .iter()
            .enumerate()
            .map(|(g, group)| ScatterGroup {
                name: group.group.clone(),
                points: o
                    .samples
                    .iter()
                    .filter(|s| s.group_index == g)
                    .map(|s| [s.coordinates[0], s.coordinates[1]])
                    .collect(),
                ellipse: group.ellipse.as_ref().map(|e| e.boundary.clone()),
            })
            .collect(),
        taxa: o
            .taxa
            .iter()
            .enumerate()
            .map(|(i, t)| TaxonMark {
                name: t.taxon.clone(),
                point: [t.coordinates[0], t.coordinates[1]],
                labelled: i < o.taxa_shown,
            })
            .collect(),
        taxa_note: (!o.taxa.is_empty()).then(|| {
            format!(
                "Crosses: taxa, as {}; named: the {} with the largest contributions to these axes.",
                o.taxa_scores,
                o.taxa_shown.min(o.taxa.len())
            )
        }),
    })
}

/// The taxa with the largest contributions to the reported axes.
fn taxa_table(o: &Outcome, out: &mut dyn Write) -> io::Result<()> {
    let shown = o.taxa_shown.min(o.taxa.len());
    if shown == 0 {
        return Ok(());
    }
    writeln!(
        out,
        "Taxa with the largest contributions to these axes ({}):",
        o.taxa_scores
    )?;
    let mut head = vec!["taxon".to_string()];
    head.extend((1..=o.n_axes()).map(|a| format!("axis {a}")));
    head.push("contribution".into());
    let head: Vec<&str> = head.iter().map(String::as_str).collect();
    let mut t = new_table(&head);
    for x in o.taxa.iter().take(shown) {
        let mut row = vec![x.taxon.clone()];
        row.extend(x.coordinates.iter().map(|v| fmt_num(*v)));
        row.push(pct(x.contribution));
        t.add_row(row);
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

/// A share as a percentage with one decimal.
fn pct(share: f64) -> String {
    if share.is_finite() {
        format!("{:.1}%", 100.0 * share)
    } else {
        fmt_num(share)
    }
}

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        writeln!(
            out,
            "{} of {}",
            self.method.name().to_uppercase(),
            self.selection_text
        )?;
        writeln!(
            out,
            "total: {}; shares are of the {}",
            fmt_num(self.total),
            self.share_of
        )?;
        let mut t = new_table(&["axis", "eigenvalue", "share", "cumulative"]);
        let mut cum = 0.0;
        for a in &self.axes {
            cum += a.share;
            t.add_row(vec![
                a.axis.to_string(),
                fmt_num(a.eigenvalue),
                pct(a.share),
                pct(cum),
            ]);
        }
        write_table(out, &t)?;
        match &self.fit {
            Fit::Pcoa {
                negative_eigenvalue_share,
                ..
            } => writeln!(
                out,
                "negative eigenvalues: {:.2}% of the absolute eigenvalue sum",
                100.0 * negative_eigenvalue_share
            )?,
            Fit::Cca(c) => {
                let test = &c.test;
                writeln!(
                    out,
                    "constraints: {} ({} df) explain {} of the inertia ({} of {})",
                    c.constraints
                        .iter()
                        .map(|c| c.field.as_str())
                        .collect::<Vec<_>>()
                        .join(", "),
                    test.df_constraints,
                    pct(c.constrained_share),
                    fmt_num(c.constrained_inertia),
                    fmt_num(self.total)
                )?;
                writeln!(
                    out,
                    "test: pseudo-F = {}, p = {} ({} {} permutations, {}, seed {})",
                    fmt_num(test.pseudo_f),
                    fmt_p(test.p_value, test.permutations),
                    test.permutations,
                    if test.exact { "exact" } else { "random" },
                    test.scheme,
                    test.seed
                )?;
            }
            Fit::Ca { .. } => {}
        }
        if self.n_axes() >= 2 {
            let mut g = new_table(&[
                "group",
                "samples",
                "centre 1",
                "centre 2",
                "95% ellipse semi-axes",
            ]);
            for group in &self.groups {
                let (c1, c2, ax) = match &group.ellipse {
                    Some(e) => (
                        fmt_num(e.centre[0]),
                        fmt_num(e.centre[1]),
                        format!("{} × {}", fmt_num(e.semi_axes[0]), fmt_num(e.semi_axes[1])),
                    ),
                    None => (
                        String::new(),
                        String::new(),
                        "none (fewer than 3 samples)".into(),
                    ),
                };
                g.add_row(vec![group.group.clone(), group.n.to_string(), c1, c2, ax]);
            }
            write_table(out, &g)?;
        }
        taxa_table(self, out)?;
        writeln!(out, "sample coordinates: --format csv or --format json")
    }

    /// A `record` column (`eigenvalue`, `share`, `sample`, then `taxon`), the sample or taxon
    /// label, site, year and group, then one column per axis and a taxon's `contribution`.
    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        let mut header: Vec<String> = ["record", "label", "site", "year", "group"]
            .map(String::from)
            .to_vec();
        header.extend((1..=self.n_axes()).map(|a| format!("axis{a}")));
        header.push("contribution".into());
        w.write_record(&header)?;
        let rows: [(&str, Vec<f64>); 2] = [
            (
                "eigenvalue",
                self.axes.iter().map(|a| a.eigenvalue).collect(),
            ),
            ("share", self.axes.iter().map(|a| a.share).collect()),
        ];
        for (name, vals) in rows {
            let mut row = vec![name.to_string()];
            row.extend(std::iter::repeat_n(String::new(), 4));
            row.extend(vals.into_iter().map(csv_num));
            row.push(String::new());
            w.write_record(&row)?;
        }
        for s in &self.samples {
            let mut row = vec![
                "sample".to_string(),
                s.label.clone(),
                s.site.clone(),
                s.year.to_string(),
                s.group.clone().unwrap_or_default(),
            ];
            row.extend(s.coordinates.iter().copied().map(csv_num));
            row.push(String::new());
            w.write_record(&row)?;
        }
        for t in &self.taxa {
            let mut row = vec![
                "taxon".to_string(),
                t.taxon.clone(),
                String::new(),
                String::new(),
                String::new(),
            ];
            row.extend(t.coordinates.iter().copied().map(csv_num));
            row.push(csv_num(t.contribution));
            w.write_record(&row)?;
        }
        w.flush()
    }
}
