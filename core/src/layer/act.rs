//! Element-wise activations: ReLU, leaky ReLU, hard tanh, clipped ReLU, sigmoid, tanh.
//!
//! Derivatives of the piecewise-linear activations are taken from the layer input, so they
//! are exact: for ReLU, hard tanh and clipped ReLU 1 strictly inside the linear part and 0
//! outside and at the corners; for leaky ReLU 1 above zero and 2^-shift at and below it (the
//! conventions the float twin follows too). Sigmoid and tanh take theirs from the output, `y(1 − y)` and
//! `1 − y²`, which is why the plan keeps their outputs. Those derivatives are formed with
//! [`DERIV_FRAC`] fraction bits (rounded to nearest, even on ties) before the product with
//! the incoming gradient, so every intermediate stays inside 64 bits.

use super::{Rounder, Tensor, TensorMut};
use crate::approx;
use crate::kernel::{outer_half, Tally, WORD_I32, WORD_I8};
use crate::model::LayerKind;
use crate::num::round::{requantize, shift_right, NearestEven, RoundMode, Shr32, Shr64};
use crate::num::{QFormat, RawMut, Rng, Rounding, Sample};

/// Fraction bits of the sigmoid and tanh derivatives in backward.
pub const DERIV_FRAC: u32 = 30;

/// `2^f` as `i64`, for `f ≤ 62`.
#[inline]
const fn one(f: u32) -> i64 {
    1i64 << if f > 62 { 62 } else { f }
}

/// Forward pass over `n` values.
pub fn forward(
    kind: LayerKind,
    n: usize,
    x: Tensor<'_>,
    y: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) {
    let fx = x.frac();
    let value = |i: usize, _: &mut Rng| -> (i64, u32) {
        let v = x.at(i) as i64;
        let (out, f) = match kind {
            LayerKind::Relu => (v.max(0), fx),
            LayerKind::LeakyRelu { shift } => {
                if v > 0 {
                    (v, fx)
                } else {
                    (v, fx + shift as u32)
                }
            }
            LayerKind::HardTanh => (v.clamp(-one(fx), one(fx)), fx),
            LayerKind::ClippedRelu { ceiling } => (v.clamp(0, (ceiling as i64) << fx), fx),
            // Without the `table-activations` feature the plan rejects these kinds, and the
            // guards keep their tables out of the build.
            LayerKind::Sigmoid if cfg!(feature = "table-activations") => {
                (approx::sigmoid::sigmoid(v, fx) as i64, approx::OUT_FRAC)
            }
            LayerKind::Tanh if cfg!(feature = "table-activations") => {
                (approx::tanh::tanh(v, fx) as i64, approx::OUT_FRAC)
            }
            // Not element-wise, or not built; never dispatched here.
            _ => (v, fx),
        };
        (out, f)
    };
    store_all(y, n, value, r, t);
}

/// Backward pass over `n` values: `gx = f'(x) · gy`.
#[allow(clippy::too_many_arguments)]
pub fn backward(
    kind: LayerKind,
    n: usize,
    x: Tensor<'_>,
    y: Tensor<'_>,
    gy: Tensor<'_>,
    gx: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) {
    let (fx, fy, fg) = (x.frac(), y.frac(), gy.frac());
    let value = |i: usize, rng: &mut Rng| -> (i64, u32) {
        let g = gy.at(i) as i64;
        let (v, f) = match kind {
            LayerKind::Relu => (if x.at(i) > 0 { g } else { 0 }, fg),
            LayerKind::LeakyRelu { shift } => {
                if x.at(i) > 0 {
                    (g, fg)
                } else {
                    (g, fg + shift as u32)
                }
            }
            LayerKind::HardTanh => {
                let v = x.at(i) as i64;
                (if v > -one(fx) && v < one(fx) { g } else { 0 }, fg)
            }
            LayerKind::ClippedRelu { ceiling } => {
                let v = x.at(i) as i64;
                (
                    if v > 0 && v < (ceiling as i64) << fx {
                        g
                    } else {
                        0
                    },
                    fg,
                )
            }
            LayerKind::Sigmoid if cfg!(feature = "table-activations") => {
                let yv = y.at(i) as i64;
                (deriv(yv * (one(fy) - yv), 2 * fy, rng) * g, DERIV_FRAC + fg)
            }
            LayerKind::Tanh if cfg!(feature = "table-activations") => {
                let yv = y.at(i) as i64;
                (
                    deriv(one(2 * fy) - yv * yv, 2 * fy, rng) * g,
                    DERIV_FRAC + fg,
                )
            }
            _ => (g, fg),
        };
        (v, f)
    };
    store_all(gx, n, value, r, t);
}

/// A derivative with `f` fraction bits brought to [`DERIV_FRAC`] (nearest, ties to even; no
/// random draw). Derivatives of sigmoid and tanh lie in [0, 1], so the result fits 31 bits.
/// Stores `value(i)` (a wide value and its fraction bits) into `out[i]` for `i < n`, as
/// [`Rounder::store`] does value by value. With nearest-even rounding the output's word is
/// matched once per call and the rounding stays inline.
fn store_all<F: FnMut(usize, &mut Rng) -> (i64, u32)>(
    out: &mut TensorMut<'_>,
    n: usize,
    mut value: F,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) {
    if r.mode == Rounding::NearestEven && out.raw.len() >= n {
        let fmt = out.fmt;
        match &mut out.raw {
            RawMut::I8(o) if WORD_I8 => store_typed(&mut o[..n], fmt, value, r.rng, t),
            RawMut::I16(o) => store_typed(&mut o[..n], fmt, value, r.rng, t),
            RawMut::I32(o) if WORD_I32 => store_typed(&mut o[..n], fmt, value, r.rng, t),
            // Not built: a checked description has no such values.
            _ => {}
        }
        return;
    }
    for i in 0..n {
        let (v, f) = value(i, r.rng);
        r.store(out, i, v, f, false, t);
    }
}

/// [`store_all`]'s loop for an output stored as `O`, rounding to nearest, ties to even.
#[inline(never)]
fn store_typed<O: Sample, F: FnMut(usize, &mut Rng) -> (i64, u32)>(
    out: &mut [O],
    fmt: QFormat,
    mut value: F,
    rng: &mut Rng,
    t: &mut Tally,
) {
    const BOUND32: i64 = 1 << 30;
    const BOUND64: i64 = 1 << 62;
    let to = fmt.frac as u32;
    let (mut sats, mut high) = (0u32, 0u32);
    // The shifts for the last fraction bits seen (they change only for leaky ReLU).
    let shifts = |f: u32| {
        let s = f.checked_sub(to);
        (f, s.and_then(Shr32::new), s.and_then(Shr64::new))
    };
    let mut last = shifts(to);
    for (i, o) in out.iter_mut().enumerate() {
        let (v, f) = value(i, rng);
        if f != last.0 {
            last = shifts(f);
        }
        let (q, sat) = match last {
            (_, Some(s), _) if (-BOUND32..=BOUND32).contains(&v) => {
                O::WORD.saturate_narrow(NearestEven::shr32(v as i32, s, rng) as i64)
            }
            (_, _, Some(s)) if (-BOUND64..=BOUND64).contains(&v) => {
                O::WORD.saturate_narrow(NearestEven::shr64(v, s, rng))
            }
            _ if f == to => O::WORD.saturate_narrow(v),
            _ => requantize(v, f, fmt, Rounding::NearestEven, rng),
        };
        *o = O::from_i32_in_range(q);
        sats += sat as u32;
        high += (sat || outer_half(q, O::WORD)) as u32;
    }
    t.add_counts(out.len() as u32, sats, high);
}

#[inline]
fn deriv(d: i64, f: u32, rng: &mut Rng) -> i64 {
    if f >= DERIV_FRAC {
        shift_right(d, f - DERIV_FRAC, Rounding::NearestEven, rng)
    } else {
        d << (DERIV_FRAC - f)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::num::Word;
    use proptest::prelude::{any, prop_oneof, proptest, Just, ProptestConfig};

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(2000))]

        /// The per-call store against `Rounder::store` value by value, for wide values of any
        /// magnitude and fraction bits on both sides of the output's.
        #[test]
        fn typed_store_equals_value_by_value(
            word in prop_oneof![Just(Word::I8), Just(Word::I16), Just(Word::I32)],
            to in 0u8..=31,
            vals in proptest::collection::vec((any::<i64>(), 0u32..64, 0u32..=62), 1..8),
        ) {
            let fmt = QFormat::new_unchecked(word, to.min(word.bits() as u8 - 1));
            let vals: Vec<(i64, u32)> = vals.iter().map(|&(v, s, f)| (v >> s, f)).collect();
            let n = vals.len();
            let run = |typed: bool| {
                let mut words = [0u32; 8];
                let mut out = TensorMut { raw: RawMut::from_words(&mut words, word, n).unwrap(), fmt };
                let (mut t, mut rng) = (Tally::default(), Rng::new(5));
                let mut r = Rounder { mode: Rounding::NearestEven, rng: &mut rng };
                if typed {
                    store_all(&mut out, n, |i, _| vals[i], &mut r, &mut t);
                } else {
                    for (i, &(v, f)) in vals.iter().enumerate() {
                        r.store(&mut out, i, v, f, false, &mut t);
                    }
                }
                let q: Vec<i32> = (0..n).map(|i| out.raw.at(i)).collect();
                (q, t, rng)
            };
            assert_eq!(run(true), run(false));
        }
    }
}
