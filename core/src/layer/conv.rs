//! 1-D convolution without padding: input `[C][L]`, kernel `[F][C][K]`, output `[F][L']`
//! with `L' = (L − K)/S + 1`.
//!
//! `y[o][t] = b[o] + Σ_c Σ_k w[o][c][k] · x[c][t·S + k]`, summed exactly and rounded once.
//! Backward: `∂L/∂x[c][i] = Σ_o Σ_{t,k: tS+k=i} w[o][c][k] g[o][t]`,
//! `∂L/∂w[o][c][k] += Σ_t g[o][t] x[c][tS+k]`, `∂L/∂b[o] += Σ_t g[o][t]`; each sum exact,
//! rounded once per sample.

use super::dense::store_with_bias;
use super::{BackOut, BackTally, Params, Rounder, Tensor, TensorMut};
use crate::kernel::{add_sat, dot, Tally};
use crate::model::LayerGeometry;

/// The output positions `t` whose window covers input position `i`: `t·S ≤ i < t·S + K`,
/// `0 ≤ t < out_len`. Returned as a half-open range.
#[inline]
pub(crate) fn covering(
    i: usize,
    kernel: usize,
    stride: usize,
    out_len: usize,
) -> core::ops::Range<usize> {
    // t ≥ (i − K + 1)/S rounded up; t ≤ i/S.
    let lo = if i + 1 > kernel {
        (i + 1 - kernel).div_ceil(stride)
    } else {
        0
    };
    let hi = (i / stride + 1).min(out_len);
    lo..hi.max(lo)
}

/// Forward pass.
#[allow(clippy::too_many_arguments)]
pub fn forward(
    g: &LayerGeometry,
    kernel: u16,
    stride: u16,
    p: Params<'_>,
    x: Tensor<'_>,
    y: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    tally: &mut Tally,
) {
    let (c_in, l_in) = (g.input.channels as usize, g.input.len as usize);
    let (f_out, l_out) = (g.output.channels as usize, g.output.len as usize);
    let (k, s) = (kernel as usize, stride as usize);
    let fs = p.w.frac() + x.frac();
    for o in 0..f_out {
        for t in 0..l_out {
            let mut acc = 0i64;
            let mut sat = false;
            for c in 0..c_in {
                let (d, s1) = dot(
                    p.w.raw,
                    (o * c_in + c) * k,
                    1,
                    x.raw,
                    c * l_in + t * s,
                    1,
                    k,
                );
                let (a, s2) = add_sat(acc, d);
                acc = a;
                sat |= s1 | s2;
            }
            store_with_bias(
                r,
                y,
                o * l_out + t,
                acc,
                fs,
                p.b.at(o),
                p.b.frac(),
                sat,
                tally,
            );
        }
    }
}

/// Backward pass.
#[allow(clippy::too_many_arguments)]
pub fn backward(
    g: &LayerGeometry,
    kernel: u16,
    stride: u16,
    p: Params<'_>,
    x: Tensor<'_>,
    gy: Tensor<'_>,
    out: BackOut<'_, '_>,
    r: &mut Rounder<'_>,
    t: &mut BackTally,
) {
    let (c_in, l_in) = (g.input.channels as usize, g.input.len as usize);
    let (f_out, l_out) = (g.output.channels as usize, g.output.len as usize);
    let (k, s) = (kernel as usize, stride as usize);
    if let Some(gx) = out.gx {
        let f = p.w.frac() + gy.frac();
        for c in 0..c_in {
            for i in 0..l_in {
                let mut acc = 0i64;
                let mut sat = false;
                for o in 0..f_out {
                    for tt in covering(i, k, s, l_out) {
                        let w = p.w.at((o * c_in + c) * k + (i - tt * s)) as i64;
                        let (a, o1) = add_sat(acc, w * gy.at(o * l_out + tt) as i64);
                        acc = a;
                        sat |= o1;
                    }
                }
                r.store(gx, c * l_in + i, acc, f, sat, &mut t.gx);
            }
        }
    }
    if let Some(acc_w) = out.acc_w {
        let f = gy.frac() + x.frac();
        for o in 0..f_out {
            for c in 0..c_in {
                for kk in 0..k {
                    let (d, sat) = dot(gy.raw, o * l_out, 1, x.raw, c * l_in + kk, s, l_out);
                    r.accumulate(acc_w, (o * c_in + c) * k + kk, d, f, sat, &mut t.acc_w);
                }
            }
        }
    }
    if let Some(acc_b) = out.acc_b {
        for o in 0..f_out {
            let mut sum = 0i64;
            for tt in 0..l_out {
                sum += gy.at(o * l_out + tt) as i64;
            }
            r.accumulate(acc_b, o, sum, gy.frac(), false, &mut t.acc_b);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::covering;

    #[test]
    fn covering_windows() {
        // L = 10, K = 3, S = 2: windows start at 0, 2, 4, 6 (L' = 4).
        assert_eq!(covering(0, 3, 2, 4), 0..1);
        assert_eq!(covering(2, 3, 2, 4), 0..2);
        assert_eq!(covering(3, 3, 2, 4), 1..2);
        assert_eq!(covering(8, 3, 2, 4), 3..4);
        assert_eq!(covering(9, 3, 2, 4), 4..4); // past the last window
                                                // Stride larger than kernel leaves gaps.
        assert_eq!(covering(2, 2, 3, 3), 1..1);
        assert_eq!(covering(3, 2, 3, 3), 1..2);
    }
}
