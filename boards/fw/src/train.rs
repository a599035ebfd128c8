//! The calibration session: the model hone exported, fine-tuned on the chip with the core's
//! fixed-point [`Trainer`], guarded, and reported so the host can check it bit for bit.
//!
//! The host generates two files per board (see `boards/README.md`): `model.rs` (the exported
//! model) and `samples.rs` (the calibration and hold-out samples and one [`Session`] value
//! tying everything together, then the throughput phase's model, see [`crate::throughput`]).
//! [`crate::include_session!`] includes both; [`run`] then does, in this order:
//!
//! 1. an `engine` record: arena and object sizes, multiply-accumulates per sample;
//! 2. the **calibration** set: evaluate the hold-out samples under the factory weights, train
//!    on the calibration samples (`passes` passes in stored order, then a flush of the partial
//!    batch), evaluate the hold-out samples again, judge with the core's
//!    [`hone_core::guard::judge`], and restore the factory blob on rejection. This is the body of
//!    [`hone_core::guard::calibrate`], split so each part is timed on its own. A `guard` record gives the
//!    verdict and both losses; the trained tensors and the checkpoint blob go to the host as
//!    payloads;
//! 3. the **faulty** set: the same inputs with mislabelled targets, which the guard is expected
//!    to reject; the rollback is checked by the host through the weights payload;
//! 4. the **float twin** ([`Twin`]`<f32>`) trained on the same calibration samples in the same
//!    order, in hardware `f32` where the core has an FPU and in software elsewhere; its weights
//!    go to the host as a payload too.
//!
//! Every part runs in a function of its own whose stack is measured separately: the free stack
//! is painted again before the part starts ([`memory::repaint_free_stack`]) and scanned when
//! its work is done ([`memory::stack_usage_since_repaint`]), before anything is logged, so each
//! `stack` record shows what that part needs. The arenas and the engine objects are locals of
//! those functions, so the figures include them.
//!
//! The calls into the core go through the small `#[inline(never)]` functions of `engine`, so
//! the engine's code stays in symbols of its own (`hone_core::…` and `hone_fw::train::engine::…`)
//! and the host can size it from the ELF.

use core::mem::size_of;

use hone_core::blob::{ChannelScale, CheckedBlob};
use hone_core::float::{FloatParams, FloatTarget, Twin};
use hone_core::guard::{Evaluation, GuardConfig, Rejection, Verdict};
use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::{LayerDesc, Loss, ModelDesc, Shape, TrainDesc};
use hone_core::num::{QFormat, Raw};
use hone_core::plan::Plan;
use hone_core::train::{LayerParams, Trainer};

use crate::blob::{BlobWriter, CHUNK};
use crate::memory;
use crate::platform::Platform;
use crate::record;
use crate::session::{Ctx, SessionError};

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

/// Targets of a [`FloatSet`].
#[derive(Clone, Copy, Debug)]
pub enum FloatTargets<'a> {
    /// Regression targets, flattened.
    Values(&'a [f32]),
    /// Class labels.
    Classes(&'a [u16]),
}

/// Samples for the float twin, flattened like [`SampleSet`].
#[derive(Clone, Copy, Debug)]
pub struct FloatSet<'a> {
    /// Number of samples.
    pub count: u16,
    /// Inputs.
    pub x: &'a [f32],
    /// Targets.
    pub y: FloatTargets<'a>,
}

/// Everything one calibration session needs, as the host generated it for the board.
#[derive(Clone, Copy)]
pub struct Session<'a> {
    /// Input shape of the model.
    pub input: Shape,
    /// Input format.
    pub input_format: QFormat,
    /// The layers.
    pub layers: &'a [LayerDesc],
    /// The loss.
    pub loss: Loss,
    /// The training setup.
    pub train: TrainDesc,
    /// The fixed-point memory plan.
    pub plan: &'a Plan,
    /// Factory parameters, one entry per layer.
    pub params: &'a [LayerParams<'a>],
    /// The factory model as a blob: the last good weights the guard restores.
    pub model_blob: &'a [u8],
    /// Input scaling, carried into checkpoints.
    pub scaling: &'a [ChannelScale],
    /// The calibration samples of the unit.
    pub calibration: SampleSet<'a>,
    /// The same inputs with mislabelled targets, for the guard to reject.
    pub faulty: SampleSet<'a>,
    /// Held-back samples the guard judges on.
    pub holdout: SampleSet<'a>,
    /// Passes over the training samples.
    pub passes: u16,
    /// The guard's thresholds.
    pub guard: GuardConfig,
    /// The float twin's plan (`f32`).
    pub float_plan: &'a Plan,
    /// The float twin's start: the factory parameters in `f32`.
    pub float_params: &'a [FloatParams<'a, f32>],
    /// The calibration samples in `f32`, for the twin.
    pub float_calibration: FloatSet<'a>,
}

/// Includes the session files the board's build script copied into `OUT_DIR` (`model.rs` and
/// `samples.rs`, generated by the host) into a module `session`, and defines
/// `session::run`, the board's whole session: the Phase-1 dot products, [`run`], then the
/// throughput phase ([`crate::throughput::run`]).
///
/// A board's `main` then reads `hone_fw::run(platform, session::run)`.
#[macro_export]
macro_rules! include_session {
    () => {
        /// The model and samples the host generated for this board, and the session over them.
        #[allow(dead_code)]
        mod session {
            use $crate::hone_core;
            include!(concat!(env!("OUT_DIR"), "/model.rs"));
            include!(concat!(env!("OUT_DIR"), "/samples.rs"));

            /// Phase 1 (the instruction floor of dot products), the calibration session, then
            /// the throughput phase.
            ///
            /// # Errors
            /// As [`hone_fw::train::run`] and [`hone_fw::throughput::run`].
            pub fn run<P: $crate::Platform>(
                ctx: &mut $crate::Ctx<'_, P>,
            ) -> Result<(), $crate::SessionError> {
                $crate::workload::phase1(ctx)?;
                $crate::train::run::<
                    P,
                    { ARENA_WORDS },
                    { FLOAT_ARENA_WORDS },
                    { CHECKPOINT_BYTES },
                >(ctx, &SESSION)?;
                $crate::throughput::run::<
                    P,
                    { TPUT_ARENA_WORDS },
                    { TPUT_FLOAT_ARENA_WORDS },
                    { TPUT_VALUES },
                >(ctx, THROUGHPUT.as_ref())
            }
        }
    };
}

/// Names of the spans, payloads and records of one guarded set.
struct SetNames {
    set: &'static str,
    eval_before: &'static str,
    train: &'static str,
    eval_after: &'static str,
    weights: &'static str,
    checkpoint: &'static str,
}

const CALIBRATION: SetNames = SetNames {
    set: "calib",
    eval_before: "calib_eval_before",
    train: "calib_train",
    eval_after: "calib_eval_after",
    weights: "calib_weights",
    checkpoint: "calib_checkpoint",
};

const FAULTY: SetNames = SetNames {
    set: "faulty",
    eval_before: "faulty_eval_before",
    train: "faulty_train",
    eval_after: "faulty_eval_after",
    weights: "faulty_weights",
    checkpoint: "faulty_checkpoint",
};

/// Multiply-accumulates of one training sample: the forward pass, plus for every layer with
/// parameters from the first trained one on, its weight gradient (if its weights train) and
/// its input gradient (if a trained layer lies below it).
#[must_use]
pub fn training_macs(plan: &Plan, layers: &[LayerDesc]) -> (u32, u32) {
    let forward = plan.forward_macs();
    let mut backward = 0u64;
    for (k, l) in layers.iter().enumerate().skip(plan.first_trainable) {
        if !l.kind.has_params() {
            continue;
        }
        let macs = u64::from(plan.shapes.layers.get(k).map_or(0, |g| g.macs));
        if l.mode.trains_weight() {
            backward += macs;
        }
        if k > plan.first_trainable {
            backward += macs;
        }
    }
    (sat_u32(forward), sat_u32(backward))
}

/// Scales a raw sensor reading as the host does (`x = (raw − offset) · gain`) and quantizes it
/// into `fmt`: to nearest (halves away from zero), saturated to the word's range. For samples
/// acquired on the device; the host's quantizer rounds halves to even, so a reading that falls
/// exactly halfway between two steps may differ by one step from the host's.
#[must_use]
pub fn quantize_reading(raw: f32, scale: ChannelScale, fmt: QFormat) -> i32 {
    let x = (raw - scale.offset) * scale.gain;
    let y = x * (1u32 << fmt.frac.min(31)) as f32;
    let r = if y >= 0.0 { y + 0.5 } else { y - 0.5 };
    // `as` truncates toward zero and saturates at the ends of `i32` (NaN gives 0).
    let q = r as i32;
    q.clamp(fmt.word.min_raw(), fmt.word.max_raw())
}

fn sat_u32(v: u64) -> u32 {
    u32::try_from(v).unwrap_or(u32::MAX)
}

impl Session<'_> {
    fn desc(&self) -> Result<ModelDesc, SessionError> {
        ModelDesc::new(
            self.input,
            self.input_format,
            self.layers,
            self.loss,
            self.train,
        )
        .map_err(SessionError::Engine)
    }

    fn inputs(&self) -> usize {
        self.input.size() as usize
    }

    fn outputs(&self) -> usize {
        self.plan.shapes.output.size() as usize
    }
}

impl<'a> SampleSet<'a> {
    /// Checks that inputs and targets hold `count` samples for a model of `inputs` inputs and
    /// `outputs` outputs.
    fn check(&self, inputs: usize, outputs: usize) -> Result<(), SessionError> {
        let n = usize::from(self.count);
        let targets_ok = match self.y {
            Targets::Values(t) => t.raw.len() == n * outputs,
            Targets::Classes(c) => c.len() == n,
        };
        if self.x.len() == n * inputs && targets_ok {
            Ok(())
        } else {
            Err(SessionError::Check("sample-set-shape"))
        }
    }

    /// Sample `i`. Past the end (never, after [`SampleSet::check`]) the tensors are empty and
    /// the core reports a length error.
    fn sample(
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
}

impl<'a> FloatSet<'a> {
    fn check(&self, inputs: usize, outputs: usize) -> Result<(), SessionError> {
        let n = usize::from(self.count);
        let targets_ok = match self.y {
            FloatTargets::Values(t) => t.len() == n * outputs,
            FloatTargets::Classes(c) => c.len() == n,
        };
        if self.x.len() == n * inputs && targets_ok {
            Ok(())
        } else {
            Err(SessionError::Check("float-set-shape"))
        }
    }

    fn sample(&self, i: usize, inputs: usize, outputs: usize) -> (&'a [f32], FloatTarget<'a, f32>) {
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

/// The calls into the core, each in a symbol of its own (see the [module docs](self)).
pub(crate) mod engine {
    use hone_core::blob::{self, ChannelScale, TrainState};
    use hone_core::float::{FloatParams, Twin};
    use hone_core::guard::{self, Evaluation, GuardConfig, Verdict};
    use hone_core::model::ModelDesc;
    use hone_core::num::QFormat;
    use hone_core::plan::Plan;
    use hone_core::train::{LayerParams, Trainer};
    use hone_core::Error;

    use super::{FloatSet, SampleSet};

    /// Whether `bytes` decode to a blob of the model `desc`. The decoded blob lives only in
    /// this function's frame, and only once (it is borrowed, never moved out of the result).
    #[inline(never)]
    pub fn blob_matches(bytes: &[u8], desc: &ModelDesc) -> Result<bool, Error> {
        let decoded = blob::decode(bytes);
        match &decoded {
            Ok(b) => Ok(b.desc() == desc),
            Err(e) => Err(*e),
        }
    }

    #[inline(never)]
    pub fn new_trainer<'a>(
        desc: &'a ModelDesc,
        plan: &'a Plan,
        arena: &'a mut [u32],
        params: &'a [LayerParams<'a>],
    ) -> Result<Trainer<'a>, Error> {
        Trainer::new(desc, plan, arena, params)
    }

    #[inline(never)]
    pub fn evaluate(
        t: &mut Trainer<'_>,
        set: &SampleSet<'_>,
        fmt: QFormat,
        io: (usize, usize),
    ) -> Result<Evaluation, Error> {
        let n = usize::from(set.count);
        guard::evaluate(t, (0..n).map(|i| set.sample(i, fmt, io.0, io.1)))
    }

    /// The training part of `guard::calibrate`: every sample of every pass, then the flush.
    #[inline(never)]
    pub fn train(
        t: &mut Trainer<'_>,
        set: &SampleSet<'_>,
        passes: u16,
        fmt: QFormat,
        io: (usize, usize),
    ) -> Result<u32, Error> {
        let mut trained = 0u32;
        for _ in 0..passes {
            for i in 0..usize::from(set.count) {
                let (x, y) = set.sample(i, fmt, io.0, io.1);
                t.step(x, y)?;
                trained += 1;
            }
        }
        t.flush();
        Ok(trained)
    }

    #[inline(never)]
    pub fn judge(before: &Evaluation, after: &Evaluation, cfg: &GuardConfig) -> Verdict {
        guard::judge(before, after, cfg)
    }

    /// Restores the last good model from its blob, decoded here (so the decoded form takes
    /// stack only during a rollback, and only once: it is borrowed from the result).
    #[inline(never)]
    pub fn rollback(
        t: &mut Trainer<'_>,
        last_good: &[u8],
        before: &TrainState,
    ) -> Result<(), Error> {
        let decoded = blob::decode(last_good);
        match &decoded {
            Ok(b) => {
                t.restore(b)?;
                // The factory blob carries weights only: the training state of before the
                // session comes back from the snapshot, as `guard::calibrate` does.
                if b.kind() == blob::BlobKind::Model {
                    t.set_train_state(before)?;
                }
                Ok(())
            }
            Err(e) => Err(*e),
        }
    }

    #[inline(never)]
    pub fn checkpoint(
        t: &Trainer<'_>,
        scaling: &[ChannelScale],
        out: &mut [u8],
    ) -> Result<usize, Error> {
        t.write_checkpoint(scaling, out)
    }

    #[inline(never)]
    pub fn new_twin<'a>(
        desc: &'a ModelDesc,
        plan: &'a Plan,
        arena: &'a mut [f32],
        params: &[FloatParams<'a, f32>],
    ) -> Result<Twin<'a, f32>, Error> {
        Twin::new(desc, plan, arena, params)
    }

    /// The twin's training: every sample of every pass, then the flush.
    #[inline(never)]
    pub fn train_twin(
        t: &mut Twin<'_, f32>,
        set: &FloatSet<'_>,
        passes: u16,
        io: (usize, usize),
    ) -> Result<u32, Error> {
        let mut trained = 0u32;
        for _ in 0..passes {
            for i in 0..usize::from(set.count) {
                let (x, y) = set.sample(i, io.0, io.1);
                t.step(x, y)?;
                trained += 1;
            }
        }
        t.flush();
        Ok(trained)
    }
}

/// Runs the calibration session described by `s` (see the [module docs](self)).
///
/// `ARENA` and `FLOAT_ARENA` are the sizes in words of the fixed-point and float arenas
/// (`ARENA_WORDS` of `model.rs`, `FLOAT_ARENA_WORDS` of `samples.rs`); `CHECKPOINT` is the
/// size in bytes of the buffer a checkpoint blob is written into.
///
/// # Errors
/// [`SessionError::Engine`] for an error of the core, [`SessionError::Check`] for sample sets
/// that do not fit the model or a model blob that describes another model, and the payload
/// channel's errors.
pub fn run<P: Platform, const ARENA: usize, const FLOAT_ARENA: usize, const CHECKPOINT: usize>(
    ctx: &mut Ctx<'_, P>,
    s: &Session<'_>,
) -> Result<(), SessionError> {
    let io = (s.inputs(), s.outputs());
    s.calibration.check(io.0, io.1)?;
    s.faulty.check(io.0, io.1)?;
    s.holdout.check(io.0, io.1)?;
    s.float_calibration.check(io.0, io.1)?;
    let (forward, backward) = training_macs(s.plan, s.layers);
    record::engine(&record::EngineSizes {
        arena: s.plan.ram_bytes,
        trainer: size_of::<Trainer<'_>>() as u32,
        float_arena: s.float_plan.ram_bytes,
        twin: size_of::<Twin<'_, f32>>() as u32,
        blob: size_of::<CheckedBlob<'_>>() as u32,
        forward_macs: forward,
        backward_macs: backward,
    });

    for (names, set) in [(&CALIBRATION, &s.calibration), (&FAULTY, &s.faulty)] {
        let entry = memory::stack_depth();
        memory::repaint_free_stack();
        guarded::<P, ARENA, CHECKPOINT>(ctx, s, set, names, entry)?;
    }

    let entry = memory::stack_depth();
    memory::repaint_free_stack();
    float_twin::<P, FLOAT_ARENA>(ctx, s, entry)
}

/// What a guarded set measured, logged after the stack scan.
struct GuardedRun {
    before: Evaluation,
    after: Evaluation,
    verdict: Verdict,
    trained: u32,
    spans: [crate::measure::Span; 3],
    stack: memory::StackUsage,
}

/// One guarded set: the body of `guard::calibrate`, timed part by part. Its locals are the
/// engine's whole working memory: description, arena and trainer; the factory blob stays in
/// flash and is decoded where it is read.
#[inline(never)]
fn guarded<P: Platform, const ARENA: usize, const CHECKPOINT: usize>(
    ctx: &mut Ctx<'_, P>,
    s: &Session<'_>,
    set: &SampleSet<'_>,
    names: &SetNames,
    entry: u32,
) -> Result<(), SessionError> {
    let io = (s.inputs(), s.outputs());
    let fmt = s.input_format;
    let desc = s.desc()?;
    if !engine::blob_matches(s.model_blob, &desc).map_err(SessionError::Engine)? {
        return Err(SessionError::Check("model-blob-describes-another-model"));
    }
    let mut arena = [0u32; ARENA];
    // The trainer is used where the core's result put it, never moved out of it, so this frame
    // holds it once.
    let mut made = engine::new_trainer(&desc, s.plan, &mut arena, s.params);
    let trainer = match &mut made {
        Ok(t) => t,
        Err(e) => return Err(SessionError::Engine(*e)),
    };
    let (forward, backward) = training_macs(s.plan, s.layers);
    let eval_work = forward.saturating_mul(u32::from(s.holdout.count));
    let steps = u32::from(s.passes) * u32::from(set.count);
    let train_work = forward.saturating_add(backward).saturating_mul(steps);

    let saved = trainer.train_state();
    let (before, t_before) = ctx.time(eval_work, || engine::evaluate(trainer, &s.holdout, fmt, io));
    let before = before.map_err(SessionError::Engine)?;
    let (trained, t_train) = ctx.time(train_work, || {
        engine::train(trainer, set, s.passes, fmt, io)
    });
    let trained = trained.map_err(SessionError::Engine)?;
    let (after, t_after) = ctx.time(eval_work, || engine::evaluate(trainer, &s.holdout, fmt, io));
    let after = after.map_err(SessionError::Engine)?;
    let verdict = engine::judge(&before, &after, &s.guard);
    if verdict != Verdict::Accept {
        engine::rollback(trainer, s.model_blob, &saved).map_err(SessionError::Engine)?;
    }
    let stack = memory::stack_usage_since_repaint();
    let run = GuardedRun {
        before,
        after,
        verdict,
        trained,
        spans: [t_before, t_train, t_after],
        stack,
    };
    report_guarded::<P, CHECKPOINT>(ctx, s, trainer, names, &run, entry)
}

/// Logs what a guarded set did and sends its trained tensors and checkpoint.
#[inline(never)]
fn report_guarded<P: Platform, const CHECKPOINT: usize>(
    ctx: &mut Ctx<'_, P>,
    s: &Session<'_>,
    trainer: &Trainer<'_>,
    names: &SetNames,
    run: &GuardedRun,
    entry: u32,
) -> Result<(), SessionError> {
    record::span(names.eval_before, &run.spans[0]);
    record::span(names.train, &run.spans[1]);
    record::span(names.eval_after, &run.spans[2]);
    record::stack(names.set, entry, run.stack.peak);
    let (verdict, before_sat, after_sat) = match run.verdict {
        Verdict::Accept => ("accept", run.before.saturations, run.after.saturations),
        Verdict::Reject(Rejection::LossRose { .. }) => {
            ("reject-loss", run.before.saturations, run.after.saturations)
        }
        Verdict::Reject(Rejection::Saturations { .. }) => (
            "reject-saturation",
            run.before.saturations,
            run.after.saturations,
        ),
    };
    record::guard(&record::GuardRecord {
        set: names.set,
        verdict,
        before: run.before.mean_loss.0,
        after: run.after.mean_loss.0,
        before_saturations: before_sat,
        after_saturations: after_sat,
        trained: run.trained,
        steps: trainer.steps(),
        updates: trainer.updates(),
    });

    send_trained(ctx, names.weights, trainer)?;
    send_checkpoint::<P, CHECKPOINT>(ctx, s, trainer, names.checkpoint)
}

/// Sends the trained tensors of `trainer` as the payload `name`: layer by layer, weights then
/// bias, every value little-endian in its storage word.
pub(crate) fn send_trained<P: Platform>(
    ctx: &mut Ctx<'_, P>,
    name: &str,
    trainer: &Trainer<'_>,
) -> Result<(), SessionError> {
    let (plan, layers) = (trainer.plan(), trainer.desc().layers.len());
    let mut total = 0u32;
    for k in 0..layers {
        for raw in trained_tensors(plan, trainer.params(k), k) {
            total += (raw.len() * raw.word().bytes()) as u32;
        }
    }
    let mut out = Staged::new(ctx.blob(name, total)?);
    for k in 0..layers {
        for raw in trained_tensors(plan, trainer.params(k), k) {
            for i in 0..raw.len() {
                let v = raw.at(i);
                match raw {
                    Raw::I8(_) => out.push(&[v as u8])?,
                    Raw::I16(_) => out.push(&(v as i16).to_le_bytes())?,
                    Raw::I32(_) => out.push(&v.to_le_bytes())?,
                }
            }
        }
    }
    out.finish()
}

/// The tensors of layer `k` that train (weight, then bias), from `params`.
fn trained_tensors<'t>(plan: &Plan, params: Option<LayerParams<'t>>, k: usize) -> [Raw<'t>; 2] {
    let (Some(p), Some(slots)) = (params, plan.layers.get(k)) else {
        return [Raw::EMPTY, Raw::EMPTY];
    };
    [
        if slots.weight.is_some() {
            p.weight
        } else {
            Raw::EMPTY
        },
        if slots.bias.is_some() {
            p.bias
        } else {
            Raw::EMPTY
        },
    ]
}

#[inline(never)]
fn send_checkpoint<P: Platform, const CHECKPOINT: usize>(
    ctx: &mut Ctx<'_, P>,
    s: &Session<'_>,
    trainer: &Trainer<'_>,
    name: &str,
) -> Result<(), SessionError> {
    let mut buf = [0u8; CHECKPOINT];
    let n = engine::checkpoint(trainer, s.scaling, &mut buf).map_err(SessionError::Engine)?;
    ctx.send_blob(name, buf.get(..n).unwrap_or(&[]))
}

/// The float twin on the calibration samples. Its locals are the twin's whole working memory.
#[inline(never)]
fn float_twin<P: Platform, const FLOAT_ARENA: usize>(
    ctx: &mut Ctx<'_, P>,
    s: &Session<'_>,
    entry: u32,
) -> Result<(), SessionError> {
    let io = (s.inputs(), s.outputs());
    let desc = s.desc()?;
    let mut arena = [0f32; FLOAT_ARENA];
    let mut twin = engine::new_twin(&desc, s.float_plan, &mut arena, s.float_params)
        .map_err(SessionError::Engine)?;
    let (forward, backward) = training_macs(s.float_plan, s.layers);
    let set = &s.float_calibration;
    let steps = u32::from(s.passes) * u32::from(set.count);
    let work = forward.saturating_add(backward).saturating_mul(steps);
    let (trained, span) = ctx.time(work, || engine::train_twin(&mut twin, set, s.passes, io));
    trained.map_err(SessionError::Engine)?;
    let stack = memory::stack_usage_since_repaint();
    report_twin(ctx, s, &twin, &span, entry, stack.peak)
}

#[inline(never)]
fn report_twin<P: Platform>(
    ctx: &mut Ctx<'_, P>,
    s: &Session<'_>,
    twin: &Twin<'_, f32>,
    span: &crate::measure::Span,
    entry: u32,
    peak: u32,
) -> Result<(), SessionError> {
    record::span("f32_train", span);
    record::stack("f32", entry, peak);
    send_twin(ctx, "f32_weights", s.float_plan, s.layers.len(), twin)
}

/// Sends the trained tensors of `twin` (planned by `plan`, `layers` layers) as the payload
/// `name`: layer by layer, weights then bias, every value a little-endian `f32`.
pub(crate) fn send_twin<P: Platform>(
    ctx: &mut Ctx<'_, P>,
    name: &str,
    plan: &Plan,
    layers: usize,
    twin: &Twin<'_, f32>,
) -> Result<(), SessionError> {
    let trained = |k: usize| -> [&[f32]; 2] {
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
    };
    let mut total = 0u32;
    for k in 0..layers {
        for t in trained(k) {
            total += (t.len() * 4) as u32;
        }
    }
    let mut out = Staged::new(ctx.blob(name, total)?);
    for k in 0..layers {
        for t in trained(k) {
            for v in t {
                out.push(&v.to_le_bytes())?;
            }
        }
    }
    out.finish()
}

/// A payload written a few bytes at a time, sent in full chunks.
struct Staged {
    writer: BlobWriter,
    buf: [u8; CHUNK],
    len: usize,
}

impl Staged {
    fn new(writer: BlobWriter) -> Self {
        Self {
            writer,
            buf: [0; CHUNK],
            len: 0,
        }
    }

    fn push(&mut self, bytes: &[u8]) -> Result<(), SessionError> {
        for &b in bytes {
            if self.len == CHUNK {
                self.writer.write(&self.buf)?;
                self.len = 0;
            }
            if let Some(slot) = self.buf.get_mut(self.len) {
                *slot = b;
                self.len += 1;
            }
        }
        Ok(())
    }

    fn finish(self) -> Result<(), SessionError> {
        let mut writer = self.writer;
        writer.write(self.buf.get(..self.len).unwrap_or(&[]))?;
        writer.finish()
    }
}
