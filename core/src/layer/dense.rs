//! Fully connected layer: `y = W x + b`, weights `[units][inputs]` row-major.
//!
//! Forward: each output is the exact dot product (fraction bits `f_w + f_x`) plus the bias
//! aligned exactly to the wider of the two scales, rounded once into the output format.
//! Backward: `∂L/∂x_i = Σ_j W_ji g_j` (exact, rounded once), `∂L/∂W_ji += g_j x_i` and
//! `∂L/∂b_j += g_j`, each rounded into the accumulator format.

use super::{BackOut, BackTally, Params, Rounder, Tensor, TensorMut};
use crate::kernel::{dot, Tally};
use crate::model::LayerGeometry;
use crate::num::round::shift_left_saturating;

/// Adds a bias with `fb` fraction bits to an exact sum with `fs` fraction bits, exactly, at
/// the wider scale, and stores the result rounded once into `y[j]`. The sum is formed in 64
/// bits when it fits and in 128 bits otherwise (wide formats aligned far apart), so the result
/// is exact whatever the formats.
#[inline]
#[allow(clippy::too_many_arguments)]
pub(crate) fn store_with_bias(
    r: &mut Rounder<'_>,
    y: &mut TensorMut<'_>,
    j: usize,
    sum: i64,
    fs: u32,
    bias: i32,
    fb: u32,
    sat_before: bool,
    tally: &mut Tally,
) {
    let f = fs.max(fb);
    let (s, o1) = shift_left_saturating(sum, f - fs);
    let (b, o2) = shift_left_saturating(bias as i64, f - fb);
    match (o1 || o2, s.checked_add(b)) {
        (false, Some(v)) => r.store(y, j, v, f, sat_before, tally),
        _ => {
            let v = ((sum as i128) << (f - fs)) + ((bias as i128) << (f - fb));
            r.store_wide(y, j, v, f, sat_before, tally);
        }
    }
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
        store_with_bias(r, y, j, d, fs, p.b.at(j), p.b.frac(), sat_dot, tally);
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
            r.accumulate_outer(acc, j * n_in, gj, x.raw, n_in, f, &mut t.acc_w);
        }
    }
    if let Some(acc) = out.acc_b {
        // As for the weight rows: a zero gradient adds nothing and is not counted.
        let mut dropped = Tally::default();
        for j in 0..n_out {
            let gj = gy.at(j) as i64;
            let tally = if gj == 0 { &mut dropped } else { &mut t.acc_b };
            r.accumulate(acc, j, gj, gy.frac(), false, tally);
        }
    }
}
