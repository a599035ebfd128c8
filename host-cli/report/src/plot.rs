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

/// One axis: its drawn range and its ticks.
#[derive(Debug, Clone, PartialEq)]
pub struct Axis {
    /// Value at the low end of the axis.
    pub lo: f64,
    /// Value at the high end of the axis; always above `lo`.
    pub hi: f64,
    /// Whether the axis is logarithmic.
    pub log: bool,
    /// The ticks, in increasing value, all within `lo..=hi`.
    pub ticks: Vec<Tick>,
}

/// One tick of an [`Axis`].
#[derive(Debug, Clone, PartialEq)]
pub struct Tick {
    /// Where the tick sits.
    pub value: f64,
    /// Its label; `None` for an unlabelled minor tick.
    pub label: Option<String>,
}

impl Axis {
    /// Position of `v` along the axis, 0 at `lo` and 1 at `hi`.
    fn frac(&self, v: f64) -> f64 {
        if self.log {
            (v.log10() - self.lo.log10()) / (self.hi.log10() - self.lo.log10())
        } else {
            (v - self.lo) / (self.hi - self.lo)
        }
    }

    /// The labels, in tick order.
    pub fn labels(&self) -> Vec<&str> {
        self.ticks
            .iter()
            .filter_map(|t| t.label.as_deref())
            .collect()
    }
}

/// A linear axis covering `lo..=hi` with about `target` intervals between ticks.
///
/// The step is 1, 2 or 5 times a power of ten, chosen for an interval count near `target`
/// (clamped to 2..=12) without stretching the axis much; the axis then runs from the last
/// tick at or below `lo` to the first at or above `hi`. Labels share one precision, the one
/// the step needs; very small steps and large values use exponent notation (`2.5e-6`).
/// The bounds may come in either order. A range that is a single value is widened around it;
/// non-finite bounds give `0..=1`.
pub fn linear_ticks(lo: f64, hi: f64, target: usize) -> Axis {
    let (lo, hi) = sane_range(lo, hi);
    let span = hi - lo;
    let target = target.clamp(2, 12) as f64;
    let e0 = (span / target).log10().floor() as i32;
    // (score, mantissa, exponent, first tick index, last tick index)
    let mut best: Option<(f64, i64, i32, i64, i64)> = None;
    for e in (e0 - 1)..=(e0 + 1) {
        for m in [1_i64, 2, 5] {
            let step = m as f64 * 10f64.powi(e);
            let k_lo = (lo / step + 1e-9).floor();
            let k_hi = (hi / step - 1e-9).ceil();
            let n = k_hi - k_lo;
            // Also rejects non-finite indices: their difference is NaN or infinite.
            if !(1.0..=200.0).contains(&n) {
                continue;
            }
            let stretch = n * step / span - 1.0;
            let score = (n - target).abs() + 4.0 * stretch;
            if best.is_none_or(|b| score < b.0) {
                best = Some((score, m, e, k_lo as i64, k_hi as i64));
            }
        }
    }
    let Some((_, m, e, k_lo, k_hi)) = best else {
        // Only reachable for ranges at the edge of f64; two plain ticks still make an axis.
        return Axis {
            lo,
            hi,
            log: false,
            ticks: vec![
                Tick {
                    value: lo,
                    label: Some(format!("{lo:e}")),
                },
                Tick {
                    value: hi,
                    label: Some(format!("{hi:e}")),
                },
            ],
        };
    };
    let value = |k: i64| {
        let units = (k * m) as f64;
        if e >= 0 {
            units * 10f64.powi(e)
        } else {
            units / 10f64.powi(-e)
        }
    };
    let (a_lo, a_hi) = (value(k_lo), value(k_hi));
    let largest = a_lo.abs().max(a_hi.abs());
    let ticks = (k_lo..=k_hi)
        .map(|k| {
            let v = value(k);
            Tick {
                value: v,
                label: Some(linear_label(v, e, largest)),
            }
        })
        .collect();
    Axis {
        lo: a_lo,
        hi: a_hi,
        log: false,
        ticks,
    }
}

/// A logarithmic axis covering `lo..=hi` (both above zero) from decade to decade.
///
/// Major ticks sit on powers of ten, every decade up to 8 decades and every 2nd, 5th or
/// more beyond. Up to 4 decades get unlabelled minor ticks at 2..9 times each power; a
/// single decade also labels 2 and 5. Labels are plain decimals (`0.001`, `100`) while every
/// power lies within 1e-3..=1e4, and exponent notation (`1e-6`) for all otherwise. Bounds
/// that are not finite and positive give `1..=10`.
pub fn log_ticks(lo: f64, hi: f64) -> Axis {
    let usable = |v: f64| v.is_finite() && v > 0.0;
    let (lo, hi) = if usable(lo) && usable(hi) {
        (lo.min(hi), lo.max(hi))
    } else {
        (1.0, 10.0)
    };
    let mut d_lo = ((lo.log10() + 1e-9).floor() as i32).clamp(-300, 300);
    let mut d_hi = ((hi.log10() - 1e-9).ceil() as i32).clamp(-300, 300);
    if d_hi <= d_lo {
        d_lo -= 1;
        d_hi = d_lo + 2;
    }
    let decades = d_hi - d_lo;
    let stride = match decades {
        ..=8 => 1,
        9..=16 => 2,
        17..=40 => 5,
        _ => (decades + 7) / 8,
    };
    d_lo = d_lo.div_euclid(stride) * stride;
    d_hi = -((-d_hi).div_euclid(stride) * stride);
    let exponent_form = d_lo < -3 || d_hi > 4;

    let mut ticks = Vec::new();
    let mut d = d_lo;
    while d <= d_hi {
        ticks.push(Tick {
            value: pow10(1, d),
            label: Some(log_label(1, d, exponent_form)),
        });
        d += stride;
    }
    if stride == 1 && decades <= 4 {
        for d in d_lo..d_hi {
            for m in 2..=9 {
                let label =
                    (decades <= 1 && (m == 2 || m == 5)).then(|| log_label(m, d, exponent_form));
                ticks.push(Tick {
                    value: pow10(m, d),
                    label,
                });
            }
        }
    }
    ticks.sort_by(|a, b| a.value.total_cmp(&b.value));
    Axis {
        lo: pow10(1, d_lo),
        hi: pow10(1, d_hi),
        log: true,
        ticks,
    }
}

/// `m * 10^d`, computed so that negative powers come out as the nearest double.
fn pow10(m: i64, d: i32) -> f64 {
    if d >= 0 {
        m as f64 * 10f64.powi(d)
    } else {
        m as f64 / 10f64.powi(-d)
    }
}

fn log_label(m: i64, d: i32, exponent_form: bool) -> String {
    if exponent_form {
        format!("{m}e{d}")
    } else if d >= 0 {
        format!("{}", m * 10_i64.pow(d.unsigned_abs()))
    } else {
        format!("{:.*}", d.unsigned_abs() as usize, pow10(m, d))
    }
}

/// Label of a linear tick at `v` on an axis of step exponent `e` whose largest magnitude is
/// `largest`.
fn linear_label(v: f64, e: i32, largest: f64) -> String {
    let v = if v == 0.0 { 0.0 } else { v }; // no "-0"
    if e < -4 || largest >= 1e6 {
        if v == 0.0 {
            return "0".to_string();
        }
        let top = largest.log10().floor() as i32;
        let digits = (top - e).clamp(0, 15) as usize;
        format!("{v:.digits$e}")
    } else {
        let decimals = (-e).max(0) as usize;
        format!("{v:.decimals$}")
    }
}

/// Orders the bounds, replaces non-finite ones and widens a single value into a range.
fn sane_range(lo: f64, hi: f64) -> (f64, f64) {
    const LIMIT: f64 = 1e300;
    if !lo.is_finite() || !hi.is_finite() {
        return (0.0, 1.0);
    }
    let (lo, hi) = (lo.min(hi).max(-LIMIT), hi.max(lo).min(LIMIT));
    let scale = lo.abs().max(hi.abs());
    if hi - lo > scale * 1e-9 && hi - lo >= f64::MIN_POSITIVE {
        return (lo, hi);
    }
    let mid = lo / 2.0 + hi / 2.0;
    if mid.abs() < f64::MIN_POSITIVE {
        (-1.0, 1.0)
    } else {
        let pad = mid.abs() * 0.1;
        (mid - pad, mid + pad)
    }
}

/// Coordinates printed with one decimal; `-0.0` prints as `0.0`.
struct N(f64);

impl fmt::Display for N {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let v = if self.0 == 0.0 { 0.0 } else { self.0 };
        write!(f, "{v:.1}")
    }
}

/// Estimated width of `text` at `font` size.
fn text_width(text: &str, font: f64) -> f64 {
    text.chars().count() as f64 * font * CHAR_EM
}

/// `text`, shortened with an ellipsis to fit `max` units at `font` size.
fn fit(text: &str, max: f64, font: f64) -> String {
    if text_width(text, font) <= max {
        return text.to_string();
    }
    let keep = ((max / (font * CHAR_EM)).floor() as usize).saturating_sub(1);
    let mut out: String = text.chars().take(keep).collect();
    out.push('…');
    out
}

/// The runs of consecutive drawable points; a point that is not drawable ends a run.
fn split_runs(points: &[(f64, f64)], drawable: impl Fn(f64, f64) -> bool) -> Vec<Vec<(f64, f64)>> {
    let mut runs = Vec::new();
    let mut run = Vec::new();
    for &(x, y) in points {
        if drawable(x, y) {
            run.push((x, y));
        } else if !run.is_empty() {
            runs.push(std::mem::take(&mut run));
        }
    }
    if !run.is_empty() {
        runs.push(run);
    }
    runs
}

type Range = Option<(f64, f64)>;

/// The x and y ranges of the points, or `None` when there are none.
fn bounds(points: impl Iterator<Item = (f64, f64)>) -> (Range, Range) {
    let mut xr: Range = None;
    let mut yr: Range = None;
    for (x, y) in points {
        xr = Some(xr.map_or((x, x), |(a, b)| (a.min(x), b.max(x))));
        yr = Some(yr.map_or((y, y), |(a, b)| (a.min(y), b.max(y))));
    }
    (xr, yr)
}

#[derive(Debug, Clone, Copy)]
struct Style {
    colour: &'static str,
    dash: Option<&'static str>,
}

fn series_styles(series: &[Series]) -> Vec<Style> {
    let mut dashed_rank = 0;
    let mut solid_rank = 0;
    series
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let dash = if s.dashed {
                dashed_rank += 1;
                Some(DASHES[(dashed_rank - 1) % DASHES.len()])
            } else {
                solid_rank += 1;
                (solid_rank > 3).then(|| EXTRA_DASHES[(solid_rank - 4) % EXTRA_DASHES.len()])
            };
            Style {
                colour: PALETTE[i % PALETTE.len()],
                dash,
            }
        })
        .collect()
}

fn style_attrs(style: &Style) -> String {
    match style.dash {
        Some(d) => format!("stroke=\"{}\" stroke-dasharray=\"{d}\"", style.colour),
        None => format!("stroke=\"{}\"", style.colour),
    }
}

fn legend_text(name: &str, has_data: bool) -> String {
    if has_data {
        name.to_string()
    } else {
        format!("{name} (no data)")
    }
}

fn open_svg(width: f64, height: f64, title: &str) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{w}\" height=\"{h}\" viewBox=\"0 0 {w} {h}\" \
         font-family=\"{FONT_FAMILY}\" font-size=\"{FONT}\" role=\"img\" aria-label=\"{t}\">",
        w = N(width),
        h = N(height),
        t = escape_xml(title),
    );
    let _ = writeln!(out, "<title>{}</title>", escape_xml(title));
    let _ = writeln!(
        out,
        "<rect width=\"{}\" height=\"{}\" fill=\"#ffffff\"/>",
        N(width),
        N(height)
    );
    out
}

fn draw_run(out: &mut String, frame: &Frame, run: &[(f64, f64)], style: &Style) {
    if let [(x, y)] = run {
        let _ = writeln!(
            out,
            "<circle cx=\"{}\" cy=\"{}\" r=\"2.5\" fill=\"{}\" stroke=\"none\"/>",
            N(frame.px(*x)),
            N(frame.py(*y)),
            style.colour
        );
        return;
    }
    let _ = write!(out, "<polyline {} points=\"", style_attrs(style));
    for (i, &(x, y)) in run.iter().enumerate() {
        let sep = if i == 0 { "" } else { " " };
        let _ = write!(out, "{sep}{},{}", N(frame.px(x)), N(frame.py(y)));
    }
    out.push_str("\"/>\n");
}

fn draw_legend(
    out: &mut String,
    frame: &Frame,
    entries: &[(String, bool)],
    styles: &[Style],
    legend_width: f64,
) {
    const ROW: f64 = 20.0;
    let x = frame.right + 16.0;
    let text_room = legend_width - 38.0;
    let rows = (((frame.bottom - frame.top) / ROW).floor() as usize).max(1);
    let shown = if entries.len() > rows {
        rows - 1
    } else {
        entries.len()
    };
    out.push_str("<g fill=\"none\" stroke-width=\"2\" stroke-linecap=\"round\">\n");
    for (i, style) in styles.iter().take(shown).enumerate() {
        let y = frame.top + 8.0 + ROW * i as f64;
        let _ = writeln!(
            out,
            "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\" {}/>",
            N(x),
            N(y),
            N(x + 28.0),
            N(y),
            style_attrs(style)
        );
    }
    out.push_str("</g>\n<g fill=\"#1a1a1a\">\n");
    for (i, (name, has)) in entries.iter().take(shown).enumerate() {
        let y = frame.top + 8.0 + ROW * i as f64;
        let _ = writeln!(
            out,
            "<text x=\"{}\" y=\"{}\">{}</text>",
            N(x + 36.0),
            N(y + 4.0),
            escape_xml(&fit(&legend_text(name, *has), text_room, FONT))
        );
    }
    if shown < entries.len() {
        let y = frame.top + 8.0 + ROW * shown as f64;
        let _ = writeln!(
            out,
            "<text x=\"{}\" y=\"{}\">+{} more</text>",
            N(x),
            N(y + 4.0),
            entries.len() - shown
        );
    }
    out.push_str("</g>\n");
}

const PLAIN_RADIUS: f64 = 3.5;
const HIGHLIGHT_RADIUS: f64 = 5.5;

fn draw_point(out: &mut String, frame: &Frame, p: &Point, radius: f64) {
    let tip = match p.label.as_deref() {
        Some(l) if !l.trim().is_empty() => format!("{} ({}, {})", l.trim(), p.x, p.y),
        _ => format!("({}, {})", p.x, p.y),
    };
    let _ = writeln!(
        out,
        "<circle cx=\"{}\" cy=\"{}\" r=\"{radius}\"><title>{}</title></circle>",
        N(frame.px(p.x)),
        N(frame.py(p.y)),
        escape_xml(&tip)
    );
}

/// A rectangle in SVG coordinates (y grows downwards).
#[derive(Debug, Clone, Copy, PartialEq)]
struct Rect {
    x0: f64,
    y0: f64,
    x1: f64,
    y1: f64,
}

impl Rect {
    fn overlaps(&self, o: &Rect) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }

    fn inside(&self, o: &Rect) -> bool {
        self.x0 >= o.x0 && self.x1 <= o.x1 && self.y0 >= o.y0 && self.y1 <= o.y1
    }
}

/// A label placed by [`place_labels`]: left end of its text and its baseline.
#[derive(Debug, Clone, PartialEq)]
struct Placed {
    x: f64,
    baseline: f64,
    text: String,
    bounds: Rect,
}

/// Places each label `(x, y, text)` beside its point, inside `area`.
///
/// Tries right-above, right-below, left-above, left-below, above and below the point, and
/// takes the first spot that stays inside `area` and covers neither an earlier label nor a
/// marker at one of `markers`. When no spot is free, the first one is pushed inside `area`.
/// Text too long for the area is shortened.
fn place_labels(labels: &[(f64, f64, String)], markers: &[(f64, f64)], area: Rect) -> Vec<Placed> {
    const GAP: f64 = HIGHLIGHT_RADIUS + 3.0;
    let ascent = LABEL_FONT * 0.8;
    let descent = LABEL_FONT * 0.25;
    let obstacles: Vec<Rect> = markers
        .iter()
        .map(|&(x, y)| Rect {
            x0: x - HIGHLIGHT_RADIUS,
            y0: y - HIGHLIGHT_RADIUS,
            x1: x + HIGHLIGHT_RADIUS,
            y1: y + HIGHLIGHT_RADIUS,
        })
        .collect();
    let mut placed: Vec<Placed> = Vec::new();
    for (px, py, text) in labels {
        let text = fit(text, area.x1 - area.x0, LABEL_FONT);
        let w = text_width(&text, LABEL_FONT);
        let above = py - GAP;
        let below = py + GAP + ascent;
        let candidates = [
            (px + GAP, above),
            (px + GAP, below),
            (px - GAP - w, above),
            (px - GAP - w, below),
            (px - w / 2.0, py - GAP - 2.0),
            (px - w / 2.0, py + GAP + 2.0 + ascent),
        ];
        let rect_at = |x: f64, b: f64| Rect {
            x0: x,
            y0: b - ascent,
            x1: x + w,
            y1: b + descent,
        };
        let free = candidates.iter().copied().find(|&(x, b)| {
            let r = rect_at(x, b);
            r.inside(&area)
                && !placed.iter().any(|p| p.bounds.overlaps(&r))
                && !obstacles.iter().any(|o| o.overlaps(&r))
        });
        let (x, baseline) = free.unwrap_or_else(|| {
            let (x, b) = candidates[0];
            let x = x.min(area.x1 - w).max(area.x0);
            let b = b.min(area.y1 - descent).max(area.y0 + ascent);
            (x, b)
        });
        placed.push(Placed {
            x,
            baseline,
            text,
            bounds: rect_at(x, baseline),
        });
    }
    placed
}

/// What [`Frame::layout`] needs.
struct FrameSpec<'a> {
    width: f64,
    height: f64,
    title: &'a str,
    x_label: &'a str,
    y_label: &'a str,
    x_range: Range,
    y_range: Range,
    log_y: bool,
    /// Room kept free right of the plot area (for a legend).
    right_reserve: f64,
    /// Leave a margin of 5 % around the data, so no point sits on the frame.
    pad: bool,
}

/// The plot area in SVG coordinates and its two axes.
struct Frame {
    width: f64,
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
    x: Axis,
    y: Axis,
}

impl Frame {
    fn layout(spec: &FrameSpec<'_>) -> Frame {
        let padded = |r: Range| {
            r.map(|(lo, hi)| {
                let m = if spec.pad { (hi - lo) * 0.05 } else { 0.0 };
                (lo - m, hi + m)
            })
        };
        let top = if spec.title.trim().is_empty() {
            14.0
        } else {
            40.0
        };
        let bottom = spec.height
            - if spec.x_label.trim().is_empty() {
                30.0
            } else {
                50.0
            };
        let y_target = (((bottom - top) / 48.0).round() as usize).clamp(3, 10);
        let y = match (spec.log_y, spec.y_range) {
            (true, Some((lo, hi))) => log_ticks(lo, hi),
            (true, None) => log_ticks(1.0, 10.0),
            (false, r) => {
                let (lo, hi) = padded(r).unwrap_or((0.0, 1.0));
                linear_ticks(lo, hi, y_target)
            }
        };
        let widest = y
            .ticks
            .iter()
            .filter_map(|t| t.label.as_deref())
            .map(|l| text_width(l, FONT))
            .fold(0.0, f64::max);
        let left = if spec.y_label.trim().is_empty() {
            12.0
        } else {
            34.0
        } + widest
            + 10.0;
        let right = (spec.width - 14.0 - spec.right_reserve).max(left + 40.0);
        let (x_lo, x_hi) = padded(spec.x_range).unwrap_or((0.0, 1.0));
        let mut x_target = (((right - left) / 90.0).round() as usize).clamp(2, 12);
        let x = loop {
            let axis = linear_ticks(x_lo, x_hi, x_target);
            let need: f64 = axis
                .ticks
                .iter()
                .filter_map(|t| t.label.as_deref())
                .map(|l| text_width(l, FONT) + 14.0)
                .sum();
            if need <= right - left || x_target <= 2 {
                break axis;
            }
            x_target -= 1;
        };
        Frame {
            width: spec.width,
            left,
            right,
            top,
            bottom,
            x,
            y,
        }
    }

    fn px(&self, x: f64) -> f64 {
        self.left + self.x.frac(x) * (self.right - self.left)
    }

    fn py(&self, y: f64) -> f64 {
        self.bottom - self.y.frac(y) * (self.bottom - self.top)
    }

    fn draw_grid(&self, out: &mut String) {
        for (major, colour) in [(false, "#eeeeee"), (true, "#d4d4d4")] {
            let _ = writeln!(out, "<g stroke=\"{colour}\" stroke-width=\"1\">");
            for t in self.x.ticks.iter().filter(|t| t.label.is_some() == major) {
                let x = self.px(t.value);
                let _ = writeln!(
                    out,
                    "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\"/>",
                    N(x),
                    N(self.top),
                    N(x),
                    N(self.bottom)
                );
            }
            for t in self.y.ticks.iter().filter(|t| t.label.is_some() == major) {
                let y = self.py(t.value);
                let _ = writeln!(
                    out,
                    "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\"/>",
                    N(self.left),
                    N(y),
                    N(self.right),
                    N(y)
                );
            }
            out.push_str("</g>\n");
        }
    }

    fn draw_axes(&self, out: &mut String, title: &str, x_label: &str, y_label: &str) {
        let _ = writeln!(
            out,
            "<rect x=\"{}\" y=\"{}\" width=\"{}\" height=\"{}\" fill=\"none\" stroke=\"#444444\" stroke-width=\"1\"/>",
            N(self.left),
            N(self.top),
            N(self.right - self.left),
            N(self.bottom - self.top)
        );
        out.push_str("<g stroke=\"#444444\" stroke-width=\"1\">\n");
        for t in &self.x.ticks {
            let x = self.px(t.value);
            let len = if t.label.is_some() { 5.0 } else { 3.0 };
            let _ = writeln!(
                out,
                "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\"/>",
                N(x),
                N(self.bottom),
                N(x),
                N(self.bottom + len)
            );
        }
        for t in &self.y.ticks {
            let y = self.py(t.value);
            let len = if t.label.is_some() { 5.0 } else { 3.0 };
            let _ = writeln!(
                out,
                "<line x1=\"{}\" y1=\"{}\" x2=\"{}\" y2=\"{}\"/>",
                N(self.left - len),
                N(y),
                N(self.left),
                N(y)
            );
        }
        out.push_str("</g>\n<g fill=\"#222222\">\n");
        for t in &self.x.ticks {
            if let Some(label) = &t.label {
                let _ = writeln!(
                    out,
                    "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
                    N(self.px(t.value)),
                    N(self.bottom + 18.0),
                    escape_xml(label)
                );
            }
        }
        for t in &self.y.ticks {
            if let Some(label) = &t.label {
                let _ = writeln!(
                    out,
                    "<text x=\"{}\" y=\"{}\" text-anchor=\"end\">{}</text>",
                    N(self.left - 8.0),
                    N(self.py(t.value) + 4.0),
                    escape_xml(label)
                );
            }
        }
        out.push_str("</g>\n");
        if !x_label.trim().is_empty() {
            let _ = writeln!(
                out,
                "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\">{}</text>",
                N((self.left + self.right) / 2.0),
                N(self.bottom + 40.0),
                escape_xml(&fit(x_label, self.width - 20.0, FONT))
            );
        }
        if !y_label.trim().is_empty() {
            let cy = (self.top + self.bottom) / 2.0;
            let _ = writeln!(
                out,
                "<text x=\"16.0\" y=\"{y}\" transform=\"rotate(-90 16.0 {y})\" text-anchor=\"middle\">{}</text>",
                escape_xml(&fit(y_label, self.bottom - self.top, FONT)),
                y = N(cy)
            );
        }
        if !title.trim().is_empty() {
            let _ = writeln!(
                out,
                "<text x=\"{}\" y=\"24.0\" text-anchor=\"middle\" font-size=\"{TITLE_FONT}\" font-weight=\"bold\">{}</text>",
                N(self.width / 2.0),
                escape_xml(&fit(title, self.width - 20.0, TITLE_FONT))
            );
        }
    }

    fn draw_no_data(&self, out: &mut String) {
        let _ = writeln!(
            out,
            "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\" fill=\"#666666\">no data</text>",
            N((self.left + self.right) / 2.0),
            N((self.top + self.bottom) / 2.0)
        );
    }
}

/// A small well-formedness check of the markup this crate writes, for tests.
#[cfg(test)]
pub(crate) mod markup_check {
    /// Checks `doc`: tags balanced and properly nested, one root element, attribute values
    /// double-quoted, no raw `<` or `>` in text or values, every `&` the start of an entity.
    /// `<!...>` declarations are skipped; elements named in `void` need no end tag.
    /// Returns the number of elements.
    pub(crate) fn check(doc: &str, void: &[&str]) -> Result<usize, String> {
        let mut stack: Vec<String> = Vec::new();
        let mut rest = doc;
        let mut elements = 0;
        let mut roots = 0;
        loop {
            let Some(i) = rest.find('<') else {
                text(rest)?;
                break;
            };
            text(&rest[..i])?;
            if !rest[..i].trim().is_empty() && stack.is_empty() {
                return Err(format!("text outside the root: {:?}", &rest[..i]));
            }
            rest = &rest[i..];
            if rest.starts_with("<!") {
                let end = rest.find('>').ok_or("unterminated declaration")?;
                rest = &rest[end + 1..];
                continue;
            }
            let end = tag_end(rest).ok_or_else(|| format!("unterminated tag: {rest:.40}"))?;
            let tag = &rest[1..end];
            rest = &rest[end + 1..];
            if let Some(name) = tag.strip_prefix('/') {
                let open = stack.pop().ok_or_else(|| format!("stray </{name}>"))?;
                if open != name.trim() {
                    return Err(format!("<{open}> closed by </{name}>"));
                }
                continue;
            }
            let self_closing = tag.ends_with('/');
            let body = tag.trim_end_matches('/');
            let (name, attrs) = body.split_once(char::is_whitespace).unwrap_or((body, ""));
            if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '-') {
                return Err(format!("bad element name in <{tag}>"));
            }
            attributes(attrs)?;
            if stack.is_empty() {
                roots += 1;
            }
            elements += 1;
            if !self_closing && !void.contains(&name) {
                stack.push(name.to_string());
            }
        }
        if let Some(open) = stack.pop() {
            return Err(format!("<{open}> never closed"));
        }
        if roots != 1 {
            return Err(format!("{roots} root elements"));
        }
        Ok(elements)
    }

    fn tag_end(s: &str) -> Option<usize> {
        let mut quoted = false;
        for (i, c) in s.char_indices().skip(1) {
            match c {
                '"' => quoted = !quoted,
                '>' if !quoted => return Some(i),
                '<' if !quoted => return None,
                _ => {}
            }
        }
        None
    }

    fn text(s: &str) -> Result<(), String> {
        if s.contains('>') {
            return Err(format!("raw '>' in {s:?}"));
        }
        let mut rest = s;
        while let Some(i) = rest.find('&') {
            rest = &rest[i + 1..];
            let end = rest.find(';').ok_or_else(|| format!("bare '&' in {s:?}"))?;
            let entity = &rest[..end];
            let ok = matches!(entity, "amp" | "lt" | "gt" | "quot" | "apos")
                || entity
                    .strip_prefix('#')
                    .is_some_and(|n| !n.is_empty() && n.chars().all(|c| c.is_ascii_digit()));
            if !ok {
                return Err(format!("bad entity &{entity}; in {s:?}"));
            }
        }
        Ok(())
    }

    fn attributes(mut s: &str) -> Result<(), String> {
        loop {
            s = s.trim_start();
            if s.is_empty() {
                return Ok(());
            }
            let eq = s
                .find('=')
                .ok_or_else(|| format!("attribute without value: {s}"))?;
            let name = &s[..eq];
            if name.is_empty()
                || !name
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | ':' | '_'))
            {
                return Err(format!("bad attribute name {name:?}"));
            }
            let value = s[eq + 1..]
                .strip_prefix('"')
                .ok_or_else(|| format!("unquoted value of {name}"))?;
            let close = value.find('"').ok_or("unterminated value")?;
            text(&value[..close])?;
            if value[..close].contains('<') {
                return Err(format!("raw '<' in value of {name}"));
            }
            s = &value[close + 1..];
            if !s.is_empty() && !s.starts_with(char::is_whitespace) {
                return Err(format!("no space after value of {name}"));
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::markup_check::check;
    use super::*;

    fn values(axis: &Axis) -> Vec<f64> {
        axis.ticks.iter().map(|t| t.value).collect()
    }

    fn loss_plot() -> LinePlot {
        let mut plot = LinePlot::new("Loss by step", "step", "loss (MSE)");
        plot.series.push(Series::new(
            "float",
            (0..50)
                .map(|i| (f64::from(i), 1.0 / f64::from(i + 1)))
                .collect(),
        ));
        plot.series.push(
            Series::new(
                "fixed point",
                (0..50)
                    .map(|i| (f64::from(i), 1.1 / f64::from(i + 1)))
                    .collect(),
            )
            .dashed(),
        );
        plot
    }

    #[test]
    fn ticks_of_unit_range() {
        let a = linear_ticks(0.0, 1.0, 6);
        assert_eq!(values(&a), [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
        assert_eq!(a.labels(), ["0.0", "0.2", "0.4", "0.6", "0.8", "1.0"]);
        assert_eq!((a.lo, a.hi), (0.0, 1.0));
    }

    #[test]
    fn ticks_of_small_range() {
        let a = linear_ticks(0.001, 0.0031, 6);
        assert_eq!(
            a.labels(),
            ["0.0010", "0.0015", "0.0020", "0.0025", "0.0030", "0.0035"]
        );
        assert!(a.lo <= 0.001 && a.hi >= 0.0031);
        // Values are the nearest doubles to the decimals, not accumulated sums.
        assert_eq!(a.ticks[3].value, 0.0025);
    }

    #[test]
    fn ticks_of_symmetric_range() {
        let a = linear_ticks(-5.0, 5.0, 6);
        assert_eq!(values(&a), [-6.0, -4.0, -2.0, 0.0, 2.0, 4.0, 6.0]);
        assert_eq!(a.labels(), ["-6", "-4", "-2", "0", "2", "4", "6"]);
        // Reversed bounds give the same axis.
        assert_eq!(linear_ticks(5.0, -5.0, 6), a);
    }

    #[test]
    fn ticks_use_exponents_for_tiny_steps_and_huge_values() {
        let a = linear_ticks(0.0, 3e-5, 6);
        assert_eq!(
            a.labels(),
            ["0", "5.0e-6", "1.0e-5", "1.5e-5", "2.0e-5", "2.5e-5", "3.0e-5"]
        );
        let b = linear_ticks(1e6, 5e6, 4);
        assert_eq!(b.labels(), ["1e6", "2e6", "3e6", "4e6", "5e6"]);
    }

    #[test]
    fn degenerate_ranges_are_widened() {
        for (lo, hi) in [
            (0.5, 0.5),
            (0.0, 0.0),
            (-3.0, -3.0),
            (f64::NAN, 1.0),
            (1e-300, 1e-300),
        ] {
            let a = linear_ticks(lo, hi, 5);
            assert!(a.hi > a.lo, "{lo}..{hi} gave {a:?}");
            assert!(a.ticks.len() >= 2, "{lo}..{hi} gave {a:?}");
            assert!(a.ticks.iter().all(|t| t.value.is_finite()));
            if lo.is_finite() {
                assert!(a.lo <= lo && a.hi >= hi, "{lo} outside {a:?}");
            }
        }
    }

    #[test]
    fn log_ticks_by_decade() {
        let a = log_ticks(1e-6, 1.0);
        assert!(a.log);
        assert_eq!(
            a.labels(),
            ["1e-6", "1e-5", "1e-4", "1e-3", "1e-2", "1e-1", "1e0"]
        );
        assert_eq!(a.ticks.len(), 7, "no minor ticks over six decades");
        assert_eq!((a.lo, a.hi), (1e-6, 1.0));

        let b = log_ticks(0.02, 0.5);
        assert_eq!(b.labels(), ["0.01", "0.1", "1"]);
        assert!(b.ticks.iter().any(|t| t.label.is_none() && t.value == 0.05));

        let c = log_ticks(0.2, 0.9);
        assert_eq!(c.labels(), ["0.1", "0.2", "0.5", "1"]);

        let d = log_ticks(1e-20, 1e20);
        assert_eq!(d.labels().first(), Some(&"1e-20"));
        assert_eq!(d.labels().len(), 9, "every 5th decade");
        // Non-positive bounds fall back rather than produce NaN.
        assert_eq!(log_ticks(0.0, -1.0).labels(), ["1", "2", "5", "10"]);
        let e = log_ticks(1.0, 1.0);
        assert!(e.lo < 1.0 && e.hi > 1.0);
    }

    #[test]
    fn line_plot_is_well_formed() {
        let svg = loss_plot().to_svg();
        let n = check(&svg, &[]).unwrap();
        assert!(n > 20, "only {n} elements");
        assert!(svg.starts_with("<svg xmlns=\"http://www.w3.org/2000/svg\""));
        assert!(svg.contains("viewBox=\"0 0 720.0 420.0\""));
        assert!(svg.contains(">float</text>") && svg.contains(">fixed point</text>"));
        assert!(svg.contains("stroke-dasharray=\"7 4\""));
        assert_eq!(svg.matches("<polyline").count(), 2);
        for banned in ["<script", "href", "url(", "@import", "id=\""] {
            assert!(!svg.contains(banned), "{banned} in plot");
        }
    }

    #[test]
    fn styles_stay_apart_without_colour() {
        let series: Vec<Series> = (0..7)
            .map(|i| {
                let s = Series::new(format!("s{i}"), vec![(0.0, 1.0)]);
                if i % 2 == 1 {
                    s.dashed()
                } else {
                    s
                }
            })
            .collect();
        let styles = series_styles(&series);
        for (i, a) in styles.iter().enumerate() {
            for b in &styles[i + 1..] {
                assert!(
                    a.colour != b.colour || a.dash != b.dash,
                    "two series look alike: {a:?}"
                );
            }
        }
        // Dashed series are dashed, distinctly; the first three solid ones are solid.
        assert_eq!(styles[1].dash, Some("7 4"));
        assert_eq!(styles[3].dash, Some("2 3"));
        assert_eq!(styles[0].dash, None);
        assert_eq!(styles[4].dash, None);
        assert!(styles[6].dash.is_some());
    }

    #[test]
    fn nan_and_infinite_points_break_the_line() {
        let mut plot = LinePlot::new("t", "x", "y");
        plot.series.push(Series::new(
            "gappy",
            vec![
                (0.0, 1.0),
                (1.0, 2.0),
                (2.0, f64::NAN),
                (3.0, 3.0),
                (f64::INFINITY, 1.0),
                (5.0, 2.0),
                (6.0, 1.0),
            ],
        ));
        plot.series.push(Series::new(
            "empty",
            vec![(0.0, f64::NAN), (1.0, f64::NEG_INFINITY)],
        ));
        let svg = plot.to_svg();
        check(&svg, &[]).unwrap();
        // Runs: [0,1], [3] (a dot), [5,6].
        assert_eq!(svg.matches("<polyline").count(), 2);
        assert_eq!(svg.matches("<circle").count(), 1);
        assert!(svg.contains(">empty (no data)</text>"));
        assert!(!svg.contains(">gappy (no data)"));
        assert!(!svg.contains("NaN") && !svg.contains("inf"));
        assert!(!svg.contains(">no data</text>"), "the plot has data");
    }

    #[test]
    fn plot_without_any_data_says_so() {
        let mut plot = LinePlot::new("", "", "");
        plot.series
            .push(Series::new("a", vec![(f64::NAN, f64::NAN)]));
        let svg = plot.to_svg();
        check(&svg, &[]).unwrap();
        assert!(svg.contains(">no data</text>"));
        assert!(svg.contains(">a (no data)</text>"));
        let bare = LinePlot::new("", "", "").to_svg();
        check(&bare, &[]).unwrap();
        assert!(bare.contains(">no data</text>"));
    }

    #[test]
    fn log_scale_skips_non_positive_values() {
        let mut plot = LinePlot::new("t", "step", "loss");
        plot.log_y = true;
        plot.series.push(Series::new(
            "loss",
            vec![
                (0.0, 1.0),
                (1.0, 0.1),
                (2.0, 0.0),
                (3.0, -1.0),
                (4.0, 1e-3),
                (5.0, 1e-4),
            ],
        ));
        let svg = plot.to_svg();
        check(&svg, &[]).unwrap();
        assert_eq!(svg.matches("<polyline").count(), 2);
        assert!(!svg.contains("NaN") && !svg.contains("inf"));
        assert!(svg.contains(">1e-4</text>") && svg.contains(">1e0</text>"));
    }

    #[test]
    fn degenerate_data_draws_without_nan() {
        let mut one = LinePlot::new("one point", "x", "y");
        one.series.push(Series::new("p", vec![(3.0, 7.0)]));
        let mut flat = LinePlot::new("flat", "x", "y");
        flat.series.push(Series::new(
            "f",
            (0..10).map(|i| (f64::from(i), 0.25)).collect(),
        ));
        let mut flat_log = flat.clone();
        flat_log.log_y = true;
        for plot in [one, flat, flat_log] {
            let svg = plot.to_svg();
            check(&svg, &[]).unwrap();
            assert!(
                !svg.contains("NaN") && !svg.contains("inf"),
                "{}",
                plot.title
            );
        }
    }

    #[test]
    fn text_is_escaped() {
        let nasty = "<a & \"b\"> 'c'";
        let mut plot = LinePlot::new(nasty, nasty, nasty);
        plot.series
            .push(Series::new(nasty, vec![(0.0, 1.0), (1.0, 2.0)]));
        let svg = plot.to_svg();
        check(&svg, &[]).unwrap();
        assert!(!svg.contains("<a "));
        assert!(svg.contains("&lt;a &amp; &quot;b&quot;&gt; &apos;c&apos;"));

        let mut scatter = ScatterPlot::new(nasty, nasty, nasty);
        scatter.points.push(Point::new(1.0, 1.0).highlighted(nasty));
        scatter.points.push(Point::new(2.0, 0.5).highlighted("x<y"));
        let svg = scatter.to_svg();
        check(&svg, &[]).unwrap();
        assert!(svg.contains(">x&lt;y</text>"));
        assert_eq!(escape_xml("a\u{1}b"), "a\u{fffd}b");
    }

    #[test]
    fn same_input_same_bytes() {
        assert_eq!(loss_plot().to_svg(), loss_plot().to_svg());
        let scatter = || {
            let mut s = ScatterPlot::new("front", "RAM (bytes)", "drift (pp)");
            for i in 0..20 {
                let x = f64::from(i * 512);
                let p = Point::new(x, 10.0 / f64::from(i + 1));
                s.points.push(if i % 4 == 0 {
                    p.highlighted(format!("cfg {i}"))
                } else {
                    p
                });
            }
            s
        };
        assert_eq!(scatter().to_svg(), scatter().to_svg());
    }

    #[test]
    fn scatter_joins_highlighted_points_in_x_order() {
        let mut s = ScatterPlot::new("front", "RAM (bytes)", "drift (pp)");
        s.points.push(Point::new(3000.0, 0.5).highlighted("c"));
        s.points.push(Point::new(1000.0, 2.0).highlighted("a"));
        s.points.push(Point::new(2000.0, 3.0));
        s.points.push(Point::new(2000.0, 1.0).highlighted("b"));
        s.points.push(Point::new(f64::NAN, 1.0));
        let svg = s.to_svg();
        check(&svg, &[]).unwrap();
        assert_eq!(
            svg.matches("<circle").count(),
            4,
            "the NaN point is left out"
        );
        assert_eq!(svg.matches(&format!("r=\"{HIGHLIGHT_RADIUS}\"")).count(), 3);
        let line = svg
            .lines()
            .find(|l| l.starts_with("<polyline"))
            .expect("front line");
        let points = line
            .split("points=\"")
            .nth(1)
            .unwrap()
            .trim_end_matches("\"/>");
        let xs: Vec<f64> = points
            .split(' ')
            .map(|p| p.split(',').next().unwrap().parse().unwrap())
            .collect();
        assert_eq!(xs.len(), 3);
        assert!(xs.windows(2).all(|w| w[0] < w[1]), "{xs:?}");

        s.connect_highlighted = false;
        assert!(!s.to_svg().contains("<polyline"));
    }

    #[test]
    fn labels_stay_inside_and_apart() {
        let area = Rect {
            x0: 50.0,
            y0: 40.0,
            x1: 400.0,
            y1: 300.0,
        };
        let labels = vec![
            // At the right edge: must go left.
            (398.0, 100.0, "rightmost config".to_string()),
            // At the top-left corner: must go right and below.
            (52.0, 42.0, "corner".to_string()),
            // Two points close together: labels must not collide.
            (200.0, 200.0, "first".to_string()),
            (204.0, 203.0, "second".to_string()),
            // Longer than the whole area: shortened.
            (220.0, 150.0, "x".repeat(100)),
        ];
        let markers: Vec<(f64, f64)> = labels.iter().map(|l| (l.0, l.1)).collect();
        let placed = place_labels(&labels, &markers, area);
        assert_eq!(placed.len(), labels.len());
        for p in &placed {
            assert!(p.bounds.inside(&area), "{p:?} leaves the area");
        }
        for (i, a) in placed[..4].iter().enumerate() {
            for b in &placed[i + 1..4] {
                assert!(!a.bounds.overlaps(&b.bounds), "{a:?} covers {b:?}");
            }
        }
        assert!(placed[0].x < 398.0);
        assert!(placed[4].text.ends_with('…'));
    }

    #[test]
    fn empty_scatter_is_well_formed() {
        let svg = ScatterPlot::new("nothing", "x", "y").to_svg();
        check(&svg, &[]).unwrap();
        assert!(svg.contains(">no data</text>"));
    }

    #[test]
    fn checker_rejects_broken_markup() {
        assert!(check("<svg><g></svg>", &[]).is_err());
        assert!(check("<svg>a & b</svg>", &[]).is_err());
        assert!(check("<svg x=1></svg>", &[]).is_err());
        assert!(check("<svg></svg><svg></svg>", &[]).is_err());
        assert!(check("<svg>1 > 0</svg>", &[]).is_err());
        assert_eq!(check("<svg a=\"&lt;\"><g/></svg>", &[]), Ok(2));
    }
}
