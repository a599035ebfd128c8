//! Fully connected layer: `y = W x + b`, weights `[units][inputs]` row-major.
//!
//! Forward: each output is the exact dot product (fraction bits `f_w + f_x`) plus the bias
//! aligned exactly to the wider of the two scales, rounded once into the output format.
//! Backward: `∂L/∂x_i = Σ_j W_ji g_j` (exact, rounded once), `∂L/∂W_ji += g_j x_i` and
//! `∂L/∂b_j += g_j`, each rounded into the accumulator format.

use super::{BackOut, BackTally, Params, Rounder, Tensor, TensorMut};
use crate::kernel::{add_sat, dot, Tally};
use crate::model::LayerGeometry;
use crate::num::round::shift_left_saturating;

/// Adds a bias with `fb` fraction bits to an exact sum with `fs` fraction bits, exactly, at
/// the wider scale. Returns the sum, its fraction bits and whether anything saturated.
#[inline]
pub(crate) fn add_bias(sum: i64, fs: u32, bias: i32, fb: u32) -> (i64, u32, bool) {
    let f = fs.max(fb);
    let (s, o1) = shift_left_saturating(sum, f - fs);
    let (b, o2) = shift_left_saturating(bias as i64, f - fb);
    let (t, o3) = add_sat(s, b);
    (t, f, o1 || o2 || o3)
}

/// Forward pass.
pub fn forward(
    g: &LayerGeometry,
    p: Params<'_>,
    x: Tensor<'_>,
    y: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    tally: &mut Tally,
) {
    let n_in = g.input.size() as usize;
    let n_out = g.output.size() as usize;
    let fs = p.w.frac() + x.frac();
    for j in 0..n_out {
        let (d, sat_dot) = dot(p.w.raw, j * n_in, 1, x.raw, 0, 1, n_in);
        let (v, f, sat_bias) = add_bias(d, fs, p.b.at(j), p.b.frac());
        r.store(y, j, v, f, sat_dot || sat_bias, tally);
    }
}

/// Backward pass.
pub fn backward(
    g: &LayerGeometry,
    p: Params<'_>,
    x: Tensor<'_>,
    gy: Tensor<'_>,
    out: BackOut<'_, '_>,
    r: &mut Rounder<'_>,
    t: &mut BackTally,
) {
    let n_in = g.input.size() as usize;
    let n_out = g.output.size() as usize;
    if let Some(gx) = out.gx {
        let f = p.w.frac() + gy.frac();
        for i in 0..n_in {
            let (d, sat) = dot(p.w.raw, i, n_in, gy.raw, 0, 1, n_out);
            r.store(gx, i, d, f, sat, &mut t.gx);
        }
    }
    if let Some(acc) = out.acc_w {
        let f = gy.frac() + x.frac();
        for j in 0..n_out {
            let gj = gy.at(j) as i64;
            let row = j * n_in;
            for i in 0..n_in {
                r.accumulate(acc, row + i, gj * x.at(i) as i64, f, false, &mut t.acc_w);
            }
        }
    }
    if let Some(acc) = out.acc_b {
        for j in 0..n_out {
            r.accumulate(acc, j, gy.at(j) as i64, gy.frac(), false, &mut t.acc_b);
        }
    }
}
