//! ln(x) for x > 0 by range reduction, table lookup and linear interpolation.
//!
//! Method: x = 2^e · m with integer e and m in [1, 2) (read off the position of `raw`'s top bit,
//! exactly), so ln(x) = e · ln 2 + ln(m). ln(m) is interpolated linearly in `TABLE`, which
//! samples `[1, 2]` at spacing 2^-7. The octave term uses ln 2 in Q.30 as `LN2`, equal to the
//! table's last entry, so each octave starts exactly where the previous one ends and the result
//! is non-decreasing in x. The domain is every positive input; `raw == 0` gives `None`.
//!
//! Table: 129 × `u32` = 516 bytes, entry `i` = `round(ln(1 + i/128) · 2^30)` (round half away
//! from zero). The generator of record is the test `table_matches_std`, which recomputes every
//! entry from Rust std's `f64::ln` (the outside reference).
//!
//! Error: the interpolation error h²/8 ≤ 2^-17 = 7.63e-6 (h = 2^-7, |ln''| ≤ 1), plus rounding
//! of ln 2 in `LN2` (0.05 · 2^-30 per octave, at most 64 octaves: 3.2 · 2^-30) and of the
//! entries and the result (2^-31 each). The test enforces [`MAX_ERROR`] = 2^-17 + 2^-27
//! (7.64e-6) over x in [2^-20, 2^40] and on extreme inputs down to 2^-62 and up to 2^64; the
//! measured maximum is 7.57e-6.

use super::{lookup, round_shr, MAX_FRAC, STEP_FRAC};

/// The error bound derived above, which the test enforces: 2^-17 + 2^-27.
pub const MAX_ERROR: f64 = 1.0 / 131_072.0 + 1.0 / 134_217_728.0;

/// log2 of the table spacing's reciprocal: samples at `1 + i · 2^-7`.
const STEP_LOG2: u32 = 7;

/// ln 2 with 30 fraction bits: `round(ln 2 · 2^30)`, the table's last entry.
const LN2: i64 = 744_261_118;

/// ln(x) for x = raw · 2^-frac > 0, frac in 0..=62 (larger is treated as 62).
/// Result with 30 fraction bits. Returns None for raw == 0.
#[must_use]
pub fn ln(raw: u64, frac: u32) -> Option<i64> {
    let top = raw.checked_ilog2()?;
    let e = i64::from(top) - i64::from(frac.min(MAX_FRAC));
    // m − 1 = (raw without its top bit) · 2^-top, in [0, 1): always inside the table.
    let m = lookup(&TABLE, raw ^ (1 << top), top, STEP_LOG2)?;
    // |e| ≤ 63: no overflow.
    Some(e * LN2 + round_shr(m, STEP_FRAC))
}

/// `round(ln(1 + i/128) · 2^30)` for `i = 0..=128`.
static TABLE: [u32; 129] = [
    0, 8356010, 16647494, 24875440, 33040817, 41144567, 49187615, 57170862, 65095192, 72961468,
    80770534, 88523216, 96220323, 103862646, 111450959, 118986020, 126468572, 133899340, 141279038,
    148608363, 155887996, 163118608, 170300854, 177435378, 184522808, 191563764, 198558849,
    205508659, 212413774, 219274768, 226092199, 232866618, 239598564, 246288566, 252937143,
    259544806, 266112055, 272639381, 279127266, 285576186, 291986604, 298358977, 304693756,
    310991380, 317252283, 323476891, 329665621, 335818887, 341937090, 348020629, 354069895,
    360085271, 366067135, 372015859, 377931807, 383815338, 389666807, 395486560, 401274940,
    407032282, 412758919, 418455175, 424121372, 429757825, 435364845, 440942737, 446491803,
    452012338, 457504636, 462968983, 468405662, 473814952, 479197128, 484552460, 489881214,
    495183654, 500460037, 505710618, 510935650, 516135378, 521310048, 526459898, 531585167,
    536686088, 541762891, 546815803, 551845048, 556850847, 561833416, 566792972, 571729724,
    576643883, 581535654, 586405240, 591252841, 596078655, 600882877, 605665699, 610427311,
    615167901, 619887653, 624586750, 629265371, 633923694, 638561895, 643180146, 647778619,
    652357483, 656916903, 661457044, 665978069, 670480138, 674963409, 679428038, 683874180,
    688301988, 692711611, 697103200, 701476899, 705832856, 710171213, 714492111, 718795691,
    723082092, 727351448, 731603897, 735839570, 740058601, 744261118,
];

#[cfg(test)]
mod tests {
    use super::super::testing::{out, BOUND, FRACS};
    use super::*;

    /// Generator of record: every entry recomputed from std's `f64::ln`.
    #[test]
    fn table_matches_std() {
        for (i, &entry) in TABLE.iter().enumerate() {
            let m = 1.0 + i as f64 / f64::from(1u32 << STEP_LOG2);
            let want = (m.ln() * f64::from(1u32 << 30)).round();
            assert_eq!(f64::from(entry), want, "entry {i}");
        }
        assert_eq!(LN2, i64::from(TABLE[TABLE.len() - 1]));
        assert_eq!(
            LN2 as f64,
            (core::f64::consts::LN_2 * f64::from(1u32 << 30)).round()
        );
    }

    /// The real value of `raw · 2^-frac`.
    fn real(raw: u64, frac: u32) -> f64 {
        raw as f64 * (-f64::from(frac)).exp2()
    }

    fn error(raw: u64, frac: u32) -> f64 {
        let y = ln(raw, frac).expect("raw > 0");
        (out(y) - real(raw, frac).ln()).abs()
    }

    /// Raw arguments at the ends of the u64 range and around every power of two, in order.
    fn extremes() -> impl Iterator<Item = u64> {
        (1..64)
            .flat_map(|p| {
                let b = 1u64 << p;
                [b - 1, b, b + 1, b | (b >> 1)]
            })
            .chain([u64::MAX - 1, u64::MAX])
    }

    #[test]
    fn max_error_within_bound() {
        // 250 000 log-spaced points of x over [2^-20, 2^40] for each frac, where representable.
        const N: u32 = 250_000;
        let mut worst = 0f64;
        for frac in FRACS {
            for k in 0..=N {
                let x = (-20.0 + 60.0 * f64::from(k) / f64::from(N)).exp2();
                let raw = (x * f64::from(frac).exp2()).round();
                if raw < 1.0 || raw >= 2f64.powi(64) {
                    continue;
                }
                worst = worst.max(error(raw as u64, frac));
            }
        }
        assert!(worst <= MAX_ERROR, "max error {worst:e}");
        // Extremes, over all representable x (2^-62 ..= 2^64).
        for frac in FRACS {
            for raw in extremes() {
                assert!(error(raw, frac) <= MAX_ERROR, "raw {raw} frac {frac}");
            }
        }
    }

    #[test]
    fn spot_values() {
        for frac in [0, 1, 8, 15, 16, 24, 30, 62, 63, 100, u32::MAX] {
            assert_eq!(ln(0, frac), None);
            let one = 1u64 << frac.min(62);
            assert_eq!(ln(one, frac), Some(0));
        }
        let ln2 = out(ln(2, 0).expect("2 > 0"));
        assert!((ln2 - core::f64::consts::LN_2).abs() <= BOUND);
        let ln10 = out(ln(10 << 40, 40).expect("10 > 0"));
        assert!((ln10 - core::f64::consts::LN_10).abs() <= BOUND);
        assert_eq!(ln(u64::MAX, 62), ln(u64::MAX, 100));
    }

    #[test]
    fn monotone() {
        // Every raw up to 2^22 at frac 16, then a grid with ~4096 points per octave over all u64.
        let mut prev = i64::MIN;
        for raw in 1..=1u64 << 22 {
            let y = ln(raw, 16).expect("raw > 0");
            assert!(y >= prev, "raw {raw}");
            prev = y;
        }
        let mut prev = i64::MIN;
        let mut raw = 1u64;
        loop {
            let y = ln(raw, 30).expect("raw > 0");
            assert!(y >= prev, "raw {raw}");
            prev = y;
            let Some(next) = raw.checked_add((raw >> 12).max(1)) else {
                break;
            };
            raw = next;
        }
        // Around every octave boundary, at every frac.
        for frac in 0..=62 {
            let mut prev = i64::MIN;
            for raw in extremes() {
                let y = ln(raw, frac).expect("raw > 0");
                assert!(y >= prev, "raw {raw} frac {frac}");
                prev = y;
            }
        }
    }
}
