//! 1-D average and max pooling, per channel, over windows of `window` samples every `stride`.
//!
//! Average: the exact window sum divided by the window length, rounded once. Its backward
//! spreads each gradient evenly over its window (overlapping windows add up, exactly, before
//! the one rounding). Max: the largest input of the window; backward sends the gradient to
//! the first position holding that maximum, recomputed from the kept input.

use super::conv::covering;
use super::{Rounder, Tensor, TensorMut};
use crate::kernel::Tally;
use crate::model::LayerGeometry;

/// Forward average pooling.
#[allow(clippy::too_many_arguments)]
pub fn avg_forward(
    g: &LayerGeometry,
    window: u16,
    stride: u16,
    x: Tensor<'_>,
    y: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) {
    let (chans, l_in, l_out) = (
        g.input.channels as usize,
        g.input.len as usize,
        g.output.len as usize,
    );
    let (w, s) = (window as usize, stride as usize);
    for c in 0..chans {
        for o in 0..l_out {
            let start = c * l_in + o * s;
            let sum: i64 = (start..start + w).map(|i| x.at(i) as i64).sum();
            r.store_div(y, c * l_out + o, sum, x.frac(), window as u32, t);
        }
    }
}

/// Backward average pooling.
#[allow(clippy::too_many_arguments)]
pub fn avg_backward(
    g: &LayerGeometry,
    window: u16,
    stride: u16,
    gy: Tensor<'_>,
    gx: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) {
    let (chans, l_in, l_out) = (
        g.input.channels as usize,
        g.input.len as usize,
        g.output.len as usize,
    );
    for c in 0..chans {
        for i in 0..l_in {
            let sum: i64 = covering(i, window as usize, stride as usize, l_out)
                .map(|o| gy.at(c * l_out + o) as i64)
                .sum();
            r.store_div(gx, c * l_in + i, sum, gy.frac(), window as u32, t);
        }
    }
}

/// Index (within the channel) of the first maximum of window `o`.
fn argmax(x: &Tensor<'_>, base: usize, o: usize, w: usize, s: usize) -> usize {
    let start = o * s;
    let mut best = start;
    for i in start + 1..start + w {
        if x.at(base + i) > x.at(base + best) {
            best = i;
        }
    }
    best
}

/// Forward max pooling.
#[allow(clippy::too_many_arguments)]
pub fn max_forward(
    g: &LayerGeometry,
    window: u16,
    stride: u16,
    x: Tensor<'_>,
    y: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) {
    let (chans, l_in, l_out) = (
        g.input.channels as usize,
        g.input.len as usize,
        g.output.len as usize,
    );
    for c in 0..chans {
        for o in 0..l_out {
            let i = argmax(&x, c * l_in, o, window as usize, stride as usize);
            r.store(
                y,
                c * l_out + o,
                x.at(c * l_in + i) as i64,
                x.frac(),
                false,
                t,
            );
        }
    }
}

/// Backward max pooling.
#[allow(clippy::too_many_arguments)]
pub fn max_backward(
    g: &LayerGeometry,
    window: u16,
    stride: u16,
    x: Tensor<'_>,
    gy: Tensor<'_>,
    gx: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    t: &mut Tally,
) {
    let (chans, l_in, l_out) = (
        g.input.channels as usize,
        g.input.len as usize,
        g.output.len as usize,
    );
    let (w, s) = (window as usize, stride as usize);
    for c in 0..chans {
        for i in 0..l_in {
            let sum: i64 = covering(i, w, s, l_out)
                .filter(|&o| argmax(&x, c * l_in, o, w, s) == i)
                .map(|o| gy.at(c * l_out + o) as i64)
                .sum();
            r.store(gx, c * l_in + i, sum, gy.frac(), false, t);
        }
    }
}
