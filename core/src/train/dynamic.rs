//! Dynamic fixed point: the overflow-rate rule of Courbariaux, Bengio and David, "Training
//! deep neural networks with low precision multiplications" (ICLR 2015 workshop; arXiv
//! 1412.7024, 2014), section 4.
//!
//! Each moving tensor (layer outputs, loss gradients, gradient accumulators) counts the
//! values written and the values that saturated. At the end of every interval:
//!
//! - if the saturation rate exceeds the maximum, the tensor loses one fraction bit (its range
//!   doubles);
//! - else, if twice the rate is still at most the maximum, it gains one fraction bit (its step
//!   halves), up to [`MAX_FRAC`];
//! - else it stays.
//!
//! The rule moves one bit per interval, so a tensor settles where its saturation rate sits
//! near the maximum. The paper's maximum was 0.01 % (100 ppm).

use crate::kernel::Tally;
use crate::model::DynamicRule;
use crate::num::MAX_FRAC;

/// The new fraction bits of a tensor whose counters went from `mark` to `now` over the
/// interval.
pub fn adjust(frac: u8, now: &Tally, mark: &Tally, rule: DynamicRule) -> u8 {
    let values = now.values.saturating_sub(mark.values) as u64;
    let sats = now.saturations.saturating_sub(mark.saturations) as u64;
    if values == 0 {
        return frac;
    }
    let max = rule.max_rate_ppm as u64 * values;
    let rate = sats * 1_000_000;
    if rate > max {
        frac.saturating_sub(1)
    } else if 2 * rate <= max && frac < MAX_FRAC {
        frac + 1
    } else {
        frac
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tally(values: u32, saturations: u32) -> Tally {
        Tally {
            values,
            saturations,
            lost_updates: 0,
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
        assert_eq!(adjust(12, &tally(10_000, 2), &zero, rule), 11);
        // 1 in 10 000 = 100 ppm: not above the maximum, and twice it (200) is above: stay.
        assert_eq!(adjust(12, &tally(10_000, 1), &zero, rule), 12);
        // 1 in 20 000 = 50 ppm: twice is 100 ≤ 100: gain a bit.
        assert_eq!(adjust(12, &tally(20_000, 1), &zero, rule), 13);
        // Only the interval counts: the mark is subtracted.
        assert_eq!(adjust(12, &tally(30_000, 3), &tally(10_000, 1), rule), 12);
        // Limits.
        assert_eq!(adjust(0, &tally(10, 10), &zero, rule), 0);
        assert_eq!(adjust(MAX_FRAC, &tally(10, 0), &zero, rule), MAX_FRAC);
        assert_eq!(adjust(7, &zero, &zero, rule), 7);
    }
}
