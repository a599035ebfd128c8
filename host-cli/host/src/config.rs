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

// ---------------------------------------------------------------------------------------------
// Formats

/// A format as written in the config: fixed, or left to the quantizer.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum FormatChoice {
    /// A fixed Q-format.
    Fixed(QFormat),
    /// The word is fixed; the quantizer chooses the fraction bits from data.
    Auto {
        /// The storage word.
        word: Word,
    },
}

impl FormatChoice {
    /// The storage word.
    pub fn word(self) -> Word {
        match self {
            FormatChoice::Fixed(q) => q.word,
            FormatChoice::Auto { word } => word,
        }
    }
}

impl fmt::Display for FormatChoice {
    /// `Q3.12 (i16)` for a fixed format, `auto16` for an automatic one.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FormatChoice::Fixed(q) => write!(f, "{q}"),
            FormatChoice::Auto { word } => write!(f, "auto{}", word.bits()),
        }
    }
}

const FORMAT_HELP: &str = "write \"Qm.n\" with m integer and n fraction bits and m + n + 1 = \
                           8, 16 or 32 (for example \"Q3.12\"), \"Qn\" for Q0.n, \
                           { word = 16, frac = 12 }, or \"auto8\", \"auto16\", \"auto32\"";

/// The formats with the same integer bits `m` in each word, for a hint.
fn same_range_hint(m: i64) -> String {
    let fits: Vec<String> = [8i64, 16, 32]
        .iter()
        .filter_map(|&bits| {
            let n = bits - 1 - m;
            (0..=i64::from(MAX_FRAC))
                .contains(&n)
                .then(|| format!("Q{m}.{n} (i{bits})"))
        })
        .collect();
    if fits.is_empty() {
        String::new()
    } else {
        format!("; with {m} integer bits that is {}", fits.join(" or "))
    }
}

/// A Q-format that does not parse, with what is wrong and how to write it.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum FormatError {
    /// Not in the notation at all.
    #[error("`{0}` is not a Q-format; {FORMAT_HELP}")]
    Notation(String),
    /// Negative fraction bits.
    #[error("`{text}` has {frac} fraction bits; fraction bits are 0 to {MAX_FRAC}")]
    NegativeFrac {
        /// The text given.
        text: String,
        /// Its fraction bits.
        frac: i64,
    },
    /// More fraction bits than hone allows.
    #[error("`{text}` has {frac} fraction bits; hone allows at most {MAX_FRAC}")]
    TooManyFrac {
        /// The text given.
        text: String,
        /// Its fraction bits.
        frac: i64,
    },
    /// Integer and fraction bits that do not make a word.
    #[error(
        "`{text}` is {int} + {frac} + 1 = {bits} bits, but a word has 8, 16 or 32 bits{}",
        same_range_hint(*int)
    )]
    WordSize {
        /// The text given.
        text: String,
        /// Its integer bits.
        int: i64,
        /// Its fraction bits.
        frac: i64,
        /// Their sum plus the sign bit.
        bits: i64,
    },
    /// `auto` without a word size.
    #[error("`{0}` does not say the word size; write \"auto8\", \"auto16\" or \"auto32\"")]
    AutoWord(String),
    /// The core refuses the format.
    #[error("`{text}`: {source}")]
    Engine {
        /// The text given.
        text: String,
        /// The core's error.
        #[source]
        source: CoreError,
    },
}

/// Parses a Q-format in trade notation: `"Qm.n"` or `"Qn"` (= Q0.n), `m + n + 1` being 8, 16
/// or 32 and `n` at most 31.
///
/// # Errors
/// [`FormatError`] saying what is wrong and how to write it.
pub fn parse_qformat(text: &str) -> Result<QFormat, FormatError> {
    let t = text.trim();
    let body = t
        .strip_prefix('Q')
        .or_else(|| t.strip_prefix('q'))
        .ok_or_else(|| FormatError::Notation(text.to_owned()))?;
    let (m, n) = match body.split_once('.') {
        Some((m, n)) => (m, n),
        None => ("0", body),
    };
    let parse = |s: &str| -> Option<i64> {
        let digits = s.strip_prefix('-').unwrap_or(s);
        (!digits.is_empty() && digits.bytes().all(|b| b.is_ascii_digit()))
            .then(|| s.parse().ok())
            .flatten()
    };
    let (Some(m), Some(n)) = (parse(m), parse(n)) else {
        return Err(FormatError::Notation(text.to_owned()));
    };
    if n < 0 {
        return Err(FormatError::NegativeFrac {
            text: text.to_owned(),
            frac: n,
        });
    }
    if n > i64::from(MAX_FRAC) {
        return Err(FormatError::TooManyFrac {
            text: text.to_owned(),
            frac: n,
        });
    }
    let bits = m + n + 1;
    let word = u32::try_from(bits)
        .ok()
        .and_then(Word::from_bits)
        .ok_or_else(|| FormatError::WordSize {
            text: text.to_owned(),
            int: m,
            frac: n,
            bits,
        })?;
    // n ≤ MAX_FRAC was checked, so the format is valid.
    QFormat::new(word, n as u8).map_err(|source| FormatError::Engine {
        text: text.to_owned(),
        source,
    })
}

impl std::str::FromStr for FormatChoice {
    type Err = FormatError;

    /// Parses `"Qm.n"`, `"Qn"` or `"auto8"`/`"auto16"`/`"auto32"`.
    fn from_str(text: &str) -> Result<FormatChoice, FormatError> {
        let t = text.trim();
        if let Some(bits) = t.strip_prefix("auto") {
            return match bits.parse::<u32>().ok().and_then(Word::from_bits) {
                Some(word) => Ok(FormatChoice::Auto { word }),
                None => Err(FormatError::AutoWord(text.to_owned())),
            };
        }
        parse_qformat(t).map(FormatChoice::Fixed)
    }
}

impl<'de> Deserialize<'de> for FormatChoice {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<FormatChoice, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = FormatChoice;

            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a Q-format such as \"Q3.12\", \"auto16\", or { word = 16, frac = 12 }")
            }

            fn visit_str<E: de::Error>(self, v: &str) -> Result<FormatChoice, E> {
                v.parse().map_err(E::custom)
            }

            fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<FormatChoice, A::Error> {
                let mut word: Option<u32> = None;
                let mut frac: Option<u32> = None;
                while let Some(key) = map.next_key::<String>()? {
                    match key.as_str() {
                        "word" => word = Some(map.next_value()?),
                        "frac" => frac = Some(map.next_value()?),
                        other => return Err(de::Error::unknown_field(other, &["word", "frac"])),
                    }
                }
                let word = word.ok_or_else(|| de::Error::missing_field("word"))?;
                let frac = frac.ok_or_else(|| de::Error::missing_field("frac"))?;
                let w = Word::from_bits(word).ok_or_else(|| {
                    de::Error::custom(format!("word = {word}: a word has 8, 16 or 32 bits"))
                })?;
                if frac > u32::from(MAX_FRAC) {
                    return Err(de::Error::custom(format!(
                        "frac = {frac}: hone allows at most {MAX_FRAC} fraction bits"
                    )));
                }
                QFormat::new(w, frac as u8)
                    .map(FormatChoice::Fixed)
                    .map_err(de::Error::custom)
            }
        }
        d.deserialize_any(V)
    }
}

/// The role a format plays in a layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum FormatRole {
    /// Weight values.
    Weights,
    /// Bias values.
    Bias,
    /// Master copy of the weights.
    WeightsMaster,
    /// Master copy of the bias.
    BiasMaster,
    /// Layer outputs.
    Activations,
    /// Loss gradient of the layer's output.
    Gradients,
    /// Gradient accumulators and momentum buffers.
    Accumulators,
}

impl FormatRole {
    /// Every role, in the order of the documentation.
    pub const ALL: [FormatRole; 7] = [
        FormatRole::Weights,
        FormatRole::Bias,
        FormatRole::Activations,
        FormatRole::Gradients,
        FormatRole::Accumulators,
        FormatRole::WeightsMaster,
        FormatRole::BiasMaster,
    ];

    /// The config key of the role.
    pub fn key(self) -> &'static str {
        match self {
            FormatRole::Weights => "weights",
            FormatRole::Bias => "bias",
            FormatRole::WeightsMaster => "weights-master",
            FormatRole::BiasMaster => "bias-master",
            FormatRole::Activations => "activations",
            FormatRole::Gradients => "gradients",
            FormatRole::Accumulators => "accumulators",
        }
    }

    /// Whether the role may be `auto`: the quantizer picks weights, bias and activations from
    /// the float model and its outputs, gradients and accumulators from the float twin's
    /// gradients; only the master copies are always given.
    pub fn may_be_auto(self) -> bool {
        !matches!(self, FormatRole::WeightsMaster | FormatRole::BiasMaster)
    }

    /// Whether only layers with parameters have this role.
    pub fn needs_params(self) -> bool {
        !matches!(self, FormatRole::Activations | FormatRole::Gradients)
    }
}

impl fmt::Display for FormatRole {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.key())
    }
}

/// One format the quantizer must choose: which layer, which role, and the fixed word.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub struct AutoFormat {
    /// Layer index, from 0.
    pub layer: usize,
    /// Weights, bias, activations, gradients or accumulators.
    pub role: FormatRole,
    /// The storage word the chosen format must use.
    pub word: Word,
}

/// The formats of one layer as configured.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LayerFormats {
    /// Weight values.
    pub weights: FormatChoice,
    /// Bias values.
    pub bias: FormatChoice,
    /// Optional master copy of the weights.
    pub weights_master: Option<QFormat>,
    /// Optional master copy of the bias.
    pub bias_master: Option<QFormat>,
    /// Output activations.
    pub activations: FormatChoice,
    /// Loss gradient of the output.
    pub gradients: FormatChoice,
    /// Gradient accumulators and momentum.
    pub accumulators: FormatChoice,
}

/// One checked layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LayerConfig {
    /// What it computes.
    pub kind: LayerKind,
    /// What training may change (always frozen for layers without parameters).
    pub mode: TrainMode,
    /// Its formats.
    pub formats: LayerFormats,
}

/// The name of a layer kind as written in the config.
pub fn kind_name(kind: LayerKind) -> &'static str {
    match kind {
        LayerKind::Dense { .. } => "dense",
        LayerKind::Conv1d { .. } => "conv1d",
        LayerKind::Relu => "relu",
        LayerKind::LeakyRelu { .. } => "leaky-relu",
        LayerKind::HardTanh => "hard-tanh",
        LayerKind::ClippedRelu { .. } => "clipped-relu",
        LayerKind::Sigmoid => "sigmoid",
        LayerKind::Tanh => "tanh",
        LayerKind::AvgPool1d { .. } => "avg-pool",
        LayerKind::MaxPool1d { .. } => "max-pool",
    }
}

// ---------------------------------------------------------------------------------------------
// Names of rounding and train modes

/// A name that is not one of a table's names.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("`{given}` is not a {what}; use {}", one_of(expected))]
pub struct UnknownName {
    /// What the name was meant to be (`rounding`, `train mode`).
    pub what: &'static str,
    /// The name given.
    pub given: String,
    /// The names there are.
    pub expected: &'static [&'static str],
}

/// `a, b or c`.
fn one_of(names: &[&str]) -> String {
    match names {
        [] => String::new(),
        [one] => (*one).to_owned(),
        [init @ .., last] => format!("{} or {last}", init.join(", ")),
    }
}

/// Defines a name table: a newtype over a core enumeration whose `Display` and `FromStr` (and
/// serde's forms) write and read the one name of each variant. The config, the command line,
/// `hone sweep` and `hone inspect` all name these values through it.
macro_rules! name_table {
    ($(#[$doc:meta])* $name:ident($ty:ident), $what:literal, { $($variant:ident => $text:literal),+ $(,)? }) => {
        $(#[$doc])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
        pub struct $name(pub $ty);

        impl $name {
            /// Every value, in the order of [`Self::NAMES`].
            pub const ALL: &'static [$ty] = &[$($ty::$variant),+];
            /// Every name, in the order of [`Self::ALL`].
            pub const NAMES: &'static [&'static str] = &[$($text),+];

            /// The value's name.
            #[must_use]
            pub const fn as_str(self) -> &'static str {
                match self.0 {
                    $($ty::$variant => $text),+
                }
            }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(self.as_str())
            }
        }

        impl std::str::FromStr for $name {
            type Err = UnknownName;

            fn from_str(s: &str) -> Result<Self, UnknownName> {
                Self::ALL
                    .iter()
                    .map(|&v| Self(v))
                    .find(|v| v.as_str() == s)
                    .ok_or_else(|| UnknownName {
                        what: $what,
                        given: s.to_owned(),
                        expected: Self::NAMES,
                    })
            }
        }

        impl<'de> Deserialize<'de> for $name {
            fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                let s = String::deserialize(d)?;
                s.parse()
                    .map_err(|_| de::Error::unknown_variant(&s, Self::NAMES))
            }
        }

        impl serde::Serialize for $name {
            fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                s.serialize_str(self.as_str())
            }
        }
    };
}

name_table! {
    /// A rounding mode by name: `nearest-even`, `toward-zero`, `stochastic`.
    RoundingName(Rounding), "rounding", {
        NearestEven => "nearest-even",
        TowardZero => "toward-zero",
        Stochastic => "stochastic",
    }
}

name_table! {
    /// A train mode by name: `frozen`, `bias-only`, `weights-only`, `full`.
    ModeName(TrainMode), "train mode", {
        Frozen => "frozen",
        BiasOnly => "bias-only",
        WeightsOnly => "weights-only",
        Full => "full",
    }
}

// ---------------------------------------------------------------------------------------------
// The file as written

#[derive(Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "kebab-case")]
enum KindName {
    Dense,
    Conv1d,
    Relu,
    LeakyRelu,
    HardTanh,
    ClippedRelu,
    Sigmoid,
    Tanh,
    AvgPool,
    MaxPool,
}

#[derive(Deserialize, Clone, Copy, Debug)]
#[serde(rename_all = "kebab-case")]
enum LossName {
    SquaredError,
    SoftmaxCrossEntropy,
}

#[derive(Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "kebab-case")]
enum TaskName {
    Regression,
    Classification,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawConfig {
    loss: Spanned<LossName>,
    input: Spanned<RawInput>,
    #[serde(default)]
    formats: RawFormats,
    #[serde(default)]
    layer: Vec<Spanned<RawLayer>>,
    train: Spanned<RawTrain>,
    data: Spanned<RawData>,
    fleet: Option<Spanned<crate::fleet::spread::RawFleet>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawInput {
    channels: Spanned<u16>,
    length: Option<Spanned<u16>>,
    format: Option<Spanned<FormatChoice>>,
}

type Slot = Option<Spanned<FormatChoice>>;

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawFormats {
    weights: Slot,
    bias: Slot,
    weights_master: Slot,
    bias_master: Slot,
    activations: Slot,
    gradients: Slot,
    accumulators: Slot,
}

impl RawFormats {
    fn get(&self, role: FormatRole) -> Option<&Spanned<FormatChoice>> {
        match role {
            FormatRole::Weights => self.weights.as_ref(),
            FormatRole::Bias => self.bias.as_ref(),
            FormatRole::WeightsMaster => self.weights_master.as_ref(),
            FormatRole::BiasMaster => self.bias_master.as_ref(),
            FormatRole::Activations => self.activations.as_ref(),
            FormatRole::Gradients => self.gradients.as_ref(),
            FormatRole::Accumulators => self.accumulators.as_ref(),
        }
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawLayer {
    kind: Spanned<KindName>,
    units: Option<Spanned<u16>>,
    filters: Option<Spanned<u16>>,
    kernel: Option<Spanned<u16>>,
    stride: Option<Spanned<u16>>,
    window: Option<Spanned<u16>>,
    shift: Option<Spanned<u8>>,
    ceiling: Option<Spanned<u8>>,
    train: Option<Spanned<ModeName>>,
    weights: Slot,
    bias: Slot,
    weights_master: Slot,
    bias_master: Slot,
    activations: Slot,
    gradients: Slot,
    accumulators: Slot,
}

impl RawLayer {
    fn format(&self, role: FormatRole) -> Option<&Spanned<FormatChoice>> {
        match role {
            FormatRole::Weights => self.weights.as_ref(),
            FormatRole::Bias => self.bias.as_ref(),
            FormatRole::WeightsMaster => self.weights_master.as_ref(),
            FormatRole::BiasMaster => self.bias_master.as_ref(),
            FormatRole::Activations => self.activations.as_ref(),
            FormatRole::Gradients => self.gradients.as_ref(),
            FormatRole::Accumulators => self.accumulators.as_ref(),
        }
    }

    /// The size keys, with their values, for the check that each applies to the kind.
    fn sizes(&self) -> [(&'static str, Option<Range<usize>>); 7] {
        fn s<T>(v: &Option<Spanned<T>>) -> Option<Range<usize>> {
            v.as_ref().map(Spanned::span)
        }
        [
            ("units", s(&self.units)),
            ("filters", s(&self.filters)),
            ("kernel", s(&self.kernel)),
            ("stride", s(&self.stride)),
            ("window", s(&self.window)),
            ("shift", s(&self.shift)),
            ("ceiling", s(&self.ceiling)),
        ]
    }
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawTrain {
    epochs: Spanned<u32>,
    batch: Option<Spanned<u16>>,
    learning_rate: Spanned<f64>,
    momentum: Option<Spanned<f64>>,
    weight_decay: Option<Spanned<f64>>,
    clip: Option<Spanned<f64>>,
    seed: Option<u64>,
    rounding: Option<RawRounding>,
    dynamic: Option<RawDynamic>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawRounding {
    activations: Option<RoundingName>,
    gradients: Option<RoundingName>,
    updates: Option<RoundingName>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawDynamic {
    max_rate_ppm: Spanned<u32>,
    interval: Spanned<u16>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
struct RawData {
    target: Spanned<Names>,
    features: Option<Spanned<Vec<String>>>,
    #[serde(default)]
    ignore: Vec<String>,
    task: Option<Spanned<TaskName>>,
    classes: Option<Spanned<Vec<Label>>>,
    standardize: Option<bool>,
    holdout: Option<Spanned<f64>>,
    unit: Option<String>,
}

/// One column name, or a list of them.
struct Names(Vec<String>);

impl<'de> Deserialize<'de> for Names {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Names, D::Error> {
        struct V;
        impl<'de> Visitor<'de> for V {
            type Value = Names;

            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a column name or a list of column names")
            }

            fn visit_str<E: de::Error>(self, v: &str) -> Result<Names, E> {
                Ok(Names(vec![v.to_string()]))
            }

            fn visit_seq<A: de::SeqAccess<'de>>(self, mut seq: A) -> Result<Names, A::Error> {
                let mut v = Vec::new();
                while let Some(s) = seq.next_element::<String>()? {
                    v.push(s);
                }
                Ok(Names(v))
            }
        }
        d.deserialize_any(V)
    }
}

/// A class label: a string or an integer.
struct Label(String);

impl<'de> Deserialize<'de> for Label {
    fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Label, D::Error> {
        struct V;
        impl Visitor<'_> for V {
            type Value = Label;

            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a class label (a string or an integer)")
            }

            fn visit_str<E: de::Error>(self, v: &str) -> Result<Label, E> {
                Ok(Label(v.to_string()))
            }

            fn visit_i64<E: de::Error>(self, v: i64) -> Result<Label, E> {
                Ok(Label(v.to_string()))
            }

            fn visit_u64<E: de::Error>(self, v: u64) -> Result<Label, E> {
                Ok(Label(v.to_string()))
            }
        }
        d.deserialize_any(V)
    }
}

// ---------------------------------------------------------------------------------------------
// The checked form

/// The data section, checked.
#[derive(Clone, Debug, PartialEq)]
pub struct DataConfig {
    /// Columns and task.
    pub spec: DataSpec,
    /// The class labels in output order, if the config names them.
    pub classes: Option<Vec<String>>,
    /// Whether to standardize each input channel (see [`crate::data::Scaling`]).
    pub standardize: bool,
    /// Fraction of rows held out of training.
    pub holdout: f64,
    /// The unit of the regression target, as reports print it (`m³/m³`, `°C`); empty when the
    /// config names none.
    pub unit: String,
}

/// A checked config. See the [module docs](self) for the file format.
#[derive(Clone, Debug, PartialEq)]
pub struct Config {
    source: PathBuf,
    input: Shape,
    input_format: QFormat,
    layers: Vec<LayerConfig>,
    /// 1-based line and column of each `[[layer]]` table, for later errors.
    layer_at: Vec<(usize, usize)>,
    loss: Loss,
    epochs: u32,
    train: TrainDesc,
    data: DataConfig,
    fleet: Option<crate::fleet::spread::FleetSpread>,
}

/// Turns byte offsets into lines and columns and builds errors for one file.
struct Ctx<'a> {
    path: &'a Path,
    text: &'a str,
}

impl Ctx<'_> {
    fn line_col(&self, offset: usize) -> (usize, usize) {
        let offset = offset.min(self.text.len());
        let before = self.text.get(..offset).unwrap_or(self.text);
        let line = before.matches('\n').count() + 1;
        let start = before.rfind('\n').map_or(0, |i| i + 1);
        let column = before[start..].chars().count() + 1;
        (line, column)
    }

    fn err(&self, span: Option<Range<usize>>, field: &str, message: String) -> ConfigError {
        let (line, column) = match span {
            Some(s) => {
                let (l, c) = self.line_col(s.start);
                (Some(l), Some(c))
            }
            None => (None, None),
        };
        ConfigError::Invalid {
            path: self.path.to_path_buf(),
            line,
            column,
            field: field.to_string(),
            message,
        }
    }

    fn at<T>(&self, v: &Spanned<T>, field: &str, message: String) -> ConfigError {
        self.err(Some(v.span()), field, message)
    }
}

/// Turns a serde error path into a field path: drops the wrappers of `Spanned` values.
fn clean_path(path: &str) -> String {
    path.split('.')
        .filter(|seg| !seg.starts_with("$__serde_spanned"))
        .collect::<Vec<_>>()
        .join(".")
}

/// Rewrites serde's wording into the config's: keys, not fields.
fn serde_message(message: &str, field: &str) -> String {
    let m = message
        .replace("unknown field", "unknown key")
        .replace("missing field", "missing key");
    if message.starts_with("unknown field") {
        let table = match field.rsplit_once('.') {
            Some((t, _)) => format!("`{t}`"),
            None => "the top level".to_string(),
        };
        format!("{m}; check the spelling (keys are kebab-case) or remove it from {table}")
    } else if message.starts_with("missing field") {
        format!("{m}; add it")
    } else if message.starts_with("unknown variant") {
        m.replace("unknown variant", "unknown value")
    } else {
        // Rust type names mean little in a config file.
        m.replace("expected u8", "expected a whole number from 0 to 255")
            .replace("expected u16", "expected a whole number from 0 to 65535")
            .replace(
                "expected u32",
                "expected a whole number from 0 to 4294967295",
            )
            .replace("expected u64", "expected a whole number of 0 or more")
            .replace("expected f64", "expected a decimal number")
    }
}

impl Config {
    /// Reads and checks a config file.
    ///
    /// # Errors
    /// [`ConfigError::Io`] if the file cannot be read, [`ConfigError::Syntax`] for invalid
    /// TOML, [`ConfigError::Invalid`] for everything the checks find.
    pub fn load(path: &Path) -> Result<Config, ConfigError> {
        let text =
            hone_report::fsutil::read_text_limited(path, hone_report::fsutil::limits::CONFIG_BYTES, "config")
                .map_err(|source| ConfigError::Io {
                path: path.to_path_buf(),
                source,
            })?;
        Config::parse(path, &text)
    }

    /// Parses and checks config text; `source` names it in errors.
    ///
    /// ```
    /// use std::path::Path;
    /// use hone_host::config::Config;
    ///
    /// let text = r#"
    /// loss = "squared-error"
    /// [input]
    /// channels = 2
    /// [[layer]]
    /// kind = "dense"
    /// units = 1
    /// weights = "Q3.12"
    /// [train]
    /// epochs = 10
    /// learning-rate = 0.05
    /// [data]
    /// target = "vwc"
    /// ignore = ["unit"]
    /// "#;
    /// let config = Config::parse(Path::new("probe.toml"), text)?;
    /// // Bias and activations default to "auto16": the quantizer picks their fraction bits.
    /// let desc = config.model_desc_with(|_auto| 11)?;
    /// assert_eq!(desc.layers[0].weight.value.to_string(), "Q3.12 (i16)");
    /// assert_eq!(desc.layers[0].out.to_string(), "Q4.11 (i16)");
    ///
    /// let e = Config::parse(Path::new("probe.toml"), &text.replace("units = 1", "units = 0"));
    /// assert_eq!(
    ///     e.unwrap_err().to_string(),
    ///     "probe.toml:7:9: `layer[0].units`: is 0; a dense layer needs an output count of at least 1"
    /// );
    /// # Ok::<(), hone_host::config::ConfigError>(())
    /// ```
    ///
    /// # Errors
    /// As [`Config::load`], without the I/O error.
    pub fn parse(source: &Path, text: &str) -> Result<Config, ConfigError> {
        let ctx = Ctx { path: source, text };
        let de = toml::Deserializer::parse(text).map_err(|e| {
            let (line, column) = ctx.line_col(e.span().map_or(0, |s| s.start));
            ConfigError::Syntax {
                path: source.to_path_buf(),
                line,
                column,
                message: e.message().trim().to_string(),
            }
        })?;
        let raw: RawConfig = serde_path_to_error::deserialize(de).map_err(|e| {
            let field = clean_path(&e.path().to_string());
            let inner = e.into_inner();
            let field = if field == "." || field.is_empty() {
                "(top level)".to_string()
            } else {
                field
            };
            ctx.err(inner.span(), &field, serde_message(inner.message(), &field))
        })?;
        Checker { ctx: &ctx }.check(raw)
    }

    /// The file the config was read from.
    pub fn source(&self) -> &Path {
        &self.source
    }

    /// Shape of one input sample.
    pub fn input(&self) -> Shape {
        self.input
    }

    /// Format of the scaled input.
    pub fn input_format(&self) -> QFormat {
        self.input_format
    }

    /// The layers, in order.
    pub fn layers(&self) -> &[LayerConfig] {
        &self.layers
    }

    /// The loss.
    pub fn loss(&self) -> Loss {
        self.loss
    }

    /// Passes over the training data.
    pub fn epochs(&self) -> u32 {
        self.epochs
    }

    /// The training setup as the core takes it (batch, scalars, rounding, dynamic rule, seed).
    pub fn train(&self) -> &TrainDesc {
        &self.train
    }

    /// The data section.
    pub fn data(&self) -> &DataConfig {
        &self.data
    }

    /// The `[fleet]` section, if the config has one (see [`crate::fleet::spread`]).
    pub fn fleet(&self) -> Option<&crate::fleet::spread::FleetSpread> {
        self.fleet.as_ref()
    }

    /// The columns and task, as [`Dataset::load`] takes them.
    pub fn data_spec(&self) -> &DataSpec {
        &self.data.spec
    }

    /// Loads a data file with this config's column selection. The class list, for
    /// classification, is `model_classes` (those of a trained model, for calibration files)
    /// if given, else `data.classes` if the config has it, else the classes found in the file.
    ///
    /// # Errors
    /// As [`Dataset::load_with_classes`] and [`Dataset::load`].
    pub fn load_data(
        &self,
        path: &Path,
        model_classes: Option<&[String]>,
    ) -> Result<Dataset, DataError> {
        match model_classes.or(self.data.classes.as_deref()) {
            Some(c) if self.data.spec.task == Task::Classification => {
                Dataset::load_with_classes(path, &self.data.spec, c)
            }
            _ => Dataset::load(path, &self.data.spec),
        }
    }

    /// Every format left to the quantizer, in layer order.
    pub fn auto_formats(&self) -> Vec<AutoFormat> {
        let mut out = Vec::new();
        for (i, l) in self.layers.iter().enumerate() {
            let f = &l.formats;
            let roles: &[(FormatRole, FormatChoice)] = if l.kind.has_params() {
                &[
                    (FormatRole::Weights, f.weights),
                    (FormatRole::Bias, f.bias),
                    (FormatRole::Activations, f.activations),
                    (FormatRole::Gradients, f.gradients),
                    (FormatRole::Accumulators, f.accumulators),
                ]
            } else {
                &[
                    (FormatRole::Activations, f.activations),
                    (FormatRole::Gradients, f.gradients),
                ]
            };
            for &(role, choice) in roles {
                if let FormatChoice::Auto { word } = choice {
                    out.push(AutoFormat {
                        layer: i,
                        role,
                        word,
                    });
                }
            }
        }
        out
    }

    /// The model description, for a config without `auto` formats.
    ///
    /// # Errors
    /// [`ConfigError::Invalid`] naming the first `auto` format (use
    /// [`Config::model_desc_with`] then), or the core's objection to the description.
    pub fn model_desc(&self) -> Result<ModelDesc, ConfigError> {
        if let Some(a) = self.auto_formats().first() {
            return Err(self.layer_err(
                a.layer,
                &format!("layer[{}].{}", a.layer, a.role),
                format!(
                    "is auto{}, so the quantizer must choose its fraction bits from data \
                     before a model description exists; give a fixed format to build without \
                     data",
                    a.word.bits()
                ),
            ));
        }
        self.model_desc_with(|_| 0)
    }

    /// The model description, with the fraction bits of every `auto` format chosen by
    /// `resolve`, called once per entry of [`Config::auto_formats`]. Within a layer the
    /// activations and gradients are resolved first, then weights, bias and accumulators, so
    /// `resolve` must look at the [`AutoFormat`] it is given rather than count calls.
    ///
    /// # Errors
    /// [`ConfigError::Invalid`] if `resolve` returns more than 31 fraction bits, if a chosen
    /// format is finer than the master copy configured for it, or if the core rejects the
    /// description.
    pub fn model_desc_with<F>(&self, resolve: F) -> Result<ModelDesc, ConfigError>
    where
        F: FnMut(AutoFormat) -> u8,
    {
        self.build_desc(resolve, true)
    }

    /// [`Config::model_desc_with`]; without `final_choice`, the fraction bits of `auto`
    /// formats are placeholders, so the check that a master copy spans its values' range is
    /// left to the real choice.
    fn build_desc<F>(&self, mut resolve: F, final_choice: bool) -> Result<ModelDesc, ConfigError>
    where
        F: FnMut(AutoFormat) -> u8,
    {
        let mut layers = Vec::with_capacity(self.layers.len());
        for (i, l) in self.layers.iter().enumerate() {
            let mut fix =
                |role: FormatRole, choice: FormatChoice| -> Result<QFormat, ConfigError> {
                    match choice {
                        FormatChoice::Fixed(q) => Ok(q),
                        FormatChoice::Auto { word } => {
                            let frac = resolve(AutoFormat {
                                layer: i,
                                role,
                                word,
                            });
                            QFormat::new(word, frac).map_err(|_| {
                                self.layer_err(
                                    i,
                                    &format!("layer[{i}].{role}"),
                                    format!(
                                        "the quantizer chose {frac} fraction bits; at most \
                                     {MAX_FRAC} are possible"
                                    ),
                                )
                            })
                        }
                    }
                };
            let f = &l.formats;
            let out = fix(FormatRole::Activations, f.activations)?;
            let grad = fix(FormatRole::Gradients, f.gradients)?;
            let desc = if l.kind.has_params() {
                let w = fix(FormatRole::Weights, f.weights)?;
                let b = fix(FormatRole::Bias, f.bias)?;
                let accum = fix(FormatRole::Accumulators, f.accumulators)?;
                let chosen = |c: FormatChoice| final_choice || matches!(c, FormatChoice::Fixed(_));
                for (role, value, master, known) in [
                    (
                        FormatRole::WeightsMaster,
                        w,
                        f.weights_master,
                        chosen(f.weights),
                    ),
                    (FormatRole::BiasMaster, b, f.bias_master, chosen(f.bias)),
                ] {
                    if let Some(m) = master {
                        if m.frac < value.frac {
                            return Err(self.layer_err(
                                i,
                                &format!("layer[{i}].{role}"),
                                format!(
                                    "the master copy {m} is coarser than the values {value} \
                                     it feeds; give it at least {} fraction bits",
                                    value.frac
                                ),
                            ));
                        }
                        if known && m.max_value() < value.max_value() {
                            // The first copy into the master would clamp every value beyond
                            // its range, and each update would pull the values back to it.
                            let int_bits = |q: QFormat| q.word.bits() as i32 - 1 - q.frac as i32;
                            return Err(self.layer_err(
                                i,
                                &format!("layer[{i}].{role}"),
                                format!(
                                    "the master copy {m} holds values in [{}, {}), narrower \
                                     than the values {value} it feeds, [{}, {}); give it at \
                                     least {} integer bits, or leave the master out",
                                    m.min_value(),
                                    m.max_value() + m.step(),
                                    value.min_value(),
                                    value.max_value() + value.step(),
                                    int_bits(value)
                                ),
                            ));
                        }
                    }
                }
                LayerDesc {
                    kind: l.kind,
                    mode: l.mode,
                    weight: ParamFormats {
                        value: w,
                        master: f.weights_master,
                        accum,
                    },
                    bias: ParamFormats {
                        value: b,
                        master: f.bias_master,
                        accum,
                    },
                    out,
                    grad,
                }
            } else {
                LayerDesc::simple(l.kind, out, grad)
            };
            layers.push(desc);
        }
        ModelDesc::new(
            self.input,
            self.input_format,
            &layers,
            self.loss,
            self.train,
        )
        .map_err(|e| self.core_err(e, &layers))
    }

    /// Checks that a dataset fits the model: as many features as the input takes, as many
    /// target columns (regression) or classes (classification) as the model has outputs.
    ///
    /// # Errors
    /// [`ConfigError::Data`] saying what differs.
    pub fn check_dataset(&self, data: &Dataset) -> Result<(), ConfigError> {
        let err = |message: String| ConfigError::Data {
            config: self.source.clone(),
            data: data.source.clone(),
            message,
        };
        let inputs = self.input.size() as usize;
        if data.features.len() != inputs {
            return Err(err(format!(
                "the input takes channels × length = {} × {} = {inputs} values, the data has {} \
                 feature columns ({}); change `input` or the `data` column selection",
                self.input.channels,
                self.input.len,
                data.features.len(),
                abbreviate(&data.features)
            )));
        }
        let task = self.data.spec.task;
        if data.target.task() != task {
            return Err(err(format!(
                "the config is for {task}, the data were loaded for {}",
                data.target.task()
            )));
        }
        let outputs = self.outputs() as usize;
        let last = self.layers.len() - 1;
        match &data.target {
            Targets::Values { names, .. } if names.len() != outputs => Err(err(format!(
                "the model has {outputs} outputs, the data {} target columns; the last layer \
                 (layer[{last}]) must give one output per target",
                names.len()
            ))),
            Targets::Classes { names, .. } if names.len() != outputs => Err(err(format!(
                "the data have {} classes ({}), the model has {outputs} outputs; set the last \
                 layer (layer[{last}]) to {} outputs, or list the classes under `data.classes`",
                names.len(),
                abbreviate(names),
                names.len()
            ))),
            _ => Ok(()),
        }
    }

    /// Values the model produces per sample.
    pub fn outputs(&self) -> u32 {
        // Checked at load time, with provisional formats that do not change shapes.
        let layers: Vec<LayerDesc> = self
            .layers
            .iter()
            .map(|l| LayerDesc::simple(l.kind, QFormat::Q0_7, QFormat::Q0_7).with_mode(l.mode))
            .collect();
        let mut shape = self.input;
        for (i, l) in layers.iter().enumerate() {
            match hone_core::model::layer_geometry(i, shape, l) {
                Ok(g) => shape = g.output,
                Err(_) => return 0,
            }
        }
        shape.size()
    }

    fn layer_err(&self, layer: usize, field: &str, message: String) -> ConfigError {
        let (line, column) = self
            .layer_at
            .get(layer)
            .map_or((None, None), |&(l, c)| (Some(l), Some(c)));
        ConfigError::Invalid {
            path: self.source.clone(),
            line,
            column,
            field: field.to_string(),
            message,
        }
    }

    fn core_err(&self, e: CoreError, layers: &[LayerDesc]) -> ConfigError {
        match e {
            CoreError::Layer { layer, .. } => {
                let i = layer as usize;
                let message = describe_fault(self.input, layers, e, self.loss);
                self.layer_err(
                    i,
                    &format!("layer[{i}]"),
                    format!("({}) {message}", kind_name(layers[i].kind)),
                )
            }
            other => ConfigError::Invalid {
                path: self.source.clone(),
                line: None,
                column: None,
                field: "(model)".into(),
                message: format!("the engine rejects the description: {other}"),
            },
        }
    }
}

/// `a, b, c` for short lists, `a, b, … z (n names)` for long ones.
fn abbreviate(names: &[String]) -> String {
    if names.len() <= 6 {
        names.join(", ")
    } else {
        format!(
            "{}, {}, {}, … {} ({} names)",
            names[0],
            names[1],
            names[2],
            names[names.len() - 1],
            names.len()
        )
    }
}

/// The input shape of layer `i`, computed from the layers before it (all valid).
fn input_of(input: Shape, layers: &[LayerDesc], i: usize) -> Shape {
    let mut shape = input;
    for (j, l) in layers[..i].iter().enumerate() {
        if let Ok(g) = hone_core::model::layer_geometry(j, shape, l) {
            shape = g.output;
        }
    }
    shape
}

/// How to give layer `i` a longer input.
fn longer_input(i: usize) -> &'static str {
    if i == 0 {
        "give the input more samples per channel (`input.length`)"
    } else {
        "make the layers before it keep more samples"
    }
}

/// Explains a core layer fault with the sizes involved and what to change.
fn describe_fault(input: Shape, layers: &[LayerDesc], e: CoreError, loss: Loss) -> String {
    use hone_core::error::LayerFault;
    let CoreError::Layer { layer, fault } = e else {
        return e.to_string();
    };
    let i = layer as usize;
    let inp = input_of(input, layers, i);
    let shape = format!(
        "{} channel{} × {} sample{}",
        inp.channels,
        if inp.channels == 1 { "" } else { "s" },
        inp.len,
        if inp.len == 1 { "" } else { "s" }
    );
    match (fault, layers[i].kind) {
        (LayerFault::WindowTooLong, LayerKind::Conv1d { kernel, .. }) => format!(
            "the kernel of {kernel} samples is longer than the layer's input of {shape}; use a \
             kernel of at most {} or {}",
            inp.len,
            longer_input(i)
        ),
        (
            LayerFault::WindowTooLong,
            LayerKind::AvgPool1d { window, .. } | LayerKind::MaxPool1d { window, .. },
        ) => format!(
            "the window of {window} samples is longer than the layer's input of {shape}; use a \
             window of at most {} or {}",
            inp.len,
            longer_input(i)
        ),
        (LayerFault::TooLarge, _) => format!(
            "its input of {shape} makes more weights or multiply-accumulates than the engine's \
             32-bit counts hold; make the layer smaller"
        ),
        (LayerFault::LossOutput, _) => format!(
            "the last layer gives {} output(s), but {} needs one output per class and at least \
             two classes",
            layers
                .get(i)
                .and_then(|l| hone_core::model::layer_geometry(i, inp, l).ok())
                .map_or(0, |g| g.output.size()),
            match loss {
                Loss::SoftmaxCrossEntropy => "softmax-cross-entropy",
                Loss::SquaredError => "the loss",
            }
        ),
        (LayerFault::ZeroSize, _) if inp.size() == 0 => {
            format!("its input is empty ({shape}); an earlier layer leaves nothing")
        }
        (fault, _) => format!("{fault}; input {shape}"),
    }
}

// ---------------------------------------------------------------------------------------------
// Checks

struct Checker<'a> {
    ctx: &'a Ctx<'a>,
}

/// Default of `formats.weights`, `formats.bias` and `formats.activations`.
const DEFAULT_AUTO: FormatChoice = FormatChoice::Auto { word: Word::I16 };
/// Default of `input.format` for standardized inputs: Q3.12.
const DEFAULT_INPUT: QFormat = QFormat::new_unchecked(Word::I16, 12);
/// Default of `formats.gradients`: Q1.14.
const DEFAULT_GRADIENTS: QFormat = QFormat::new_unchecked(Word::I16, 14);
/// Default of `formats.accumulators`: Q7.24.
const DEFAULT_ACCUMULATORS: QFormat = QFormat::new_unchecked(Word::I32, 24);

/// Defaults of `[formats]`.
fn default_format(role: FormatRole) -> Option<FormatChoice> {
    match role {
        FormatRole::Weights | FormatRole::Bias | FormatRole::Activations => Some(DEFAULT_AUTO),
        FormatRole::Gradients => Some(FormatChoice::Fixed(DEFAULT_GRADIENTS)),
        FormatRole::Accumulators => Some(FormatChoice::Fixed(DEFAULT_ACCUMULATORS)),
        FormatRole::WeightsMaster | FormatRole::BiasMaster => None,
    }
}

impl Checker<'_> {
    fn err<T>(&self, v: &Spanned<T>, field: &str, message: String) -> ConfigError {
        self.ctx.at(v, field, message)
    }

    fn check(&self, raw: RawConfig) -> Result<Config, ConfigError> {
        let loss = match raw.loss.get_ref() {
            LossName::SquaredError => Loss::SquaredError,
            LossName::SoftmaxCrossEntropy => Loss::SoftmaxCrossEntropy,
        };
        let data = self.data(raw.data.get_ref(), &raw.loss)?;
        let (input, input_format) = self.input(&raw.input, data.standardize)?;
        check_feature_count(self.ctx, &raw, input)?;
        let defaults = self.defaults(&raw.formats)?;
        if raw.layer.is_empty() {
            return Err(self.ctx.err(
                None,
                "layer",
                "the model has no layers; add `[[layer]]` tables, for example \
                 `[[layer]]` with `kind = \"dense\"` and `units = 1`"
                    .into(),
            ));
        }
        if raw.layer.len() > MAX_LAYERS {
            return Err(self.err(
                &raw.layer[MAX_LAYERS],
                &format!("layer[{MAX_LAYERS}]"),
                format!(
                    "the model has {} layers, hone takes at most {MAX_LAYERS} (activations \
                     and pooling count as layers); merge or remove some",
                    raw.layer.len()
                ),
            ));
        }
        let mut layers = Vec::with_capacity(raw.layer.len());
        let mut layer_at = Vec::with_capacity(raw.layer.len());
        for (i, l) in raw.layer.iter().enumerate() {
            layers.push(self.layer(i, l, &defaults)?);
            layer_at.push(self.ctx.line_col(l.span().start));
        }
        let (epochs, train) = self.train(raw.train.get_ref())?;
        let fleet = match &raw.fleet {
            Some(f) => Some(crate::fleet::spread::check(
                f,
                &data.spec.features,
                &|span, field, message| self.ctx.err(span, field, message),
            )?),
            None => None,
        };
        let config = Config {
            source: self.ctx.path.to_path_buf(),
            input,
            input_format,
            layers,
            layer_at,
            loss,
            epochs,
            train,
            data,
            fleet,
        };
        // Shapes, loss and training through the core, with provisional fraction bits for the
        // auto formats (fraction bits never change shapes).
        config.build_desc(|a| (a.word.bits() / 2) as u8, false)?;
        self.outputs_match(&config, &raw)?;
        Ok(config)
    }

    fn outputs_match(&self, config: &Config, raw: &RawConfig) -> Result<(), ConfigError> {
        let outputs = config.outputs() as usize;
        let last = config.layers.len() - 1;
        let at = &raw.layer[last];
        let field = format!("layer[{last}]");
        let spec = &config.data.spec;
        match spec.task {
            Task::Regression if outputs != spec.target.len() => Err(self.err(
                at,
                &field,
                format!(
                    "the model gives {outputs} outputs, but `data.target` names {} column(s) \
                     ({}); the last layer must give one output per target column",
                    spec.target.len(),
                    spec.target.join(", ")
                ),
            )),
            Task::Classification => match &config.data.classes {
                Some(c) if c.len() != outputs => Err(self.err(
                    at,
                    &field,
                    format!(
                        "the model gives {outputs} outputs, but `data.classes` lists {} classes; \
                         the last layer must give one output per class",
                        c.len()
                    ),
                )),
                _ => Ok(()),
            },
            Task::Regression => Ok(()),
        }
    }

    fn input(
        &self,
        raw: &Spanned<RawInput>,
        standardize: bool,
    ) -> Result<(Shape, QFormat), ConfigError> {
        let r = raw.get_ref();
        let channels = *r.channels.get_ref();
        if channels == 0 {
            return Err(self.err(
                &r.channels,
                "input.channels",
                "must be at least 1; give the number of input channels (for tabular data, \
                 the number of feature columns)"
                    .into(),
            ));
        }
        if standardize && usize::from(channels) > MAX_SCALED_CHANNELS {
            return Err(self.err(
                &r.channels,
                "input.channels",
                format!(
                    "is {channels}, but a model blob stores the scaling of at most \
                     {MAX_SCALED_CHANNELS} channels; set `data.standardize = false` and scale \
                     the inputs before they reach the model, or use fewer channels"
                ),
            ));
        }
        let len = match &r.length {
            Some(l) if *l.get_ref() == 0 => {
                return Err(self.err(
                    l,
                    "input.length",
                    "must be at least 1 sample per channel (1 for tabular data)".into(),
                ))
            }
            Some(l) => *l.get_ref(),
            None => 1,
        };
        let format = match &r.format {
            Some(f) => match f.get_ref() {
                FormatChoice::Fixed(q) => *q,
                FormatChoice::Auto { .. } => {
                    return Err(self.err(
                        f,
                        "input.format",
                        "the input format must be fixed (the device quantizes its readings \
                         into it); write for example \"Q3.12\""
                            .into(),
                    ))
                }
            },
            None if standardize => DEFAULT_INPUT,
            None => {
                return Err(self.err(
                    raw,
                    "input.format",
                    "with `data.standardize = false` the inputs keep their raw range, so give \
                     `format` explicitly, wide enough for the largest reading (4095 ADC counts \
                     need \"Q12.19\", for example)"
                        .into(),
                ))
            }
        };
        Ok((Shape { channels, len }, format))
    }

    fn check_role(
        &self,
        role: FormatRole,
        v: &Spanned<FormatChoice>,
        field: &str,
    ) -> Result<(), ConfigError> {
        if let FormatChoice::Auto { word } = v.get_ref() {
            if !role.may_be_auto() {
                return Err(self.err(
                    v,
                    field,
                    format!(
                        "auto{} is not for master copies: a master's range is that of the \
                         values it feeds and its fraction bits are the precision you ask \
                         for; give {role} a fixed format such as \"Q3.28\"",
                        word.bits(),
                    ),
                ));
            }
        }
        Ok(())
    }

    fn defaults(&self, raw: &RawFormats) -> Result<[Option<FormatChoice>; 7], ConfigError> {
        let mut out = [None; 7];
        for (k, role) in FormatRole::ALL.into_iter().enumerate() {
            out[k] = match raw.get(role) {
                Some(v) => {
                    self.check_role(role, v, &format!("formats.{role}"))?;
                    Some(*v.get_ref())
                }
                None => default_format(role),
            };
        }
        Ok(out)
    }

    fn size<T: Copy + Into<u32>>(
        &self,
        v: &Option<Spanned<T>>,
        i: usize,
        key: &str,
        kind: &str,
        what: &str,
        default: Option<T>,
    ) -> Result<T, ConfigError> {
        let field = format!("layer[{i}].{key}");
        match v {
            Some(s) if (*s.get_ref()).into() == 0 => Err(self.err(
                s,
                &field,
                format!("is 0; a {kind} layer needs {what} of at least 1"),
            )),
            Some(s) => Ok(*s.get_ref()),
            None => default.ok_or_else(|| {
                self.ctx.err(
                    None,
                    &field,
                    format!("is missing; a {kind} layer needs `{key}` ({what})"),
                )
            }),
        }
    }

    fn layer(
        &self,
        i: usize,
        spanned: &Spanned<RawLayer>,
        defaults: &[Option<FormatChoice>; 7],
    ) -> Result<LayerConfig, ConfigError> {
        let l = spanned.get_ref();
        let kind_name_str = match l.kind.get_ref() {
            KindName::Dense => "dense",
            KindName::Conv1d => "conv1d",
            KindName::Relu => "relu",
            KindName::LeakyRelu => "leaky-relu",
            KindName::HardTanh => "hard-tanh",
            KindName::ClippedRelu => "clipped-relu",
            KindName::Sigmoid => "sigmoid",
            KindName::Tanh => "tanh",
            KindName::AvgPool => "avg-pool",
            KindName::MaxPool => "max-pool",
        };
        let allowed: &[&str] = match l.kind.get_ref() {
            KindName::Dense => &["units"],
            KindName::Conv1d => &["filters", "kernel", "stride"],
            KindName::AvgPool | KindName::MaxPool => &["window", "stride"],
            KindName::LeakyRelu => &["shift"],
            KindName::ClippedRelu => &["ceiling"],
            _ => &[],
        };
        for (key, span) in l.sizes() {
            if let Some(span) = span {
                if !allowed.contains(&key) {
                    let takes = if allowed.is_empty() {
                        "takes no size keys".to_string()
                    } else {
                        format!(
                            "takes {}",
                            allowed
                                .iter()
                                .map(|k| format!("`{k}`"))
                                .collect::<Vec<_>>()
                                .join(", ")
                        )
                    };
                    return Err(self.ctx.err(
                        Some(span),
                        &format!("layer[{i}].{key}"),
                        format!(
                            "does not apply to a {kind_name_str} layer, which {takes}; remove it"
                        ),
                    ));
                }
            }
        }
        let k = kind_name_str;
        let kind = match l.kind.get_ref() {
            KindName::Dense => LayerKind::Dense {
                units: self.size(&l.units, i, "units", k, "an output count", None)?,
            },
            KindName::Conv1d => LayerKind::Conv1d {
                filters: self.size(&l.filters, i, "filters", k, "an output-channel count", None)?,
                kernel: self.size(&l.kernel, i, "kernel", k, "a kernel length", None)?,
                stride: self.size(&l.stride, i, "stride", k, "a stride", Some(1))?,
            },
            KindName::AvgPool | KindName::MaxPool => {
                let window = self.size(&l.window, i, "window", k, "a window length", None)?;
                let stride = self.size(&l.stride, i, "stride", k, "a stride", Some(window))?;
                if *l.kind.get_ref() == KindName::AvgPool {
                    LayerKind::AvgPool1d { window, stride }
                } else {
                    LayerKind::MaxPool1d { window, stride }
                }
            }
            KindName::LeakyRelu => {
                let shift = self.size(&l.shift, i, "shift", k, "a slope shift", None)?;
                if shift > 15 {
                    let s = l.shift.as_ref().map(Spanned::span);
                    return Err(self.ctx.err(
                        s,
                        &format!("layer[{i}].shift"),
                        format!(
                            "is {shift}; the negative slope 2^-shift takes a shift of 1 to 15 \
                             (3 gives 1/8)"
                        ),
                    ));
                }
                LayerKind::LeakyRelu { shift }
            }
            KindName::ClippedRelu => LayerKind::ClippedRelu {
                ceiling: self.size(&l.ceiling, i, "ceiling", k, "a ceiling", None)?,
            },
            KindName::Relu => LayerKind::Relu,
            KindName::HardTanh => LayerKind::HardTanh,
            KindName::Sigmoid => LayerKind::Sigmoid,
            KindName::Tanh => LayerKind::Tanh,
        };
        let params = kind.has_params();
        let mode = match (&l.train, params) {
            (None, true) => TrainMode::Full,
            (None, false) => TrainMode::Frozen,
            (Some(m), true) => m.get_ref().0,
            (Some(m), false) => {
                return Err(self.err(
                    m,
                    &format!("layer[{i}].train"),
                    format!("a {k} layer has no parameters to train; remove `train`"),
                ))
            }
        };
        let mut chosen = *defaults;
        for (slot, role) in FormatRole::ALL.into_iter().enumerate() {
            if let Some(v) = l.format(role) {
                let field = format!("layer[{i}].{role}");
                if role.needs_params() && !params {
                    return Err(self.err(
                        v,
                        &field,
                        format!(
                            "a {k} layer has no parameters, so no {role}; remove it (such \
                             layers take only `activations` and `gradients`)"
                        ),
                    ));
                }
                self.check_role(role, v, &field)?;
                chosen[slot] = Some(*v.get_ref());
            }
        }
        let get = |role: FormatRole| -> Option<FormatChoice> {
            FormatRole::ALL
                .iter()
                .position(|r| *r == role)
                .and_then(|p| chosen[p])
        };
        let fixed = |role: FormatRole| -> Option<QFormat> {
            match get(role) {
                Some(FormatChoice::Fixed(q)) => Some(q),
                _ => None,
            }
        };
        // Every role with a default is Some, so the fallbacks below are those same defaults;
        // masters may be None; the role checks keep masters fixed.
        let formats = LayerFormats {
            weights: get(FormatRole::Weights).unwrap_or(DEFAULT_AUTO),
            bias: get(FormatRole::Bias).unwrap_or(DEFAULT_AUTO),
            weights_master: if params {
                fixed(FormatRole::WeightsMaster)
            } else {
                None
            },
            bias_master: if params {
                fixed(FormatRole::BiasMaster)
            } else {
                None
            },
            activations: get(FormatRole::Activations).unwrap_or(DEFAULT_AUTO),
            gradients: get(FormatRole::Gradients).unwrap_or(FormatChoice::Fixed(DEFAULT_GRADIENTS)),
            accumulators: get(FormatRole::Accumulators)
                .unwrap_or(FormatChoice::Fixed(DEFAULT_ACCUMULATORS)),
        };
        Ok(LayerConfig {
            kind,
            mode,
            formats,
        })
    }

    fn scalar(
        &self,
        v: &Spanned<f64>,
        field: &str,
        allow_zero: bool,
    ) -> Result<QScalar, ConfigError> {
        let x = *v.get_ref();
        let step = 2f64.powi(-i32::from(SCALAR_FRAC));
        let max = (f64::from(i32::MAX)) * step;
        if !x.is_finite() {
            return Err(self.err(v, field, format!("is {x}; give a finite decimal")));
        }
        if x < 0.0 {
            return Err(self.err(v, field, format!("is {x}; it must not be negative")));
        }
        if x == 0.0 {
            if allow_zero {
                return Ok(QScalar::ZERO);
            }
            return Err(self.err(
                v,
                field,
                "is 0, so nothing would be learned; give a positive value such as 0.01".into(),
            ));
        }
        let q = match QScalar::from_f64(x, SCALAR_FRAC) {
            Ok(q) if q.raw != 0 => q,
            Ok(_) => {
                return Err(self.err(
                    v,
                    field,
                    format!(
                        "{x} is below the fixed-point step 2^-{SCALAR_FRAC} ≈ {step:.2e} of \
                         training scalars and would become 0; use at least {:.2e}",
                        step / SCALAR_TOLERANCE
                    ),
                ))
            }
            Err(_) => {
                return Err(self.err(
                    v,
                    field,
                    format!(
                        "{x} is beyond the largest training scalar, {max:.8} (i32 with \
                         {SCALAR_FRAC} fraction bits); use a smaller value"
                    ),
                ))
            }
        };
        let rel = (q.to_f64() - x).abs() / x;
        if rel > SCALAR_TOLERANCE {
            return Err(self.err(
                v,
                field,
                format!(
                    "{x} cannot be held within 1 % by a scalar with {SCALAR_FRAC} fraction bits \
                     (step {step:.2e}): it would become {:.3e}, off by {:.1} %; use {:.2e} or \
                     more",
                    q.to_f64(),
                    rel * 100.0,
                    step / SCALAR_TOLERANCE
                ),
            ));
        }
        Ok(q)
    }

    fn train(&self, r: &RawTrain) -> Result<(u32, TrainDesc), ConfigError> {
        if *r.epochs.get_ref() == 0 {
            return Err(self.err(
                &r.epochs,
                "train.epochs",
                "is 0; give at least 1 pass over the data".into(),
            ));
        }
        let batch = match &r.batch {
            Some(b) if *b.get_ref() == 0 => {
                return Err(self.err(
                    b,
                    "train.batch",
                    "is 0; a batch holds at least 1 sample".into(),
                ))
            }
            Some(b) => *b.get_ref(),
            None => 1,
        };
        let lr = self.scalar(&r.learning_rate, "train.learning-rate", false)?;
        let opt = |v: &Option<Spanned<f64>>, field: &str| -> Result<QScalar, ConfigError> {
            v.as_ref()
                .map_or(Ok(QScalar::ZERO), |s| self.scalar(s, field, true))
        };
        let momentum = opt(&r.momentum, "train.momentum")?;
        if let Some(m) = &r.momentum {
            if *m.get_ref() >= 1.0 || momentum.to_f64() >= 1.0 {
                return Err(self.err(
                    m,
                    "train.momentum",
                    format!(
                        "is {}; momentum must be below 1 or the updates grow without bound \
                         (0.9 is common)",
                        m.get_ref()
                    ),
                ));
            }
        }
        let weight_decay = opt(&r.weight_decay, "train.weight-decay")?;
        let clip = opt(&r.clip, "train.clip")?;
        let round = |r: Option<RoundingName>| r.map_or(Rounding::NearestEven, |r| r.0);
        let rounding = match &r.rounding {
            Some(p) => RoundingPlan {
                activations: round(p.activations),
                gradients: round(p.gradients),
                updates: round(p.updates),
            },
            None => RoundingPlan::NEAREST,
        };
        let dynamic = match &r.dynamic {
            Some(d) => {
                if *d.interval.get_ref() == 0 {
                    return Err(self.err(
                        &d.interval,
                        "train.dynamic.interval",
                        "is 0; give the number of updates between adjustments, 1 or more".into(),
                    ));
                }
                if *d.max_rate_ppm.get_ref() > 1_000_000 {
                    return Err(self.err(
                        &d.max_rate_ppm,
                        "train.dynamic.max-rate-ppm",
                        "is more than 1 000 000 parts per million (100 %); 100 (0.01 %) is a \
                         common choice"
                            .into(),
                    ));
                }
                Some(DynamicRule {
                    max_rate_ppm: *d.max_rate_ppm.get_ref(),
                    interval: *d.interval.get_ref(),
                })
            }
            None => None,
        };
        let desc = TrainDesc {
            batch,
            lr,
            momentum,
            weight_decay,
            clip,
            rounding,
            dynamic,
            seed: r.seed.unwrap_or(0),
        };
        Ok((*r.epochs.get_ref(), desc))
    }

    fn data(&self, r: &RawData, loss: &Spanned<LossName>) -> Result<DataConfig, ConfigError> {
        let implied = match loss.get_ref() {
            LossName::SquaredError => Task::Regression,
            LossName::SoftmaxCrossEntropy => Task::Classification,
        };
        let task = match &r.task {
            Some(t) => {
                let given = match t.get_ref() {
                    TaskName::Regression => Task::Regression,
                    TaskName::Classification => Task::Classification,
                };
                if given != implied {
                    return Err(self.err(
                        t,
                        "data.task",
                        format!(
                            "is {given}, but the loss is for {implied}; use `loss = \"{}\"` for \
                             {given}, or remove `task`",
                            match given {
                                Task::Regression => "squared-error",
                                Task::Classification => "softmax-cross-entropy",
                            }
                        ),
                    ));
                }
                given
            }
            None => implied,
        };
        let target = r.target.get_ref().0.clone();
        if target.is_empty() {
            return Err(self.err(
                &r.target,
                "data.target",
                "names no column; name the column the model predicts".into(),
            ));
        }
        if task == Task::Classification && target.len() != 1 {
            return Err(self.err(
                &r.target,
                "data.target",
                format!(
                    "names {} columns; classification takes one column of class labels",
                    target.len()
                ),
            ));
        }
        // Each column one role.
        let mut seen: Vec<(&str, &str)> = Vec::new();
        let features: &[String] = r.features.as_ref().map_or(&[], |f| f.get_ref());
        for (names, role) in [
            (&target[..], "data.target"),
            (&r.ignore[..], "data.ignore"),
            (features, "data.features"),
        ] {
            for n in names {
                if let Some((_, prev)) = seen.iter().find(|(s, _)| *s == n) {
                    let span = match role {
                        "data.features" => r.features.as_ref().map(Spanned::span),
                        _ => Some(r.target.span()),
                    };
                    return Err(self.ctx.err(
                        span,
                        role,
                        if *prev == role {
                            format!("names `{n}` twice; name each column once")
                        } else {
                            format!(
                                "names `{n}`, which `{prev}` names too; give each column one \
                                 role"
                            )
                        },
                    ));
                }
                seen.push((n, role));
            }
        }
        let classes = match &r.classes {
            Some(c) if task == Task::Regression => {
                return Err(self.err(
                    c,
                    "data.classes",
                    "applies only to classification; remove it".into(),
                ))
            }
            Some(c) => {
                let names: Vec<String> = c.get_ref().iter().map(|l| l.0.clone()).collect();
                if names.len() < 2 {
                    return Err(self.err(
                        c,
                        "data.classes",
                        "lists fewer than 2 classes; classification needs at least two".into(),
                    ));
                }
                for (j, n) in names.iter().enumerate() {
                    if names[..j].contains(n) {
                        return Err(self.err(
                            c,
                            "data.classes",
                            format!("lists `{n}` twice; list each class once"),
                        ));
                    }
                }
                Some(names)
            }
            None => None,
        };
        let holdout = match &r.holdout {
            Some(h) if !(0.0..1.0).contains(h.get_ref()) => {
                return Err(self.err(
                    h,
                    "data.holdout",
                    format!(
                        "is {}; give a fraction in [0, 1), such as 0.2 to keep a fifth of the \
                         rows for evaluation",
                        h.get_ref()
                    ),
                ))
            }
            Some(h) => *h.get_ref(),
            None => 0.0,
        };
        let features = match &r.features {
            Some(f) if f.get_ref().is_empty() => {
                return Err(self.err(
                    f,
                    "data.features",
                    "is empty; list the input columns, or remove `features` to use every \
                     column that is not a target or ignored"
                        .into(),
                ))
            }
            Some(f) => FeatureSelect::Named(f.get_ref().clone()),
            None => FeatureSelect::AllOther,
        };
        Ok(DataConfig {
            spec: DataSpec {
                features,
                target,
                ignore: r.ignore.clone(),
                task,
            },
            classes,
            standardize: r.standardize.unwrap_or(true),
            holdout,
            unit: r.unit.clone().unwrap_or_default(),
        })
    }
}

/// Checks that named features agree with the input shape; called after both are read.
fn check_feature_count(ctx: &Ctx<'_>, raw: &RawConfig, input: Shape) -> Result<(), ConfigError> {
    if let Some(f) = &raw.data.get_ref().features {
        let n = f.get_ref().len();
        if n != input.size() as usize {
            return Err(ctx.at(
                f,
                "data.features",
                format!(
                    "lists {n} columns, but the input takes channels × length = {} × {} = {} \
                     values; list exactly that many, or change `input`",
                    input.channels,
                    input.len,
                    input.size()
                ),
            ));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn parse(text: &str) -> Result<Config, ConfigError> {
        Config::parse(Path::new("m.toml"), text)
    }

    const BASE: &str = r#"
loss = "squared-error"
[input]
channels = 2
[[layer]]
kind = "dense"
units = 4
[[layer]]
kind = "relu"
[[layer]]
kind = "dense"
units = 1
[train]
epochs = 3
learning-rate = 0.01
[data]
target = "y"
"#;

    #[test]
    fn q_notation() {
        let q = |s: &str| parse_qformat(s).unwrap();
        assert_eq!(q("Q3.12"), QFormat::new(Word::I16, 12).unwrap());
        assert_eq!(q("Q15"), QFormat::Q0_15);
        assert_eq!(q("Q7"), QFormat::Q0_7);
        assert_eq!(q("q15.16"), QFormat::Q15_16);
        assert_eq!(q("Q-2.17"), QFormat::new(Word::I16, 17).unwrap());
        assert_eq!(q("Q31"), QFormat::new(Word::I32, 31).unwrap());
        let e = parse_qformat("Q3.13").unwrap_err().to_string();
        assert!(e.contains("17 bits") && e.contains("Q3.12 (i16)"), "{e}");
        assert!(parse_qformat("Q-1.3")
            .unwrap_err()
            .to_string()
            .contains("3 bits"));
        assert!(parse_qformat("Q-8.39")
            .unwrap_err()
            .to_string()
            .contains("at most 31"));
        for bad in ["x", "Q", "Q3.", "Q.3", "Q3.x", "3.12", "Q+3.12", "Q3.-12"] {
            assert!(parse_qformat(bad).is_err(), "{bad}");
        }
        assert_eq!(
            "auto8".parse::<FormatChoice>().unwrap(),
            FormatChoice::Auto { word: Word::I8 }
        );
        assert!("auto".parse::<FormatChoice>().is_err());
        assert!("auto12".parse::<FormatChoice>().is_err());
        assert_eq!(FormatChoice::Fixed(QFormat::Q7_8).to_string(), "Q7.8 (i16)");
    }

    #[test]
    fn base_builds_with_defaults() {
        let c = parse(BASE).unwrap();
        assert_eq!(c.input(), Shape::vector(2));
        assert_eq!(c.input_format(), QFormat::new(Word::I16, 12).unwrap());
        assert_eq!(c.epochs(), 3);
        assert_eq!(c.train().batch, 1);
        assert_eq!(c.train().lr.frac, SCALAR_FRAC);
        assert_eq!(c.train().lr.raw, 167_772); // 0.01 · 2^24 = 167 772.16
        assert_eq!(c.layers()[0].mode, TrainMode::Full);
        assert_eq!(c.layers()[1].mode, TrainMode::Frozen);
        assert_eq!(c.data_spec().task, Task::Regression);
        assert_eq!(c.data_spec().features, FeatureSelect::AllOther);
        assert_eq!(c.outputs(), 1);
        // Weights, bias, activations of both dense layers and the relu's activations.
        assert_eq!(c.auto_formats().len(), 7);
        assert!(c.model_desc().is_err());
        let d = c
            .model_desc_with(|a| match a.role {
                FormatRole::Weights => 13,
                _ => 10,
            })
            .unwrap();
        assert_eq!(
            d.layers[0].weight.value,
            QFormat::new(Word::I16, 13).unwrap()
        );
        assert_eq!(d.layers[0].out, QFormat::new(Word::I16, 10).unwrap());
        assert_eq!(d.layers[0].grad, QFormat::new(Word::I16, 14).unwrap());
        assert_eq!(
            d.layers[0].weight.accum,
            QFormat::new(Word::I32, 24).unwrap()
        );
        let e = c.model_desc_with(|_| 32).unwrap_err();
        assert_eq!(e.field(), Some("layer[0].activations"));
    }

    #[test]
    fn doc_example_parses() {
        let src = include_str!("config.rs");
        let start = src.find("//! ```toml\n").unwrap() + "//! ```toml\n".len();
        let end = start + src[start..].find("//! ```\n").unwrap();
        let toml: String = src[start..end]
            .lines()
            .map(|l| {
                l.strip_prefix("//! ")
                    .unwrap_or(l.trim_start_matches("//!"))
            })
            .collect::<Vec<_>>()
            .join("\n");
        let c = parse(&toml).unwrap();
        assert_eq!(c.layers().len(), 3);
        assert_eq!(c.layers()[0].mode, TrainMode::BiasOnly);
        assert_eq!(
            c.layers()[0].formats.weights,
            FormatChoice::Fixed(QFormat::Q0_7)
        );
        assert_eq!(
            c.layers()[0].formats.weights_master,
            Some(QFormat::new(Word::I32, 28).unwrap())
        );
        assert_eq!(c.train().rounding.updates, Rounding::Stochastic);
        assert_eq!(c.train().rounding.gradients, Rounding::NearestEven);
        assert_eq!(
            c.train().dynamic,
            Some(DynamicRule {
                max_rate_ppm: 100,
                interval: 50
            })
        );
        assert_eq!(c.data().holdout, 0.2);
        // Q5.10 weights would outgrow the inherited Q3.28 master; Q3.12 fits under it.
        assert!(c.model_desc_with(|_| 10).is_err());
        let d = c.model_desc_with(|_| 12).unwrap();
        assert_eq!(
            d.layers[2].weight.value,
            QFormat::new(Word::I16, 12).unwrap()
        );
        assert_eq!(d.layers[0].weight.value, QFormat::Q0_7);
    }

    fn expect_err(text: &str, field: &str, needle: &str) -> ConfigError {
        let e = parse(text).unwrap_err();
        let msg = e.to_string();
        assert!(msg.contains(needle), "{msg}");
        assert_eq!(e.field(), Some(field), "{msg}");
        assert!(msg.starts_with("m.toml:"), "{msg}");
        e
    }

    #[test]
    fn layer_errors_point_at_the_layer() {
        let t = BASE.replace("kind = \"relu\"", "kind = \"max-pool\"\nwindow = 8");
        let e = expect_err(&t, "layer[1]", "window of 8 samples is longer");
        assert_eq!(e.line(), Some(8));
        let t = BASE.replace("kind = \"relu\"", "kind = \"relu\"\nunits = 3");
        expect_err(&t, "layer[1].units", "does not apply to a relu layer");
        let t = BASE.replace("kind = \"relu\"", "kind = \"relu\"\ntrain = \"full\"");
        expect_err(&t, "layer[1].train", "no parameters");
        let t = BASE.replace("kind = \"relu\"", "kind = \"relu\"\nweights = \"Q3.12\"");
        expect_err(&t, "layer[1].weights", "no parameters");
        let t = BASE.replace("units = 1", "units = 2");
        expect_err(&t, "layer[2]", "gives 2 outputs");
        let t = BASE.replace("kind = \"relu\"", "kind = \"leaky-relu\"\nshift = 16");
        expect_err(&t, "layer[1].shift", "1 to 15");
        let t = BASE.replace("kind = \"relu\"", "kind = \"conv1d\"\nfilters = 2");
        expect_err(&t, "layer[1].kernel", "is missing");
    }

    #[test]
    fn train_scalars() {
        let t = BASE.replace(
            "learning-rate = 0.01",
            "learning-rate = 0.01\nmomentum = 1.0",
        );
        expect_err(&t, "train.momentum", "below 1");
        let t = BASE.replace("learning-rate = 0.01", "learning-rate = 1e-7");
        expect_err(&t, "train.learning-rate", "within 1 %");
        let t = BASE.replace("learning-rate = 0.01", "learning-rate = 1e-9");
        expect_err(&t, "train.learning-rate", "would become 0");
        let t = BASE.replace("learning-rate = 0.01", "learning-rate = 200.0");
        expect_err(&t, "train.learning-rate", "beyond the largest");
        let t = BASE.replace("learning-rate = 0.01", "learning-rate = nan");
        expect_err(&t, "train.learning-rate", "finite");
        let t = BASE.replace("learning-rate = 0.01", "learning-rate = 0.01\nclip = 0");
        assert!(parse(&t).unwrap().train().clip.is_zero());
    }

    #[test]
    fn formats_and_roles() {
        let t = BASE.replacen(
            "[[layer]]",
            "[formats]\nweights-master = \"auto32\"\n[[layer]]",
            1,
        );
        expect_err(&t, "formats.weights-master", "not for master copies");
        // Gradients and accumulators may be left to the quantizer.
        let t = BASE.replacen(
            "[[layer]]",
            "[formats]\ngradients = \"auto16\"\naccumulators = \"auto32\"\n[[layer]]",
            1,
        );
        let c = parse(&t).expect("auto gradients and accumulators");
        let roles: Vec<(usize, FormatRole)> =
            c.auto_formats().iter().map(|a| (a.layer, a.role)).collect();
        assert!(roles.contains(&(1, FormatRole::Gradients)), "{roles:?}");
        assert!(roles.contains(&(2, FormatRole::Accumulators)), "{roles:?}");
        assert!(!roles.contains(&(1, FormatRole::Accumulators)), "{roles:?}");
        let t = BASE.replace(
            "units = 4",
            "units = 4\nweights = \"Q3.12\"\nweights-master = \"Q1.6\"",
        );
        expect_err(&t, "layer[0].weights-master", "coarser");
        // Finer but narrower: Q6.1 values reach ±64, a Q3.28 master holds ±8.
        let t = BASE.replace(
            "units = 4",
            "units = 4\nweights = \"Q6.1\"\nweights-master = \"Q3.28\"",
        );
        expect_err(&t, "layer[0].weights-master", "at least 6 integer bits");
        // The same master for auto8 weights the quantizer puts in Q6.1.
        let t = BASE.replace(
            "units = 4",
            "units = 4\nweights = \"auto8\"\nweights-master = \"Q3.28\"",
        );
        let c = parse(&t).expect("parses");
        let e = c
            .model_desc_with(|_| 1)
            .expect_err("a Q6.1 value under a Q3.28 master");
        assert!(e.to_string().contains("layer[0].weights-master"), "{e}");
        assert!(c.model_desc_with(|_| 4).is_ok(), "Q3.4 fits a Q3.28 master");
        let t = BASE.replace("units = 4", "units = 4\nbias = { word = 16, frac = 40 }");
        expect_err(&t, "layer[0].bias", "at most 31");
        let t = BASE.replace("units = 4", "units = 4\nbias = { word = 12, frac = 4 }");
        expect_err(&t, "layer[0].bias", "8, 16 or 32");
        let t = BASE.replace("units = 4", "units = 4\nbias = { word = 16, fract = 4 }");
        expect_err(&t, "layer[0].bias", "unknown key `fract`");
    }

    #[test]
    fn input_and_data() {
        let t = BASE.replace("target = \"y\"", "target = \"y\"\nstandardize = false");
        expect_err(&t, "input.format", "explicitly");
        let t = BASE.replace("channels = 2", "channels = 65");
        expect_err(&t, "input.channels", "at most 64 channels");
        let t = t.replace("target = \"y\"", "target = \"y\"\nstandardize = false");
        let t = t.replace("channels = 65", "channels = 65\nformat = \"Q12.19\"");
        assert_eq!(parse(&t).unwrap().input(), Shape::vector(65));
        let t = BASE.replace("channels = 2", "channels = 2\nformat = \"auto16\"");
        expect_err(&t, "input.format", "must be fixed");
        let t = BASE.replace("target = \"y\"", "target = \"y\"\nfeatures = [\"a\"]");
        expect_err(&t, "data.features", "lists 1 columns");
        let t = BASE.replace("target = \"y\"", "target = \"y\"\nignore = [\"y\"]");
        expect_err(&t, "data.ignore", "names `y`");
        let t = BASE.replace(
            "target = \"y\"",
            "target = \"y\"\ntask = \"classification\"",
        );
        expect_err(&t, "data.task", "softmax-cross-entropy");
        let t = BASE.replace("target = \"y\"", "target = \"y\"\nholdout = 1.0");
        expect_err(&t, "data.holdout", "[0, 1)");
        let t = BASE.replace("target = \"y\"", "target = [\"y\", \"z\"]");
        expect_err(&t, "layer[2]", "2 column(s)");
        let t = BASE
            .replace("squared-error", "softmax-cross-entropy")
            .replace("units = 1", "units = 3")
            .replace(
                "target = \"y\"",
                "target = \"zone\"\nclasses = [0, 1, \"x\"]",
            );
        let c = parse(&t).unwrap();
        assert_eq!(
            c.data().classes.as_deref(),
            Some(&["0".to_string(), "1".into(), "x".into()][..])
        );
        assert_eq!(c.data_spec().task, Task::Classification);
    }

    #[test]
    fn names_read_back_and_unknown_names_list_the_known_ones() {
        for &r in RoundingName::ALL {
            assert_eq!(RoundingName(r).to_string().parse(), Ok(RoundingName(r)));
        }
        for &m in ModeName::ALL {
            assert_eq!(ModeName(m).to_string().parse(), Ok(ModeName(m)));
        }
        assert_eq!(
            RoundingName(Rounding::NearestEven).to_string(),
            "nearest-even"
        );
        assert_eq!(ModeName(TrainMode::BiasOnly).to_string(), "bias-only");
        let e = "nearest_even".parse::<RoundingName>().unwrap_err();
        assert_eq!(
            e.to_string(),
            "`nearest_even` is not a rounding; use nearest-even, toward-zero or stochastic"
        );
        let e = "all".parse::<ModeName>().unwrap_err();
        assert_eq!(
            e.to_string(),
            "`all` is not a train mode; use frozen, bias-only, weights-only or full"
        );
    }
}
