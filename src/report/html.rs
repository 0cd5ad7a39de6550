//! The offline HTML report: one self-contained file with inline CSS and inline
//! SVG, no scripts, no fonts, nothing fetched from anywhere and no web
//! addresses at all, readable on a phone and printable.
//!
//! [`render`] is a pure function from a [`ReportInput`] to a `String`. The
//! analysis parts arrive as the typed outcomes of the workflow
//! (`workflow::compare`, `workflow::partition`, `workflow::trend`,
//! `workflow::ordinate`) and the typed store summary (`workflow::summary`), the
//! same outcomes the commands print and store, so the report shows exactly what
//! the commands computed; this module computes no statistic. Each part is a
//! [`Part`]: not requested, requested but not available (with the reason,
//! shown as such), or done.

use super::format::{MISSING, fmt_p};
use super::svg::{
    self, OrdinationPlot, PartitionBar, PartitionPlot, TotalsPlot, TrendPlot, TrendPoint,
};
use crate::analysis::partition::Fractions;
use crate::analysis::trend::Diagnosis;
use crate::workflow::summary::Summary;
use crate::workflow::{compare, partition, trend};

/// One part of the report.
#[derive(Debug, Clone, PartialEq)]
pub enum Part<T> {
    /// The user did not ask for it; the section says so.
    NotRequested,
    /// Asked for but not produced; the reason is shown (never a made-up result).
    Unavailable(String),
    /// The result.
    Done(T),
}

impl<T> Part<T> {
    /// The result, if done.
    pub fn done(&self) -> Option<&T> {
        match self {
            Part::Done(t) => Some(t),
            _ => None,
        }
    }
}

/// A comparison outcome with the label of what it is about (e.g. `lower reach`).
#[derive(Debug, Clone)]
pub struct Labelled {
    /// What the comparison is about.
    pub label: String,
    /// The `tally compare` outcome.
    pub outcome: compare::Outcome,
}

/// One ordination: its plot input and the `tally ordinate` outcome.
#[derive(Debug, Clone, PartialEq)]
pub struct OrdinationPart {
    /// What the ordination is of (a heading).
    pub label: String,
    /// Plot input (first two axes).
    pub plot: OrdinationPlot,
    /// The ordination.
    pub result: crate::workflow::ordinate::Outcome,
    /// A separate test of composition against constraints shown under the
    /// plot (a `tally ordinate --method cca` outcome), if one was run.
    pub test: Option<crate::workflow::ordinate::Outcome>,
}

/// Everything the report shows.
#[derive(Debug, Clone)]
pub struct ReportInput {
    /// Page title.
    pub title: String,
    /// The selection, in plain words.
    pub selection_text: String,
    /// What the store holds (`tally summary`).
    pub summary: Summary,
    /// `tally compare` results, one per comparison run (e.g. per reach).
    pub compare: Part<Vec<Labelled>>,
    /// `tally partition` outcome (one dissimilarity, or the pairs of `--compare-distances`).
    pub partition: Part<partition::Outcome>,
    /// Ordinations.
    pub ordination: Part<Vec<OrdinationPart>>,
    /// Totals per group.
    pub totals: Part<TotalsPlot>,
    /// `tally trend` outcomes: one per group of `--split-by` (or one with an
    /// empty group name for a single trend).
    pub trends: Part<Vec<trend::Group>>,
    /// `tally diversity --every year` outcomes: (group, outcome), one per group
    /// of `--split-by`.
    pub diversity: Part<Vec<(String, crate::workflow::diversity::Outcome)>>,
    /// Which stored run produced which part: (part, run id).
    pub run_ids: Vec<(String, i64)>,
    /// How each part was obtained: (part, parameters or command line).
    pub parameters: Vec<(String, String)>,
    /// Cautions added to [`standard_cautions`] for this report.
    pub cautions: Vec<String>,
}

/// The cautions every report carries.
pub fn standard_cautions() -> Vec<String> {
    [
        "A permutation p-value is the share of rearrangements of the samples, among those allowed by the design, that give a statistic at least as large as the one observed. A small value says the grouping is unlikely to be a coincidence of this arrangement; it does not measure how large or how important a difference is, and a large value does not show that there is no difference.",
        "Size and shape are separated by construction: size is the total number of organisms of a sample, shape its relative composition. A shape-only distance cannot see totals, and any distance that sees totals mixes both. The split is a way of looking at the data, not a discovery about the animals.",
        "A composition difference between groups can come from a different centre or from a different spread (dispersion). Read the dispersion test beside the composition test before concluding that the groups sit in different places.",
        "Totals depend on sampling effort. Compare abundance only per unit effort and only within one protocol; rare taxa are missed more often in smaller samples, which can look like a change in composition.",
        "Samples from the same sites in successive years are not independent replicates. These analyses are screening tools: conclusions about causes need a review of the sampling design and of the field records by someone who knows the program.",
    ]
    .into_iter()
    .map(String::from)
    .collect()
}

/// HTML-escape text.
pub fn esc(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// Prepare an SVG string from `report::svg` for inline use: drop the fixed
/// size (CSS scales it through its viewBox), the namespace address (not
/// needed inline in HTML) and label it for screen readers.
pub fn inline_svg(svg: &str, label: &str) -> String {
    let svg = svg.trim_start();
    let svg = svg
        .strip_prefix("<?xml")
        .and_then(|r| r.find("?>").map(|e| &r[e + 2..]))
        .unwrap_or(svg)
        .trim_start();
    match svg.find('>') {
        Some(end) if svg.starts_with("<svg") => {
            let head = &svg[..end];
            let view = head
                .find("viewBox=\"")
                .and_then(|s| {
                    let r = &head[s + 9..];
                    r.find('"').map(|e| r[..e].to_string())
                })
                .unwrap_or_else(|| "0 0 760 540".to_string());
            format!(
                "<svg class=\"plot\" viewBox=\"{}\" role=\"img\" aria-label=\"{}\" preserveAspectRatio=\"xMidYMid meet\"{}",
                esc(&view),
                esc(label),
                &svg[end..]
            )
        }
        _ => String::new(),
    }
}

/// A number for people with `digits` decimals (`—` when not computed).
fn fnum(v: Option<f64>, digits: usize) -> String {
    match v.filter(|x| x.is_finite()) {
        Some(x) => format!("{x:.digits$}"),
        None => MISSING.to_string(),
    }
}

fn yes_no(v: bool) -> &'static str {
    if v {
        "<span class=\"tag yes\">yes</span>"
    } else {
        "<span class=\"tag no\">no</span>"
    }
}

const CSS: &str = r#"
:root{--ink:#222;--muted:#5b5b5b;--line:#d6d6d6;--paper:#fff;--band:#f3f1ea;--blue:#24589a;--amber:#e8a33a;--brick:#b3472c;--green:#2a8c6e}
*{box-sizing:border-box}
html{font-size:100%}
body{margin:0;background:var(--paper);color:var(--ink);font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif;line-height:1.5}
main{max-width:62rem;margin:0 auto;padding:1rem 1.1rem 3rem}
header.top{border-bottom:4px solid var(--blue);padding-bottom:.6rem;margin-bottom:1.2rem}
header.top h1{font-size:1.7rem;margin:.2rem 0}
header.top p{margin:.2rem 0;color:var(--muted)}
nav.toc{background:var(--band);border-radius:.4rem;padding:.5rem .9rem;margin:1rem 0}
nav.toc ol{margin:.2rem 0;padding-left:1.3rem;columns:2;column-gap:2rem}
nav.toc a{color:var(--blue)}
section{margin:2rem 0;break-inside:auto}
section>h2{font-size:1.3rem;border-left:6px solid var(--amber);padding-left:.55rem;margin:0 0 .7rem}
h3{font-size:1.05rem;margin:1.2rem 0 .4rem}
.notrun{color:var(--muted);font-style:italic;border:1px dashed var(--line);padding:.5rem .8rem;border-radius:.3rem}
.glance{display:grid;grid-template-columns:repeat(auto-fit,minmax(15rem,1fr));gap:.8rem}
.card{border:1px solid var(--line);border-radius:.4rem;padding:.7rem .9rem;background:#fafafa}
.card h3{margin:0 0 .3rem}
.card p{margin:.25rem 0}
.tag{display:inline-block;padding:0 .45rem;border-radius:.7rem;font-size:.85rem;font-weight:600}
.tag.yes{background:#fbe3c0;color:#6b3d00}
.tag.no{background:#e4ecf6;color:#1d3f6b}
.tag.diag{background:var(--blue);color:#fff}
.scroll{overflow-x:auto;-webkit-overflow-scrolling:touch;margin:.5rem 0}
table{border-collapse:collapse;font-size:.9rem;min-width:100%}
th,td{padding:.3rem .55rem;border-bottom:1px solid var(--line);text-align:left;vertical-align:top}
th{background:var(--band);font-weight:600}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums}
table.grid td{padding:.1rem .3rem;text-align:center;font-size:.8rem}
table.grid td.zero{color:#bbb}
figure{margin:1rem 0}
svg.plot{display:block;width:100%;height:auto;max-width:760px;border:1px solid var(--line);border-radius:.3rem;background:#fff}
figcaption{font-size:.85rem;color:var(--muted);margin-top:.3rem}
ul.cautions li{margin:.45rem 0}
code{font-family:ui-monospace,Menlo,Consolas,monospace;font-size:.85rem;background:var(--band);padding:0 .2rem;border-radius:.2rem;word-break:break-word}
footer{margin-top:2.5rem;border-top:1px solid var(--line);padding-top:.6rem;color:var(--muted);font-size:.85rem}
@media (max-width:40rem){main{padding:.7rem}header.top h1{font-size:1.35rem}nav.toc ol{columns:1}table{font-size:.8rem}}
@media print{nav.toc{display:none}main{max-width:none;padding:0}section{break-inside:avoid-page}figure,table,.card{break-inside:avoid}svg.plot{max-width:100%;border:none}a{color:inherit;text-decoration:none}body{font-size:10.5pt}}
"#;

const SECTIONS: [(&str, &str); 10] = [
    ("glance", "At a glance"),
    ("store", "What the store holds"),
    ("compare", "Abundance and composition compared"),
    (
        "partition",
        "How much of the difference is size, how much shape",
    ),
    ("ordination", "Where the samples sit"),
    ("totals", "Totals per group"),
    ("trends", "Change across the years"),
    ("diversity", "Diversity beyond the numbers caught"),
    ("provenance", "How each part was obtained"),
    ("cautions", "Before drawing conclusions"),
];

fn open_section(out: &mut String, id: &str) {
    let title = SECTIONS
        .iter()
        .find(|(i, _)| *i == id)
        .map(|(_, t)| *t)
        .unwrap_or(id);
    out.push_str(&format!(
        "<section id=\"{id}\" class=\"part\">\n<h2>{}</h2>\n",
        esc(title)
    ));
}

fn not_shown<T>(out: &mut String, part: &Part<T>, what: &str) -> bool {
    match part {
        Part::NotRequested => {
            out.push_str(&format!(
                "<p class=\"notrun\">Not run: {} was not requested for this report.</p>\n",
                esc(what)
            ));
            true
        }
        Part::Unavailable(why) => {
            out.push_str(&format!(
                "<p class=\"notrun\">Not available: {}</p>\n",
                esc(why)
            ));
            true
        }
        Part::Done(_) => false,
    }
}

fn table(head: &[&str], rows: &[Vec<String>], numeric: &[bool]) -> String {
    let mut s = String::from("<div class=\"scroll\"><table>\n<thead><tr>");
    for (i, h) in head.iter().enumerate() {
        let c = if numeric.get(i).copied().unwrap_or(false) {
            " class=\"num\""
        } else {
            ""
        };
        s.push_str(&format!("<th{c}>{}</th>", esc(h)));
    }
    s.push_str("</tr></thead>\n<tbody>\n");
    for r in rows {
        s.push_str("<tr>");
        for (i, cell) in r.iter().enumerate() {
            let c = if numeric.get(i).copied().unwrap_or(false) {
                " class=\"num\""
            } else {
                ""
            };
            // Cells are escaped by the callers (some hold tags).
            s.push_str(&format!("<td{c}>{cell}</td>"));
        }
        s.push_str("</tr>\n");
    }
    s.push_str("</tbody></table></div>\n");
    s
}

fn figure(svg_text: Result<String, svg::SvgError>, label: &str, caption: &str) -> String {
    match svg_text {
        Ok(s) => format!(
            "<figure>\n{}\n<figcaption>{}</figcaption>\n</figure>\n",
            inline_svg(&s, label),
            esc(caption)
        ),
        Err(e) => format!(
            "<p class=\"notrun\">The plot could not be drawn: {}</p>\n",
            esc(&e.to_string())
        ),
    }
}

/// The position of a period on the time axis: its year, with the periods of
/// one year (seasons) spread evenly across that year.
fn period_position(t: &trend::Outcome, p: &trend::Period) -> f64 {
    let same: Vec<&trend::Period> = t.periods.iter().filter(|q| q.year == p.year).collect();
    let k = same.iter().position(|q| q.period == p.period).unwrap_or(0);
    f64::from(p.year) + k as f64 / same.len().max(1) as f64
}

/// Where a breakpoint `year` (the first year "after") is drawn: midway between
/// the last period before it and the first period from it on.
fn breakpoint_position(t: &trend::Outcome, year: i32) -> f64 {
    let before = t
        .periods
        .iter()
        .filter(|p| p.year < year)
        .map(|p| period_position(t, p))
        .reduce(f64::max);
    let after = t
        .periods
        .iter()
        .filter(|p| p.year >= year)
        .map(|p| period_position(t, p))
        .reduce(f64::min);
    match (before, after) {
        (Some(a), Some(b)) => (a + b) / 2.0,
        _ => f64::from(year) - 0.5,
    }
}

/// The trend panel input of one trend. The baseline band spans the baseline
/// periods; a breakpoint is drawn when its max-F test alone would count its
/// aspect as changed under the diagnosis rule (`min(1, 2 p) ≤ alpha`).
fn trend_plot(label: &str, t: &trend::Outcome, subtitle: &str) -> Option<TrendPlot> {
    let mut points = Vec::new();
    let mut with_interval = false;
    for pe in &t.periods {
        let Some(a) = pe.abundance.filter(|a| a.is_finite()) else {
            continue;
        };
        let (lo, hi) = (pe.abundance_ci_low, pe.abundance_ci_high);
        with_interval |= lo.is_some() && hi.is_some();
        points.push(TrendPoint {
            period: period_position(t, pe),
            abundance: a,
            lower: lo.unwrap_or(a),
            upper: hi.unwrap_or(a),
            shape_distance: pe.shape_distance,
        });
    }
    if points.is_empty() {
        return None;
    }
    let base: Vec<f64> = t
        .periods
        .iter()
        .filter(|p| p.baseline)
        .map(|p| period_position(t, p))
        .collect();
    let baseline = match (
        base.iter().copied().reduce(f64::min),
        base.iter().copied().reduce(f64::max),
    ) {
        (Some(a), Some(b)) => (a, b),
        _ => (points[0].period, points[0].period),
    };
    let mut breakpoints: Vec<f64> = Vec::new();
    if let Some(b) = &t.breakpoints {
        for (year, p) in [
            (b.size.year, b.size.p_value),
            (b.shape.year, b.shape.p_value),
        ] {
            let x = breakpoint_position(t, year);
            if (2.0 * p).min(1.0) <= t.alpha && !breakpoints.contains(&x) {
                breakpoints.push(x);
            }
        }
    }
    Some(TrendPlot {
        title: if label.is_empty() {
            "Abundance and composition over time".into()
        } else {
            format!("{label}: abundance and composition over time")
        },
        subtitle: subtitle.to_string(),
        abundance_label: if t.per_effort {
            "Organisms per unit effort".into()
        } else {
            "Organisms per sample".into()
        },
        interval_label: if with_interval {
            "95% interval".into()
        } else {
            "no interval reported".into()
        },
        distance_label: format!("Shape distance to baseline ({})", t.distances.shape.name()),
        points,
        baseline,
        breakpoints,
    })
}

/// Partition bars from a partition outcome: one per dissimilarity and transform.
fn partition_bars_from_partition(o: &partition::Outcome) -> Vec<PartitionBar> {
    o.parts()
        .iter()
        .map(|x| {
            let label = format!("{} ({})", x.distance.name(), x.transform.name());
            bar(&label, &x.adjusted_fractions)
        })
        .collect()
}

fn bar(label: &str, a: &Fractions) -> PartitionBar {
    PartitionBar {
        label: label.to_string(),
        size_only: a.size_only,
        shared: a.shared,
        shape_only: a.shape_only,
        unexplained: a.unexplained,
    }
}

fn glance(out: &mut String, input: &ReportInput) {
    open_section(out, "glance");
    let mut cards = String::new();
    if let Some(cs) = input.compare.done() {
        for c in cs {
            // Every pair, not only the first: with three groups the first pair
            // alone can say "no" while the other two differ.
            let pairs: String = if c.outcome.comparisons.is_empty() {
                format!("<p>Abundance differs: {MISSING} · Composition differs: {MISSING}</p>")
            } else {
                c.outcome
                    .comparisons
                    .iter()
                    .map(|x| {
                        format!(
                            "<p>{} against {}: abundance differs: {} · composition differs: {}</p>",
                            esc(&x.group),
                            esc(&x.reference),
                            yes_no(x.abundance_differs),
                            yes_no(x.composition_differs)
                        )
                    })
                    .collect()
            };
            cards.push_str(&format!(
                "<div class=\"card\"><h3>{}</h3>{pairs}<p>{}</p></div>\n",
                esc(&c.label),
                esc(&c.outcome.verdict)
            ));
        }
    }
    for g in input.trends.done().into_iter().flatten() {
        let t = &g.outcome;
        let d = t.diagnosis.name();
        let fewer = t.size_trend.slope_pct_per_year < 0.0;
        let meaning = match (t.diagnosis, fewer) {
            (Diagnosis::Abundance, true) => "fewer organisms, mix of taxa steady",
            (Diagnosis::Abundance, false) => "more organisms, mix of taxa steady",
            (Diagnosis::Composition, _) => "mix of taxa changing, numbers steady",
            (Diagnosis::Both, true) => "fewer organisms and a changing mix of taxa",
            (Diagnosis::Both, false) => "more organisms and a changing mix of taxa",
            (Diagnosis::None, _) => "no trend in numbers or in the mix of taxa",
        };
        cards.push_str(&format!(
            "<div class=\"card\"><h3>Trend{}</h3><p><span class=\"tag diag\">{}</span> {}</p><p>Size: {} % per year (p = {}); shape: R² {} (p = {})</p></div>\n",
            if g.group.is_empty() { String::new() } else { format!(": {}", esc(&g.group)) },
            esc(d),
            esc(meaning),
            fnum(Some(t.size_trend.slope_pct_per_year), 1),
            fmt_p(t.size_trend.p_value, t.permutations),
            fnum(Some(t.shape_trend.r2), 3),
            fmt_p(t.shape_trend.p_value, t.permutations),
        ));
    }
    if let Some(os) = input.ordination.done() {
        for o in os {
            if let Some(c) = o.test.as_ref().unwrap_or(&o.result).cca() {
                cards.push_str(&format!(
                    "<div class=\"card\"><h3>{}</h3><p>Composition against the constraints (CCA): {:.1}% of the inertia, pseudo-F {}, p = {}</p></div>\n",
                    esc(&o.label),
                    100.0 * c.constrained_share,
                    super::format::fmt_num(c.test.pseudo_f),
                    super::format::fmt_p(c.test.p_value, c.test.permutations)
                ));
            }
        }
    }
    if cards.is_empty() {
        out.push_str("<p class=\"notrun\">No comparison, trend or constrained ordination was run for this report, so there is no headline finding.</p>\n");
    } else {
        out.push_str(&format!("<div class=\"glance\">\n{cards}</div>\n"));
    }
    out.push_str("</section>\n");
}

fn store_part(out: &mut String, s: &Summary) {
    open_section(out, "store");
    out.push_str(&format!(
        "<p>{} sites, {} sampling events, {} taxon names, {} counts in {} import batch(es); events from {} to {}.</p>\n",
        s.sites,
        s.events,
        s.taxa,
        s.counts,
        s.batches,
        esc(s.first_date.as_deref().unwrap_or_default()),
        esc(s.last_date.as_deref().unwrap_or_default())
    ));
    let rows: Vec<Vec<String>> = s
        .protocols
        .iter()
        .map(|x| {
            vec![
                esc(&x.code),
                esc(&x.effort_unit),
                x.events.to_string(),
                fnum(Some(x.total_effort), 1),
            ]
        })
        .collect();
    out.push_str(&table(
        &["Protocol", "Effort unit", "Events", "Total effort"],
        &rows,
        &[false, false, true, true],
    ));
    out.push_str("<h3>Events per site and year</h3>\n<div class=\"scroll\"><table class=\"grid\"><thead><tr><th>Site</th>");
    for y in &s.years {
        // Two-digit years keep the grid narrow on a phone.
        let t = y.to_string();
        let short = if t.len() == 4 {
            format!("'{}", &t[2..])
        } else {
            t
        };
        out.push_str(&format!("<th>{}</th>", esc(&short)));
    }
    out.push_str("</tr></thead><tbody>\n");
    for c in &s.coverage {
        out.push_str(&format!("<tr><th>{}</th>", esc(&c.site)));
        for &n in &c.events {
            if n == 0 {
                out.push_str("<td class=\"zero\">·</td>");
            } else {
                out.push_str(&format!("<td>{n}</td>"));
            }
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table></div>\n");
    out.push_str("</section>\n");
}

fn compare_part(out: &mut String, part: &Part<Vec<Labelled>>) {
    open_section(out, "compare");
    if !not_shown(out, part, "the comparison of abundance and composition") {
        for c in part.done().into_iter().flatten() {
            let v = &c.outcome;
            out.push_str(&format!("<h3>{}</h3>\n", esc(&c.label)));
            out.push_str(&format!(
                "<p><strong>Verdict:</strong> {}</p>\n",
                esc(&v.verdict)
            ));
            let (size, shape, comb) = (&v.size, &*v.shape, &*v.combined);
            let rows = vec![
                vec![
                    "Abundance (size)".into(),
                    format!(
                        "ratio {} (95% CI {}–{})",
                        fnum(size.ratio, 3),
                        fnum(size.ci_low, 3),
                        fnum(size.ci_high, 3)
                    ),
                    fmt_p(size.p_value, size.permutations),
                    esc(&v.scheme),
                ],
                vec![
                    format!("Composition (shape, {})", esc(shape.distance.name())),
                    format!("pseudo-F {}", fnum(Some(shape.pseudo_f), 3)),
                    fmt_p(shape.p_value, shape.permutations),
                    esc(&v.scheme),
                ],
                vec![
                    "Spread of composition (dispersion)".into(),
                    String::new(),
                    fmt_p(shape.dispersion_p_value, shape.dispersion_permutations),
                    esc(&v.scheme),
                ],
                vec![
                    format!(
                        "Combined ({}, {})",
                        esc(comb.distance.name()),
                        esc(comb.transform.name())
                    ),
                    format!("pseudo-F {}", fnum(Some(comb.pseudo_f), 3)),
                    fmt_p(comb.p_value, comb.permutations),
                    esc(&v.scheme),
                ],
            ];
            out.push_str(&table(
                &["Test", "Effect", "p-value", "Permutation scheme"],
                &rows,
                &[false, false, true, false],
            ));
            for line in super::text::design_lines(
                &v.design,
                &[size.smallest_possible_p.max(shape.smallest_possible_p)],
                v.alpha,
            ) {
                out.push_str(&format!("<p>{}</p>\n", esc(&line)));
            }
            if !v.comparisons.is_empty() {
                let rows: Vec<Vec<String>> = v
                    .comparisons
                    .iter()
                    .map(|x| {
                        vec![
                            esc(&x.group),
                            esc(&x.reference),
                            yes_no(x.abundance_differs).to_string(),
                            yes_no(x.composition_differs).to_string(),
                            esc(&x.verdict),
                        ]
                    })
                    .collect();
                out.push_str(&table(
                    &[
                        "Group",
                        "Against",
                        "Abundance differs",
                        "Composition differs",
                        "In words",
                    ],
                    &rows,
                    &[],
                ));
                for x in &v.comparisons {
                    taxa_behind(
                        out,
                        &x.taxa,
                        &format!("{} against {}", x.group, x.reference),
                        x.size.permutations,
                        v.alpha,
                    );
                }
            }
        }
    }
    out.push_str("</section>\n");
}

/// Taxa shown per comparison in the report.
const REPORT_TAXA: usize = 12;

/// "Taxa behind the change" of one contrast (`what`, e.g. `2016–2025 against
/// 2008–2015`): a diverging bar chart of the largest shares of the composition
/// shift and a table of their rates, ratios and adjusted p-values (to the
/// resolution of `permutations`): docs/methods.md, "Taxa behind the change".
fn taxa_behind(
    out: &mut String,
    taxa: &[compare::Taxon],
    what: &str,
    permutations: usize,
    alpha: f64,
) {
    if taxa.is_empty() {
        return;
    }
    let mut order: Vec<&compare::Taxon> = taxa.iter().collect();
    order.sort_by(|a, b| {
        b.change
            .shape_contribution
            .unwrap_or(0.0)
            .total_cmp(&a.change.shape_contribution.unwrap_or(0.0))
    });
    order.truncate(REPORT_TAXA);
    out.push_str(&format!("<h4>Taxa behind the change: {}</h4>\n", esc(what)));
    let plot = svg::TaxaPlot {
        title: format!("Taxa behind {what}"),
        subtitle: format!(
            "the {} largest shares of the composition shift (Hellinger centroids)",
            order.len()
        ),
        bars: order
            .iter()
            .map(|t| svg::TaxonBar {
                taxon: t.taxon.clone(),
                contribution: t.change.shape_contribution.unwrap_or(0.0),
                gained: t.change.share_change_pp >= 0.0,
                clear: t.change.p_adjusted.is_some_and(|p| p <= alpha),
            })
            .collect(),
    };
    out.push_str(&figure(
        svg::taxa_svg(&plot),
        &plot.title,
        "Each bar is a taxon's share of the squared Hellinger distance between the two groups' centroids (the shares of all taxa add to 100 %): right when its share of the total rose, left when it fell. A long pale bar is a taxon that moves the centroid without a clear change of its own.",
    ));
    let rows: Vec<Vec<String>> = order
        .iter()
        .map(|t| {
            let c = &t.change;
            vec![
                esc(&t.taxon),
                fnum(Some(c.rate_reference), 3),
                fnum(Some(c.rate_group), 3),
                match (c.ratio, c.ratio_ci_low, c.ratio_ci_high) {
                    (Some(r), Some(a), Some(b)) => format!(
                        "{} ({}–{})",
                        fnum(Some(r), 2),
                        fnum(Some(a), 2),
                        fnum(Some(b), 2)
                    ),
                    (Some(r), _, _) => fnum(Some(r), 2),
                    (None, _, _) => "absent before".to_string(),
                },
                format!("{:+.1}", c.share_change_pp),
                fnum(c.shape_contribution.map(|v| 100.0 * v), 1),
                c.p_adjusted
                    .map_or("—".to_string(), |p| fmt_p(p, permutations)),
            ]
        })
        .collect();
    out.push_str(&table(
        &[
            "Taxon",
            "Rate, reference",
            "Rate, group",
            "Ratio (95% CI)",
            "Share change (points)",
            "Share of shift %",
            "Adjusted p",
        ],
        &rows,
        &[false, true, true, true, true, true, true],
    ));
}

fn partition_part(out: &mut String, input: &ReportInput) {
    open_section(out, "partition");
    // The partition of the combined dissimilarity of each comparison, then a
    // separate partition run if there is one.
    let mut bars = Vec::new();
    if let Some(cs) = input.compare.done() {
        for c in cs {
            if let Some(a) = &c.outcome.combined.adjusted_fractions {
                bars.push(bar(&c.label, a));
            }
        }
    }
    let from_compare = !bars.is_empty();
    if from_compare {
        out.push_str(&figure(
            svg::partition_svg(&PartitionPlot {
                title: "Size and shape in the combined dissimilarity".into(),
                subtitle: input.selection_text.clone(),
                bars,
            }),
            "Partition of the combined dissimilarity into size and shape",
            "One bar per comparison: the adjusted shares of the combined dissimilarity explained by size alone, by size and shape together, by shape alone, and left unexplained.",
        ));
    }
    match &input.partition {
        Part::Done(o) => {
            let bars = partition_bars_from_partition(o);
            if bars.is_empty() {
                out.push_str("<p class=\"notrun\">The partition result holds no adjusted fractions to draw.</p>\n");
            } else {
                let scheme = o.design.first().map_or("free", |d| d.permute).to_string();
                let p_of = |t: &crate::analysis::partition::UniqueTest| match t.p_value {
                    Some(v) => fmt_p(v, t.permutations),
                    None => "not applicable".to_string(),
                };
                let rows: Vec<Vec<String>> = bars
                    .iter()
                    .zip(o.parts())
                    .map(|(b, x)| {
                        vec![
                            esc(&b.label),
                            format!("{:.3}", b.size_only),
                            format!("{:.3}", b.shared),
                            format!("{:.3}", b.shape_only),
                            format!("{:.3}", b.unexplained),
                            p_of(&x.tests.size_only),
                            p_of(&x.tests.shape_only),
                            esc(&scheme),
                        ]
                    })
                    .collect();
                out.push_str(&figure(
                    svg::partition_svg(&PartitionPlot {
                        title: "Size and shape, by dissimilarity".into(),
                        subtitle: input.selection_text.clone(),
                        bars,
                    }),
                    "Size and shape partition by dissimilarity",
                    "One bar per dissimilarity and transform.",
                ));
                out.push_str(&table(
                    &[
                        "Dissimilarity",
                        "Size only",
                        "Shared",
                        "Shape only",
                        "Unexplained",
                        "p (size only)",
                        "p (shape only)",
                        "Permutation scheme",
                    ],
                    &rows,
                    &[false, true, true, true, true, true, true, false],
                ));
                let smallest = o
                    .parts()
                    .iter()
                    .flat_map(|x| [x.tests.size_only.min_p, x.tests.shape_only.min_p])
                    .flatten()
                    .fold(0.0, f64::max);
                for line in
                    super::text::design_lines(&o.design, &[smallest], super::text::DESIGN_ALPHA)
                {
                    out.push_str(&format!("<p>{}</p>\n", esc(&line)));
                }
            }
        }
        other if !from_compare => {
            not_shown(out, other, "the size/shape partition");
        }
        _ => {}
    }
    out.push_str("</section>\n");
}

fn ordination_part(out: &mut String, part: &Part<Vec<OrdinationPart>>) {
    open_section(out, "ordination");
    if !not_shown(out, part, "an ordination") {
        for o in part.done().into_iter().flatten() {
            let r = &o.result;
            out.push_str(&format!("<h3>{}</h3>\n", esc(&o.label)));
            let mut caption = format!(
                "Each point is a sample; each ellipse is the 95% confidence region of a group's centre, not of its samples. Axis shares are of the {}.",
                r.share_of
            );
            if let crate::workflow::ordinate::Fit::Pcoa {
                negative_eigenvalue_share: s,
                ..
            } = r.fit
            {
                caption.push_str(&format!(
                    " Negative eigenvalues carry {:.1}% of the absolute eigenvalue sum; the plot shows the positive part only.",
                    100.0 * s
                ));
            }
            out.push_str(&figure(
                svg::ordination_svg(&o.plot),
                &o.plot.title,
                &caption,
            ));
            for c in std::iter::once(r)
                .chain(o.test.as_ref())
                .filter_map(crate::workflow::ordinate::Outcome::cca)
            {
                let t = &c.test;
                let names: Vec<&str> = c.constraints.iter().map(|c| c.field.as_str()).collect();
                out.push_str(&format!(
                    "<p>CCA test of composition against {}: pseudo-F = {} ({} and {} df), p = {} from {} {} permutations ({}, seed {}). The constraints carry {:.1}% of the total inertia.</p>\n",
                    esc(&names.join(", ")),
                    super::format::fmt_num(t.pseudo_f),
                    t.df_constraints,
                    t.df_residual,
                    super::format::fmt_p(t.p_value, t.permutations),
                    t.permutations,
                    if t.exact { "exact" } else { "random" },
                    esc(&t.scheme),
                    t.seed,
                    100.0 * c.constrained_share
                ));
            }
        }
    }
    out.push_str("</section>\n");
}

fn trends_part(out: &mut String, input: &ReportInput) {
    open_section(out, "trends");
    if !not_shown(out, &input.trends, "a trend analysis") {
        for g in input.trends.done().into_iter().flatten() {
            let t = &g.outcome;
            if !g.group.is_empty() {
                out.push_str(&format!("<h3>{}</h3>\n", esc(&g.group)));
            }
            out.push_str(&format!(
                "<p>Diagnosis: <span class=\"tag diag\">{}</span> — size trend {} % per year (p = {}), shape trend R² {} (p = {}).</p>\n",
                esc(t.diagnosis.name()),
                fnum(Some(t.size_trend.slope_pct_per_year), 2),
                fmt_p(t.size_trend.p_value, t.permutations),
                fnum(Some(t.shape_trend.r2), 3),
                fmt_p(t.shape_trend.p_value, t.permutations),
            ));
            out.push_str(&format!(
                "<p>Permutation scheme of these p-values: within sites, {} ({} {} relabellings, seed {}); size as {}.</p>\n",
                esc(&t.scheme),
                t.permutations,
                if t.exact { "exact" } else { "random" },
                t.seed,
                match t.size_trend.model {
                    crate::analysis::size_test::SizeModel::Rate => {
                        "pooled rate (count model, rows that caught nothing included)"
                    }
                    crate::analysis::size_test::SizeModel::Geometric => "geometric mean",
                }
            ));
            if t.smallest_possible_p > t.alpha {
                out.push_str(&format!(
                    "<p>This design cannot reach p ≤ {}: the smallest possible p-value is {}. More years are needed for a verdict.</p>\n",
                    t.alpha,
                    fnum(Some(t.smallest_possible_p), 3)
                ));
            }
            if let Some(b) = &t.breakpoints {
                out.push_str(&format!(
                    "<p>Best before/after split: size from {} ({} %, p = {}), shape from {} (R² {}, p = {}).</p>\n",
                    b.size.year,
                    fnum(Some(b.size.change_pct), 1),
                    fmt_p(b.size.p_value, t.permutations),
                    b.shape.year,
                    fnum(Some(b.shape.r2), 3),
                    fmt_p(b.shape.p_value, t.permutations),
                ));
            }
            match trend_plot(&g.group, t, &input.selection_text) {
                Some(plot) => out.push_str(&figure(
                    svg::trend_svg(&plot),
                    &plot.title,
                    "Top: organisms per unit effort with the 95% interval of each period. Bottom: distance of each period's composition from the baseline composition. Shaded: the baseline years. Dashed lines: breakpoints that alone count their aspect as changed (2·p ≤ alpha).",
                )),
                None => out.push_str("<p class=\"notrun\">No period values to draw.</p>\n"),
            }
            let rows: Vec<Vec<String>> = t
                .periods
                .iter()
                .map(|x| {
                    vec![
                        esc(&x.period),
                        fnum(x.abundance, 2),
                        match (x.abundance_ci_low, x.abundance_ci_high) {
                            (Some(a), Some(b)) => {
                                format!("{}–{}", fnum(Some(a), 2), fnum(Some(b), 2))
                            }
                            _ => "—".to_string(),
                        },
                        fnum(x.change_pct, 1),
                        fnum(x.shape_distance, 3),
                        fnum(x.size_part, 3),
                        fnum(x.shape_part, 3),
                    ]
                })
                .collect();
            out.push_str(&table(
                &[
                    "Period",
                    "Abundance",
                    "95% interval",
                    "Change %",
                    "Shape distance",
                    "Size part",
                    "Shape part",
                ],
                &rows,
                &[false, true, true, true, true, true, true],
            ));
            let later: Vec<i32> = t
                .years
                .iter()
                .copied()
                .filter(|y| !t.baseline_years.contains(y))
                .collect();
            let span = |v: &[i32]| match (v.first(), v.last()) {
                (Some(a), Some(b)) if a != b => format!("{a}–{b}"),
                (Some(a), _) => a.to_string(),
                _ => String::new(),
            };
            taxa_behind(
                out,
                &t.taxa,
                &format!(
                    "{} against the baseline {} (whole years relabelled)",
                    span(&later),
                    span(&t.baseline_years)
                ),
                t.permutations,
                t.alpha,
            );
        }
    }
    out.push_str("</section>\n");
}

fn diversity_part(out: &mut String, input: &ReportInput) {
    use crate::report::text::diversity::{measure_label, reading_line};
    open_section(out, "diversity");
    if !not_shown(out, &input.diversity, "diversity through the years") {
        out.push_str("<p>Raw richness (taxa seen) falls when fewer individuals are caught, even when the community is unchanged. Each row is therefore also read at a common sample coverage, the lowest among the rows: at equal completeness of the samples, a change in richness is a change in taxa, not in numbers. Hill numbers of order 1 and 2 weigh the common taxa; a fall in them is a fall in evenness.</p>\n");
        for (group, o) in input.diversity.done().into_iter().flatten() {
            if !group.is_empty() {
                out.push_str(&format!("<h3>{}</h3>\n", esc(group)));
            }
            if let Some(line) = reading_line(o) {
                let line = line.strip_prefix("reading: ").unwrap_or(&line);
                out.push_str(&format!(
                    "<p>Reading: <span class=\"tag diag\">{}</span> — {}.</p>\n",
                    esc(&serde_json::to_value(o.reading)
                        .ok()
                        .and_then(|v| v.as_str().map(str::to_string))
                        .unwrap_or_default()),
                    esc(line)
                ));
            }
            let rows: Vec<Vec<String>> = o
                .trends
                .iter()
                .flatten()
                .map(|t| {
                    vec![
                        esc(&measure_label(t.measure, o)),
                        fnum(Some(t.trend.pct_per_year), 2),
                        format!(
                            "{} to {}",
                            fnum(Some(t.trend.ci_low), 2),
                            fnum(Some(t.trend.ci_high), 2)
                        ),
                        fnum(Some(t.trend.change_pct), 1),
                        fmt_p(t.trend.p_value, t.trend.permutations),
                    ]
                })
                .collect();
            out.push_str(&table(
                &[
                    "Measure",
                    "% per year",
                    "95% interval",
                    "Change first to last year %",
                    "p-value",
                ],
                &rows,
                &[false, true, true, true, true],
            ));
            let plot = crate::report::input::diversity_plot(
                o,
                &if group.is_empty() {
                    "Richness by individuals and by coverage".to_string()
                } else {
                    format!("{group}: richness by individuals and by coverage")
                },
            );
            out.push_str(&figure(
                svg::diversity_svg(&plot),
                &plot.title,
                "Top: taxa against individuals and against sample coverage, each year's rows pooled; solid by rarefaction, dashed by extrapolation to twice the individuals; the dashed vertical line is the common coverage. Bottom: mean taxa per row each year, raw (circles) and at the common coverage (squares), with 95% bootstrap intervals.",
            ));
        }
    }
    out.push_str("</section>\n");
}

/// Render the report.
pub fn render(input: &ReportInput) -> String {
    let mut out = String::new();
    out.push_str("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n");
    out.push_str(&format!(
        "<title>{}</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n",
        esc(&input.title)
    ));
    out.push_str(&format!(
        "<header class=\"top\"><h1>{}</h1><p>{}</p><p>Made by tally {} from the store's data; every number below was computed by the commands named in “How each part was obtained”.</p></header>\n",
        esc(&input.title),
        esc(&input.selection_text),
        esc(crate::VERSION)
    ));
    out.push_str("<nav class=\"toc\"><strong>Contents</strong><ol>");
    for (id, t) in SECTIONS {
        out.push_str(&format!("<li><a href=\"#{id}\">{}</a></li>", esc(t)));
    }
    out.push_str("</ol></nav>\n");
    glance(&mut out, input);
    store_part(&mut out, &input.summary);
    compare_part(&mut out, &input.compare);
    partition_part(&mut out, input);
    ordination_part(&mut out, &input.ordination);
    open_section(&mut out, "totals");
    if !not_shown(&mut out, &input.totals, "the totals plot")
        && let Part::Done(t) = &input.totals
    {
        out.push_str(&figure(
            svg::totals_svg(t),
            &t.title,
            "Box plots of sample totals on a logarithmic axis.",
        ));
    }
    out.push_str("</section>\n");
    trends_part(&mut out, input);
    diversity_part(&mut out, input);
    open_section(&mut out, "provenance");
    let mut rows: Vec<Vec<String>> = input
        .parameters
        .iter()
        .map(|(part, how)| {
            let ids: Vec<String> = input
                .run_ids
                .iter()
                .filter(|(p, _)| p == part)
                .map(|(_, id)| id.to_string())
                .collect();
            vec![
                esc(part),
                format!("<code>{}</code>", esc(how)),
                ids.join(", "),
            ]
        })
        .collect();
    for (part, id) in &input.run_ids {
        if !input.parameters.iter().any(|(p, _)| p == part) {
            rows.push(vec![esc(part), String::new(), id.to_string()]);
        }
    }
    if rows.is_empty() {
        out.push_str("<p class=\"notrun\">No analysis parameters were recorded.</p>\n");
    } else {
        out.push_str(&table(&["Part", "Obtained with", "Stored run"], &rows, &[]));
        out.push_str("<p>Show a stored run with <code>tally runs show ID</code>.</p>\n");
    }
    out.push_str("</section>\n");
    open_section(&mut out, "cautions");
    out.push_str("<ul class=\"cautions\">\n");
    for c in standard_cautions().iter().chain(&input.cautions) {
        out.push_str(&format!("<li>{}</li>\n", esc(c)));
    }
    out.push_str("</ul>\n</section>\n");
    out.push_str("<footer>This file is self-contained: it needs no network and runs no scripts. Print it or send it as it is.</footer>\n");
    out.push_str("</main>\n</body>\n</html>\n");
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    fn fractions(size_only: f64, shared: f64, shape_only: f64, unexplained: f64) -> Fractions {
        Fractions {
            size_only,
            shared,
            shape_only,
            unexplained,
        }
    }

    fn compare_outcome(abund: bool, comp: bool) -> compare::Outcome {
        use crate::analysis::dissimilarity::Distance;
        use crate::analysis::transform::Transform;
        use crate::workflow::compare::{
            Combined, Comparison, Outcome, PairN, PairShape, PairSize, Shape, Size,
        };
        Outcome {
            by: "period".into(),
            reference: "2008–2015".into(),
            groups: Vec::new(),
            alpha: 0.05,
            per_effort: true,
            size: Size {
                model: crate::analysis::size_test::SizeModel::Rate,
                ratio: Some(0.61),
                ci_low: Some(0.52),
                ci_high: Some(0.72),
                p_value: 0.0001,
                f: 20.0,
                df: (1, 10),
                confidence: 0.95,
                bootstrap: 999,
                resampled: "samples within groups",
                permutations: 9999,
                exact: false,
                smallest_possible_p: 1e-4,
                groups: Vec::new(),
            },
            shape: Box::new(Shape {
                distance: Distance::Hellinger,
                pseudo_f: 1.1,
                r2: 0.1,
                p_value: 0.38,
                permutations: 9999,
                exact: false,
                smallest_possible_p: 1e-4,
                dispersion_f: 0.5,
                dispersion_p_value: 0.5,
                dispersion_permutations: 9999,
                dispersion_groups: Vec::new(),
                rarefied: None,
            }),
            combined: Box::new(Combined {
                distance: Distance::BrayCurtis,
                transform: Transform::Sqrt,
                pseudo_f: 9.0,
                r2: 0.3,
                p_value: 0.0001,
                permutations: 9999,
                fractions: None,
                adjusted_fractions: Some(fractions(0.2, 0.05, 0.02, 0.73)),
                partition_p_values: None,
                shape_axes: None,
            }),
            comparisons: vec![Comparison {
                group: "2016–2025".into(),
                reference: "2008–2015".into(),
                n: PairN {
                    group: 6,
                    reference: 6,
                },
                size: PairSize {
                    ratio: 0.61,
                    ci_low: 0.52,
                    ci_high: 0.72,
                    p_value: 0.0001,
                    p_adjusted: None,
                    permutations: 9999,
                },
                shape: PairShape {
                    distance: Distance::Hellinger,
                    pseudo_f: 1.1,
                    p_value: 0.38,
                    p_adjusted: None,
                    permutations: 9999,
                    dispersion_p_value: 0.5,
                    dispersion_p_adjusted: None,
                    dispersion_permutations: 9999,
                },
                abundance_differs: abund,
                composition_differs: comp,
                dispersion_differs: false,
                verdict: "abundance lower".into(),
                taxa: Vec::new(),
            }],
            verdict: "abundance lower <x0.61>; composition not different".into(),
            seed: 3,
            scheme: "free".into(),
            design: Vec::new(),
            permutations: 9999,
            notes: Vec::new(),
            caution: "",
            differs: None,
            assembly_notes: 0,
            taxa_shown: 10,
        }
    }

    fn partition_outcome() -> partition::Outcome {
        use crate::analysis::dissimilarity::Distance;
        use crate::analysis::partition::{SizeCoding, UniqueTest};
        use crate::analysis::transform::Transform;
        use crate::workflow::partition::{Part as P, Partitions, R2, Tests};
        let test = UniqueTest {
            pseudo_f: Some(2.0),
            p_value: Some(0.01),
            df: 1,
            df_resid: 20,
            permutations: 199,
            exact: false,
            min_p: Some(0.005),
        };
        let part = |distance, adjusted| P {
            distance,
            transform: Transform::None,
            size: SizeCoding::LogTotal,
            n: 24,
            total_variation: 1.0,
            r2: R2 {
                size: 0.1,
                shape: 0.4,
                both: 0.5,
            },
            fractions: adjusted,
            adjusted_fractions: adjusted,
            tests: Tests {
                size_only: test.clone(),
                shape_only: test.clone(),
            },
            shape_axes: 2,
            shape_design: "ca axes",
            shape_inertia_share: 0.6,
            df_resid: 20,
            one_block_explains_all: false,
            seed: 1,
            scheme: "free".into(),
            notes: Vec::new(),
        };
        partition::Outcome {
            partitions: Partitions::Compared {
                partitions: vec![
                    part(Distance::BrayCurtis, fractions(0.1, -0.02, 0.4, 0.52)),
                    part(Distance::Hellinger, fractions(0.0, 0.0, 0.6, 0.4)),
                ],
                seed: 1,
                n: 24,
            },
            design: Vec::new(),
            permutations: 199,
            per_effort: true,
            caution: "",
            shared_means: "",
            notes: Vec::new(),
            assembly_notes: 0,
        }
    }

    fn summary() -> Summary {
        use crate::workflow::summary::{ProtocolSummary, SiteCoverage};
        Summary {
            sites: 2,
            events: 3,
            taxa: 4,
            counts: 5,
            batches: 1,
            first_date: Some("2008-04-01".into()),
            last_date: Some("2009-05-01".into()),
            years: vec![2008, 2009],
            protocols: vec![ProtocolSummary {
                code: "kick".into(),
                effort_unit: "minutes".into(),
                events: 3,
                total_effort: 9.0,
            }],
            coverage: vec![
                SiteCoverage {
                    site: "S01".into(),
                    events: vec![1, 0],
                },
                SiteCoverage {
                    site: "S02".into(),
                    events: vec![1, 1],
                },
            ],
        }
    }

    fn trend_outcome(
        diagnosis: Diagnosis,
        slope: f64,
        r2: f64,
        breaks: (i32, f64, i32, f64),
    ) -> trend::Outcome {
        use crate::analysis::trend::ShapeTrend;
        use crate::workflow::trend::{
            Breakpoints, Decision, Distances, Outcome, Period, ShapeBreak, SizeBreak, SizeTrend,
        };
        let periods: Vec<Period> = (2008..2026)
            .map(|y| Period {
                period: y.to_string(),
                year: y,
                season: None,
                n: 6,
                sites: 6,
                baseline: y < 2011,
                too_few: false,
                n_reference: 18,
                abundance: Some(100.0 - f64::from(y - 2008)),
                abundance_ci_low: Some(90.0 - f64::from(y - 2008)),
                abundance_ci_high: Some(110.0 - f64::from(y - 2008)),
                change_pct: Some(-1.0),
                shape_distance: Some(0.01 * f64::from(y - 2008)),
                combined_distance: Some(0.3),
                size_part: Some(0.1),
                shape_part: Some(0.2),
                period_start: format!("{y}-04-01"),
                period_end: format!("{y}-10-01"),
            })
            .collect();
        Outcome {
            diagnosis,
            alpha: 0.05,
            size_trend: SizeTrend {
                slope_pct_per_year: slope,
                p_value: 0.001,
                ci_low: slope - 1.0,
                ci_high: slope + 1.0,
                model: crate::analysis::size_test::SizeModel::Geometric,
                ci_method: trend::CI_METHOD,
                slope_log: slope / 100.0,
                se_ols_log: Some(0.01),
                se_quasi_log: None,
                dispersion: None,
                pseudo_f: 12.0,
                df_resid: 100,
            },
            shape_trend: ShapeTrend {
                r2,
                pseudo_f: 2.0,
                p_value: 0.6,
                df_resid: 100,
            },
            decision: Decision {
                size_p: 0.002,
                shape_p: 1.0,
                rule: "an aspect changed when min(1, 2 min(p_trend, p_breakpoint)) <= alpha",
            },
            breakpoints: Some(Breakpoints {
                size: SizeBreak {
                    year: breaks.0,
                    p_value: breaks.1,
                    pseudo_f: 30.0,
                    change_pct: -40.0,
                    candidates: 14,
                },
                shape: ShapeBreak {
                    year: breaks.2,
                    p_value: breaks.3,
                    pseudo_f: 1.2,
                    r2: 0.01,
                    candidates: 14,
                },
            }),
            periods,
            n: 108,
            years: (2008..2026).collect(),
            sites: 6,
            baseline_years: vec![2008, 2009, 2010],
            permutations: 199,
            exact: false,
            seed: 1,
            scheme: "whole years".into(),
            smallest_possible_p: 1e-3,
            distances: Distances {
                shape: crate::workflow::design::ShapeDistance::Hellinger,
                combined: crate::analysis::dissimilarity::Distance::BrayCurtis,
                transform: crate::analysis::transform::Transform::Sqrt,
            },
            unit: crate::matrix::Unit::SiteYear,
            per_effort: true,
            fingerprint: "ab".repeat(32),
            taxa: Vec::new(),
            by_taxon: None,
            taxa_shown: 10,
            notes: Vec::new(),
        }
    }

    fn trend_groups() -> Vec<trend::Group> {
        vec![
            trend::Group {
                group: "lower".into(),
                outcome: trend_outcome(Diagnosis::Abundance, -3.2, 0.02, (2016, 0.005, 2012, 0.8)),
            },
            trend::Group {
                group: "middle".into(),
                outcome: trend_outcome(Diagnosis::Composition, 0.1, 0.5, (2010, 0.5, 2019, 0.005)),
            },
        ]
    }

    fn input() -> ReportInput {
        ReportInput {
            title: "Wren & Valley".into(),
            selection_text: "kick samples, per minute".into(),
            summary: summary(),
            compare: Part::Done(vec![
                Labelled {
                    label: "lower reach".into(),
                    outcome: compare_outcome(true, false),
                },
                Labelled {
                    label: "middle reach".into(),
                    outcome: compare_outcome(false, true),
                },
            ]),
            partition: Part::Done(partition_outcome()),
            ordination: Part::NotRequested,
            totals: Part::Unavailable("every total is zero".into()),
            trends: Part::Done(trend_groups()),
            diversity: Part::NotRequested,
            run_ids: vec![("compare lower reach".into(), 3)],
            parameters: vec![(
                "compare lower reach".into(),
                "tally compare --by period".into(),
            )],
            cautions: vec!["Invented data.".into()],
        }
    }

    #[test]
    fn report_holds_every_section_and_nothing_external() {
        let html = render(&input());
        for (id, title) in SECTIONS {
            assert!(html.contains(&format!("<section id=\"{id}\"")), "{id}");
            assert!(html.contains(&esc(title)), "{title}");
        }
        assert!(!html.contains("http"));
        assert!(!html.to_lowercase().contains("<script"));
        assert!(!html.contains("@import") && !html.contains("url("));
        // Escaping of user text.
        assert!(html.contains("Wren &amp; Valley"));
        assert!(html.contains("abundance lower &lt;x0.61&gt;"));
        // Parts as given: two comparison cards, the trend diagnoses, the not-run notices.
        assert!(html.contains("Not run: an ordination was not requested"));
        assert!(html.contains("Not available: every total is zero"));
        assert_eq!(
            html.matches("<span class=\"tag diag\">abundance</span>")
                .count(),
            2
        );
        assert_eq!(
            html.matches("<span class=\"tag diag\">composition</span>")
                .count(),
            2
        );
        // Partition: one chart from the comparisons, one from the partition run;
        // two trend panels; every inline SVG scales by its viewBox.
        assert_eq!(html.matches("<svg class=\"plot\" viewBox=").count(), 4);
        assert!(!html.contains("<svg width"));
        assert!(html.contains("Invented data."));
        assert!(html.contains("tally compare --by period"));
        assert!(html.contains("@media print") && html.contains("@media (max-width"));
    }

    #[test]
    fn the_glance_covers_every_pair() {
        // With three groups the first pair alone can say "no" while another
        // differs: every pair gets its line.
        let mut three = compare_outcome(false, false);
        let mut other = three.comparisons[0].clone();
        other.group = "upper".into();
        other.composition_differs = true;
        three.comparisons.push(other);
        let mut inp = input();
        inp.compare = Part::Done(vec![Labelled {
            label: "three reaches".into(),
            outcome: three,
        }]);
        let mut out = String::new();
        glance(&mut out, &inp);
        let no = "<span class=\"tag no\">no</span>";
        let yes = "<span class=\"tag yes\">yes</span>";
        let line = |g: &str, a: &str, c: &str| {
            format!("{g} against 2008–2015: abundance differs: {a} · composition differs: {c}")
        };
        assert!(out.contains(&line("2016–2025", no, no)), "{out}");
        assert!(out.contains(&line("upper", no, yes)), "{out}");
        // A trend card says which way the numbers went.
        assert!(out.contains("fewer organisms, mix of taxa steady"), "{out}");
    }

    #[test]
    fn inline_svg_drops_size_and_namespace() {
        let s = "<?xml version=\"1.0\"?>\n<svg width=\"760\" height=\"540\" viewBox=\"0 0 760 540\" xmlns=\"http://www.w3.org/2000/svg\">\n<rect/></svg>";
        let i = inline_svg(s, "a \"plot\"");
        assert!(i.starts_with("<svg class=\"plot\" viewBox=\"0 0 760 540\""));
        assert!(i.contains("aria-label=\"a &quot;plot&quot;\""));
        assert!(!i.contains("http") && !i.contains("width="));
        assert!(i.ends_with("<rect/></svg>"));
    }

    #[test]
    fn trend_plot_reads_periods_baseline_and_breakpoints() {
        let g = &trend_groups()[1];
        let plot = trend_plot("middle", &g.outcome, "x").unwrap();
        assert_eq!(plot.points.len(), 18);
        // Only the shape breakpoint passes 2·p ≤ alpha; drawn between 2018 and 2019.
        assert_eq!(plot.breakpoints, vec![2018.5]);
        assert_eq!(plot.baseline, (2008.0, 2010.0));
        assert_eq!(plot.interval_label, "95% interval");
        assert_eq!((plot.points[3].lower, plot.points[3].upper), (87.0, 107.0));
        assert_eq!(plot.abundance_label, "Organisms per unit effort");
    }

    #[test]
    fn seasons_are_spread_across_their_year() {
        let mut t = trend_groups().remove(0).outcome;
        for (i, p) in t.periods.iter_mut().enumerate() {
            p.year = 2008 + (i / 2) as i32;
            p.season = Some(if i % 2 == 0 { "spring" } else { "autumn" }.into());
            p.period = format!("{}-{}", p.year, p.season.as_deref().unwrap());
            p.baseline = i < 2;
        }
        let plot = trend_plot("", &t, "x").unwrap();
        let xs: Vec<f64> = plot.points.iter().map(|p| p.period).collect();
        assert_eq!(&xs[..4], &[2008.0, 2008.5, 2009.0, 2009.5]);
        assert_eq!(plot.baseline, (2008.0, 2008.5));
        // The size break of 2016 falls between 2015-autumn and 2016-spring.
        assert_eq!(plot.breakpoints, vec![2015.75]);
    }
}
