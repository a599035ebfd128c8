//! The SGD update of one parameter tensor, in fixed point.
//!
//! For each value, with `A` the accumulator format, `n` the samples in the batch, `w` the
//! update target (the master copy if there is one, else the value):
//!
//! 1. `g = acc / n`, rounded to `A` (exact when `n` is 1);
//! 2. `g = clamp(g, −clip, clip)` when clipping is on (a bound finer than one step of `A`
//!    counts as one step);
//! 3. `g = g + λ·w`, the decay term rounded to `A`, when weight decay is on;
//! 4. `v = μ·v + g`, the product rounded to `A`, saturated to `A`'s word, when momentum is on;
//!    the update then uses `v` in place of `g`;
//! 5. `Δ = lr·g`, formed exactly and rounded once to the target's format;
//! 6. `w = w − Δ`, saturated to the target's word;
//! 7. with a master copy, the propagated value is the master rounded to nearest (ties to even)
//!    into the value format.
//!
//! Steps 1, 3, 4 and 5 round with the plan's *updates* rounding. An update is **lost** when
//! the weight had a reason to move (the accumulated gradient `acc`, or the exact `lr·g` after
//! decay and momentum, is not zero) and the rounded `Δ` is zero: the weight could not move,
//! whether the step vanished in the batch division (step 1) or in the final rounding (step 5).
//! With a learning rate of zero nothing is meant to move, and nothing is counted.
//! Products that vanish while they are summed into `acc` are not updates and are not counted.

use crate::kernel::{add_sat, Tally};
use crate::layer::TensorMut;
use crate::num::round::{div_round, requantize, rescale};
use crate::num::{QScalar, Rng, Rounding};

/// The hyperparameters of one update.
#[derive(Clone, Copy, Debug)]
pub struct UpdateConfig {
    /// Learning rate.
    pub lr: QScalar,
    /// Momentum coefficient (zero: no momentum buffer is read or written).
    pub momentum: QScalar,
    /// Weight decay.
    pub decay: QScalar,
    /// Clip bound (zero: no clipping).
    pub clip: QScalar,
    /// Samples accumulated in this batch (≥ 1).
    pub samples: u32,
    /// Rounding of the update arithmetic.
    pub mode: Rounding,
}

/// The tensors one update touches.
pub struct UpdateTensors<'a, 'b> {
    /// The propagated values.
    pub value: &'a mut TensorMut<'b>,
    /// The master copy, if any.
    pub master: Option<&'a mut TensorMut<'b>>,
    /// The gradient accumulator; cleared by the update.
    pub accum: &'a mut TensorMut<'b>,
    /// The momentum buffer (accumulator format), if momentum is on.
    pub momentum: Option<&'a mut TensorMut<'b>>,
}

/// Applies one update to every value of a tensor. Counts writes, saturations and lost
/// updates of the update target in `tally`, and saturations of the momentum buffer in
/// `accum_tally`.
pub fn update(
    t: UpdateTensors<'_, '_>,
    cfg: &UpdateConfig,
    rng: &mut Rng,
    tally: &mut Tally,
    accum_tally: &mut Tally,
) {
    let fa = t.accum.frac();
    let acc_word = t.accum.fmt.word;
    let clip = if cfg.clip.is_zero() {
        None
    } else {
        let (c, _) = rescale(
            cfg.clip.raw as i64,
            cfg.clip.frac as u32,
            fa,
            Rounding::NearestEven,
            rng,
        );
        // A bound finer than one step of the accumulator would clip every gradient to zero;
        // it becomes one step instead.
        Some(c.clamp(1, acc_word.max_raw() as i64))
    };
    let UpdateTensors {
        value,
        mut master,
        accum,
        mut momentum,
    } = t;
    let n = value.raw.len();
    for i in 0..n {
        let sum = accum.raw.at(i) as i64;
        let mut g = div_round(sum, cfg.samples as i64, cfg.mode, rng);
        accum.raw.put(i, 0);
        if let Some(c) = clip {
            g = g.clamp(-c, c);
        }
        let (w, fw) = match master.as_deref() {
            Some(m) => (m.raw.at(i) as i64, m.frac()),
            None => (value.raw.at(i) as i64, value.frac()),
        };
        if !cfg.decay.is_zero() {
            let (d, _) = rescale(
                cfg.decay.raw as i64 * w,
                cfg.decay.frac as u32 + fw,
                fa,
                cfg.mode,
                rng,
            );
            let (sum, sat) = add_sat(g, d);
            g = sum;
            if sat {
                accum_tally.saturations = accum_tally.saturations.saturating_add(1);
                accum_tally.high = accum_tally.high.saturating_add(1);
            }
        }
        if let Some(m) = momentum.as_deref_mut() {
            let prev = m.raw.at(i) as i64;
            let (decayed, _) = rescale(
                cfg.momentum.raw as i64 * prev,
                cfg.momentum.frac as u32 + fa,
                fa,
                cfg.mode,
                rng,
            );
            let (v, sat) = acc_word.saturate(add_sat(decayed, g).0);
            m.raw.put(i, v);
            accum_tally.note_value(v, acc_word, sat);
            g = v as i64;
        } else {
            let (v, sat) = acc_word.saturate(g);
            if sat {
                accum_tally.saturations = accum_tally.saturations.saturating_add(1);
                accum_tally.high = accum_tally.high.saturating_add(1);
            }
            g = v as i64;
        }
        // |lr| < 2^31 and |g| ≤ 2^31, so the exact product fits in 63 bits.
        let exact = cfg.lr.raw as i64 * g;
        let (delta, sat_delta) = rescale(exact, cfg.lr.frac as u32 + fa, fw, cfg.mode, rng);
        if (sum != 0 || exact != 0) && delta == 0 && !cfg.lr.is_zero() {
            tally.lost_updates = tally.lost_updates.saturating_add(1);
        }
        let (sum, sat_sub) = add_sat(w, delta.saturating_neg());
        match master.as_deref_mut() {
            Some(m) => {
                let (nw, sat) = m.fmt.word.saturate(sum);
                m.raw.put(i, nw);
                tally.note(sat || sat_delta || sat_sub);
                let (v, sat_v) =
                    requantize(nw as i64, m.frac(), value.fmt, Rounding::NearestEven, rng);
                value.raw.put(i, v);
                if sat_v {
                    tally.saturations = tally.saturations.saturating_add(1);
                    tally.high = tally.high.saturating_add(1);
                }
            }
            None => {
                let (nw, sat) = value.fmt.word.saturate(sum);
                value.raw.put(i, nw);
                tally.note(sat || sat_delta || sat_sub);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::num::{QFormat, RawMut, Word};

    /// One update of a single weight from an accumulated gradient `sum` over `samples`.
    fn lost_after(sum: i32, samples: u32, lr: QScalar) -> (Tally, i16) {
        let mut w = [1000i16];
        let mut a = [sum];
        let mut value = TensorMut {
            raw: RawMut::I16(&mut w),
            fmt: QFormat::new_unchecked(Word::I16, 12),
        };
        let mut accum = TensorMut {
            raw: RawMut::I32(&mut a),
            fmt: QFormat::new_unchecked(Word::I32, 24),
        };
        let cfg = UpdateConfig {
            lr,
            momentum: QScalar::ZERO,
            decay: QScalar::ZERO,
            clip: QScalar::ZERO,
            samples,
            mode: Rounding::NearestEven,
        };
        let (mut tally, mut accum_tally) = (Tally::default(), Tally::default());
        let t = UpdateTensors {
            value: &mut value,
            master: None,
            accum: &mut accum,
            momentum: None,
        };
        update(t, &cfg, &mut Rng::new(1), &mut tally, &mut accum_tally);
        (tally, w[0])
    }

    #[test]
    fn updates_lost_in_the_batch_division_or_the_final_rounding_are_counted() {
        let one = QScalar { raw: 1, frac: 0 };
        // A gradient sum of one accumulator step over 4 samples rounds to 0 at the division.
        assert_eq!(
            lost_after(1, 4, one),
            (
                Tally {
                    values: 1,
                    lost_updates: 1,
                    ..Tally::default()
                },
                1000
            )
        );
        // 2^12 steps of the accumulator are one step of the weight: it moves, nothing lost.
        assert_eq!(lost_after(4 << 12, 4, one).0.lost_updates, 0);
        assert_eq!(lost_after(4 << 12, 4, one).1, 999);
        // The division keeps 2^10 accumulator steps, but the learning rate 1/8 leaves 1/32 of
        // a weight step: lost in the final rounding.
        let eighth = QScalar { raw: 1, frac: 3 };
        assert_eq!(lost_after(4 << 10, 4, eighth).0.lost_updates, 1);
        // No gradient, or a learning rate of zero: nothing to lose.
        assert_eq!(lost_after(0, 4, one).0.lost_updates, 0);
        assert_eq!(lost_after(4 << 12, 4, QScalar::ZERO).0.lost_updates, 0);
    }
}
