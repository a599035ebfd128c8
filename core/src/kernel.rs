//! Dot products with wide accumulators, and the tallies of saturation.
//!
//! A dot product of `n` values never wraps. The accumulator is chosen from the word sizes and
//! the length so that the exact sum fits:
//!
//! | product bound `2^p` (p = bits_w + bits_x − 2) | accumulator | overflow |
//! |---|---|---|
//! | `n · 2^p ≤ i32::MAX` (for example `i8 × i8` up to 131 071 terms) | `i32` | impossible |
//! | `n · 2^p ≤ i64::MAX` (`i16 × i16`, `i32 × i16` of modest length) | `i64` | impossible |
//! | otherwise (`i32 × i32`) | `i64`, saturating adds | saturates and is counted |
//!
//! The 32-bit path is what makes `i8` weights cheap on a Cortex-M0; on a Cortex-M3 or M4 the
//! 64-bit path compiles to `SMLAL`, one instruction per multiply-accumulate.

use crate::num::{Raw, Sample, Word};

/// Whether the target multiplies two 32-bit values into a 64-bit sum in one instruction
/// (`SMLAL` on Thumb-2, `MUL`/`MULH` on RV32IM). ARMv6-M (the Cortex-M0 and M0+) has no long
/// multiply, and a 64-bit product there is a call to `__aeabi_lmul`; it is also the only Arm
/// profile without 32-bit atomics, which is how the configuration tells it apart.
pub const LONG_MULTIPLY: bool = !cfg!(all(target_arch = "arm", not(target_has_atomic = "32")));

/// Counts of what happened to the values written into one tensor.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, bytemuck::Pod, bytemuck::Zeroable)]
#[repr(C)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Tally {
    /// Values written.
    pub values: u32,
    /// Values that saturated (clamped to the end of the format's range).
    pub saturations: u32,
    /// Updates lost to rounding: the exact update was not zero, the applied one was.
    pub lost_updates: u32,
    /// Values in the outer half of the word's range, saturated ones included: the values that
    /// would have saturated with one more fraction bit. Dynamic fixed point gains a bit only
    /// when these are rare (see [`crate::train`]'s `dynamic` rule).
    pub high: u32,
}

impl Tally {
    /// Records one written value, saturated or not, without its magnitude (for values that
    /// never move format: weights, masters, momentum).
    #[inline]
    pub fn note(&mut self, saturated: bool) {
        self.values = self.values.saturating_add(1);
        if saturated {
            self.saturations = self.saturations.saturating_add(1);
            self.high = self.high.saturating_add(1);
        }
    }

    /// Records one written raw value `q` of a tensor stored in `word`: saturated or not, and
    /// whether it lies in the outer half of the range ([`Tally::high`]).
    #[inline]
    pub fn note_value(&mut self, q: i32, word: Word, saturated: bool) {
        self.values = self.values.saturating_add(1);
        if saturated {
            self.saturations = self.saturations.saturating_add(1);
        }
        if saturated || outer_half(q, word) {
            self.high = self.high.saturating_add(1);
        }
    }

    /// Adds the counts a kernel kept in registers: `values` written, `saturations` of them
    /// saturated, `high` of them in the outer half.
    #[inline]
    pub fn add_counts(&mut self, values: u32, saturations: u32, high: u32) {
        self.values = self.values.saturating_add(values);
        self.saturations = self.saturations.saturating_add(saturations);
        self.high = self.high.saturating_add(high);
    }

    /// Adds another tally into this one.
    pub fn merge(&mut self, o: &Tally) {
        self.values = self.values.saturating_add(o.values);
        self.saturations = self.saturations.saturating_add(o.saturations);
        self.lost_updates = self.lost_updates.saturating_add(o.lost_updates);
        self.high = self.high.saturating_add(o.high);
    }
}

/// Whether the raw value `q` of `word` would saturate if the format had one more fraction bit
/// (its raw value doubled): `2q > max` or `2q < min`, that is `q ≥ 2^(b−2)` or `q < −2^(b−2)`
/// for a `b`-bit word.
#[inline]
pub const fn outer_half(q: i32, word: Word) -> bool {
    let h = 1i32 << (word.bits() - 2);
    q >= h || q < -h
}

/// Which accumulator a dot product of `n` terms of these words needs.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum AccKind {
    /// `i32`, exact.
    Narrow,
    /// `i64`, exact.
    Wide,
    /// `i64` with saturating adds.
    WideSaturating,
}

/// The accumulator for `n` products of words of `bits_a` and `bits_b` bits.
pub const fn acc_kind(bits_a: u32, bits_b: u32, n: usize) -> AccKind {
    let p = bits_a + bits_b - 2;
    let bound = (n as u128) << p;
    if bound <= i32::MAX as u128 {
        AccKind::Narrow
    } else if bound <= i64::MAX as u128 {
        AccKind::Wide
    } else {
        AccKind::WideSaturating
    }
}

/// Exact (or saturating, and then flagged) dot product of two strided sequences.
/// `a` is read at `a_off + i·a_step`, `b` at `b_off + i·b_step`, for `i < n` (a step of 0
/// counts as 1); indices past the end of either slice end the sum early (callers check bounds
/// beforehand).
/// Returns the sum and whether it saturated.
#[inline]
pub fn dot_typed<A: Sample, B: Sample>(
    a: &[A],
    a_off: usize,
    a_step: usize,
    b: &[B],
    b_off: usize,
    b_step: usize,
    n: usize,
) -> (i64, bool) {
    let a = a.get(a_off..).unwrap_or(&[]);
    let b = b.get(b_off..).unwrap_or(&[]);
    let ia = a.iter().step_by(a_step.max(1));
    let ib = b.iter().step_by(b_step.max(1));
    match acc_kind(A::WORD.bits(), B::WORD.bits(), n) {
        AccKind::Narrow => {
            if a_step == 1 && b_step == 1 {
                // Contiguous: the loop the compiler turns into load, load, multiply-add.
                let mut acc: i32 = 0;
                for (x, y) in a.iter().zip(b.iter()).take(n) {
                    acc = acc.wrapping_add(x.to_i32() * y.to_i32());
                }
                (acc as i64, false)
            } else {
                let mut acc: i32 = 0;
                for (x, y) in ia.zip(ib).take(n) {
                    acc = acc.wrapping_add(x.to_i32() * y.to_i32());
                }
                (acc as i64, false)
            }
        }
        // Where a 64-bit product is a library call (`__aeabi_lmul` on the M0), words of 16 bits
        // or less form their products (at most 2^30 in magnitude) exactly in `i32` and widen
        // them for the sum: a plain multiply and a 64-bit add. Elsewhere the 64-bit product
        // below is one multiply-accumulate instruction (`SMLAL` on Thumb-2).
        AccKind::Wide if !LONG_MULTIPLY && A::WORD.bits() + B::WORD.bits() <= 32 => {
            let mut acc: i64 = 0;
            if a_step == 1 && b_step == 1 {
                for (x, y) in a.iter().zip(b.iter()).take(n) {
                    acc += (x.to_i32() * y.to_i32()) as i64;
                }
            } else {
                for (x, y) in ia.zip(ib).take(n) {
                    acc += (x.to_i32() * y.to_i32()) as i64;
                }
            }
            (acc, false)
        }
        AccKind::Wide => {
            let mut acc: i64 = 0;
            if a_step == 1 && b_step == 1 {
                for (x, y) in a.iter().zip(b.iter()).take(n) {
                    acc += x.to_i32() as i64 * y.to_i32() as i64;
                }
            } else {
                for (x, y) in ia.zip(ib).take(n) {
                    acc += x.to_i32() as i64 * y.to_i32() as i64;
                }
            }
            (acc, false)
        }
        AccKind::WideSaturating => {
            let mut acc: i64 = 0;
            let mut sat = false;
            for (x, y) in ia.zip(ib).take(n) {
                let (s, o) = acc.overflowing_add(x.to_i32() as i64 * y.to_i32() as i64);
                if o {
                    sat = true;
                    acc = if s < 0 { i64::MAX } else { i64::MIN };
                } else {
                    acc = s;
                }
            }
            (acc, sat)
        }
    }
}

/// [`dot_typed`] over run-time words: one match on the word pair, then a monomorphized loop.
#[inline]
pub fn dot(
    a: Raw<'_>,
    a_off: usize,
    a_step: usize,
    b: Raw<'_>,
    b_off: usize,
    b_step: usize,
    n: usize,
) -> (i64, bool) {
    // Words whose kernels are not built give an empty sum: a checked description never
    // stores values in them (see `Word::is_built_for_values`), and their copies of the loop
    // are not linked.
    macro_rules! inner {
        ($x:expr) => {
            match b {
                Raw::I8(t) if WORD_I8 => dot_typed($x, a_off, a_step, t, b_off, b_step, n),
                Raw::I16(t) => dot_typed($x, a_off, a_step, t, b_off, b_step, n),
                Raw::I32(t) if WORD_I32 => dot_typed($x, a_off, a_step, t, b_off, b_step, n),
                _ => (0, false),
            }
        };
    }
    match a {
        Raw::I8(s) if WORD_I8 => inner!(s),
        Raw::I16(s) => inner!(s),
        Raw::I32(s) if WORD_I32 => inner!(s),
        _ => (0, false),
    }
}

/// `a · b`, exact in 64 bits. Where a 64-bit product is a library call (the M0's
/// `__aeabi_lmul` multiplies two 64-bit numbers), it is formed from 16-bit halves with four
/// 32-bit multiplies instead; elsewhere it is one long multiply.
#[inline(always)]
pub fn mul_wide(a: i32, b: i32) -> i64 {
    if LONG_MULTIPLY {
        a as i64 * b as i64
    } else {
        mul_wide_halves(a, b)
    }
}

/// [`mul_wide`] from 16-bit halves of the magnitudes: `|a|·|b| = h·2^32 + m·2^16 + l`, where
/// no partial product or sum leaves 32 bits (the high halves are at most 2^15).
#[inline(always)]
fn mul_wide_halves(a: i32, b: i32) -> i64 {
    let (ua, ub) = (a.unsigned_abs(), b.unsigned_abs());
    let (a1, a0) = (ua >> 16, ua & 0xFFFF);
    let (b1, b0) = (ub >> 16, ub & 0xFFFF);
    let m = a1 * b0 + a0 * b1;
    let r = ((a1 * b1) as u64) << 32;
    let r = r + ((m as u64) << 16) + (a0 * b0) as u64;
    if (a < 0) != (b < 0) {
        (r as i64).wrapping_neg()
    } else {
        r as i64
    }
}

/// Whether the kernels are built for `i8` values (see `Word::is_built_for_values`).
pub const WORD_I8: bool = Word::I8.is_built_for_values();
/// Whether the kernels are built for `i32` values (see `Word::is_built_for_values`).
pub const WORD_I32: bool = Word::I32.is_built_for_values();

/// Saturating addition of two wide sums; returns the sum and whether it saturated.
#[inline]
pub const fn add_sat(a: i64, b: i64) -> (i64, bool) {
    match a.checked_add(b) {
        Some(s) => (s, false),
        None => (if b < 0 { i64::MIN } else { i64::MAX }, true),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wide_products_from_halves() {
        let edges = [
            0,
            1,
            -1,
            2,
            -2,
            0xFFFF,
            -0xFFFF,
            0x1_0000,
            -0x1_0000,
            i32::MAX,
            i32::MIN,
            i32::MIN + 1,
        ];
        let mut x = 0x2545_F491_4F6C_DD1Du64;
        let random = (0..20_000).map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            (x as i32) >> (x >> 59)
        });
        let vals: Vec<i32> = edges.into_iter().chain(random).collect();
        for w in vals.windows(2) {
            let (a, b) = (w[0], w[1]);
            assert_eq!(mul_wide_halves(a, b), a as i64 * b as i64, "{a} * {b}");
            assert_eq!(mul_wide(a, b), a as i64 * b as i64, "{a} * {b}");
        }
        for &a in &edges {
            for &b in &edges {
                assert_eq!(mul_wide_halves(a, b), a as i64 * b as i64, "{a} * {b}");
            }
        }
    }

    #[test]
    fn accumulator_choice() {
        assert_eq!(acc_kind(8, 8, 131_071), AccKind::Narrow);
        assert_eq!(acc_kind(8, 8, 131_072), AccKind::Wide);
        assert_eq!(acc_kind(16, 16, 1), AccKind::Narrow);
        assert_eq!(acc_kind(16, 16, 2), AccKind::Wide);
        assert_eq!(acc_kind(32, 32, 1), AccKind::Wide);
        assert_eq!(acc_kind(32, 32, 2), AccKind::WideSaturating);
    }

    #[test]
    fn extremes_do_not_wrap() {
        // 131 071 products of (−128)(−128) = 2^14: 2 147 467 264, still inside i32.
        let a = vec![i8::MIN; 131_071];
        assert_eq!(
            dot(Raw::I8(&a), 0, 1, Raw::I8(&a), 0, 1, a.len()),
            (131_071i64 << 14, false)
        );
        // Two i16 MIN products (2^30 each) already need i64.
        let b = [i16::MIN; 2];
        assert_eq!(
            dot(Raw::I16(&b), 0, 1, Raw::I16(&b), 0, 1, 2),
            (1i64 << 31, false)
        );
        // i32 × i32 saturates and says so.
        let c = [i32::MIN; 4];
        assert_eq!(
            dot(Raw::I32(&c), 0, 1, Raw::I32(&c), 0, 1, 4),
            (i64::MAX, true)
        );
        let d = [i32::MAX; 4];
        assert_eq!(
            dot(Raw::I32(&c), 0, 1, Raw::I32(&d), 0, 1, 4),
            (i64::MIN, true)
        );
    }

    #[test]
    fn strided_and_mixed_words() {
        // Column 1 of a 3x2 row-major matrix times a vector.
        let m = [1i8, 2, 3, 4, 5, 6];
        let v = [10i16, -20, 30];
        assert_eq!(
            dot(Raw::I8(&m), 1, 2, Raw::I16(&v), 0, 1, 3),
            (2 * 10 - 4 * 20 + 6 * 30, false)
        );
        // Out-of-range offsets end early rather than panic.
        assert_eq!(dot(Raw::I8(&m), 10, 1, Raw::I16(&v), 0, 1, 3), (0, false));
    }
}
