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

use crate::features::{DECAY_CLIP, MASTER_WEIGHTS, MOMENTUM, STOCHASTIC};
use crate::kernel::{add_sat, mul_wide, outer_half, Tally, WORD_I32, WORD_I8};
use crate::layer::TensorMut;
use crate::num::round::{
    div_round, requantize, rescale, NearestEven, RoundMode, Shr32, Shr64, Stochastic,
};
use crate::num::{QScalar, RawMut, Rng, Rounding, Sample, Word};

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
///
/// Decides once per tensor: the usual setups (see `Lean` in the source) run a loop compiled
/// for the value's word and the rounding mode over typed slices; anything else takes
/// [`update_exact`]. Both compute the same values, counts and random draws.
pub fn update(
    t: UpdateTensors<'_, '_>,
    cfg: &UpdateConfig,
    rng: &mut Rng,
    tally: &mut Tally,
    accum_tally: &mut Tally,
) {
    // Parts this build leaves out are never read (see `crate::features`).
    let mut t = t;
    if !MASTER_WEIGHTS {
        t.master = None;
    }
    if !MOMENTUM {
        t.momentum = None;
    }
    match Lean::of(&t, cfg) {
        Some(lean) => lean.update(t, cfg.mode.built(), rng, tally, accum_tally),
        None => update_exact(t, cfg, rng, tally, accum_tally),
    }
}

/// The constants of an update the lean loop serves, worked out once per tensor. It serves
/// nearest-even and stochastic rounding (toward zero is rare in updates and takes
/// [`update_exact`]), 32-bit accumulators, momentum buffers and master copies as long as the
/// values, no weight decay or clipping, a batch of one or of a power of two samples, and
/// rescales that are right shifts (learning rate: 1 to 62 bits; momentum: 1 to 62; master to
/// value: 1 to 30).
#[derive(Clone, Copy, Debug)]
struct Lean {
    /// The batch division as a shift (`None`: one sample).
    batch: Option<Shr32>,
    /// Momentum: its raw factor and the rescale of `μ·v` back to the accumulator.
    momentum: Option<(i32, Shr64)>,
    /// The learning rate's raw value.
    lr: i32,
    /// The rescale of `lr·g` to the update target (the master copy, or the value).
    lr_shift: Shr64,
    lr_zero: bool,
    /// The rescale of a master value to the propagated value.
    master: Option<Shr32>,
}

impl Lean {
    /// The lean plan of this update, if the lean loop serves it.
    fn of(t: &UpdateTensors<'_, '_>, cfg: &UpdateConfig) -> Option<Lean> {
        let n = t.value.raw.len();
        let i32_of_len = |r: &RawMut<'_>| matches!(r, RawMut::I32(s) if s.len() == n);
        let served = matches!(
            cfg.mode.built(),
            Rounding::NearestEven | Rounding::Stochastic
        ) && (!DECAY_CLIP || (cfg.decay.is_zero() && cfg.clip.is_zero()))
            && i32_of_len(&t.accum.raw)
            && t.momentum.as_deref().is_none_or(|m| i32_of_len(&m.raw))
            && t.master.as_deref().is_none_or(|m| i32_of_len(&m.raw));
        if !served {
            return None;
        }
        let fa = t.accum.frac();
        let batch = match cfg.samples {
            0 | 1 => None,
            s if s.is_power_of_two() => Some(Shr32::new(s.trailing_zeros())?),
            _ => return None,
        };
        let momentum = match t.momentum {
            Some(_) => Some((cfg.momentum.raw, Shr64::new(cfg.momentum.frac as u32)?)),
            None => None,
        };
        let vf = t.value.frac();
        let (fw, master) = match t.master.as_deref() {
            Some(m) => (m.frac(), Some(Shr32::new(m.frac().checked_sub(vf)?)?)),
            None => (vf, None),
        };
        let lr_shift = Shr64::new((cfg.lr.frac as u32 + fa).checked_sub(fw)?)?;
        Some(Lean {
            batch,
            momentum,
            lr: cfg.lr.raw,
            lr_shift,
            lr_zero: cfg.lr.is_zero(),
            master,
        })
    }

    /// Picks the loop for the value's word and the rounding mode.
    fn update(
        self,
        t: UpdateTensors<'_, '_>,
        mode: Rounding,
        rng: &mut Rng,
        tally: &mut Tally,
        accum_tally: &mut Tally,
    ) {
        let master = t.master.and_then(words);
        let momentum = t.momentum.and_then(words);
        let RawMut::I32(accum) = &mut t.accum.raw else {
            return;
        };
        let b = Buffers { accum, momentum };
        macro_rules! by_mode {
            ($v:expr) => {
                match mode {
                    Rounding::Stochastic if STOCHASTIC => {
                        self.run::<_, Stochastic>($v, b, rng, tally, accum_tally)
                    }
                    _ => self.run::<_, NearestEven>($v, b, rng, tally, accum_tally),
                }
            };
        }
        // With a master copy the loop updates the master, then the values follow it.
        if let (Some(m), Some(s)) = (master, self.master) {
            by_mode!(&mut *m);
            match &mut t.value.raw {
                RawMut::I8(v) if WORD_I8 => follow(m, v, s, tally),
                RawMut::I16(v) => follow(m, v, s, tally),
                RawMut::I32(v) if WORD_I32 => follow(m, v, s, tally),
                // Not built: a checked description has no such values.
                _ => {}
            }
            return;
        }
        match &mut t.value.raw {
            RawMut::I8(v) if WORD_I8 => by_mode!(v),
            RawMut::I16(v) => by_mode!(v),
            RawMut::I32(v) if WORD_I32 => by_mode!(v),
            _ => {}
        }
    }

    /// The loop for an update target stored as `T` (the values, or the master copy),
    /// rounding with `M`: the steps of [`update_exact`] with what is off left out, in the same
    /// order with the same roundings and draws.
    #[inline(never)]
    fn run<T: Sample, M: RoundMode>(
        self,
        target: &mut [T],
        b: Buffers<'_>,
        rng: &mut Rng,
        tally: &mut Tally,
        accum_tally: &mut Tally,
    ) {
        let Buffers {
            accum,
            mut momentum,
        } = b;
        let (mut sats, mut lost) = (0u32, 0u32);
        let (mut acc_sats, mut acc_high) = (0u32, 0u32);
        for (i, (w, a)) in target.iter_mut().zip(accum.iter_mut()).enumerate() {
            let sum = *a;
            *a = 0;
            // The shifted sum is smaller than the accumulator's own value, so neither
            // saturates the 32-bit accumulator word.
            let mut g = match self.batch {
                Some(s) => M::shr32_any(sum, s, rng),
                None => sum,
            };
            if let (Some((mu, s)), Some(m)) = (self.momentum, momentum.as_deref_mut()) {
                if let Some(slot) = m.get_mut(i) {
                    let decayed = M::shr64(mul_wide(mu, *slot), s, rng);
                    let (nv, sat) = Word::I32.saturate_narrow(decayed + g as i64);
                    *slot = nv;
                    acc_sats += sat as u32;
                    acc_high += (sat || outer_half(nv, Word::I32)) as u32;
                    g = nv;
                }
            }
            // Both factors are 32-bit words: the exact product (one long multiply) fits in 63
            // bits, and after a right shift of at least one bit, `w − Δ` cannot leave the i64
            // range.
            let exact = mul_wide(self.lr, g);
            let delta = M::shr64(exact, self.lr_shift, rng);
            lost += ((sum != 0 || exact != 0) && delta == 0 && !self.lr_zero) as u32;
            let (nw, sat) = T::WORD.saturate_narrow(w.to_i32() as i64 - delta);
            *w = T::from_i32_in_range(nw);
            sats += sat as u32;
        }
        let writes = if momentum.is_some() {
            target.len() as u32
        } else {
            0
        };
        tally.add_counts(target.len() as u32, sats, sats);
        tally.lost_updates = tally.lost_updates.saturating_add(lost);
        accum_tally.add_counts(writes, acc_sats, acc_high);
    }
}

/// The propagated values after a master update: each master value rounded to nearest (ties
/// to even) into the value format, `s` bits coarser, saturated; saturations are counted in
/// `tally` with the master's own.
fn follow<V: Sample>(master: &[i32], value: &mut [V], s: Shr32, tally: &mut Tally) {
    let mut sats = 0u32;
    // Nearest-even rounding draws nothing.
    let mut none = Rng::new(0);
    for (v, &m) in value.iter_mut().zip(master) {
        let (q, sat) = V::WORD.saturate_narrow(NearestEven::shr32_any(m, s, &mut none) as i64);
        *v = V::from_i32_in_range(q);
        sats += sat as u32;
    }
    tally.saturations = tally.saturations.saturating_add(sats);
    tally.high = tally.high.saturating_add(sats);
}

/// The 32-bit words of a tensor, if it stores 32-bit words.
fn words<'s>(t: &'s mut TensorMut<'_>) -> Option<&'s mut [i32]> {
    match &mut t.raw {
        RawMut::I32(s) => Some(&mut **s),
        _ => None,
    }
}

/// The 32-bit buffers of one lean update besides its target, each as long as the values.
struct Buffers<'s> {
    accum: &'s mut [i32],
    momentum: Option<&'s mut [i32]>,
}

/// The clip bound in the accumulator's format, if clipping is on: a bound finer than one step
/// of the accumulator would clip every gradient to zero, so it becomes one step instead.
fn clip_bound(cfg: &UpdateConfig, fa: u32, acc_word: Word, rng: &mut Rng) -> Option<i64> {
    if !DECAY_CLIP || cfg.clip.is_zero() {
        return None;
    }
    let (c, _) = rescale(
        cfg.clip.raw as i64,
        cfg.clip.frac as u32,
        fa,
        Rounding::NearestEven,
        rng,
    );
    Some(c.clamp(1, acc_word.max_raw() as i64))
}

/// [`update`] over run-time words, value by value: the reference the lean loop is tested
/// against, and the path for every setup it does not serve (see `Lean`).
#[cold]
#[inline(never)]
pub fn update_exact(
    t: UpdateTensors<'_, '_>,
    cfg: &UpdateConfig,
    rng: &mut Rng,
    tally: &mut Tally,
    accum_tally: &mut Tally,
) {
    let fa = t.accum.frac();
    let acc_word = t.accum.fmt.word;
    let clip = clip_bound(cfg, fa, acc_word, rng);
    let UpdateTensors {
        value,
        master,
        accum,
        momentum,
    } = t;
    // Parts this build leaves out are never read (see `crate::features`).
    let mut master = master.filter(|_| MASTER_WEIGHTS);
    let mut momentum = momentum.filter(|_| MOMENTUM);
    let mode = cfg.mode.built();
    let n = value.raw.len();
    for i in 0..n {
        let sum = accum.raw.at(i) as i64;
        let mut g = div_round(sum, cfg.samples as i64, mode, rng);
        accum.raw.put(i, 0);
        if let Some(c) = clip {
            g = g.clamp(-c, c);
        }
        let (w, fw) = match master.as_deref() {
            Some(m) => (m.raw.at(i) as i64, m.frac()),
            None => (value.raw.at(i) as i64, value.frac()),
        };
        if DECAY_CLIP && !cfg.decay.is_zero() {
            let (d, _) = rescale(
                cfg.decay.raw as i64 * w,
                cfg.decay.frac as u32 + fw,
                fa,
                mode,
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
                mode,
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
        let (delta, sat_delta) = rescale(exact, cfg.lr.frac as u32 + fa, fw, mode, rng);
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

    mod typed {
        use super::super::*;
        use crate::num::{QFormat, RawMut, Word};
        use proptest::prelude::{any, prop_oneof, proptest, Just, ProptestConfig, Strategy};

        fn scalar() -> impl Strategy<Value = QScalar> {
            prop_oneof![
                Just(QScalar::ZERO),
                (any::<i32>(), 0u8..=31).prop_map(|(raw, frac)| QScalar { raw, frac }),
                (1i32..1 << 20, 16u8..=24).prop_map(|(raw, frac)| QScalar { raw, frac }),
            ]
        }

        fn mode() -> impl Strategy<Value = Rounding> {
            prop_oneof![
                Just(Rounding::NearestEven),
                Just(Rounding::TowardZero),
                Just(Rounding::Stochastic)
            ]
        }

        /// Runs one update over copies of the same buffers through `f`, returning every
        /// buffer, both tallies and the generator.
        #[allow(clippy::type_complexity, clippy::too_many_arguments)]
        fn run(
            f: fn(UpdateTensors<'_, '_>, &UpdateConfig, &mut Rng, &mut Tally, &mut Tally),
            word: Word,
            vals: &[i32],
            fv: u8,
            master: Option<(&[i32], u8)>,
            accum: &[i32],
            fa: u8,
            momentum: Option<&[i32]>,
            cfg: &UpdateConfig,
            seed: u64,
        ) -> (Vec<i32>, Vec<i32>, Vec<i32>, Vec<i32>, Tally, Tally, Rng) {
            let n = vals.len();
            let mut v8: Vec<i8> = vals.iter().map(|&v| v as i8).collect();
            let mut v16: Vec<i16> = vals.iter().map(|&v| v as i16).collect();
            let mut v32: Vec<i32> = vals.to_vec();
            let raw = match word {
                Word::I8 => RawMut::I8(&mut v8),
                Word::I16 => RawMut::I16(&mut v16),
                Word::I32 => RawMut::I32(&mut v32),
            };
            let mut value = TensorMut {
                raw,
                fmt: QFormat::new_unchecked(word, fv),
            };
            let mut m = master.map(|(m, _)| m.to_vec()).unwrap_or_default();
            let mut master_t = master.map(|(_, f)| TensorMut {
                raw: RawMut::I32(&mut m),
                fmt: QFormat::new_unchecked(Word::I32, f),
            });
            let mut a = accum.to_vec();
            let mut accum_t = TensorMut {
                raw: RawMut::I32(&mut a),
                fmt: QFormat::new_unchecked(Word::I32, fa),
            };
            let mut mo = momentum.map(|m| m.to_vec()).unwrap_or_default();
            let mut mo_t = momentum.map(|_| TensorMut {
                raw: RawMut::I32(&mut mo),
                fmt: QFormat::new_unchecked(Word::I32, fa),
            });
            let (mut t, mut at, mut rng) = (Tally::default(), Tally::default(), Rng::new(seed));
            f(
                UpdateTensors {
                    value: &mut value,
                    master: master_t.as_mut(),
                    accum: &mut accum_t,
                    momentum: mo_t.as_mut(),
                },
                cfg,
                &mut rng,
                &mut t,
                &mut at,
            );
            let out: Vec<i32> = (0..n).map(|i| value.raw.at(i)).collect();
            (out, m, a, mo, t, at, rng)
        }

        proptest! {
            #![proptest_config(ProptestConfig::with_cases(1500))]

            /// [`update`] against the run-time-word reference, over random words, formats,
            /// hyperparameters, modes and buffers (master and momentum on and off).
            #[test]
            fn update_equals_exact_update(
                word in prop_oneof![Just(Word::I8), Just(Word::I16), Just(Word::I32)],
                vals in proptest::collection::vec(any::<i32>(), 0..10),
                fv in 0u8..=31,
                master in proptest::option::of((proptest::collection::vec(any::<i32>(), 10), 0u8..=31)),
                accum in proptest::collection::vec(prop_oneof![any::<i32>(), -4096i32..4096], 10),
                fa in 0u8..=31,
                momentum in proptest::option::of(proptest::collection::vec(any::<i32>(), 10)),
                lr in scalar(),
                mu in scalar(),
                decay in scalar(),
                clip in scalar(),
                samples in 1u32..12,
                mode in mode(),
                seed in any::<u64>(),
            ) {
                let n = vals.len();
                let vals: Vec<i32> = vals
                    .iter()
                    .map(|&v| word.saturate(v as i64 >> (32 - word.bits())).0)
                    .collect();
                let cfg = UpdateConfig { lr, momentum: mu, decay, clip, samples, mode };
                let master = master.as_ref().map(|(m, f)| (&m[..n], *f));
                let momentum = momentum.as_ref().map(|m| &m[..n]);
                let a = run(update, word, &vals, fv, master, &accum[..n], fa, momentum, &cfg, seed);
                let b = run(update_exact, word, &vals, fv, master, &accum[..n], fa, momentum, &cfg, seed);
                assert_eq!(a, b);
            }

            /// The lean loop (no decay or clip; a power-of-two batch; momentum and master on
            /// and off) against the reference: the same comparison over the configurations
            /// that pick it.
            #[test]
            fn lean_update_equals_exact_update(
                word in prop_oneof![Just(Word::I8), Just(Word::I16), Just(Word::I32)],
                vals in proptest::collection::vec(any::<i32>(), 0..10),
                fv in 0u8..=20,
                accum in proptest::collection::vec(prop_oneof![any::<i32>(), -4096i32..4096], 10),
                fa in 12u8..=31,
                momentum in proptest::option::of(proptest::collection::vec(any::<i32>(), 10)),
                master in proptest::option::of((proptest::collection::vec(any::<i32>(), 10), 1u8..=11)),
                lr in (1i32..1 << 20, 10u8..=24).prop_map(|(raw, frac)| QScalar { raw, frac }),
                mu in (any::<i32>(), 1u8..=31).prop_map(|(raw, frac)| QScalar { raw, frac }),
                log_samples in 0u32..5,
                mode in mode(),
                seed in any::<u64>(),
            ) {
                let n = vals.len();
                let vals: Vec<i32> = vals
                    .iter()
                    .map(|&v| word.saturate(v as i64 >> (32 - word.bits())).0)
                    .collect();
                let cfg = UpdateConfig {
                    lr,
                    momentum: if momentum.is_some() { mu } else { QScalar::ZERO },
                    decay: QScalar::ZERO,
                    clip: QScalar::ZERO,
                    samples: 1 << log_samples,
                    mode,
                };
                let momentum = momentum.as_ref().map(|m| &m[..n]);
                // A master copy 1 to 11 bits finer than the values.
                let master = master.as_ref().map(|(m, d)| (&m[..n], fv + d));
                let a = run(update, word, &vals, fv, master, &accum[..n], fa, momentum, &cfg, seed);
                let b = run(update_exact, word, &vals, fv, master, &accum[..n], fa, momentum, &cfg, seed);
                assert_eq!(a, b);
            }
        }
    }
}
