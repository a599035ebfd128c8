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

use crate::features::{STOCHASTIC, TOWARD_ZERO};
use crate::kernel::{Tally, WORD_I32, WORD_I8};
use crate::model::{LayerGeometry, LayerKind};
use crate::num::round::{
    requantize, requantize_div, NearestEven, RoundMode, Shr32, Stochastic, TowardZero,
};
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
        if g == 0 && !(STOCHASTIC && self.mode == Rounding::Stochastic) {
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
                Raw::I8(xs) if WORD_I8 => outer_row(a, xs, g, from_frac, to, mode, rng, tally),
                Raw::I16(xs) => outer_row(a, xs, g, from_frac, to, mode, rng, tally),
                Raw::I32(xs) if WORD_I32 => outer_row(a, xs, g, from_frac, to, mode, rng, tally),
                // Not built: a checked description has no such values.
                _ => {}
            }
            return;
        }
        for i in 0..n {
            self.accumulate(acc, start + i, g * x.at(i) as i64, from_frac, false, tally);
        }
    }

    /// [`Rounder::accumulate_outer`] for every row of an outer product: row `j` of `acc`
    /// (`n_in` values from `j · n_in`) gets `gy[j] · x`, for `j < n_out`. The same values,
    /// counts and draws, with the word of `x` matched once per call.
    #[allow(clippy::too_many_arguments)]
    pub fn accumulate_outer_rows(
        &mut self,
        acc: &mut TensorMut<'_>,
        gy: Tensor<'_>,
        x: Raw<'_>,
        n_out: usize,
        n_in: usize,
        from_frac: u32,
        tally: &mut Tally,
    ) {
        let to = acc.frac();
        let (mode, rng) = (self.mode, &mut *self.rng);
        if let (RawMut::I32(a), true) = (&mut acc.raw, n_in > 0) {
            if let Some(a) = a.get_mut(..n_out * n_in) {
                let rows = Rows {
                    gy,
                    n_in,
                    from_frac,
                    to,
                    mode,
                };
                match x {
                    Raw::I8(xs) if WORD_I8 => rows.run(a, xs, rng, tally),
                    Raw::I16(xs) => rows.run(a, xs, rng, tally),
                    Raw::I32(xs) if WORD_I32 => rows.run(a, xs, rng, tally),
                    // Not built: a checked description has no such values.
                    _ => {}
                }
                return;
            }
        }
        for j in 0..n_out {
            self.accumulate_outer(acc, j * n_in, gy.at(j) as i64, x, n_in, from_frac, tally);
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

/// The rows of [`Rounder::accumulate_outer_rows`] into a 32-bit accumulator.
struct Rows<'g> {
    gy: Tensor<'g>,
    n_in: usize,
    from_frac: u32,
    to: u32,
    mode: Rounding,
}

impl Rows<'_> {
    /// Each row as [`Rounder::accumulate_outer`] adds it: rows with a zero gradient skipped
    /// unless the rounding is stochastic, and then counted in a tally that is dropped.
    fn run<X: Sample>(self, acc: &mut [i32], x: &[X], rng: &mut Rng, tally: &mut Tally) {
        let stochastic = STOCHASTIC && self.mode == Rounding::Stochastic;
        for (j, row) in acc.chunks_exact_mut(self.n_in).enumerate() {
            let g = self.gy.at(j) as i64;
            if g == 0 && !stochastic {
                continue;
            }
            let mut dropped = Tally::default();
            let tally = if g == 0 { &mut dropped } else { &mut *tally };
            outer_row(row, x, g, self.from_frac, self.to, self.mode, rng, tally);
        }
    }
}

/// One row of an outer-product accumulation into a 32-bit accumulator:
/// `acc[i] += round(g · x[i])` for `i < n`, the product rescaled from `from_frac` to
/// `to_frac` fraction bits. Decides once per row: when every product `g · x[i]` fits in 30 bits
/// and the rescale drops 1 to 30 bits (the usual case), a loop compiled for this input word and
/// rounding mode forms the products in `i32`; anything else takes [`outer_row_exact`]. Both
/// give the same values, saturations and random draws.
#[allow(clippy::too_many_arguments)]
fn outer_row<X: Sample>(
    acc: &mut [i32],
    x: &[X],
    g: i64,
    from_frac: u32,
    to_frac: u32,
    mode: Rounding,
    rng: &mut Rng,
    tally: &mut Tally,
) {
    // |x| ≤ 2^(b−1) for a b-bit word, so |g · x| ≤ 2^30 when |g| ≤ 2^30 / 2^(b−1).
    let fits = g.unsigned_abs() <= (1u64 << 30) >> (X::WORD.bits() - 1);
    let shift = from_frac.checked_sub(to_frac).and_then(Shr32::new);
    let (Some(sh), true) = (shift, fits) else {
        return outer_row_exact(acc, X::raw(x), g, from_frac, to_frac, mode, rng, tally);
    };
    let g = g as i32;
    let (sats, high) = match mode {
        Rounding::TowardZero if TOWARD_ZERO => outer_row_fast::<X, TowardZero>(acc, x, g, sh, rng),
        Rounding::Stochastic if STOCHASTIC => outer_row_fast::<X, Stochastic>(acc, x, g, sh, rng),
        // Nearest-even, and any mode this build leaves out (see `crate::features`).
        _ => outer_row_fast::<X, NearestEven>(acc, x, g, sh, rng),
    };
    tally.add_counts(acc.len().min(x.len()) as u32, sats, high);
}

/// The hot loop of [`outer_row`]: products in `i32` (`|g · x| ≤ 2^30`, checked by the caller),
/// one rounding, a checked add with the saturation on the cold path, and the counts kept in
/// registers. Returns (saturations, values in the outer half).
#[inline(never)]
fn outer_row_fast<X: Sample, M: RoundMode>(
    acc: &mut [i32],
    x: &[X],
    g: i32,
    sh: Shr32,
    rng: &mut Rng,
) -> (u32, u32) {
    let (mut sats, mut high) = (0u32, 0u32);
    for (a, xi) in acc.iter_mut().zip(x.iter()) {
        let add = M::shr32(g * xi.to_i32(), sh, rng);
        let q = match a.checked_add(add) {
            Some(q) => q,
            None => {
                sats += 1;
                saturated_i32(add)
            }
        };
        *a = q;
        // Outer half of an i32 (|q| ≥ 2^30, saturated values included): q + 2^30 ∉ [0, 2^31).
        high += (q.wrapping_add(1 << 30) as u32) >> 31;
    }
    (sats, high)
}

/// The end of the `i32` range an overflowing add of `add` went past.
#[cold]
#[inline(never)]
fn saturated_i32(add: i32) -> i32 {
    if add < 0 {
        i32::MIN
    } else {
        i32::MAX
    }
}

/// The row kernel in exact 64-bit arithmetic for any operands and shifts: the reference the
/// fast loop is tested against, and the path for wide words or rescales that add bits.
#[allow(clippy::too_many_arguments)]
#[cold]
#[inline(never)]
pub fn outer_row_exact(
    acc: &mut [i32],
    x: Raw<'_>,
    g: i64,
    from_frac: u32,
    to_frac: u32,
    mode: Rounding,
    rng: &mut Rng,
    tally: &mut Tally,
) {
    let (mut sats, mut high) = (0u32, 0u32);
    let n = acc.len().min(x.len());
    for (i, a) in acc.iter_mut().take(n).enumerate() {
        let (add, s1) =
            crate::num::round::rescale(g * x.at(i) as i64, from_frac, to_frac, mode, rng);
        let (sum, s2) = crate::kernel::add_sat(*a as i64, add);
        let (q, s3) = crate::num::Word::I32.saturate(sum);
        *a = q;
        let sat = s1 || s2 || s3;
        sats += sat as u32;
        high += (sat || crate::kernel::outer_half(q, crate::num::Word::I32)) as u32;
    }
    tally.add_counts(acc.len().min(x.len()) as u32, sats, high);
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

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::{any, prop_oneof, proptest, Just, ProptestConfig, Strategy};

    /// The row kernel against its exact 64-bit reference: same accumulator, same counts, same
    /// generator state, for every word, mode and shift, with operands drawn from the whole
    /// range and from near the fast path's bounds.
    fn same_row<X: Sample + core::fmt::Debug>(
        acc: &[i32],
        x: &[X],
        g: i64,
        from: u32,
        to: u32,
        mode: Rounding,
        seed: u64,
    ) {
        let (mut a1, mut a2) = (acc.to_vec(), acc.to_vec());
        let (mut r1, mut r2) = (Rng::new(seed), Rng::new(seed));
        let (mut t1, mut t2) = (Tally::default(), Tally::default());
        outer_row(&mut a1, x, g, from, to, mode, &mut r1, &mut t1);
        outer_row_exact(&mut a2, X::raw(x), g, from, to, mode, &mut r2, &mut t2);
        assert_eq!(a1, a2, "g {g}, {from} -> {to}, {mode:?}, x {x:?}");
        assert_eq!(t1, t2);
        assert_eq!(r1, r2);
    }

    fn gradient() -> impl Strategy<Value = i64> {
        prop_oneof![
            any::<i16>().prop_map(|v| v as i64),
            any::<i32>().prop_map(|v| v as i64),
            (-(1i64 << 23) - 2..(1i64 << 23) + 2),
            Just(1i64 << 15),
            Just(-(1i64 << 15) - 1),
        ]
    }

    fn mode() -> impl Strategy<Value = Rounding> {
        prop_oneof![
            Just(Rounding::NearestEven),
            Just(Rounding::TowardZero),
            Just(Rounding::Stochastic)
        ]
    }

    fn accum() -> impl Strategy<Value = i32> {
        prop_oneof![
            any::<i32>(),
            (i32::MAX - 4096..=i32::MAX),
            (i32::MIN..i32::MIN + 4096),
            (-1000..1000),
        ]
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(2000))]

        #[test]
        fn fast_row_equals_exact_row(
            acc in proptest::collection::vec(accum(), 0..12),
            x8 in proptest::collection::vec(any::<i8>(), 12),
            x16 in proptest::collection::vec(any::<i16>(), 12),
            x32 in proptest::collection::vec(any::<i32>(), 12),
            g in gradient(),
            from in 0u32..63,
            to in 0u32..32,
            mode in mode(),
            seed in any::<u64>(),
        ) {
            same_row(&acc, &x8, g, from, to, mode, seed);
            same_row(&acc, &x16, g, from, to, mode, seed);
            same_row(&acc, &x32, g, from, to, mode, seed);
            // The usual case: a shift of a few bits.
            same_row(&acc, &x16, g, to + 2, to, mode, seed);
        }
    }
}
