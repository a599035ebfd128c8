//! The arithmetic kernels against two outside oracles, across the whole input range:
//!
//! - the `fixed` crate (a general-purpose fixed-point library from the registry): its
//!   `round_ties_even` and `round_to_zero` for our rounding of a value with `k` fraction bits,
//!   its float conversion `saturating_from_num` (documented as rounding to nearest, ties to
//!   even) for our `from_f64_saturating`, and its `saturating_add` for accumulator adds;
//! - exact `i128` arithmetic for everything else (rescaling, division, dot products, a whole
//!   dense layer).
//!
//! Proptest drives the inputs; every call must also return rather than panic.

use fixed::types::extra::{U0, U1, U12, U15, U16, U24, U31, U40, U62, U7, U8};
use fixed::{FixedI16, FixedI32, FixedI64, FixedI8};
use hone_core::kernel::{dot, Tally};
use hone_core::layer::{dense, Params, Rounder, Tensor, TensorMut};
use hone_core::model::{LayerGeometry, Shape};
use hone_core::num::round::{div_round, requantize, shift_right};
use hone_core::num::{QFormat, Raw, RawMut, Rng, Rounding, Word};
use proptest::prelude::*;

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

    #[test]
    fn dense_forward_matches_exact_math(
        n_in in 1usize..24,
        n_out in 1usize..6,
        seed in any::<u64>(),
        fw in arb_frac(), fx in arb_frac(), fb in arb_frac(), fy in arb_frac(),
    ) {
        let mut r = Rng::new(seed);
        let w: Vec<i8> = (0..n_in * n_out).map(|_| r.next_u32() as i8).collect();
        let x: Vec<i16> = (0..n_in).map(|_| r.next_u32() as i16).collect();
        let b: Vec<i32> = (0..n_out).map(|_| r.next_u32() as i32 >> (r.next_u32() % 24)).collect();
        let (wf, xf, bf, yf) = (QFormat::new(Word::I8, fw).unwrap(), QFormat::new(Word::I16, fx).unwrap(), QFormat::new(Word::I32, fb).unwrap(), QFormat::new(Word::I16, fy).unwrap());
        let g = LayerGeometry { input: Shape::vector(n_in as u16), output: Shape::vector(n_out as u16), weights: (n_in * n_out) as u32, biases: n_out as u32, macs: 0 };
        let mut y = vec![0i16; n_out];
        let mut out = TensorMut { raw: RawMut::I16(&mut y), fmt: yf };
        let mut rng = Rng::new(5);
        let mut t = Tally::default();
        let p = Params { w: Tensor { raw: Raw::I8(&w), fmt: wf }, b: Tensor { raw: Raw::I32(&b), fmt: bf } };
        dense::forward(&g, p, Tensor { raw: Raw::I16(&x), fmt: xf }, &mut out, &mut Rounder { mode: Rounding::NearestEven, rng: &mut rng }, &mut t);
        for j in 0..n_out {
            // Exact: (Σ w x)·2^-(fw+fx) + b·2^-fb, as a fraction over 2^F with F the larger scale.
            let fs = fw as u32 + fx as u32;
            let f = fs.max(fb as u32);
            let dotv: i128 = (0..n_in).map(|i| w[j * n_in + i] as i128 * x[i] as i128).sum();
            let num = (dotv << (f - fs)) + ((b[j] as i128) << (f - fb as u32));
            let exact = if f >= fy as u32 { oracle_div_nearest(num, 1i128 << (f - fy as u32)) } else { num << (fy as u32 - f) };
            let clamped = exact.clamp(i16::MIN as i128, i16::MAX as i128);
            prop_assert_eq!(y[j] as i128, clamped, "unit {}", j);
        }
        prop_assert_eq!(t.values, n_out as u32);
    }
}
