//! Table and CSV of a size/shape partition outcome.

use std::io::{self, Write};

use super::Render;
use crate::analysis::partition::{SizeCoding, UniqueTest};
use crate::report::format::{csv_num, fmt_num, fmt_p, new_table, write_table};
use crate::workflow::partition::{CAUTION, Outcome, Part, SHARED};

fn pct(v: f64) -> String {
    format!("{:.1}%", 100.0 * v)
}

/// `F = … (df a, b), p = …`, or why there is no test.
fn test_text(t: &UniqueTest) -> String {
    match (t.pseudo_f, t.p_value) {
        (Some(f), Some(p)) => format!(
            "F = {} (df {}, {}), p = {}",
            fmt_num(f),
            t.df,
            t.df_resid,
            fmt_p(p, t.permutations)
        ),
        _ => "not applicable".into(),
    }
}

/// The p-value of a unique part for a table cell.
fn p_cell(t: &UniqueTest) -> String {
    t.p_value
        .map_or_else(|| "n/a".into(), |p| fmt_p(p, t.permutations))
}

fn one_table(out: &mut dyn Write, p: &Part) -> io::Result<()> {
    writeln!(
        out,
        "Size/shape partition of the {} dissimilarity (transform {}), {} samples",
        p.distance.name(),
        p.transform.name(),
        p.n
    )?;
    let (f, a) = (&p.fractions, &p.adjusted_fractions);
    let mut t = new_table(&["part", "fraction", "adjusted", "test"]);
    for (name, raw, adj, test) in [
        (
            "size only",
            f.size_only,
            a.size_only,
            test_text(&p.tests.size_only),
        ),
        ("shared", f.shared, a.shared, "cannot be tested".into()),
        (
            "shape only",
            f.shape_only,
            a.shape_only,
            test_text(&p.tests.shape_only),
        ),
        ("unexplained", f.unexplained, a.unexplained, String::new()),
    ] {
        t.add_row(vec![name.to_string(), pct(raw), pct(adj), test]);
    }
    write_table(out, &t)?;
    if p.one_block_explains_all {
        writeln!(
            out,
            "One set explains the whole dissimilarity (no residual variation): the tests of the unique parts are not applicable."
        )?;
    }
    Ok(())
}

fn compared_table(out: &mut dyn Write, parts: &[Part], n: usize) -> io::Result<()> {
    let mut t = new_table(&[
        "dissimilarity",
        "transform",
        "size only",
        "shared",
        "shape only",
        "unexplained",
        "p size only",
        "p shape only",
        "shape axes",
    ]);
    for p in parts {
        let a = &p.adjusted_fractions;
        t.add_row(vec![
            p.distance.name().to_string(),
            p.transform.name().to_string(),
            pct(a.size_only),
            pct(a.shared),
            pct(a.shape_only),
            pct(a.unexplained),
            p_cell(&p.tests.size_only),
            p_cell(&p.tests.shape_only),
            format!("{} ({})", p.shape_axes, pct(p.shape_inertia_share)),
        ]);
    }
    writeln!(
        out,
        "Size/shape partition of {n} samples (adjusted fractions)"
    )?;
    write_table(out, &t)?;
    for p in parts.iter().filter(|p| p.one_block_explains_all) {
        writeln!(
            out,
            "{} after {}: one set explains the whole dissimilarity; its tests are not applicable.",
            p.distance.name(),
            p.transform.name()
        )?;
    }
    Ok(())
}

impl Render for Outcome {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        let parts = self.parts();
        let Some(first) = parts.first() else {
            return Ok(());
        };
        if self.compared() {
            compared_table(out, parts, first.n)?;
        } else {
            one_table(out, first)?;
        }
        writeln!(
            out,
            "Size: {} of the sample total{}. Shape: {} ({} dimension(s), {} of profile inertia{}).",
            match first.size {
                SizeCoding::LogTotal => "log",
                SizeCoding::Total => "value",
            },
            if self.per_effort {
                " per unit effort"
            } else {
                ""
            },
            if first.shape_design == "profiles" {
                "the profile space"
            } else {
                "leading correspondence-analysis axes"
            },
            first.shape_axes,
            pct(first.shape_inertia_share),
            if self.compared() {
                "; same design for every row"
            } else {
                ""
            },
        )?;
        writeln!(
            out,
            "Tests: pseudo-F of each unique part given the other set, residuals of the reduced model permuted \
             (Freedman-Lane); {} permutations, scheme {}, seed {}.",
            self.permutations, first.scheme, first.seed
        )?;
        let smallest = parts
            .iter()
            .flat_map(|p| [p.tests.size_only.min_p, p.tests.shape_only.min_p])
            .flatten()
            .fold(0.0, f64::max);
        for line in super::design_lines(&self.design, &[smallest], super::DESIGN_ALPHA) {
            writeln!(out, "{line}")?;
        }
        writeln!(out, "{SHARED}")?;
        writeln!(out, "{CAUTION} (`tally compare` runs both.)")
    }

    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let mut w = crate::report::format::csv_writer(out);
        w.write_record([
            "distance",
            "transform",
            "part",
            "fraction",
            "adjusted_fraction",
            "pseudo_f",
            "p_value",
        ])?;
        let opt = |v: Option<f64>| v.map(csv_num).unwrap_or_default();
        for p in self.parts() {
            let (f, a) = (&p.fractions, &p.adjusted_fractions);
            for (part, raw, adj, test) in [
                (
                    "size_only",
                    f.size_only,
                    a.size_only,
                    Some(&p.tests.size_only),
                ),
                ("shared", f.shared, a.shared, None),
                (
                    "shape_only",
                    f.shape_only,
                    a.shape_only,
                    Some(&p.tests.shape_only),
                ),
                ("unexplained", f.unexplained, a.unexplained, None),
            ] {
                w.write_record([
                    p.distance.name().to_string(),
                    p.transform.name().to_string(),
                    part.to_string(),
                    csv_num(raw),
                    csv_num(adj),
                    opt(test.and_then(|t| t.pseudo_f)),
                    opt(test.and_then(|t| t.p_value)),
                ])?;
            }
        }
        w.flush()
    }
}
