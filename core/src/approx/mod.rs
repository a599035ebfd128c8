//! Integer-only lookup-table approximations of σ, tanh, e^-u and ln for the fixed-point engine.
//!
//! Every function takes a fixed-point argument `raw · 2^-frac` and returns a value with
//! [`OUT_FRAC`] fraction bits. A `frac` above 62 is treated as 62. At run time there are no
//! floats and no divisions, and no input (any `raw`, any `frac`) can panic or overflow.
//!
//! All four share one mechanism: a uniform table of correctly rounded samples (spacing a power
//! of two, first sample at 0), indexed by the argument's magnitude, with linear interpolation
//! between the two neighbouring samples. The argument is truncated to 24 bits below the table
//! spacing first, which moves it by less than 2^-30. Each file documents its table, its range
//! reduction or symmetry and the maximum error measured by its own test; every file's tests
//! regenerate its table from Rust std's `f64` functions.
//!
//! | function | table | bytes | measured max error | bound tested |
//! |---|---|---|---|---|
//! | [`sigmoid::sigmoid`] | shares [`tanh`]'s | 0 | 6.34e-6 | 6.77e-6 ([`sigmoid::MAX_ERROR`]) |
//! | [`tanh::tanh`] | 767 × `u16` | 1534 | 1.27e-5 | 1.352e-5 ([`tanh::MAX_ERROR`]) |
//! | [`exp::exp_neg`] | 129 + 22 × `u32` | 604 | 7.60e-6 | 7.63e-6 ([`exp::MAX_ERROR`]) |
//! | [`ln::ln`] | 129 × `u32` | 516 | 7.57e-6 | 7.64e-6 ([`ln::MAX_ERROR`]) |
//!
//! Each bound is derived in its file from the interpolation error and the roundings, and its
//! error sweep enforces it; every one is below 2^-16, which the spot checks use.

/// Fraction bits of every approximation's result.
pub const OUT_FRAC: u32 = 30;

pub mod exp;
pub mod ln;
pub mod sigmoid;
pub mod tanh;

/// 1.0 with [`OUT_FRAC`] fraction bits.
const ONE: i64 = 1 << OUT_FRAC;

/// Largest `frac` honoured; larger values are treated as this.
const MAX_FRAC: u32 = 62;

/// Fraction bits of a position between two table samples (the interpolation weight).
const STEP_FRAC: u32 = 24;

/// Interpolates `table` (sample `i` at `i · 2^-step_log2`) at `mag · 2^-frac`.
///
/// Returns the value in table units with [`STEP_FRAC`] extra fraction bits, or `None` when the
/// argument is at or beyond the last sample. Needs entries in `0..2^31`.
fn lookup<T: Copy + Into<i64>>(table: &[T], mag: u64, frac: u32, step_log2: u32) -> Option<i64> {
    // Position in table steps with STEP_FRAC fraction bits, truncated.
    let bits = step_log2 + STEP_FRAC;
    let pos = if frac <= bits {
        let shift = bits - frac;
        if mag.leading_zeros() < shift {
            return None; // far beyond any table
        }
        mag << shift
    } else {
        mag.checked_shr(frac - bits).unwrap_or(0)
    };
    let i = usize::try_from(pos >> STEP_FRAC).ok()?;
    let Some(&[a, b, ..]) = table.get(i..) else {
        return None;
    };
    let (a, b): (i64, i64) = (a.into(), b.into());
    let weight = (pos & ((1 << STEP_FRAC) - 1)) as i64;
    // |b - a| < 2^31 and weight < 2^24: no overflow.
    Some((a << STEP_FRAC) + (b - a) * weight)
}

/// `v / 2^k` rounded to nearest (ties up), for `0 ≤ v < 2^62` and `1 ≤ k ≤ 62`.
fn round_shr(v: i64, k: u32) -> i64 {
    (v + (1 << (k - 1))) >> k
}

#[cfg(test)]
mod testing {
    //! Helpers shared by the approximations' tests.

    /// A common error bound for the spot checks, 2^-16 (each sweep enforces its file's own,
    /// tighter `MAX_ERROR`).
    pub const BOUND: f64 = 1.0 / 65536.0;

    /// The `frac` values every error sweep covers.
    pub const FRACS: [u32; 10] = [0, 1, 8, 15, 16, 24, 30, 40, 53, 62];

    /// Extreme raw arguments every test adds to its sweep.
    pub const EXTREMES: [i64; 7] = [i64::MIN, i64::MIN + 1, -1, 0, 1, i64::MAX - 1, i64::MAX];

    /// `frac` values for the no-panic checks, including ones above 62 (up to `u32::MAX`).
    pub const ALL_FRACS: [u32; 16] = [
        0, 1, 8, 15, 16, 24, 30, 31, 32, 33, 61, 62, 63, 64, 100, 4294967295,
    ];

    /// The real value of `raw · 2^-frac`.
    pub fn real(raw: i64, frac: u32) -> f64 {
        raw as f64 * (-f64::from(frac)).exp2()
    }

    /// The real value of an approximation's result.
    pub fn out(y: i64) -> f64 {
        y as f64 / (1u64 << super::OUT_FRAC) as f64
    }

    /// About 250 000 evenly spaced raw arguments covering `[lo, hi]` (real values) at `frac`,
    /// every representable one when there are fewer, plus [`EXTREMES`].
    pub fn grid(lo: f64, hi: f64, frac: u32) -> impl Iterator<Item = i64> {
        let scale = f64::from(frac).exp2();
        // `as` from f64 saturates at the i64 range.
        let (lo, hi) = ((lo * scale) as i64 as i128, (hi * scale) as i64 as i128);
        let step = ((hi - lo) / 250_000).max(1);
        (0..)
            .map(move |k| lo + k * step)
            .take_while(move |&r| r <= hi)
            .map(|r| r as i64)
            .chain(EXTREMES)
    }
}
