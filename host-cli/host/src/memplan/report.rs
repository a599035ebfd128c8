//! The plan report and its parts: the budget, the reserve, the engine overhead, the buffers and
//! the use of RAM and flash.

use super::*;

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
