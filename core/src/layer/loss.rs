//! Losses in fixed point, and the gradient each hands to backward.
//!
//! Loss values are reported as [`LossValue`]: a raw `i64` with [`LOSS_FRAC`] fraction bits,
//! rounded to nearest, so a device can compare losses (for the rollback guard) without
//! floating point.

use super::{Rounder, Tensor, TensorMut};
use crate::approx;
use crate::kernel::Tally;
use crate::num::round::{div_round, rescale, shift_left_saturating, shift_right};
use crate::num::Rounding;

/// Fraction bits of a [`LossValue`].
pub const LOSS_FRAC: u32 = 24;

/// A loss in fixed point: `raw · 2^-24`.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, PartialOrd, Ord)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LossValue(pub i64);

impl LossValue {
    /// The real value.
    pub fn to_f64(self) -> f64 {
        self.0 as f64 * crate::num::format::pow2(-(LOSS_FRAC as i32))
    }
}

/// What a sample should produce.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Target<'t> {
    /// Regression targets, one per output, in their own format.
    Values(Tensor<'t>),
    /// A class label, for softmax cross-entropy.
    Class(u16),
}

/// Nearest-even rounding of a non-negative `u128` by `s` bits, saturated to `i64`.
fn round_u128_to_i64(v: u128, s: u32) -> i64 {
    let q = if s == 0 {
        v
    } else if s >= 128 {
        0
    } else {
        let q = v >> s;
        let rem = v & ((1u128 << s) - 1);
        let half = 1u128 << (s - 1);
        if rem > half || (rem == half && q & 1 == 1) {
            q + 1
        } else {
            q
        }
    };
    if q > i64::MAX as u128 {
        i64::MAX
    } else {
        q as i64
    }
}

/// Squared error `½ Σ (y − t)²` and its gradient `y − t` (written into `gy` if given).
/// Returns the loss.
pub fn squared_error(
    y: Tensor<'_>,
    target: Tensor<'_>,
    n: usize,
    gy: Option<&mut TensorMut<'_>>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) -> LossValue {
    let f = y.frac().max(target.frac());
    let mut sum: u128 = 0;
    let mut gy = gy;
    for j in 0..n {
        let (a, s1) = shift_left_saturating(y.at(j) as i64, f - y.frac());
        let (b, s2) = shift_left_saturating(target.at(j) as i64, f - target.frac());
        let (e, s3) = match a.checked_sub(b) {
            Some(e) => (e, false),
            None => (if a < b { i64::MIN } else { i64::MAX }, true),
        };
        let m = e.unsigned_abs() as u128;
        sum = sum.saturating_add(m * m);
        if let Some(g) = gy.as_deref_mut() {
            r.store(g, j, e, f, s1 || s2 || s3, t);
        }
    }
    // ½ Σ e², with 2f fraction bits, to LOSS_FRAC: divide by 2^(2f + 1 − LOSS_FRAC).
    let shift = 2 * f + 1;
    let raw = if shift >= LOSS_FRAC {
        round_u128_to_i64(sum, shift - LOSS_FRAC)
    } else {
        let up = LOSS_FRAC - shift;
        if sum > (i64::MAX as u128) >> up {
            i64::MAX
        } else {
            (sum << up) as i64
        }
    };
    LossValue(raw)
}

/// Index of the largest output (the first, on ties).
pub fn argmax(z: Tensor<'_>, n: usize) -> usize {
    let mut best = 0;
    for j in 1..n {
        if z.at(j) > z.at(best) {
            best = j;
        }
    }
    best
}

/// Softmax cross-entropy `−ln softmax(z)_label` and its gradient `softmax(z) − onehot(label)`
/// (written into `gz` if given). `label < n` is the caller's check. Returns the loss.
///
/// `exp` and `ln` come from the tables in [`crate::approx`]. The gradient of each output is
/// `(e_j − [j = label]·S) / S` with `e_j = exp(z_j − max z)` and `S = Σ e_j`, formed with
/// a single rounding (the gradient rounding of the plan) after `S` has been brought under
/// 2^31 by a nearest-even shift of both terms.
pub fn softmax_cross_entropy(
    z: Tensor<'_>,
    label: usize,
    n: usize,
    gz: Option<&mut TensorMut<'_>>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) -> LossValue {
    let fz = z.frac();
    let zmax = z.at(argmax(z, n)) as i64;
    let mut sum: i64 = 0;
    for j in 0..n {
        sum += approx::exp::exp_neg(zmax - z.at(j) as i64, fz) as i64;
    }
    // sum ≥ 2^30 (the maximum contributes e^0 = 1), at most n · 2^30.
    if let Some(g) = gz {
        let excess = (64 - sum.leading_zeros()).saturating_sub(31);
        let s = shift_right(sum, excess, Rounding::NearestEven, r.rng).max(1);
        for j in 0..n {
            let e = approx::exp::exp_neg(zmax - z.at(j) as i64, fz) as i64;
            let num = if j == label { e - sum } else { e };
            let num = shift_right(num, excess, Rounding::NearestEven, r.rng);
            // |num| ≤ s < 2^31 and frac ≤ 31, so the shifted numerator fits in 62 bits.
            let (q, sat) = {
                let (wide, o) = shift_left_saturating(num, g.frac());
                (div_round(wide, s, r.mode, r.rng), o)
            };
            let (v, sat_word) = g.fmt.word.saturate(q);
            g.raw.put(j, v);
            t.note_value(v, g.fmt.word, sat || sat_word);
        }
    }
    // −ln p = ln S' + (zmax − z_label), with S' = sum · 2^-30 ≥ 1.
    let ln_s = approx::ln::ln(sum as u64, approx::OUT_FRAC).unwrap_or(0);
    let (gap30, _) = rescale(
        zmax - z.at(label) as i64,
        fz,
        approx::OUT_FRAC,
        Rounding::NearestEven,
        r.rng,
    );
    let total = ln_s.saturating_add(gap30); // 30 fraction bits
    LossValue(shift_right(
        total,
        approx::OUT_FRAC - LOSS_FRAC,
        Rounding::NearestEven,
        r.rng,
    ))
}
