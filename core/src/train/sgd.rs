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
//! the exact `lr·g` is not zero and the rounded `Δ` is: the weight could not move.

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
        let mut g = div_round(accum.raw.at(i) as i64, cfg.samples as i64, cfg.mode, rng);
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
            accum_tally.note(sat);
            g = v as i64;
        } else {
            let (v, sat) = acc_word.saturate(g);
            if sat {
                accum_tally.saturations = accum_tally.saturations.saturating_add(1);
            }
            g = v as i64;
        }
        // |lr| < 2^31 and |g| ≤ 2^31, so the exact product fits in 63 bits.
        let exact = cfg.lr.raw as i64 * g;
        let (delta, sat_delta) = rescale(exact, cfg.lr.frac as u32 + fa, fw, cfg.mode, rng);
        if exact != 0 && delta == 0 {
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
