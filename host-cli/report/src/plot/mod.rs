//! Plots rendered as standalone SVG documents.
//!
//! [`LinePlot`] draws named series against a shared x axis, with a linear or logarithmic y
//! axis; [`ScatterPlot`] draws a cloud of points, some of them highlighted and optionally
//! joined in x order (a Pareto front, say).
//!
//! Each `to_svg` returns a complete SVG file. It has a `viewBox`, a white background, generic
//! font families only, no scripts, no links and no element ids, so several plots can be
//! inlined in one HTML page and a plot reads the same pasted into any document. The same
//! input always yields the same bytes.
//!
//! The module knows nothing of what is plotted: callers pass names, labels and numbers.
//! Numbers that cannot be drawn (NaN, infinities, and zero or negative values on a
//! logarithmic axis) are left out rather than trusted.

use std::fmt::{self, Write as _};

mod axis;
mod draw;

pub use axis::*;
use draw::*;

/// Width of a plot in SVG user units (pixels at 100 %) when nothing else is asked.
pub const DEFAULT_WIDTH: u32 = 720;
/// Height of a plot in SVG user units when nothing else is asked.
pub const DEFAULT_HEIGHT: u32 = 420;

/// Sizes below these leave no room for the axes; smaller requests are raised to them.
const MIN_WIDTH: u32 = 240;
const MIN_HEIGHT: u32 = 180;

const FONT: f64 = 12.0;
const TITLE_FONT: f64 = 15.0;
const LABEL_FONT: f64 = 11.0;
/// Average advance of a glyph of a sans-serif font, in em; used to estimate text widths.
const CHAR_EM: f64 = 0.62;

/// Line colours, ordered so that neighbours differ in lightness as well as hue, which keeps
/// the first three apart when printed in grey.
const PALETTE: [&str; 6] = [
    "#1f4e9c", "#e69f00", "#1a1a1a", "#009e73", "#cc3311", "#8c6bb1",
];
/// Dash patterns of series asked to be dashed, in order of their rank among dashed series.
const DASHES: [&str; 3] = ["7 4", "2 3", "10 3 2 3"];
/// Patterns given to solid series beyond the third, where lightness alone no longer separates
/// them in grey.
const EXTRA_DASHES: [&str; 3] = ["1 3", "12 3 3 3", "12 3 3 3 3 3"];

const FONT_FAMILY: &str = "DejaVu Sans, Helvetica, Arial, sans-serif";

/// One named curve of a [`LinePlot`].
#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    /// Name shown in the legend.
    pub name: String,
    /// Points `(x, y)`, joined in this order. A point that cannot be drawn (not finite, or
    /// `y <= 0` on a logarithmic axis) is left out and breaks the line there.
    pub points: Vec<(f64, f64)>,
    /// Draw this series with a dashed line.
    pub dashed: bool,
}

impl Series {
    /// A solid series.
    pub fn new(name: impl Into<String>, points: Vec<(f64, f64)>) -> Self {
        Series {
            name: name.into(),
            points,
            dashed: false,
        }
    }

    /// The same series, drawn dashed.
    #[must_use]
    pub fn dashed(mut self) -> Self {
        self.dashed = true;
        self
    }
}

/// Curves against a shared x axis, with a legend.
#[derive(Debug, Clone, PartialEq)]
pub struct LinePlot {
    /// Title above the plot; may be empty.
    pub title: String,
    /// Label of the x axis, with its unit; may be empty.
    pub x_label: String,
    /// Label of the y axis, with its unit; may be empty.
    pub y_label: String,
    /// The curves, drawn in this order and listed in this order in the legend.
    pub series: Vec<Series>,
    /// Logarithmic y axis (decades). Values `<= 0` are then left out.
    pub log_y: bool,
    /// Width in SVG user units; at least 240 is used.
    pub width: u32,
    /// Height in SVG user units; at least 180 is used.
    pub height: u32,
}

impl LinePlot {
    /// An empty plot of the default size with a linear y axis.
    pub fn new(
        title: impl Into<String>,
        x_label: impl Into<String>,
        y_label: impl Into<String>,
    ) -> Self {
        LinePlot {
            title: title.into(),
            x_label: x_label.into(),
            y_label: y_label.into(),
            series: Vec::new(),
            log_y: false,
            width: DEFAULT_WIDTH,
            height: DEFAULT_HEIGHT,
        }
    }

    /// The plot as a standalone SVG document (see the [module docs](self)).
    ///
    /// A series without a single drawable point stays in the legend, marked "no data"; a plot
    /// with no drawable point at all says so in its middle.
    pub fn to_svg(&self) -> String {
        let width = f64::from(self.width.max(MIN_WIDTH));
        let height = f64::from(self.height.max(MIN_HEIGHT));
        let log_y = self.log_y;
        let drawable = |x: f64, y: f64| x.is_finite() && y.is_finite() && (!log_y || y > 0.0);

        let runs: Vec<Vec<Vec<(f64, f64)>>> = self
            .series
            .iter()
            .map(|s| split_runs(&s.points, drawable))
            .collect();
        let all = runs.iter().flatten().flatten().copied();
        let (x_range, y_range) = bounds(all);

        let styles = series_styles(&self.series);
        let entries: Vec<(String, bool)> = self
            .series
            .iter()
            .zip(&runs)
            .map(|(s, r)| (s.name.clone(), r.iter().any(|run| !run.is_empty())))
            .collect();
        let legend_width = if entries.is_empty() {
            0.0
        } else {
            let longest = entries
                .iter()
                .map(|(name, has)| legend_text(name, *has).chars().count())
                .max()
                .unwrap_or(0);
            (longest as f64 * FONT * CHAR_EM + 50.0).clamp(90.0, width * 0.35)
        };

        let frame = Frame::layout(&FrameSpec {
            width,
            height,
            title: &self.title,
            x_label: &self.x_label,
            y_label: &self.y_label,
            x_range,
            y_range,
            log_y,
            right_reserve: legend_width,
            pad: false,
        });

        let mut out = open_svg(width, height, &self.title);
        frame.draw_grid(&mut out);

        out.push_str("<g fill=\"none\" stroke-width=\"2\" stroke-linejoin=\"round\" stroke-linecap=\"round\">\n");
        for (style, series_runs) in styles.iter().zip(&runs) {
            for run in series_runs {
                draw_run(&mut out, &frame, run, style);
            }
        }
        out.push_str("</g>\n");

        frame.draw_axes(&mut out, &self.title, &self.x_label, &self.y_label);
        if !entries.is_empty() {
            draw_legend(&mut out, &frame, &entries, &styles, legend_width);
        }
        if x_range.is_none() {
            frame.draw_no_data(&mut out);
        }
        out.push_str("</svg>\n");
        out
    }
}

/// One point of a [`ScatterPlot`].
#[derive(Debug, Clone, PartialEq)]
pub struct Point {
    /// Horizontal position.
    pub x: f64,
    /// Vertical position.
    pub y: f64,
    /// Text written beside the point when it is highlighted, and shown as its tooltip.
    pub label: Option<String>,
    /// Draw the point larger and darker, and join it to the other highlighted points.
    pub highlight: bool,
}

impl Point {
    /// A plain point without a label.
    pub fn new(x: f64, y: f64) -> Self {
        Point {
            x,
            y,
            label: None,
            highlight: false,
        }
    }

    /// The same point, highlighted and labelled.
    #[must_use]
    pub fn highlighted(mut self, label: impl Into<String>) -> Self {
        self.highlight = true;
        self.label = Some(label.into());
        self
    }
}

/// A point cloud with highlighted points, drawn at the default size.
#[derive(Debug, Clone, PartialEq)]
pub struct ScatterPlot {
    /// Title above the plot; may be empty.
    pub title: String,
    /// Label of the x axis, with its unit; may be empty.
    pub x_label: String,
    /// Label of the y axis, with its unit; may be empty.
    pub y_label: String,
    /// The points. Points with a non-finite coordinate are left out.
    pub points: Vec<Point>,
    /// Join the highlighted points with a line, in increasing x.
    pub connect_highlighted: bool,
}

impl ScatterPlot {
    /// An empty scatter plot that joins its highlighted points.
    pub fn new(
        title: impl Into<String>,
        x_label: impl Into<String>,
        y_label: impl Into<String>,
    ) -> Self {
        ScatterPlot {
            title: title.into(),
            x_label: x_label.into(),
            y_label: y_label.into(),
            points: Vec::new(),
            connect_highlighted: true,
        }
    }

    /// The plot as a standalone SVG document (see the [module docs](self)).
    ///
    /// Plain points are small hollow grey circles; highlighted ones are larger, filled and dark
    /// and carry their label beside them, placed inside the plot area and, where room allows,
    /// clear of other labels and highlighted points. Every point has its label and
    /// coordinates as a tooltip.
    pub fn to_svg(&self) -> String {
        let width = f64::from(DEFAULT_WIDTH);
        let height = f64::from(DEFAULT_HEIGHT);
        let points: Vec<&Point> = self
            .points
            .iter()
            .filter(|p| p.x.is_finite() && p.y.is_finite())
            .collect();
        let (x_range, y_range) = bounds(points.iter().map(|p| (p.x, p.y)));
        let frame = Frame::layout(&FrameSpec {
            width,
            height,
            title: &self.title,
            x_label: &self.x_label,
            y_label: &self.y_label,
            x_range,
            y_range,
            log_y: false,
            right_reserve: 0.0,
            pad: true,
        });

        let mut out = open_svg(width, height, &self.title);
        frame.draw_grid(&mut out);

        out.push_str("<g fill=\"#ffffff\" stroke=\"#8a8a8a\" stroke-width=\"1.5\">\n");
        for p in points.iter().filter(|p| !p.highlight) {
            draw_point(&mut out, &frame, p, PLAIN_RADIUS);
        }
        out.push_str("</g>\n");

        let mut front: Vec<&Point> = points.iter().copied().filter(|p| p.highlight).collect();
        front.sort_by(|a, b| a.x.total_cmp(&b.x).then(a.y.total_cmp(&b.y)));
        if self.connect_highlighted && front.len() >= 2 {
            out.push_str("<polyline fill=\"none\" stroke=\"#1f4e9c\" stroke-width=\"1.75\" stroke-linejoin=\"round\" points=\"");
            for (i, p) in front.iter().enumerate() {
                let sep = if i == 0 { "" } else { " " };
                let _ = write!(out, "{sep}{},{}", N(frame.px(p.x)), N(frame.py(p.y)));
            }
            out.push_str("\"/>\n");
        }
        out.push_str("<g fill=\"#1f4e9c\" stroke=\"#ffffff\" stroke-width=\"1.5\">\n");
        for p in &front {
            draw_point(&mut out, &frame, p, HIGHLIGHT_RADIUS);
        }
        out.push_str("</g>\n");

        let labelled: Vec<(f64, f64, String)> = front
            .iter()
            .filter_map(|p| {
                let text = p.label.as_deref()?.trim();
                (!text.is_empty()).then(|| (frame.px(p.x), frame.py(p.y), text.to_string()))
            })
            .collect();
        let markers: Vec<(f64, f64)> = front
            .iter()
            .map(|p| (frame.px(p.x), frame.py(p.y)))
            .collect();
        let area = Rect {
            x0: frame.left + 2.0,
            y0: frame.top + 2.0,
            x1: frame.right - 2.0,
            y1: frame.bottom - 2.0,
        };
        let placed = place_labels(&labelled, &markers, area);
        if !placed.is_empty() {
            let _ = writeln!(out, "<g font-size=\"{LABEL_FONT}\" fill=\"#1a1a1a\">");
            for label in &placed {
                let _ = writeln!(
                    out,
                    "<text x=\"{}\" y=\"{}\">{}</text>",
                    N(label.x),
                    N(label.baseline),
                    escape_xml(&label.text)
                );
            }
            out.push_str("</g>\n");
        }

        frame.draw_axes(&mut out, &self.title, &self.x_label, &self.y_label);
        if x_range.is_none() {
            frame.draw_no_data(&mut out);
        }
        out.push_str("</svg>\n");
        out
    }
}

/// Escapes text for XML (and HTML) content and attribute values: `&`, `<`, `>`, `"` and `'`
/// become entities, and control characters that XML 1.0 forbids become U+FFFD.
pub fn escape_xml(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\t' | '\n' | '\r' => out.push(c),
            c if (c as u32) < 0x20 || c == '\u{fffe}' || c == '\u{ffff}' => out.push('\u{fffd}'),
            c => out.push(c),
        }
    }
    out
}

/// A small well-formedness check of the markup this crate writes, for tests.
#[cfg(test)]
pub(crate) mod markup_check;

#[cfg(test)]
mod tests;
