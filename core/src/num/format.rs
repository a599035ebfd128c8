//! Word sizes and Q-formats.
//!
//! A tensor's values are stored as raw two's-complement integers of one [`Word`] size. Its
//! [`QFormat`] says how many of the word's bits are fraction bits: the real value of a raw
//! integer `r` is `r · 2^-frac`. The trade writes such a format as **Qm.n**, with `n = frac`
//! fraction bits and `m = bits − 1 − n` integer bits beside the sign bit: an `i16` with 12
//! fraction bits is Q3.12, step 2^-12 ≈ 0.000244, range [−8, 8 − 2^-12].
//!
//! Formats are chosen **at run time**: a sweep or the dynamic fixed-point rule may change the
//! fraction bits of a tensor without recompiling anything. The word size decides memory and is
//! fixed by the model description.
//!
//! Values outside the range **saturate** to the nearest end of the range; every conversion that
//! saturates says so by name and is counted by the caller where it matters.

use core::fmt;
use serde::{Deserialize, Serialize};

use crate::error::Error;

/// The storage word of a tensor: a signed integer of 8, 16 or 32 bits.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Word {
    /// `i8`: one byte per value.
    I8,
    /// `i16`: two bytes per value.
    I16,
    /// `i32`: four bytes per value.
    I32,
}

impl Word {
    /// Whether the kernels are built for values (weights, biases, activations, gradients,
    /// inputs) stored in this word: `i16` always, `i8` and `i32` with the `word-i8` and
    /// `word-i32` features. Accumulators, master copies and momentum buffers are 32-bit in
    /// every build. A description with a value word that is not built is rejected with
    /// [`crate::error::LayerFault::NotBuilt`], and the kernels' copies for it are not linked.
    pub const fn is_built_for_values(self) -> bool {
        match self {
            Word::I8 => cfg!(feature = "word-i8"),
            Word::I16 => true,
            Word::I32 => cfg!(feature = "word-i32"),
        }
    }

    /// Bits in the word, sign bit included.
    pub const fn bits(self) -> u32 {
        match self {
            Word::I8 => 8,
            Word::I16 => 16,
            Word::I32 => 32,
        }
    }

    /// Bytes one value takes in memory.
    pub const fn bytes(self) -> usize {
        (self.bits() / 8) as usize
    }

    /// The most negative raw value.
    pub const fn min_raw(self) -> i32 {
        match self {
            Word::I8 => i8::MIN as i32,
            Word::I16 => i16::MIN as i32,
            Word::I32 => i32::MIN,
        }
    }

    /// The most positive raw value.
    pub const fn max_raw(self) -> i32 {
        match self {
            Word::I8 => i8::MAX as i32,
            Word::I16 => i16::MAX as i32,
            Word::I32 => i32::MAX,
        }
    }

    /// Clamps a wide value into this word's raw range. Returns the clamped value and whether it
    /// had to clamp (saturate).
    #[inline]
    pub const fn saturate(self, v: i64) -> (i32, bool) {
        let lo = self.min_raw() as i64;
        let hi = self.max_raw() as i64;
        if v < lo {
            (lo as i32, true)
        } else if v > hi {
            (hi as i32, true)
        } else {
            (v as i32, false)
        }
    }

    /// [`Word::saturate`] for a value that usually fits in 32 bits: one test of the high word,
    /// then a 32-bit clamp (what a small core does in a few instructions), and the same result
    /// for every `v`.
    #[inline(always)]
    pub const fn saturate_narrow(self, v: i64) -> (i32, bool) {
        let n = v as i32;
        if n as i64 != v {
            return if v < 0 {
                (self.min_raw(), true)
            } else {
                (self.max_raw(), true)
            };
        }
        if n < self.min_raw() {
            (self.min_raw(), true)
        } else if n > self.max_raw() {
            (self.max_raw(), true)
        } else {
            (n, false)
        }
    }

    /// The word for a bit count of 8, 16 or 32.
    pub const fn from_bits(bits: u32) -> Option<Word> {
        match bits {
            8 => Some(Word::I8),
            16 => Some(Word::I16),
            32 => Some(Word::I32),
            _ => None,
        }
    }
}

impl fmt::Display for Word {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "i{}", self.bits())
    }
}

/// The largest number of fraction bits a format may have.
///
/// Kept at 31 so that the product of two tensors has at most 62 fraction bits and every
/// rescaling shift stays below 63, where 64-bit arithmetic is exact.
pub const MAX_FRAC: u8 = 31;

/// A Q-format: word size and fraction bits. See the [module docs](self).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct QFormat {
    /// Storage word.
    pub word: Word,
    /// Fraction bits, `0..=MAX_FRAC`. May exceed `bits − 1` for tensors of small magnitude
    /// (gradients), in which case the integer part `m` of Qm.n is negative.
    pub frac: u8,
}

impl QFormat {
    /// Q0.7: `i8`, 7 fraction bits, range [−1, 1 − 2^-7].
    pub const Q0_7: QFormat = QFormat::new_unchecked(Word::I8, 7);
    /// Q0.15: `i16`, 15 fraction bits, range [−1, 1 − 2^-15].
    pub const Q0_15: QFormat = QFormat::new_unchecked(Word::I16, 15);
    /// Q7.8: `i16`, 8 fraction bits, range [−128, 128 − 2^-8].
    pub const Q7_8: QFormat = QFormat::new_unchecked(Word::I16, 8);
    /// Q15.16: `i32`, 16 fraction bits, range [−32768, 32768 − 2^-16].
    pub const Q15_16: QFormat = QFormat::new_unchecked(Word::I32, 16);

    /// A format, checked.
    ///
    /// # Errors
    /// [`Error::InvalidFormat`] if `frac > MAX_FRAC`.
    pub const fn new(word: Word, frac: u8) -> Result<QFormat, Error> {
        if frac > MAX_FRAC {
            Err(Error::InvalidFormat)
        } else {
            Ok(QFormat { word, frac })
        }
    }

    /// A format without the range check on `frac`; for constants known to be valid.
    /// Arithmetic on a format with `frac > MAX_FRAC` is wrong, so prefer [`QFormat::new`].
    pub const fn new_unchecked(word: Word, frac: u8) -> QFormat {
        QFormat { word, frac }
    }

    /// Whether `frac` is within `0..=MAX_FRAC`.
    pub const fn is_valid(self) -> bool {
        self.frac <= MAX_FRAC
    }

    /// Integer bits `m` of Qm.n (`bits − 1 − frac`), negative when `frac ≥ bits`.
    pub const fn int_bits(self) -> i32 {
        self.word.bits() as i32 - 1 - self.frac as i32
    }

    /// The value of one raw step, 2^-frac.
    pub fn step(self) -> f64 {
        pow2(-(self.frac as i32))
    }

    /// The smallest representable value.
    pub fn min_value(self) -> f64 {
        self.word.min_raw() as f64 * self.step()
    }

    /// The largest representable value.
    pub fn max_value(self) -> f64 {
        self.word.max_raw() as f64 * self.step()
    }

    /// The real value of a raw integer in this format (exact in `f64` for every word).
    pub fn to_f64(self, raw: i32) -> f64 {
        raw as f64 * self.step()
    }

    /// The real value of a raw integer as `f32` (rounded to nearest by the conversion).
    pub fn to_f32(self, raw: i32) -> f32 {
        self.to_f64(raw) as f32
    }

    /// The raw integer nearest to `x` (ties to even), saturated to the word. Returns the raw
    /// value and whether it saturated.
    ///
    /// # Errors
    /// [`Error::NotFinite`] if `x` is NaN or infinite.
    pub fn from_f64_saturating(self, x: f64) -> Result<(i32, bool), Error> {
        if !x.is_finite() {
            return Err(Error::NotFinite);
        }
        let scaled = x * pow2(self.frac as i32);
        let lo = self.word.min_raw() as f64;
        let hi = self.word.max_raw() as f64;
        if scaled <= lo - 0.5 {
            // Below the range by at least half a step: saturates (ties at exactly lo − 0.5
            // round to even, which for an even lo is lo itself, so `<` would also do; the word
            // minimum is always even).
            return Ok((self.word.min_raw(), scaled < lo - 0.5));
        }
        if scaled >= hi + 0.5 {
            return Ok((self.word.max_raw(), true));
        }
        Ok((round_half_even_f64(scaled) as i32, false))
    }

    /// Like [`QFormat::from_f64_saturating`] for an `f32`.
    ///
    /// # Errors
    /// [`Error::NotFinite`] if `x` is NaN or infinite.
    pub fn from_f32_saturating(self, x: f32) -> Result<(i32, bool), Error> {
        self.from_f64_saturating(x as f64)
    }
}

impl fmt::Display for QFormat {
    /// Writes `Qm.n (iW)`, for example `Q3.12 (i16)`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "Q{}.{} ({})", self.int_bits(), self.frac, self.word)
    }
}

/// 2^e as `f64`, exact for `−1022 ≤ e ≤ 1023`; built from the bit pattern so it needs no `std`.
pub fn pow2(e: i32) -> f64 {
    let e = e.clamp(-1022, 1023);
    f64::from_bits(((e + 1023) as u64) << 52)
}

/// Rounds to the nearest integer, ties to even, without `std`. Exact for all finite inputs
/// whose magnitude is below 2^62 (larger ones are already integers in `f64` and are returned
/// unchanged).
pub fn round_half_even_f64(x: f64) -> f64 {
    if x.is_nan() || x.abs() >= 4.611_686_018_427_388e18 {
        return x;
    }
    let t = x as i64; // toward zero, exact for |x| < 2^63
    let frac = x - t as f64; // exact: both are within 2^62 and share the binade
    let r = if frac > 0.5 {
        t + 1
    } else if frac < -0.5 {
        t - 1
    } else if frac == 0.5 {
        if t & 1 == 0 {
            t
        } else {
            t + 1
        }
    } else if frac == -0.5 {
        if t & 1 == 0 {
            t
        } else {
            t - 1
        }
    } else {
        t
    };
    r as f64
}

/// A scalar hyperparameter in fixed point: a raw `i32` and its fraction bits. Learning rate,
/// momentum, weight decay and the gradient clip bound are given this way, so the device needs
/// no floating point.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct QScalar {
    /// Raw value.
    pub raw: i32,
    /// Fraction bits, `0..=MAX_FRAC`.
    pub frac: u8,
}

impl QScalar {
    /// Zero.
    pub const ZERO: QScalar = QScalar { raw: 0, frac: 0 };

    /// The scalar nearest to `x` with `frac` fraction bits.
    ///
    /// # Errors
    /// [`Error::NotFinite`] for NaN or infinity; [`Error::InvalidFormat`] if `frac > MAX_FRAC`
    /// or `x` is out of the `i32` range at that scale.
    pub fn from_f64(x: f64, frac: u8) -> Result<QScalar, Error> {
        let fmt = QFormat::new(Word::I32, frac)?;
        let (raw, sat) = fmt.from_f64_saturating(x)?;
        if sat {
            return Err(Error::InvalidFormat);
        }
        Ok(QScalar { raw, frac })
    }

    /// The real value.
    pub fn to_f64(self) -> f64 {
        self.raw as f64 * pow2(-(self.frac as i32))
    }

    /// Whether the scalar is zero.
    pub const fn is_zero(self) -> bool {
        self.raw == 0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn narrow_saturation_equals_wide() {
        let edges = [
            0i64, 1, -1, 127, 128, -128, -129, 32767, 32768, -32768, -32769,
        ];
        let big = [
            i32::MAX as i64,
            i32::MIN as i64,
            1 << 31,
            -(1 << 31) - 1,
            i64::MAX,
            i64::MIN,
        ];
        let mut x = 0x9E37_79B9_7F4A_7C15u64;
        let random = (0..5000).map(|_| {
            x ^= x << 13;
            x ^= x >> 7;
            x ^= x << 17;
            (x as i64) >> (x % 64)
        });
        for v in edges.into_iter().chain(big).chain(random) {
            for w in [Word::I8, Word::I16, Word::I32] {
                assert_eq!(w.saturate_narrow(v), w.saturate(v), "{v} {w:?}");
            }
        }
    }

    #[test]
    fn ranges_and_steps() {
        let q = QFormat::new(Word::I16, 12).unwrap();
        assert_eq!(q.int_bits(), 3);
        assert_eq!(q.step(), 1.0 / 4096.0);
        assert_eq!(q.min_value(), -8.0);
        assert_eq!(q.max_value(), 8.0 - 1.0 / 4096.0);
        assert_eq!(QFormat::Q0_7.max_value(), 127.0 / 128.0);
        assert!(QFormat::new(Word::I8, 32).is_err());
        assert_eq!(format!("{}", q), "Q3.12 (i16)");
    }

    #[test]
    fn from_f64_edges() {
        let q = QFormat::Q0_7;
        // Ties at exactly half a step go to the even raw value.
        assert_eq!(q.from_f64_saturating(0.5 / 128.0).unwrap(), (0, false));
        assert_eq!(q.from_f64_saturating(1.5 / 128.0).unwrap(), (2, false));
        assert_eq!(q.from_f64_saturating(-1.5 / 128.0).unwrap(), (-2, false));
        assert_eq!(q.from_f64_saturating(-2.5 / 128.0).unwrap(), (-2, false));
        // MAX, MAX + half a step (tie, rounds to even 128 -> saturates), MIN, below MIN.
        assert_eq!(q.from_f64_saturating(127.0 / 128.0).unwrap(), (127, false));
        assert_eq!(q.from_f64_saturating(127.4 / 128.0).unwrap(), (127, false));
        assert_eq!(q.from_f64_saturating(127.5 / 128.0).unwrap(), (127, true));
        assert_eq!(q.from_f64_saturating(-1.0).unwrap(), (-128, false));
        assert_eq!(
            q.from_f64_saturating(-128.5 / 128.0).unwrap(),
            (-128, false)
        );
        assert_eq!(q.from_f64_saturating(-128.6 / 128.0).unwrap(), (-128, true));
        assert_eq!(q.from_f64_saturating(5.0).unwrap(), (127, true));
        assert_eq!(q.from_f64_saturating(f64::NAN), Err(Error::NotFinite));
        assert_eq!(q.from_f64_saturating(f64::INFINITY), Err(Error::NotFinite));
    }

    #[test]
    fn round_half_even_matches_std() {
        for &x in &[
            0.5,
            1.5,
            2.5,
            -0.5,
            -1.5,
            -2.5,
            2.4999,
            1e17 + 0.0,
            -7.5,
            3.0000001,
        ] {
            assert_eq!(round_half_even_f64(x), x.round_ties_even(), "{x}");
        }
    }

    #[test]
    fn pow2_is_exact() {
        assert_eq!(pow2(0), 1.0);
        assert_eq!(pow2(-31), 1.0 / 2147483648.0);
        assert_eq!(pow2(10), 1024.0);
    }

    #[test]
    fn scalar_roundtrip() {
        let s = QScalar::from_f64(0.01, 16).unwrap();
        assert_eq!(s.raw, 655); // 0.01 * 65536 = 655.36
        assert!((s.to_f64() - 0.01).abs() <= 0.5 / 65536.0);
        assert!(QScalar::from_f64(1e10, 16).is_err());
    }
}
