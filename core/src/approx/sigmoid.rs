//! The logistic function σ(x) = 1/(1+e^-x), from the tanh table.
//!
//! Method: σ(x) = ½ + ½·tanh(x/2), so σ needs no table of its own: it reads
//! [`super::tanh`]'s table (tanh at spacing 2^-7), which in terms of x is σ − ½ sampled at
//! `i / 64` for `i = 0..=766`, i.e. the domain `[0, 11.96875]` at spacing 2^-6, with linear
//! interpolation between neighbouring samples. σ(−x) = 1 − σ(x), so only |x| is looked up and
//! negative arguments are mirrored, which makes `sigmoid(-x) == (1 << 30) - sigmoid(x)` exact.
//! From the last sample on (|x| ≥ 11.96875, where 1 − σ(x) < 6.4e-6) the result saturates at 1.0
//! (or 0 for negative x), the correctly rounded limit.
//!
//! Table: none here (0 bytes); tanh's 767 × `u16` (1534 bytes) read as Q0.17 values of σ − ½.
//! Entry `i` equals `round((σ(i / 64) − ½) · 2^17)` (round half away from zero); the test
//! `table_matches_std` recomputes that from Rust std's `f64::exp` (the outside reference) for
//! every entry.
//!
//! Error: half of tanh's bound (1.352e-5 / 2 = 6.76e-6; measured 5.10e-6) inside the domain,
//! and the saturation (< 6.4e-6) beyond it, plus the result's rounding (2^-31). The test
//! enforces [`MAX_ERROR`] = 6.77e-6 over its sweep; the measured maximum is 6.34e-6.

use super::tanh::{STEP_LOG2, TABLE, TABLE_FRAC};

/// The error bound derived above, which the test enforces: tanh's bound halved plus 2^-31,
/// rounded up.
pub const MAX_ERROR: f64 = 6.77e-6;
use super::{lookup, round_shr, MAX_FRAC, ONE, OUT_FRAC, STEP_FRAC};

/// σ(x) = 1/(1+e^-x) for the real value x = raw · 2^-frac (frac in 0..=62; treat larger as 62).
/// Result in Q1.30 (0 ..= 1<<30).
#[must_use]
pub fn sigmoid(raw: i64, frac: u32) -> i32 {
    // Spacing 2^-6 instead of tanh's 2^-7: the lookup reads tanh at |x|/2.
    let (mag, frac) = (raw.unsigned_abs(), frac.min(MAX_FRAC));
    let above_half = match lookup(&TABLE, mag, frac, STEP_LOG2 - 1) {
        // tanh(|x|/2) with TABLE_FRAC + STEP_FRAC fraction bits; one more halves it.
        Some(v) => round_shr(v, TABLE_FRAC + STEP_FRAC + 1 - OUT_FRAC),
        None => ONE / 2,
    };
    let s = ONE / 2 + above_half;
    // 0 ≤ s ≤ 2^30 fits i32.
    (if raw < 0 { ONE - s } else { s }) as i32
}

#[cfg(test)]
mod tests {
    use super::super::testing::{grid, out, real, ALL_FRACS, BOUND, EXTREMES, FRACS};
    use super::*;

    fn reference(x: f64) -> f64 {
        1.0 / (1.0 + (-x).exp())
    }

    /// The shared table, regenerated as σ − ½ from std's `f64::exp`.
    #[test]
    fn table_matches_std() {
        for (i, &entry) in TABLE.iter().enumerate() {
            let x = i as f64 / f64::from(1u32 << (STEP_LOG2 - 1));
            let want = ((reference(x) - 0.5) * f64::from(1u32 << (TABLE_FRAC + 1))).round();
            assert_eq!(f64::from(entry), want, "entry {i}");
        }
    }

    #[test]
    fn max_error_within_bound() {
        let mut worst = 0f64;
        for frac in FRACS {
            for raw in grid(-14.0, 14.0, frac) {
                let err = (out(sigmoid(raw, frac).into()) - reference(real(raw, frac))).abs();
                worst = worst.max(err);
            }
        }
        assert!(worst <= MAX_ERROR, "max error {worst:e}");
    }

    #[test]
    fn spot_values() {
        for frac in ALL_FRACS {
            assert_eq!(sigmoid(0, frac), 1 << 29);
        }
        // Saturated: |x| ≥ 2^(63 - frac) is far beyond the table for frac ≤ 32.
        for frac in [0, 16, 32] {
            assert_eq!(sigmoid(i64::MAX, frac), 1 << 30);
            assert_eq!(sigmoid(i64::MIN, frac), 0);
        }
        // σ(1) = e / (e + 1), from the constant e.
        let e = core::f64::consts::E;
        assert!((out(sigmoid(1 << 20, 20).into()) - e / (e + 1.0)).abs() <= BOUND);
    }

    #[test]
    fn mirror_symmetry_and_range() {
        for frac in FRACS {
            for raw in grid(-14.0, 14.0, frac) {
                let s = sigmoid(raw, frac);
                assert!((0..=1 << 30).contains(&s));
                if raw != i64::MIN {
                    assert_eq!(sigmoid(-raw, frac), (1 << 30) - s, "raw {raw} frac {frac}");
                }
            }
        }
    }

    #[test]
    fn extremes_and_large_frac() {
        for frac in ALL_FRACS {
            for raw in EXTREMES {
                let s = sigmoid(raw, frac);
                assert!((0..=1 << 30).contains(&s));
                assert_eq!(s, sigmoid(raw, frac.min(62)));
            }
        }
    }

    #[test]
    fn monotone() {
        // Every raw at frac 16 over [-13, 13], then a coarser grid at frac 62 over (-2, 2).
        let mut prev = sigmoid(i64::MIN, 16);
        for raw in (-13 << 16..=13 << 16).chain([i64::MAX]) {
            let s = sigmoid(raw, 16);
            assert!(s >= prev, "raw {raw}");
            prev = s;
        }
        let mut prev = sigmoid(i64::MIN, 62);
        for raw in (i64::MIN..=i64::MAX).step_by(1 << 45) {
            let s = sigmoid(raw, 62);
            assert!(s >= prev, "raw {raw}");
            prev = s;
        }
    }
}
