//! Dynamic fixed point: the overflow-rate rule of Courbariaux, Bengio and David, "Training
//! deep neural networks with low precision multiplications" (ICLR 2015 workshop; arXiv
//! 1412.7024, 2014), section 4.
//!
//! Each moving tensor (layer outputs, loss gradients, gradient accumulators) counts the
//! values written, the values that saturated, and the values in the outer half of the range
//! (those that would have saturated with one more fraction bit, [`Tally::high`]). At the end of
//! every interval:
//!
//! - if the saturation rate exceeds the maximum, the tensor loses one fraction bit (its range
//!   doubles);
//! - else, if the rate of values that would saturate with one more fraction bit is also at
//!   most the maximum, it gains one (its step halves), up to [`MAX_FRAC`];
//! - else it stays.
//!
//! This is the paper's rule as we recall it (from memory): the scaling factor is raised when
//! the overflow rate exceeds the maximum and lowered when the overflow rate of twice the
//! values stays below it. Testing the doubled values, not merely a low rate, is what keeps a
//! tensor from swinging between two formats: a tensor that fills more than half its range at
//! `f + 1` bits never gains that bit. The paper's maximum was 0.01 % (100 ppm).

use crate::kernel::Tally;
use crate::model::DynamicRule;
use crate::num::MAX_FRAC;

/// The new fraction bits of a tensor whose counters went from `mark` to `now` over the
/// interval.
pub fn adjust(frac: u8, now: &Tally, mark: &Tally, rule: DynamicRule) -> u8 {
    let values = now.values.saturating_sub(mark.values) as u64;
    let sats = now.saturations.saturating_sub(mark.saturations) as u64;
    let high = now.high.saturating_sub(mark.high) as u64;
    if values == 0 {
        return frac;
    }
    let max = rule.max_rate_ppm as u64 * values;
    if sats * 1_000_000 > max {
        frac.saturating_sub(1)
    } else if high * 1_000_000 <= max && frac < MAX_FRAC {
        frac + 1
    } else {
        frac
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tally(values: u32, saturations: u32, high: u32) -> Tally {
        Tally {
            values,
            saturations,
            lost_updates: 0,
            high,
        }
    }

    #[test]
    fn rule_moves_one_bit_each_way() {
        let rule = DynamicRule {
            max_rate_ppm: 100,
            interval: 1,
        };
        let zero = Tally::default();
        // 2 saturations in 10 000 = 200 ppm > 100: lose a fraction bit.
        assert_eq!(adjust(12, &tally(10_000, 2, 40), &zero, rule), 11);
        // 1 in 10 000 = 100 ppm, not above the maximum; 2 of the values in the outer half
        // (200 ppm) would saturate at 13 bits: stay.
        assert_eq!(adjust(12, &tally(10_000, 1, 2), &zero, rule), 12);
        // None saturated, but 3 % fill the outer half: gaining a bit would saturate them, so
        // stay (a rule on the saturation rate alone would gain here and lose it again next).
        assert_eq!(adjust(12, &tally(10_000, 0, 300), &zero, rule), 12);
        // 1 in the outer half of 20 000 = 50 ppm ≤ 100: gain a bit.
        assert_eq!(adjust(12, &tally(20_000, 1, 1), &zero, rule), 13);
        assert_eq!(adjust(12, &tally(20_000, 0, 0), &zero, rule), 13);
        // Only the interval counts: the mark is subtracted (2 saturations and 4 in the outer
        // half of 20 000: 100 and 200 ppm, so stay; counted from zero, 4 saturations in
        // 30 000 are 133 ppm and would lose a bit).
        assert_eq!(
            adjust(12, &tally(30_000, 4, 6), &tally(10_000, 2, 2), rule),
            12
        );
        assert_eq!(adjust(12, &tally(30_000, 4, 6), &zero, rule), 11);
        // Limits.
        assert_eq!(adjust(0, &tally(10, 10, 10), &zero, rule), 0);
        assert_eq!(adjust(MAX_FRAC, &tally(10, 0, 0), &zero, rule), MAX_FRAC);
        assert_eq!(adjust(7, &zero, &zero, rule), 7);
    }
}
