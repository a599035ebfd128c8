//! The throughput phase: a larger dense model than the calibration session's, trained on
//! values the board draws itself, timed so that instructions per training sample and per
//! multiply-accumulate show what the engine costs when the products dominate.
//!
//! The host generates the model for each board ([`Throughput`], in `samples.rs`), chosen with
//! the memory plan so that the phase fits the board's RAM with a margin. Nothing else of the
//! phase is stored in flash: the initial parameters and a small pool of samples are drawn on
//! the board from the core's seeded generator ([`Rng`]) in one fixed order (see [`generate`]),
//! which the host repeats to compute the same final weights.
//!
//! [`run`] does, in this order:
//!
//! 1. a `tput` record: the model's inputs, outputs, parameters, pool and sample counts,
//!    multiply-accumulates per training sample ([`Plan::training_macs`]) and both arenas;
//! 2. **fixed point**: a fresh [`Trainer`](hone_core::train::Trainer) from the drawn
//!    parameters trains the pool `passes` times in stored order, then flushes (span
//!    `tput_train`, `stack` record `tput`, payload `tput_weights`);
//! 3. **float twin**: the same in [`Twin`](hone_core::float::Twin)`<f32>` from the same drawn
//!    values, exactly converted (span `tput_f32_train`, `stack` record `tput_f32`, payload
//!    `tput_f32_weights`).
//!
//! Each part's stack is measured on its own, as in [`crate::train`]; the arena, the drawn
//! values and the engine objects are locals of the part, so the figures hold all of them. The
//! calls into the core go through the calibration session's wrappers, so no new engine code
//! is added.

use hone_core::float::FloatParams;
use hone_core::layer::Tensor;
use hone_core::model::{Loss, ModelDesc, MAX_LAYERS};
use hone_core::num::{QFormat, Raw, Rng, Word};
use hone_core::plan::Plan;
use hone_core::train::LayerParams;

use crate::memory;
use crate::platform::Platform;
use crate::record;
use crate::session::{Ctx, SessionError};
use crate::train::{engine, send_trained, send_twin, FloatSet, FloatTargets, SampleSet, Targets};

/// Half-ranges of the drawn values as powers of two: a value of a tensor with exponent `e` is
/// uniform over `[−2^e, 2^e)` in steps of the tensor's format.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Ranges {
    /// Weights.
    pub weight: i8,
    /// Biases.
    pub bias: i8,
    /// Sample inputs.
    pub input: i8,
    /// Sample targets.
    pub target: i8,
}

/// The throughput phase of one board, as the host generated it.
#[derive(Clone, Copy)]
pub struct Throughput<'a> {
    /// The model (regression: one target value per output), checked against
    /// [`Throughput::plan`] at compile time; a `static` in flash.
    pub desc: &'a ModelDesc,
    /// Format of the targets.
    pub target_format: QFormat,
    /// The fixed-point memory plan.
    pub plan: &'a Plan,
    /// The float twin's plan (`f32`).
    pub float_plan: &'a Plan,
    /// Seed of the generator the values are drawn from.
    pub seed: u64,
    /// Ranges of the drawn values.
    pub ranges: Ranges,
    /// Distinct samples drawn.
    pub pool: u16,
    /// Passes over them, in stored order.
    pub passes: u16,
}

/// Parameter values of every layer (trained or not) of `plan`.
#[must_use]
pub const fn param_values(plan: &Plan) -> usize {
    let mut n = 0usize;
    let mut k = 0;
    while k < plan.shapes.count && k < MAX_LAYERS {
        let g = &plan.shapes.layers[k];
        n += g.weights as usize + g.biases as usize;
        k += 1;
    }
    n
}

/// Values of one sample of `plan`'s model: inputs, outputs.
#[must_use]
pub const fn sample_values(plan: &Plan) -> (usize, usize) {
    if plan.shapes.count == 0 {
        return (0, 0);
    }
    (
        plan.shapes.layers[0].input.size() as usize,
        plan.shapes.output.size() as usize,
    )
}

/// All values the phase draws for `plan`'s model and a pool of `pool` samples: the initial
/// parameters, then the pool's inputs and targets. The length of the buffers [`run`] keeps
/// them in.
#[must_use]
pub const fn drawn_values(plan: &Plan, pool: u16) -> usize {
    let (inputs, outputs) = sample_values(plan);
    param_values(plan) + pool as usize * (inputs + outputs)
}

/// One drawn raw value of `fmt`: the top `frac + e + 1` bits of the generator's next 32-bit
/// output, as a signed number, so uniform over `[−2^e, 2^e)` in steps of `2^-frac`.
fn draw(rng: &mut Rng, fmt: QFormat, e: i8) -> i32 {
    let bits = i32::from(fmt.frac) + i32::from(e);
    (rng.next_u32() as i32) >> (31 - bits).clamp(0, 31)
}

/// Draws every value of the phase in its fixed order and hands each to `put` with its index
/// in the value buffer and its format: for each layer, its weights then its bias (layer
/// order; row-major as the core stores them); then for each sample of the pool, its inputs
/// and its targets. The buffer holds the parameters first, then all inputs, then all targets.
pub fn generate(t: &Throughput<'_>, mut put: impl FnMut(usize, i32, QFormat)) {
    let mut rng = Rng::new(t.seed);
    let mut at = 0usize;
    for (k, l) in t.desc.layers.iter().enumerate() {
        let Some(g) = t.plan.shapes.layers.get(k) else {
            break;
        };
        for (n, fmt, e) in [
            (g.weights, l.weight.value, t.ranges.weight),
            (g.biases, l.bias.value, t.ranges.bias),
        ] {
            for _ in 0..n {
                put(at, draw(&mut rng, fmt, e), fmt);
                at += 1;
            }
        }
    }
    let (inputs, outputs) = sample_values(t.plan);
    let pool = usize::from(t.pool);
    let targets = at + pool * inputs;
    for i in 0..pool {
        for j in 0..inputs {
            let fmt = t.desc.input_format;
            put(
                at + i * inputs + j,
                draw(&mut rng, fmt, t.ranges.input),
                fmt,
            );
        }
        for j in 0..outputs {
            let fmt = t.target_format;
            put(
                targets + i * outputs + j,
                draw(&mut rng, fmt, t.ranges.target),
                fmt,
            );
        }
    }
}

impl Throughput<'_> {
    /// Samples trained on: the pool, `passes` times.
    fn samples(&self) -> u32 {
        u32::from(self.pool) * u32::from(self.passes)
    }

    /// Checks what the phase relies on: 16-bit parameters, inputs and targets whose drawn
    /// values fit their word, a regression loss, and buffers of `values` values.
    fn check(&self, values: usize) -> Result<(), SessionError> {
        let fits = |fmt: QFormat, e: i8| {
            fmt.word == Word::I16 && (0..=15).contains(&(i32::from(fmt.frac) + i32::from(e)))
        };
        let params_ok = self.desc.layers.iter().all(|l| {
            !l.kind.has_params()
                || (fits(l.weight.value, self.ranges.weight)
                    && fits(l.bias.value, self.ranges.bias))
        });
        if !params_ok
            || !fits(self.desc.input_format, self.ranges.input)
            || !fits(self.target_format, self.ranges.target)
        {
            return Err(SessionError::Check("throughput-formats"));
        }
        if self.desc.loss != Loss::SquaredError {
            return Err(SessionError::Check("throughput-loss"));
        }
        if drawn_values(self.plan, self.pool) != values {
            return Err(SessionError::Check("throughput-buffer-size"));
        }
        Ok(())
    }
}

/// Runs the throughput phase `t` (see the [module docs](self)); `None` runs nothing (a board
/// whose RAM has no room for it).
///
/// `ARENA` and `FLOAT_ARENA` are the arenas in words (`TPUT_ARENA_WORDS`,
/// `TPUT_FLOAT_ARENA_WORDS` of `samples.rs`), `VALUES` the drawn values
/// ([`drawn_values`], `TPUT_VALUES`).
///
/// # Errors
/// [`SessionError::Check`] when the phase does not fit what it relies on, the core's errors
/// as [`SessionError::Engine`], and the payload channel's errors.
#[inline(never)]
pub fn run<P: Platform, const ARENA: usize, const FLOAT_ARENA: usize, const VALUES: usize>(
    ctx: &mut Ctx<'_, P>,
    t: Option<&Throughput<'_>>,
) -> Result<(), SessionError> {
    let Some(t) = t else { return Ok(()) };
    t.check(VALUES)?;
    let (inputs, outputs) = sample_values(t.plan);
    record::throughput(&record::ThroughputRecord {
        inputs: inputs as u32,
        outputs: outputs as u32,
        params: param_values(t.plan) as u32,
        pool: u32::from(t.pool),
        samples: t.samples(),
        macs: u32::try_from(t.plan.training_macs()).unwrap_or(u32::MAX),
        arena: t.plan.ram_bytes,
        float_arena: t.float_plan.ram_bytes,
    });

    let entry = memory::stack_depth();
    memory::repaint_free_stack();
    train_fixed::<P, ARENA, VALUES>(ctx, t, entry)?;

    let entry = memory::stack_depth();
    memory::repaint_free_stack();
    train_f32::<P, FLOAT_ARENA, VALUES>(ctx, t, entry)
}

/// Multiply-accumulates of the whole training span.
fn work(t: &Throughput<'_>, plan: &Plan) -> u32 {
    u32::try_from(plan.training_macs().saturating_mul(u64::from(t.samples()))).unwrap_or(u32::MAX)
}

/// Hands the weights and bias of every layer with parameters, cut from `init` (the drawn
/// parameters in [`generate`]'s order), to `put` with the layer's index.
fn for_each_layer_params<'v, T>(
    t: &Throughput<'_>,
    init: &'v [T],
    mut put: impl FnMut(usize, &'v [T], &'v [T]),
) {
    let mut rest = init;
    for (k, (l, g)) in t
        .desc
        .layers
        .iter()
        .zip(t.plan.shapes.layers.iter())
        .enumerate()
    {
        let (w, r) = rest
            .split_at_checked(g.weights as usize)
            .unwrap_or((&[], &[]));
        let (b, r) = r.split_at_checked(g.biases as usize).unwrap_or((&[], &[]));
        rest = r;
        if l.kind.has_params() {
            put(k, w, b);
        }
    }
}

/// The fixed-point part (not named `fixed`, which the host's code sizing takes for the crate
/// of that name). Its locals are all the memory it trains with: drawn values, arena,
/// description and trainer.
#[inline(never)]
fn train_fixed<P: Platform, const ARENA: usize, const VALUES: usize>(
    ctx: &mut Ctx<'_, P>,
    t: &Throughput<'_>,
    entry: u32,
) -> Result<(), SessionError> {
    let mut values = [0i16; VALUES];
    generate(t, |i, raw, _| {
        if let Some(v) = values.get_mut(i) {
            // `check` made every drawn value fit 16 bits.
            *v = raw as i16;
        }
    });
    let (init, pool) = values.split_at(param_values(t.plan).min(VALUES));
    let mut params = [LayerParams::NONE; MAX_LAYERS];
    for_each_layer_params(t, init, |k, w, b| {
        if let Some(p) = params.get_mut(k) {
            *p = LayerParams {
                weight: Raw::I16(w),
                bias: Raw::I16(b),
            };
        }
    });
    let (inputs, _) = sample_values(t.plan);
    let (x, y) = pool.split_at(pool.len().min(usize::from(t.pool) * inputs));
    let set = SampleSet {
        count: t.pool,
        x: Raw::I16(x),
        y: Targets::Values(Tensor {
            raw: Raw::I16(y),
            fmt: t.target_format,
        }),
    };
    let mut arena = [0u32; ARENA];
    let params = params.get(..t.desc.layers.len()).unwrap_or(&[]);
    // Used where the core's result put it, never moved out, so this frame holds it once.
    let mut made = engine::new_trainer(t.desc, t.plan, &mut arena, params);
    let trainer = match &mut made {
        Ok(tr) => tr,
        Err(e) => return Err(SessionError::Engine(*e)),
    };
    let (trained, span) = ctx.time(work(t, t.plan), || engine::train(trainer, &set, t.passes));
    trained.map_err(SessionError::Engine)?;
    let stack = memory::stack_usage_since_repaint();
    record::span("tput_train", &span);
    record::stack("tput", entry, stack.peak);
    send_trained(ctx, "tput_weights", trainer)
}

/// The float twin's part, from the same drawn values in `f32`.
#[inline(never)]
fn train_f32<P: Platform, const FLOAT_ARENA: usize, const VALUES: usize>(
    ctx: &mut Ctx<'_, P>,
    t: &Throughput<'_>,
    entry: u32,
) -> Result<(), SessionError> {
    let mut values = [0f32; VALUES];
    generate(t, |i, raw, fmt| {
        if let Some(v) = values.get_mut(i) {
            // Exact: every drawn value has at most 16 significant bits.
            *v = fmt.to_f32(raw);
        }
    });
    let (init, pool) = values.split_at(param_values(t.plan).min(VALUES));
    let mut params = [FloatParams::NONE; MAX_LAYERS];
    for_each_layer_params(t, init, |k, w, b| {
        if let Some(p) = params.get_mut(k) {
            *p = FloatParams { weight: w, bias: b };
        }
    });
    let (inputs, _) = sample_values(t.plan);
    let (x, y) = pool.split_at(pool.len().min(usize::from(t.pool) * inputs));
    let set = FloatSet {
        count: t.pool,
        x,
        y: FloatTargets::Values(y),
    };
    let mut arena = [0f32; FLOAT_ARENA];
    let params = params.get(..t.desc.layers.len()).unwrap_or(&[]);
    let mut twin =
        engine::new_twin(t.desc, t.float_plan, &mut arena, params).map_err(SessionError::Engine)?;
    let (trained, span) = ctx.time(work(t, t.float_plan), || {
        engine::train_twin(&mut twin, t.float_plan, &set, t.passes)
    });
    trained.map_err(SessionError::Engine)?;
    let stack = memory::stack_usage_since_repaint();
    record::span("tput_f32_train", &span);
    record::stack("tput_f32", entry, stack.peak);
    send_twin(
        ctx,
        "tput_f32_weights",
        t.float_plan,
        t.desc.layers.len(),
        &twin,
    )
}
