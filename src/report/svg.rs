//! SVG plots: ordination scatter with centroid ellipses, size/shape partition
//! bars, totals per group as box plots, and trend panels.
//!
//! Every plot is a pure function from a plain input struct to an SVG `String`,
//! drawn with plotters' SVG backend. Nothing here runs an analysis: callers
//! pass coordinates, fractions, totals and ellipse outlines already computed
//! (`analysis::ellipse`, `analysis::ordination`, …). Every plot carries a
//! `subtitle` that states the selection it was drawn from.
//!
//! Parts of a plot that tests and the HTML report need to find are wrapped in
//! `<g class="…" data-label="…">` elements: `group` (one per sample group in the
//! ordination, holding its points and, when present, its `ellipse`), `bar`
//! (one per partition bar), `box` (one per box plot), `baseline` and
//! `breakpoint` (trend panels). plotters has no grouping element of its own,
//! so the renderer draws a sentinel text at each group boundary and replaces
//! it afterwards.
//!
//! # Palette
//! [`PALETTE`] is this project's own set of eight colours, chosen to stay
//! apart for readers with red-green or blue-yellow colour vision deficiency:
//! the hues alternate between the blue and the orange-yellow side (the axis
//! dichromats keep) and the lightness steps between dark, middle and light, so
//! neighbours differ in lightness even where hue is lost. Checked with
//! `tests/reference/palette_check.py` (colorspacious 1.1.2, CAM02-UCS distance
//! after simulating each deficiency at full severity, Machado et al. 2009
//! model): smallest pairwise distance 17.7 for normal vision, 14.2 deuteranomaly,
//! 16.8 protanomaly, 11.8 tritanomaly (1 unit is about one just-noticeable
//! difference). Markers also change shape by group (circle, triangle, square,
//! diamond), so groups stay apart in greyscale print. Points are drawn with a
//! dark outline so the light colours remain visible on white.

use crate::analysis::prec::quantile;
use plotters::prelude::*;
/// A pixel position on the canvas.
type BackendCoord = (i32, i32);

/// Errors of the plot renderers.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[non_exhaustive]
pub enum SvgError {
    /// The input has nothing to draw.
    #[error("nothing to draw: {0}")]
    Empty(&'static str),
    /// A coordinate or value is NaN or infinite.
    #[error("non-finite value in {0}")]
    NonFinite(&'static str),
    /// The plotting backend failed.
    #[error("drawing failed: {0}")]
    Draw(String),
}

/// The project palette, in the order groups receive colours (see module notes).
pub const PALETTE: [RGBColor; 8] = [
    RGBColor(0x24, 0x58, 0x9A), // deep blue
    RGBColor(0xE8, 0xA3, 0x3A), // amber
    RGBColor(0x86, 0xC5, 0xEA), // sky
    RGBColor(0xB3, 0x47, 0x2C), // brick
    RGBColor(0x2A, 0x8C, 0x6E), // sea green
    RGBColor(0xCC, 0x79, 0xB0), // orchid
    RGBColor(0xF2, 0xDE, 0x7A), // straw
    RGBColor(0x55, 0x55, 0x55), // graphite
];

/// Text and outline colour.
const INK: RGBColor = RGBColor(0x22, 0x22, 0x22);
/// Shading of the baseline period and of the unexplained fraction.
const MIST: RGBColor = RGBColor(0xDD, 0xDD, 0xDD);
const FONT: &str = "sans-serif";
const WIDTH: u32 = 760;
const HEIGHT: u32 = 540;

/// Colour of group `i` (cycling through [`PALETTE`]).
pub fn group_colour(i: usize) -> RGBColor {
    PALETTE[i % PALETTE.len()]
}

/// `#rrggbb` form of a colour, for CSS in the HTML report.
pub fn hex(c: RGBColor) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

fn draw_err<E: std::fmt::Display>(e: E) -> SvgError {
    SvgError::Draw(e.to_string())
}

/// Sentinel texts drawn at group boundaries, replaced by `<g>` tags afterwards.
#[derive(Default)]
struct Markers {
    tags: Vec<String>,
}

impl Markers {
    fn token(id: usize) -> String {
        format!("TALLYMARK-{id}-END")
    }

    fn push<DB: DrawingBackend>(
        &mut self,
        root: &DrawingArea<DB, plotters::coord::Shift>,
        tag: String,
    ) -> Result<(), SvgError> {
        let id = self.tags.len();
        self.tags.push(tag);
        root.draw(&Text::new(Self::token(id), (0, 0), (FONT, 1)))
            .map_err(draw_err)
    }

    fn open<DB: DrawingBackend>(
        &mut self,
        root: &DrawingArea<DB, plotters::coord::Shift>,
        class: &str,
        label: &str,
    ) -> Result<(), SvgError> {
        self.push(
            root,
            format!(
                "<g class=\"{}\" data-label=\"{}\">",
                xml_escape(class),
                xml_escape(label)
            ),
        )
    }

    fn close<DB: DrawingBackend>(
        &mut self,
        root: &DrawingArea<DB, plotters::coord::Shift>,
    ) -> Result<(), SvgError> {
        self.push(root, "</g>".to_string())
    }
}

fn xml_escape(s: &str) -> String {
    s.replace('&', "&amp;")
        .replace('<', "&lt;")
        .replace('>', "&gt;")
        .replace('"', "&quot;")
}

/// Replace each sentinel `<text …>TALLYMARK-i-END</text>` element of `svg`
/// with `tags[i]`.
fn wrap_markers(mut svg: String, markers: &Markers) -> Result<String, SvgError> {
    for (id, tag) in markers.tags.iter().enumerate() {
        let token = Markers::token(id);
        let at = svg
            .find(&token)
            .ok_or_else(|| SvgError::Draw(format!("group marker {id} missing")))?;
        let start = svg[..at]
            .rfind("<text")
            .ok_or_else(|| SvgError::Draw(format!("group marker {id} malformed")))?;
        let end = svg[at..]
            .find("</text>")
            .map(|e| at + e + "</text>".len())
            .ok_or_else(|| SvgError::Draw(format!("group marker {id} malformed")))?;
        svg.replace_range(start..end, tag);
    }
    Ok(svg)
}

/// Draw the title and subtitle in the top band; return the area below.
fn header<DB: DrawingBackend>(
    root: &DrawingArea<DB, plotters::coord::Shift>,
    title: &str,
    subtitle: &str,
) -> Result<DrawingArea<DB, plotters::coord::Shift>, SvgError> {
    root.fill(&WHITE).map_err(draw_err)?;
    root.draw(&Text::new(
        title.to_string(),
        (14, 10),
        (FONT, 20).into_font().color(&INK),
    ))
    .map_err(draw_err)?;
    root.draw(&Text::new(
        subtitle.to_string(),
        (14, 36),
        (FONT, 13).into_font().color(&INK),
    ))
    .map_err(draw_err)?;
    let (_, body) = root.split_vertically(58);
    Ok(body)
}

/// Draw free text lines at the bottom-left of `area` (notes under a plot).
fn footnotes<DB: DrawingBackend>(
    area: &DrawingArea<DB, plotters::coord::Shift>,
    lines: &[String],
) -> Result<(), SvgError> {
    let (_, h) = area.dim_in_pixel();
    let n = lines.len() as i32;
    for (k, line) in lines.iter().enumerate() {
        let y = h as i32 - 16 * (n - k as i32) - 2;
        area.draw(&Text::new(
            line.clone(),
            (14, y),
            (FONT, 12).into_font().color(&INK),
        ))
        .map_err(draw_err)?;
    }
    Ok(())
}

/// A legend entry: label, colour, and the marker drawn beside it.
struct LegendEntry {
    label: String,
    colour: RGBColor,
    marker: Option<usize>,
}

/// Draw a vertical legend with its top-left corner at `at` (pixels).
fn legend<DB: DrawingBackend>(
    area: &DrawingArea<DB, plotters::coord::Shift>,
    at: BackendCoord,
    entries: &[LegendEntry],
) -> Result<(), SvgError> {
    for (k, e) in entries.iter().enumerate() {
        let y = at.1 + 20 * k as i32;
        match e.marker {
            Some(m) => marker_at(area, (at.0 + 6, y + 7), m, e.colour)?,
            None => area
                .draw(&Rectangle::new(
                    [(at.0, y), (at.0 + 12, y + 12)],
                    e.colour.filled(),
                ))
                .map_err(draw_err)?,
        }
        area.draw(&Text::new(
            e.label.clone(),
            (at.0 + 18, y),
            (FONT, 13).into_font().color(&INK),
        ))
        .map_err(draw_err)?;
    }
    Ok(())
}

/// Marker shape `m % 4` (circle, triangle, square, diamond) at pixel `c`.
fn marker_at<DB: DrawingBackend>(
    area: &DrawingArea<DB, plotters::coord::Shift>,
    c: BackendCoord,
    m: usize,
    colour: RGBColor,
) -> Result<(), SvgError> {
    let outline = INK.stroke_width(1);
    let fill = colour.filled();
    let r = 5;
    let shape: Vec<BackendCoord> = match m % 4 {
        1 => vec![
            (c.0, c.1 - r - 1),
            (c.0 + r + 1, c.1 + r),
            (c.0 - r - 1, c.1 + r),
        ],
        2 => vec![
            (c.0 - r + 1, c.1 - r + 1),
            (c.0 + r - 1, c.1 - r + 1),
            (c.0 + r - 1, c.1 + r - 1),
            (c.0 - r + 1, c.1 + r - 1),
        ],
        3 => vec![
            (c.0, c.1 - r - 1),
            (c.0 + r + 1, c.1),
            (c.0, c.1 + r + 1),
            (c.0 - r - 1, c.1),
        ],
        _ => {
            area.draw(&Circle::new(c, r, fill)).map_err(draw_err)?;
            return area.draw(&Circle::new(c, r, outline)).map_err(draw_err);
        }
    };
    area.draw(&Polygon::new(shape.clone(), fill))
        .map_err(draw_err)?;
    let mut closed = shape;
    closed.push(closed[0]);
    area.draw(&PathElement::new(closed, outline))
        .map_err(draw_err)
}

fn check_finite(values: impl IntoIterator<Item = f64>, what: &'static str) -> Result<(), SvgError> {
    if values.into_iter().all(f64::is_finite) {
        Ok(())
    } else {
        Err(SvgError::NonFinite(what))
    }
}

/// Padded range over values (±1 around a single value).
fn padded(lo: f64, hi: f64, pad: f64) -> (f64, f64) {
    if hi > lo {
        let d = (hi - lo) * pad;
        (lo - d, hi + d)
    } else {
        (lo - 1.0, hi + 1.0)
    }
}

// ------------------------------------------------------------------ ordination

/// One ordination axis: its name and the share of inertia (or variation) it carries.
#[derive(Debug, Clone, PartialEq)]
pub struct AxisSpec {
    /// Axis name, e.g. `Axis 1`.
    pub name: String,
    /// Share of the total (0..1) carried by the axis, if known.
    pub share: Option<f64>,
}

/// One sample group of an ordination scatter.
#[derive(Debug, Clone, PartialEq)]
pub struct ScatterGroup {
    /// Group name (legend text).
    pub name: String,
    /// Sample coordinates on the two plotted axes.
    pub points: Vec<[f64; 2]>,
    /// Boundary of the group's centroid confidence ellipse, if it has one
    /// (groups with fewer than 3 samples have none).
    pub ellipse: Option<Vec<[f64; 2]>>,
}

/// Input of [`ordination_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct OrdinationPlot {
    /// Plot title, e.g. `Correspondence analysis of the community`.
    pub title: String,
    /// The selection the plot came from, in plain words.
    pub subtitle: String,
    /// Horizontal axis.
    pub x_axis: AxisSpec,
    /// Vertical axis.
    pub y_axis: AxisSpec,
    /// What the axis shares are shares of, e.g. `inertia` or `variation`.
    pub share_of: String,
    /// Confidence level of the ellipses (e.g. 0.95), for the footnote.
    pub ellipse_level: f64,
    /// Sample groups, in legend order.
    pub groups: Vec<ScatterGroup>,
    /// Taxa placed on the same axes (empty: none drawn).
    pub taxa: Vec<TaxonMark>,
    /// What the taxon points are, for the footnote.
    pub taxa_note: Option<String>,
}

/// One taxon of an ordination biplot.
#[derive(Debug, Clone, PartialEq)]
pub struct TaxonMark {
    /// Taxon name.
    pub name: String,
    /// Its point on the two plotted axes.
    pub point: [f64; 2],
    /// Named on the plot (and inside the plotted range); the others are small
    /// marks, drawn only when they fall inside the range of the named points
    /// and the samples.
    pub labelled: bool,
}

fn axis_label(a: &AxisSpec, of: &str) -> String {
    match a.share {
        Some(s) => format!("{} ({:.1}% of {})", a.name, 100.0 * s, of),
        None => a.name.clone(),
    }
}

/// Ordination scatter: samples coloured (and shaped) by group, each group's
/// centroid confidence ellipse as a path, axis labels with the share of
/// inertia, a legend, and a footnote saying what the ellipses are and which
/// groups have none.
///
/// # Errors
/// [`SvgError::Empty`] without any point, [`SvgError::NonFinite`] for a NaN or
/// infinite coordinate, [`SvgError::Draw`] if plotters fails.
pub fn ordination_svg(plot: &OrdinationPlot) -> Result<String, SvgError> {
    let all: Vec<[f64; 2]> = plot
        .groups
        .iter()
        .flat_map(|g| g.points.iter().chain(g.ellipse.iter().flatten()))
        .chain(plot.taxa.iter().filter(|t| t.labelled).map(|t| &t.point))
        .copied()
        .collect();
    if plot.groups.iter().all(|g| g.points.is_empty()) {
        return Err(SvgError::Empty("ordination has no points"));
    }
    check_finite(
        all.iter().flat_map(|p| [p[0], p[1]]),
        "ordination coordinates",
    )?;
    let (x0, x1) = padded(
        all.iter().map(|p| p[0]).fold(f64::INFINITY, f64::min),
        all.iter().map(|p| p[0]).fold(f64::NEG_INFINITY, f64::max),
        0.06,
    );
    let (y0, y1) = padded(
        all.iter().map(|p| p[1]).fold(f64::INFINITY, f64::min),
        all.iter().map(|p| p[1]).fold(f64::NEG_INFINITY, f64::max),
        0.06,
    );
    // Equal scale on both axes (distances between points are meaningful):
    // widen the range that is short for its side of the plotting area.
    let (pw, ph) = (
        f64::from(WIDTH - 170 - 56 - 20),
        f64::from(HEIGHT - 58 - 40 - 40 - 20),
    );
    let (x0, x1, y0, y1) = {
        let (sx, sy) = ((x1 - x0) / pw, (y1 - y0) / ph);
        if sx > sy {
            let grow = (sx * ph - (y1 - y0)) / 2.0;
            (x0, x1, y0 - grow, y1 + grow)
        } else {
            let grow = (sy * pw - (x1 - x0)) / 2.0;
            (x0 - grow, x1 + grow, y0, y1)
        }
    };
    let mut out = String::new();
    let mut marks = Markers::default();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, HEIGHT)).into_drawing_area();
        let body = header(&root, &plot.title, &plot.subtitle)?;
        let (main, notes) = body.split_vertically(HEIGHT - 58 - 40);
        let (chart_area, legend_area) = main.split_horizontally(WIDTH - 170);
        let mut chart = ChartBuilder::on(&chart_area)
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(56)
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .light_line_style(WHITE)
            .bold_line_style(MIST.mix(0.6))
            .x_desc(axis_label(&plot.x_axis, &plot.share_of))
            .y_desc(axis_label(&plot.y_axis, &plot.share_of))
            .axis_desc_style((FONT, 14))
            .label_style((FONT, 12))
            .draw()
            .map_err(draw_err)?;
        // Zero lines, as ordination axes are centred.
        let zero = INK.mix(0.35).stroke_width(1);
        if x0 < 0.0 && x1 > 0.0 {
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(0.0, y0), (0.0, y1)],
                    zero,
                )))
                .map_err(draw_err)?;
        }
        if y0 < 0.0 && y1 > 0.0 {
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(x0, 0.0), (x1, 0.0)],
                    zero,
                )))
                .map_err(draw_err)?;
        }
        let inside = |p: &[f64; 2]| p[0] >= x0 && p[0] <= x1 && p[1] >= y0 && p[1] <= y1;
        let taxon_ink = INK.mix(0.55);
        for t in plot.taxa.iter().filter(|t| inside(&t.point)) {
            marks.open(
                &root,
                if t.labelled { "taxon named" } else { "taxon" },
                &t.name,
            )?;
            let (px, py) = chart.backend_coord(&(t.point[0], t.point[1]));
            let r = if t.labelled { 4 } else { 2 };
            for (a, b) in [((-r, -r), (r, r)), ((-r, r), (r, -r))] {
                root.draw(&PathElement::new(
                    vec![(px + a.0, py + a.1), (px + b.0, py + b.1)],
                    taxon_ink.stroke_width(1),
                ))
                .map_err(draw_err)?;
            }
            if t.labelled {
                root.draw(&Text::new(
                    t.name.clone(),
                    (px + 6, py - 6),
                    (FONT, 11).into_font().style(FontStyle::Italic).color(&INK),
                ))
                .map_err(draw_err)?;
            }
            marks.close(&root)?;
        }
        for (gi, g) in plot.groups.iter().enumerate() {
            let colour = group_colour(gi);
            marks.open(&root, "group", &g.name)?;
            if let Some(e) = &g.ellipse {
                marks.open(&root, "ellipse", &g.name)?;
                let path: Vec<(f64, f64)> = e.iter().map(|p| (p[0], p[1])).collect();
                chart
                    .draw_series(std::iter::once(PathElement::new(
                        path,
                        colour.stroke_width(2),
                    )))
                    .map_err(draw_err)?;
                marks.close(&root)?;
            }
            for p in &g.points {
                let px = chart.backend_coord(&(p[0], p[1]));
                marker_at(&root, px, gi, colour)?;
            }
            marks.close(&root)?;
        }
        let entries: Vec<LegendEntry> = plot
            .groups
            .iter()
            .enumerate()
            .map(|(gi, g)| LegendEntry {
                label: format!("{} ({})", g.name, g.points.len()),
                colour: group_colour(gi),
                marker: Some(gi),
            })
            .collect();
        legend(&legend_area, (8, 20), &entries)?;
        let without: Vec<&str> = plot
            .groups
            .iter()
            .filter(|g| g.ellipse.is_none())
            .map(|g| g.name.as_str())
            .collect();
        let mut lines = vec![format!(
            "Ellipses: {:.0}% confidence region of each group's centre (Hotelling T², normal theory; approximate, as the axes are estimated).",
            100.0 * plot.ellipse_level
        )];
        if !without.is_empty() {
            lines.push(format!(
                "No ellipse (fewer than 3 samples): {}.",
                without.join(", ")
            ));
        }
        if let Some(n) = &plot.taxa_note {
            lines.push(n.clone());
        }
        footnotes(&notes, &lines)?;
        root.present().map_err(draw_err)?;
    }
    wrap_markers(out, &marks)
}

// ------------------------------------------------------------------ partition

/// One bar of the size/shape partition: adjusted fractions of one
/// dissimilarity or transform, as computed (negative values allowed).
#[derive(Debug, Clone, PartialEq)]
pub struct PartitionBar {
    /// Dissimilarity or transform name, e.g. `Bray-Curtis`.
    pub label: String,
    /// Fraction explained by size alone (fraction `[a]`).
    pub size_only: f64,
    /// Fraction shared by size and shape (fraction `[b]`).
    pub shared: f64,
    /// Fraction explained by shape alone (fraction `[c]`).
    pub shape_only: f64,
    /// Unexplained fraction (fraction `[d]`).
    pub unexplained: f64,
}

/// Input of [`partition_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct PartitionPlot {
    /// Plot title.
    pub title: String,
    /// The selection the plot came from, in plain words.
    pub subtitle: String,
    /// One bar per dissimilarity or transform.
    pub bars: Vec<PartitionBar>,
}

const SEGMENTS: [&str; 4] = ["size only", "shared", "shape only", "unexplained"];

fn segment_colour(k: usize) -> RGBColor {
    match k {
        0 => PALETTE[1],
        1 => PALETTE[2],
        2 => PALETTE[0],
        _ => MIST,
    }
}

/// Stacked bars of the size/shape partition, one bar per dissimilarity or
/// transform, segments bottom to top: size only, shared, shape only,
/// unexplained. A negative adjusted fraction is a legitimate estimate
/// (docs/methods.md, "Negative fractions") but cannot be drawn as a length: it is
/// drawn as zero, its bar gets an asterisk, and a footnote gives the value.
///
/// # Errors
/// [`SvgError::Empty`] without bars, [`SvgError::NonFinite`] for a NaN or
/// infinite fraction, [`SvgError::Draw`] if plotters fails.
pub fn partition_svg(plot: &PartitionPlot) -> Result<String, SvgError> {
    if plot.bars.is_empty() {
        return Err(SvgError::Empty("partition has no bars"));
    }
    let parts = |b: &PartitionBar| [b.size_only, b.shared, b.shape_only, b.unexplained];
    check_finite(plot.bars.iter().flat_map(parts), "partition fractions")?;
    let top = plot
        .bars
        .iter()
        .map(|b| parts(b).iter().map(|v| v.max(0.0)).sum::<f64>())
        .fold(1.0_f64, f64::max);
    let n = plot.bars.len();
    let mut notes = Vec::new();
    let mut out = String::new();
    let mut marks = Markers::default();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, HEIGHT)).into_drawing_area();
        let body = header(&root, &plot.title, &plot.subtitle)?;
        let clipped: Vec<String> = plot
            .bars
            .iter()
            .flat_map(|b| {
                parts(b)
                    .into_iter()
                    .zip(SEGMENTS)
                    .filter(|(v, _)| *v < 0.0)
                    .map(|(v, name)| format!("{}: {name} {v:.3}", b.label))
                    .collect::<Vec<_>>()
            })
            .collect();
        if !clipped.is_empty() {
            notes.push(format!(
                "* Negative adjusted fractions are drawn as zero: {}.",
                clipped.join("; ")
            ));
        }
        notes.push(
            "Fractions are adjusted R² of the size/shape partition; a bar may exceed 1 when a fraction is negative."
                .to_string(),
        );
        let (main, foot) = body.split_vertically(HEIGHT - 58 - 20 - 16 * notes.len() as u32);
        let (chart_area, legend_area) = main.split_horizontally(WIDTH - 150);
        let mut chart = ChartBuilder::on(&chart_area)
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(56)
            .build_cartesian_2d(-0.5..(n as f64 - 0.5), 0.0..top * 1.08)
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(0)
            .light_line_style(WHITE)
            .bold_line_style(MIST.mix(0.6))
            .y_desc("Share of variation (adjusted R²)")
            .axis_desc_style((FONT, 14))
            .label_style((FONT, 12))
            .draw()
            .map_err(draw_err)?;
        for (i, b) in plot.bars.iter().enumerate() {
            marks.open(&root, "bar", &b.label)?;
            let x = i as f64;
            let mut y = 0.0;
            for (k, v) in parts(b).into_iter().enumerate() {
                let h = v.max(0.0);
                if h > 0.0 {
                    let mut r = Rectangle::new(
                        [(x - 0.32, y), (x + 0.32, y + h)],
                        segment_colour(k).filled(),
                    );
                    r.set_margin(0, 0, 0, 0);
                    chart.draw_series(std::iter::once(r)).map_err(draw_err)?;
                }
                y += h;
            }
            if parts(b).iter().any(|v| *v < 0.0) {
                chart
                    .draw_series(std::iter::once(
                        EmptyElement::at((x, y))
                            + Text::new("*", (-4, -20), (FONT, 20).into_font().color(&INK)),
                    ))
                    .map_err(draw_err)?;
            }
            chart
                .draw_series(std::iter::once(
                    EmptyElement::at((x, 0.0))
                        + Text::new(
                            b.label.clone(),
                            (-(b.label.chars().count() as i32) * 3, 8),
                            (FONT, 13).into_font().color(&INK),
                        ),
                ))
                .map_err(draw_err)?;
            marks.close(&root)?;
        }
        let entries: Vec<LegendEntry> = (0..4)
            .rev()
            .map(|k| LegendEntry {
                label: SEGMENTS[k].to_string(),
                colour: segment_colour(k),
                marker: None,
            })
            .collect();
        legend(&legend_area, (8, 20), &entries)?;
        footnotes(&foot, &notes)?;
        root.present().map_err(draw_err)?;
    }
    wrap_markers(out, &marks)
}

// ------------------------------------------------------------------ totals

/// Five-number summary of a box plot.
#[derive(Debug, Clone, PartialEq)]
pub struct BoxStats {
    /// Number of values.
    pub n: usize,
    /// Lower quartile.
    pub q1: f64,
    /// Median.
    pub median: f64,
    /// Upper quartile.
    pub q3: f64,
    /// Smallest value within `q1 − 1.5 IQR`.
    pub whisker_low: f64,
    /// Largest value within `q3 + 1.5 IQR`.
    pub whisker_high: f64,
    /// Values beyond the whiskers.
    pub outliers: Vec<f64>,
}

/// Box-plot summary of `values`: quartiles by linear interpolation (type 7),
/// whiskers at the most extreme values within 1.5 IQR of the box (Tukey's
/// rule), the rest as outliers. `None` for an empty or non-finite input.
pub fn box_stats(values: &[f64]) -> Option<BoxStats> {
    if values.is_empty() || !values.iter().all(|v| v.is_finite()) {
        return None;
    }
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let (q1, median, q3) = (quantile(&v, 0.25), quantile(&v, 0.5), quantile(&v, 0.75));
    let iqr = q3 - q1;
    let (lo, hi) = (q1 - 1.5 * iqr, q3 + 1.5 * iqr);
    let inside: Vec<f64> = v.iter().copied().filter(|x| *x >= lo && *x <= hi).collect();
    Some(BoxStats {
        n: v.len(),
        q1,
        median,
        q3,
        whisker_low: inside.first().copied().unwrap_or(q1),
        whisker_high: inside.last().copied().unwrap_or(q3),
        outliers: v.iter().copied().filter(|x| *x < lo || *x > hi).collect(),
    })
}

/// What the totals are.
#[derive(Debug, Clone, PartialEq)]
pub enum TotalsMeasure {
    /// Organisms counted per sample.
    Counts,
    /// Organisms per unit of sampling effort (the caller divided by effort).
    PerEffort {
        /// Effort unit, e.g. `trap-night`.
        unit: String,
    },
}

/// One group of sample totals.
#[derive(Debug, Clone, PartialEq)]
pub struct TotalsGroup {
    /// Group name.
    pub name: String,
    /// Sample totals (≥ 0).
    pub values: Vec<f64>,
}

/// Input of [`totals_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct TotalsPlot {
    /// Plot title.
    pub title: String,
    /// The selection the plot came from, in plain words.
    pub subtitle: String,
    /// Raw counts or counts per unit effort.
    pub measure: TotalsMeasure,
    /// Groups, left to right.
    pub groups: Vec<TotalsGroup>,
}

/// Box plots of sample totals per group on a logarithmic axis: median,
/// quartiles, whiskers at 1.5 IQR, points beyond. Statistics use every value;
/// zero totals, which a log axis cannot show, are drawn on the bottom edge and
/// counted in a footnote.
///
/// # Errors
/// [`SvgError::Empty`] without any value or when every value is zero,
/// [`SvgError::NonFinite`] for a NaN, infinite or negative value,
/// [`SvgError::Draw`] if plotters fails.
pub fn totals_svg(plot: &TotalsPlot) -> Result<String, SvgError> {
    let all: Vec<f64> = plot
        .groups
        .iter()
        .flat_map(|g| g.values.iter().copied())
        .collect();
    if all.is_empty() {
        return Err(SvgError::Empty("no totals"));
    }
    if all.iter().any(|v| !v.is_finite() || *v < 0.0) {
        return Err(SvgError::NonFinite("totals (or negative)"));
    }
    let lo = all
        .iter()
        .copied()
        .filter(|v| *v > 0.0)
        .fold(f64::INFINITY, f64::min);
    if !lo.is_finite() {
        return Err(SvgError::Empty("every total is zero"));
    }
    let hi = all.iter().copied().fold(0.0_f64, f64::max);
    let (floor, ceil) = (lo / 1.6, hi * 1.6);
    let shown = |v: f64| v.max(floor);
    let zeros = all.iter().filter(|v| **v == 0.0).count();
    let y_desc = match &plot.measure {
        TotalsMeasure::Counts => "Organisms per sample (log scale)".to_string(),
        TotalsMeasure::PerEffort { unit } => format!("Organisms per {unit} (log scale)"),
    };
    let n = plot.groups.len();
    let mut notes = vec![
        "Boxes: quartiles and median; whiskers reach the furthest values within 1.5 box lengths; dots lie beyond."
            .to_string(),
    ];
    if zeros > 0 {
        notes.push(format!(
            "{} with no organisms {} drawn on the bottom edge.",
            crate::words::count(zeros, "sample", "samples"),
            crate::words::noun(&zeros, "is", "are")
        ));
    }
    let mut out = String::new();
    let mut marks = Markers::default();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, HEIGHT)).into_drawing_area();
        let body = header(&root, &plot.title, &plot.subtitle)?;
        let (main, foot) = body.split_vertically(HEIGHT - 58 - 20 - 16 * notes.len() as u32);
        let mut chart = ChartBuilder::on(&main)
            .margin(10)
            .x_label_area_size(40)
            .y_label_area_size(64)
            .build_cartesian_2d(-0.5..(n as f64 - 0.5), (floor..ceil).log_scale())
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .disable_x_mesh()
            .x_labels(0)
            .light_line_style(WHITE)
            .bold_line_style(MIST.mix(0.6))
            .y_desc(y_desc)
            .y_labels(6)
            .y_label_formatter(&|v| short_number(*v))
            .axis_desc_style((FONT, 14))
            .label_style((FONT, 12))
            .draw()
            .map_err(draw_err)?;
        for (i, g) in plot.groups.iter().enumerate() {
            let x = i as f64;
            let colour = group_colour(i);
            let label = format!("{} ({})", g.name, g.values.len());
            chart
                .draw_series(std::iter::once(
                    EmptyElement::at((x, floor))
                        + Text::new(
                            label.clone(),
                            (-(label.chars().count() as i32) * 3, 8),
                            (FONT, 13).into_font().color(&INK),
                        ),
                ))
                .map_err(draw_err)?;
            let Some(b) = box_stats(&g.values) else {
                continue;
            };
            marks.open(&root, "box", &g.name)?;
            let line = INK.stroke_width(1);
            let w = 0.28;
            chart
                .draw_series([
                    PathElement::new(vec![(x, shown(b.whisker_low)), (x, shown(b.q1))], line),
                    PathElement::new(vec![(x, shown(b.q3)), (x, shown(b.whisker_high))], line),
                    PathElement::new(
                        vec![
                            (x - w / 2.0, shown(b.whisker_low)),
                            (x + w / 2.0, shown(b.whisker_low)),
                        ],
                        line,
                    ),
                    PathElement::new(
                        vec![
                            (x - w / 2.0, shown(b.whisker_high)),
                            (x + w / 2.0, shown(b.whisker_high)),
                        ],
                        line,
                    ),
                ])
                .map_err(draw_err)?;
            chart
                .draw_series([
                    Rectangle::new(
                        [(x - w, shown(b.q1)), (x + w, shown(b.q3))],
                        colour.mix(0.85).filled(),
                    ),
                    Rectangle::new([(x - w, shown(b.q1)), (x + w, shown(b.q3))], line),
                ])
                .map_err(draw_err)?;
            chart
                .draw_series(std::iter::once(PathElement::new(
                    vec![(x - w, shown(b.median)), (x + w, shown(b.median))],
                    INK.stroke_width(3),
                )))
                .map_err(draw_err)?;
            chart
                .draw_series(
                    b.outliers
                        .iter()
                        .map(|v| Circle::new((x, shown(*v)), 3, INK.stroke_width(1))),
                )
                .map_err(draw_err)?;
            marks.close(&root)?;
        }
        footnotes(&foot, &notes)?;
        root.present().map_err(draw_err)?;
    }
    wrap_markers(out, &marks)
}

/// Axis number without trailing zeros (`100`, `2.5`, `0.03`).
fn short_number(v: f64) -> String {
    let s = if v.abs() >= 10.0 {
        format!("{v:.0}")
    } else {
        format!("{v:.3}")
    };
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

// ------------------------------------------------------------------ trends

/// One period of a trend panel.
#[derive(Debug, Clone, PartialEq)]
pub struct TrendPoint {
    /// Position on the time axis (e.g. the year).
    pub period: f64,
    /// Abundance per unit effort.
    pub abundance: f64,
    /// Lower end of its interval.
    pub lower: f64,
    /// Upper end of its interval.
    pub upper: f64,
    /// Shape distance to the baseline composition, if computed for this period.
    pub shape_distance: Option<f64>,
}

/// Input of [`trend_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct TrendPlot {
    /// Plot title.
    pub title: String,
    /// The selection the plot came from, in plain words.
    pub subtitle: String,
    /// Vertical label of the top panel, e.g. `Organisms per trap-night`.
    pub abundance_label: String,
    /// What the interval is, for the footnote, e.g. `95% bootstrap interval`.
    pub interval_label: String,
    /// Vertical label of the bottom panel, e.g. `Shape distance to baseline (Hellinger)`.
    pub distance_label: String,
    /// Periods in time order.
    pub points: Vec<TrendPoint>,
    /// First and last period of the baseline (shaded).
    pub baseline: (f64, f64),
    /// Breakpoint positions on the time axis (vertical lines).
    pub breakpoints: Vec<f64>,
}

/// Two stacked panels sharing the time axis: abundance per unit effort with
/// its interval (top) and shape distance to the baseline (bottom); the
/// baseline period shaded, breakpoints as vertical dashed lines.
///
/// # Errors
/// [`SvgError::Empty`] without points, [`SvgError::NonFinite`] for a NaN or
/// infinite value, [`SvgError::Draw`] if plotters fails.
pub fn trend_svg(plot: &TrendPlot) -> Result<String, SvgError> {
    if plot.points.is_empty() {
        return Err(SvgError::Empty("trend has no periods"));
    }
    check_finite(
        plot.points
            .iter()
            .flat_map(|p| {
                [
                    p.period,
                    p.abundance,
                    p.lower,
                    p.upper,
                    p.shape_distance.unwrap_or(0.0),
                ]
            })
            .chain([plot.baseline.0, plot.baseline.1])
            .chain(plot.breakpoints.iter().copied()),
        "trend values",
    )?;
    let periods = plot.points.iter().map(|p| p.period);
    let (t0, t1) = padded(
        periods
            .clone()
            .fold(f64::INFINITY, f64::min)
            .min(plot.baseline.0),
        periods
            .fold(f64::NEG_INFINITY, f64::max)
            .max(plot.baseline.1),
        0.04,
    );
    let amax = plot
        .points
        .iter()
        .map(|p| p.upper.max(p.abundance))
        .fold(0.0_f64, f64::max);
    let amin = plot
        .points
        .iter()
        .map(|p| p.lower.min(p.abundance))
        .fold(0.0_f64, f64::min);
    let dmax = plot
        .points
        .iter()
        .filter_map(|p| p.shape_distance)
        .fold(0.0_f64, f64::max);
    let (a0, a1) = (amin, if amax > amin { amax * 1.08 } else { amin + 1.0 });
    let d1 = if dmax > 0.0 { dmax * 1.1 } else { 1.0 };
    let notes = vec![format!(
        "Shaded: baseline period. Dashed lines: breakpoints. Bars: {}.",
        plot.interval_label
    )];
    let mut out = String::new();
    let mut marks = Markers::default();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, HEIGHT + 120)).into_drawing_area();
        let body = header(&root, &plot.title, &plot.subtitle)?;
        let (main, foot) = body.split_vertically(HEIGHT + 120 - 58 - 36);
        let (top, bottom) = main.split_vertically((HEIGHT + 120 - 58 - 36) / 2);
        let panels: [(&DrawingArea<_, _>, f64, f64, &str); 2] = [
            (&top, a0, a1, plot.abundance_label.as_str()),
            (&bottom, 0.0, d1, plot.distance_label.as_str()),
        ];
        for (k, (area, lo, hi, label)) in panels.into_iter().enumerate() {
            let mut chart = ChartBuilder::on(area)
                .margin(10)
                .x_label_area_size(34)
                .y_label_area_size(64)
                .build_cartesian_2d(t0..t1, lo..hi)
                .map_err(draw_err)?;
            chart
                .configure_mesh()
                .light_line_style(WHITE)
                .bold_line_style(MIST.mix(0.6))
                .x_label_formatter(&|v| format!("{v:.0}"))
                .y_desc(label)
                .x_desc(if k == 1 { "Period" } else { "" })
                .axis_desc_style((FONT, 14))
                .label_style((FONT, 12))
                .draw()
                .map_err(draw_err)?;
            marks.open(&root, "baseline", "baseline")?;
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(plot.baseline.0 - 0.5, lo), (plot.baseline.1 + 0.5, hi)],
                    MIST.mix(0.6).filled(),
                )))
                .map_err(draw_err)?;
            marks.close(&root)?;
            for b in &plot.breakpoints {
                marks.open(&root, "breakpoint", &format!("{b}"))?;
                chart
                    .draw_series(DashedLineSeries::new(
                        vec![(*b, lo), (*b, hi)],
                        6,
                        4,
                        PALETTE[3].stroke_width(2),
                    ))
                    .map_err(draw_err)?;
                marks.close(&root)?;
            }
            let colour = if k == 0 { PALETTE[0] } else { PALETTE[4] };
            let series: Vec<(f64, f64)> = if k == 0 {
                plot.points
                    .iter()
                    .map(|p| (p.period, p.abundance))
                    .collect()
            } else {
                plot.points
                    .iter()
                    .filter_map(|p| p.shape_distance.map(|d| (p.period, d)))
                    .collect()
            };
            if k == 0 {
                chart
                    .draw_series(plot.points.iter().map(|p| {
                        PathElement::new(
                            vec![(p.period, p.lower), (p.period, p.upper)],
                            INK.stroke_width(1),
                        )
                    }))
                    .map_err(draw_err)?;
            }
            chart
                .draw_series(LineSeries::new(series.clone(), colour.stroke_width(2)))
                .map_err(draw_err)?;
            for (x, y) in series {
                let px = chart.backend_coord(&(x, y));
                marker_at(&root, px, if k == 0 { 0 } else { 2 }, colour)?;
            }
        }
        footnotes(&foot, &notes)?;
        root.present().map_err(draw_err)?;
    }
    wrap_markers(out, &marks)
}

// ------------------------------------------------------------------ taxa

/// One bar of [`taxa_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct TaxonBar {
    /// Taxon name.
    pub taxon: String,
    /// Share of the composition shift, 0–1.
    pub contribution: f64,
    /// True when the taxon's share of the total rose.
    pub gained: bool,
    /// True when its own change is clear (adjusted p at most alpha).
    pub clear: bool,
}

/// Input of [`taxa_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct TaxaPlot {
    /// Plot title.
    pub title: String,
    /// The contrast, in words.
    pub subtitle: String,
    /// Bars, largest first.
    pub bars: Vec<TaxonBar>,
}

/// A diverging bar chart of the taxa behind a composition shift: each taxon's
/// share of the shift, to the right when its share of the total rose and to the
/// left when it fell; full colour when its own change is clear, pale otherwise.
///
/// # Errors
/// [`SvgError::Empty`] without bars, [`SvgError::NonFinite`], [`SvgError::Draw`].
pub fn taxa_svg(plot: &TaxaPlot) -> Result<String, SvgError> {
    if plot.bars.is_empty() {
        return Err(SvgError::Empty("no taxa"));
    }
    check_finite(
        plot.bars.iter().map(|b| b.contribution),
        "taxon contributions",
    )?;
    let k = plot.bars.len();
    let height = 58 + 40 + 26 * k as u32 + 60;
    let top = plot
        .bars
        .iter()
        .map(|b| b.contribution)
        .fold(0.0_f64, f64::max)
        .max(1e-9)
        * 100.0
        * 1.1;
    let mut out = String::new();
    let mut marks = Markers::default();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, height)).into_drawing_area();
        let body = header(&root, &plot.title, &plot.subtitle)?;
        let (main, foot) = body.split_vertically(height - 58 - 40);
        let mut chart = ChartBuilder::on(&main)
            .margin(10)
            .x_label_area_size(34)
            .y_label_area_size(150)
            .build_cartesian_2d(-top..top, 0.0..k as f64)
            .map_err(draw_err)?;
        chart
            .configure_mesh()
            .light_line_style(WHITE)
            .bold_line_style(MIST.mix(0.6))
            .y_labels(0)
            .x_label_formatter(&|v| format!("{:.0} %", v.abs()))
            .x_desc("Share of the composition shift (left: share fell, right: share rose)")
            .axis_desc_style((FONT, 14))
            .label_style((FONT, 12))
            .draw()
            .map_err(draw_err)?;
        for (i, b) in plot.bars.iter().enumerate() {
            let y = (k - 1 - i) as f64;
            let x = 100.0 * b.contribution * if b.gained { 1.0 } else { -1.0 };
            let colour = if b.gained { PALETTE[4] } else { PALETTE[0] };
            let style = if b.clear {
                colour.filled()
            } else {
                colour.mix(0.35).filled()
            };
            marks.open(
                &root,
                if b.clear { "taxon clear" } else { "taxon" },
                &b.taxon,
            )?;
            chart
                .draw_series(std::iter::once(Rectangle::new(
                    [(0.0, y + 0.15), (x, y + 0.85)],
                    style,
                )))
                .map_err(draw_err)?;
            marks.close(&root)?;
            let at = chart.backend_coord(&(-top, y + 0.5));
            root.draw(&Text::new(
                b.taxon.clone(),
                (at.0 - 144, at.1 - 7),
                (FONT, 12).into_font().color(&INK),
            ))
            .map_err(draw_err)?;
        }
        chart
            .draw_series(std::iter::once(PathElement::new(
                vec![(0.0, 0.0), (0.0, k as f64)],
                INK.stroke_width(1),
            )))
            .map_err(draw_err)?;
        footnotes(
            &foot,
            &["Full colour: the taxon's own change is clear (Benjamini–Hochberg adjusted p at most alpha); pale: it is not.".to_string()],
        )?;
        root.present().map_err(draw_err)?;
    }
    wrap_markers(out, &marks)
}

// ------------------------------------------------------------------ taxon trends

/// One panel of [`TaxonTrendsPlot`].
#[derive(Debug, Clone, PartialEq)]
pub struct TaxonPanel {
    /// Taxon name.
    pub taxon: String,
    /// The panel's caption under the name (slope and p, in words).
    pub caption: String,
    /// `(year, pooled rate)` of every year.
    pub rates: Vec<(f64, f64)>,
    /// The fitted change per year on the log scale, when estimated: drawn as a
    /// line through the geometric centre of the non-zero yearly rates.
    pub slope_log: Option<f64>,
    /// True when its own trend is clear (adjusted p at most alpha).
    pub clear: bool,
}

/// Input of [`taxon_trends_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct TaxonTrendsPlot {
    /// Plot title.
    pub title: String,
    /// The selection, in words.
    pub subtitle: String,
    /// What the rates are (the y axis label), e.g. "organisms per trap-night".
    pub rate_label: String,
    /// Panels, in reading order.
    pub panels: Vec<TaxonPanel>,
}

/// Small multiples of the yearly rates of several taxa, three panels to a row,
/// each on its own vertical scale from 0, with the taxon's fitted log-linear
/// trend as a line (solid when the trend is clear, dashed otherwise).
///
/// # Errors
/// [`SvgError::Empty`] without panels, [`SvgError::NonFinite`], [`SvgError::Draw`].
pub fn taxon_trends_svg(plot: &TaxonTrendsPlot) -> Result<String, SvgError> {
    if plot.panels.is_empty() {
        return Err(SvgError::Empty("no taxa"));
    }
    check_finite(
        plot.panels
            .iter()
            .flat_map(|p| p.rates.iter().flat_map(|r| [r.0, r.1])),
        "yearly rates",
    )?;
    const COLS: usize = 3;
    const PANEL_H: u32 = 200;
    let rows = plot.panels.len().div_ceil(COLS);
    let height = 58 + PANEL_H * rows as u32 + 40;
    let mut out = String::new();
    let mut marks = Markers::default();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, height)).into_drawing_area();
        let body = header(&root, &plot.title, &plot.subtitle)?;
        let (main, foot) = body.split_vertically(PANEL_H * rows as u32);
        let cells = main.split_evenly((rows, COLS));
        for (p, cell) in plot.panels.iter().zip(cells.iter()) {
            let (t0, t1) = p
                .rates
                .iter()
                .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), r| {
                    (a.min(r.0), b.max(r.0))
                });
            let (t0, t1) = padded(t0, t1, 0.06);
            let top = p
                .rates
                .iter()
                .map(|r| r.1)
                .fold(0.0_f64, f64::max)
                .max(1e-9)
                * 1.15;
            let (title_area, chart_area) = cell.split_vertically(34);
            title_area
                .draw(&Text::new(
                    p.taxon.clone(),
                    (52, 2),
                    (FONT, 13).into_font().color(&INK),
                ))
                .map_err(draw_err)?;
            title_area
                .draw(&Text::new(
                    p.caption.clone(),
                    (52, 18),
                    (FONT, 11).into_font().color(&INK),
                ))
                .map_err(draw_err)?;
            let mut chart = ChartBuilder::on(&chart_area)
                .margin(6)
                .x_label_area_size(22)
                .y_label_area_size(44)
                .build_cartesian_2d(t0..t1, 0.0..top)
                .map_err(draw_err)?;
            chart
                .configure_mesh()
                .light_line_style(WHITE)
                .bold_line_style(MIST.mix(0.6))
                .x_labels(4)
                .y_labels(4)
                .x_label_formatter(&|v| format!("{v:.0}"))
                .y_label_formatter(&|v| short_number(*v))
                .label_style((FONT, 10))
                .draw()
                .map_err(draw_err)?;
            marks.open(
                &root,
                if p.clear { "taxon clear" } else { "taxon" },
                &p.taxon,
            )?;
            let colour = PALETTE[0];
            chart
                .draw_series(LineSeries::new(
                    p.rates.iter().copied(),
                    colour.mix(0.5).stroke_width(1),
                ))
                .map_err(draw_err)?;
            chart
                .draw_series(p.rates.iter().map(|&r| Circle::new(r, 3, colour.filled())))
                .map_err(draw_err)?;
            let positive: Vec<(f64, f64)> = p.rates.iter().copied().filter(|r| r.1 > 0.0).collect();
            if let (Some(b), false) = (p.slope_log, positive.is_empty()) {
                let k = positive.len() as f64;
                let tm = positive.iter().map(|r| r.0).sum::<f64>() / k;
                let lm = positive.iter().map(|r| r.1.ln()).sum::<f64>() / k;
                let line: Vec<(f64, f64)> = (0..=40)
                    .map(|s| {
                        let t = t0 + (t1 - t0) * f64::from(s) / 40.0;
                        (t, (lm + b * (t - tm)).exp().min(top))
                    })
                    .collect();
                let style = PALETTE[3].stroke_width(2);
                if p.clear {
                    chart
                        .draw_series(LineSeries::new(line, style))
                        .map_err(draw_err)?;
                } else {
                    chart
                        .draw_series(DashedLineSeries::new(line, 5, 4, style))
                        .map_err(draw_err)?;
                }
            }
            marks.close(&root)?;
        }
        footnotes(
            &foot,
            &[
                format!("Points: {} in each year, pooled over the year's rows; each panel has its own scale.", plot.rate_label),
                "Line: the taxon's fitted log-linear trend, solid when its own trend is clear (Benjamini–Hochberg adjusted p at most alpha), dashed when not.".to_string(),
            ],
        )?;
        root.present().map_err(draw_err)?;
    }
    wrap_markers(out, &marks)
}

// ------------------------------------------------------------------ diversity

/// One rarefaction and extrapolation curve of [`DiversityPlot`].
#[derive(Debug, Clone, PartialEq)]
pub struct DiversityCurve {
    /// Period, group or row.
    pub label: String,
    /// `(individuals, richness, coverage, extrapolated)`, by increasing size.
    pub points: Vec<(f64, f64, f64, bool)>,
    /// The observed sample: `(individuals, richness, coverage)`.
    pub observed: (f64, f64, f64),
}

/// One period of the bottom panel of [`DiversityPlot`]: mean and interval of
/// raw richness and of richness at the common coverage.
#[derive(Debug, Clone, PartialEq)]
pub struct DiversityPeriod {
    /// Position on the time axis.
    pub period: f64,
    /// Mean raw richness per row and its interval.
    pub raw: (f64, f64, f64),
    /// Mean richness at the common coverage and its interval.
    pub at_coverage: Option<(f64, f64, f64)>,
}

/// Input of [`diversity_svg`].
#[derive(Debug, Clone, PartialEq)]
pub struct DiversityPlot {
    /// Plot title.
    pub title: String,
    /// The selection, in words.
    pub subtitle: String,
    /// Curves, one per period, group or row.
    pub curves: Vec<DiversityCurve>,
    /// The common coverage (a vertical line in the coverage panel).
    pub level: Option<f64>,
    /// Periods of the time panel (empty: no time panel).
    pub periods: Vec<DiversityPeriod>,
}

/// Richness against individuals (left) and against sample coverage (right),
/// rarefaction solid and extrapolation dashed, the observed sample marked; with
/// periods, a bottom panel of mean richness per row through time, raw and at
/// the common coverage, with their intervals.
///
/// # Errors
/// [`SvgError::Empty`] without curves, [`SvgError::NonFinite`],
/// [`SvgError::Draw`].
pub fn diversity_svg(plot: &DiversityPlot) -> Result<String, SvgError> {
    if plot.curves.iter().all(|c| c.points.is_empty()) {
        return Err(SvgError::Empty(
            "no curve: every row holds fewer than two individuals",
        ));
    }
    check_finite(
        plot.curves
            .iter()
            .flat_map(|c| c.points.iter().flat_map(|p| [p.0, p.1, p.2]))
            .chain(plot.periods.iter().flat_map(|p| {
                let c = p.at_coverage.unwrap_or(p.raw);
                [p.period, p.raw.0, p.raw.1, p.raw.2, c.0, c.1, c.2]
            })),
        "diversity values",
    )?;
    let xmax = plot
        .curves
        .iter()
        .flat_map(|c| c.points.iter().map(|p| p.0))
        .fold(1.0_f64, f64::max);
    let ymax = plot
        .curves
        .iter()
        .flat_map(|c| c.points.iter().map(|p| p.1))
        .fold(1.0_f64, f64::max)
        * 1.08;
    let cmin = plot
        .curves
        .iter()
        .flat_map(|c| c.points.iter().map(|p| p.2))
        .fold(1.0_f64, f64::min)
        .min(plot.level.unwrap_or(1.0));
    let c0 = (cmin - 0.05).max(0.0);
    let with_time = !plot.periods.is_empty();
    let height = if with_time { HEIGHT + 260 } else { HEIGHT };
    let mut out = String::new();
    let mut marks = Markers::default();
    {
        let root = SVGBackend::with_string(&mut out, (WIDTH, height)).into_drawing_area();
        let body = header(&root, &plot.title, &plot.subtitle)?;
        let body_h = height - 58 - 36;
        let (main, foot) = body.split_vertically(body_h);
        let (curves_area, time_area) = if with_time {
            let (a, b) = main.split_vertically(body_h - 250);
            (a, Some(b))
        } else {
            (main, None)
        };
        let (curves_area, legend_area) = curves_area.split_vertically(
            curves_area.dim_in_pixel().1 - 20 * plot.curves.len().div_ceil(4).min(4) as u32 - 6,
        );
        let (left, right) = curves_area.split_horizontally(WIDTH / 2);
        for (k, area) in [left, right].iter().enumerate() {
            let (x0, x1, desc) = if k == 0 {
                (0.0, xmax * 1.02, "Individuals")
            } else {
                (c0, 1.0, "Sample coverage")
            };
            let mut chart = ChartBuilder::on(area)
                .margin(10)
                .x_label_area_size(34)
                .y_label_area_size(50)
                .build_cartesian_2d(x0..x1, 0.0..ymax)
                .map_err(draw_err)?;
            chart
                .configure_mesh()
                .light_line_style(WHITE)
                .bold_line_style(MIST.mix(0.6))
                .x_label_formatter(&|v| {
                    if k == 1 {
                        format!("{:.0} %", v * 100.0)
                    } else {
                        short_number(*v)
                    }
                })
                .y_desc("Taxa")
                .x_desc(desc)
                .axis_desc_style((FONT, 14))
                .label_style((FONT, 12))
                .draw()
                .map_err(draw_err)?;
            if k == 1
                && let Some(level) = plot.level
            {
                marks.open(&root, "coverage-level", &format!("{level}"))?;
                chart
                    .draw_series(DashedLineSeries::new(
                        vec![(level, 0.0), (level, ymax)],
                        4,
                        4,
                        INK.stroke_width(1),
                    ))
                    .map_err(draw_err)?;
                marks.close(&root)?;
            }
            for (i, c) in plot.curves.iter().enumerate() {
                let colour = group_colour(i);
                let x = |p: &(f64, f64, f64, bool)| if k == 0 { p.0 } else { p.2 };
                let inner: Vec<(f64, f64)> = c
                    .points
                    .iter()
                    .filter(|p| !p.3)
                    .map(|p| (x(p), p.1))
                    .collect();
                let outer: Vec<(f64, f64)> = c
                    .points
                    .iter()
                    .filter(|p| p.3)
                    .map(|p| (x(p), p.1))
                    .collect();
                let obs = if k == 0 {
                    (c.observed.0, c.observed.1)
                } else {
                    (c.observed.2, c.observed.1)
                };
                marks.open(&root, "curve", &c.label)?;
                chart
                    .draw_series(LineSeries::new(inner, colour.stroke_width(2)))
                    .map_err(draw_err)?;
                let mut ext = vec![obs];
                ext.extend(outer);
                chart
                    .draw_series(DashedLineSeries::new(ext, 5, 4, colour.stroke_width(2)))
                    .map_err(draw_err)?;
                let px = chart.backend_coord(&obs);
                marker_at(&root, px, i, colour)?;
                marks.close(&root)?;
            }
        }
        let entries: Vec<LegendEntry> = plot
            .curves
            .iter()
            .enumerate()
            .take(16)
            .map(|(i, c)| LegendEntry {
                label: c.label.clone(),
                colour: group_colour(i),
                marker: Some(i),
            })
            .collect();
        for (row, chunk) in entries.chunks(4).enumerate() {
            for (col, e) in chunk.iter().enumerate() {
                legend(
                    &legend_area,
                    (60 + 170 * col as i32, 20 * row as i32),
                    std::slice::from_ref(e),
                )?;
            }
        }
        if plot.curves.len() > entries.len() {
            legend_area
                .draw(&Text::new(
                    format!(
                        "and {} more (colours repeat)",
                        plot.curves.len() - entries.len()
                    ),
                    (60 + 170 * 3, 20 * 3 + 20),
                    (FONT, 12).into_font().color(&INK),
                ))
                .map_err(draw_err)?;
        }
        if let Some(area) = time_area {
            let t0 = plot
                .periods
                .iter()
                .map(|p| p.period)
                .fold(f64::INFINITY, f64::min);
            let t1 = plot
                .periods
                .iter()
                .map(|p| p.period)
                .fold(f64::NEG_INFINITY, f64::max);
            let (t0, t1) = padded(t0, t1, 0.04);
            let top = plot
                .periods
                .iter()
                .flat_map(|p| [p.raw.2, p.at_coverage.map_or(0.0, |c| c.2)])
                .fold(1.0_f64, f64::max)
                * 1.08;
            let mut chart = ChartBuilder::on(&area)
                .margin(10)
                .x_label_area_size(34)
                .y_label_area_size(50)
                .build_cartesian_2d(t0..t1, 0.0..top)
                .map_err(draw_err)?;
            chart
                .configure_mesh()
                .light_line_style(WHITE)
                .bold_line_style(MIST.mix(0.6))
                .x_label_formatter(&|v| format!("{v:.0}"))
                .y_desc("Mean taxa per row")
                .x_desc("Period")
                .axis_desc_style((FONT, 14))
                .label_style((FONT, 12))
                .draw()
                .map_err(draw_err)?;
            // (class, palette index, (period, mean, low, high))
            type Series<'a> = (&'a str, usize, Vec<(f64, f64, f64, f64)>);
            let series: [Series; 2] = [
                (
                    "raw",
                    0,
                    plot.periods
                        .iter()
                        .map(|p| (p.period, p.raw.0, p.raw.1, p.raw.2))
                        .collect(),
                ),
                (
                    "at-coverage",
                    4,
                    plot.periods
                        .iter()
                        .filter_map(|p| p.at_coverage.map(|c| (p.period, c.0, c.1, c.2)))
                        .collect(),
                ),
            ];
            for (class, colour_at, pts) in series {
                let colour = PALETTE[colour_at];
                let shift = if colour_at == 0 { -0.08 } else { 0.08 };
                marks.open(&root, "diversity-time", class)?;
                chart
                    .draw_series(pts.iter().map(|p| {
                        PathElement::new(
                            vec![(p.0 + shift, p.2), (p.0 + shift, p.3)],
                            colour.stroke_width(1),
                        )
                    }))
                    .map_err(draw_err)?;
                chart
                    .draw_series(LineSeries::new(
                        pts.iter().map(|p| (p.0 + shift, p.1)),
                        colour.stroke_width(2),
                    ))
                    .map_err(draw_err)?;
                for p in &pts {
                    let px = chart.backend_coord(&(p.0 + shift, p.1));
                    marker_at(&root, px, if colour_at == 0 { 0 } else { 2 }, colour)?;
                }
                marks.close(&root)?;
            }
        }
        let mut notes = vec![
            "Solid: rarefaction (fewer individuals than caught). Dashed: extrapolation, up to twice the individuals. Marker: the sample as caught.".to_string(),
        ];
        if with_time {
            notes.push(format!(
                "Bottom: mean taxa per row, raw (circles) and at {} coverage (squares), with 95% bootstrap intervals.",
                plot.level.map_or("the common".to_string(), |l| format!("{:.1} %", 100.0 * l))
            ));
        }
        footnotes(&foot, &notes)?;
        root.present().map_err(draw_err)?;
    }
    wrap_markers(out, &marks)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Parse with a real XML parser (roxmltree): the output must be well-formed.
    fn parse(svg: &str) -> roxmltree::Document<'_> {
        roxmltree::Document::parse(svg).expect("SVG output must be well-formed XML")
    }

    fn groups_of<'a>(
        doc: &'a roxmltree::Document<'a>,
        class: &str,
    ) -> Vec<roxmltree::Node<'a, 'a>> {
        doc.descendants()
            .filter(|n| n.has_tag_name("g") && n.attribute("class") == Some(class))
            .collect()
    }

    fn has_text(doc: &roxmltree::Document<'_>, needle: &str) -> bool {
        doc.descendants()
            .filter(|n| n.has_tag_name("text"))
            .any(|n| n.text().is_some_and(|t| t.contains(needle)))
    }

    fn circle(cx: f64, cy: f64, r: f64) -> Vec<[f64; 2]> {
        (0..=24)
            .map(|k| {
                let t = std::f64::consts::TAU * k as f64 / 24.0;
                [cx + r * t.cos(), cy + r * t.sin()]
            })
            .collect()
    }

    fn ordination_input() -> OrdinationPlot {
        OrdinationPlot {
            title: "Correspondence analysis".into(),
            subtitle: "Sites S01-S12, 2015-2020, reach as group".into(),
            x_axis: AxisSpec {
                name: "Axis 1".into(),
                share: Some(0.412),
            },
            y_axis: AxisSpec {
                name: "Axis 2".into(),
                share: Some(0.187),
            },
            share_of: "inertia".into(),
            ellipse_level: 0.95,
            groups: vec![
                ScatterGroup {
                    name: "lower <reach> & co".into(),
                    points: vec![[0.1, 0.2], [0.3, -0.1], [0.2, 0.0]],
                    ellipse: Some(circle(0.2, 0.03, 0.3)),
                },
                ScatterGroup {
                    name: "middle".into(),
                    points: vec![[-0.5, 0.4], [-0.6, 0.5], [-0.4, 0.3], [-0.55, 0.2]],
                    ellipse: Some(circle(-0.5, 0.35, 0.2)),
                },
                ScatterGroup {
                    name: "upper".into(),
                    points: vec![[0.9, -0.8], [1.0, -0.7]],
                    ellipse: None,
                },
            ],
            taxa: vec![
                TaxonMark {
                    name: "Baetis".into(),
                    point: [1.4, -1.2],
                    labelled: true,
                },
                TaxonMark {
                    name: "Leuctra".into(),
                    point: [0.0, 0.1],
                    labelled: false,
                },
                TaxonMark {
                    name: "Far rare".into(),
                    point: [40.0, 30.0],
                    labelled: false,
                },
            ],
            taxa_note: Some("Taxa: standard coordinates.".into()),
        }
    }

    #[test]
    fn ordination_svg_structure() {
        let svg = ordination_svg(&ordination_input()).map_err(|e| e.to_string());
        let svg = svg.unwrap_or_else(|e| panic!("{e}"));
        let doc = parse(&svg);
        let groups = groups_of(&doc, "group");
        assert_eq!(groups.len(), 3);
        assert_eq!(
            groups[0].attribute("data-label"),
            Some("lower <reach> & co")
        );
        // One ellipse path for each group with an ellipse (the first two), none for the third.
        let ellipses = groups_of(&doc, "ellipse");
        assert_eq!(ellipses.len(), 2);
        for e in &ellipses {
            let paths = e
                .descendants()
                .filter(|n| n.has_tag_name("polyline") || n.has_tag_name("path"))
                .count();
            assert_eq!(paths, 1);
        }
        assert!(
            groups[2]
                .descendants()
                .all(|n| n.attribute("class") != Some("ellipse"))
        );
        assert!(has_text(&doc, "Sites S01-S12, 2015-2020, reach as group"));
        assert!(has_text(&doc, "Axis 1 (41.2% of inertia)"));
        assert!(has_text(&doc, "No ellipse (fewer than 3 samples): upper."));
        assert!(!svg.contains("TALLYMARK"));
        // A named taxon widens the range and is labelled; an unnamed one inside
        // the range is a bare mark; one far outside is not drawn.
        let named = groups_of(&doc, "taxon named");
        assert_eq!(named.len(), 1);
        assert_eq!(named[0].attribute("data-label"), Some("Baetis"));
        assert!(has_text(&doc, "Baetis"));
        let bare = groups_of(&doc, "taxon");
        assert_eq!(bare.len(), 1);
        assert_eq!(bare[0].attribute("data-label"), Some("Leuctra"));
        assert!(!has_text(&doc, "Leuctra") && !has_text(&doc, "Far rare"));
        assert!(has_text(&doc, "Taxa: standard coordinates."));
    }

    #[test]
    fn taxa_svg_marks_clear_taxa_and_names_every_bar() {
        let bar = |t: &str, c: f64, gained: bool, clear: bool| TaxonBar {
            taxon: t.into(),
            contribution: c,
            gained,
            clear,
        };
        let plot = TaxaPlot {
            title: "Taxa".into(),
            subtitle: "a <b> & c".into(),
            bars: vec![
                bar("Baetis", 0.4, false, true),
                bar("Naididae", 0.3, true, true),
                bar("Leuctra", 0.1, false, false),
            ],
        };
        let svg = taxa_svg(&plot).unwrap();
        let doc = parse(&svg);
        assert_eq!(groups_of(&doc, "taxon clear").len(), 2);
        assert_eq!(groups_of(&doc, "taxon").len(), 1);
        for t in ["Baetis", "Naididae", "Leuctra", "a <b> & c"] {
            assert!(has_text(&doc, t), "{t}");
        }
        assert!(
            taxa_svg(&TaxaPlot {
                bars: Vec::new(),
                ..plot
            })
            .is_err()
        );
    }

    #[test]
    fn diversity_svg_draws_each_curve_both_ways_and_the_periods() {
        use crate::analysis::diversity::Sample;
        let curve = |label: &str, counts: &[u64]| {
            let s = Sample::from_counts(counts);
            let points: Vec<(f64, f64, f64, bool)> = s
                .curve(8)
                .iter()
                .map(|p| (p.size, p.richness, p.coverage, p.extrapolated))
                .collect();
            DiversityCurve {
                label: label.into(),
                observed: (
                    s.individuals() as f64,
                    s.richness() as f64,
                    s.coverage().unwrap_or(1.0),
                ),
                points,
            }
        };
        let plot = DiversityPlot {
            title: "Richness".into(),
            subtitle: "two <years>".into(),
            curves: vec![
                curve("2016", &[1, 1, 2, 5, 9, 20]),
                curve("2017", &[1, 3, 3, 4]),
            ],
            level: Some(0.8),
            periods: vec![
                DiversityPeriod {
                    period: 2016.0,
                    raw: (5.0, 4.0, 6.0),
                    at_coverage: Some((4.5, 4.0, 5.0)),
                },
                DiversityPeriod {
                    period: 2017.0,
                    raw: (4.0, 3.0, 5.0),
                    at_coverage: None,
                },
            ],
        };
        let svg = diversity_svg(&plot).unwrap();
        let doc = parse(&svg);
        // Each curve in both panels.
        let curves = groups_of(&doc, "curve");
        assert_eq!(curves.len(), 4);
        assert_eq!(curves[0].attribute("data-label"), Some("2016"));
        assert_eq!(groups_of(&doc, "coverage-level").len(), 1);
        assert_eq!(groups_of(&doc, "diversity-time").len(), 2);
        assert!(has_text(&doc, "two <years>"));
        assert!(!svg.contains("TALLYMARK"));
        let empty = DiversityPlot {
            curves: vec![curve("one", &[1])],
            periods: Vec::new(),
            ..plot
        };
        assert!(diversity_svg(&empty).is_err());
    }

    #[test]
    fn partition_svg_marks_clipped_fractions() {
        let plot = PartitionPlot {
            title: "Size and shape".into(),
            subtitle: "All sites, 2010-2020, by reach".into(),
            bars: vec![
                PartitionBar {
                    label: "Bray-Curtis".into(),
                    size_only: 0.131,
                    shared: -0.116,
                    shape_only: 0.885,
                    unexplained: 0.099,
                },
                PartitionBar {
                    label: "Hellinger".into(),
                    size_only: -0.011,
                    shared: -0.053,
                    shape_only: 1.008,
                    unexplained: 0.056,
                },
                PartitionBar {
                    label: "Euclidean".into(),
                    size_only: 0.2,
                    shared: 0.1,
                    shape_only: 0.3,
                    unexplained: 0.4,
                },
            ],
        };
        let svg = partition_svg(&plot).unwrap();
        let doc = parse(&svg);
        let bars = groups_of(&doc, "bar");
        assert_eq!(bars.len(), 3);
        // Only positive segments are drawn: 3, 2 and 4 rectangles.
        let rects: Vec<usize> = bars
            .iter()
            .map(|b| b.descendants().filter(|n| n.has_tag_name("rect")).count())
            .collect();
        assert_eq!(rects, vec![3, 2, 4]);
        // The two bars with a negative fraction carry the asterisk, the third does not.
        let starred: Vec<bool> = bars
            .iter()
            .map(|b| {
                b.descendants()
                    .any(|n| n.has_tag_name("text") && n.text().is_some_and(|t| t.trim() == "*"))
            })
            .collect();
        assert_eq!(starred, vec![true, true, false]);
        assert!(has_text(&doc, "Hellinger: size only -0.011"));
        assert!(has_text(&doc, "All sites, 2010-2020, by reach"));
        assert!(
            partition_svg(&PartitionPlot {
                bars: vec![],
                ..plot.clone()
            })
            .is_err()
        );
    }

    #[test]
    fn box_stats_match_numpy_percentile() {
        let fx: serde_json::Value =
            serde_json::from_str(include_str!("../../tests/reference/ordination.json")).unwrap();
        let b = &fx["box_quartiles"];
        let values: Vec<f64> = serde_json::from_value(b["values"].clone()).unwrap();
        let q: Vec<f64> = serde_json::from_value(b["numpy_percentile_25_50_75"].clone()).unwrap();
        let s = box_stats(&values).unwrap();
        // numpy.percentile(values, [25, 50, 75]) with its default linear method.
        assert!(
            (s.q1 - q[0]).abs() < 1e-9
                && (s.median - q[1]).abs() < 1e-9
                && (s.q3 - q[2]).abs() < 1e-9
        );
        // Tukey's rule: 250 lies beyond q3 + 1.5 IQR, everything else inside.
        let fence = s.q3 + 1.5 * (s.q3 - s.q1);
        assert!(250.0 > fence);
        assert_eq!(s.outliers, vec![250.0]);
        assert_eq!(s.whisker_low, 0.0);
        assert_eq!(s.whisker_high, 40.14);
        assert!(box_stats(&[]).is_none());
    }

    #[test]
    fn totals_svg_structure() {
        let plot = TotalsPlot {
            title: "Totals".into(),
            subtitle: "Reaches L, M, U; 2019".into(),
            measure: TotalsMeasure::PerEffort {
                unit: "trap-night".into(),
            },
            groups: vec![
                TotalsGroup {
                    name: "lower".into(),
                    values: vec![3.0, 5.0, 8.0, 0.0, 4.0, 90.0],
                },
                TotalsGroup {
                    name: "middle".into(),
                    values: vec![30.0, 50.0, 42.0],
                },
                TotalsGroup {
                    name: "upper".into(),
                    values: vec![],
                },
            ],
        };
        let svg = totals_svg(&plot).unwrap();
        let doc = parse(&svg);
        let boxes = groups_of(&doc, "box");
        assert_eq!(boxes.len(), 2);
        assert_eq!(boxes[1].attribute("data-label"), Some("middle"));
        assert!(has_text(&doc, "Organisms per trap-night (log scale)"));
        assert!(has_text(
            &doc,
            "1 sample with no organisms is drawn on the bottom edge."
        ));
        assert!(has_text(&doc, "Reaches L, M, U; 2019"));
        let bad = TotalsPlot {
            groups: vec![TotalsGroup {
                name: "x".into(),
                values: vec![-1.0],
            }],
            ..plot
        };
        assert_eq!(
            totals_svg(&bad).unwrap_err(),
            SvgError::NonFinite("totals (or negative)")
        );
    }

    #[test]
    fn trend_svg_structure() {
        let points = (2010..2020)
            .map(|y| TrendPoint {
                period: y as f64,
                abundance: 10.0 + (y - 2010) as f64,
                lower: 8.0 + (y - 2010) as f64,
                upper: 12.0 + (y - 2010) as f64,
                shape_distance: if y < 2011 {
                    None
                } else {
                    Some(0.05 * (y - 2010) as f64)
                },
            })
            .collect();
        let plot = TrendPlot {
            title: "Middle reach".into(),
            subtitle: "Middle reach sites, spring samples 2010-2019".into(),
            abundance_label: "Organisms per trap-night".into(),
            interval_label: "95% interval".into(),
            distance_label: "Shape distance to baseline".into(),
            points,
            baseline: (2010.0, 2012.0),
            breakpoints: vec![2015.5],
        };
        let svg = trend_svg(&plot).unwrap();
        let doc = parse(&svg);
        // Two panels, each with one baseline band and one breakpoint line.
        assert_eq!(groups_of(&doc, "baseline").len(), 2);
        let bps = groups_of(&doc, "breakpoint");
        assert_eq!(bps.len(), 2);
        assert!(
            bps.iter()
                .all(|g| g.descendants().any(|n| n.has_tag_name("polyline")))
        );
        assert!(has_text(
            &doc,
            "Middle reach sites, spring samples 2010-2019"
        ));
        assert!(has_text(&doc, "Organisms per trap-night"));
    }
}
