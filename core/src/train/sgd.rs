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

use crate::kernel::{add_sat, outer_half, Tally};
use crate::layer::TensorMut;
use crate::num::round::{
    div_round, requantize, rescale, shift_left_saturating, NearestEven, RoundMode, Shr32, Shr64,
    Stochastic, TowardZero,
};
use crate::num::{QFormat, QScalar, RawMut, Rng, Rounding, Sample, Word};

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
/// Decides once per tensor: with the usual 32-bit accumulator (and 32-bit master and momentum,
/// if any) a loop compiled for the value's word runs over typed slices; other layouts take
/// [`update_exact`]. Both compute the same values, counts and random draws.
pub fn update(
    t: UpdateTensors<'_, '_>,
    cfg: &UpdateConfig,
    rng: &mut Rng,
    tally: &mut Tally,
    accum_tally: &mut Tally,
) {
    let wide = |r: Option<&RawMut<'_>>| r.is_none_or(|r| matches!(r, RawMut::I32(_)));
    if !(wide(Some(&t.accum.raw))
        && wide(t.master.as_deref().map(|m| &m.raw))
        && wide(t.momentum.as_deref().map(|m| &m.raw)))
    {
        return update_exact(t, cfg, rng, tally, accum_tally);
    }
    let fa = t.accum.frac();
    let vfmt = t.value.fmt;
    let mfmt = t.master.as_deref().map(|m| m.fmt);
    let fw = mfmt.unwrap_or(vfmt).frac as u32;
    let samples = cfg.samples as i64;
    let batch = if samples <= 1 {
        Batch::One
    } else if samples & (samples - 1) == 0 {
        match Shr64::new(samples.trailing_zeros()) {
            Some(s) => Batch::Shift(s),
            None => Batch::Div(samples),
        }
    } else {
        Batch::Div(samples)
    };
    let scales = (
        Scale::new(cfg.decay.frac as u32 + fw, fa),
        Scale::new(cfg.momentum.frac as u32 + fa, fa),
        Scale::new(cfg.lr.frac as u32 + fa, fw),
        Scale::new(mfmt.map_or(0, |m| m.frac as u32), vfmt.frac as u32),
    );
    let (Some(decay_scale), Some(mu_scale), Some(lr_scale), Some(master_scale)) = scales else {
        return update_exact(t, cfg, rng, tally, accum_tally);
    };
    let clip = clip_bound(cfg, fa, t.accum.fmt.word, rng);
    let master = t.master.and_then(|m| {
        let f = m.fmt;
        match &mut m.raw {
            RawMut::I32(s) => Some((&mut **s, f)),
            _ => None,
        }
    });
    let momentum = t.momentum.and_then(|m| match &mut m.raw {
        RawMut::I32(s) => Some(&mut **s),
        _ => None,
    });
    let RawMut::I32(accum) = &mut t.accum.raw else {
        return;
    };
    // The usual case (nearest-even rounding; no master, decay or clip; a batch of one or a
    // power of two; both rescales right shifts) takes the lean loop, compiled per value word.
    // The other modes take the typed loop: a lean copy per mode measured 4.3 KB more code on
    // the M3 for setups that are rarer (stochastic rounding usually comes with a master copy,
    // which the lean loop does not serve anyway).
    let n = t.value.raw.len();
    let lean_mu = match (&momentum, mu_scale) {
        (None, _) => Some(None),
        (Some(m), Scale::Right(s)) if m.len() == n => Some(Some(s)),
        _ => None,
    };
    if let (
        Rounding::NearestEven,
        None,
        None,
        true,
        Some(mu_shift),
        Scale::Right(lr_shift),
        false,
        true,
    ) = (
        cfg.mode,
        &master,
        clip,
        cfg.decay.is_zero(),
        lean_mu,
        lr_scale,
        matches!(batch, Batch::Div(_)),
        accum.len() == n,
    ) {
        let lean = Lean {
            accum,
            momentum: momentum
                .zip(mu_shift)
                .map(|(m, s)| (m, cfg.momentum.raw, s)),
            batch: Shr32::new(cfg.samples.trailing_zeros()),
            lr: cfg.lr.raw,
            lr_shift,
            lr_zero: cfg.lr.is_zero(),
        };
        match &mut t.value.raw {
            RawMut::I8(v) => lean.run::<_, NearestEven>(v, rng, tally, accum_tally),
            RawMut::I16(v) => lean.run::<_, NearestEven>(v, rng, tally, accum_tally),
            RawMut::I32(v) => lean.run::<_, NearestEven>(v, rng, tally, accum_tally),
        }
        return;
    }
    let typed = Typed {
        master,
        accum,
        momentum,
        clip,
        batch,
        decay: (!cfg.decay.is_zero()).then_some((cfg.decay.raw as i64, decay_scale)),
        momentum_scale: (cfg.momentum.raw as i64, mu_scale),
        lr: (cfg.lr.raw as i64, lr_scale),
        master_scale,
        lr_zero: cfg.lr.is_zero(),
    };
    match &mut t.value.raw {
        RawMut::I8(v) => typed.run(cfg.mode, v, rng, tally, accum_tally),
        RawMut::I16(v) => typed.run(cfg.mode, v, rng, tally, accum_tally),
        RawMut::I32(v) => typed.run(cfg.mode, v, rng, tally, accum_tally),
    }
}

/// A rescale from one number of fraction bits to another, worked out once per tensor: the
/// form [`rescale`] takes inside the typed loop, for values of magnitude at most 2^62.
#[derive(Clone, Copy, Debug)]
enum Scale {
    /// Same fraction bits.
    Same,
    /// Fewer fraction bits: a rounded right shift.
    Right(Shr64),
    /// More fraction bits: a saturating left shift by this many bits.
    Left(u32),
}

impl Scale {
    /// The rescale from `from` to `to` fraction bits, or `None` for a right shift of more than
    /// 62 bits (which formats within `MAX_FRAC` never need; [`update_exact`] handles it).
    fn new(from: u32, to: u32) -> Option<Scale> {
        match from.checked_sub(to) {
            Some(0) => Some(Scale::Same),
            Some(s) => Shr64::new(s).map(Scale::Right),
            None => Some(Scale::Left(to - from)),
        }
    }

    /// [`rescale`] of `v` (`|v| ≤ 2^62`) by `mode`: the same value, saturation flag and
    /// random draws.
    #[inline(always)]
    fn apply(self, mode: Rounding, v: i64, rng: &mut Rng) -> (i64, bool) {
        match self {
            Scale::Same => (v, false),
            Scale::Right(s) => (shr64(mode, v, s, rng), false),
            Scale::Left(k) => shift_left_saturating(v, k),
        }
    }
}

/// [`RoundMode::shr64`] for a mode known at run time. The update loop is compiled once for
/// all modes (a copy per mode would triple the engine's largest function for a few percent).
#[inline(always)]
fn shr64(mode: Rounding, v: i64, s: Shr64, rng: &mut Rng) -> i64 {
    match mode {
        Rounding::NearestEven => NearestEven::shr64(v, s, rng),
        Rounding::TowardZero => TowardZero::shr64(v, s, rng),
        Rounding::Stochastic => Stochastic::shr64(v, s, rng),
    }
}

/// The division of a gradient sum by the samples of the batch, decided once per tensor.
#[derive(Clone, Copy, Debug)]
enum Batch {
    /// One sample: no division.
    One,
    /// A power of two: a rounded shift.
    Shift(Shr64),
    /// Any other count (a partial batch): [`div_round`].
    Div(i64),
}

/// The 32-bit buffers of one typed update and the constants worked out once per tensor.
struct Typed<'s> {
    master: Option<(&'s mut [i32], QFormat)>,
    accum: &'s mut [i32],
    momentum: Option<&'s mut [i32]>,
    clip: Option<i64>,
    batch: Batch,
    /// Weight decay: its raw factor and the rescale of `λ·w` to the accumulator.
    decay: Option<(i64, Scale)>,
    /// Momentum: its raw factor and the rescale of `μ·v` back to the accumulator.
    momentum_scale: (i64, Scale),
    /// The learning rate's raw value and the rescale of `lr·g` to the update target.
    lr: (i64, Scale),
    /// The rescale of a master value to the propagated value.
    master_scale: Scale,
    lr_zero: bool,
}

impl Typed<'_> {
    /// The update loop for values stored as `V` and rounding `M`: the steps of
    /// [`update_exact`], in the same order with the same roundings and draws, over typed
    /// slices with every shift decided before the loop.
    #[inline(never)]
    fn run<V: Sample>(
        self,
        mode: Rounding,
        value: &mut [V],
        rng: &mut Rng,
        tally: &mut Tally,
        accum_tally: &mut Tally,
    ) {
        let Typed {
            mut master,
            accum,
            mut momentum,
            clip,
            batch,
            decay,
            momentum_scale: (mu, mu_scale),
            lr: (lr, lr_scale),
            master_scale,
            lr_zero,
        } = self;
        let (mut sats, mut lost) = (0u32, 0u32);
        let (mut acc_sats, mut acc_writes, mut acc_high) = (0u32, 0u32, 0u32);
        // One index walks four buffers of the same length (value, accumulator, master,
        // momentum), two of them optional.
        #[allow(clippy::needless_range_loop)]
        for i in 0..value.len() {
            let sum = accum.get(i).copied().unwrap_or(0) as i64;
            let mut g = match batch {
                Batch::One => sum,
                Batch::Shift(s) => shr64(mode, sum, s, rng),
                Batch::Div(n) => div_round(sum, n, mode, rng),
            };
            if let Some(c) = clip {
                g = g.clamp(-c, c);
            }
            let w = match &master {
                Some((m, _)) => m.get(i).copied().unwrap_or(0) as i64,
                None => value[i].to_i32() as i64,
            };
            if let Some((d, scale)) = decay {
                let (d, _) = scale.apply(mode, d * w, rng);
                let (s, sat) = add_sat(g, d);
                g = s;
                acc_sats += sat as u32;
                acc_high += sat as u32;
            }
            match momentum.as_deref_mut() {
                Some(m) => {
                    let prev = m.get(i).copied().unwrap_or(0) as i64;
                    let (decayed, _) = mu_scale.apply(mode, mu * prev, rng);
                    let (v, sat) = Word::I32.saturate(add_sat(decayed, g).0);
                    if let Some(slot) = m.get_mut(i) {
                        *slot = v;
                    }
                    acc_writes += 1;
                    acc_sats += sat as u32;
                    acc_high += (sat || outer_half(v, Word::I32)) as u32;
                    g = v as i64;
                }
                None => {
                    let (v, sat) = Word::I32.saturate(g);
                    acc_sats += sat as u32;
                    acc_high += sat as u32;
                    g = v as i64;
                }
            }
            // |lr| < 2^31 and |g| ≤ 2^31, so the exact product fits in 63 bits.
            let exact = lr * g;
            let (delta, sat_delta) = lr_scale.apply(mode, exact, rng);
            lost += ((sum != 0 || exact != 0) && delta == 0 && !lr_zero) as u32;
            let (s, sat_sub) = add_sat(w, delta.saturating_neg());
            match &mut master {
                Some((m, mf)) => {
                    let (nw, sat) = mf.word.saturate(s);
                    if let Some(slot) = m.get_mut(i) {
                        *slot = nw;
                    }
                    sats += (sat || sat_delta || sat_sub) as u32;
                    let (v, s1) = master_scale.apply(Rounding::NearestEven, nw as i64, rng);
                    let (v, s2) = V::WORD.saturate(v);
                    value[i] = V::from_i32_in_range(v);
                    sats += (s1 || s2) as u32;
                }
                None => {
                    let (nw, sat) = V::WORD.saturate(s);
                    value[i] = V::from_i32_in_range(nw);
                    sats += (sat || sat_delta || sat_sub) as u32;
                }
            }
        }
        accum.fill(0);
        tally.values = tally.values.saturating_add(value.len() as u32);
        tally.saturations = tally.saturations.saturating_add(sats);
        tally.high = tally.high.saturating_add(sats);
        tally.lost_updates = tally.lost_updates.saturating_add(lost);
        accum_tally.values = accum_tally.values.saturating_add(acc_writes);
        accum_tally.saturations = accum_tally.saturations.saturating_add(acc_sats);
        accum_tally.high = accum_tally.high.saturating_add(acc_high);
    }
}

/// The update of the usual configuration: no master copy, weight decay or clipping, a batch
/// of one or of a power of two samples, and the learning-rate and momentum rescales both
/// right shifts. The steps of [`update_exact`] with what is off left out: the same values,
/// counts and random draws.
struct Lean<'s> {
    /// The gradient accumulator, as long as the values.
    accum: &'s mut [i32],
    /// The momentum buffer (as long as the values), its raw factor and the rescale of `μ·v`.
    momentum: Option<(&'s mut [i32], i32, Shr64)>,
    /// The batch division as a shift (`None`: one sample).
    batch: Option<Shr32>,
    /// The learning rate's raw value.
    lr: i32,
    /// The rescale of `lr·g` to the value's format.
    lr_shift: Shr64,
    lr_zero: bool,
}

impl Lean<'_> {
    /// The loop for values stored as `V`, rounding with `M`.
    #[inline(never)]
    fn run<V: Sample, M: RoundMode>(
        self,
        value: &mut [V],
        rng: &mut Rng,
        tally: &mut Tally,
        accum_tally: &mut Tally,
    ) {
        let Lean {
            accum,
            mut momentum,
            batch,
            lr,
            lr_shift,
            lr_zero,
        } = self;
        let (mut sats, mut lost) = (0u32, 0u32);
        let (mut acc_sats, mut acc_high) = (0u32, 0u32);
        for (i, (v, a)) in value.iter_mut().zip(accum.iter_mut()).enumerate() {
            let sum = *a;
            // The shifted sum is smaller than the accumulator's own value, so neither
            // saturates the 32-bit accumulator word.
            let mut g = match batch {
                Some(s) => M::shr32_any(sum, s, rng),
                None => sum,
            };
            if let Some((m, mu, s)) = momentum.as_mut() {
                if let Some(slot) = m.get_mut(i) {
                    let decayed = M::shr64(*mu as i64 * *slot as i64, *s, rng);
                    let (nv, sat) = Word::I32.saturate_narrow(decayed + g as i64);
                    *slot = nv;
                    acc_sats += sat as u32;
                    acc_high += (sat || outer_half(nv, Word::I32)) as u32;
                    g = nv;
                }
            }
            *a = 0;
            // Both factors are 32-bit words: the exact product (one long multiply) fits in 63
            // bits, and after a right shift of at least one bit, `w − Δ` cannot leave the i64
            // range.
            let exact = lr as i64 * g as i64;
            let delta = M::shr64(exact, lr_shift, rng);
            lost += ((sum != 0 || exact != 0) && delta == 0 && !lr_zero) as u32;
            let (nw, sat) = V::WORD.saturate_narrow(v.to_i32() as i64 - delta);
            *v = V::from_i32_in_range(nw);
            sats += sat as u32;
        }
        let writes = if momentum.is_some() {
            value.len() as u32
        } else {
            0
        };
        tally.values = tally.values.saturating_add(value.len() as u32);
        tally.saturations = tally.saturations.saturating_add(sats);
        tally.high = tally.high.saturating_add(sats);
        tally.lost_updates = tally.lost_updates.saturating_add(lost);
        accum_tally.values = accum_tally.values.saturating_add(writes);
        accum_tally.saturations = accum_tally.saturations.saturating_add(acc_sats);
        accum_tally.high = accum_tally.high.saturating_add(acc_high);
    }
}

/// The clip bound in the accumulator's format, if clipping is on: a bound finer than one step
/// of the accumulator would clip every gradient to zero, so it becomes one step instead.
fn clip_bound(cfg: &UpdateConfig, fa: u32, acc_word: Word, rng: &mut Rng) -> Option<i64> {
    if cfg.clip.is_zero() {
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

/// [`update`] over run-time words, value by value: the reference the typed loop is tested
/// against, and the path for accumulators, masters or momentum buffers narrower than 32 bits.
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

            /// The typed loop against the run-time-word reference, over random words, formats,
            /// hyperparameters, modes and buffers (master and momentum on and off).
            #[test]
            fn typed_update_equals_exact_update(
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

            /// The lean loop (no master, decay or clip; a power-of-two batch) against the
            /// reference: the same comparison over the configurations that pick it.
            #[test]
            fn lean_update_equals_exact_update(
                word in prop_oneof![Just(Word::I8), Just(Word::I16), Just(Word::I32)],
                vals in proptest::collection::vec(any::<i32>(), 0..10),
                fv in 0u8..=20,
                accum in proptest::collection::vec(prop_oneof![any::<i32>(), -4096i32..4096], 10),
                fa in 12u8..=31,
                momentum in proptest::option::of(proptest::collection::vec(any::<i32>(), 10)),
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
                let a = run(update, word, &vals, fv, None, &accum[..n], fa, momentum, &cfg, seed);
                let b = run(update_exact, word, &vals, fv, None, &accum[..n], fa, momentum, &cfg, seed);
                assert_eq!(a, b);
            }
        }
    }
}
