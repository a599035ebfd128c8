//! Fully connected layer: `y = W x + b`, weights `[units][inputs]` row-major.
//!
//! Forward: each output is the exact dot product (fraction bits `f_w + f_x`) plus the bias
//! aligned exactly to the wider of the two scales, rounded once into the output format.
//! Backward: `∂L/∂x_i = Σ_j W_ji g_j` (exact, rounded once), `∂L/∂W_ji += g_j x_i` and
//! `∂L/∂b_j += g_j`, each rounded into the accumulator format.

use super::{BackOut, BackTally, Params, Rounder, Tensor, TensorMut};
use crate::kernel::{dot, outer_half, Tally, WORD_I32, WORD_I8};
use crate::model::LayerGeometry;
use crate::num::round::{
    requantize, requantize_wide, shift_left_saturating, NearestEven, RoundMode, Shr64,
};
use crate::num::{QFormat, Raw, RawMut, Rng, Rounding, Sample, Word};

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
    let (q, sat) = with_bias(sum, fs, bias, fb, y.fmt, r.mode, r.rng);
    y.raw.put(j, q);
    tally.note_value(q, y.fmt.word, sat || sat_before);
}

/// The value [`store_with_bias`] stores, and whether it saturated.
#[inline(never)]
fn with_bias(
    sum: i64,
    fs: u32,
    bias: i32,
    fb: u32,
    out: QFormat,
    mode: Rounding,
    rng: &mut Rng,
) -> (i32, bool) {
    let f = fs.max(fb);
    let (s, o1) = shift_left_saturating(sum, f - fs);
    let (b, o2) = shift_left_saturating(bias as i64, f - fb);
    match (o1 || o2, s.checked_add(b)) {
        (false, Some(v)) => requantize(v, f, out, mode, rng),
        _ => {
            let v = ((sum as i128) << (f - fs)) + ((bias as i128) << (f - fb));
            requantize_wide(v, f, out, mode, rng)
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
    if let Some(rows) = Rows::new(fs, p.b.frac(), y.fmt, r.mode, n_out, y.raw.len()) {
        let fmt = y.fmt;
        match &mut y.raw {
            RawMut::I8(out) if WORD_I8 => rows.run(out, fmt, p, x, n_in, r.rng, tally),
            RawMut::I16(out) => rows.run(out, fmt, p, x, n_in, r.rng, tally),
            RawMut::I32(out) if WORD_I32 => rows.run(out, fmt, p, x, n_in, r.rng, tally),
            // Not built: a checked description has no such values.
            _ => {}
        }
        return;
    }
    for j in 0..n_out {
        let (d, sat_dot) = dot(p.w.raw, j * n_in, 1, x.raw, 0, 1, n_in);
        store_with_bias(r, y, j, d, fs, p.b.at(j), p.b.frac(), sat_dot, tally);
    }
}

/// The input gradient `∂L/∂x = Wᵀ g` with nearest-even rounding worked out once per call:
/// the same values, counts and draws as [`Rounder::store`] after each column's dot product.
#[derive(Clone, Copy, Debug)]
struct Cols {
    /// Fraction bits of the products.
    f: u32,
    /// The rounding of a sum to the gradient's format.
    shift: Shr64,
    n_in: usize,
    n_out: usize,
}

impl Cols {
    #[inline(never)]
    #[allow(clippy::too_many_arguments)]
    fn run<O: Sample>(
        self,
        out: &mut [O],
        fmt: QFormat,
        w: Raw<'_>,
        gy: Raw<'_>,
        rng: &mut Rng,
        tally: &mut Tally,
    ) {
        const BOUND: i64 = 1 << 62;
        let (mut sats, mut high) = (0u32, 0u32);
        for (i, o) in out.iter_mut().enumerate() {
            let (d, sat_dot) = dot(w, i, self.n_in, gy, 0, 1, self.n_out);
            let (q, sat) = if (-BOUND..=BOUND).contains(&d) {
                O::WORD.saturate_narrow(NearestEven::shr64(d, self.shift, rng))
            } else {
                requantize(d, self.f, fmt, Rounding::NearestEven, rng)
            };
            *o = O::from_i32_in_range(q);
            let sat = sat || sat_dot;
            sats += sat as u32;
            high += (sat || outer_half(q, O::WORD)) as u32;
        }
        tally.add_counts(out.len() as u32, sats, high);
    }
}

/// `acc[j] += g[j] · 2^k` for every `j`, saturated to the 32-bit word: the bias gradients'
/// accumulation when the accumulator is `k ≤ 31` bits finer than the gradient (the shift is
/// exact, so no rounding and no draws). As in [`Rounder::accumulate`], a zero gradient adds
/// nothing and is not counted.
fn bias_row<G: Sample>(acc: &mut [i32], g: &[G], k: u32, tally: &mut Tally) {
    let (mut values, mut sats, mut high) = (0u32, 0u32, 0u32);
    for (a, &g) in acc.iter_mut().zip(g) {
        let g = g.to_i32();
        if g == 0 {
            continue;
        }
        // |g · 2^k| < 2^62 and |a| ≤ 2^31: the sum is exact in 64 bits.
        let (q, sat) = Word::I32.saturate_narrow(*a as i64 + ((g as i64) << k));
        *a = q;
        values += 1;
        sats += sat as u32;
        high += (sat || outer_half(q, Word::I32)) as u32;
    }
    tally.add_counts(values, sats, high);
}

/// The usual forward pass, with the output's rounding worked out once per call: nearest-even
/// rounding, a bias no finer than the products (aligned by a left shift of at most 31 bits,
/// exact in 64 bits) and an output 1 to 62 bits coarser than the products.
#[derive(Clone, Copy, Debug)]
struct Rows {
    /// Fraction bits of the products.
    fs: u32,
    /// Fraction bits of the bias, and its alignment to the products.
    fb: u32,
    align: u32,
    /// The rounding of a sum to the output.
    shift: Shr64,
}

impl Rows {
    fn new(
        fs: u32,
        fb: u32,
        out: QFormat,
        mode: Rounding,
        n_out: usize,
        len: usize,
    ) -> Option<Rows> {
        let align = fs.checked_sub(fb).filter(|&a| a <= 31)?;
        let shift = Shr64::new(fs.checked_sub(out.frac as u32)?)?;
        (mode == Rounding::NearestEven && n_out == len).then_some(Rows {
            fs,
            fb,
            align,
            shift,
        })
    }

    /// Every output of the layer: the same values, counts and draws as [`store_with_bias`]
    /// after each row's dot product.
    #[inline(never)]
    #[allow(clippy::too_many_arguments)]
    fn run<O: Sample>(
        self,
        out: &mut [O],
        fmt: QFormat,
        p: Params<'_>,
        x: Tensor<'_>,
        n_in: usize,
        rng: &mut Rng,
        tally: &mut Tally,
    ) {
        const BOUND: i64 = 1 << 62;
        let (mut sats, mut high) = (0u32, 0u32);
        for (j, o) in out.iter_mut().enumerate() {
            let (d, sat_dot) = dot(p.w.raw, j * n_in, 1, x.raw, 0, 1, n_in);
            let bias = p.b.at(j);
            // |bias · 2^align| < 2^62: the sum overflows only for a dot product beyond 2^62,
            // which (with a sum beyond 2^62) takes the general path.
            let (q, sat) = match d.checked_add((bias as i64) << self.align) {
                Some(v) if (-BOUND..=BOUND).contains(&v) => {
                    O::WORD.saturate_narrow(NearestEven::shr64(v, self.shift, rng))
                }
                _ => with_bias(d, self.fs, bias, self.fb, fmt, Rounding::NearestEven, rng),
            };
            *o = O::from_i32_in_range(q);
            let sat = sat || sat_dot;
            sats += sat as u32;
            high += (sat || outer_half(q, O::WORD)) as u32;
        }
        tally.add_counts(out.len() as u32, sats, high);
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
        let shift = f.checked_sub(gx.frac()).and_then(Shr64::new);
        if let (Some(shift), Rounding::NearestEven, true) = (shift, r.mode, gx.raw.len() == n_in) {
            let cols = Cols {
                f,
                shift,
                n_in,
                n_out,
            };
            let fmt = gx.fmt;
            match &mut gx.raw {
                RawMut::I8(o) if WORD_I8 => cols.run(o, fmt, p.w.raw, gy.raw, r.rng, &mut t.gx),
                RawMut::I16(o) => cols.run(o, fmt, p.w.raw, gy.raw, r.rng, &mut t.gx),
                RawMut::I32(o) if WORD_I32 => cols.run(o, fmt, p.w.raw, gy.raw, r.rng, &mut t.gx),
                // Not built: a checked description has no such values.
                _ => {}
            }
        } else {
            for i in 0..n_in {
                let (d, sat) = dot(p.w.raw, i, n_in, gy.raw, 0, 1, n_out);
                r.store(gx, i, d, f, sat, &mut t.gx);
            }
        }
    }
    if let Some(acc) = out.acc_w {
        let f = gy.frac() + x.frac();
        r.accumulate_outer_rows(acc, gy, x.raw, n_out, n_in, f, &mut t.acc_w);
    }
    if let Some(acc) = out.acc_b {
        let (fg, fa) = (gy.frac(), acc.frac());
        // The usual case: a 32-bit accumulator at least as fine as the gradient, so each
        // gradient enters it exactly, by a left shift of at most 31 bits.
        let shift = fa.checked_sub(fg).filter(|&k| k <= 31);
        if let (Some(k), RawMut::I32(a)) = (shift, &mut acc.raw) {
            if let Some(a) = a.get_mut(..n_out) {
                match gy.raw {
                    Raw::I8(g) if WORD_I8 => bias_row(a, g, k, &mut t.acc_b),
                    Raw::I16(g) => bias_row(a, g, k, &mut t.acc_b),
                    Raw::I32(g) if WORD_I32 => bias_row(a, g, k, &mut t.acc_b),
                    // Not built: a checked description has no such values.
                    _ => {}
                }
                return;
            }
        }
        // As for the weight rows: a zero gradient adds nothing and is not counted.
        let mut dropped = Tally::default();
        for j in 0..n_out {
            let gj = gy.at(j) as i64;
            let tally = if gj == 0 { &mut dropped } else { &mut t.acc_b };
            r.accumulate(acc, j, gj, gy.frac(), false, tally);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::layer::BackTally;
    use crate::model::Shape;
    use crate::num::{Raw, Word};
    use proptest::prelude::{any, prop_oneof, proptest, Just, ProptestConfig, Strategy};

    fn word() -> impl Strategy<Value = Word> {
        prop_oneof![Just(Word::I8), Just(Word::I16), Just(Word::I32)]
    }

    fn raw(word: Word, v: &[i32]) -> (Vec<i8>, Vec<i16>, Vec<i32>) {
        let cut = |x: i32| word.saturate(x as i64 >> (32 - word.bits())).0;
        (
            v.iter().map(|&x| cut(x) as i8).collect(),
            v.iter().map(|&x| cut(x) as i16).collect(),
            v.iter().map(|&x| cut(x)).collect(),
        )
    }

    fn view<'a>(word: Word, r: &'a (Vec<i8>, Vec<i16>, Vec<i32>)) -> Raw<'a> {
        match word {
            Word::I8 => Raw::I8(&r.0),
            Word::I16 => Raw::I16(&r.1),
            Word::I32 => Raw::I32(&r.2),
        }
    }

    /// The geometry of a dense layer from `n_in` inputs to `n_out` units.
    fn geometry(n_in: usize, n_out: usize) -> LayerGeometry {
        LayerGeometry {
            input: Shape::vector(n_in as u16),
            output: Shape::vector(n_out as u16),
            weights: (n_in * n_out) as u32,
            biases: n_out as u32,
            macs: (n_in * n_out) as u32,
        }
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(1500))]

        /// The forward pass (its per-call row loop where it applies) against the value-by-value
        /// store it replaces: same outputs, counts and generator state, over random words,
        /// formats, modes and operands.
        #[test]
        fn forward_equals_value_by_value_store(
            (ww, xw, bw, yw) in (word(), word(), word(), word()),
            (fw, fx, fb, fy) in (0u8..=31, 0u8..=31, 0u8..=31, 0u8..=31),
            n_in in 1usize..6,
            n_out in 1usize..5,
            vals in proptest::collection::vec(any::<i32>(), 40),
            mode in prop_oneof![Just(Rounding::NearestEven), Just(Rounding::Stochastic)],
            seed in any::<u64>(),
        ) {
            let fmt = |w: Word, f: u8| QFormat::new_unchecked(w, f.min(w.bits() as u8 - 1));
            let (wf, xf, bf, yf) = (fmt(ww, fw), fmt(xw, fx), fmt(bw, fb), fmt(yw, fy));
            let w = raw(ww, &vals[..n_in * n_out]);
            let x = raw(xw, &vals[20..20 + n_in]);
            let b = raw(bw, &vals[30..30 + n_out]);
            let p = Params {
                w: Tensor { raw: view(ww, &w), fmt: wf },
                b: Tensor { raw: view(bw, &b), fmt: bf },
            };
            let x = Tensor { raw: view(xw, &x), fmt: xf };
            let g = geometry(n_in, n_out);
            let run = |fast: bool| {
                let mut words = [0u32; 8];
                let mut y = TensorMut {
                    raw: RawMut::from_words(&mut words, yw, n_out).unwrap(),
                    fmt: yf,
                };
                let (mut tally, mut rng) = (Tally::default(), Rng::new(seed));
                let mut r = Rounder { mode, rng: &mut rng };
                if fast {
                    forward(&g, p, x, &mut y, &mut r, &mut tally);
                } else {
                    let fs = p.w.frac() + x.frac();
                    for j in 0..n_out {
                        let (d, sat) = dot(p.w.raw, j * n_in, 1, x.raw, 0, 1, n_in);
                        store_with_bias(&mut r, &mut y, j, d, fs, p.b.at(j), p.b.frac(), sat, &mut tally);
                    }
                }
                let out: Vec<i32> = (0..n_out).map(|j| y.raw.at(j)).collect();
                (out, tally, rng)
            };
            assert_eq!(run(true), run(false));
        }

        /// The input gradient of the backward pass against a value-by-value store after each
        /// column's dot product, over random words, formats, modes and operands.
        #[test]
        fn input_gradient_equals_value_by_value_store(
            (ww, gw, ow) in (word(), word(), word()),
            (fw, fg, fo) in (0u8..=31, 0u8..=31, 0u8..=31),
            n_in in 1usize..6,
            n_out in 1usize..5,
            vals in proptest::collection::vec(any::<i32>(), 40),
            mode in prop_oneof![Just(Rounding::NearestEven), Just(Rounding::Stochastic)],
            seed in any::<u64>(),
        ) {
            let fmt = |w: Word, f: u8| QFormat::new_unchecked(w, f.min(w.bits() as u8 - 1));
            let w = raw(ww, &vals[..n_in * n_out]);
            let gy = raw(gw, &vals[30..30 + n_out]);
            let p = Params {
                w: Tensor { raw: view(ww, &w), fmt: fmt(ww, fw) },
                b: Tensor::EMPTY,
            };
            let gy = Tensor { raw: view(gw, &gy), fmt: fmt(gw, fg) };
            let g = geometry(n_in, n_out);
            let run = |whole: bool| {
                let mut words = [0u32; 8];
                let mut gx = TensorMut {
                    raw: RawMut::from_words(&mut words, ow, n_in).unwrap(),
                    fmt: fmt(ow, fo),
                };
                let mut rng = Rng::new(seed);
                let mut r = Rounder { mode, rng: &mut rng };
                let mut t = BackTally::default();
                if whole {
                    let out = BackOut { gx: Some(&mut gx), acc_w: None, acc_b: None };
                    backward(&g, p, Tensor::EMPTY, gy, out, &mut r, &mut t);
                } else {
                    let f = p.w.frac() + gy.frac();
                    for i in 0..n_in {
                        let (d, sat) = dot(p.w.raw, i, n_in, gy.raw, 0, 1, n_out);
                        r.store(&mut gx, i, d, f, sat, &mut t.gx);
                    }
                }
                let out: Vec<i32> = (0..n_in).map(|i| gx.raw.at(i)).collect();
                (out, t.gx, rng)
            };
            assert_eq!(run(true), run(false));
        }

        /// The rows of a weight-gradient outer product in one call against one call per row,
        /// over random words, formats, modes and operands (zero gradients included).
        #[test]
        fn outer_rows_equal_row_by_row(
            (gw, xw) in (word(), word()),
            (fg, fx, fa) in (0u8..=31, 0u8..=31, 0u8..=31),
            n_in in 0usize..6,
            n_out in 1usize..5,
            vals in proptest::collection::vec(prop_oneof![any::<i32>(), Just(0), -50i32..50], 16),
            acc in proptest::collection::vec(any::<i32>(), 30),
            mode in prop_oneof![Just(Rounding::NearestEven), Just(Rounding::TowardZero), Just(Rounding::Stochastic)],
            seed in any::<u64>(),
        ) {
            let fmt = |w: Word, f: u8| QFormat::new_unchecked(w, f.min(w.bits() as u8 - 1));
            let g = raw(gw, &vals[..n_out]);
            let g = Tensor { raw: view(gw, &g), fmt: fmt(gw, fg) };
            let x = raw(xw, &vals[8..8 + n_in]);
            let x = Tensor { raw: view(xw, &x), fmt: fmt(xw, fx) };
            let f = g.frac() + x.frac();
            let run = |whole: bool| {
                let mut a = acc.clone();
                let mut t = TensorMut { raw: RawMut::I32(&mut a), fmt: fmt(Word::I32, fa) };
                let (mut tally, mut rng) = (Tally::default(), Rng::new(seed));
                let mut r = Rounder { mode, rng: &mut rng };
                if whole {
                    r.accumulate_outer_rows(&mut t, g, x.raw, n_out, n_in, f, &mut tally);
                } else {
                    for j in 0..n_out {
                        r.accumulate_outer(&mut t, j * n_in, g.at(j) as i64, x.raw, n_in, f, &mut tally);
                    }
                }
                (a, tally, rng)
            };
            assert_eq!(run(true), run(false));
        }

        /// The bias row against `Rounder::accumulate` value by value (zero gradients not
        /// counted), over random gradients, accumulators and shifts up to 31 bits.
        #[test]
        fn bias_row_equals_accumulate(
            gw in word(),
            vals in proptest::collection::vec(prop_oneof![any::<i32>(), Just(0)], 8),
            acc in proptest::collection::vec(prop_oneof![any::<i32>(), -1000i32..1000], 8),
            fg in 0u8..=31,
            k in 0u32..=31,
        ) {
            let g = raw(gw, &vals);
            let g = Tensor { raw: view(gw, &g), fmt: QFormat::new_unchecked(gw, fg.min(gw.bits() as u8 - 1)) };
            let fa = (g.frac() + k).min(31);
            let k = fa - g.frac();
            let mut fast = acc.clone();
            let mut t_fast = Tally::default();
            match g.raw {
                Raw::I8(s) => bias_row(&mut fast, s, k, &mut t_fast),
                Raw::I16(s) => bias_row(&mut fast, s, k, &mut t_fast),
                Raw::I32(s) => bias_row(&mut fast, s, k, &mut t_fast),
            }
            let mut slow = acc.clone();
            let mut t_slow = Tally::default();
            let mut rng = Rng::new(1);
            let mut r = Rounder { mode: Rounding::Stochastic, rng: &mut rng };
            let mut a = TensorMut { raw: RawMut::I32(&mut slow), fmt: QFormat::new_unchecked(Word::I32, fa as u8) };
            for j in 0..8 {
                let gj = g.at(j) as i64;
                let mut dropped = Tally::default();
                let tally = if gj == 0 { &mut dropped } else { &mut t_slow };
                r.accumulate(&mut a, j, gj, g.frac(), false, tally);
            }
            assert_eq!((fast, t_fast), (slow, t_slow));
            assert_eq!(rng, Rng::new(1));
        }
    }
}
