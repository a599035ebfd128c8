//! "Will it fit?": the memory plan of a model against a chip's RAM and flash.
//!
//! Every figure comes from the core's const memory plan ([`Plan::of`]): the buffers the
//! trainer needs in RAM (its arena) and the factory parameters in flash. To those the report
//! adds what the caller states:
//!
//! - a **reserve**: RAM and flash the rest of the firmware already takes;
//! - the **engine overhead**: the engine's code size, the trainer object's size and its stack
//!   peak. They depend on the target and the compiler and are measured on the QEMU boards
//!   ([`MEASURED_OVERHEADS`]). [`engine_overhead`] gives the measured row of a chip's core, or,
//!   for a core without one, an estimate: the largest figure of each kind over the measured
//!   cores ([`estimated_overhead`]), marked as such. [`plan_report`] takes the overhead as
//!   given, prints its source beside it, and counts nothing in its place when none is given.
//!
//! The advice lists concrete alternatives (freeze a layer, train only its bias, narrower
//! words, no master copies, no momentum, fewer hidden units, another batch size). Each one is
//! a modified model description planned again by the core, never an estimate; its saving is
//! the difference of the two plans.

use std::fmt::Write as _;

use hone_core::model::{LayerDesc, LayerKind, ModelDesc, TrainMode};
use hone_core::num::{QFormat, QScalar, Word};
use hone_core::plan::{Plan, Slot};
use serde::Serialize;

use crate::chips::{Chip, CoreKind, Fpu};

/// Why a plan report could not be made.
#[derive(Debug, thiserror::Error)]
pub enum MemplanError {
    /// The core rejected the model description.
    #[error("the model does not plan: {0}")]
    Plan(hone_core::Error),
}

/// Why a size such as `20k` was not understood.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum SizeError {
    /// Nothing was given.
    #[error("empty size: give bytes as a number with an optional unit, such as 20480, 20k or 1M")]
    Empty,
    /// The number part is not a decimal number.
    #[error("size `{input}`: `{number}` is not a decimal number (write 20480, 20k or 1.5M)")]
    NotANumber {
        /// The whole text given.
        input: String,
        /// The part read as the number.
        number: String,
    },
    /// The unit is not one of B, k, KB, KiB, M, MB, MiB.
    #[error(
        "size `{input}`: unknown unit `{unit}`; use B, k/KB/KiB (1024 B) or M/MB/MiB (1024 KiB)"
    )]
    UnknownUnit {
        /// The whole text given.
        input: String,
        /// The unit found.
        unit: String,
    },
    /// The size is not a whole number of bytes (for example `1.3k`).
    #[error("size `{input}` is not a whole number of bytes")]
    Fractional {
        /// The whole text given.
        input: String,
    },
    /// The size does not fit 32 bits.
    #[error("size `{input}` is more than 4 GiB − 1 B, the largest size the planner counts")]
    TooLarge {
        /// The whole text given.
        input: String,
    },
}

/// Parses a memory size: a decimal number with an optional unit. `k`, `K`, `KB` and `KiB`
/// mean 1024 bytes, `M`, `MB` and `MiB` mean 1024 × 1024 bytes (as vendors mean KB and MB for
/// memory sizes); `B` or no unit means bytes. Units are case-insensitive, `_` may group
/// digits, and a fraction is allowed when the result is a whole number of bytes (`0.5k`).
///
/// # Errors
/// A [`SizeError`] naming the text and what is wrong with it.
pub fn parse_size(text: &str) -> Result<u32, SizeError> {
    let input = text.trim();
    if input.is_empty() {
        return Err(SizeError::Empty);
    }
    let split = input
        .find(|c: char| !(c.is_ascii_digit() || c == '.' || c == '_'))
        .unwrap_or(input.len());
    let (number, unit) = input.split_at(split);
    let unit = unit.trim();
    let not_a_number = || SizeError::NotANumber {
        input: input.to_owned(),
        number: number.to_owned(),
    };
    let digits: String = number.chars().filter(|&c| c != '_').collect();
    let (int_part, frac_part) = match digits.split_once('.') {
        Some((i, f)) => (i, f),
        None => (digits.as_str(), ""),
    };
    let all_digits = |s: &str| s.chars().all(|c| c.is_ascii_digit());
    if (int_part.is_empty() && frac_part.is_empty())
        || !all_digits(int_part)
        || !all_digits(frac_part)
        || number.starts_with('_')
        || number.ends_with('_')
    {
        return Err(not_a_number());
    }
    let multiplier: u128 = match unit.to_ascii_lowercase().as_str() {
        "" | "b" => 1,
        "k" | "kb" | "kib" => 1024,
        "m" | "mb" | "mib" => 1024 * 1024,
        _ => {
            return Err(SizeError::UnknownUnit {
                input: input.to_owned(),
                unit: unit.to_owned(),
            })
        }
    };
    let too_large = || SizeError::TooLarge {
        input: input.to_owned(),
    };
    let int_digits = int_part.trim_start_matches('0');
    let frac_digits = frac_part.trim_end_matches('0');
    // 20 integer digits already exceed 2^32 by far; 18 fraction digits keep 10^d in u128.
    // The arithmetic below is checked as well: 20 + 18 digits times a MiB can pass u128.
    if int_digits.len() > 20 {
        return Err(too_large());
    }
    if frac_digits.len() > 18 {
        return Err(SizeError::Fractional {
            input: input.to_owned(),
        });
    }
    let scale = 10u128.pow(frac_digits.len() as u32);
    let int_value: u128 = if int_digits.is_empty() {
        0
    } else {
        int_digits.parse().map_err(|_| not_a_number())?
    };
    let frac_value: u128 = if frac_digits.is_empty() {
        0
    } else {
        frac_digits.parse().map_err(|_| not_a_number())?
    };
    let scaled = int_value
        .checked_mul(scale)
        .and_then(|v| v.checked_add(frac_value))
        .and_then(|v| v.checked_mul(multiplier))
        .ok_or_else(too_large)?;
    if !scaled.is_multiple_of(scale) {
        return Err(SizeError::Fractional {
            input: input.to_owned(),
        });
    }
    u32::try_from(scaled / scale).map_err(|_| too_large())
}

/// The memory available: a chip from the table, or sizes the user gives.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Budget {
    /// What the budget is: the chip's name and identifier, or "custom budget".
    pub name: String,
    /// RAM available, bytes.
    pub ram_bytes: u32,
    /// Flash available, bytes.
    pub flash_bytes: u32,
    /// Where the numbers come from.
    pub source: String,
    /// Caveats about the numbers; empty when there are none.
    pub note: String,
}

impl Budget {
    /// The RAM and flash of a chip from the built-in table.
    pub fn chip(chip: &Chip) -> Budget {
        Budget {
            name: format!("{} ({})", chip.name, chip.id),
            ram_bytes: chip.ram_bytes,
            flash_bytes: chip.flash_bytes,
            source: chip.source.to_owned(),
            note: chip.note.to_owned(),
        }
    }

    /// Sizes stated by the user.
    pub fn custom(ram_bytes: u32, flash_bytes: u32) -> Budget {
        Budget {
            name: "custom budget".to_owned(),
            ram_bytes,
            flash_bytes,
            source: "stated by the user".to_owned(),
            note: String::new(),
        }
    }
}

/// RAM and flash the rest of the firmware already uses.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Reserve {
    /// RAM taken by the rest of the firmware, bytes.
    pub ram_bytes: u32,
    /// Flash taken by the rest of the firmware, bytes.
    pub flash_bytes: u32,
}

/// How the figures of an [`EngineOverhead`] were obtained.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum OverheadBasis {
    /// Measured for this core (or stated by the caller from a measurement).
    Measured,
    /// Not measured for this core: the largest figure of each kind measured on other cores.
    Estimated,
}

/// What the engine itself costs on the target, measured elsewhere (for example from a board
/// build's section sizes and its stack watermark), or estimated from such measurements.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct EngineOverhead {
    /// Whether the figures were measured for this core or estimated from other cores.
    pub basis: OverheadBasis,
    /// Flash taken by the engine's code and constant tables, bytes.
    pub code_flash: u32,
    /// RAM taken by the trainer object outside the arena, bytes.
    pub state_ram: u32,
    /// Deepest stack use of a training step, bytes.
    pub stack: u32,
    /// Where the three figures come from; printed beside them.
    pub source: String,
}

/// A drift cost of an alternative, supplied by the caller where it is cheap to compute (for
/// example the change of the held-out loss after a short calibration run).
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct DriftCost {
    /// What was measured, e.g. "held-out loss change".
    pub what: String,
    /// The value.
    pub value: f64,
    /// Its unit; empty for a plain number.
    pub unit: String,
}

/// The kind of a change the advice tries.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ChangeKind {
    /// Freeze a layer: its parameters stay in flash and it trains nothing.
    Freeze,
    /// Train only a layer's bias.
    BiasOnly,
    /// Store a layer's weights one word narrower (i16 → i8, i32 → i16).
    NarrowWeights,
    /// Gradient accumulators (and momentum) of a layer in i16 instead of i32.
    NarrowAccumulators,
    /// No master copies of weights and biases.
    NoMaster,
    /// No momentum buffers (momentum zero).
    NoMomentum,
    /// Halve the units of a hidden dense layer.
    FewerUnits,
    /// Another mini-batch size.
    Batch,
}

/// One concrete change to a model description.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Change {
    /// Freeze layer `k`.
    Freeze(usize),
    /// Train only the bias of layer `k`.
    BiasOnly(usize),
    /// Weights of layer `k` one word narrower, keeping the integer bits where possible.
    NarrowWeights(usize),
    /// Accumulators of layer `k` in i16 instead of i32, keeping the integer bits where
    /// possible.
    NarrowAccumulators(usize),
    /// Drop every master copy.
    NoMaster,
    /// Set the momentum to zero.
    NoMomentum,
    /// Halve the units of hidden dense layer `k`.
    HalveUnits(usize),
    /// Use mini-batches of this many samples.
    Batch(u16),
}

/// A format one word narrower with the same integer bits where the fraction bits allow.
fn narrower(q: QFormat, word: Word) -> QFormat {
    let drop = (q.word.bits() - word.bits()) as u8;
    QFormat::new_unchecked(word, q.frac.saturating_sub(drop))
}

fn narrower_word(w: Word) -> Option<Word> {
    match w {
        Word::I32 => Some(Word::I16),
        Word::I16 => Some(Word::I8),
        Word::I8 => None,
    }
}

impl Change {
    /// The kind of the change.
    pub fn kind(&self) -> ChangeKind {
        match self {
            Change::Freeze(_) => ChangeKind::Freeze,
            Change::BiasOnly(_) => ChangeKind::BiasOnly,
            Change::NarrowWeights(_) => ChangeKind::NarrowWeights,
            Change::NarrowAccumulators(_) => ChangeKind::NarrowAccumulators,
            Change::NoMaster => ChangeKind::NoMaster,
            Change::NoMomentum => ChangeKind::NoMomentum,
            Change::HalveUnits(_) => ChangeKind::FewerUnits,
            Change::Batch(_) => ChangeKind::Batch,
        }
    }

    /// The layer the change touches, if it touches one.
    pub fn layer(&self) -> Option<usize> {
        match *self {
            Change::Freeze(k)
            | Change::BiasOnly(k)
            | Change::NarrowWeights(k)
            | Change::NarrowAccumulators(k)
            | Change::HalveUnits(k) => Some(k),
            Change::NoMaster | Change::NoMomentum | Change::Batch(_) => None,
        }
    }

    /// The description with the change made, and a sentence saying what changed; `None` if
    /// the change does not apply (the layer has no parameters, is already frozen, has no
    /// narrower word, the model has no master copies, ...).
    pub fn apply(&self, desc: &ModelDesc) -> Option<(ModelDesc, String)> {
        let mut d = desc.clone();
        let text = match *self {
            Change::Freeze(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() || l.mode == TrainMode::Frozen {
                    return None;
                }
                l.mode = TrainMode::Frozen;
                format!("freeze layer {k} ({})", kind_label(&l.kind))
            }
            Change::BiasOnly(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() || !l.mode.trains_weight() {
                    return None;
                }
                l.mode = TrainMode::BiasOnly;
                format!("train only the bias of layer {k} ({})", kind_label(&l.kind))
            }
            Change::NarrowWeights(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() {
                    return None;
                }
                let from = l.weight.value;
                let to = narrower(from, narrower_word(from.word)?);
                l.weight.value = to;
                format!("layer {k} weights {} → {}", from, to)
            }
            Change::NarrowAccumulators(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() {
                    return None;
                }
                let (w, b) = (l.weight.accum, l.bias.accum);
                if w.word != Word::I32 && b.word != Word::I32 {
                    return None;
                }
                if w.word == Word::I32 {
                    l.weight.accum = narrower(w, Word::I16);
                }
                if b.word == Word::I32 {
                    l.bias.accum = narrower(b, Word::I16);
                }
                format!(
                    "layer {k} accumulators i32 → i16 (weights {}, bias {})",
                    q_short(l.weight.accum),
                    q_short(l.bias.accum)
                )
            }
            Change::NoMaster => {
                let mut any = false;
                for l in d.layers.iter_mut().filter(|l| l.kind.has_params()) {
                    any |= l.weight.master.is_some() || l.bias.master.is_some();
                    l.weight.master = None;
                    l.bias.master = None;
                }
                if !any {
                    return None;
                }
                "no master copies (updates go straight into the weights)".to_owned()
            }
            Change::NoMomentum => {
                if d.train.momentum.is_zero() {
                    return None;
                }
                let was = d.train.momentum.to_f64();
                d.train.momentum = QScalar::ZERO;
                format!("no momentum (was {was:.4})")
            }
            Change::HalveUnits(k) => {
                let is_hidden = d
                    .layers
                    .iter()
                    .skip(k + 1)
                    .any(|l| matches!(l.kind, LayerKind::Dense { .. }));
                let l = d.layers.get_mut(k)?;
                let LayerKind::Dense { units } = l.kind else {
                    return None;
                };
                if !is_hidden || units < 2 {
                    return None;
                }
                let new = units / 2;
                l.kind = LayerKind::Dense { units: new };
                if d.output().ok()? != desc.output().ok()? {
                    return None;
                }
                format!("layer {k} dense: {units} → {new} units")
            }
            Change::Batch(b) => {
                if b == 0 || b == d.train.batch {
                    return None;
                }
                let was = d.train.batch;
                d.train.batch = b;
                format!("batch of {b} samples instead of {was}")
            }
        };
        Some((d, text))
    }
}

/// Which changes to list even when they save nothing, and which batch size to try.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct AdviceOptions {
    /// Kinds the user asked about: listed even when they save no byte.
    pub always_show: Vec<ChangeKind>,
    /// A batch size to try. Giving one counts as asking about it. Without one, a model
    /// trained with batches larger than one is also tried with batch 1.
    pub batch: Option<u16>,
}

/// The role of a buffer.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum BufferRole {
    /// Trainable weights in RAM (value format).
    TrainableWeights,
    /// Trainable bias in RAM (value format).
    TrainableBias,
    /// Master copy of the weights.
    MasterWeights,
    /// Master copy of the bias.
    MasterBias,
    /// Weight-gradient accumulator.
    WeightAccumulator,
    /// Bias-gradient accumulator.
    BiasAccumulator,
    /// Weight momentum.
    WeightMomentum,
    /// Bias momentum.
    BiasMomentum,
    /// A layer output kept for backward.
    KeptActivation,
    /// Forward scratch for outputs of even-numbered layers that are not kept.
    ForwardScratchEven,
    /// Forward scratch for outputs of odd-numbered layers that are not kept.
    ForwardScratchOdd,
    /// Backward scratch for the loss gradients of even-numbered layers.
    BackwardScratchEven,
    /// Backward scratch for the loss gradients of odd-numbered layers.
    BackwardScratchOdd,
    /// The trainer's own state: per layer its live fraction bits, statistics and the marks of
    /// the dynamic-fixed-point interval (`Plan::state`).
    TrainerState,
    /// Factory weights in flash.
    FactoryWeights,
    /// Factory bias in flash.
    FactoryBias,
}

impl BufferRole {
    /// A short label for tables.
    pub fn label(self) -> &'static str {
        match self {
            BufferRole::TrainableWeights => "weights",
            BufferRole::TrainableBias => "bias",
            BufferRole::MasterWeights => "master weights",
            BufferRole::MasterBias => "master bias",
            BufferRole::WeightAccumulator => "weight grad accum",
            BufferRole::BiasAccumulator => "bias grad accum",
            BufferRole::WeightMomentum => "weight momentum",
            BufferRole::BiasMomentum => "bias momentum",
            BufferRole::KeptActivation => "kept activation",
            BufferRole::ForwardScratchEven => "fwd scratch, even",
            BufferRole::ForwardScratchOdd => "fwd scratch, odd",
            BufferRole::BackwardScratchEven => "bwd scratch, even",
            BufferRole::BackwardScratchOdd => "bwd scratch, odd",
            BufferRole::TrainerState => "trainer state",
            BufferRole::FactoryWeights => "factory weights",
            BufferRole::FactoryBias => "factory bias",
        }
    }
}

/// Where a buffer lives.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Memory {
    /// In the training arena in RAM.
    Ram,
    /// In flash, as `&'static` data.
    Flash,
}

/// One buffer of the plan.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Buffer {
    /// Layer index; `None` for the shared scratch buffers.
    pub layer: Option<usize>,
    /// The layer's kind, e.g. "dense 8"; `None` for scratch.
    pub layer_kind: Option<String>,
    /// What the buffer is for.
    pub role: BufferRole,
    /// Number of values.
    pub elems: u32,
    /// Storage word, e.g. "i16".
    pub word: String,
    /// Q-format, e.g. "Q3.12 (i16)"; `None` for scratch, which serves layers of several
    /// formats.
    pub format: Option<String>,
    /// Bytes the buffer takes, padded to a multiple of 4.
    pub bytes: u32,
    /// Bytes of the values alone, without padding.
    pub data_bytes: u32,
    /// RAM or flash.
    pub memory: Memory,
    /// Offset in the arena, bytes (RAM buffers only).
    pub offset: Option<u32>,
    /// Layers whose output or gradient a scratch buffer holds (empty otherwise).
    pub serves_layers: Vec<usize>,
}

/// The arena split by what the bytes are for, from the core's breakdown.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct RamCategories {
    /// Trainable weights and biases.
    pub parameters_bytes: u32,
    /// Master copies.
    pub master_bytes: u32,
    /// Gradient accumulators.
    pub accumulators_bytes: u32,
    /// Momentum buffers.
    pub momentum_bytes: u32,
    /// Activations kept for backward.
    pub kept_activations_bytes: u32,
    /// Forward and backward scratch.
    pub scratch_bytes: u32,
}

/// RAM use against the budget.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RamUse {
    /// The training arena (all RAM buffers), bytes.
    pub arena_bytes: u32,
    /// The trainer object outside the arena; `None` when not measured (not counted).
    pub engine_state_bytes: Option<u32>,
    /// Stack peak of a training step; `None` when not measured (not counted).
    pub stack_bytes: Option<u32>,
    /// RAM of the rest of the firmware.
    pub reserve_bytes: u32,
    /// Sum of the above.
    pub total_bytes: u64,
    /// RAM of the budget.
    pub budget_bytes: u32,
    /// Budget minus total: positive is spare, negative is short.
    pub spare_bytes: i64,
    /// Spare as a percentage of the budget; `None` for a budget of zero.
    pub spare_percent: Option<f64>,
    /// Whether the total is within the budget.
    pub fits: bool,
}

/// Flash use against the budget.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FlashUse {
    /// Factory parameters (all flash buffers), bytes.
    pub parameters_bytes: u32,
    /// The engine's code; `None` when not measured (not counted).
    pub engine_code_bytes: Option<u32>,
    /// Flash of the rest of the firmware.
    pub reserve_bytes: u32,
    /// Sum of the above.
    pub total_bytes: u64,
    /// Flash of the budget.
    pub budget_bytes: u32,
    /// Budget minus total: positive is spare, negative is short.
    pub spare_bytes: i64,
    /// Spare as a percentage of the budget; `None` for a budget of zero.
    pub spare_percent: Option<f64>,
    /// Whether the total is within the budget.
    pub fits: bool,
}

/// One alternative of the advice, re-planned by the core.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Alternative {
    /// The kind of change.
    pub kind: ChangeKind,
    /// The layer it touches, if any.
    pub layer: Option<usize>,
    /// What changes, in words, with the new formats or sizes.
    pub change: String,
    /// RAM bytes saved (arena of the current plan minus arena of the changed one).
    pub ram_saved_bytes: i64,
    /// Flash bytes saved.
    pub flash_saved_bytes: i64,
    /// Arena bytes of the changed plan.
    pub new_arena_bytes: u32,
    /// Flash parameter bytes of the changed plan.
    pub new_flash_parameters_bytes: u32,
    /// RAM left (negative: short) with this change alone.
    pub ram_spare_bytes: i64,
    /// Flash left (negative: short) with this change alone.
    pub flash_spare_bytes: i64,
    /// Whether this change alone makes the model fit.
    pub fits_alone: bool,
    /// The caller's drift cost, when it gave one and could compute it.
    pub drift: Option<DriftCost>,
    /// Why the caller could not compute the drift cost (for example a changed layer shape
    /// that needs a retrained float model); `None` when it did, or was not asked.
    pub drift_not_computed: Option<String>,
}

/// One change of a [`Combination`].
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct CombinedChange {
    /// The kind of change.
    pub kind: ChangeKind,
    /// The layer it touches, if any.
    pub layer: Option<usize>,
    /// What changes, in words.
    pub change: String,
}

/// Several changes applied one after another until the model fits.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Combination {
    /// The changes kept, in the order applied.
    pub changes: Vec<CombinedChange>,
    /// RAM bytes saved by all of them together.
    pub ram_saved_bytes: i64,
    /// Flash bytes saved by all of them together.
    pub flash_saved_bytes: i64,
    /// RAM left (negative: short) with all of them.
    pub ram_spare_bytes: i64,
    /// Flash left (negative: short) with all of them.
    pub flash_spare_bytes: i64,
    /// Whether the model fits with all of them.
    pub fits: bool,
    /// The caller's drift cost of the combined model, when it gave one and could compute it.
    pub drift: Option<DriftCost>,
    /// Why the caller could not compute the drift cost of the combined model.
    pub drift_not_computed: Option<String>,
}

/// A summary of the model planned.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct ModelSummary {
    /// Number of layers.
    pub layers: usize,
    /// Values in one input sample.
    pub input_values: u32,
    /// Input format.
    pub input_format: String,
    /// Values in one output.
    pub output_values: u32,
    /// Index of the first layer that trains; equal to `layers` if none does.
    pub first_trainable: usize,
    /// Mini-batch size.
    pub batch: u16,
    /// Multiply-accumulates of one forward pass.
    pub forward_macs: u64,
}

/// The full report. Field names are stable; they are the `--json` output.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PlanReport {
    /// The model.
    pub model: ModelSummary,
    /// The budget.
    pub budget: Budget,
    /// The reserve for the rest of the firmware.
    pub reserve: Reserve,
    /// The engine overhead, when the caller gave it.
    pub engine: Option<EngineOverhead>,
    /// Every buffer, RAM first (by layer, then scratch), then flash.
    pub buffers: Vec<Buffer>,
    /// The arena by category.
    pub ram_categories: RamCategories,
    /// RAM against the budget.
    pub ram: RamUse,
    /// Flash against the budget.
    pub flash: FlashUse,
    /// Whether RAM and flash both fit.
    pub fits: bool,
    /// One line: "fits: …" or "does not fit: …".
    pub verdict: String,
    /// Alternatives, sorted by bytes saved (see [`plan_report`]).
    pub advice: Vec<Alternative>,
    /// When the model does not fit and no single alternative makes it fit: the listed
    /// changes applied one after another, each kept only if it saved bytes, until it fits.
    pub combination: Option<Combination>,
    /// Time and energy of one calibration session on the chip (see [`session_estimate`]);
    /// set by [`PlanReport::with_chip`].
    #[serde(skip_serializing_if = "Option::is_none")]
    pub session: Option<SessionEstimate>,
    /// When the engine's own overhead is what does not fit: the lean build to use instead
    /// (see [`lean_advice`]); set by [`PlanReport::with_chip`].
    #[serde(skip_serializing_if = "Option::is_none")]
    pub lean: Option<String>,
}

impl PlanReport {
    /// Adds what depends on the chip: the session estimate and the lean-build advice.
    #[must_use]
    pub fn with_chip(mut self, chip: &Chip, desc: &ModelDesc) -> Self {
        self.session = session_estimate(chip);
        self.lean = lean_advice(desc, &self);
        self
    }
}

/// What the caller may pass to estimate the drift cost of a changed model: the cost, or why
/// it cannot be computed for this change (shown in its place).
pub type DriftFn<'a> =
    &'a dyn Fn(&ModelDesc) -> Result<DriftCost, Box<dyn std::error::Error + Send + Sync>>;

/// Calls the caller's drift function, if any: the cost, and the reason when there is none.
fn drift_of(drift: Option<DriftFn<'_>>, d: &ModelDesc) -> (Option<DriftCost>, Option<String>) {
    match drift.map(|f| f(d)) {
        None => (None, None),
        Some(Ok(c)) => (Some(c), None),
        Some(Err(why)) => (None, Some(why.to_string())),
    }
}

/// A layer kind in a few characters: "dense 8", "conv1d 4×5/2", "max pool 2/2".
pub fn kind_label(kind: &LayerKind) -> String {
    match *kind {
        LayerKind::Dense { units } => format!("dense {units}"),
        LayerKind::Conv1d {
            filters,
            kernel,
            stride,
        } => format!("conv1d {filters}×{kernel}/{stride}"),
        LayerKind::Relu => "relu".to_owned(),
        LayerKind::LeakyRelu { shift } => format!("leaky relu 2^-{shift}"),
        LayerKind::HardTanh => "hard tanh".to_owned(),
        LayerKind::ClippedRelu { ceiling } => format!("clipped relu {ceiling}"),
        LayerKind::Sigmoid => "sigmoid".to_owned(),
        LayerKind::Tanh => "tanh".to_owned(),
        LayerKind::AvgPool1d { window, stride } => format!("avg pool {window}/{stride}"),
        LayerKind::MaxPool1d { window, stride } => format!("max pool {window}/{stride}"),
    }
}

/// "Q3.12" without the word.
fn q_short(q: QFormat) -> String {
    format!("Q{}.{}", q.int_bits(), q.frac)
}

fn pad4(n: u64) -> u64 {
    (n + 3) & !3
}

fn ram_buffer(
    layer: Option<(usize, &LayerDesc)>,
    role: BufferRole,
    slot: Slot,
    format: Option<QFormat>,
) -> Buffer {
    Buffer {
        layer: layer.map(|(k, _)| k),
        layer_kind: layer.map(|(_, l)| kind_label(&l.kind)),
        role,
        elems: slot.elems,
        word: slot.word.to_string(),
        format: format.map(|f| f.to_string()),
        bytes: slot.bytes,
        data_bytes: (slot.elems as u64 * slot.word.bytes() as u64) as u32,
        memory: Memory::Ram,
        offset: Some(slot.offset),
        serves_layers: Vec::new(),
    }
}

/// Every buffer of a plan, RAM first (by layer, then scratch), then flash.
pub fn buffers(desc: &ModelDesc, plan: &Plan) -> Vec<Buffer> {
    let mut out = Vec::new();
    let n = plan.count();
    for (k, (l, s)) in desc.layers.iter().zip(plan.layers.iter()).enumerate() {
        let at = Some((k, l));
        let entries = [
            (BufferRole::TrainableWeights, s.weight, Some(l.weight.value)),
            (BufferRole::TrainableBias, s.bias, Some(l.bias.value)),
            (BufferRole::MasterWeights, s.master_weight, l.weight.master),
            (BufferRole::MasterBias, s.master_bias, l.bias.master),
            (
                BufferRole::WeightAccumulator,
                s.accum_weight,
                Some(l.weight.accum),
            ),
            (
                BufferRole::BiasAccumulator,
                s.accum_bias,
                Some(l.bias.accum),
            ),
            (
                BufferRole::WeightMomentum,
                s.momentum_weight,
                Some(l.weight.accum),
            ),
            (
                BufferRole::BiasMomentum,
                s.momentum_bias,
                Some(l.bias.accum),
            ),
            (BufferRole::KeptActivation, s.kept, Some(l.out)),
        ];
        for (role, slot, format) in entries {
            if slot.is_some() {
                out.push(ram_buffer(at, role, slot, format));
            }
        }
    }
    let scratch = [
        (BufferRole::ForwardScratchEven, plan.forward[0], 0, true),
        (BufferRole::ForwardScratchOdd, plan.forward[1], 1, true),
        (BufferRole::BackwardScratchEven, plan.backward[0], 0, false),
        (BufferRole::BackwardScratchOdd, plan.backward[1], 1, false),
    ];
    for (role, slot, parity, forward) in scratch {
        if !slot.is_some() {
            continue;
        }
        let mut b = ram_buffer(None, role, slot, None);
        b.serves_layers = (0..n)
            .filter(|&k| k % 2 == parity)
            .filter(|&k| {
                if forward {
                    !plan.layers[k].kept.is_some()
                } else {
                    k >= plan.first_trainable
                }
            })
            .collect();
        out.push(b);
    }
    if plan.state.is_some() {
        let mut b = ram_buffer(None, BufferRole::TrainerState, plan.state, None);
        b.serves_layers = (0..n).collect();
        out.push(b);
    }
    for (k, (l, s)) in desc.layers.iter().zip(plan.layers.iter()).enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        let g = &plan.shapes.layers[k];
        let flash = [
            (
                BufferRole::FactoryWeights,
                g.weights,
                s.flash_weight,
                l.weight.value,
            ),
            (
                BufferRole::FactoryBias,
                g.biases,
                s.flash_bias,
                l.bias.value,
            ),
        ];
        for (role, elems, data, format) in flash {
            out.push(Buffer {
                layer: Some(k),
                layer_kind: Some(kind_label(&l.kind)),
                role,
                elems,
                word: format.word.to_string(),
                format: Some(format.to_string()),
                bytes: pad4(data as u64) as u32,
                data_bytes: data,
                memory: Memory::Flash,
                offset: None,
                serves_layers: Vec::new(),
            });
        }
    }
    out
}

/// Budget minus use, and the percentage of the budget.
fn spare(budget: u32, total: u64) -> (i64, Option<f64>) {
    let s = budget as i64 - total as i64;
    let pct = (budget != 0).then(|| s as f64 * 100.0 / budget as f64);
    (s, pct)
}

/// RAM and flash use of a plan with the fixed parts (overhead and reserve) added.
fn uses(
    plan: &Plan,
    budget: &Budget,
    reserve: Reserve,
    engine: Option<&EngineOverhead>,
) -> (RamUse, FlashUse) {
    let state = engine.map(|e| e.state_ram);
    let stack = engine.map(|e| e.stack);
    let code = engine.map(|e| e.code_flash);
    let ram_total = plan.ram_bytes as u64
        + state.unwrap_or(0) as u64
        + stack.unwrap_or(0) as u64
        + reserve.ram_bytes as u64;
    let (ram_spare, ram_pct) = spare(budget.ram_bytes, ram_total);
    let flash_total =
        plan.flash_bytes as u64 + code.unwrap_or(0) as u64 + reserve.flash_bytes as u64;
    let (flash_spare, flash_pct) = spare(budget.flash_bytes, flash_total);
    (
        RamUse {
            arena_bytes: plan.ram_bytes,
            engine_state_bytes: state,
            stack_bytes: stack,
            reserve_bytes: reserve.ram_bytes,
            total_bytes: ram_total,
            budget_bytes: budget.ram_bytes,
            spare_bytes: ram_spare,
            spare_percent: ram_pct,
            fits: ram_spare >= 0,
        },
        FlashUse {
            parameters_bytes: plan.flash_bytes,
            engine_code_bytes: code,
            reserve_bytes: reserve.flash_bytes,
            total_bytes: flash_total,
            budget_bytes: budget.flash_bytes,
            spare_bytes: flash_spare,
            spare_percent: flash_pct,
            fits: flash_spare >= 0,
        },
    )
}

fn percent_text(p: Option<f64>) -> String {
    match p {
        Some(p) => format!("{:.0} %", p.abs()),
        None => "of a zero budget".to_owned(),
    }
}

fn verdict_line(ram: &RamUse, flash: &FlashUse) -> String {
    if ram.fits && flash.fits {
        format!(
            "fits: {} of RAM to spare ({}), {} of flash ({})",
            bytes(ram.spare_bytes.unsigned_abs()),
            percent_text(ram.spare_percent),
            bytes(flash.spare_bytes.unsigned_abs()),
            percent_text(flash.spare_percent)
        )
    } else {
        let mut parts = Vec::new();
        if !ram.fits {
            parts.push(format!(
                "RAM short by {}",
                bytes(ram.spare_bytes.unsigned_abs())
            ));
        }
        if !flash.fits {
            parts.push(format!(
                "flash short by {}",
                bytes(flash.spare_bytes.unsigned_abs())
            ));
        }
        format!("does not fit: {}", parts.join(", "))
    }
}

/// The changes the advice tries for a description.
fn candidate_changes(desc: &ModelDesc, options: &AdviceOptions) -> Vec<Change> {
    let mut out = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        out.extend([
            Change::Freeze(k),
            Change::BiasOnly(k),
            Change::NarrowWeights(k),
            Change::NarrowAccumulators(k),
            Change::HalveUnits(k),
        ]);
    }
    out.extend([Change::NoMaster, Change::NoMomentum]);
    match options.batch {
        Some(b) => out.push(Change::Batch(b)),
        None if desc.train.batch > 1 => out.push(Change::Batch(1)),
        None => {}
    }
    out
}

/// Makes the report: the plan of `desc`, its buffers, totals against `budget` with `reserve`
/// and `engine` added, a verdict, and the advice.
///
/// Advice items are sorted by the bytes they save in the resource that is short (RAM when
/// RAM is short or nothing is, flash when only flash is), then by the other resource. Only
/// items that save something are listed, plus those whose kind is in
/// [`AdviceOptions::always_show`] and the batch size given in [`AdviceOptions::batch`].
///
/// # Errors
/// [`MemplanError::Plan`] if the core does not plan `desc`.
pub fn plan_report(
    desc: &ModelDesc,
    budget: &Budget,
    reserve: Reserve,
    engine: Option<&EngineOverhead>,
    options: &AdviceOptions,
    drift: Option<DriftFn<'_>>,
) -> Result<PlanReport, MemplanError> {
    let plan = Plan::of(desc).map_err(MemplanError::Plan)?;
    let (ram, flash) = uses(&plan, budget, reserve, engine);
    let fits = ram.fits && flash.fits;
    let verdict = verdict_line(&ram, &flash);
    let cat = plan.ram_by_category();
    let output_values = plan.shapes.output.size();

    let mut advice = Vec::new();
    let mut applied = Vec::new();
    for change in candidate_changes(desc, options) {
        let Some((changed, text)) = change.apply(desc) else {
            continue;
        };
        let Ok(new_plan) = Plan::of(&changed) else {
            continue;
        };
        let ram_saved = plan.ram_bytes as i64 - new_plan.ram_bytes as i64;
        let flash_saved = plan.flash_bytes as i64 - new_plan.flash_bytes as i64;
        let asked = options.always_show.contains(&change.kind())
            || (options.batch.is_some() && change.kind() == ChangeKind::Batch);
        if ram_saved <= 0 && flash_saved <= 0 && !asked {
            continue;
        }
        let (r, f) = uses(&new_plan, budget, reserve, engine);
        let (drift_cost, drift_not_computed) = drift_of(drift, &changed);
        advice.push(Alternative {
            kind: change.kind(),
            layer: change.layer(),
            change: text,
            ram_saved_bytes: ram_saved,
            flash_saved_bytes: flash_saved,
            new_arena_bytes: new_plan.ram_bytes,
            new_flash_parameters_bytes: new_plan.flash_bytes,
            ram_spare_bytes: r.spare_bytes,
            flash_spare_bytes: f.spare_bytes,
            fits_alone: r.fits && f.fits,
            drift: drift_cost,
            drift_not_computed,
        });
        applied.push(change);
    }
    let flash_first = ram.fits && !flash.fits;
    let key = |a: &Alternative| {
        if flash_first {
            (a.flash_saved_bytes, a.ram_saved_bytes)
        } else {
            (a.ram_saved_bytes, a.flash_saved_bytes)
        }
    };
    let mut order: Vec<usize> = (0..advice.len()).collect();
    order.sort_by(|&a, &b| key(&advice[b]).cmp(&key(&advice[a])));
    let advice: Vec<Alternative> = order.iter().map(|&i| advice[i].clone()).collect();
    let applied: Vec<Change> = order.iter().map(|&i| applied[i]).collect();

    let combination = if !fits && !advice.iter().any(|a| a.fits_alone) {
        combine(desc, &plan, budget, reserve, engine, &applied, drift)
    } else {
        None
    };

    Ok(PlanReport {
        model: ModelSummary {
            layers: plan.count(),
            input_values: desc.input.size(),
            input_format: desc.input_format.to_string(),
            output_values,
            first_trainable: plan.first_trainable,
            batch: desc.train.batch,
            forward_macs: plan.forward_macs(),
        },
        budget: budget.clone(),
        reserve,
        engine: engine.cloned(),
        buffers: buffers(desc, &plan),
        ram_categories: RamCategories {
            parameters_bytes: cat.parameters,
            master_bytes: cat.master,
            accumulators_bytes: cat.accumulators,
            momentum_bytes: cat.momentum,
            kept_activations_bytes: cat.kept_activations,
            scratch_bytes: cat.scratch,
        },
        ram,
        flash,
        fits,
        verdict,
        advice,
        combination,
        session: None,
        lean: None,
    })
}

/// Applies `changes` in order to `desc`, keeping each one that lowers the RAM or flash of the
/// plan without raising the other, until the model fits. Every step is planned by the core.
fn combine(
    desc: &ModelDesc,
    plan: &Plan,
    budget: &Budget,
    reserve: Reserve,
    engine: Option<&EngineOverhead>,
    changes: &[Change],
    drift: Option<DriftFn<'_>>,
) -> Option<Combination> {
    let mut cur = desc.clone();
    let mut cur_plan = *plan;
    let mut kept = Vec::new();
    for change in changes {
        let Some((next, text)) = change.apply(&cur) else {
            continue;
        };
        let Ok(next_plan) = Plan::of(&next) else {
            continue;
        };
        let lower = next_plan.ram_bytes <= cur_plan.ram_bytes
            && next_plan.flash_bytes <= cur_plan.flash_bytes
            && (next_plan.ram_bytes, next_plan.flash_bytes)
                != (cur_plan.ram_bytes, cur_plan.flash_bytes);
        if !lower {
            continue;
        }
        cur = next;
        cur_plan = next_plan;
        kept.push(CombinedChange {
            kind: change.kind(),
            layer: change.layer(),
            change: text,
        });
        let (r, f) = uses(&cur_plan, budget, reserve, engine);
        if r.fits && f.fits {
            break;
        }
    }
    if kept.len() < 2 {
        return None;
    }
    let (r, f) = uses(&cur_plan, budget, reserve, engine);
    let (drift, drift_not_computed) = drift_of(drift, &cur);
    Some(Combination {
        changes: kept,
        ram_saved_bytes: plan.ram_bytes as i64 - cur_plan.ram_bytes as i64,
        flash_saved_bytes: plan.flash_bytes as i64 - cur_plan.flash_bytes as i64,
        ram_spare_bytes: r.spare_bytes,
        flash_spare_bytes: f.spare_bytes,
        fits: r.fits && f.fits,
        drift,
        drift_not_computed,
    })
}

// ---------------------------------------------------------------------------------------------
// Rendering

/// Groups digits by three with spaces: 20480 → "20 480".
pub(crate) fn group(n: u64) -> String {
    let s = n.to_string();
    let mut out = String::with_capacity(s.len() + s.len() / 3);
    for (i, c) in s.chars().enumerate() {
        if i > 0 && (s.len() - i).is_multiple_of(3) {
            out.push(' ');
        }
        out.push(c);
    }
    out
}

/// Which formats of a plan made without a float model are placeholders: the `auto` formats,
/// whose fraction bits `hone quantize` chooses from data. Their word sizes, and so every byte
/// count, are final. `None` when the config has no `auto` format.
pub fn placeholder_note(config: &crate::config::Config) -> Option<String> {
    let autos = config.auto_formats();
    if autos.is_empty() {
        return None;
    }
    let mut by_layer: Vec<(usize, Vec<&str>)> = Vec::new();
    for a in &autos {
        match by_layer.last_mut() {
            Some((l, roles)) if *l == a.layer => roles.push(a.role.key()),
            _ => by_layer.push((a.layer, vec![a.role.key()])),
        }
    }
    let list: Vec<String> = by_layer
        .iter()
        .map(|(l, roles)| format!("layer {l} {}", roles.join(", ")))
        .collect();
    let text = format!(
        "Placeholder formats (auto: the fraction bits are chosen from data by `hone quantize`, \
         or here with --model and --train; word sizes and bytes are final): {}",
        list.join("; ")
    );
    Some(wrap(&text, 96, 2))
}

/// "20 480 B".
pub(crate) fn bytes(n: u64) -> String {
    format!("{} B", group(n))
}

/// "20 480 B (20.0 KiB)" from 1 KiB up, "512 B" below.
pub(crate) fn bytes_kib(n: u64) -> String {
    if n >= 1024 {
        format!("{} ({:.1} KiB)", bytes(n), n as f64 / 1024.0)
    } else {
        bytes(n)
    }
}

/// A signed byte count: "1 024 B", "-512 B".
fn signed_bytes(n: i64) -> String {
    if n < 0 {
        format!("-{}", bytes(n.unsigned_abs()))
    } else {
        bytes(n as u64)
    }
}

/// Column alignment.
#[derive(Clone, Copy)]
pub(crate) enum Align {
    Left,
    Right,
}

/// An aligned table, two spaces between columns, indented by two.
pub(crate) fn table(head: &[&str], align: &[Align], rows: &[Vec<String>]) -> String {
    let cols = head.len();
    let mut width: Vec<usize> = head.iter().map(|h| h.chars().count()).collect();
    for r in rows {
        for (w, c) in width.iter_mut().zip(r) {
            *w = (*w).max(c.chars().count());
        }
    }
    let mut out = String::new();
    let line = |cells: &mut dyn Iterator<Item = &str>, out: &mut String| {
        let mut s = String::from(" ");
        for (i, c) in cells.enumerate().take(cols) {
            let pad = width[i].saturating_sub(c.chars().count());
            s.push(' ');
            match align.get(i).copied().unwrap_or(Align::Left) {
                Align::Left => {
                    s.push_str(c);
                    s.push_str(&" ".repeat(pad));
                }
                Align::Right => {
                    s.push_str(&" ".repeat(pad));
                    s.push_str(c);
                }
            }
            s.push(' ');
        }
        out.push_str(s.trim_end());
        out.push('\n');
    };
    line(&mut head.iter().copied(), &mut out);
    for r in rows {
        line(&mut r.iter().map(String::as_str), &mut out);
    }
    out
}

/// Wraps `text` at `width` characters. The first line continues a line already `start`
/// characters long; continuation lines are indented by `indent` spaces.
pub(crate) fn wrap_at(text: &str, width: usize, start: usize, indent: usize) -> String {
    let mut out = String::new();
    let mut len = start;
    let mut first = true;
    for word in text.split_whitespace() {
        let w = word.chars().count();
        if !first && len + 1 + w > width {
            out.push('\n');
            out.push_str(&" ".repeat(indent));
            len = indent;
        } else if !first {
            out.push(' ');
            len += 1;
        }
        out.push_str(word);
        len += w;
        first = false;
    }
    out
}

/// Wraps `text` starting at column 0, continuation lines indented by `indent` spaces.
pub(crate) fn wrap(text: &str, width: usize, indent: usize) -> String {
    wrap_at(text, width, 0, indent)
}

fn optional_line(
    rows: &mut Vec<Vec<String>>,
    label: &str,
    value: Option<u32>,
    measured: &str,
    unmeasured: &str,
) {
    rows.push(match value {
        Some(v) => vec![label.to_owned(), bytes(v as u64), measured.to_owned()],
        None => vec![label.to_owned(), "—".to_owned(), unmeasured.to_owned()],
    });
}

fn spare_row(spare: i64, pct: Option<f64>) -> Vec<String> {
    if spare >= 0 {
        vec![
            "spare".to_owned(),
            bytes(spare as u64),
            percent_text(pct) + " of the budget",
        ]
    } else {
        vec![
            "short".to_owned(),
            bytes(spare.unsigned_abs()),
            percent_text(pct) + " over the budget",
        ]
    }
}

fn drift_text(d: &Option<DriftCost>, not_computed: &Option<String>) -> String {
    match (d, not_computed) {
        (Some(d), _) if d.unit.is_empty() => format!("{} {:+.4}", d.what, d.value),
        (Some(d), _) => format!("{} {:+.4} {}", d.what, d.value, d.unit),
        (None, Some(why)) => format!("not computed: {why}"),
        (None, None) => String::new(),
    }
}

/// The report as aligned text for a terminal: budget, buffers, totals, verdict and advice.
/// The plan as terminal text: model, budget, every buffer, totals, verdict and advice.
pub fn render_table(r: &PlanReport) -> String {
    plan_doc(r).plain
}

/// The plan as document blocks, for the HTML and Markdown reports: the same text as
/// [`render_table`], with every table a real table.
pub fn plan_blocks(r: &PlanReport) -> Vec<hone_report::report::Block> {
    plan_doc(r).blocks
}

/// Text and tables in order, kept both as terminal text and as document blocks.
#[derive(Default)]
struct Doc {
    blocks: Vec<hone_report::report::Block>,
    pending: String,
    plain: String,
}

impl std::fmt::Write for Doc {
    fn write_str(&mut self, s: &str) -> std::fmt::Result {
        self.pending.push_str(s);
        self.plain.push_str(s);
        Ok(())
    }
}

impl Doc {
    fn flush(&mut self) {
        let text = std::mem::take(&mut self.pending);
        let text = text.trim();
        if !text.is_empty() {
            self.blocks
                .push(hone_report::report::Block::Paragraph(text.to_owned()));
        }
    }

    fn table(&mut self, head: &[&str], align: &[Align], rows: &[Vec<String>]) {
        self.plain.push_str(&table(head, align, rows));
        self.flush();
        let align = (0..head.len())
            .map(|i| match align.get(i) {
                Some(Align::Right) => hone_report::report::Align::Right,
                _ => hone_report::report::Align::Left,
            })
            .collect();
        self.blocks
            .push(hone_report::report::Block::Table(hone_report::report::Table {
                headers: head.iter().map(|h| h.to_string()).collect(),
                rows: rows.to_vec(),
                align,
            }));
    }

    fn finish(mut self) -> Doc {
        self.flush();
        self
    }
}

fn plan_doc(r: &PlanReport) -> Doc {
    const WIDTH: usize = 96;
    let mut o = Doc::default();
    let m = &r.model;
    let _ = writeln!(
        o,
        "{}",
        wrap(
            &format!(
                "Model: {} layers, input {} values in {}, output {} values, batch {}, {} MACs \
                 per forward pass",
                m.layers,
                group(m.input_values as u64),
                m.input_format,
                group(m.output_values as u64),
                m.batch,
                group(m.forward_macs)
            ),
            WIDTH,
            7
        )
    );
    let _ = writeln!(
        o,
        "{}",
        wrap(
            &format!(
                "Budget: {}: RAM {}, flash {}",
                r.budget.name,
                bytes_kib(r.budget.ram_bytes as u64),
                bytes_kib(r.budget.flash_bytes as u64)
            ),
            WIDTH,
            8
        )
    );
    let _ = writeln!(
        o,
        "        {}",
        wrap_at(&format!("source: {}", r.budget.source), WIDTH, 8, 8)
    );
    if !r.budget.note.is_empty() {
        let _ = writeln!(
            o,
            "        {}",
            wrap_at(&format!("note: {}", r.budget.note), WIDTH, 8, 8)
        );
    }
    let _ = writeln!(
        o,
        "Reserve for the rest of the firmware: RAM {}, flash {}",
        bytes_kib(r.reserve.ram_bytes as u64),
        bytes_kib(r.reserve.flash_bytes as u64)
    );
    match &r.engine {
        Some(e) => {
            let line = format!(
                "Engine{}: code {} of flash (rounded up to 2 KiB), trainer state {} and stack \
                 peak {} (rounded up to 128 B) of RAM",
                match e.basis {
                    OverheadBasis::Measured => "",
                    OverheadBasis::Estimated => " (estimate, not measured for this core)",
                },
                bytes(e.code_flash as u64),
                bytes(e.state_ram as u64),
                bytes(e.stack as u64)
            );
            let _ = writeln!(o, "{}", wrap(&line, WIDTH, 8));
            let _ = writeln!(
                o,
                "        {}",
                wrap_at(&format!("source: {}", e.source), WIDTH, 8, 8)
            );
        }
        None => {
            let _ = writeln!(
                o,
                "Engine: code size, trainer state and stack not measured: not counted below"
            );
        }
    }

    let buffer_rows = |mem: Memory| -> Vec<Vec<String>> {
        r.buffers
            .iter()
            .filter(|b| b.memory == mem)
            .map(|b| {
                let layer = b.layer.map_or_else(|| "–".to_owned(), |k| k.to_string());
                let kind = match (&b.layer_kind, b.serves_layers.is_empty()) {
                    (Some(k), _) => k.clone(),
                    (None, false) => format!(
                        "{} {}",
                        if b.serves_layers.len() == 1 {
                            "layer"
                        } else {
                            "layers"
                        },
                        b.serves_layers
                            .iter()
                            .map(ToString::to_string)
                            .collect::<Vec<_>>()
                            .join(",")
                    ),
                    (None, true) => String::new(),
                };
                vec![
                    layer,
                    kind,
                    b.role.label().to_owned(),
                    group(b.elems as u64),
                    b.format.clone().unwrap_or_else(|| b.word.clone()),
                    bytes(b.bytes as u64),
                ]
            })
            .collect()
    };
    let head = ["layer", "kind", "buffer", "values", "format", "bytes"];
    let align = [
        Align::Right,
        Align::Left,
        Align::Left,
        Align::Right,
        Align::Left,
        Align::Right,
    ];
    let _ = writeln!(
        o,
        "\nRAM: training memory (the trainer's working buffers), {}",
        bytes_kib(r.ram.arena_bytes as u64)
    );
    let rows = buffer_rows(Memory::Ram);
    if rows.is_empty() {
        let _ = writeln!(o, "  (no buffers: nothing trains)");
    } else {
        o.table(&head, &align, &rows);
    }
    let c = &r.ram_categories;
    let _ = writeln!(
        o,
        "  {}",
        wrap_at(
            &format!(
                "by use: parameters {}, master {}, accumulators {}, momentum {}, kept activations {}, scratch {}",
                bytes(c.parameters_bytes as u64),
                bytes(c.master_bytes as u64),
                bytes(c.accumulators_bytes as u64),
                bytes(c.momentum_bytes as u64),
                bytes(c.kept_activations_bytes as u64),
                bytes(c.scratch_bytes as u64)
            ),
            WIDTH,
            2,
            4
        )
    );
    let _ = writeln!(
        o,
        "\nFlash: factory parameters, {}",
        bytes_kib(r.flash.parameters_bytes as u64)
    );
    let rows = buffer_rows(Memory::Flash);
    if rows.is_empty() {
        let _ = writeln!(o, "  (none: the model has no parameters)");
    } else {
        o.table(&head, &align, &rows);
    }

    // Totals, RAM and flash side by side in one table each.
    // MEASURED_OVERHEADS: the trainer object is exact, the stack is rounded up to 128 B and
    // the code to 2 KiB.
    let (measured, stack_label, code_label) = match r.engine.as_ref().map(|e| e.basis) {
        Some(OverheadBasis::Estimated) => (
            "estimate: largest measured",
            "estimate: largest measured, rounded up to 128 B",
            "estimate: largest measured, rounded up to 2 KiB",
        ),
        _ => (
            "measured",
            "measured, rounded up to 128 B",
            "measured, rounded up to 2 KiB",
        ),
    };
    let unmeasured = "not measured, not counted";
    let mut rows = vec![vec![
        "training memory".to_owned(),
        bytes(r.ram.arena_bytes as u64),
        String::new(),
    ]];
    optional_line(
        &mut rows,
        "trainer state",
        r.ram.engine_state_bytes,
        measured,
        unmeasured,
    );
    optional_line(
        &mut rows,
        "stack peak",
        r.ram.stack_bytes,
        stack_label,
        unmeasured,
    );
    rows.push(vec![
        "reserve".to_owned(),
        bytes(r.ram.reserve_bytes as u64),
        "rest of the firmware".to_owned(),
    ]);
    rows.push(vec![
        "total".to_owned(),
        bytes(r.ram.total_bytes),
        format!("of {}", bytes_kib(r.ram.budget_bytes as u64)),
    ]);
    rows.push(spare_row(r.ram.spare_bytes, r.ram.spare_percent));
    let _ = writeln!(o, "\nRAM totals");
    o.table(
        &["", "bytes", ""],
        &[Align::Left, Align::Right, Align::Left],
        &rows,
    );
    let mut rows = vec![vec![
        "factory parameters".to_owned(),
        bytes(r.flash.parameters_bytes as u64),
        String::new(),
    ]];
    optional_line(
        &mut rows,
        "engine code",
        r.flash.engine_code_bytes,
        code_label,
        unmeasured,
    );
    rows.push(vec![
        "reserve".to_owned(),
        bytes(r.flash.reserve_bytes as u64),
        "rest of the firmware".to_owned(),
    ]);
    rows.push(vec![
        "total".to_owned(),
        bytes(r.flash.total_bytes),
        format!("of {}", bytes_kib(r.flash.budget_bytes as u64)),
    ]);
    rows.push(spare_row(r.flash.spare_bytes, r.flash.spare_percent));
    let _ = writeln!(o, "\nFlash totals");
    o.table(
        &["", "bytes", ""],
        &[Align::Left, Align::Right, Align::Left],
        &rows,
    );

    let _ = writeln!(o, "\n{}", r.verdict);

    if r.advice.is_empty() {
        let _ = writeln!(o, "\nNo change tried saves memory.");
    } else {
        let by = if r.ram.fits && !r.flash.fits {
            "flash"
        } else {
            "RAM"
        };
        let _ = writeln!(
            o,
            "\nWhat to give up (each change planned again by the core; sorted by {by} saved)"
        );
        let rows: Vec<Vec<String>> = r
            .advice
            .iter()
            .map(|a| {
                vec![
                    a.change.clone(),
                    signed_bytes(a.ram_saved_bytes),
                    signed_bytes(a.flash_saved_bytes),
                    if a.fits_alone { "yes" } else { "no" }.to_owned(),
                    drift_text(&a.drift, &a.drift_not_computed),
                ]
            })
            .collect();
        let has_drift = r
            .advice
            .iter()
            .any(|a| a.drift.is_some() || a.drift_not_computed.is_some());
        let head: &[&str] = if has_drift {
            &["change", "RAM saved", "flash saved", "fits alone", "drift"]
        } else {
            &["change", "RAM saved", "flash saved", "fits alone"]
        };
        o.table(
            head,
            &[
                Align::Left,
                Align::Right,
                Align::Right,
                Align::Left,
                Align::Left,
            ],
            &rows,
        );
    }
    if let Some(c) = &r.combination {
        let lead = if c.fits {
            "No single change fits; these together do"
        } else {
            "No single change fits; even these together do not"
        };
        let _ = writeln!(o, "\n{lead}:");
        for t in &c.changes {
            let _ = writeln!(o, "  - {}", t.change);
        }
        let left = |s: i64, what: &str| {
            if s >= 0 {
                format!("{} of {what} to spare", bytes(s as u64))
            } else {
                format!("{what} short by {}", bytes(s.unsigned_abs()))
            }
        };
        let _ = writeln!(
            o,
            "  {}",
            wrap_at(
                &format!(
                    "saves {} of RAM and {} of flash: {}, {}",
                    signed_bytes(c.ram_saved_bytes),
                    signed_bytes(c.flash_saved_bytes),
                    left(c.ram_spare_bytes, "RAM"),
                    left(c.flash_spare_bytes, "flash")
                ),
                WIDTH,
                2,
                4
            )
        );
        if c.drift.is_some() || c.drift_not_computed.is_some() {
            let _ = writeln!(
                o,
                "  drift: {}",
                drift_text(&c.drift, &c.drift_not_computed)
            );
        }
    }
    if let Some(lean) = &r.lean {
        let _ = writeln!(o, "{}", wrap(lean, WIDTH, 2));
    }
    if let Some(e) = &r.session {
        let _ = writeln!(o, "{}", wrap(&e.render(), WIDTH, 2));
    }
    o.finish()
}

// ---------------------------------------------------------------------------------------
// Measured engine overheads (boards/README.md, "Measurements").
//
// Written from the figures `cargo test -p hone --test device_qemu -- --nocapture` prints, and
// checked by that test on every run: for each board, the RAM the firmware measures while it
// trains must be at most the prediction built from this table and the memory plan, and the
// prediction at most 5 % above it. The engine's code size is checked the same way.
// ---------------------------------------------------------------------------------------

/// Overheads of the training engine and of the board firmware around it, measured once on a
/// QEMU board by its calibration session.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct MeasuredOverhead {
    /// Board the figures were measured on (its folder under `boards/`).
    pub board: &'static str,
    /// Rust target the firmware was built for: the figures hold for every core that runs
    /// code built for it.
    pub target: &'static str,
    /// Model config of the board's session (the engine's stack and code depend a little on
    /// which layer kinds and training options the model uses).
    pub config: &'static str,
    /// `size_of::<Trainer>()`, bytes.
    pub trainer_bytes: u32,
    /// Stack of a guarded calibration beyond the arena and the trainer object: the model
    /// description, the decoded last good blob, and the frames of the engine's functions,
    /// bytes.
    pub engine_stack_bytes: u32,
    /// `.text` and `.rodata` of the fixed-point engine's symbols, bytes.
    pub engine_code_bytes: u32,
    /// Static RAM of the board firmware (`.data`, `.bss`, `.uninit`), bytes.
    pub firmware_static_bytes: u32,
    /// Stack depth at which the board firmware calls the engine, bytes.
    pub firmware_stack_bytes: u32,
    /// Instructions per training sample of the session's model, fixed point, exact (the
    /// `calib_train` span over its 10 samples × 3 passes), rounded to a whole instruction.
    pub insn_per_sample: u32,
}

/// Where the figures of [`MEASURED_OVERHEADS`] come from.
pub const MEASURED_SOURCE: &str = "measured under QEMU 7.2 by the board's calibration session \
     (cargo test -p hone --test device_qemu -- --nocapture; firmware built with rustc 1.95.0 in \
     the release profile of boards/: opt-level 3, fat LTO; method in boards/README.md)";

/// The measured overheads, one row per QEMU board. The engine stack is the measurement rounded
/// up to a multiple of 128 bytes (fine enough for the device test's 5 % bound on the whole
/// prediction), the engine code to a multiple of 2 KiB; the other figures are exact.
pub const MEASURED_OVERHEADS: [MeasuredOverhead; 4] = [
    MeasuredOverhead {
        board: "lm3s6965evb",
        target: "thumbv7m-none-eabi",
        config: "configs/soil-moisture.toml",
        trainer_bytes: 76,
        engine_stack_bytes: 3584,
        engine_code_bytes: 100352,
        firmware_static_bytes: 28,
        firmware_stack_bytes: 128,
        insn_per_sample: 14432,
    },
    MeasuredOverhead {
        board: "microbit",
        target: "thumbv6m-none-eabi",
        config: "configs/soil-moisture.toml",
        trainer_bytes: 76,
        engine_stack_bytes: 3840,
        engine_code_bytes: 104448,
        firmware_static_bytes: 28,
        firmware_stack_bytes: 168,
        insn_per_sample: 22317,
    },
    MeasuredOverhead {
        board: "mps2-an386",
        target: "thumbv7em-none-eabihf",
        config: "configs/soil-moisture.toml",
        trainer_bytes: 76,
        engine_stack_bytes: 3584,
        engine_code_bytes: 100352,
        firmware_static_bytes: 28,
        firmware_stack_bytes: 128,
        insn_per_sample: 14424,
    },
    MeasuredOverhead {
        board: "sifive-e",
        target: "riscv32imc-unknown-none-elf",
        config: "configs/soil-moisture-8bit.toml",
        trainer_bytes: 76,
        engine_stack_bytes: 3584,
        engine_code_bytes: 106496,
        firmware_static_bytes: 24,
        firmware_stack_bytes: 112,
        insn_per_sample: 12898,
    },
];

/// The Rust target whose measured figures apply to a core, if one was measured.
fn measured_target_of(core: CoreKind, fpu: Fpu) -> Option<&'static str> {
    match (core, fpu) {
        (CoreKind::CortexM0 | CoreKind::CortexM0Plus, _) => Some("thumbv6m-none-eabi"),
        (CoreKind::CortexM3, _) => Some("thumbv7m-none-eabi"),
        (CoreKind::CortexM4, Fpu::Single) => Some("thumbv7em-none-eabihf"),
        (CoreKind::Rv32imc | CoreKind::Rv32imac, _) => Some("riscv32imc-unknown-none-elf"),
        _ => None,
    }
}

/// The Rust target whose measured figures apply to `chip`'s core, if one was measured.
fn measured_target(chip: &Chip) -> Option<&'static str> {
    measured_target_of(chip.core, chip.fpu)
}

/// A core with a measured row, as `hone plan --core` names it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct MeasuredCore {
    /// The name on the command line: the core's label in lower case, e.g. `cortex-m4f`.
    pub name: &'static str,
    /// The core.
    pub core: CoreKind,
    /// Its floating-point unit.
    pub fpu: Fpu,
}

/// Every core whose engine overhead was measured, by way of a board built for the same Rust
/// target (see [`MEASURED_OVERHEADS`]).
pub const MEASURED_CORES: [MeasuredCore; 6] = [
    MeasuredCore {
        name: "cortex-m0",
        core: CoreKind::CortexM0,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "cortex-m0+",
        core: CoreKind::CortexM0Plus,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "cortex-m3",
        core: CoreKind::CortexM3,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "cortex-m4f",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
    },
    MeasuredCore {
        name: "rv32imc",
        core: CoreKind::Rv32imc,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "rv32imac",
        core: CoreKind::Rv32imac,
        fpu: Fpu::None,
    },
];

/// A core name that has no measured row.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error(
    "`{0}` is not a measured core; use one of {list}, or leave the option out to count the \
     largest figures measured on any of them",
    list = measured_core_names()
)]
pub struct UnknownCore(pub String);

/// The names of [`MEASURED_CORES`], comma-separated.
pub fn measured_core_names() -> String {
    MEASURED_CORES
        .iter()
        .map(|c| c.name)
        .collect::<Vec<_>>()
        .join(", ")
}

/// The measured core called `name` (case-insensitive).
///
/// # Errors
/// [`UnknownCore`] listing the names that are accepted.
pub fn measured_core(name: &str) -> Result<&'static MeasuredCore, UnknownCore> {
    MEASURED_CORES
        .iter()
        .find(|c| c.name.eq_ignore_ascii_case(name.trim()))
        .ok_or_else(|| UnknownCore(name.to_owned()))
}

fn row_of_target(target: &str) -> Option<&'static MeasuredOverhead> {
    MEASURED_OVERHEADS.iter().find(|m| m.target == target)
}

/// The measured row for `chip`'s core, if there is one.
pub fn measured_row(chip: &Chip) -> Option<&'static MeasuredOverhead> {
    row_of_target(measured_target(chip)?)
}

fn overhead_of_row(m: &MeasuredOverhead) -> EngineOverhead {
    EngineOverhead {
        basis: OverheadBasis::Measured,
        code_flash: m.engine_code_bytes,
        state_ram: m.trainer_bytes,
        stack: m.engine_stack_bytes,
        source: format!(
            "{MEASURED_SOURCE}: board {} ({}), model {}",
            m.board, m.target, m.config
        ),
    }
}

/// The engine overhead measured for `chip`'s core (trainer object, engine stack, engine
/// code), with its source, for [`plan_report`]; `None` when no board with that core was
/// measured.
pub fn measured_overhead(chip: &Chip) -> Option<EngineOverhead> {
    measured_row(chip).map(overhead_of_row)
}

/// The engine overhead measured for a core named on the command line.
pub fn measured_core_overhead(core: &MeasuredCore) -> EngineOverhead {
    let row = measured_target_of(core.core, core.fpu).and_then(row_of_target);
    match row {
        Some(m) => overhead_of_row(m),
        // Every entry of MEASURED_CORES has a row (checked by a test); should one ever lack
        // it, the estimate is the safe figure.
        None => estimated_overhead(),
    }
}

/// A conservative stand-in for a core that was not measured: the largest trainer object,
/// engine stack and engine code over every row of [`MEASURED_OVERHEADS`], each taken on its
/// own, with a source that says so and names the measured cores.
pub fn estimated_overhead() -> EngineOverhead {
    let max = |f: fn(&MeasuredOverhead) -> u32| MEASURED_OVERHEADS.iter().map(f).max();
    let cores: Vec<String> = MEASURED_OVERHEADS
        .iter()
        .map(|m| {
            let labels: Vec<String> = MEASURED_CORES
                .iter()
                .filter(|c| measured_target_of(c.core, c.fpu) == Some(m.target))
                .map(|c| crate::chips::core_label(c.core, c.fpu))
                .collect();
            format!("{} ({})", labels.join("/"), m.board)
        })
        .collect();
    EngineOverhead {
        basis: OverheadBasis::Estimated,
        code_flash: max(|m| m.engine_code_bytes).unwrap_or(0),
        state_ram: max(|m| m.trainer_bytes).unwrap_or(0),
        stack: max(|m| m.engine_stack_bytes).unwrap_or(0),
        source: format!(
            "estimate: this core was not measured, so the largest figure of each kind measured \
             on {} is counted; {MEASURED_SOURCE}",
            cores.join(", ")
        ),
    }
}

/// The engine overhead to count for `chip`: its core's measured row, or
/// [`estimated_overhead`] when its core was not measured.
pub fn engine_overhead(chip: &Chip) -> EngineOverhead {
    measured_overhead(chip).unwrap_or_else(estimated_overhead)
}

/// The RAM of hone's own board firmware around the engine (its statics and the stack depth
/// where it calls the engine), as a [`Reserve`]; `None` when no board with `chip`'s core was
/// measured. Flash is not counted here.
pub fn measured_firmware_reserve(chip: &Chip) -> Option<Reserve> {
    let m = measured_row(chip)?;
    Some(Reserve {
        ram_bytes: m.firmware_static_bytes + m.firmware_stack_bytes,
        flash_bytes: 0,
    })
}

/// Time and energy of one calibration session on a chip, estimated from the instruction
/// count measured on a QEMU board with the chip's core.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SessionEstimate {
    /// Always true: this is an estimate, not a measurement on the chip.
    pub estimate: bool,
    /// Board whose measured instructions it uses.
    pub measured_on: &'static str,
    /// The model config that board trains (the figure is for that model).
    pub config: &'static str,
    /// Measured instructions per training sample.
    pub instructions_per_sample: u32,
    /// Samples of the session.
    pub samples: u32,
    /// Passes over them.
    pub passes: u32,
    /// Instructions of the session: per sample × samples × passes.
    pub instructions: u64,
    /// Cycles per instruction assumed for the chip's core.
    pub cycles_per_instruction: f64,
    /// Clock, MHz.
    pub clock_mhz: f64,
    /// Estimated time, seconds.
    pub seconds: f64,
    /// Run current at that clock, mA; `None` when the chip table has no power figures.
    pub current_ma: Option<f64>,
    /// Supply voltage, volts.
    pub supply_v: Option<f64>,
    /// Estimated energy, millijoules: time × current × voltage.
    pub energy_mj: Option<f64>,
    /// Where the clock, current, voltage and cycles per instruction come from.
    pub source: String,
}

/// Samples of a board's calibration session: the rows of `demo-data/soil_unit_calibration.csv`.
pub const SESSION_SAMPLES: u32 = 10;

impl SessionEstimate {
    /// One paragraph for the plan's table.
    #[must_use]
    pub fn render(&self) -> String {
        let energy = match (self.energy_mj, self.current_ma, self.supply_v) {
            (Some(e), Some(i), Some(v)) => format!(", about {e:.3} mJ ({i:.2} mA at {v:.1} V)"),
            _ => ", energy unknown (no run current for this chip in the table)".to_owned(),
        };
        format!(
            "estimate, one calibration session ({} samples × {} passes of the model in {}, \
             {} instructions per sample measured on {}): {} instructions × {:.1} cycles each at \
             {} MHz = about {:.1} ms{energy}; {}",
            self.samples,
            self.passes,
            self.config,
            self.instructions_per_sample,
            self.measured_on,
            self.instructions,
            self.cycles_per_instruction,
            self.clock_mhz,
            self.seconds * 1e3,
            self.source
        )
    }
}

/// The time and energy of one calibration session (the boards' session: [`SESSION_SAMPLES`]
/// samples, [`crate::device::session::PASSES`] passes) on `chip`: measured instructions ×
/// cycles per instruction of its core ÷ its clock, and that time × run current × supply
/// voltage. `None` when no board with the chip's core was measured or the chip has no clock
/// in [`crate::chips::CHIP_POWER`] (QEMU boards are listed with their emulated chip's
/// figures where known).
#[must_use]
pub fn session_estimate(chip: &Chip) -> Option<SessionEstimate> {
    let row = measured_row(chip)?;
    let power = crate::chips::power(chip.id)?;
    let (cpi, cpi_source) = crate::chips::cycles_per_instruction(chip.core);
    let passes = u32::from(crate::device::session::PASSES);
    let instructions =
        u64::from(row.insn_per_sample) * u64::from(SESSION_SAMPLES) * u64::from(passes);
    let seconds = instructions as f64 * cpi / (power.clock_mhz * 1e6);
    let current_ma = power.run_ua_per_mhz * power.clock_mhz / 1e3;
    Some(SessionEstimate {
        estimate: true,
        measured_on: row.board,
        config: row.config,
        instructions_per_sample: row.insn_per_sample,
        samples: SESSION_SAMPLES,
        passes,
        instructions,
        cycles_per_instruction: cpi,
        clock_mhz: power.clock_mhz,
        seconds,
        current_ma: Some(current_ma),
        supply_v: Some(power.supply_v),
        energy_mj: Some(seconds * current_ma * power.supply_v),
        source: format!(
            "clock and current: {}; cycles per instruction: {cpi_source}",
            power.source
        ),
    })
}

/// The core's optional features (`core/Cargo.toml`) that `desc` needs: its layer kinds and
/// loss, its value words besides `i16`, and its training parts (rounding modes, momentum,
/// master weights, decay and clip, dynamic fixed point; see `hone_core::features`).
#[must_use]
pub fn core_features(desc: &ModelDesc) -> Vec<&'static str> {
    use hone_core::features::Feature;
    use hone_core::num::{Rounding, Word};
    let mut f = Vec::new();
    let mut add = |name| {
        if !f.contains(&name) {
            f.push(name);
        }
    };
    let mut word = |w: Word| match w {
        Word::I8 => add("word-i8"),
        Word::I32 => add("word-i32"),
        Word::I16 => {}
    };
    word(desc.input_format.word);
    for l in &desc.layers {
        word(l.out.word);
        word(l.grad.word);
        if l.kind.has_params() {
            word(l.weight.value.word);
            word(l.bias.value.word);
        }
    }
    for l in &desc.layers {
        match l.kind {
            LayerKind::Conv1d { .. } => add("conv1d"),
            LayerKind::AvgPool1d { .. } | LayerKind::MaxPool1d { .. } => add("pool1d"),
            LayerKind::Sigmoid | LayerKind::Tanh => add("table-activations"),
            _ => {}
        }
    }
    if desc.loss == hone_core::model::Loss::SoftmaxCrossEntropy {
        add("cross-entropy");
    }
    let t = &desc.train;
    for mode in [
        t.rounding.activations,
        t.rounding.gradients,
        t.rounding.updates,
    ] {
        match mode {
            Rounding::Stochastic => add(Feature::Stochastic.name()),
            Rounding::TowardZero => add(Feature::TowardZero.name()),
            Rounding::NearestEven => {}
        }
    }
    if !t.momentum.is_zero() {
        add(Feature::Momentum.name());
    }
    let master = |l: &hone_core::model::LayerDesc| {
        l.kind.has_params() && (l.weight.master.is_some() || l.bias.master.is_some())
    };
    if desc.layers.iter().any(master) {
        add(Feature::MasterWeights.name());
    }
    if !(t.weight_decay.is_zero() && t.clip.is_zero()) {
        add(Feature::DecayClip.name());
    }
    if t.dynamic.is_some() {
        add(Feature::Dynamic.name());
    }
    f
}

/// When the model does not fit but would without the engine's measured overhead (its trainer
/// object and stack in RAM, its code in flash), the advice to build the lean engine: the core
/// without default features plus exactly the ones the model needs (`boards/lean` shows how).
#[must_use]
pub fn lean_advice(desc: &ModelDesc, r: &PlanReport) -> Option<String> {
    let engine = r.engine.as_ref()?;
    if r.fits {
        return None;
    }
    let ram_without = r.ram.total_bytes.saturating_sub(
        u64::from(r.ram.engine_state_bytes.unwrap_or(0))
            + u64::from(r.ram.stack_bytes.unwrap_or(0)),
    );
    let flash_without = r
        .flash
        .total_bytes
        .saturating_sub(u64::from(engine.code_flash));
    if ram_without > u64::from(r.budget.ram_bytes)
        || flash_without > u64::from(r.budget.flash_bytes)
    {
        return None;
    }
    let features = core_features(desc);
    let wanted = if features.is_empty() {
        "no optional feature".to_owned()
    } else {
        format!(
            "features = [{}]",
            features
                .iter()
                .map(|f| format!("\"{f}\""))
                .collect::<Vec<_>>()
                .join(", ")
        )
    };
    Some(format!(
        "the engine's own overhead ({} B of code, {} B of trainer and stack) is what does not \
         fit: the model alone would. Build the lean engine as boards/lean does, hone-core with \
         default-features = false and {wanted} (what this model uses), which links only those \
         parts; its overhead is not in the measured table, so measure it with `hone device \
         verify --board microbit-lean`.",
        engine.code_flash,
        r.ram.engine_state_bytes.unwrap_or(0) + r.ram.stack_bytes.unwrap_or(0),
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn groups_digits() {
        assert_eq!(group(0), "0");
        assert_eq!(group(999), "999");
        assert_eq!(group(1000), "1 000");
        assert_eq!(group(3412), "3 412");
        assert_eq!(group(1_048_576), "1 048 576");
        assert_eq!(bytes_kib(20480), "20 480 B (20.0 KiB)");
        assert_eq!(bytes_kib(512), "512 B");
        assert_eq!(signed_bytes(-2048), "-2 048 B");
    }

    #[test]
    fn table_aligns_columns() {
        let t = table(
            &["a", "bb"],
            &[Align::Left, Align::Right],
            &[
                vec!["xyz".into(), "1".into()],
                vec!["q".into(), "1 000".into()],
            ],
        );
        let lines: Vec<&str> = t.lines().collect();
        assert_eq!(lines.len(), 3);
        assert_eq!(lines[1], "  xyz      1");
        assert_eq!(lines[2], "  q    1 000");
    }

    #[test]
    fn measured_cores_match_their_labels_and_rows() {
        use crate::chips::core_label;
        for c in MEASURED_CORES {
            assert_eq!(c.name, core_label(c.core, c.fpu).to_lowercase());
            let m = measured_core_overhead(&c);
            assert_eq!(m.basis, OverheadBasis::Measured, "{}", c.name);
            assert_eq!(measured_core(&c.name.to_uppercase()), Ok(&c));
        }
        // Every measured row serves at least one named core, and every core/FPU pair with a
        // row is named.
        for m in &MEASURED_OVERHEADS {
            assert!(
                MEASURED_CORES
                    .iter()
                    .any(|c| measured_target_of(c.core, c.fpu) == Some(m.target)),
                "{}",
                m.board
            );
        }
        // Every chip of the built-in table whose core has a row can be named by --core.
        for chip in crate::chips::all() {
            let named = MEASURED_CORES
                .iter()
                .any(|c| (c.core, c.fpu) == (chip.core, chip.fpu));
            assert_eq!(named, measured_row(chip).is_some(), "{}", chip.id);
        }
        let e = measured_core("cortex-m7").unwrap_err().to_string();
        assert!(e.contains("`cortex-m7` is not a measured core"), "{e}");
        assert!(e.contains("cortex-m0+"), "{e}");
    }

    #[test]
    fn estimate_is_the_largest_measured_figure_of_each_kind() {
        let e = estimated_overhead();
        assert_eq!(e.basis, OverheadBasis::Estimated);
        for m in &MEASURED_OVERHEADS {
            assert!(e.code_flash >= m.engine_code_bytes);
            assert!(e.state_ram >= m.trainer_bytes);
            assert!(e.stack >= m.engine_stack_bytes);
            assert!(e.source.contains(m.board), "{}", e.source);
        }
        assert!(MEASURED_OVERHEADS
            .iter()
            .any(|m| m.engine_code_bytes == e.code_flash));
        assert!(MEASURED_OVERHEADS
            .iter()
            .any(|m| m.trainer_bytes == e.state_ram));
        assert!(MEASURED_OVERHEADS
            .iter()
            .any(|m| m.engine_stack_bytes == e.stack));
        assert!(e.source.starts_with("estimate"), "{}", e.source);
        assert!(e.source.contains("Cortex-M4F"), "{}", e.source);
        // A chip whose core was measured gets its row; one whose core was not, the estimate.
        let nrf = crate::chips::find("nrf51822").unwrap();
        assert_eq!(engine_overhead(nrf).basis, OverheadBasis::Measured);
        for id in ["ch32v003f4", "stm32h743zi"] {
            let chip = crate::chips::find(id).unwrap();
            assert!(measured_row(chip).is_none(), "{id}");
            assert_eq!(engine_overhead(chip), e, "{id}");
        }
    }

    #[test]
    fn placeholders_are_the_auto_formats() {
        let text = "loss = \"squared-error\"\n[input]\nchannels = 2\n[formats]\n\
                    weights = \"Q3.12\"\n[[layer]]\nkind = \"dense\"\nunits = 4\n\
                    bias = \"Q3.12\"\n[[layer]]\nkind = \"dense\"\nunits = 1\n\
                    [train]\nepochs = 1\nlearning-rate = 0.01\n[data]\ntarget = \"y\"\n";
        let c = crate::config::Config::parse(std::path::Path::new("t.toml"), text).unwrap();
        let note = placeholder_note(&c).expect("auto activations and a bias");
        let flat = note.split_whitespace().collect::<Vec<_>>().join(" ");
        assert!(
            flat.ends_with("layer 0 activations; layer 1 bias, activations"),
            "{flat}"
        );
        let fixed = text.replace(
            "weights = \"Q3.12\"",
            "weights = \"Q3.12\"\nbias = \"Q3.12\"\nactivations = \"Q3.12\"",
        );
        let c = crate::config::Config::parse(std::path::Path::new("t.toml"), &fixed).unwrap();
        assert_eq!(placeholder_note(&c), None);
    }

    #[test]
    fn wrap_keeps_width() {
        let w = wrap("one two three four five six seven eight nine ten", 20, 4);
        for l in w.lines() {
            assert!(l.chars().count() <= 20, "{l:?}");
        }
        assert!(w.lines().skip(1).all(|l| l.starts_with("    ")));
    }
}
