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
//! it afterwards ([`wrap_markers`]).
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
        footnotes(&notes, &lines)?;
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
        }
    }

    #[test]
    fn ordination_svg_structure() {
        let svg = ordination_svg(&ordination_input()).map_err(|e| e.to_string());
        let svg = svg.unwrap_or_else(|e| panic!("{e}"));
        std::fs::write("/tmp/ordi_dbg/ord.svg", &svg).ok();
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
    }
}
