//! Axes: linear and logarithmic ticks with their labels, and the text measures the layout uses.

use super::*;

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
    pub(super) fn frac(&self, v: f64) -> f64 {
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
pub(super) fn pow10(m: i64, d: i32) -> f64 {
    if d >= 0 {
        m as f64 * 10f64.powi(d)
    } else {
        m as f64 / 10f64.powi(-d)
    }
}

pub(super) fn log_label(m: i64, d: i32, exponent_form: bool) -> String {
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
pub(super) fn linear_label(v: f64, e: i32, largest: f64) -> String {
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
pub(super) fn sane_range(lo: f64, hi: f64) -> (f64, f64) {
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
pub(super) struct N(pub(super) f64);

impl fmt::Display for N {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let v = if self.0 == 0.0 { 0.0 } else { self.0 };
        write!(f, "{v:.1}")
    }
}

/// Estimated width of `text` at `font` size.
pub(super) fn text_width(text: &str, font: f64) -> f64 {
    text.chars().count() as f64 * font * CHAR_EM
}

/// `text`, shortened with an ellipsis to fit `max` units at `font` size.
pub(super) fn fit(text: &str, max: f64, font: f64) -> String {
    if text_width(text, font) <= max {
        return text.to_string();
    }
    let keep = ((max / (font * CHAR_EM)).floor() as usize).saturating_sub(1);
    let mut out: String = text.chars().take(keep).collect();
    out.push('…');
    out
}
