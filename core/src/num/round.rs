//! Named rounding and requantization.
//!
//! Every change of scale in the engine goes through this module, and every call names its
//! [`Rounding`]:
//!
//! - [`Rounding::NearestEven`]: to the nearest representable value, ties to the even one.
//!   Unbiased on average for ties, the common default of IEEE 754.
//! - [`Rounding::TowardZero`]: drops the discarded bits of the magnitude (truncation of the
//!   magnitude). Biased toward zero; cheap.
//! - [`Rounding::Stochastic`]: rounds up with probability equal to the discarded fraction, as
//!   defined by Gupta, Agrawal, Gopalakrishnan and Narayanan, "Deep Learning with Limited
//!   Numerical Precision" (ICML 2015), eq. 3: `round(x) = ⌊x⌋ + 1` with probability
//!   `(x − ⌊x⌋)/ε`, else `⌊x⌋`. Its expectation is exactly `x`. The random draw comes from the
//!   core's seeded [`Rng`]: one draw for every shift that drops fraction bits, whether the
//!   dropped bits are zero or not. A division by a number that is not a power of two (a batch
//!   size, a softmax denominator) draws by rejection sampling, so how many draws it takes
//!   depends on the generator and, for the softmax, on the data. Host and device run the same
//!   code from the same seed and draw the same stream.
//!
//! Toward-zero and stochastic rounding are optional parts of the build (cargo features
//! `toward-zero` and `stochastic`, see [`crate::features`]). A build without one refuses a
//! description that names it; the functions here, called directly with such a mode, round to
//! nearest-even instead.
//!
//! Wide intermediate values are `i64`. Shifts are at most 62 because formats have at most
//! [`MAX_FRAC`](super::format::MAX_FRAC) = 31 fraction bits and products add two of them.

use serde::{Deserialize, Serialize};

use super::format::QFormat;
#[cfg(test)]
use super::format::Word;
use super::rng::Rng;
use crate::features::{STOCHASTIC, TOWARD_ZERO};

/// How a value that falls between two representable values is rounded.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Rounding {
    /// Nearest, ties to even.
    NearestEven,
    /// Toward zero (truncate the magnitude).
    TowardZero,
    /// Stochastic rounding (Gupta et al. 2015): up with probability equal to the remainder.
    Stochastic,
}

impl Rounding {
    /// The mode this build rounds with when asked for `self`: `self` if it is built, else
    /// nearest-even (see [`crate::features`]).
    pub const fn built(self) -> Rounding {
        match self {
            Rounding::TowardZero if !TOWARD_ZERO => Rounding::NearestEven,
            Rounding::Stochastic if !STOCHASTIC => Rounding::NearestEven,
            m => m,
        }
    }
}

/// The rounding used for each role a tensor can play in training.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RoundingPlan {
    /// Forward activations (layer outputs).
    pub activations: Rounding,
    /// Backward gradients: the gradient propagated to each layer's input, and the weight
    /// gradients added into the accumulators.
    pub gradients: Rounding,
    /// Weight updates: learning-rate scaling, momentum, weight decay, and writing the update
    /// into the weights (or master weights).
    pub updates: Rounding,
}

impl RoundingPlan {
    /// Nearest-even everywhere.
    pub const NEAREST: RoundingPlan = RoundingPlan {
        activations: Rounding::NearestEven,
        gradients: Rounding::NearestEven,
        updates: Rounding::NearestEven,
    };
}

/// `v / 2^shift` rounded by `mode`, exact for every `i64`. Shifts above 63 are treated as 63
/// (formats keep shifts at 62 or less).
#[inline]
pub fn shift_right(v: i64, shift: u32, mode: Rounding, rng: &mut Rng) -> i64 {
    if shift == 0 {
        return v;
    }
    let shift = shift.min(63);
    let q = v >> shift; // floor
    let mask = (1u64 << shift) - 1;
    let r = (v as u64) & mask; // v − q·2^shift, in [0, 2^shift)
    match mode {
        Rounding::TowardZero if TOWARD_ZERO => {
            if v < 0 && r != 0 {
                q + 1
            } else {
                q
            }
        }
        Rounding::Stochastic if STOCHASTIC => {
            let u = rng.bits(shift);
            if u < r {
                q + 1
            } else {
                q
            }
        }
        // Nearest-even, and any mode this build leaves out (see `crate::features`).
        _ => {
            let half = 1u64 << (shift - 1);
            if r > half || (r == half && (q & 1) != 0) {
                q + 1
            } else {
                q
            }
        }
    }
}

/// `v · 2^shift`, saturated to the `i64` range. Returns the value and whether it saturated.
#[inline]
pub fn shift_left_saturating(v: i64, shift: u32) -> (i64, bool) {
    if v == 0 || shift == 0 {
        return (v, false);
    }
    if shift >= 63 {
        return (if v < 0 { i64::MIN } else { i64::MAX }, true);
    }
    let limit = i64::MAX >> shift;
    if v > limit {
        (i64::MAX, true)
    } else if v < -limit - 1 {
        (i64::MIN, true)
    } else {
        (v << shift, false)
    }
}

/// `num / den` rounded by `mode`, for `den ≥ 1`. Returns `num` unchanged for `den ≤ 1`.
///
/// The stochastic case draws one uniform integer in `0..den` per call.
#[inline]
pub fn div_round(num: i64, den: i64, mode: Rounding, rng: &mut Rng) -> i64 {
    if den <= 1 {
        return num;
    }
    if den & (den - 1) == 0 {
        return shift_right(num, den.trailing_zeros(), mode, rng);
    }
    let q = num.div_euclid(den); // floor for den > 0
    let r = num.rem_euclid(den); // in [0, den)
    match mode {
        Rounding::TowardZero if TOWARD_ZERO => {
            if num < 0 && r != 0 {
                q + 1
            } else {
                q
            }
        }
        Rounding::Stochastic if STOCHASTIC => {
            if (rng.below(den as u64) as i64) < r {
                q + 1
            } else {
                q
            }
        }
        // Nearest-even, and any mode this build leaves out.
        _ => {
            let twice = 2 * r as i128;
            if twice > den as i128 || (twice == den as i128 && (q & 1) != 0) {
                q + 1
            } else {
                q
            }
        }
    }
}

/// A value with `from_frac` fraction bits, rescaled to `to_frac` fraction bits: rounded by
/// `mode` when fraction bits are dropped, saturated to `i64` when they are added. Returns the
/// value and whether the left shift saturated.
#[inline]
pub fn rescale(v: i64, from_frac: u32, to_frac: u32, mode: Rounding, rng: &mut Rng) -> (i64, bool) {
    if from_frac >= to_frac {
        (shift_right(v, from_frac - to_frac, mode, rng), false)
    } else {
        shift_left_saturating(v, to_frac - from_frac)
    }
}

/// Requantizes a wide value with `from_frac` fraction bits into format `to`: rescale with
/// `mode`, then saturate to the word. Returns the raw value and whether it saturated.
#[inline]
pub fn requantize(
    v: i64,
    from_frac: u32,
    to: QFormat,
    mode: Rounding,
    rng: &mut Rng,
) -> (i32, bool) {
    // The usual store (a value of at most 30 bits losing 1 to 30 fraction bits) rounds in
    // one word, with the same result and draws as the general path below.
    const BOUND: i64 = 1 << 30;
    if (-BOUND..=BOUND).contains(&v) {
        if let Some(s) = from_frac.checked_sub(to.frac as u32).and_then(Shr32::new) {
            let v = v as i32;
            let r = match mode {
                Rounding::TowardZero if TOWARD_ZERO => TowardZero::shr32(v, s, rng),
                Rounding::Stochastic if STOCHASTIC => Stochastic::shr32(v, s, rng),
                _ => NearestEven::shr32(v, s, rng),
            };
            return to.word.saturate(r as i64);
        }
    }
    // A wider value (a long dot product) losing 1 to 62 bits: the shift split by words.
    const BOUND64: i64 = 1 << 62;
    if (-BOUND64..=BOUND64).contains(&v) {
        if let Some(s) = from_frac.checked_sub(to.frac as u32).and_then(Shr64::new) {
            let r = match mode {
                Rounding::TowardZero if TOWARD_ZERO => TowardZero::shr64(v, s, rng),
                Rounding::Stochastic if STOCHASTIC => Stochastic::shr64(v, s, rng),
                _ => NearestEven::shr64(v, s, rng),
            };
            return to.word.saturate_narrow(r);
        }
    }
    let (r, sat_shift) = rescale(v, from_frac, to.frac as u32, mode, rng);
    let (out, sat_word) = to.word.saturate(r);
    (out, sat_shift || sat_word)
}

/// Requantizes `v / den` (a value with `from_frac` fraction bits divided by a positive whole
/// number, such as a pooling window) into format `to`, with a single rounding by `mode`.
/// Returns the raw value and whether it saturated. `den ≤ 1` is plain [`requantize`].
///
/// Exact for every shift the engine produces (`from_frac − to.frac ≤ 31` with `den < 2^16`);
/// beyond that the divisor is clamped to `i64::MAX`, which formats within `MAX_FRAC` never
/// reach.
pub fn requantize_div(
    v: i64,
    from_frac: u32,
    den: u32,
    to: QFormat,
    mode: Rounding,
    rng: &mut Rng,
) -> (i32, bool) {
    if den <= 1 {
        return requantize(v, from_frac, to, mode, rng);
    }
    let to_frac = to.frac as u32;
    let (q, sat_shift) = if to_frac >= from_frac {
        let (num, sat) = shift_left_saturating(v, to_frac - from_frac);
        (div_round(num, den as i64, mode, rng), sat)
    } else {
        let shift = from_frac - to_frac;
        let wide = (den as u128) << shift.min(100);
        let d = if wide > i64::MAX as u128 {
            i64::MAX
        } else {
            wide as i64
        };
        (div_round(v, d, mode, rng), false)
    };
    let (out, sat_word) = to.word.saturate(q);
    (out, sat_shift || sat_word)
}

/// [`requantize`] for a 128-bit value: rescale with `mode`, then saturate to the word.
/// `from_frac ≤ 126`. Used only where a 64-bit intermediate would overflow.
pub fn requantize_wide(
    v: i128,
    from_frac: u32,
    to: QFormat,
    mode: Rounding,
    rng: &mut Rng,
) -> (i32, bool) {
    let to_frac = to.frac as u32;
    let q: i128 = if from_frac <= to_frac {
        let s = to_frac - from_frac;
        match v.checked_mul(1i128 << s.min(126)) {
            Some(x) => x,
            None => {
                if v < 0 {
                    i128::MIN
                } else {
                    i128::MAX
                }
            }
        }
    } else {
        let s = (from_frac - to_frac).min(126);
        let q = v >> s;
        let r = (v - (q << s)) as u128; // in [0, 2^s)
        let up = match mode {
            Rounding::TowardZero if TOWARD_ZERO => v < 0 && r != 0,
            Rounding::Stochastic if STOCHASTIC => {
                // Compare the top 64 bits of the remainder with 64 random bits; for s ≤ 64
                // this is exact, beyond that the probability is exact to 2^-64.
                let (rt, bits) = if s > 64 {
                    ((r >> (s - 64)) as u64, 64)
                } else {
                    (r as u64, s)
                };
                rng.bits(bits) < rt
            }
            // Nearest-even, and any mode this build leaves out.
            _ => {
                let half = 1u128 << (s - 1);
                r > half || (r == half && q & 1 != 0)
            }
        };
        q + up as i128
    };
    let lo = to.word.min_raw() as i128;
    let hi = to.word.max_raw() as i128;
    let c = q.clamp(lo, hi);
    (c as i32, c != q)
}

/// A right shift of a 32-bit value by a shift fixed for a whole kernel call, with its masks
/// worked out once: the hot loops' form of [`shift_right`].
///
/// Valid for `1 ≤ shift ≤ 30` and values of magnitude at most 2^30 (callers prove both
/// before they pick a loop that uses it; [`Shr32::new`] refuses other shifts). Every mode
/// gives exactly what [`shift_right`] gives for the same value, and draws the same random bits.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shr32 {
    shift: u32,
    /// `2^shift − 1`: the dropped bits.
    mask: i32,
    /// `2^(shift−1) − 1`: half a step, less one.
    half_less_one: i32,
}

impl Shr32 {
    /// The shift by `shift` bits, if `1 ≤ shift ≤ 30`.
    #[inline]
    pub const fn new(shift: u32) -> Option<Shr32> {
        if shift == 0 || shift > 30 {
            return None;
        }
        Some(Shr32 {
            shift,
            mask: (1i32 << shift) - 1,
            half_less_one: (1i32 << (shift - 1)) - 1,
        })
    }

    /// The shift in bits.
    #[inline]
    pub const fn shift(&self) -> u32 {
        self.shift
    }
}

/// [`Shr32`] for 64-bit values: a right shift by 1 to 62 bits fixed for a kernel call, for
/// values of magnitude at most 2^62 (a product of two 32-bit words, for example).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shr64 {
    shift: u32,
    mask: i64,
    half_less_one: i64,
}

impl Shr64 {
    /// The shift by `shift` bits, if `1 ≤ shift ≤ 62`.
    #[inline]
    pub const fn new(shift: u32) -> Option<Shr64> {
        if shift == 0 || shift > 62 {
            return None;
        }
        Some(Shr64 {
            shift,
            mask: (1i64 << shift) - 1,
            half_less_one: (1i64 << (shift - 1)) - 1,
        })
    }
}

/// `v >> shift` for `1 ≤ shift ≤ 62`, written so that a 32-bit core shifts one word: the high
/// word alone for shifts of 32 or more, a word pair for shorter ones (the general 64-bit
/// shift by a run-time amount costs both cases and a select).
#[inline(always)]
fn sar(v: i64, shift: u32) -> i64 {
    if shift >= 32 {
        (((v >> 32) as i32) >> ((shift - 32) & 31)) as i64
    } else {
        v >> (shift & 31)
    }
}

/// A rounding mode as a type, so a kernel is compiled once per mode and decides nothing per
/// value. [`Rounding`] picks one at the edge of a kernel call.
pub trait RoundMode {
    /// The mode this type stands for.
    const MODE: Rounding;
    /// `v / 2^shift` rounded by this mode, for `|v| ≤ 2^30`; the same value and the same
    /// random draws as [`shift_right`].
    fn shr32(v: i32, s: Shr32, rng: &mut Rng) -> i32;
    /// [`RoundMode::shr32`] for every `i32`, not only `|v| ≤ 2^30`; the same value and draws
    /// as [`shift_right`]. Toward zero and stochastic rounding cannot overflow and use
    /// [`RoundMode::shr32`] itself.
    #[inline(always)]
    fn shr32_any(v: i32, s: Shr32, rng: &mut Rng) -> i32 {
        Self::shr32(v, s, rng)
    }
    /// `v / 2^shift` rounded by this mode, for `|v| ≤ 2^62`; the same value and the same
    /// random draws as [`shift_right`].
    fn shr64(v: i64, s: Shr64, rng: &mut Rng) -> i64;
}

/// [`Rounding::NearestEven`] as a type.
#[derive(Clone, Copy, Debug)]
pub struct NearestEven;
/// [`Rounding::TowardZero`] as a type.
#[derive(Clone, Copy, Debug)]
pub struct TowardZero;
/// [`Rounding::Stochastic`] as a type.
#[derive(Clone, Copy, Debug)]
pub struct Stochastic;

impl RoundMode for NearestEven {
    const MODE: Rounding = Rounding::NearestEven;
    #[inline(always)]
    fn shr32(v: i32, s: Shr32, _: &mut Rng) -> i32 {
        // Adds half a step, less one when the kept part is even, so a tie goes to the even
        // neighbour: ⌊(v + 2^(s−1) − 1 + odd) / 2^s⌋. No overflow for |v| ≤ 2^30, s ≤ 30.
        (v + s.half_less_one + ((v >> s.shift) & 1)) >> s.shift
    }
    #[inline(always)]
    fn shr32_any(v: i32, s: Shr32, _: &mut Rng) -> i32 {
        // The floor, plus one when the dropped part, with the kept part's odd bit added, is
        // more than half a step (a tie rounds up only from an odd floor). Nothing overflows:
        // the dropped part is below 2^30.
        let q = v >> s.shift;
        q + (((v & s.mask) + (q & 1)) > s.half_less_one + 1) as i32
    }
    #[inline(always)]
    fn shr64(v: i64, s: Shr64, _: &mut Rng) -> i64 {
        sar(v + s.half_less_one + (sar(v, s.shift) & 1), s.shift)
    }
}

impl RoundMode for TowardZero {
    const MODE: Rounding = Rounding::TowardZero;
    #[inline(always)]
    fn shr32(v: i32, s: Shr32, _: &mut Rng) -> i32 {
        // A negative value gets the dropped bits' full range added before the floor.
        (v + ((v >> 31) & s.mask)) >> s.shift
    }
    #[inline(always)]
    fn shr64(v: i64, s: Shr64, _: &mut Rng) -> i64 {
        sar(v + ((v >> 63) & s.mask), s.shift)
    }
}

impl RoundMode for Stochastic {
    const MODE: Rounding = Rounding::Stochastic;
    #[inline(always)]
    fn shr32(v: i32, s: Shr32, rng: &mut Rng) -> i32 {
        let r = (v & s.mask) as u32;
        let u = rng.bits(s.shift) as u32;
        (v >> s.shift) + (u < r) as i32
    }
    #[inline(always)]
    fn shr64(v: i64, s: Shr64, rng: &mut Rng) -> i64 {
        let r = (v & s.mask) as u64;
        let u = rng.bits(s.shift);
        sar(v, s.shift) + (u < r) as i64
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn exact_floor_div_pow2(v: i64, s: u32) -> i128 {
        (v as i128).div_euclid(1i128 << s)
    }

    #[test]
    fn nearest_even_ties() {
        let mut r = Rng::new(0);
        let m = Rounding::NearestEven;
        // 2.5 -> 2, 3.5 -> 4, -2.5 -> -2, -3.5 -> -4 (shift 1 of 5, 7, -5, -7).
        assert_eq!(shift_right(5, 1, m, &mut r), 2);
        assert_eq!(shift_right(7, 1, m, &mut r), 4);
        assert_eq!(shift_right(-5, 1, m, &mut r), -2);
        assert_eq!(shift_right(-7, 1, m, &mut r), -4);
        // Just above and below a tie.
        assert_eq!(shift_right(9, 2, m, &mut r), 2); // 2.25
        assert_eq!(shift_right(11, 2, m, &mut r), 3); // 2.75
        assert_eq!(shift_right(i64::MIN, 62, m, &mut r), -2);
        assert_eq!(shift_right(i64::MAX, 62, m, &mut r), 2);
    }

    #[test]
    fn toward_zero() {
        let mut r = Rng::new(0);
        let m = Rounding::TowardZero;
        assert_eq!(shift_right(7, 1, m, &mut r), 3);
        assert_eq!(shift_right(-7, 1, m, &mut r), -3);
        assert_eq!(shift_right(-8, 1, m, &mut r), -4);
        assert_eq!(div_round(-7, 3, m, &mut r), -2);
        assert_eq!(div_round(7, 3, m, &mut r), 2);
    }

    #[test]
    fn stochastic_stays_between_neighbours() {
        let mut r = Rng::new(3);
        for v in [-1001i64, -1, 0, 1, 999, i64::MAX, i64::MIN] {
            for s in [1, 5, 31, 40, 62] {
                let got = shift_right(v, s, Rounding::Stochastic, &mut r) as i128;
                let lo = exact_floor_div_pow2(v, s);
                assert!(got == lo || got == lo + 1, "{v} >> {s} gave {got}");
            }
        }
        // Exact values are never moved.
        assert_eq!(shift_right(64, 3, Rounding::Stochastic, &mut r), 8);
        assert_eq!(div_round(-30, 3, Rounding::Stochastic, &mut r), -10);
    }

    #[test]
    fn div_round_nearest_even() {
        let mut r = Rng::new(0);
        let m = Rounding::NearestEven;
        assert_eq!(div_round(5, 2, m, &mut r), 2);
        assert_eq!(div_round(15, 6, m, &mut r), 2); // 2.5 -> 2
        assert_eq!(div_round(21, 6, m, &mut r), 4); // 3.5 -> 4
        assert_eq!(div_round(-21, 6, m, &mut r), -4);
        assert_eq!(div_round(-15, 6, m, &mut r), -2);
        assert_eq!(div_round(10, 3, m, &mut r), 3);
        assert_eq!(div_round(11, 3, m, &mut r), 4);
        assert_eq!(div_round(i64::MIN, 3, m, &mut r), -3074457345618258603);
    }

    #[test]
    fn left_shift_saturates() {
        assert_eq!(shift_left_saturating(1, 62), (1 << 62, false));
        assert_eq!(shift_left_saturating(2, 62), (i64::MAX, true));
        assert_eq!(shift_left_saturating(-2, 62), (i64::MIN, false));
        assert_eq!(shift_left_saturating(-3, 62), (i64::MIN, true));
        assert_eq!(shift_left_saturating(-1, 70), (i64::MIN, true));
    }

    #[test]
    fn requantize_div_rounds_once() {
        let mut r = Rng::new(0);
        let q = QFormat::new(Word::I16, 4).unwrap();
        // (5 + 6 + 6) / 3 = 17/3 = 5.667 at frac 0 -> frac 4: 90.67 -> 91.
        assert_eq!(
            requantize_div(17, 0, 3, q, Rounding::NearestEven, &mut r),
            (91, false)
        );
        // From more fraction bits: 17 at frac 8 / 3 = 0.02213 -> frac 4: 0.354 steps -> 0.
        assert_eq!(
            requantize_div(17, 8, 3, q, Rounding::NearestEven, &mut r),
            (0, false)
        );
        // 24 at frac 8 / 3 = 8 at frac 8 = 0.5 step at frac 4 -> tie to even 0.
        assert_eq!(
            requantize_div(24, 8, 3, q, Rounding::NearestEven, &mut r),
            (0, false)
        );
        assert_eq!(
            requantize_div(72, 8, 3, q, Rounding::NearestEven, &mut r),
            (2, false)
        ); // 1.5 -> 2
        assert_eq!(
            requantize_div(i64::MAX, 0, 2, q, Rounding::NearestEven, &mut r),
            (32767, true)
        );
    }

    #[test]
    fn requantize_saturates_and_says_so() {
        let mut r = Rng::new(0);
        let q = QFormat::Q0_7;
        // 1.0 with 8 fraction bits (256) into Q0.7: 128 does not fit.
        assert_eq!(
            requantize(256, 8, q, Rounding::NearestEven, &mut r),
            (127, true)
        );
        assert_eq!(
            requantize(-256, 8, q, Rounding::NearestEven, &mut r),
            (-128, false)
        );
        assert_eq!(
            requantize(-258, 8, q, Rounding::NearestEven, &mut r),
            (-128, true)
        );
        assert_eq!(
            requantize(3, 0, q, Rounding::NearestEven, &mut r),
            (127, true)
        );
        assert_eq!(
            requantize(1, 30, q, Rounding::NearestEven, &mut r),
            (0, false)
        );
    }

    #[test]
    fn typed_shifts_equal_shift_right() {
        // Every mode, every shift the typed form takes, values at and around the ends of its
        // range and around ties; the random draws must match too.
        let vals = [
            -(1i32 << 30),
            (1 << 30),
            -(1 << 30) + 1,
            (1 << 30) - 1,
            0,
            1,
            -1,
            2,
            -2,
            3,
            -3,
            5,
            -5,
            6,
            -6,
            7,
            -7,
            12345,
            -12345,
        ];
        fn check<M: RoundMode>(vals: &[i32]) {
            for s in 1..=30 {
                let sh = Shr32::new(s).unwrap();
                let (mut a, mut b) = (Rng::new(s as u64), Rng::new(s as u64));
                for &v in vals {
                    for d in [-(1i32 << (s - 1)), -1, 0, 1, 1 << (s - 1)] {
                        let Some(v) = v.checked_add(d).filter(|x| x.unsigned_abs() <= 1 << 30)
                        else {
                            continue;
                        };
                        let want = shift_right(v as i64, s, M::MODE, &mut a);
                        assert_eq!(M::shr32(v, sh, &mut b) as i64, want, "{v} >> {s}");
                        assert_eq!(a, b);
                    }
                }
            }
        }
        check::<NearestEven>(&vals);
        check::<TowardZero>(&vals);
        check::<Stochastic>(&vals);
        fn check64<M: RoundMode>() {
            let edge = 1i64 << 62;
            let vals = [
                -edge,
                edge,
                -edge + 1,
                edge - 1,
                0,
                1,
                -1,
                5,
                -5,
                7,
                -7,
                1 << 40,
            ];
            for s in 1..=62 {
                let sh = Shr64::new(s).unwrap();
                let (mut a, mut b) = (Rng::new(s as u64), Rng::new(s as u64));
                for &v in &vals {
                    for d in [-(1i64 << (s - 1)), -1, 0, 1, 1 << (s - 1)] {
                        let Some(v) = v.checked_add(d).filter(|x| x.unsigned_abs() <= 1 << 62)
                        else {
                            continue;
                        };
                        let want = shift_right(v, s, M::MODE, &mut a);
                        assert_eq!(M::shr64(v, sh, &mut b), want, "{v} >> {s}");
                        assert_eq!(a, b);
                    }
                }
            }
        }
        check64::<NearestEven>();
        check64::<TowardZero>();
        check64::<Stochastic>();
        // Random values over the whole range, every shift and mode.
        let mut g = Rng::new(9);
        for _ in 0..20_000 {
            let v = (g.next_u32() as i64) << 32 | g.next_u32() as i64;
            let v = v >> (g.next_u32() % 40 + 1);
            let s = g.next_u32() % 62 + 1;
            let sh = Shr64::new(s).unwrap();
            for mode in [
                Rounding::NearestEven,
                Rounding::TowardZero,
                Rounding::Stochastic,
            ] {
                let seed = g.next_u32() as u64;
                let (mut a, mut b) = (Rng::new(seed), Rng::new(seed));
                let want = shift_right(v, s, mode, &mut a);
                let got = match mode {
                    Rounding::NearestEven => NearestEven::shr64(v, sh, &mut b),
                    Rounding::TowardZero => TowardZero::shr64(v, sh, &mut b),
                    Rounding::Stochastic => Stochastic::shr64(v, sh, &mut b),
                };
                assert_eq!((got, a), (want, b), "{v} >> {s} {mode:?}");
            }
        }
        // The full-range 32-bit shift.
        for k in 0..20_000 {
            let v = match k {
                0 => i32::MAX,
                1 => i32::MIN,
                2 => i32::MAX - 1,
                3 => i32::MIN + 1,
                _ => g.next_u32() as i32 >> (g.next_u32() % 31),
            };
            let s = g.next_u32() % 30 + 1;
            let sh = Shr32::new(s).unwrap();
            for mode in [
                Rounding::NearestEven,
                Rounding::TowardZero,
                Rounding::Stochastic,
            ] {
                let seed = g.next_u32() as u64;
                let (mut a, mut b) = (Rng::new(seed), Rng::new(seed));
                let want = shift_right(v as i64, s, mode, &mut a);
                let got = match mode {
                    Rounding::NearestEven => NearestEven::shr32_any(v, sh, &mut b),
                    Rounding::TowardZero => TowardZero::shr32_any(v, sh, &mut b),
                    Rounding::Stochastic => Stochastic::shr32_any(v, sh, &mut b),
                };
                assert_eq!((got as i64, a), (want, b), "{v} >> {s} {mode:?}");
            }
        }
        // `requantize`'s one-word path against the general rescale and saturate.
        for _ in 0..20_000 {
            let v = ((g.next_u32() as i64) << 32 | g.next_u32() as i64) >> (g.next_u32() % 63);
            let from = g.next_u32() % 40;
            let word = [Word::I8, Word::I16, Word::I32][g.next_u32() as usize % 3];
            let to = QFormat::new_unchecked(word, (g.next_u32() % word.bits()) as u8);
            for mode in [
                Rounding::NearestEven,
                Rounding::TowardZero,
                Rounding::Stochastic,
            ] {
                let seed = g.next_u32() as u64;
                let (mut a, mut b) = (Rng::new(seed), Rng::new(seed));
                let (r, sat) = rescale(v, from, to.frac as u32, mode, &mut a);
                let (q, sat_w) = to.word.saturate(r);
                let got = requantize(v, from, to, mode, &mut b);
                assert_eq!(
                    (got, a),
                    ((q, sat || sat_w), b),
                    "{v} {from} {to:?} {mode:?}"
                );
            }
        }
        assert_eq!(Shr64::new(63), None);
        assert_eq!(Shr32::new(0), None);
        assert_eq!(Shr32::new(31), None);
    }
}
