//! The model and training description, read from TOML.
//!
//! One file says what the network is (input, layers, loss), which number formats its tensors
//! use, how it trains, and how to read its data. [`Config::load`] reads and checks it in full:
//! every problem found is a [`ConfigError`] naming the file, the line and column, and the field
//! (`layer[2].units`), with what to do about it. The checked [`Config`] builds the core's
//! [`ModelDesc`] once the quantizer has chosen the formats left to it
//! ([`Config::model_desc_with`]).
//!
//! Keys are kebab-case. An unknown key anywhere is an error, so a typo never passes silently.
//! Layers are counted from 0 in the order of their `[[layer]]` tables.
//!
//! # Q-formats
//! A format is written the way the trade writes it, **`"Qm.n"`**: `n` fraction bits and `m`
//! integer bits beside the sign bit, in a word of `m + n + 1` bits, which must be 8, 16 or 32.
//! `"Q3.12"` is an `i16` with step 2^-12 and range [−8, 8). `m` may be negative for small
//! values such as gradients (`"Q-2.17"` is an `i16` with step 2^-17 and range [−1/4, 1/4)).
//! The short form `"Qn"` means `"Q0.n"` (`"Q15"` is Q0.15, an `i16`). A table
//! `{ word = 16, frac = 12 }` says the same as `"Q3.12"`. Fraction bits are at most 31.
//!
//! Weights, bias, activations, gradients and accumulators may instead be **`"auto8"`,
//! `"auto16"` or `"auto32"`**: the word is fixed (it decides memory) and the quantizer
//! chooses the fraction bits from the data (see [`crate::quant`] for the headroom policy).
//! Master copies are always given, with at least the fraction and integer bits of the values
//! they feed.
//!
//! # Reference
//! Top level:
//!
//! | key | type | default | meaning |
//! |---|---|---|---|
//! | `loss` | string | required | `"squared-error"` (regression) or `"softmax-cross-entropy"` (classification) |
//!
//! `[input]`, one sample as the model sees it after scaling:
//!
//! | key | type | default | meaning |
//! |---|---|---|---|
//! | `channels` | integer ≥ 1 | required | channels; for tabular data, one per feature |
//! | `length` | integer ≥ 1 | 1 | samples per channel (a window) |
//! | `format` | Q-format | `"Q3.12"` | format of the scaled input; required when `data.standardize = false` |
//!
//! The data columns feed the input channel-major: channel 0's `length` samples first.
//!
//! `[formats]`, defaults for every layer (each `[[layer]]` may override any of them):
//!
//! | key | type | default | meaning |
//! |---|---|---|---|
//! | `weights` | Q-format or auto | `"auto16"` | weights of dense and conv1d layers |
//! | `bias` | Q-format or auto | `"auto16"` | biases |
//! | `activations` | Q-format or auto | `"auto16"` | each layer's output |
//! | `gradients` | Q-format or auto | `"Q1.14"` | loss gradient of each layer's output |
//! | `accumulators` | Q-format or auto | `"Q7.24"` | mini-batch gradient sums, also the momentum buffers |
//! | `weights-master` | Q-format | none | a finer master copy of the weights that receives the updates |
//! | `bias-master` | Q-format | none | the same for the biases |
//!
//! `[[layer]]`, one table per layer, in order:
//!
//! | key | for kinds | default | meaning |
//! |---|---|---|---|
//! | `kind` | all | required | `dense`, `conv1d`, `relu`, `leaky-relu`, `hard-tanh`, `clipped-relu`, `sigmoid`, `tanh`, `avg-pool`, `max-pool` |
//! | `units` | dense | required | outputs; the input is flattened |
//! | `filters` | conv1d | required | output channels |
//! | `kernel` | conv1d | required | kernel length in samples (no padding) |
//! | `stride` | conv1d, pools | 1 for conv1d, `window` for pools | step between windows |
//! | `window` | pools | required | pooling window in samples, per channel |
//! | `shift` | leaky-relu | required | negative slope 2^-shift, 1 to 15 (3 gives 1/8) |
//! | `ceiling` | clipped-relu | required | upper clamp, a whole number 1 to 255 |
//! | `train` | dense, conv1d | `"full"` | `"frozen"`, `"bias-only"`, `"weights-only"` or `"full"`: what training may change |
//! | `weights` … `bias-master` | as in `[formats]` | `[formats]` | this layer's formats |
//!
//! Layers without parameters take only `activations` and `gradients` among the formats.
//!
//! `[train]`:
//!
//! | key | type | default | meaning |
//! |---|---|---|---|
//! | `epochs` | integer ≥ 1 | required | passes over the training data |
//! | `batch` | integer ≥ 1 | 1 | samples per update |
//! | `learning-rate` | decimal > 0 | required | step size |
//! | `momentum` | decimal in [0, 1) | 0 | μ in `v ← μv + g`; 0 is off |
//! | `weight-decay` | decimal ≥ 0 | 0 | L2 decay λ; 0 is off |
//! | `clip` | decimal ≥ 0 | 0 | bound on each averaged gradient; 0 is off |
//! | `seed` | integer ≥ 0 | 0 | seed of the core's generator (stochastic rounding), also for the host's shuffles and hold-out split |
//!
//! The four decimals become fixed-point scalars with [`SCALAR_FRAC`] = 24 fraction bits (step
//! 2^-24 ≈ 6.0e-8, at most 127.99999994). A value that would change by more than 1 % in that
//! conversion is refused with the nearest value that works.
//!
//! `[train.rounding]`, per role, each `"nearest-even"` (default), `"toward-zero"` or
//! `"stochastic"`: `activations` (forward outputs), `gradients` (backward values and
//! gradient sums), `updates` (learning-rate scaling, momentum, decay, weight writes).
//!
//! `[train.dynamic]`, present to turn dynamic fixed point on: every `interval` updates
//! (integer ≥ 1), a tensor whose saturation rate exceeds `max-rate-ppm` (parts per million,
//! 0 to 1 000 000) gives up a fraction bit, and one whose values would saturate at no more than
//! that rate with one more fraction bit (values in the outer half of the range) gains one.
//!
//! `[data]`:
//!
//! | key | type | default | meaning |
//! |---|---|---|---|
//! | `target` | name or list | required | target column(s): one for classification, one per output for regression |
//! | `features` | list of names | every other column | input columns, in the model's input order |
//! | `ignore` | list of names | none | columns not read (ids, timestamps) |
//! | `task` | string | from `loss` | `"regression"` or `"classification"`; must agree with `loss` |
//! | `classes` | list | found in the data | class labels in output order, e.g. `[0, 1, 2, 3]` or `["dry", "wet"]` |
//! | `standardize` | bool | true | scale each input channel to mean 0, standard deviation 1 over the training data |
//! | `holdout` | decimal in [0, 1) | 0 | fraction of the rows kept out of training for evaluation |
//! | `unit` | string | none | unit of the regression target, printed beside every RMSE and MAE (`"m³/m³"`) |
//!
//! # Complete example
//! ```toml
//! # Soil-moisture probe: volumetric water content from the ADC reading and temperature.
//! loss = "squared-error"
//!
//! [input]
//! channels = 2          # raw_counts, temp_c
//! format = "Q3.12"      # standardized inputs, range ±8
//!
//! [formats]
//! weights = "Q7"        # i8 weights (Q0.7) ...
//! weights-master = "Q3.28"   # ... updated through an i32 master copy
//! bias = "auto16"
//! activations = "auto16"
//! gradients = "Q1.14"
//! accumulators = { word = 32, frac = 24 }
//!
//! [[layer]]
//! kind = "dense"
//! units = 8
//! train = "bias-only"   # per-unit offsets only, weights stay in flash
//!
//! [[layer]]
//! kind = "leaky-relu"
//! shift = 3
//!
//! [[layer]]
//! kind = "dense"
//! units = 1
//! weights = "auto16"    # this layer keeps 16-bit weights
//!
//! [train]
//! epochs = 30
//! batch = 4
//! learning-rate = 0.02
//! momentum = 0.9
//! weight-decay = 0.0001
//! clip = 4.0
//! seed = 7
//!
//! [train.rounding]
//! updates = "stochastic"
//!
//! [train.dynamic]
//! max-rate-ppm = 100
//! interval = 50
//!
//! [data]
//! target = "vwc"
//! ignore = ["unit"]
//! features = ["raw_counts", "temp_c"]
//! holdout = 0.2
//! ```

use std::fmt;
use std::ops::Range;
use std::path::{Path, PathBuf};

use hone_core::blob::MAX_SCALED_CHANNELS;
use hone_core::model::{
    DynamicRule, LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
    MAX_LAYERS,
};
use hone_core::num::{QFormat, QScalar, Rounding, RoundingPlan, Word, MAX_FRAC};
use hone_core::Error as CoreError;
use serde::de::{self, Deserializer, MapAccess, Visitor};
use serde::Deserialize;
use toml::Spanned;

use crate::data::{DataError, DataSpec, Dataset, FeatureSelect, Targets, Task};

mod checked;
mod checks;
mod format;
mod names;
mod raw;

pub use checked::*;
use checks::*;
pub use format::*;
pub use names::*;
use raw::*;

/// Fraction bits of the fixed-point training scalars (learning rate, momentum, weight decay,
/// clip): step 2^-24 ≈ 6.0e-8, largest value 2^7 − 2^-24.
pub const SCALAR_FRAC: u8 = 24;

/// Largest relative change a training scalar may undergo when converted to fixed point.
const SCALAR_TOLERANCE: f64 = 0.01;

/// An error in a config file, with its place and what to do.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    /// The file could not be read.
    #[error("{}: cannot read the config file: {source}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// Operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The file is not valid TOML.
    #[error("{}:{line}:{column}: not valid TOML: {message}", path.display())]
    Syntax {
        /// The file.
        path: PathBuf,
        /// 1-based line.
        line: usize,
        /// 1-based column (characters).
        column: usize,
        /// What the parser found.
        message: String,
    },
    /// A field is missing, unknown, of the wrong type, or has a value that cannot work.
    #[error("{}{}: `{field}`: {message}", path.display(), position(*line, *column))]
    Invalid {
        /// The file.
        path: PathBuf,
        /// 1-based line, where known.
        line: Option<usize>,
        /// 1-based column, where known.
        column: Option<usize>,
        /// Path of the field, such as `layer[2].units` or `train.learning-rate`.
        field: String,
        /// What is wrong and what to do.
        message: String,
    },
    /// The config and a data file do not agree.
    #[error("{} does not fit the data in {}: {message}", config.display(), data.display())]
    Data {
        /// The config file.
        config: PathBuf,
        /// The data file.
        data: PathBuf,
        /// What differs and what to do.
        message: String,
    },
}

fn position(line: Option<usize>, column: Option<usize>) -> String {
    match (line, column) {
        (Some(l), Some(c)) => format!(":{l}:{c}"),
        (Some(l), None) => format!(":{l}"),
        _ => String::new(),
    }
}

impl ConfigError {
    /// The 1-based line the error points at, if it points at one.
    pub fn line(&self) -> Option<usize> {
        match self {
            ConfigError::Syntax { line, .. } => Some(*line),
            ConfigError::Invalid { line, .. } => *line,
            ConfigError::Io { .. } | ConfigError::Data { .. } => None,
        }
    }

    /// The field path the error is about, if any.
    pub fn field(&self) -> Option<&str> {
        match self {
            ConfigError::Invalid { field, .. } => Some(field),
            _ => None,
        }
    }
}

#[cfg(test)]
mod tests;
