//! Fixed-point layers: forward and backward of each layer kind, and the losses.
//!
//! Every function here trusts the shapes it is given: they come from a checked
//! [`crate::plan::Plan`]. Out-of-range indices cannot panic anyway: reads past the end give 0
//! and writes past the end are dropped (see [`crate::num::RawMut::put`]).
//!
//! Each layer does all its arithmetic exactly in wide integers and rounds once, when it
//! writes a value into its output format, with the rounding of the value's role
//! (activations forward, gradients backward). That rounding and any saturation are counted in
//! a [`Tally`].

pub mod act;
pub mod conv;
pub mod dense;
pub mod loss;
pub mod pool;

use crate::kernel::Tally;
use crate::model::{LayerGeometry, LayerKind};
use crate::num::round::{requantize, requantize_div};
use crate::num::{QFormat, Raw, RawMut, Rng, Rounding, Sample};

/// A read-only tensor: raw values and their format.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Tensor<'a> {
    /// The values.
    pub raw: Raw<'a>,
    /// Their format.
    pub fmt: QFormat,
}

/// A writable tensor: raw values and their format.
#[derive(Debug)]
pub struct TensorMut<'a> {
    /// The values.
    pub raw: RawMut<'a>,
    /// Their format.
    pub fmt: QFormat,
}

impl<'a> Tensor<'a> {
    /// An empty tensor.
    pub const EMPTY: Tensor<'static> = Tensor {
        raw: Raw::EMPTY,
        fmt: QFormat::Q0_7,
    };

    /// Value `i` as raw `i32` (0 past the end).
    #[inline]
    pub fn at(&self, i: usize) -> i32 {
        self.raw.at(i)
    }

    /// Fraction bits.
    #[inline]
    pub fn frac(&self) -> u32 {
        self.fmt.frac as u32
    }
}

impl TensorMut<'_> {
    /// A read-only view.
    pub fn view(&self) -> Tensor<'_> {
        Tensor {
            raw: self.raw.as_raw(),
            fmt: self.fmt,
        }
    }

    /// Fraction bits.
    #[inline]
    pub fn frac(&self) -> u32 {
        self.fmt.frac as u32
    }
}

/// A rounding mode with the generator stochastic rounding draws from.
pub struct Rounder<'r> {
    /// The mode.
    pub mode: Rounding,
    /// The generator.
    pub rng: &'r mut Rng,
}

impl Rounder<'_> {
    /// Writes `v` (with `from_frac` fraction bits) into `out[i]`, rounded and saturated.
    /// `sat_before` says the exact value had already saturated. Counts the write in `tally`.
    #[inline]
    pub fn store(
        &mut self,
        out: &mut TensorMut<'_>,
        i: usize,
        v: i64,
        from_frac: u32,
        sat_before: bool,
        tally: &mut Tally,
    ) {
        let (q, sat) = requantize(v, from_frac, out.fmt, self.mode, self.rng);
        out.raw.put(i, q);
        tally.note_value(q, out.fmt.word, sat || sat_before);
    }

    /// Adds the outer-product row `g · x[0..n]` into `acc[start..start + n]`, each product
    /// rounded to the accumulator's format and each sum saturated, as [`Rounder::accumulate`]
    /// does for one value, with the word dispatch done once per row. A zero `g` adds exact
    /// zeros and changes nothing: such a row is skipped unless the rounding is stochastic
    /// (whose draws must not depend on the data), and in every mode it is not counted, so the
    /// accumulator's tally (writes, saturations, values in the outer half) covers the rows
    /// that add something, whatever the rounding.
    #[allow(clippy::too_many_arguments)]
    pub fn accumulate_outer(
        &mut self,
        acc: &mut TensorMut<'_>,
        start: usize,
        g: i64,
        x: Raw<'_>,
        n: usize,
        from_frac: u32,
        tally: &mut Tally,
    ) {
        if g == 0 && self.mode != Rounding::Stochastic {
            return;
        }
        // A zero row still runs under stochastic rounding (for its draws) into a tally that
        // is dropped.
        let mut dropped = Tally::default();
        let tally = if g == 0 { &mut dropped } else { tally };
        let to = acc.frac();
        let (mode, rng) = (self.mode, &mut *self.rng);
        // The typed loop serves the usual 32-bit accumulators (three copies, one per input
        // word); narrower accumulators take the general path, value by value, to keep the
        // engine's code small.
        if let RawMut::I32(a) = &mut acc.raw {
            let Some(a) = a.get_mut(start..start + n) else {
                return;
            };
            match x {
                Raw::I8(xs) => outer_row(a, xs, g, from_frac, to, mode, rng, tally),
                Raw::I16(xs) => outer_row(a, xs, g, from_frac, to, mode, rng, tally),
                Raw::I32(xs) => outer_row(a, xs, g, from_frac, to, mode, rng, tally),
            }
            return;
        }
        for i in 0..n {
            self.accumulate(acc, start + i, g * x.at(i) as i64, from_frac, false, tally);
        }
    }

    /// Like [`Rounder::store`] for a 128-bit value (the rare case of a bias aligned to a very
    /// fine scale).
    #[inline(never)]
    pub fn store_wide(
        &mut self,
        out: &mut TensorMut<'_>,
        i: usize,
        v: i128,
        from_frac: u32,
        sat_before: bool,
        tally: &mut Tally,
    ) {
        let (q, sat) =
            crate::num::round::requantize_wide(v, from_frac, out.fmt, self.mode, self.rng);
        out.raw.put(i, q);
        tally.note_value(q, out.fmt.word, sat || sat_before);
    }

    /// Like [`Rounder::store`] for `v / den`, rounded once.
    #[inline]
    pub fn store_div(
        &mut self,
        out: &mut TensorMut<'_>,
        i: usize,
        v: i64,
        from_frac: u32,
        den: u32,
        tally: &mut Tally,
    ) {
        let (q, sat) = requantize_div(v, from_frac, den, out.fmt, self.mode, self.rng);
        out.raw.put(i, q);
        tally.note_value(q, out.fmt.word, sat);
    }

    /// Adds `v` (with `from_frac` fraction bits) into the accumulator `acc[i]`: the addend is
    /// rounded to the accumulator's format, the sum saturates to its word. `sat_before` says
    /// the exact addend had already saturated. Counts the add in `tally`.
    #[inline]
    pub fn accumulate(
        &mut self,
        acc: &mut TensorMut<'_>,
        i: usize,
        v: i64,
        from_frac: u32,
        sat_before: bool,
        tally: &mut Tally,
    ) {
        let (add, sat_shift) =
            crate::num::round::rescale(v, from_frac, acc.frac(), self.mode, self.rng);
        let (sum, sat_add) = crate::kernel::add_sat(acc.raw.at(i) as i64, add);
        let (q, sat_word) = acc.fmt.word.saturate(sum);
        acc.raw.put(i, q);
        tally.note_value(
            q,
            acc.fmt.word,
            sat_before || sat_shift || sat_add || sat_word,
        );
    }
}

/// One row of an outer-product accumulation, typed: `acc[start + i] += round(g · x[i])` for
/// `i < n`, the product rescaled from `from_frac` to the accumulator's fraction bits.
#[allow(clippy::too_many_arguments)]
#[inline(never)]
fn outer_row<A: Sample, X: Sample>(
    acc: &mut [A],
    x: &[X],
    g: i64,
    from_frac: u32,
    to_frac: u32,
    mode: Rounding,
    rng: &mut Rng,
    tally: &mut Tally,
) {
    let (mut sats, mut high) = (0u32, 0u32);
    for (a, xi) in acc.iter_mut().zip(x.iter()) {
        let (add, s1) =
            crate::num::round::rescale(g * xi.to_i32() as i64, from_frac, to_frac, mode, rng);
        let (sum, s2) = crate::kernel::add_sat(a.to_i32() as i64, add);
        let (q, s3) = A::WORD.saturate(sum);
        *a = A::from_i32_in_range(q);
        let sat = s1 || s2 || s3;
        sats += sat as u32;
        high += (sat || crate::kernel::outer_half(q, A::WORD)) as u32;
    }
    tally.values = tally.values.saturating_add(acc.len().min(x.len()) as u32);
    tally.saturations = tally.saturations.saturating_add(sats);
    tally.high = tally.high.saturating_add(high);
}

/// The parameters of a layer as read by forward and backward.
#[derive(Clone, Copy, Debug)]
pub struct Params<'a> {
    /// Weights.
    pub w: Tensor<'a>,
    /// Bias.
    pub b: Tensor<'a>,
}

/// Where backward writes, and what it counts.
pub struct BackOut<'a, 'b> {
    /// Gradient with respect to the layer input, if an earlier layer needs it.
    pub gx: Option<&'a mut TensorMut<'b>>,
    /// Weight-gradient accumulator, if the weights train.
    pub acc_w: Option<&'a mut TensorMut<'b>>,
    /// Bias-gradient accumulator, if the bias trains.
    pub acc_b: Option<&'a mut TensorMut<'b>>,
}

/// Tallies of one backward pass of one layer.
#[derive(Clone, Copy, Debug, Default)]
pub struct BackTally {
    /// Writes into the input gradient.
    pub gx: Tally,
    /// Adds into the weight accumulator.
    pub acc_w: Tally,
    /// Adds into the bias accumulator.
    pub acc_b: Tally,
}

/// Forward pass of one layer: `y = layer(x)`.
pub fn forward(
    kind: LayerKind,
    g: &LayerGeometry,
    p: Params<'_>,
    x: Tensor<'_>,
    y: &mut TensorMut<'_>,
    r: &mut Rounder<'_>,
    tally: &mut Tally,
) {
    match kind {
        LayerKind::Dense { .. } => dense::forward(g, p, x, y, r, tally),
        // The `cfg!` guards leave a kind that is not built without code; the plan rejects its
        // descriptions (`LayerFault::NotBuilt`), so those arms below are never reached.
        LayerKind::Conv1d { kernel, stride, .. } if cfg!(feature = "conv1d") => {
            conv::forward(g, kernel, stride, p, x, y, r, tally)
        }
        LayerKind::AvgPool1d { window, stride } if cfg!(feature = "pool1d") => {
            pool::avg_forward(g, window, stride, x, y, r, tally)
        }
        LayerKind::MaxPool1d { window, stride } if cfg!(feature = "pool1d") => {
            pool::max_forward(g, window, stride, x, y, r, tally)
        }
        LayerKind::Conv1d { .. } | LayerKind::AvgPool1d { .. } | LayerKind::MaxPool1d { .. } => {}
        _ => act::forward(kind, g.input.size() as usize, x, y, r, tally),
    }
}

/// Backward pass of one layer. `x` is the layer's input and `y` its output (each empty when
/// the plan did not keep it because this layer does not need it), `gy` the loss gradient of
/// the output.
#[allow(clippy::too_many_arguments)]
pub fn backward(
    kind: LayerKind,
    g: &LayerGeometry,
    p: Params<'_>,
    x: Tensor<'_>,
    y: Tensor<'_>,
    gy: Tensor<'_>,
    out: BackOut<'_, '_>,
    r: &mut Rounder<'_>,
    t: &mut BackTally,
) {
    match kind {
        LayerKind::Dense { .. } => dense::backward(g, p, x, gy, out, r, t),
        LayerKind::Conv1d { kernel, stride, .. } if cfg!(feature = "conv1d") => {
            conv::backward(g, kernel, stride, p, x, gy, out, r, t)
        }
        LayerKind::AvgPool1d { window, stride } if cfg!(feature = "pool1d") => {
            if let Some(gx) = out.gx {
                pool::avg_backward(g, window, stride, gy, gx, r, &mut t.gx);
            }
        }
        LayerKind::MaxPool1d { window, stride } if cfg!(feature = "pool1d") => {
            if let Some(gx) = out.gx {
                pool::max_backward(g, window, stride, x, gy, gx, r, &mut t.gx);
            }
        }
        // Not built (see `forward`): never reached.
        LayerKind::Conv1d { .. } | LayerKind::AvgPool1d { .. } | LayerKind::MaxPool1d { .. } => {}
        _ => {
            if let Some(gx) = out.gx {
                act::backward(kind, g.input.size() as usize, x, y, gy, gx, r, &mut t.gx);
            }
        }
    }
}
