//! The rollback guard: new weights are accepted only if they do no harm on calibration
//! samples held back from the update.
//!
//! A calibration session on a device goes:
//!
//! 1. evaluate the held-back samples under the current (last good) weights: the *baseline*;
//! 2. train on the other samples;
//! 3. evaluate the held-back samples again: the *candidate*;
//! 4. [`judge`] the two: reject when the mean loss rose by more than the allowed margin, or
//!    when activation saturations spiked; otherwise accept;
//! 5. on rejection, put back the last good model and the trainer's state as they were before
//!    step 2 (the parameters from the last good blob with
//!    [`crate::train::Trainer::restore`] or `load`, then
//!    [`crate::train::Trainer::set_train_state`] with the state saved before training, so the
//!    fraction bits, generator and counters are those of before too); on acceptance, commit
//!    them (for example to the [`crate::store`]). [`calibrate`] does all of this.
//!
//! Everything is integer: losses are [`LossValue`]s, rates are parts per million.

use crate::blob::{self, BlobKind, CheckedBlob};
use crate::layer::loss::{LossValue, Target};
use crate::layer::Tensor;
use crate::train::{LayerParams, Trainer};
use crate::Error;

/// Thresholds of the guard.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct GuardConfig {
    /// Largest tolerated rise of the mean held-back loss, in parts per thousand of the
    /// baseline (0: the loss must not rise at all).
    pub max_loss_rise_permille: u32,
    /// Rises below this absolute amount are tolerated whatever the ratio (protects a
    /// baseline near zero from rejecting noise).
    pub loss_floor: LossValue,
    /// Largest tolerated saturation rate of activations on the held-back samples, in parts
    /// per million of the activation values computed.
    pub max_saturation_ppm: u32,
}

impl GuardConfig {
    /// A guard that tolerates a 5 % loss rise (common practice for acceptance margins, not a
    /// published figure), a loss floor of 2^-16, and 1000 ppm of saturated activations.
    pub const DEFAULT: GuardConfig = GuardConfig {
        max_loss_rise_permille: 50,
        loss_floor: LossValue(1 << 8),
        max_saturation_ppm: 1000,
    };
}

/// A summary of the held-back samples under one set of weights.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Evaluation {
    /// Mean loss.
    pub mean_loss: LossValue,
    /// Samples evaluated.
    pub samples: u32,
    /// Activation values that saturated.
    pub saturations: u32,
    /// Activation values computed.
    pub activations: u64,
    /// Correct predictions (classification only).
    pub correct: u32,
}

impl Evaluation {
    /// Saturation rate in parts per million.
    pub fn saturation_ppm(&self) -> u64 {
        (self.saturations as u64 * 1_000_000)
            .checked_div(self.activations)
            .unwrap_or(0)
    }
}

/// Why the guard rejected.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Rejection {
    /// The held-back loss rose beyond the margin.
    LossRose {
        /// Baseline mean loss.
        before: LossValue,
        /// Candidate mean loss.
        after: LossValue,
    },
    /// Saturations spiked beyond the limit.
    Saturations {
        /// Candidate rate in ppm.
        ppm: u64,
    },
}

/// The guard's decision.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Verdict {
    /// Keep the new weights.
    Accept,
    /// Keep the last good weights.
    Reject(Rejection),
}

/// Evaluates `samples` (input and target pairs) under the trainer's current weights.
///
/// # Errors
/// The first sample error (wrong length, label out of range).
pub fn evaluate<'s, I>(trainer: &mut Trainer<'_>, samples: I) -> Result<Evaluation, Error>
where
    I: IntoIterator<Item = (Tensor<'s>, Target<'s>)>,
{
    let layers = &trainer.plan().shapes.layers;
    let per_sample: u64 = layers
        .get(..trainer.plan().count())
        .unwrap_or(layers)
        .iter()
        .map(|g| g.output.size() as u64)
        .sum();
    let mut e = Evaluation::default();
    let mut total: i128 = 0;
    for (x, t) in samples {
        let o = trainer.evaluate(x, t)?;
        total += o.loss.0 as i128;
        e.samples += 1;
        e.saturations = e.saturations.saturating_add(o.saturations);
        e.activations += per_sample;
        if let (Some(p), Target::Class(c)) = (o.predicted, t) {
            if p == c {
                e.correct += 1;
            }
        }
    }
    if e.samples > 0 {
        e.mean_loss =
            LossValue((total / e.samples as i128).clamp(i64::MIN as i128, i64::MAX as i128) as i64);
    }
    Ok(e)
}

/// Compares a candidate with the baseline. See the [module docs](self).
pub fn judge(before: &Evaluation, after: &Evaluation, cfg: &GuardConfig) -> Verdict {
    let ppm = after.saturation_ppm();
    if ppm > cfg.max_saturation_ppm as u64 && ppm > before.saturation_ppm() {
        return Verdict::Reject(Rejection::Saturations { ppm });
    }
    let b = before.mean_loss.0 as i128;
    let a = after.mean_loss.0 as i128;
    let allowed =
        (b.max(0) * cfg.max_loss_rise_permille as i128 / 1000).max(cfg.loss_floor.0 as i128);
    if a - b > allowed {
        return Verdict::Reject(Rejection::LossRose {
            before: before.mean_loss,
            after: after.mean_loss,
        });
    }
    Verdict::Accept
}

/// What one guarded calibration session did.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SessionReport {
    /// The held-back samples under the weights before the session.
    pub before: Evaluation,
    /// The held-back samples under the weights after training.
    pub after: Evaluation,
    /// The decision. On [`Verdict::Reject`] the trainer holds the weights of before again.
    pub verdict: Verdict,
    /// Samples trained on.
    pub trained: u32,
}

/// Runs one guarded calibration session: evaluates `holdout`, trains on `train` (flushing a
/// partial batch at the end), evaluates `holdout` again and judges. On rejection, and when a
/// sample turns out not to fit the model, it restores the trainer from `last_good` (the blob
/// of the weights before the session: the factory model or the last committed checkpoint);
/// with a factory model it also puts back the training state the trainer had before the
/// session, so the trainer is exactly as it was. This is [`calibrate_with`] with no
/// observer: the firmware and the host run the same procedure.
///
/// # Example
/// ```
/// use hone_core::blob::{self, BlobKind, TensorBlob, TensorRole};
/// use hone_core::guard::{self, GuardConfig, Verdict};
/// # use hone_core::layer::{loss::Target, Tensor};
/// # use hone_core::num::Raw;
/// # use hone_core::plan::Plan;
/// # use hone_core::train::{LayerParams, Trainer};
/// # use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape};
/// # use hone_core::model::{TrainDesc, TrainMode};
/// # use hone_core::num::{QFormat, QScalar, Word};
/// # let q = QFormat::new_unchecked(Word::I16, 12);
/// # let p = ParamFormats::plain(q, 20);
/// # let dense = LayerDesc { kind: LayerKind::Dense { units: 1 }, mode: TrainMode::Full,
/// #                         weight: p, bias: p, out: q, grad: q };
/// # let train = TrainDesc::sgd(QScalar { raw: 1, frac: 1 });
/// // A one-weight model y = w·x + b in Q3.12, w = 0.5 (raw 2048), b = 0, as a factory blob.
/// let desc = ModelDesc::new(Shape::vector(1), q, &[dense], Loss::SquaredError, train)?;
/// let w = TensorBlob { layer: 0, role: TensorRole::Weight, format: q, elems: 1,
///                      data: &2048i16.to_le_bytes() };
/// let b = TensorBlob { role: TensorRole::Bias, data: &[0, 0], ..w };
/// let mut buf = [0u8; 256];
/// let n = blob::encode_parts(BlobKind::Model, &desc, &[], None, 2, [w, b].into_iter(), &mut buf)?;
/// let last_good = blob::decode(&buf[..n])?;
/// let plan = Plan::of(&desc)?;
/// let mut arena = vec![0u32; plan.ram_words()];
/// let init = [LayerParams { weight: Raw::I16(&[2048]), bias: Raw::I16(&[0]) }];
/// let mut t = Trainer::new(&desc, &plan, &mut arena, &init)?;
/// // One sample x = 1 → 1 to train on, and the same one held back.
/// let x = Tensor { raw: Raw::I16(&[4096]), fmt: q };
/// let target = Target::Values(Tensor { raw: Raw::I16(&[4096]), fmt: q });
/// let r = guard::calibrate(&mut t, [(x, target)], [(x, target)], &GuardConfig::DEFAULT,
///                          &last_good)?;
/// // Held-back loss ½(0.5 − 1)² before; after one step w = 0.75, b = 0.25 and y = 1.
/// assert_eq!((r.before.mean_loss.to_f64(), r.after.mean_loss.to_f64()), (0.125, 0.0));
/// assert_eq!((r.verdict, r.trained), (Verdict::Accept, 1));
/// assert_eq!(t.params(0).unwrap().weight.get(0), Some(3072));
/// # Ok::<(), hone_core::Error>(())
/// ```
///
/// # Errors
/// Sample errors from training or evaluation (after rolling back), and the errors of
/// [`Trainer::restore`](crate::train::Trainer::restore).
pub fn calibrate<'s, T, H>(
    trainer: &mut Trainer<'_>,
    train: T,
    holdout: H,
    cfg: &GuardConfig,
    last_good: &CheckedBlob<'_>,
) -> Result<SessionReport, Error>
where
    T: IntoIterator<Item = (Tensor<'s>, Target<'s>)>,
    H: IntoIterator<Item = (Tensor<'s>, Target<'s>)> + Clone,
{
    calibrate_with(
        trainer,
        train,
        holdout,
        cfg,
        LastGood::Checked(last_good),
        &mut (),
    )
}

/// A part of a guarded session that an [`Observer`] hears about.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Phase {
    /// The held-back samples under the weights of before.
    EvalBefore,
    /// Training on the calibration samples, the flush of the partial batch included.
    Train,
    /// The held-back samples under the trained weights.
    EvalAfter,
}

impl Phase {
    /// The three phases, in the order they run.
    pub const ALL: [Phase; 3] = [Phase::EvalBefore, Phase::Train, Phase::EvalAfter];

    /// Index of the phase in [`Phase::ALL`].
    pub const fn index(self) -> usize {
        match self {
            Phase::EvalBefore => 0,
            Phase::Train => 1,
            Phase::EvalAfter => 2,
        }
    }

    /// Whether the phase trains (forward and backward) rather than only evaluates.
    pub const fn trains(self) -> bool {
        matches!(self, Phase::Train)
    }
}

/// Hears what a guarded session does, for timing and records. Every method does nothing by
/// default; `()` is the observer that listens to nothing.
pub trait Observer {
    /// `phase` starts now.
    fn enter(&mut self, phase: Phase) {
        let _ = phase;
    }

    /// `phase` ended after `samples` samples (evaluated, or trained).
    fn leave(&mut self, phase: Phase, samples: u32) {
        let _ = (phase, samples);
    }
}

impl Observer for () {}

/// The weights a rejected session goes back to.
#[derive(Clone, Copy, Debug)]
pub enum LastGood<'a> {
    /// A blob already decoded.
    Checked(&'a CheckedBlob<'a>),
    /// The bytes of a blob, decoded only if a rollback needs them (and then checked).
    Encoded(&'a [u8]),
    /// Factory parameters, one entry per layer (as [`Trainer::new`] and [`Trainer::load`]
    /// take them): the same rollback as the factory model's blob, without decoding one. A
    /// device whose trainer starts from parameters in flash goes back to them this way and
    /// spends no stack on a decoded blob.
    Params(&'a [LayerParams<'a>]),
}

/// [`calibrate`] with the last good model given either way ([`LastGood`]) and `obs` told of
/// each phase: the procedure the firmware and the host both run
/// ([`crate::session::calibrate_set`]).
///
/// # Errors
/// Sample errors from training or evaluation (after rolling back), and the errors of
/// [`Trainer::restore`] and of decoding [`LastGood::Encoded`] bytes.
pub fn calibrate_with<'s, T, H, O>(
    trainer: &mut Trainer<'_>,
    train: T,
    holdout: H,
    cfg: &GuardConfig,
    last_good: LastGood<'_>,
    obs: &mut O,
) -> Result<SessionReport, Error>
where
    T: IntoIterator<Item = (Tensor<'s>, Target<'s>)>,
    H: IntoIterator<Item = (Tensor<'s>, Target<'s>)> + Clone,
    O: Observer + ?Sized,
{
    // Everything a rejection must give back: the weights come from `last_good`, the rest
    // (generator, counters, fraction bits, the dynamic interval) from the state saved here,
    // in the trainer's arena.
    trainer.save_state();
    obs.enter(Phase::EvalBefore);
    let before = evaluate(trainer, holdout.clone());
    obs.leave(Phase::EvalBefore, before.map_or(0, |e| e.samples));
    let before = before?;

    obs.enter(Phase::Train);
    let (trained, failed) = train_phase(trainer, train);
    obs.leave(Phase::Train, trained);
    // A sample that does not fit ends the session: the weights go back before the error does.
    if let Some(e) = failed {
        rollback(trainer, last_good)?;
        return Err(e);
    }

    obs.enter(Phase::EvalAfter);
    let after = evaluate(trainer, holdout);
    obs.leave(Phase::EvalAfter, after.map_or(0, |e| e.samples));
    let after = match after {
        Ok(a) => a,
        Err(e) => {
            rollback(trainer, last_good)?;
            return Err(e);
        }
    };
    let verdict = judge(&before, &after, cfg);
    if verdict != Verdict::Accept {
        rollback(trainer, last_good)?;
    }
    Ok(SessionReport {
        before,
        after,
        verdict,
        trained,
    })
}

/// Trains on `samples` in order, then applies the partial batch; at the first sample error it
/// stops, without the flush. Returns the samples trained and that error. Out of line, so that
/// a training phase is one call (a per-function profile of the firmware takes its extent).
#[inline(never)]
pub(crate) fn train_phase<'s, T>(trainer: &mut Trainer<'_>, samples: T) -> (u32, Option<Error>)
where
    T: IntoIterator<Item = (Tensor<'s>, Target<'s>)>,
{
    let mut trained = 0u32;
    for (x, t) in samples {
        if let Err(e) = step(trainer, x, t) {
            return (trained, Some(e));
        }
        trained += 1;
    }
    trainer.flush();
    (trained, None)
}

/// One training step, out of line: the step's frames stay apart from the phase's loop, and its
/// code is not copied into every loop that trains.
#[inline(never)]
fn step(trainer: &mut Trainer<'_>, x: Tensor<'_>, t: Target<'_>) -> Result<(), Error> {
    trainer.step(x, t).map(|_| ())
}

/// Puts back the last good weights and, after a factory model, the training state of before
/// the session.
fn rollback(trainer: &mut Trainer<'_>, last_good: LastGood<'_>) -> Result<(), Error> {
    match last_good {
        LastGood::Checked(b) => restore(trainer, b),
        LastGood::Encoded(bytes) => rollback_encoded(trainer, bytes),
        LastGood::Params(params) => {
            trainer.load(params)?;
            trainer.revert_state();
            Ok(())
        }
    }
}

/// Decodes the last good blob and restores it. Kept out of line so the decoded blob takes
/// stack only here, during such a rollback.
#[inline(never)]
fn rollback_encoded(trainer: &mut Trainer<'_>, bytes: &[u8]) -> Result<(), Error> {
    restore(trainer, &blob::decode(bytes)?)
}

fn restore(trainer: &mut Trainer<'_>, b: &CheckedBlob<'_>) -> Result<(), Error> {
    trainer.restore(b)?;
    // A factory blob carries weights only: the rest comes back from the saved state.
    if b.kind() == BlobKind::Model {
        trainer.revert_state();
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ev(loss: i64, sats: u32) -> Evaluation {
        Evaluation {
            mean_loss: LossValue(loss),
            samples: 10,
            saturations: sats,
            activations: 10_000,
            correct: 0,
        }
    }

    #[test]
    fn thresholds() {
        let cfg = GuardConfig {
            max_loss_rise_permille: 50,
            loss_floor: LossValue(10),
            max_saturation_ppm: 1000,
        };
        assert_eq!(judge(&ev(1000, 0), &ev(900, 0), &cfg), Verdict::Accept);
        assert_eq!(judge(&ev(1000, 0), &ev(1050, 0), &cfg), Verdict::Accept); // exactly 5 %
        assert_eq!(
            judge(&ev(1000, 0), &ev(1051, 0), &cfg),
            Verdict::Reject(Rejection::LossRose {
                before: LossValue(1000),
                after: LossValue(1051)
            })
        );
        // Near zero the floor decides.
        assert_eq!(judge(&ev(0, 0), &ev(10, 0), &cfg), Verdict::Accept);
        assert!(matches!(
            judge(&ev(0, 0), &ev(11, 0), &cfg),
            Verdict::Reject(_)
        ));
        // 11 of 10 000 = 1100 ppm > 1000: a spike.
        assert_eq!(
            judge(&ev(1000, 0), &ev(900, 11), &cfg),
            Verdict::Reject(Rejection::Saturations { ppm: 1100 })
        );
        // Not a spike if the baseline was already that bad.
        assert_eq!(judge(&ev(1000, 20), &ev(900, 11), &cfg), Verdict::Accept);
    }
}
