//! The guarded calibration session, written once: the firmware runs it on the chip and the
//! host runs it to predict the chip, bit for bit.
//!
//! A session is the procedure of [`crate::guard`] on sample sets kept in flash:
//!
//! 1. evaluate the held-back samples under the last good weights ([`Phase::EvalBefore`]);
//! 2. train on the calibration samples, `passes` times in stored order, then apply the partial
//!    batch ([`Phase::Train`]);
//! 3. evaluate the held-back samples again ([`Phase::EvalAfter`]);
//! 4. [`judge`](crate::guard::judge) the two, and on rejection put back the last good weights
//!    and the training state of before;
//! 5. the caller then writes the trainer's [`checkpoint`] (the committed state, or the last
//!    good one after a rollback).
//!
//! [`guard::calibrate_with`](crate::guard::calibrate_with) is steps 1 to 4 over any sample
//! iterators ([`guard::calibrate`](crate::guard::calibrate) is it without an observer);
//! [`calibrate_set`] is the same over a flattened [`SampleSet`], as a firmware stores its
//! samples. An [`Observer`] hears when each
//! phase starts and ends, and how many samples it went through: a firmware times the phases
//! with its cycle counter, the host does nothing (`()`) or keeps a record in memory.
//!
//! The last good model is given either decoded ([`LastGood::Checked`]) or as the bytes of its
//! blob ([`LastGood::Encoded`]); the bytes are decoded only on a rollback, in a frame of its
//! own, so a device spends no stack on the decoded form while it trains.
//!
//! Beside the procedure: [`training_macs`] (multiply-accumulates per sample, the work figure of
//! the phases), [`train`] and [`train_twin`] (passes over a set without a guard, for the
//! throughput figures and the float twin), and [`trained_tensors`] and [`twin_trained`] (the
//! trained tensors in the order both sides send and compare them).

use crate::blob::ChannelScale;
use crate::error::Error;
use crate::float::{FloatTarget, Real, Twin};
use crate::guard::{GuardConfig, SessionReport};
pub use crate::guard::{LastGood, Observer, Phase};
use crate::layer::loss::Target;
use crate::layer::Tensor;
use crate::num::{QFormat, Raw};
use crate::plan::Plan;
use crate::train::{LayerParams, Trainer};

/// Multiply-accumulates of one training sample, `(forward, backward)`: the forward pass, plus
/// for every layer from the first trained one on, its weight gradient (when its weights train)
/// and its input gradient (when a trained layer lies below it). See
/// [`Plan::training_macs`]; an evaluation costs the forward part alone.
pub const fn training_macs(plan: &Plan) -> (u64, u64) {
    let forward = plan.forward_macs();
    (forward, plan.training_macs() - forward)
}

/// Targets of a [`SampleSet`].
#[derive(Clone, Copy, Debug)]
pub enum Targets<'a> {
    /// Regression targets: one value per model output and sample, flattened, in one format.
    Values(Tensor<'a>),
    /// Class labels, one per sample.
    Classes(&'a [u16]),
}

/// Samples for the fixed-point trainer, flattened: sample `i` is `x[i·n .. (i+1)·n]` for a
/// model input of `n` values.
#[derive(Clone, Copy, Debug)]
pub struct SampleSet<'a> {
    /// Number of samples.
    pub count: u16,
    /// Inputs, in the model's input format.
    pub x: Raw<'a>,
    /// Targets.
    pub y: Targets<'a>,
}

impl<'a> SampleSet<'a> {
    /// Whether inputs and targets hold [`SampleSet::count`] samples for a model of `inputs`
    /// inputs and `outputs` outputs.
    pub fn fits(&self, inputs: usize, outputs: usize) -> bool {
        let n = usize::from(self.count);
        let targets_ok = match self.y {
            Targets::Values(t) => t.raw.len() == n * outputs,
            Targets::Classes(c) => c.len() == n,
        };
        self.x.len() == n * inputs && targets_ok
    }

    /// Sample `i`, its input in `fmt`. Past the end (or in a set that does not
    /// [fit](SampleSet::fits)) the tensors are empty and the trainer reports a length error.
    pub fn sample(
        &self,
        i: usize,
        fmt: QFormat,
        inputs: usize,
        outputs: usize,
    ) -> (Tensor<'a>, Target<'a>) {
        let x = Tensor {
            raw: self.x.slice(i * inputs, inputs).unwrap_or(Raw::EMPTY),
            fmt,
        };
        let t = match self.y {
            Targets::Values(t) => Target::Values(Tensor {
                raw: t.raw.slice(i * outputs, outputs).unwrap_or(Raw::EMPTY),
                fmt: t.fmt,
            }),
            Targets::Classes(c) => Target::Class(c.get(i).copied().unwrap_or(u16::MAX)),
        };
        (x, t)
    }

    /// The samples in stored order, for the model `plan` was made for (input in `fmt`).
    pub fn iter(
        &self,
        plan: &Plan,
        fmt: QFormat,
    ) -> impl Iterator<Item = (Tensor<'a>, Target<'a>)> + Clone + 'a {
        let set = *self;
        let (inputs, outputs) = io(plan);
        (0..usize::from(set.count)).map(move |i| set.sample(i, fmt, inputs, outputs))
    }

    /// The samples `passes` times over, in stored order.
    pub fn passes(
        &self,
        plan: &Plan,
        fmt: QFormat,
        passes: u16,
    ) -> impl Iterator<Item = (Tensor<'a>, Target<'a>)> + Clone + 'a {
        let once = self.iter(plan, fmt);
        (0..passes).flat_map(move |_| once.clone())
    }
}

/// Targets of a [`FloatSet`].
#[derive(Clone, Copy, Debug)]
pub enum FloatTargets<'a, R> {
    /// Regression targets, flattened.
    Values(&'a [R]),
    /// Class labels.
    Classes(&'a [u16]),
}

/// Samples for the float twin, flattened like [`SampleSet`].
#[derive(Clone, Copy, Debug)]
pub struct FloatSet<'a, R> {
    /// Number of samples.
    pub count: u16,
    /// Inputs.
    pub x: &'a [R],
    /// Targets.
    pub y: FloatTargets<'a, R>,
}

impl<'a, R> FloatSet<'a, R> {
    /// Whether inputs and targets hold [`FloatSet::count`] samples for a model of `inputs`
    /// inputs and `outputs` outputs.
    pub fn fits(&self, inputs: usize, outputs: usize) -> bool {
        let n = usize::from(self.count);
        let targets_ok = match self.y {
            FloatTargets::Values(t) => t.len() == n * outputs,
            FloatTargets::Classes(c) => c.len() == n,
        };
        self.x.len() == n * inputs && targets_ok
    }

    /// Sample `i`; past the end the slices are empty and the twin reports a length error.
    pub fn sample(&self, i: usize, inputs: usize, outputs: usize) -> (&'a [R], FloatTarget<'a, R>) {
        let x = self.x.get(i * inputs..(i + 1) * inputs).unwrap_or(&[]);
        let t = match self.y {
            FloatTargets::Values(t) => {
                FloatTarget::Values(t.get(i * outputs..(i + 1) * outputs).unwrap_or(&[]))
            }
            FloatTargets::Classes(c) => FloatTarget::Class(c.get(i).copied().unwrap_or(u16::MAX)),
        };
        (x, t)
    }
}

/// Values of the model's input and output.
fn io(plan: &Plan) -> (usize, usize) {
    let input = plan
        .shapes
        .layers
        .first()
        .map_or(0, |g| g.input.size() as usize);
    (input, plan.shapes.output.size() as usize)
}

/// One guarded session over flattened sets: trains on `set` `passes` times in stored order,
/// judged on `holdout` (see [`calibrate_with`](crate::guard::calibrate_with)).
///
/// # Errors
/// As [`calibrate_with`](crate::guard::calibrate_with).
pub fn calibrate_set<O: Observer + ?Sized>(
    trainer: &mut Trainer<'_>,
    set: &SampleSet<'_>,
    passes: u16,
    holdout: &SampleSet<'_>,
    cfg: &GuardConfig,
    last_good: LastGood<'_>,
    obs: &mut O,
) -> Result<SessionReport, Error> {
    let plan = trainer.plan();
    let fmt = trainer.desc().input_format;
    let train = set.passes(plan, fmt, passes);
    let holdout = holdout.iter(plan, fmt);
    crate::guard::calibrate_with(trainer, train, holdout, cfg, last_good, obs)
}

/// Step 5 of the [module docs](self): writes the trainer's checkpoint blob into `out` and
/// returns its length.
///
/// # Errors
/// As [`Trainer::write_checkpoint`].
pub fn checkpoint(
    trainer: &Trainer<'_>,
    scaling: &[ChannelScale],
    out: &mut [u8],
) -> Result<usize, Error> {
    trainer.write_checkpoint(scaling, out)
}

/// Trains on `set` `passes` times in stored order, then applies the partial batch, without a
/// guard. Returns the samples trained.
///
/// # Errors
/// The first sample error.
pub fn train(trainer: &mut Trainer<'_>, set: &SampleSet<'_>, passes: u16) -> Result<u32, Error> {
    let fmt = trainer.desc().input_format;
    let plan = trainer.plan();
    let samples = set.passes(plan, fmt, passes);
    match crate::guard::train_phase(trainer, samples) {
        (trained, None) => Ok(trained),
        (_, Some(e)) => Err(e),
    }
}

/// The float twin's training: `set` `passes` times in stored order, then the partial batch.
/// `plan` is the twin's plan. Returns the samples trained.
///
/// # Errors
/// The first sample error.
pub fn train_twin<R: Real>(
    twin: &mut Twin<'_, R>,
    plan: &Plan,
    set: &FloatSet<'_, R>,
    passes: u16,
) -> Result<u32, Error> {
    let (inputs, outputs) = io(plan);
    let mut trained = 0u32;
    for _ in 0..passes {
        for i in 0..usize::from(set.count) {
            let (x, y) = set.sample(i, inputs, outputs);
            twin.step(x, y)?;
            trained += 1;
        }
    }
    twin.flush();
    Ok(trained)
}

/// The tensors of layer `k` that train, weight then bias (an empty view for one that does
/// not): the order in which a session's trained weights are sent and compared.
pub fn trained_tensors<'t>(trainer: &'t Trainer<'_>, k: usize) -> [Raw<'t>; 2] {
    let (Some(p), Some(slots)) = (trainer.params(k), trainer.plan().layers.get(k)) else {
        return [Raw::EMPTY, Raw::EMPTY];
    };
    pick(p, slots.weight.is_some(), slots.bias.is_some())
}

fn pick(p: LayerParams<'_>, weight: bool, bias: bool) -> [Raw<'_>; 2] {
    [
        if weight { p.weight } else { Raw::EMPTY },
        if bias { p.bias } else { Raw::EMPTY },
    ]
}

/// The twin's tensors of layer `k` that train, weight then bias, as [`trained_tensors`];
/// `plan` is the twin's plan.
pub fn twin_trained<'t, R: Real>(twin: &'t Twin<'_, R>, plan: &Plan, k: usize) -> [&'t [R]; 2] {
    match (twin.params(k), plan.layers.get(k)) {
        (Some(p), Some(slots)) => [
            if slots.weight.is_some() {
                p.weight
            } else {
                &[]
            },
            if slots.bias.is_some() { p.bias } else { &[] },
        ],
        _ => [&[], &[]],
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::blob::{self, BlobKind, TensorBlob, TensorRole};
    use crate::guard::{self, Rejection, Verdict};
    use crate::model::TrainMode;
    use crate::model::{LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc};
    use crate::num::{QScalar, Word};

    const Q: QFormat = QFormat::new_unchecked(Word::I16, 12);

    /// The one-weight model y = w·x + b of `guard::calibrate`'s example (w = 0.5, b = 0): our
    /// own numbers, worked by hand.
    fn model() -> (ModelDesc, Plan) {
        let p = ParamFormats::plain(Q, 20);
        let dense = LayerDesc {
            kind: LayerKind::Dense { units: 1 },
            mode: TrainMode::Full,
            weight: p,
            bias: p,
            out: Q,
            grad: Q,
        };
        let train = TrainDesc::sgd(QScalar { raw: 1, frac: 1 });
        let desc = ModelDesc::new(Shape::vector(1), Q, &[dense], Loss::SquaredError, train)
            .expect("valid");
        let plan = Plan::of(&desc).expect("plans");
        (desc, plan)
    }

    fn factory(desc: &ModelDesc, buf: &mut [u8]) -> usize {
        let w = TensorBlob {
            layer: 0,
            role: TensorRole::Weight,
            format: Q,
            elems: 1,
            data: &[0x00, 0x08],
        };
        let b = TensorBlob {
            role: TensorRole::Bias,
            data: &[0, 0],
            ..w
        };
        blob::encode_parts(BlobKind::Model, desc, &[], None, 2, [w, b].into_iter(), buf)
            .expect("encodes")
    }

    /// `x.len()` one-input samples with the targets `y`, in Q3.12.
    fn values<'a>(x: &'a [i16], y: &'a [i16]) -> SampleSet<'a> {
        SampleSet {
            count: x.len() as u16,
            x: Raw::I16(x),
            y: Targets::Values(Tensor {
                raw: Raw::I16(y),
                fmt: Q,
            }),
        }
    }

    const INIT: [LayerParams<'static>; 1] = [LayerParams {
        weight: Raw::I16(&[2048]),
        bias: Raw::I16(&[0]),
    }];

    #[derive(Default)]
    struct Log {
        events: [(u8, u32); 6],
        n: usize,
    }

    impl Observer for Log {
        fn enter(&mut self, phase: Phase) {
            self.events[self.n] = (phase.index() as u8, u32::MAX);
            self.n += 1;
        }
        fn leave(&mut self, phase: Phase, samples: u32) {
            self.events[self.n] = (phase.index() as u8, samples);
            self.n += 1;
        }
    }

    #[test]
    fn flattened_sets_match_the_iterator_form_and_the_observer_hears_every_phase() {
        let (desc, plan) = model();
        let mut buf = [0u8; 256];
        let n = factory(&desc, &mut buf);
        let init = INIT;
        // Two calibration samples x = 1 → 1 and x = 0.5 → 0.5, one held back: x = 1 → 1.
        let xs = [4096i16, 2048];
        let set = values(&xs, &xs);
        let held = values(&xs[..1], &xs[..1]);
        assert!(set.fits(1, 1) && held.fits(1, 1) && !set.fits(2, 1));

        let mut arena = vec![0u32; plan.ram_words()];
        let mut t = Trainer::new(&desc, &plan, &mut arena, &init).expect("trainer");
        let mut log = Log::default();
        let cfg = GuardConfig::DEFAULT;
        let flat = calibrate_set(
            &mut t,
            &set,
            3,
            &held,
            &cfg,
            LastGood::Encoded(&buf[..n]),
            &mut log,
        )
        .expect("runs");
        let w_flat = t.params(0).expect("layer").weight.get(0);
        assert_eq!(
            log.events,
            [
                (0, u32::MAX),
                (0, 1),
                (1, u32::MAX),
                (1, 6),
                (2, u32::MAX),
                (2, 1)
            ]
        );

        let mut arena = vec![0u32; plan.ram_words()];
        let mut t = Trainer::new(&desc, &plan, &mut arena, &init).expect("trainer");
        let last_good = blob::decode(&buf[..n]).expect("decodes");
        let pairs = |i: usize| set.sample(i, Q, 1, 1);
        let train = (0..3).flat_map(|_| (0..2).map(pairs));
        let it = guard::calibrate(&mut t, train, [pairs(0)], &cfg, &last_good).expect("runs");
        assert_eq!(flat, it);
        assert_eq!(t.params(0).expect("layer").weight.get(0), w_flat);
        assert_eq!((flat.trained, flat.before.samples), (6, 1));
    }

    #[test]
    fn a_rejection_decodes_the_encoded_blob_and_restores_the_factory_weights() {
        let (desc, plan) = model();
        let mut buf = [0u8; 256];
        let n = factory(&desc, &mut buf);
        let init = INIT;
        // Trained towards y = −x, judged on y = x: the loss rises and the guard rejects.
        let x = [4096i16];
        let neg = [-4096i16];
        let wrong = values(&x, &neg);
        let held = values(&x, &x);
        let mut arena = vec![0u32; plan.ram_words()];
        let mut t = Trainer::new(&desc, &plan, &mut arena, &init).expect("trainer");
        let state = t.train_state();
        let r = calibrate_set(
            &mut t,
            &wrong,
            2,
            &held,
            &GuardConfig::DEFAULT,
            LastGood::Encoded(&buf[..n]),
            &mut (),
        )
        .expect("runs");
        assert!(matches!(
            r.verdict,
            Verdict::Reject(Rejection::LossRose { .. })
        ));
        assert_eq!(trained_tensors(&t, 0)[0].at(0), 2048);
        assert_eq!(t.train_state(), state);
        let after_blob = (t.train_state(), t.params(0).expect("layer").bias.get(0));

        // Going back to the factory parameters instead of their blob ends the same way.
        let mut arena = vec![0u32; plan.ram_words()];
        let mut t = Trainer::new(&desc, &plan, &mut arena, &init).expect("trainer");
        let p = calibrate_set(
            &mut t,
            &wrong,
            2,
            &held,
            &GuardConfig::DEFAULT,
            LastGood::Params(&init),
            &mut (),
        )
        .expect("runs");
        assert_eq!(p, r);
        assert_eq!(trained_tensors(&t, 0)[0].at(0), 2048);
        assert_eq!(
            (t.train_state(), t.params(0).expect("layer").bias.get(0)),
            after_blob
        );

        // Bytes that are no blob fail the rollback with the decoder's error.
        let mut arena = vec![0u32; plan.ram_words()];
        let mut t = Trainer::new(&desc, &plan, &mut arena, &init).expect("trainer");
        let e = calibrate_set(
            &mut t,
            &wrong,
            2,
            &held,
            &GuardConfig::DEFAULT,
            LastGood::Encoded(&buf[..4]),
            &mut (),
        );
        assert_eq!(e, Err(Error::Blob(blob::BlobError::TooShort)));
    }

    #[test]
    fn training_macs_split_the_plans_count() {
        let (_, plan) = model();
        // One dense 1→1: one forward product, one weight-gradient product, no input gradient.
        assert_eq!(training_macs(&plan), (1, 1));
    }
}
