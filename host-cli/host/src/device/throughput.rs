//! The throughput phase of a board session: a larger dense model, trained on values the board
//! draws from the core's seeded generator, so that instructions per training sample and per
//! multiply-accumulate show what the engine costs when the products dominate.
//!
//! [`choose`] picks the largest model of [`CANDIDATES`] whose phase fits the board's chip with
//! [`MARGIN_BYTES`] to spare, by the core's memory plan and the measured-overhead table;
//! [`render`] writes it into the board's `samples.rs`; [`simulate`] runs the same phase on
//! the host with the same core code and the same drawn values, for the bit-for-bit check.
//!
//! The firmware side is `boards/fw/src/throughput.rs`; both draw the values in the order of
//! [`drawn_values`].

use std::fmt::Write as _;

use hone_core::float::{FloatParams, Twin};
use hone_core::layer::Tensor;
use hone_core::model::{
    LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
};
use hone_core::num::{QFormat, QScalar, Raw, Rng, RoundingPlan, Word};
use hone_core::plan::Plan;
use hone_core::session::{self as core_session, FloatSet, FloatTargets, SampleSet, Targets};
use hone_core::train::{LayerParams, Trainer};

use super::session::{float_payload, weights_payload};
use crate::chips::Chip;
use crate::export::qf;
use crate::memplan::MeasuredOverhead;

/// The models tried, largest first: inputs, hidden units, outputs.
pub const CANDIDATES: [(u16, u16, u16); 4] = [(64, 32, 8), (32, 32, 8), (32, 16, 4), (32, 8, 4)];
/// Distinct samples drawn.
pub const POOL: u16 = 8;
/// Passes over them: `POOL · PASSES` samples are trained in each arithmetic.
pub const PASSES: u16 = 4;
/// Seed of the generator the values are drawn from.
pub const SEED: u64 = 0x686F_6E65_7470_7574;
/// RAM that must stay free beside the phase, by the prediction, bytes. The prediction is an
/// upper bound: it counts the engine stack of the measured-overhead table, measured on the
/// guarded calibration, whose rollback decodes a model blob; plain training needs less, so the
/// measured margin is larger (the device test prints both).
pub const MARGIN_BYTES: u64 = 512;
/// The float twin's own RAM beside its arena and the drawn values: the `Twin<f32>` object and
/// the frames of its calls (measured at about 2 KB on every board with the calibration
/// session's twin; the device test checks the throughput phase's measurement against the
/// prediction made with this figure), bytes.
pub const TWIN_OVERHEAD_BYTES: u64 = 3072;

/// Half-ranges of the drawn values as powers of two: a value of a tensor with exponent `e` is
/// uniform over `[−2^e, 2^e)` in steps of its format (as `hone_fw::throughput::Ranges`).
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

/// The ranges of every board: weights in ±1/4, biases in ±1/16, inputs in ±1, targets in ±1/2.
pub const RANGES: Ranges = Ranges {
    weight: -2,
    bias: -4,
    input: 0,
    target: -1,
};

/// A 16-bit format with `frac` fraction bits.
const fn q16(frac: u8) -> QFormat {
    QFormat::new_unchecked(Word::I16, frac)
}

/// Format of the inputs, the activations and the targets (Q3.12).
const VALUES_FORMAT: QFormat = q16(12);
/// Format of the weights and biases (Q0.15).
const PARAM_FORMAT: QFormat = q16(15);
/// Format of the loss gradients (Q2.13).
const GRAD_FORMAT: QFormat = q16(13);
/// Fraction bits of the 32-bit gradient accumulators (Q7.24).
const ACCUM_FRAC: u8 = 24;

/// The model `inputs`–`hidden`–`outputs`: dense, ReLU, dense, every layer training; 16-bit
/// weights, activations and gradients, 32-bit accumulators.
#[must_use]
pub fn layers(hidden: u16, outputs: u16) -> [LayerDesc; 3] {
    let dense = |units| LayerDesc {
        kind: LayerKind::Dense { units },
        mode: TrainMode::Full,
        weight: ParamFormats::plain(PARAM_FORMAT, ACCUM_FRAC),
        bias: ParamFormats::plain(PARAM_FORMAT, ACCUM_FRAC),
        out: VALUES_FORMAT,
        grad: GRAD_FORMAT,
    };
    [
        dense(hidden),
        LayerDesc::simple(LayerKind::Relu, VALUES_FORMAT, GRAD_FORMAT),
        dense(outputs),
    ]
}

/// The training setup: squared error, SGD with batches of 8 at a learning rate of 2^-6, no
/// momentum, decay or clipping, nearest-even rounding.
pub const TRAIN: TrainDesc = TrainDesc {
    batch: 8,
    lr: QScalar {
        raw: 1 << 18,
        frac: 24,
    },
    momentum: QScalar::ZERO,
    weight_decay: QScalar::ZERO,
    clip: QScalar::ZERO,
    rounding: RoundingPlan::NEAREST,
    dynamic: None,
    seed: 1,
};

/// RAM of the phase predicted from the memory plan and the measured-overhead table, bytes.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct PhaseRam {
    /// Fixed point: firmware (static RAM and stack at the call) + plan arena + drawn values
    /// (`i16`) + trainer object + engine stack.
    pub fixed: u64,
    /// Float twin: firmware + `f32` arena + drawn values (`f32`) + [`TWIN_OVERHEAD_BYTES`].
    pub float: u64,
}

/// Why the throughput phase could not be set up or simulated.
#[derive(Debug, thiserror::Error)]
pub enum ThroughputError {
    /// The core does not describe or plan the model.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
    /// Training in fixed point failed.
    #[error("throughput: {0}")]
    Train(#[source] hone_core::Error),
    /// Training the float twin failed.
    #[error("throughput twin: {0}")]
    Twin(#[source] hone_core::Error),
}

/// The throughput phase of one board.
#[derive(Clone, Debug)]
pub struct ThroughputSpec {
    /// Inputs, hidden units, outputs.
    pub dims: (u16, u16, u16),
    /// The model.
    pub desc: ModelDesc,
    /// Format of the targets.
    pub target_format: QFormat,
    /// The fixed-point plan.
    pub plan: Plan,
    /// The `f32` plan.
    pub float_plan: Plan,
    /// Seed of the drawn values.
    pub seed: u64,
    /// Their ranges.
    pub ranges: Ranges,
    /// Distinct samples drawn.
    pub pool: u16,
    /// Passes over them.
    pub passes: u16,
    /// The predicted RAM.
    pub predicted: PhaseRam,
    /// RAM of the chip the prediction was checked against, bytes.
    pub ram_bytes: u64,
}

impl ThroughputSpec {
    /// The spec of the model `dims` with the constants of this module.
    ///
    /// # Errors
    /// The core's error if it does not plan the model.
    pub fn new(
        dims: (u16, u16, u16),
        o: &MeasuredOverhead,
        ram_bytes: u64,
    ) -> Result<Self, ThroughputError> {
        let (inputs, hidden, outputs) = dims;
        let desc = ModelDesc::new(
            Shape::vector(inputs),
            VALUES_FORMAT,
            &layers(hidden, outputs),
            Loss::SquaredError,
            TRAIN,
        )?;
        let plan = Plan::of(&desc)?;
        let float_plan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 4)?;
        let values = drawn_count(&plan, POOL) as u64;
        let firmware = u64::from(o.firmware_static_bytes) + u64::from(o.firmware_stack_bytes);
        let predicted = PhaseRam {
            fixed: firmware
                + u64::from(plan.ram_bytes)
                + values * 2
                + u64::from(o.trainer_bytes)
                + u64::from(o.engine_stack_bytes),
            float: firmware + u64::from(float_plan.ram_bytes) + values * 4 + TWIN_OVERHEAD_BYTES,
        };
        Ok(ThroughputSpec {
            dims,
            desc,
            target_format: VALUES_FORMAT,
            plan,
            float_plan,
            seed: SEED,
            ranges: RANGES,
            pool: POOL,
            passes: PASSES,
            predicted,
            ram_bytes,
        })
    }

    /// Whether both parts leave [`MARGIN_BYTES`] of the chip's RAM free, by the prediction.
    #[must_use]
    pub fn fits(&self) -> bool {
        self.predicted.fixed.max(self.predicted.float) + MARGIN_BYTES <= self.ram_bytes
    }

    /// The model as `64-32-8`.
    #[must_use]
    pub fn name(&self) -> String {
        let (i, h, o) = self.dims;
        format!("{i}-{h}-{o}")
    }

    /// Samples trained in each arithmetic.
    #[must_use]
    pub fn samples(&self) -> u64 {
        u64::from(self.pool) * u64::from(self.passes)
    }

    /// Values of one sample: inputs, outputs.
    #[must_use]
    pub fn sample_values(&self) -> (usize, usize) {
        (
            self.desc.input.size() as usize,
            self.plan.shapes.output.size() as usize,
        )
    }

    /// Parameter values of the model.
    #[must_use]
    pub fn param_values(&self) -> usize {
        param_count(&self.plan)
    }
}

/// What [`choose`] decided for a board.
#[derive(Clone, Debug)]
pub struct Choice {
    /// The model that fits, if one does.
    pub spec: Option<ThroughputSpec>,
    /// One line per larger candidate that did not fit, or why none was tried.
    pub notes: Vec<String>,
}

/// The largest candidate whose phase fits `chip` with the margin, by the memory plan and the
/// measured-overhead row `overhead` of the chip's core; none without a row.
///
/// # Errors
/// A message if the core does not plan a candidate.
pub fn choose(chip: &Chip, overhead: Option<&MeasuredOverhead>) -> Result<Choice, ThroughputError> {
    let Some(o) = overhead else {
        return Ok(Choice {
            spec: None,
            notes: vec![format!(
                "no measured-overhead row for the core of {}: no prediction",
                chip.id
            )],
        });
    };
    let mut notes = Vec::new();
    for dims in CANDIDATES {
        let spec = ThroughputSpec::new(dims, o, u64::from(chip.ram_bytes))?;
        if spec.fits() {
            return Ok(Choice {
                spec: Some(spec),
                notes,
            });
        }
        notes.push(format!(
            "{} does not fit {}: predicted {} B fixed point, {} B f32, of {} B less {MARGIN_BYTES} B margin",
            spec.name(),
            chip.id,
            spec.predicted.fixed,
            spec.predicted.float,
            spec.ram_bytes
        ));
    }
    Ok(Choice { spec: None, notes })
}

fn param_count(plan: &Plan) -> usize {
    plan.shapes.layers[..plan.count()]
        .iter()
        .map(|g| g.weights as usize + g.biases as usize)
        .sum()
}

/// Values drawn for `plan`'s model and a pool of `pool` samples (as
/// `hone_fw::throughput::drawn_values`).
fn drawn_count(plan: &Plan, pool: u16) -> usize {
    let inputs = plan.shapes.layers[0].input.size() as usize;
    let outputs = plan.shapes.output.size() as usize;
    param_count(plan) + usize::from(pool) * (inputs + outputs)
}

/// Every drawn value with its format, in buffer order: the parameters layer by layer (weights,
/// then bias), then the pool's inputs, then its targets. They are drawn in the order of
/// `hone_fw::throughput::generate`: the parameters, then sample by sample its inputs and its
/// targets; each value is the top `frac + e + 1` bits of one 32-bit output of the core's
/// generator seeded with `spec.seed`, as a signed number.
#[must_use]
pub fn drawn_values(spec: &ThroughputSpec) -> Vec<(i32, QFormat)> {
    let mut rng = Rng::new(spec.seed);
    let mut draw = |fmt: QFormat, e: i8| -> (i32, QFormat) {
        let bits = i32::from(fmt.frac) + i32::from(e);
        ((rng.next_u32() as i32) >> (31 - bits).clamp(0, 31), fmt)
    };
    let mut out = Vec::new();
    for (k, l) in spec.desc.layers.iter().enumerate() {
        let g = spec.plan.shapes.layers[k];
        for _ in 0..g.weights {
            out.push(draw(l.weight.value, spec.ranges.weight));
        }
        for _ in 0..g.biases {
            out.push(draw(l.bias.value, spec.ranges.bias));
        }
    }
    let (inputs, outputs) = spec.sample_values();
    let mut x = Vec::new();
    let mut y = Vec::new();
    for _ in 0..spec.pool {
        for _ in 0..inputs {
            x.push(draw(spec.desc.input_format, spec.ranges.input));
        }
        for _ in 0..outputs {
            y.push(draw(spec.target_format, spec.ranges.target));
        }
    }
    out.extend(x);
    out.extend(y);
    out
}

/// The drawn parameters as a weights payload (in payload order, `i16` little-endian): where
/// fixed-point training starts.
#[must_use]
pub fn initial_weights(spec: &ThroughputSpec) -> Vec<u8> {
    drawn_values(spec)
        .iter()
        .take(spec.param_values())
        .flat_map(|&(v, _)| (v as i16).to_le_bytes())
        .collect()
}

/// The phase on the host.
#[derive(Clone, Debug)]
pub struct ThroughputOutcome {
    /// Trained tensors in fixed point, in payload order.
    pub weights: Vec<u8>,
    /// Trained tensors of the `f32` twin, in payload order.
    pub float_weights: Vec<u8>,
    /// Samples trained in each arithmetic.
    pub trained: u64,
}

/// Runs the phase as the firmware does: a fresh trainer from the drawn parameters trains the
/// pool `passes` times in stored order, then flushes; then the `f32` twin from the same values.
///
/// # Errors
/// A message for any error of the core.
pub fn simulate(spec: &ThroughputSpec) -> Result<ThroughputOutcome, ThroughputError> {
    let desc = &spec.desc;
    let values = drawn_values(spec);
    let n_params = spec.param_values();
    let (inputs, _) = spec.sample_values();
    let pool = usize::from(spec.pool);

    let ints: Vec<i16> = values.iter().map(|&(v, _)| v as i16).collect();
    let (init, samples) = ints.split_at(n_params);
    let (xs, ys) = samples.split_at(pool * inputs);
    let mut views = Vec::new();
    let mut rest = init;
    for (k, l) in desc.layers.iter().enumerate() {
        let g = spec.plan.shapes.layers[k];
        let (w, r) = rest.split_at(g.weights as usize);
        let (b, r) = r.split_at(g.biases as usize);
        rest = r;
        views.push(if l.kind.has_params() {
            LayerParams {
                weight: Raw::I16(w),
                bias: Raw::I16(b),
            }
        } else {
            LayerParams::NONE
        });
    }
    let mut arena = vec![0u32; spec.plan.ram_words()];
    let mut t = Trainer::new(desc, &spec.plan, &mut arena, &views)?;
    let set = SampleSet {
        count: spec.pool,
        x: Raw::I16(xs),
        y: Targets::Values(Tensor {
            raw: Raw::I16(ys),
            fmt: spec.target_format,
        }),
    };
    let trained =
        u64::from(core_session::train(&mut t, &set, spec.passes).map_err(ThroughputError::Train)?);
    let weights = weights_payload(&t);

    let reals: Vec<f32> = values.iter().map(|&(v, fmt)| fmt.to_f32(v)).collect();
    let (init, samples) = reals.split_at(n_params);
    let (xs, ys) = samples.split_at(pool * inputs);
    let mut views = Vec::new();
    let mut rest = init;
    for (k, l) in desc.layers.iter().enumerate() {
        let g = spec.float_plan.shapes.layers[k];
        let (w, r) = rest.split_at(g.weights as usize);
        let (b, r) = r.split_at(g.biases as usize);
        rest = r;
        views.push(if l.kind.has_params() {
            FloatParams { weight: w, bias: b }
        } else {
            FloatParams::NONE
        });
    }
    let mut arena = vec![0f32; spec.float_plan.ram_words()];
    let mut twin =
        Twin::new(desc, &spec.float_plan, &mut arena, &views).map_err(ThroughputError::Twin)?;
    let set = FloatSet {
        count: spec.pool,
        x: xs,
        y: FloatTargets::Values(ys),
    };
    core_session::train_twin(&mut twin, &spec.float_plan, &set, spec.passes)
        .map_err(ThroughputError::Twin)?;
    let float_weights = float_payload(desc, &spec.float_plan, &twin);
    Ok(ThroughputOutcome {
        weights,
        float_weights,
        trained,
    })
}

/// A Rust expression for a parameter's formats.
fn param_formats(p: &ParamFormats) -> String {
    let master = p
        .master
        .map_or_else(|| "None".to_owned(), |m| format!("Some({})", qf(m)));
    format!(
        "hone_core::model::ParamFormats {{ value: {}, master: {master}, accum: {} }}",
        qf(p.value),
        qf(p.accum)
    )
}

/// A Rust expression for a scalar.
fn scalar(s: QScalar) -> String {
    format!(
        "hone_core::num::QScalar {{ raw: {}, frac: {} }}",
        s.raw, s.frac
    )
}

/// The phase's part of `samples.rs`: the model (`TPUT_*`), the sizes of its buffers and the
/// `THROUGHPUT` value, or `None` and zero sizes for a board without the phase.
#[must_use]
pub fn render(choice: &Choice) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "\n// The throughput phase (hone_fw::throughput): a larger model trained on values the board\n\
         // draws from the core's generator, chosen with the memory plan for this board's RAM."
    );
    for n in &choice.notes {
        let _ = writeln!(out, "// {n}.");
    }
    let Some(s) = &choice.spec else {
        let _ = writeln!(
            out,
            "pub const TPUT_ARENA_WORDS: usize = 0;\npub const TPUT_FLOAT_ARENA_WORDS: usize = 0;\n\
             pub const TPUT_VALUES: usize = 0;\n\
             pub static THROUGHPUT: Option<hone_fw::throughput::Throughput<'static>> = None;"
        );
        return out;
    };
    let d = &s.desc;
    let _ = writeln!(
        out,
        "// Model {}: predicted {} B in fixed point, {} B in f32, of {} B.",
        s.name(),
        s.predicted.fixed,
        s.predicted.float,
        s.ram_bytes
    );
    let _ = writeln!(
        out,
        "pub const TPUT_INPUT: hone_core::model::Shape = hone_core::model::Shape {{ channels: {}, len: {} }};",
        d.input.channels, d.input.len
    );
    let _ = writeln!(
        out,
        "pub const TPUT_INPUT_FORMAT: hone_core::num::QFormat = {};",
        qf(d.input_format)
    );
    let t = &d.train;
    let dynamic = match t.dynamic {
        Some(r) => format!(
            "Some(hone_core::model::DynamicRule {{ max_rate_ppm: {}, interval: {} }})",
            r.max_rate_ppm, r.interval
        ),
        None => "None".to_owned(),
    };
    let _ = writeln!(
        out,
        "pub const TPUT_TRAIN: hone_core::model::TrainDesc = hone_core::model::TrainDesc {{\n    \
         batch: {},\n    lr: {},\n    momentum: {},\n    weight_decay: {},\n    clip: {},\n    \
         rounding: hone_core::num::RoundingPlan {{ activations: hone_core::num::Rounding::{:?}, \
         gradients: hone_core::num::Rounding::{:?}, updates: hone_core::num::Rounding::{:?} }},\n    \
         dynamic: {dynamic},\n    seed: {},\n}};",
        t.batch,
        scalar(t.lr),
        scalar(t.momentum),
        scalar(t.weight_decay),
        scalar(t.clip),
        t.rounding.activations,
        t.rounding.gradients,
        t.rounding.updates,
        t.seed
    );
    let _ = writeln!(
        out,
        "pub const TPUT_LAYERS: [hone_core::model::LayerDesc; {}] = [",
        d.layers.len()
    );
    for l in &d.layers {
        let _ = writeln!(
            out,
            "    hone_core::model::LayerDesc {{\n        kind: hone_core::model::LayerKind::{:?},\n        \
             mode: hone_core::model::TrainMode::{:?},\n        weight: {},\n        bias: {},\n        \
             out: {},\n        grad: {},\n    }},",
            l.kind,
            l.mode,
            param_formats(&l.weight),
            param_formats(&l.bias),
            qf(l.out),
            qf(l.grad)
        );
    }
    let _ = writeln!(out, "];");
    let loss = format!("hone_core::model::Loss::{:?}", d.loss);
    let _ = writeln!(
        out,
        "pub const TPUT_PLAN: hone_core::plan::Plan =\n    \
         match hone_core::plan::Plan::new(TPUT_INPUT, &TPUT_LAYERS, {loss}, &TPUT_TRAIN) {{\n        \
         Ok(p) => p,\n        Err(_) => panic!(\"the throughput model does not plan\"),\n    }};\n\
         pub const TPUT_FLOAT_PLAN: hone_core::plan::Plan =\n    \
         match hone_core::plan::Plan::new_float(TPUT_INPUT, &TPUT_LAYERS, {loss}, &TPUT_TRAIN, 4) {{\n        \
         Ok(p) => p,\n        Err(_) => panic!(\"the throughput model has no float plan\"),\n    }};\n\
         pub static TPUT_DESC: hone_core::model::ModelDesc = match hone_core::model::ModelDesc::check_planned(\
         TPUT_INPUT, TPUT_INPUT_FORMAT, &TPUT_LAYERS, {loss}, &TPUT_TRAIN, &TPUT_PLAN) {{\n        \
         Ok(()) => hone_core::model::ModelDesc::from_array(TPUT_INPUT, TPUT_INPUT_FORMAT, TPUT_LAYERS, {loss}, TPUT_TRAIN),\n        \
         Err(_) => panic!(\"the throughput model does not match its plan\"),\n    }};\n\
         pub const TPUT_ARENA_WORDS: usize = TPUT_PLAN.ram_words();\n\
         pub const TPUT_FLOAT_ARENA_WORDS: usize = TPUT_FLOAT_PLAN.ram_words();\n\
         /// Distinct samples drawn, and passes over them.\n\
         pub const TPUT_POOL: u16 = {};\npub const TPUT_PASSES: u16 = {};\n\
         pub const TPUT_VALUES: usize = hone_fw::throughput::drawn_values(&TPUT_PLAN, TPUT_POOL);",
        s.pool, s.passes
    );
    let r = s.ranges;
    let _ = writeln!(
        out,
        "\npub static THROUGHPUT: Option<hone_fw::throughput::Throughput<'static>> = \
         Some(hone_fw::throughput::Throughput {{\n    desc: &TPUT_DESC,\n    target_format: {},\n    plan: &TPUT_PLAN,\n    \
         float_plan: &TPUT_FLOAT_PLAN,\n    seed: {:#x},\n    \
         ranges: hone_fw::throughput::Ranges {{ weight: {}, bias: {}, input: {}, target: {} }},\n    \
         pool: TPUT_POOL,\n    passes: TPUT_PASSES,\n}});",
        qf(s.target_format),
        s.seed,
        r.weight,
        r.bias,
        r.input,
        r.target
    );
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn drawn_values_stay_in_their_ranges_and_formats() {
        let chip = crate::chips::find("lm3s6965").expect("chip in the table");
        let o = crate::memplan::measured_row(chip).expect("a row");
        let spec = ThroughputSpec::new((32, 16, 4), o, u64::from(chip.ram_bytes)).expect("plans");
        let values = drawn_values(&spec);
        let (inputs, outputs) = spec.sample_values();
        assert_eq!(
            values.len(),
            spec.param_values() + usize::from(POOL) * (inputs + outputs)
        );
        for &(v, fmt) in &values {
            let half = fmt.to_f64(v).abs();
            assert!(half <= 1.0, "{v} in {fmt}");
        }
        // Weights first: within ±1/4, and not all equal.
        let w: Vec<f64> = values[..32 * 16]
            .iter()
            .map(|&(v, f)| f.to_f64(v))
            .collect();
        assert!(w.iter().all(|v| (-0.25..0.25).contains(v)));
        assert!(w.iter().any(|&v| v != w[0]));
        // The same seed draws the same values.
        assert_eq!(values, drawn_values(&spec));
    }

    #[test]
    fn the_largest_fitting_candidate_is_chosen() {
        let big = crate::chips::find("lm3s6965").expect("chip in the table");
        let c = choose(big, crate::memplan::measured_row(big)).expect("plans");
        assert_eq!(
            c.spec.as_ref().map(ThroughputSpec::name).as_deref(),
            Some("64-32-8")
        );
        assert!(c.notes.is_empty());
        let none = choose(big, None).expect("no row");
        assert!(none.spec.is_none() && !none.notes.is_empty());
    }

    #[test]
    fn training_macs_count_every_product() {
        let chip = crate::chips::find("lm3s6965").expect("chip in the table");
        let o = crate::memplan::measured_row(chip).expect("a row");
        let s = ThroughputSpec::new((64, 32, 8), o, u64::from(chip.ram_bytes)).expect("plans");
        // Forward 64·32 + 32·8; weight gradients the same; input gradient of the second layer.
        assert_eq!(s.plan.training_macs(), 2 * (2048 + 256) + 256);
    }
}
