//! The inspection report: what a blob holds, field by field, as data for `--json`.

use super::*;

/// A Q-format with its step and range.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FormatInfo {
    /// The trade's notation, e.g. "Q3.12".
    pub q: String,
    /// Storage word, e.g. "i16".
    pub word: String,
    /// Fraction bits.
    pub frac: u8,
    /// Integer bits beside the sign (negative when `frac` ≥ the word's bits).
    pub int_bits: i32,
    /// Value of one raw step, 2^-frac.
    pub step: f64,
    /// Smallest value.
    pub min: f64,
    /// Largest value.
    pub max: f64,
}

impl FormatInfo {
    /// The description of a format.
    pub fn of(q: QFormat) -> FormatInfo {
        FormatInfo {
            q: format!("Q{}.{}", q.int_bits(), q.frac),
            word: q.word.to_string(),
            frac: q.frac,
            int_bits: q.int_bits(),
            step: q.step(),
            min: q.min_value(),
            max: q.max_value(),
        }
    }

    /// "Q3.12 (i16)".
    pub fn label(&self) -> String {
        format!("{} ({})", self.q, self.word)
    }
}

/// A fixed-point hyperparameter as a decimal and as raw value and fraction bits.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ScalarInfo {
    /// The real value.
    pub value: f64,
    /// Raw integer.
    pub raw: i32,
    /// Fraction bits.
    pub frac: u8,
}

impl ScalarInfo {
    pub(super) fn of(s: QScalar) -> ScalarInfo {
        ScalarInfo {
            value: s.to_f64(),
            raw: s.raw,
            frac: s.frac,
        }
    }

    pub(super) fn text(&self) -> String {
        if self.raw == 0 {
            "0 (off)".to_owned()
        } else {
            format!("{} ({} · 2^-{})", real(self.value), self.raw, self.frac)
        }
    }
}

/// A shape.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct ShapeInfo {
    /// Channels.
    pub channels: u16,
    /// Samples per channel.
    pub len: u16,
    /// Values in all.
    pub values: u32,
}

impl ShapeInfo {
    pub(super) fn of(s: Shape) -> ShapeInfo {
        ShapeInfo {
            channels: s.channels,
            len: s.len,
            values: s.size(),
        }
    }

    pub(super) fn text(&self) -> String {
        if self.len == 1 {
            format!("{}", self.values)
        } else {
            format!("{}×{}", self.channels, self.len)
        }
    }
}

/// The formats of a parameter tensor.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ParamFormatsInfo {
    /// Value format.
    pub value: FormatInfo,
    /// Master copy format, if any.
    pub master: Option<FormatInfo>,
    /// Accumulator (and momentum) format.
    pub accum: FormatInfo,
}

impl ParamFormatsInfo {
    pub(super) fn of(p: &ParamFormats) -> ParamFormatsInfo {
        ParamFormatsInfo {
            value: FormatInfo::of(p.value),
            master: p.master.map(FormatInfo::of),
            accum: FormatInfo::of(p.accum),
        }
    }
}

/// One layer of the model.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct LayerInfo {
    /// Index from 0.
    pub index: usize,
    /// Kind with its sizes, e.g. "dense 8".
    pub kind: String,
    /// Input shape.
    pub input: ShapeInfo,
    /// Output shape.
    pub output: ShapeInfo,
    /// Weight values.
    pub weights: u32,
    /// Bias values.
    pub biases: u32,
    /// Multiply-accumulates of one forward pass.
    pub macs: u32,
    /// "frozen", "bias_only", "weights_only" or "full".
    pub train_mode: String,
    /// Weight formats (layers with parameters).
    pub weight: Option<ParamFormatsInfo>,
    /// Bias formats (layers with parameters).
    pub bias: Option<ParamFormatsInfo>,
    /// Output format.
    pub out: FormatInfo,
    /// Output-gradient format.
    pub grad: FormatInfo,
}

/// The model of the blob.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ModelInfo {
    /// Input shape.
    pub input: ShapeInfo,
    /// Input format.
    pub input_format: FormatInfo,
    /// Output shape.
    pub output: ShapeInfo,
    /// "squared_error" or "softmax_cross_entropy".
    pub loss: String,
    /// Layers in order.
    pub layers: Vec<LayerInfo>,
}

/// The dynamic fixed-point rule.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct DynamicInfo {
    /// Largest tolerated saturation rate, parts per million.
    pub max_rate_ppm: u32,
    /// Updates between adjustments.
    pub interval: u16,
}

/// Rounding per role.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct RoundingInfo {
    /// Forward activations.
    pub activations: String,
    /// Backward gradients.
    pub gradients: String,
    /// Weight updates.
    pub updates: String,
}

/// The training setup.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TrainingInfo {
    /// Samples per update.
    pub batch: u16,
    /// Learning rate.
    pub learning_rate: ScalarInfo,
    /// Momentum coefficient.
    pub momentum: ScalarInfo,
    /// L2 weight decay.
    pub weight_decay: ScalarInfo,
    /// Gradient clip bound.
    pub clip: ScalarInfo,
    /// Rounding per role.
    pub rounding: RoundingInfo,
    /// Dynamic fixed point, if used.
    pub dynamic: Option<DynamicInfo>,
    /// Seed of the generator.
    pub seed: u64,
}

/// Scaling of one input channel: `x = (raw − offset) · gain`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct ScaleInfo {
    /// Channel index.
    pub channel: usize,
    /// Subtracted from the reading.
    pub offset: f32,
    /// Multiplies the difference.
    pub gain: f32,
}

/// Current fraction bits of one layer in a checkpoint, beside those of the description.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct LayerFracs {
    /// Layer index.
    pub layer: usize,
    /// Output: current fraction bits.
    pub output: u8,
    /// Output: fraction bits of the description.
    pub output_planned: u8,
    /// Gradient: current.
    pub gradient: u8,
    /// Gradient: planned.
    pub gradient_planned: u8,
    /// Weight accumulator: current and planned (layers with parameters).
    pub weight_accum: Option<(u8, u8)>,
    /// Bias accumulator: current and planned (layers with parameters).
    pub bias_accum: Option<(u8, u8)>,
}

/// The training state of a checkpoint.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct StateInfo {
    /// Samples stepped.
    pub steps: u32,
    /// Updates applied.
    pub updates: u32,
    /// Generator state words.
    pub rng: [u32; 4],
    /// Fraction bits per layer.
    pub fracs: Vec<LayerFracs>,
}

/// One tensor with the statistics of its values in real units.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TensorInfo {
    /// Layer index.
    pub layer: usize,
    /// "weight", "bias", "master_weight", "master_bias", "momentum_weight" or
    /// "momentum_bias".
    pub role: String,
    /// Format of the values.
    pub format: FormatInfo,
    /// Number of values.
    pub elems: u32,
    /// Bytes of the values.
    pub bytes: usize,
    /// Smallest value.
    pub min: f64,
    /// Largest value.
    pub max: f64,
    /// Mean.
    pub mean: f64,
    /// Root mean square.
    pub rms: f64,
    /// Values at the word's minimum or maximum raw value.
    pub saturated: u32,
}

/// Everything known about a blob. Field names are stable; they are the `--json` output.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct InspectReport {
    /// The file's name as given.
    pub file: String,
    /// "model" or "checkpoint".
    pub kind: String,
    /// Blob format version.
    pub format_version: u16,
    /// Size of the blob, bytes.
    pub bytes: usize,
    /// The stored CRC-32, hexadecimal.
    pub crc: String,
    /// Whether the CRC matched (always true for a report: a mismatch is an error).
    pub crc_ok: bool,
    /// The model.
    pub model: ModelInfo,
    /// The training setup.
    pub training: TrainingInfo,
    /// Input scaling per channel; empty when inputs are already scaled.
    pub scaling: Vec<ScaleInfo>,
    /// Training state of a checkpoint.
    pub state: Option<StateInfo>,
    /// Every tensor.
    pub tensors: Vec<TensorInfo>,
    /// What the decoder accepts but training would get wrong, one sentence each: a master
    /// copy narrower than the values it feeds clamps them at the first copy.
    pub warnings: Vec<String>,
}
