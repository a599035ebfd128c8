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
use crate::kernel::Tally;
use crate::model::LayerKind;
use crate::num::round::shift_right;
use crate::num::Rounding;

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
    for i in 0..n {
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
        r.store(y, i, out, f, false, t);
    }
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
    for i in 0..n {
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
                (deriv(yv * (one(fy) - yv), 2 * fy, r) * g, DERIV_FRAC + fg)
            }
            LayerKind::Tanh if cfg!(feature = "table-activations") => {
                let yv = y.at(i) as i64;
                (deriv(one(2 * fy) - yv * yv, 2 * fy, r) * g, DERIV_FRAC + fg)
            }
            _ => (g, fg),
        };
        r.store(gx, i, v, f, false, t);
    }
}

/// A derivative with `f` fraction bits brought to [`DERIV_FRAC`] (nearest, ties to even; no
/// random draw). Derivatives of sigmoid and tanh lie in [0, 1], so the result fits 31 bits.
#[inline]
fn deriv(d: i64, f: u32, r: &mut Rounder<'_>) -> i64 {
    if f >= DERIV_FRAC {
        shift_right(d, f - DERIV_FRAC, Rounding::NearestEven, r.rng)
    } else {
        d << (DERIV_FRAC - f)
    }
}
