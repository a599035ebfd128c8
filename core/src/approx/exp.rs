//! e^-u for u ≥ 0 by range reduction, table lookup and linear interpolation.
//!
//! Method: u = n + f with integer n and f in [0, 1) (an exact split of the fixed-point bits), so
//! e^-u = e^-n · e^-f. e^-n comes from the table `WHOLE` (n = 0..=21); e^-f is interpolated
//! linearly in `FRACTION`, which samples `[0, 1]` at spacing 2^-7. The product is rounded to
//! Q1.30 and clamped to at least e^-(n+1) (the next entry of `WHOLE`), which keeps the result
//! non-increasing across integer boundaries despite the entries' rounding. For u ≥ 22 the result
//! is 0, the correctly rounded value (e^-22 < 2^-31); a negative argument is treated as 0 and
//! gives exactly 1.0.
//!
//! Tables: `FRACTION` 129 × `u32` = 516 bytes, entry `i` = `round(e^(-i/128) · 2^30)`;
//! `WHOLE` 22 × `u32` = 88 bytes, entry `n` = `round(e^-n · 2^30)`; 604 bytes together. Rounding
//! is half away from zero. The generator of record is the test `tables_match_std`, which
//! recomputes every entry from Rust std's `f64::exp` (the outside reference).
//!
//! Error: the interpolation error h²/8 · e^-f ≤ 2^-17 = 7.63e-6 (h = 2^-7), scaled by
//! e^-n ≤ 1, plus the entries' and the product's rounding (a few 2^-31). The test enforces
//! [`MAX_ERROR`] = 2^-17 + 2^-28 (7.63e-6) over its sweep; the measured maximum is 7.60e-6.

use super::{lookup, round_shr, MAX_FRAC, ONE, OUT_FRAC, STEP_FRAC};

/// The error bound derived above, which the test enforces: 2^-17 + 2^-28.
pub const MAX_ERROR: f64 = 1.0 / 131_072.0 + 1.0 / 268_435_456.0;

/// log2 of `FRACTION`'s spacing reciprocal: samples at `i · 2^-7`.
const STEP_LOG2: u32 = 7;

/// e^(-u) for u = raw · 2^-frac ≥ 0 (a negative raw is treated as 0; frac above 62 is treated
/// as 62). Result in Q1.30 (0 ..= 1<<30).
#[must_use]
pub fn exp_neg(raw: i64, frac: u32) -> i32 {
    let frac = frac.min(MAX_FRAC);
    let Ok(u) = u64::try_from(raw) else {
        return ONE as i32;
    };
    let n = usize::try_from(u >> frac).unwrap_or(usize::MAX);
    let Some(&whole) = WHOLE.get(n) else {
        return 0;
    };
    let next = WHOLE.get(n + 1).map_or(0, |&w| i64::from(w));
    let f = u & ((1 << frac) - 1);
    // f < 1 always lies inside the table; the fallback only avoids a panic path.
    let part = lookup(&FRACTION, f, frac, STEP_LOG2).map_or(0, |v| round_shr(v, STEP_FRAC));
    // Both factors ≤ 2^30: the product fits i64; the result lies in [0, 2^30].
    let y = round_shr(i64::from(whole) * part, OUT_FRAC).max(next);
    y as i32
}

/// `round(e^-n · 2^30)` for `n = 0..=21`.
static WHOLE: [u32; 22] = [
    1073741824, 395007542, 145315154, 53458458, 19666268, 7234816, 2661540, 979126, 360200, 132510,
    48748, 17933, 6597, 2427, 893, 328, 121, 44, 16, 6, 2, 1,
];

/// `round(e^(-i/128) · 2^30)` for `i = 0..=128`.
static FRACTION: [u32; 129] = [
    1073741824, 1065385899, 1057095000, 1048868621, 1040706261, 1032607421, 1024571606, 1016598326,
    1008687096, 1000837430, 993048852, 985320884, 977653056, 970044900, 962495950, 955005748,
    947573834, 940199756, 932883063, 925623310, 918420052, 911272850, 904181269, 897144874,
    890163238, 883235932, 876362536, 869542628, 862775794, 856061619, 849399695, 842789614,
    836230973, 829723372, 823266414, 816859704, 810502851, 804195468, 797937169, 791727573,
    785566300, 779452974, 773387223, 767368676, 761396966, 755471728, 749592600, 743759224,
    737971244, 732228306, 726530060, 720876158, 715266256, 709700009, 704177080, 698697131,
    693259826, 687864836, 682511829, 677200480, 671930464, 666701460, 661513148, 656365211,
    651257337, 646189212, 641160528, 636170977, 631220255, 626308060, 621434092, 616598054,
    611799650, 607038587, 602314575, 597627326, 592976553, 588361973, 583783304, 579240266,
    574732583, 570259978, 565822180, 561418917, 557049920, 552714923, 548413661, 544145872,
    539911296, 535709673, 531540747, 527404264, 523299971, 519227619, 515186957, 511177741,
    507199724, 503252664, 499336321, 495450455, 491594829, 487769208, 483973358, 480207047,
    476470046, 472762127, 469083063, 465432629, 461810604, 458216765, 454650894, 451112773,
    447602185, 444118918, 440662757, 437233492, 433830914, 430454815, 427104989, 423781232,
    420483340, 417211113, 413964350, 410742854, 407546428, 404374876, 401228006, 398105625,
    395007542,
];

#[cfg(test)]
mod tests {
    use super::super::testing::{grid, out, real, ALL_FRACS, BOUND, EXTREMES, FRACS};
    use super::*;

    fn q30(v: f64) -> f64 {
        (v * f64::from(1u32 << 30)).round()
    }

    /// Generator of record: every entry recomputed from std's `f64::exp`.
    #[test]
    fn tables_match_std() {
        for (n, &entry) in WHOLE.iter().enumerate() {
            assert_eq!(f64::from(entry), q30((-(n as f64)).exp()), "WHOLE[{n}]");
        }
        for (i, &entry) in FRACTION.iter().enumerate() {
            let f = i as f64 / f64::from(1u32 << STEP_LOG2);
            assert_eq!(f64::from(entry), q30((-f).exp()), "FRACTION[{i}]");
        }
        // The cut-off after WHOLE is right: e^-22 rounds to 0 in Q1.30.
        assert_eq!(q30((-(WHOLE.len() as f64)).exp()), 0.0);
    }

    #[test]
    fn max_error_within_bound() {
        let mut worst = 0f64;
        for frac in FRACS {
            for raw in grid(0.0, 24.0, frac) {
                let u = real(raw, frac).max(0.0);
                let err = (out(exp_neg(raw, frac).into()) - (-u).exp()).abs();
                worst = worst.max(err);
            }
        }
        assert!(worst <= MAX_ERROR, "max error {worst:e}");
    }

    #[test]
    fn spot_values() {
        for frac in ALL_FRACS {
            assert_eq!(exp_neg(0, frac), 1 << 30);
            assert_eq!(exp_neg(-1, frac), 1 << 30);
            assert_eq!(exp_neg(i64::MIN, frac), 1 << 30);
        }
        assert_eq!(exp_neg(i64::MAX, 0), 0);
        assert_eq!(exp_neg(22, 0), 0);
        // e^-1 and e^-ln2 = ½, from the constants e and ln 2.
        let e = core::f64::consts::E;
        assert!((out(exp_neg(1, 0).into()) - 1.0 / e).abs() <= BOUND);
        let ln2 = (core::f64::consts::LN_2 * f64::from(1u32 << 30)).round() as i64;
        assert!((out(exp_neg(ln2, 30).into()) - 0.5).abs() <= BOUND);
    }

    #[test]
    fn extremes_and_large_frac() {
        for frac in ALL_FRACS {
            for raw in EXTREMES {
                let y = exp_neg(raw, frac);
                assert!((0..=1 << 30).contains(&y));
                assert_eq!(y, exp_neg(raw, frac.min(62)));
            }
        }
    }

    #[test]
    fn monotone() {
        // Every raw at frac 16 over [0, 23], then a coarser grid at frac 62 over [0, 2).
        let mut prev = exp_neg(-1, 16);
        for raw in (0..=23 << 16).chain([i64::MAX]) {
            let y = exp_neg(raw, 16);
            assert!(y <= prev, "raw {raw}");
            prev = y;
        }
        let mut prev = exp_neg(0, 62);
        for raw in (0..=i64::MAX).step_by(1 << 44) {
            let y = exp_neg(raw, 62);
            assert!(y <= prev, "raw {raw}");
            prev = y;
        }
    }
}
