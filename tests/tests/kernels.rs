//! The arithmetic kernels against two outside oracles, across the whole input range:
//!
//! - the `fixed` crate (a general-purpose fixed-point library from the registry): its
//!   `round_ties_even` and `round_to_zero` for our rounding of a value with `k` fraction bits,
//!   its float conversion `saturating_from_num` (documented as rounding to nearest, ties to
//!   even) for our `from_f64_saturating`, and its `saturating_add` for accumulator adds;
//! - exact `i128` arithmetic for everything else: rescaling, division (`div_round`,
//!   `requantize_div`), contiguous and strided dot products, and the dense, 1-D convolution,
//!   average-pooling and max-pooling layers forward and the dense layer backward (input
//!   gradient, weight- and bias-gradient accumulation), in every word size and under every
//!   rounding mode.
//!
//! The layer references below are written from the core's documentation, not from its code:
//! each layer sums exactly and rounds once per written value into the output format, with the
//! named rounding (`core/src/layer/mod.rs`); an accumulator add rounds the addend into the
//! accumulator's format and saturates the sum to its word (`Rounder::accumulate`); a dot
//! product is exact unless its `i64` accumulator saturates, and then the saturation is counted
//! (`core/src/kernel.rs`). Under stochastic rounding (Gupta et al. 2015, eq. 3) a result must
//! be one of the two neighbours of the exact value, and the exact value itself when that is
//! representable. Every written value and every saturation must be counted in the tallies.
//!
//! Proptest drives the inputs; every call must also return rather than panic.

use fixed::types::extra::{U0, U1, U12, U15, U16, U24, U31, U40, U62, U7, U8};
use fixed::{FixedI16, FixedI32, FixedI64, FixedI8};
use hone_core::kernel::{dot, Tally};
use hone_core::layer::{conv, dense, pool, BackOut, BackTally, Params, Rounder, Tensor, TensorMut};
use hone_core::model::{LayerGeometry, Shape};
use hone_core::num::round::{div_round, requantize, requantize_div, shift_right};
use hone_core::num::{QFormat, Raw, RawMut, Rng, Rounding, Word};
use hone_tests::Owned;
use proptest::prelude::*;
use proptest::test_runner::TestCaseError;

/// `v / 2^s` rounded to nearest, ties to even, in exact integer arithmetic.
fn oracle_shift_nearest(v: i64, s: u32) -> i128 {
    oracle_div_nearest(v as i128, 1i128 << s)
}

fn oracle_div_nearest(n: i128, d: i128) -> i128 {
    let q = n.div_euclid(d);
    let r = n.rem_euclid(d);
    if 2 * r > d || (2 * r == d && q % 2 != 0) {
        q + 1
    } else {
        q
    }
}

fn oracle_div_toward_zero(n: i128, d: i128) -> i128 {
    n / d // Rust integer division truncates toward zero
}

macro_rules! fixed_round_check {
    ($v:expr, $($U:ty => $k:expr),*) => {{
        let mut rng = Rng::new(1);
        $(
            let f = FixedI64::<$U>::from_bits($v);
            // fixed rounds to an integer-valued FixedI64; its bits >> k are our quotient.
            if let Some(r) = f.checked_round_ties_even() {
                let ours = shift_right($v, $k, Rounding::NearestEven, &mut rng);
                prop_assert_eq!(ours as i128, (r.to_bits() as i128) >> $k, "nearest, v {} k {}", $v, $k);
            }
            let ours = shift_right($v, $k, Rounding::NearestEven, &mut rng);
            prop_assert_eq!(ours as i128, oracle_shift_nearest($v, $k));
            let tz = f.round_to_zero();
            let ours = shift_right($v, $k, Rounding::TowardZero, &mut rng);
            prop_assert_eq!(ours as i128, (tz.to_bits() as i128) >> $k, "toward zero, v {} k {}", $v, $k);
        )*
    }};
}

fn arb_frac() -> impl Strategy<Value = u8> {
    0u8..=31
}

fn arb_word() -> impl Strategy<Value = Word> {
    prop_oneof![Just(Word::I8), Just(Word::I16), Just(Word::I32)]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 4000, .. ProptestConfig::default() })]

    #[test]
    fn rounding_matches_fixed_crate(v in any::<i64>()) {
        fixed_round_check!(v, U1 => 1, U7 => 7, U8 => 8, U15 => 15, U16 => 16, U24 => 24, U31 => 31, U40 => 40, U62 => 62);
    }

    #[test]
    fn requantize_matches_exact_math(v in any::<i64>(), from in 0u32..=62, word in arb_word(), frac in arb_frac()) {
        let to = QFormat::new(word, frac).unwrap();
        let mut rng = Rng::new(2);
        for mode in [Rounding::NearestEven, Rounding::TowardZero] {
            let (got, sat) = requantize(v, from, to, mode, &mut rng);
            // Exact value v · 2^(frac − from), rounded, then clamped to the word.
            let exact: i128 = if from >= frac as u32 {
                let d = 1i128 << (from - frac as u32);
                match mode { Rounding::NearestEven => oracle_div_nearest(v as i128, d), _ => oracle_div_toward_zero(v as i128, d) }
            } else {
                (v as i128) << (frac as u32 - from)
            };
            let clamped = exact.clamp(word.min_raw() as i128, word.max_raw() as i128);
            prop_assert_eq!(got as i128, clamped, "v {} from {} to {}", v, from, to);
            prop_assert_eq!(sat, clamped != exact);
        }
    }

    #[test]
    fn div_round_matches_exact_math(n in any::<i64>(), d in 1i64..=i64::MAX) {
        let mut rng = Rng::new(3);
        prop_assert_eq!(div_round(n, d, Rounding::NearestEven, &mut rng) as i128, oracle_div_nearest(n as i128, d as i128));
        prop_assert_eq!(div_round(n, d, Rounding::TowardZero, &mut rng) as i128, oracle_div_toward_zero(n as i128, d as i128));
        let s = div_round(n, d, Rounding::Stochastic, &mut rng) as i128;
        let lo = (n as i128).div_euclid(d as i128);
        prop_assert!(s == lo || s == lo + 1);
    }

    #[test]
    fn float_conversion_matches_fixed_crate(x in any::<f64>().prop_filter("finite", |x| x.is_finite())) {
        let cases: [(QFormat, i128); 5] = [
            (QFormat::new(Word::I8, 7).unwrap(), FixedI8::<U7>::saturating_from_num(x).to_bits() as i128),
            (QFormat::new(Word::I16, 12).unwrap(), FixedI16::<U12>::saturating_from_num(x).to_bits() as i128),
            (QFormat::new(Word::I16, 0).unwrap(), FixedI16::<U0>::saturating_from_num(x).to_bits() as i128),
            (QFormat::new(Word::I32, 16).unwrap(), FixedI32::<U16>::saturating_from_num(x).to_bits() as i128),
            (QFormat::new(Word::I32, 31).unwrap(), FixedI32::<U31>::saturating_from_num(x).to_bits() as i128),
        ];
        for (fmt, expect) in cases {
            let (raw, _) = fmt.from_f64_saturating(x).unwrap();
            prop_assert_eq!(raw as i128, expect, "x {} fmt {}", x, fmt);
        }
    }

    #[test]
    fn small_floats_convert_like_fixed(x in -200.0f64..200.0) {
        let (raw, _) = QFormat::new(Word::I16, 8).unwrap().from_f64_saturating(x).unwrap();
        prop_assert_eq!(raw, FixedI16::<U8>::saturating_from_num(x).to_bits() as i32);
    }

    #[test]
    fn accumulator_add_matches_fixed_saturating_add(a in any::<i32>(), b in any::<i32>()) {
        // Adding b (already at the accumulator's scale) into an i32 accumulator a.
        let fmt = QFormat::new(Word::I32, 16).unwrap();
        let mut store = [a];
        let mut acc = TensorMut { raw: RawMut::I32(&mut store), fmt };
        let mut rng = Rng::new(4);
        let mut t = Tally::default();
        Rounder { mode: Rounding::NearestEven, rng: &mut rng }.accumulate(&mut acc, 0, b as i64, 16, false, &mut t);
        let expect = FixedI32::<U16>::from_bits(a).saturating_add(FixedI32::<U16>::from_bits(b)).to_bits();
        prop_assert_eq!(store[0], expect);
        prop_assert_eq!(t.saturations, (a.checked_add(b).is_none()) as u32);
    }

    #[test]
    fn dot_matches_exact_sum(
        a8 in prop::collection::vec(any::<i8>(), 0..300),
        b16 in prop::collection::vec(any::<i16>(), 0..300),
        a32 in prop::collection::vec(any::<i32>(), 0..40),
        b32 in prop::collection::vec(any::<i32>(), 0..40),
    ) {
        let n = a8.len().min(b16.len());
        let exact: i128 = a8.iter().zip(&b16).map(|(&x, &y)| x as i128 * y as i128).sum();
        prop_assert_eq!(dot(Raw::I8(&a8), 0, 1, Raw::I16(&b16), 0, 1, n), (exact as i64, false));
        let exact16: i128 = b16.iter().zip(&b16).map(|(&x, &y)| x as i128 * y as i128).sum();
        prop_assert_eq!(dot(Raw::I16(&b16), 0, 1, Raw::I16(&b16), 0, 1, b16.len()), (exact16 as i64, false));
        // i32 × i32 saturates step by step: compare with the same rule in i128.
        let m = a32.len().min(b32.len());
        let mut acc: i128 = 0;
        let mut sat = false;
        for (&x, &y) in a32.iter().zip(&b32) {
            acc += x as i128 * y as i128;
            if acc > i64::MAX as i128 { acc = i64::MAX as i128; sat = true; }
            if acc < i64::MIN as i128 { acc = i64::MIN as i128; sat = true; }
        }
        let (got, got_sat) = dot(Raw::I32(&a32), 0, 1, Raw::I32(&b32), 0, 1, m);
        prop_assert_eq!(got_sat, sat);
        prop_assert_eq!(got as i128, acc);
    }
}

// Exact references for division and for the layers, written from the documentation.

/// Every rounding mode.
const MODES: [Rounding; 3] = [
    Rounding::NearestEven,
    Rounding::TowardZero,
    Rounding::Stochastic,
];

/// `n / d` (`d > 0`) rounded by `mode`, exactly, before any clamp to a word: the same value
/// twice for nearest-even and toward zero; for stochastic rounding the two neighbours
/// `⌊n/d⌋` and `⌊n/d⌋ + 1`, or the exact quotient twice when `d` divides `n`.
fn rounded(n: i128, d: i128, mode: Rounding) -> [i128; 2] {
    assert!(d > 0);
    match mode {
        Rounding::NearestEven => [oracle_div_nearest(n, d); 2],
        Rounding::TowardZero => [oracle_div_toward_zero(n, d); 2],
        Rounding::Stochastic => {
            let q = n.div_euclid(d);
            if n.rem_euclid(d) == 0 {
                [q, q]
            } else {
                [q, q + 1]
            }
        }
    }
}

/// The real number `(Σ t·2^-f over the terms (t, f)) / den`, counted in steps of `2^-to` and
/// rounded by `mode` (see [`rounded`]). All terms are brought to the finest scale first, so
/// the sum and the one rounding are exact. Magnitudes in these tests stay below 2^101.
fn exact_in_steps(terms: &[(i128, u32)], den: i128, to: u32, mode: Rounding) -> [i128; 2] {
    let g = terms.iter().map(|&(_, f)| f).fold(to, u32::max);
    let num: i128 = terms.iter().map(|&(t, f)| t << (g - f)).sum();
    rounded(num, den << (g - to), mode)
}

/// What the documentation allows for one written value.
#[derive(Clone, Copy, Debug)]
struct Allowed {
    /// The rounded exact value (or its two neighbours), before the clamp to the word.
    cands: [i128; 2],
    /// Whether the terms of the exact sum behind the value have magnitudes adding up past
    /// `i64::MAX`, so that the kernel's `i64` accumulator may saturate: the value is then
    /// free, but the saturation must be counted.
    may_saturate: bool,
}

impl Allowed {
    fn exact(cands: [i128; 2]) -> Allowed {
        Allowed {
            cands,
            may_saturate: false,
        }
    }

    /// The value `cands` of a sum of `products`.
    fn sum(cands: [i128; 2], products: &[i128]) -> Allowed {
        Allowed {
            cands,
            may_saturate: products.iter().map(|p| p.abs()).sum::<i128>() > i64::MAX as i128,
        }
    }
}

/// Checks the values written into a tensor of `word` against what the documentation allows,
/// and the tally of those writes: every value is counted, and the saturations counted lie
/// between those that must have been counted (the value is the clamp of an out-of-range
/// result, or no allowed result at all) and those that may have been (stochastic rounding
/// with one neighbour out of range, or an accumulator that may have saturated); and the
/// values counted in the outer half of the range ([`check_high`]).
fn check_written(
    what: &str,
    got: &[i32],
    word: Word,
    allowed: &[Allowed],
    tally: &Tally,
) -> Result<(), TestCaseError> {
    check_values(what, got, word, allowed, tally)?;
    check_high(what, got, word, tally)
}

/// [`check_written`] without the outer-half count, for a function that returns its saturation
/// flag instead of a tally.
fn check_values(
    what: &str,
    got: &[i32],
    word: Word,
    allowed: &[Allowed],
    tally: &Tally,
) -> Result<(), TestCaseError> {
    prop_assert_eq!(got.len(), allowed.len());
    let (lo, hi) = (word.min_raw() as i128, word.max_raw() as i128);
    let (mut must, mut may) = (0u32, 0u32);
    for (i, (&g, a)) in got.iter().zip(allowed).enumerate() {
        // For each allowed result that clamps to the value: whether it was out of range.
        let out: Vec<bool> = a
            .cands
            .iter()
            .filter(|&&c| c.clamp(lo, hi) == g as i128)
            .map(|&c| c < lo || c > hi)
            .collect();
        if out.is_empty() {
            prop_assert!(
                a.may_saturate,
                "{} value {}: got {}, allowed {:?} clamped to {:?}",
                what,
                i,
                g,
                a.cands,
                word
            );
            must += 1;
            may += 1;
        } else {
            must += out.iter().all(|&o| o) as u32;
            may += (a.may_saturate || out.iter().any(|&o| o)) as u32;
        }
    }
    prop_assert_eq!(tally.values, got.len() as u32, "{}: values counted", what);
    prop_assert!(
        must <= tally.saturations && tally.saturations <= may,
        "{}: {} saturations counted, expected {} to {}",
        what,
        tally.saturations,
        must,
        may
    );
    Ok(())
}

/// The outer-half count of a tally against the written values.
fn check_high(what: &str, got: &[i32], word: Word, tally: &Tally) -> Result<(), TestCaseError> {
    // Documented (core/src/kernel.rs, `Tally::high`): a written value counts as high when it
    // would saturate with one more fraction bit (twice it leaves the word) or saturated. So
    // every written value outside half the range counts, and a saturation flagged on a value
    // inside it (an earlier stage saturated) may add one more.
    let (lo, hi) = (i64::from(word.min_raw()), i64::from(word.max_raw()));
    let outer = got
        .iter()
        .filter(|&&g| {
            let twice = 2 * i64::from(g);
            twice > hi || twice < lo
        })
        .count() as u32;
    prop_assert!(
        outer <= tally.high && tally.high <= outer + tally.saturations,
        "{}: {} values counted in the outer half, expected {} to {}",
        what,
        tally.high,
        outer,
        outer + tally.saturations
    );
    Ok(())
}

/// One drawn raw value: (kind, bits, shift), see [`draw`].
type Spec = (u8, u32, u8);

/// Values drawn per tensor; the shapes below need at most this many.
const POOL: usize = 128;

/// A raw value of `word`: its minimum or maximum, a value in −2..=2, or the low bits of `bits`
/// sign-extended and shifted right by up to the word's width, so that every magnitude occurs.
fn draw(word: Word, (kind, bits, shift): Spec) -> i32 {
    let b = word.bits();
    match kind % 8 {
        0 => word.min_raw(),
        1 => word.max_raw(),
        2 => (bits % 5) as i32 - 2,
        _ => ((bits as i32) << (32 - b)) >> (32 - b + shift as u32 % b),
    }
}

fn specs() -> impl Strategy<Value = Vec<Spec>> {
    prop::collection::vec(any::<Spec>(), POOL)
}

/// `n` values of `word` drawn from the first `n` specs.
fn tensor(word: Word, specs: &[Spec], n: usize) -> Owned {
    let v = specs[..n].iter().map(|&s| draw(word, s));
    match word {
        Word::I8 => Owned::I8(v.map(|x| x as i8).collect()),
        Word::I16 => Owned::I16(v.map(|x| x as i16).collect()),
        Word::I32 => Owned::I32(v.collect()),
    }
}

fn zeros(word: Word, n: usize) -> Owned {
    tensor(word, &vec![(2, 2, 0); n], n)
}

fn raw_mut(o: &mut Owned) -> RawMut<'_> {
    match o {
        Owned::I8(v) => RawMut::I8(v),
        Owned::I16(v) => RawMut::I16(v),
        Owned::I32(v) => RawMut::I32(v),
    }
}

fn values(o: &Owned) -> Vec<i32> {
    let r = o.raw();
    (0..r.len()).map(|i| r.at(i)).collect()
}

fn fmt(word: Word, frac: u8) -> QFormat {
    QFormat::new(word, frac).unwrap()
}

fn arb_i64() -> impl Strategy<Value = i64> {
    prop_oneof![
        any::<i64>(),
        (any::<i64>(), 0u32..64).prop_map(|(v, s)| v >> s),
        Just(i64::MIN),
        Just(i64::MAX),
    ]
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 4000, .. ProptestConfig::default() })]

    #[test]
    fn requantize_div_matches_exact_math(
        v in arb_i64(),
        word in arb_word(),
        to_frac in arb_frac(),
        delta in -31i32..=31,
        den in prop_oneof![0u32..=20, any::<u32>()],
        seed in any::<u64>(),
    ) {
        // `requantize_div` is documented exact for a shift `from − to` of at most 31 (formats
        // have at most 31 fraction bits), which `delta` keeps; `den ≤ 1` is plain requantize.
        let from = (to_frac as i32 + delta).max(0) as u32;
        let to = fmt(word, to_frac);
        let mut rng = Rng::new(seed);
        for mode in MODES {
            let (got, sat) = requantize_div(v, from, den, to, mode, &mut rng);
            let den_exact = den.max(1) as i128;
            let exact = exact_in_steps(&[(v as i128, from)], den_exact, to_frac as u32, mode);
            let t = Tally { values: 1, saturations: sat as u32, ..Tally::default() };
            let what = format!("{v} at {from} / {den} into {to} {mode:?}");
            check_values(&what, &[got], word, &[Allowed::exact(exact)], &t)?;
        }
    }

    #[test]
    fn strided_dot_matches_exact_sum(
        (wa, wb) in (arb_word(), arb_word()),
        (sa, sb) in (specs(), specs()),
        (la, lb) in (0usize..40, 0usize..40),
        (a_off, b_off) in (0usize..44, 0usize..44),
        (a_step, b_step) in (0usize..6, 0usize..6),
        n in 0usize..48,
    ) {
        let (a, b) = (tensor(wa, &sa, la), tensor(wb, &sb, lb));
        let (av, bv) = (values(&a), values(&b));
        // Documented (core/src/kernel.rs): `a` is read at a_off + i·a_step and `b` at
        // b_off + i·b_step for i < n, an index past the end of either ends the sum, and the
        // products are added in that order, exactly, except that where the word sizes and
        // length allow a sum beyond i64 (i32 × i32) the adds saturate and say so. A step of 0
        // counts as 1.
        let (step_a, step_b) = (a_step.max(1), b_step.max(1));
        let mut acc: i128 = 0;
        let mut sat = false;
        for i in 0..n {
            let (Some(&x), Some(&y)) = (av.get(a_off + i * step_a), bv.get(b_off + i * step_b))
            else {
                break;
            };
            acc += x as i128 * y as i128;
            if acc > i64::MAX as i128 || acc < i64::MIN as i128 {
                acc = acc.clamp(i64::MIN as i128, i64::MAX as i128);
                sat = true;
            }
        }
        let got = dot(a.raw(), a_off, a_step, b.raw(), b_off, b_step, n);
        prop_assert_eq!(got, (acc as i64, sat));
    }
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 2000, .. ProptestConfig::default() })]

    #[test]
    fn dense_forward_matches_exact_math(
        (n_in, n_out) in (1usize..24, 1usize..6),
        (ww, wx, wb, wy) in (arb_word(), arb_word(), arb_word(), arb_word()),
        (fw, fx, fb, fy) in (arb_frac(), arb_frac(), arb_frac(), arb_frac()),
        (sw, sx, sb) in (specs(), specs(), specs()),
        seed in any::<u64>(),
    ) {
        let (wf, xf, bf, yf) = (fmt(ww, fw), fmt(wx, fx), fmt(wb, fb), fmt(wy, fy));
        let w = tensor(ww, &sw, n_in * n_out);
        let (x, b) = (tensor(wx, &sx, n_in), tensor(wb, &sb, n_out));
        let (wv, xv, bv) = (values(&w), values(&x), values(&b));
        let g = LayerGeometry {
            input: Shape::vector(n_in as u16),
            output: Shape::vector(n_out as u16),
            weights: (n_in * n_out) as u32,
            biases: n_out as u32,
            macs: 0,
        };
        let p = Params {
            w: Tensor { raw: w.raw(), fmt: wf },
            b: Tensor { raw: b.raw(), fmt: bf },
        };
        let xt = Tensor { raw: x.raw(), fmt: xf };
        for mode in MODES {
            let mut y = zeros(wy, n_out);
            let mut rng = Rng::new(seed);
            let mut r = Rounder { mode, rng: &mut rng };
            let mut t = Tally::default();
            let mut out = TensorMut { raw: raw_mut(&mut y), fmt: yf };
            dense::forward(&g, p, xt, &mut out, &mut r, &mut t);
            // y_j = Σ_i W_ji x_i + b_j (weights [unit][input]), rounded once.
            let allowed: Vec<Allowed> = (0..n_out)
                .map(|j| {
                    let prods: Vec<i128> =
                        (0..n_in).map(|i| wv[j * n_in + i] as i128 * xv[i] as i128).collect();
                    let dot = prods.iter().sum();
                    let terms = [(dot, (fw + fx) as u32), (bv[j] as i128, fb as u32)];
                    Allowed::sum(exact_in_steps(&terms, 1, fy as u32, mode), &prods)
                })
                .collect();
            check_written(&format!("dense forward {mode:?}"), &values(&y), wy, &allowed, &t)?;
        }
    }

    #[test]
    fn dense_backward_matches_exact_math(
        (n_in, n_out) in (1usize..=12, 1usize..=6),
        (ww, wx, wg) in (arb_word(), arb_word(), arb_word()),
        (wgx, waw, wab) in (arb_word(), arb_word(), arb_word()),
        (fw, fx, fg) in (arb_frac(), arb_frac(), arb_frac()),
        (fgx, faw, fab) in (arb_frac(), arb_frac(), arb_frac()),
        (sw, sx, sg, saw, sab) in (specs(), specs(), specs(), specs(), specs()),
        seed in any::<u64>(),
    ) {
        let (wf, xf, gf) = (fmt(ww, fw), fmt(wx, fx), fmt(wg, fg));
        let (gxf, awf, abf) = (fmt(wgx, fgx), fmt(waw, faw), fmt(wab, fab));
        let w = tensor(ww, &sw, n_in * n_out);
        let (x, gy) = (tensor(wx, &sx, n_in), tensor(wg, &sg, n_out));
        let (wv, xv, gv) = (values(&w), values(&x), values(&gy));
        // The accumulators start from drawn values, so that adds can saturate.
        let (aw0, ab0) = (tensor(waw, &saw, n_in * n_out), tensor(wab, &sab, n_out));
        let (awv, abv) = (values(&aw0), values(&ab0));
        let g = LayerGeometry {
            input: Shape::vector(n_in as u16),
            output: Shape::vector(n_out as u16),
            weights: (n_in * n_out) as u32,
            biases: n_out as u32,
            macs: 0,
        };
        // The bias values do not enter the backward pass.
        let p = Params { w: Tensor { raw: w.raw(), fmt: wf }, b: Tensor::EMPTY };
        let (xt, gt) = (Tensor { raw: x.raw(), fmt: xf }, Tensor { raw: gy.raw(), fmt: gf });
        for mode in MODES {
            let (mut gx, mut aw, mut ab) = (zeros(wgx, n_in), aw0.clone(), ab0.clone());
            let mut rng = Rng::new(seed);
            let mut r = Rounder { mode, rng: &mut rng };
            let mut t = BackTally::default();
            let out = BackOut {
                gx: Some(&mut TensorMut { raw: raw_mut(&mut gx), fmt: gxf }),
                acc_w: Some(&mut TensorMut { raw: raw_mut(&mut aw), fmt: awf }),
                acc_b: Some(&mut TensorMut { raw: raw_mut(&mut ab), fmt: abf }),
            };
            dense::backward(&g, p, xt, gt, out, &mut r, &mut t);
            // ∂L/∂x_i = Σ_j W_ji g_j, exact, rounded once into the input gradient's format.
            let want: Vec<Allowed> = (0..n_in)
                .map(|i| {
                    let prods: Vec<i128> =
                        (0..n_out).map(|j| wv[j * n_in + i] as i128 * gv[j] as i128).collect();
                    let terms = [(prods.iter().sum(), (fw + fg) as u32)];
                    Allowed::sum(exact_in_steps(&terms, 1, fgx as u32, mode), &prods)
                })
                .collect();
            let what = format!("dense input gradient {mode:?}");
            check_written(&what, &values(&gx), wgx, &want, &t.gx)?;
            // ∂L/∂W_ji += g_j x_i: the addend rounded into the accumulator's format, the sum
            // saturated to its word. Documented (core/src/layer/mod.rs, `accumulate_outer`):
            // a unit whose g_j is zero adds nothing and is not counted, so the tally covers
            // the rows of the other units, and the zero rows must be left as they were.
            let live = |k: usize| gv[k / n_in] != 0;
            let (awn, want): (Vec<i32>, Vec<Allowed>) = (0..n_out * n_in)
                .filter(|&k| live(k))
                .map(|k| {
                    let gx_prod = gv[k / n_in] as i128 * xv[k % n_in] as i128;
                    let add = exact_in_steps(&[(gx_prod, (fg + fx) as u32)], 1, faw as u32, mode);
                    (values(&aw)[k], Allowed::exact(add.map(|a| awv[k] as i128 + a)))
                })
                .unzip();
            let what = format!("dense weight gradient {mode:?}");
            check_written(&what, &awn, waw, &want, &t.acc_w)?;
            for k in (0..n_out * n_in).filter(|&k| !live(k)) {
                prop_assert_eq!(values(&aw)[k], awv[k], "{}: zero row changed", what);
            }
            // ∂L/∂b_j += g_j, likewise (a zero g_j is not counted).
            let (abn, want): (Vec<i32>, Vec<Allowed>) = (0..n_out)
                .filter(|&j| gv[j] != 0)
                .map(|j| {
                    let add = exact_in_steps(&[(gv[j] as i128, fg as u32)], 1, fab as u32, mode);
                    (values(&ab)[j], Allowed::exact(add.map(|a| abv[j] as i128 + a)))
                })
                .unzip();
            let what = format!("dense bias gradient {mode:?}");
            check_written(&what, &abn, wab, &want, &t.acc_b)?;
            for j in (0..n_out).filter(|&j| gv[j] == 0) {
                prop_assert_eq!(values(&ab)[j], abv[j], "{}: zero gradient changed it", what);
            }
        }
    }

    #[test]
    fn conv1d_forward_matches_exact_math(
        (c_in, f_out, len) in (1usize..=3, 1usize..=3, 1usize..=12),
        (k_pick, stride) in (any::<u16>(), 1usize..=4),
        (ww, wx, wb, wy) in (arb_word(), arb_word(), arb_word(), arb_word()),
        (fw, fx, fb, fy) in (arb_frac(), arb_frac(), arb_frac(), arb_frac()),
        (sw, sx, sb) in (specs(), specs(), specs()),
        seed in any::<u64>(),
    ) {
        let k = 1 + k_pick as usize % len;
        // Output length of a convolution without padding: (L − K)/S + 1.
        let l_out = (len - k) / stride + 1;
        let (wf, xf, bf, yf) = (fmt(ww, fw), fmt(wx, fx), fmt(wb, fb), fmt(wy, fy));
        let w = tensor(ww, &sw, f_out * c_in * k);
        let (x, b) = (tensor(wx, &sx, c_in * len), tensor(wb, &sb, f_out));
        let (wv, xv, bv) = (values(&w), values(&x), values(&b));
        let g = LayerGeometry {
            input: Shape { channels: c_in as u16, len: len as u16 },
            output: Shape { channels: f_out as u16, len: l_out as u16 },
            weights: (f_out * c_in * k) as u32,
            biases: f_out as u32,
            macs: 0,
        };
        let p = Params {
            w: Tensor { raw: w.raw(), fmt: wf },
            b: Tensor { raw: b.raw(), fmt: bf },
        };
        let xt = Tensor { raw: x.raw(), fmt: xf };
        for mode in MODES {
            let mut y = zeros(wy, f_out * l_out);
            let mut rng = Rng::new(seed);
            let mut r = Rounder { mode, rng: &mut rng };
            let mut t = Tally::default();
            let mut out = TensorMut { raw: raw_mut(&mut y), fmt: yf };
            conv::forward(&g, k as u16, stride as u16, p, xt, &mut out, &mut r, &mut t);
            // y[o][t] = b[o] + Σ_c Σ_k w[o][c][k] · x[c][t·S + k], kernel [F][C][K] and input
            // [C][L] row-major, summed exactly and rounded once.
            let allowed: Vec<Allowed> = (0..f_out * l_out)
                .map(|oi| {
                    let (o, tt) = (oi / l_out, oi % l_out);
                    let prods: Vec<i128> = (0..c_in * k)
                        .map(|ck| {
                            let (c, kk) = (ck / k, ck % k);
                            let xi = xv[c * len + tt * stride + kk] as i128;
                            wv[(o * c_in + c) * k + kk] as i128 * xi
                        })
                        .collect();
                    let dot = prods.iter().sum();
                    let terms = [(dot, (fw + fx) as u32), (bv[o] as i128, fb as u32)];
                    Allowed::sum(exact_in_steps(&terms, 1, fy as u32, mode), &prods)
                })
                .collect();
            check_written(&format!("conv1d forward {mode:?}"), &values(&y), wy, &allowed, &t)?;
        }
    }

    #[test]
    fn pools_forward_match_exact_math(
        (chans, len) in (1usize..=3, 1usize..=16),
        (w_pick, stride) in (any::<u16>(), 1usize..=5),
        (wx, wy) in (arb_word(), arb_word()),
        (fx, fy) in (arb_frac(), arb_frac()),
        sx in specs(),
        seed in any::<u64>(),
    ) {
        let window = 1 + w_pick as usize % len;
        let l_out = (len - window) / stride + 1;
        let (xf, yf) = (fmt(wx, fx), fmt(wy, fy));
        let x = tensor(wx, &sx, chans * len);
        let xv = values(&x);
        let g = LayerGeometry {
            input: Shape { channels: chans as u16, len: len as u16 },
            output: Shape { channels: chans as u16, len: l_out as u16 },
            weights: 0,
            biases: 0,
            macs: 0,
        };
        // The windows, channel by channel: window o of channel c starts at input o·S.
        let windows = || {
            (0..chans * l_out).map(|oi| {
                let start = (oi / l_out) * len + (oi % l_out) * stride;
                xv[start..start + window].iter().map(|&v| v as i128)
            })
        };
        let xt = Tensor { raw: x.raw(), fmt: xf };
        let (fx, fy, w16, s16) = (fx as u32, fy as u32, window as u16, stride as u16);
        for mode in MODES {
            let mut rng = Rng::new(seed);
            let mut r = Rounder { mode, rng: &mut rng };
            // Average: the exact window sum divided by the window length, rounded once.
            let mut y = zeros(wy, chans * l_out);
            let mut t = Tally::default();
            let mut out = TensorMut { raw: raw_mut(&mut y), fmt: yf };
            pool::avg_forward(&g, w16, s16, xt, &mut out, &mut r, &mut t);
            let allowed: Vec<Allowed> = windows()
                .map(|win| exact_in_steps(&[(win.sum(), fx)], window as i128, fy, mode))
                .map(Allowed::exact)
                .collect();
            check_written(&format!("average pool {mode:?}"), &values(&y), wy, &allowed, &t)?;
            // Max: the largest input of the window, requantized.
            let mut y = zeros(wy, chans * l_out);
            let mut t = Tally::default();
            let mut out = TensorMut { raw: raw_mut(&mut y), fmt: yf };
            pool::max_forward(&g, w16, s16, xt, &mut out, &mut r, &mut t);
            let allowed: Vec<Allowed> = windows()
                .map(|win| exact_in_steps(&[(win.max().unwrap(), fx)], 1, fy, mode))
                .map(Allowed::exact)
                .collect();
            check_written(&format!("max pool {mode:?}"), &values(&y), wy, &allowed, &t)?;
        }
    }
}
