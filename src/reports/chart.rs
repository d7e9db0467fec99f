//! SVG charts shared by the HTML pages (risk, calibration and any new
//! page): x-y charts of lines, dots and bars with the legend beside the
//! plotting area, heat maps with values in the cells, and the colour key
//! that goes with them.
//!
//! Design: a page describes a chart as data ([`XyChart`] of [`Layer`]s,
//! [`HeatMap`]) and gets back one self-contained `<svg>` string drawn by
//! `plotters`, with a `viewBox` so that CSS can scale it to the page width.
//! All axis labels go through [`Ticks`] and every number through
//! [`super::format`], so charts read like the tables. Colours are
//! colour-blind safe: lines take the Okabe-Ito set ([`LINE_COLOURS`], the
//! book or total drawn thicker in black), heat maps the ColorBrewer RdBu
//! diverging scale ([`diverging`]: red for losses, blue for gains, near
//! white at zero). A legend never covers data: it sits in its own column to
//! the right of the plotting area.

use super::format::{compact, Ticks};
use super::html::esc;
use plotters::coord::ranged1d::{DefaultFormatting, KeyPointHint, Ranged};
use plotters::prelude::*;
use std::fmt::Write as _;

/// Line and dot colours in order of use: the Okabe-Ito colour-blind-safe
/// set without its yellow (too pale on white) and black (kept for the
/// emphasised total).
pub const LINE_COLOURS: [RGBColor; 6] = [
    RGBColor(0, 114, 178),   // blue
    RGBColor(213, 94, 0),    // vermillion
    RGBColor(0, 158, 115),   // bluish green
    RGBColor(204, 121, 167), // reddish purple
    RGBColor(230, 159, 0),   // orange
    RGBColor(86, 180, 233),  // sky blue
];

/// Colour of an emphasised line (the book, a model curve's total).
pub const EMPHASIS: RGBColor = RGBColor(0, 0, 0);

/// ColorBrewer RdBu, 11 classes, from the largest loss (deep red) through
/// near white to the largest gain (deep blue); ColorBrewer lists it as
/// colour-blind safe.
pub const DIVERGING: [RGBColor; 11] = [
    RGBColor(103, 0, 31),
    RGBColor(178, 24, 43),
    RGBColor(214, 96, 77),
    RGBColor(244, 165, 130),
    RGBColor(253, 219, 199),
    RGBColor(247, 247, 247),
    RGBColor(209, 229, 240),
    RGBColor(146, 197, 222),
    RGBColor(67, 147, 195),
    RGBColor(33, 102, 172),
    RGBColor(5, 48, 97),
];

/// Grey of a cell whose value is not a finite number.
pub const NO_VALUE: RGBColor = RGBColor(190, 190, 190);

/// The diverging colour of `t` in `[-1, 1]` (clamped): linear between the
/// [`DIVERGING`] stops.
pub fn diverging(t: f64) -> RGBColor {
    let t = if t.is_finite() {
        t.clamp(-1.0, 1.0)
    } else {
        0.0
    };
    let pos = (t + 1.0) / 2.0 * (DIVERGING.len() - 1) as f64;
    let i = (pos.floor() as usize).min(DIVERGING.len() - 2);
    let f = pos - i as f64;
    let (a, b) = (DIVERGING[i], DIVERGING[i + 1]);
    let mix = |x: u8, y: u8| (f64::from(x) + (f64::from(y) - f64::from(x)) * f).round() as u8;
    RGBColor(mix(a.0, b.0), mix(a.1, b.1), mix(a.2, b.2))
}

/// Black or white, whichever reads better on `c` (relative luminance).
pub fn text_on(c: RGBColor) -> RGBColor {
    let lin = |x: u8| {
        let x = f64::from(x) / 255.0;
        if x <= 0.03928 {
            x / 12.92
        } else {
            ((x + 0.055) / 1.055).powf(2.4)
        }
    };
    let l = 0.2126 * lin(c.0) + 0.7152 * lin(c.1) + 0.0722 * lin(c.2);
    if l > 0.22 {
        BLACK
    } else {
        WHITE
    }
}

fn hex(c: RGBColor) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

/// What a [`Layer`] draws.
#[derive(Debug, Clone)]
pub enum Marks {
    /// A line through the points in order; a point whose y is not finite
    /// breaks it. The `u32` is the stroke width.
    Line(Vec<(f64, f64)>, u32),
    /// A dot at each point.
    Dots(Vec<(f64, f64)>),
    /// Vertical bars `(x, y_low, y_high)` (bid/ask ranges, error bars).
    Bars(Vec<(f64, f64, f64)>),
}

/// One set of marks in one colour, named in the legend when it has a label.
#[derive(Debug, Clone)]
pub struct Layer {
    /// Legend text (`None`: not in the legend).
    pub label: Option<String>,
    /// Colour.
    pub colour: RGBColor,
    /// The marks.
    pub marks: Marks,
}

impl Layer {
    /// A line of the `i`-th [`LINE_COLOURS`] colour (cycling), or the thick
    /// black [`EMPHASIS`] line when `emphasis`.
    pub fn line(label: &str, i: usize, emphasis: bool, points: Vec<(f64, f64)>) -> Layer {
        let (colour, width) = if emphasis {
            (EMPHASIS, 3)
        } else {
            (LINE_COLOURS[i % LINE_COLOURS.len()], 2)
        };
        Layer {
            label: Some(label.to_string()),
            colour,
            marks: Marks::Line(points, width),
        }
    }

    fn ys(&self) -> Vec<f64> {
        match &self.marks {
            Marks::Line(p, _) | Marks::Dots(p) => p.iter().map(|p| p.1).collect(),
            Marks::Bars(b) => b.iter().flat_map(|b| [b.1, b.2]).collect(),
        }
    }

    fn xs(&self) -> Vec<f64> {
        match &self.marks {
            Marks::Line(p, _) | Marks::Dots(p) => p.iter().map(|p| p.0).collect(),
            Marks::Bars(b) => b.iter().map(|b| b.0).collect(),
        }
    }
}

/// An x-y chart: layers over numeric axes.
#[derive(Debug, Clone)]
pub struct XyChart<'a> {
    /// Caption above the chart.
    pub title: &'a str,
    /// Axis descriptions, with units.
    pub x_desc: &'a str,
    /// See `x_desc`.
    pub y_desc: &'a str,
    /// Width and height in pixels (the page may scale it down).
    pub size: (u32, u32),
    /// The layers, drawn in order.
    pub layers: Vec<Layer>,
    /// A y range symmetric about zero (residuals).
    pub y_symmetric: bool,
}

/// Width of the legend column beside the plotting area.
const LEGEND_WIDTH: u32 = 170;
/// Longest legend text; longer names are cut with an ellipsis (the tables
/// beside the chart carry them in full).
const LEGEND_CHARS: usize = 20;
/// Font of captions, axis descriptions and legends.
const FONT: &str = "sans-serif";

fn extent(xs: impl Iterator<Item = f64>) -> Option<(f64, f64)> {
    let (mut lo, mut hi) = (f64::INFINITY, f64::NEG_INFINITY);
    for x in xs.filter(|x| x.is_finite()) {
        lo = lo.min(x);
        hi = hi.max(x);
    }
    (lo <= hi).then_some((lo, hi))
}

/// Cuts `s` to [`LEGEND_CHARS`] characters with an ellipsis.
fn legend_text(s: &str) -> String {
    if s.chars().count() <= LEGEND_CHARS {
        s.to_string()
    } else {
        let mut t: String = s.chars().take(LEGEND_CHARS - 1).collect();
        t.push('\u{2026}');
        t
    }
}

/// Draws an [`XyChart`] as one `<svg>` string. Axis ranges come from the
/// finite data (padded, ending on a tick); an empty chart gets `[-1, 1]`.
pub fn xy_chart(c: &XyChart) -> String {
    let mut svg = String::new();
    {
        let root = SVGBackend::with_string(&mut svg, c.size).into_drawing_area();
        let _ = root.fill(&WHITE);
        let labelled: Vec<&Layer> = c.layers.iter().filter(|l| l.label.is_some()).collect();
        let (plot, legend) = if labelled.is_empty() {
            root.split_horizontally(c.size.0)
        } else {
            root.split_horizontally(c.size.0.saturating_sub(LEGEND_WIDTH))
        };
        let (x0, x1) = extent(c.layers.iter().flat_map(Layer::xs)).unwrap_or((-1.0, 1.0));
        let xt = Ticks::new(x0, x1, 8);
        let (y0, y1) = extent(c.layers.iter().flat_map(Layer::ys)).unwrap_or((0.0, 0.0));
        let (y0, y1) = if c.y_symmetric {
            let m = y0.abs().max(y1.abs());
            (-m, m)
        } else {
            let pad = (y1 - y0) * 0.06;
            (y0 - pad, y1 + pad)
        };
        let yt = Ticks::new(y0, y1, 6);
        // The x axis spans the data exactly when its ends are ticks, else
        // the ticks around it.
        let (xa, xb) = if x1 > x0 { (x0, x1) } else { xt.range() };
        let xkeys: Vec<f64> = xt
            .values
            .iter()
            .copied()
            .filter(|v| {
                *v >= xa - 1e-12 * xa.abs().max(1.0) && *v <= xb + 1e-12 * xb.abs().max(1.0)
            })
            .collect();
        let (ya, yb) = yt.range();
        let chart = ChartBuilder::on(&plot)
            .caption(c.title, (FONT, 17))
            .margin(12)
            .x_label_area_size(44)
            .y_label_area_size(72)
            .build_cartesian_2d(
                Axis {
                    lo: xa,
                    hi: xb,
                    ticks: xkeys,
                },
                Axis {
                    lo: ya,
                    hi: yb,
                    ticks: yt.values.clone(),
                },
            );
        if let Ok(mut chart) = chart {
            let _ = chart
                .configure_mesh()
                .x_desc(c.x_desc)
                .y_desc(c.y_desc)
                .bold_line_style(RGBColor(225, 225, 225))
                .axis_desc_style((FONT, 14))
                .label_style((FONT, 12))
                .x_label_formatter(&|x| xt.label(*x))
                .y_label_formatter(&|y| yt.label(*y))
                .draw();
            if ya < 0.0 && yb > 0.0 {
                let _ = chart.draw_series(std::iter::once(PathElement::new(
                    vec![(xa, 0.0), (xb, 0.0)],
                    RGBColor(150, 150, 150),
                )));
            }
            for layer in &c.layers {
                draw_layer(&mut chart, layer);
            }
        }
        let mut y = 56;
        for l in labelled {
            let text = legend_text(l.label.as_deref().unwrap_or(""));
            let _ = match &l.marks {
                Marks::Line(_, w) => legend.draw(&PathElement::new(
                    vec![(6, y), (30, y)],
                    ShapeStyle::from(&l.colour).stroke_width(*w),
                )),
                Marks::Dots(_) => legend.draw(&Circle::new((18, y), 4, l.colour.filled())),
                Marks::Bars(_) => legend.draw(&PathElement::new(
                    vec![(18, y - 7), (18, y + 7)],
                    ShapeStyle::from(&l.colour).stroke_width(2),
                )),
            };
            let _ = legend.draw(&Text::new(
                text,
                (36, y - 7),
                (FONT, 13).into_font().color(&BLACK),
            ));
            y += 22;
        }
        let _ = root.present();
    }
    svg
}

/// A linear axis whose labels sit exactly on our own [`Ticks`].
#[derive(Debug, Clone)]
struct Axis {
    lo: f64,
    hi: f64,
    ticks: Vec<f64>,
}

impl Ranged for Axis {
    type FormatOption = DefaultFormatting;
    type ValueType = f64;

    fn map(&self, v: &f64, limit: (i32, i32)) -> i32 {
        let span = self.hi - self.lo;
        let t = if span > 0.0 {
            (v - self.lo) / span
        } else {
            0.5
        };
        limit.0 + (t * f64::from(limit.1 - limit.0)).round() as i32
    }

    fn key_points<Hint: KeyPointHint>(&self, _hint: Hint) -> Vec<f64> {
        self.ticks.clone()
    }

    fn range(&self) -> std::ops::Range<f64> {
        self.lo..self.hi
    }
}

type Xy<'a, 'b> = ChartContext<'a, SVGBackend<'b>, Cartesian2d<Axis, Axis>>;

fn draw_layer(chart: &mut Xy<'_, '_>, l: &Layer) {
    match &l.marks {
        Marks::Line(points, width) => {
            let style = ShapeStyle::from(&l.colour).stroke_width(*width);
            // Runs of finite points, each drawn as its own line.
            let mut run: Vec<(f64, f64)> = Vec::new();
            for &(x, y) in points.iter().chain(std::iter::once(&(f64::NAN, f64::NAN))) {
                if x.is_finite() && y.is_finite() {
                    run.push((x, y));
                } else if !run.is_empty() {
                    let _ = chart.draw_series(LineSeries::new(std::mem::take(&mut run), style));
                }
            }
        }
        Marks::Dots(points) => {
            let pts = points
                .iter()
                .filter(|p| p.0.is_finite() && p.1.is_finite())
                .map(|p| Circle::new(*p, 3, l.colour.filled()));
            let _ = chart.draw_series(pts);
        }
        Marks::Bars(bars) => {
            let style = ShapeStyle::from(&l.colour).stroke_width(1);
            let _ = chart.draw_series(
                bars.iter()
                    .filter(|b| b.0.is_finite() && b.1.is_finite() && b.2.is_finite())
                    .map(|b| PathElement::new(vec![(b.0, b.1), (b.0, b.2)], style)),
            );
        }
    }
}

/// A grid of values drawn as coloured cells with the value written in each.
#[derive(Debug, Clone)]
pub struct HeatMap<'a> {
    /// Caption above the map.
    pub title: &'a str,
    /// Labels of the columns (left to right) and rows (bottom to top).
    pub x_labels: &'a [String],
    /// See `x_labels`.
    pub y_labels: &'a [String],
    /// Axis descriptions, with units.
    pub x_desc: &'a str,
    /// See `x_desc`.
    pub y_desc: &'a str,
    /// `values[i][j]` for column `i`, row `j`; not finite: a grey cell
    /// reading `error`.
    pub values: Vec<Vec<f64>>,
    /// Cells marked with `*` (a footnote on the page says why).
    pub marked: Vec<Vec<bool>>,
    /// The magnitude drawn in the deepest colour (shared by every map of a
    /// page so that colours compare; see [`colour_key`]).
    pub scale: f64,
}

/// Draws a [`HeatMap`] as one `<svg>` string.
pub fn heat_map(h: &HeatMap) -> String {
    let mut svg = String::new();
    let (nx, ny) = (h.x_labels.len(), h.y_labels.len());
    {
        let width = (72 + 46 * nx as u32 + 24).max(420);
        let height = 110 + 24 * ny as u32;
        let root = SVGBackend::with_string(&mut svg, (width, height)).into_drawing_area();
        let _ = root.fill(&WHITE);
        let chart = ChartBuilder::on(&root)
            .caption(h.title, (FONT, 17))
            .margin(12)
            .x_label_area_size(44)
            .y_label_area_size(64)
            .build_cartesian_2d(-0.5..nx as f64 - 0.5, -0.5..ny as f64 - 0.5);
        if let Ok(mut chart) = chart {
            let label = |x: f64, names: &[String]| {
                let i = x.round();
                if (x - i).abs() < 1e-6 && i >= 0.0 && (i as usize) < names.len() {
                    names[i as usize].clone()
                } else {
                    String::new()
                }
            };
            let _ = chart
                .configure_mesh()
                .disable_mesh()
                .x_labels(nx)
                .y_labels(ny)
                .x_label_formatter(&|x| label(*x, h.x_labels))
                .y_label_formatter(&|y| label(*y, h.y_labels))
                .x_desc(h.x_desc)
                .y_desc(h.y_desc)
                .axis_desc_style((FONT, 14))
                .label_style((FONT, 12))
                .draw();
            let colour = |v: f64| {
                if !v.is_finite() {
                    NO_VALUE
                } else if h.scale > 0.0 {
                    diverging(v / h.scale)
                } else {
                    diverging(0.0)
                }
            };
            let cells = (0..nx).flat_map(|i| (0..ny).map(move |j| (i, j)));
            let _ = chart.draw_series(cells.clone().map(|(i, j)| {
                Rectangle::new(
                    [
                        (i as f64 - 0.5, j as f64 - 0.5),
                        (i as f64 + 0.5, j as f64 + 0.5),
                    ],
                    colour(h.values[i][j]).filled(),
                )
            }));
            let _ = chart.draw_series(cells.map(|(i, j)| {
                let v = h.values[i][j];
                let mark = if h.marked[i][j] { "*" } else { "" };
                let style = (FONT, 11).into_font().color(&text_on(colour(v))).pos(
                    plotters::style::text_anchor::Pos::new(
                        plotters::style::text_anchor::HPos::Center,
                        plotters::style::text_anchor::VPos::Center,
                    ),
                );
                Text::new(format!("{}{mark}", compact(v)), (i as f64, j as f64), style)
            }));
        }
        let _ = root.present();
    }
    svg
}

/// Stops of the colour key's gradient.
const KEY_STOPS: usize = 41;

/// The colour key of heat maps drawn with `scale`: a vertical bar from
/// `+scale` (top, deepest blue) to `-scale` (bottom, deepest red) with
/// five labelled values, as a small `<svg class="colour-key">`. `unit`
/// names what the colours measure and `note` says how the scale is shared
/// (one short line each).
pub fn colour_key(scale: f64, unit: &str, note: &str) -> String {
    let (w, h, bar_top, bar_h) = (150u32, 316u32, 60.0, 220.0);
    let mut s = format!(
        "<svg class=\"colour-key\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" \
         xmlns=\"http://www.w3.org/2000/svg\" role=\"img\" aria-label=\"colour key\">\
         <rect x=\"0\" y=\"0\" width=\"{w}\" height=\"{h}\" fill=\"#ffffff\"/>\
         <text x=\"4\" y=\"16\" font-family=\"{FONT}\" font-size=\"13\">Colour key</text>\
         <text x=\"4\" y=\"32\" font-family=\"{FONT}\" font-size=\"12\">{}</text>\
         <text x=\"4\" y=\"47\" font-family=\"{FONT}\" font-size=\"11\" fill=\"#555555\">{}</text>",
        esc(unit),
        esc(note)
    );
    let step = bar_h / KEY_STOPS as f64;
    for k in 0..KEY_STOPS {
        // Top is +1, bottom is -1.
        let t = 1.0 - 2.0 * (k as f64 + 0.5) / KEY_STOPS as f64;
        let _ = write!(
            s,
            "<rect x=\"8\" y=\"{:.2}\" width=\"26\" height=\"{:.2}\" fill=\"{}\"/>",
            bar_top + k as f64 * step,
            step + 0.3,
            hex(diverging(t))
        );
    }
    let _ = write!(
        s,
        "<rect x=\"8\" y=\"{bar_top}\" width=\"26\" height=\"{bar_h}\" fill=\"none\" stroke=\"#888888\"/>"
    );
    for (t, what) in [
        (1.0, " gain"),
        (0.5, ""),
        (0.0, ""),
        (-0.5, ""),
        (-1.0, " loss"),
    ] {
        if scale <= 0.0 && t != 0.0 {
            continue; // every cell is 0: one label
        }
        let y = bar_top + (1.0 - t) / 2.0 * bar_h;
        let v = if scale > 0.0 { t * scale } else { 0.0 };
        let _ = write!(
            s,
            "<line x1=\"34\" x2=\"40\" y1=\"{y:.1}\" y2=\"{y:.1}\" stroke=\"#444444\"/>\
             <text x=\"44\" y=\"{:.1}\" font-family=\"{FONT}\" font-size=\"12\">{}{what}</text>",
            y + 4.0,
            compact(v)
        );
    }
    let _ = write!(
        s,
        "<rect x=\"8\" y=\"{:.1}\" width=\"26\" height=\"12\" fill=\"{}\"/>\
         <text x=\"44\" y=\"{:.1}\" font-family=\"{FONT}\" font-size=\"12\">error</text></svg>",
        bar_top + bar_h + 16.0,
        hex(NO_VALUE),
        bar_top + bar_h + 26.0
    );
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn diverging_scale_ends_and_centre() {
        // The stops themselves (ColorBrewer RdBu, 11 classes).
        assert_eq!(diverging(-1.0), DIVERGING[0]);
        assert_eq!(diverging(0.0), DIVERGING[5]);
        assert_eq!(diverging(1.0), DIVERGING[10]);
        assert_eq!(diverging(-7.0), DIVERGING[0], "clamped");
        // WCAG relative luminance: white text on the deep ends, black near zero.
        assert_eq!(text_on(DIVERGING[0]), WHITE);
        assert_eq!(text_on(DIVERGING[5]), BLACK);
    }

    #[test]
    fn charts_are_well_formed_svg_with_a_legend_outside_the_plot() {
        let svg = xy_chart(&XyChart {
            title: "t",
            x_desc: "x",
            y_desc: "y",
            size: (700, 360),
            layers: vec![
                Layer::line(
                    "A very long underlying name indeed",
                    0,
                    false,
                    vec![(0.0, 1.0), (1.0, 2.0)],
                ),
                Layer::line("book", 0, true, vec![(0.0, 2.0), (1.0, f64::NAN)]),
            ],
            y_symmetric: false,
        });
        assert!(svg.contains("viewBox"));
        assert!(svg.contains("A very long underly\u{2026}"));
        assert!(!svg.contains("NaN"));
        let key = colour_key(2e6, "P&L", "same scale");
        assert!(
            key.contains("2.00M gain") && key.contains("\u{2212}2.00M loss"),
            "{key}"
        );
        assert!(key.contains("P&amp;L"));
    }
}
