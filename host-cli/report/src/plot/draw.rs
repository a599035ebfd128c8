//! Drawing: series styles, the SVG frame, runs of points, legends and label placement.

use super::*;

/// The runs of consecutive drawable points; a point that is not drawable ends a run.
pub(super) fn split_runs(
    points: &[(f64, f64)],
    drawable: impl Fn(f64, f64) -> bool,
) -> Vec<Vec<(f64, f64)>> {
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

pub(super) type Range = Option<(f64, f64)>;

/// The x and y ranges of the points, or `None` when there are none.
pub(super) fn bounds(points: impl Iterator<Item = (f64, f64)>) -> (Range, Range) {
    let mut xr: Range = None;
    let mut yr: Range = None;
    for (x, y) in points {
        xr = Some(xr.map_or((x, x), |(a, b)| (a.min(x), b.max(x))));
        yr = Some(yr.map_or((y, y), |(a, b)| (a.min(y), b.max(y))));
    }
    (xr, yr)
}

#[derive(Debug, Clone, Copy)]
pub(super) struct Style {
    pub(super) colour: &'static str,
    pub(super) dash: Option<&'static str>,
}

pub(super) fn series_styles(series: &[Series]) -> Vec<Style> {
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

pub(super) fn style_attrs(style: &Style) -> String {
    match style.dash {
        Some(d) => format!("stroke=\"{}\" stroke-dasharray=\"{d}\"", style.colour),
        None => format!("stroke=\"{}\"", style.colour),
    }
}

pub(super) fn legend_text(name: &str, has_data: bool) -> String {
    if has_data {
        name.to_string()
    } else {
        format!("{name} (no data)")
    }
}

pub(super) fn open_svg(width: f64, height: f64, title: &str) -> String {
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

pub(super) fn draw_run(out: &mut String, frame: &Frame, run: &[(f64, f64)], style: &Style) {
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

pub(super) fn draw_legend(
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

pub(super) const PLAIN_RADIUS: f64 = 3.5;
pub(super) const HIGHLIGHT_RADIUS: f64 = 5.5;

pub(super) fn draw_point(out: &mut String, frame: &Frame, p: &Point, radius: f64) {
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
pub(super) struct Rect {
    pub(super) x0: f64,
    pub(super) y0: f64,
    pub(super) x1: f64,
    pub(super) y1: f64,
}

impl Rect {
    pub(super) fn overlaps(&self, o: &Rect) -> bool {
        self.x0 < o.x1 && o.x0 < self.x1 && self.y0 < o.y1 && o.y0 < self.y1
    }

    pub(super) fn inside(&self, o: &Rect) -> bool {
        self.x0 >= o.x0 && self.x1 <= o.x1 && self.y0 >= o.y0 && self.y1 <= o.y1
    }
}

/// A label placed by [`place_labels`]: left end of its text and its baseline.
#[derive(Debug, Clone, PartialEq)]
pub(super) struct Placed {
    pub(super) x: f64,
    pub(super) baseline: f64,
    pub(super) text: String,
    pub(super) bounds: Rect,
}

/// Places each label `(x, y, text)` beside its point, inside `area`.
///
/// Tries right-above, right-below, left-above, left-below, above and below the point, and
/// takes the first spot that stays inside `area` and covers neither an earlier label nor a
/// marker at one of `markers`. When no spot is free, the first one is pushed inside `area`.
/// Text too long for the area is shortened.
pub(super) fn place_labels(
    labels: &[(f64, f64, String)],
    markers: &[(f64, f64)],
    area: Rect,
) -> Vec<Placed> {
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
pub(super) struct FrameSpec<'a> {
    pub(super) width: f64,
    pub(super) height: f64,
    pub(super) title: &'a str,
    pub(super) x_label: &'a str,
    pub(super) y_label: &'a str,
    pub(super) x_range: Range,
    pub(super) y_range: Range,
    pub(super) log_y: bool,
    /// Room kept free right of the plot area (for a legend).
    pub(super) right_reserve: f64,
    /// Leave a margin of 5 % around the data, so no point sits on the frame.
    pub(super) pad: bool,
}

/// The plot area in SVG coordinates and its two axes.
pub(super) struct Frame {
    pub(super) width: f64,
    pub(super) left: f64,
    pub(super) right: f64,
    pub(super) top: f64,
    pub(super) bottom: f64,
    pub(super) x: Axis,
    pub(super) y: Axis,
}

impl Frame {
    pub(super) fn layout(spec: &FrameSpec<'_>) -> Frame {
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

    pub(super) fn px(&self, x: f64) -> f64 {
        self.left + self.x.frac(x) * (self.right - self.left)
    }

    pub(super) fn py(&self, y: f64) -> f64 {
        self.bottom - self.y.frac(y) * (self.bottom - self.top)
    }

    pub(super) fn draw_grid(&self, out: &mut String) {
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

    pub(super) fn draw_axes(&self, out: &mut String, title: &str, x_label: &str, y_label: &str) {
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

    pub(super) fn draw_no_data(&self, out: &mut String) {
        let _ = writeln!(
            out,
            "<text x=\"{}\" y=\"{}\" text-anchor=\"middle\" fill=\"#666666\">no data</text>",
            N((self.left + self.right) / 2.0),
            N((self.top + self.bottom) / 2.0)
        );
    }
}
