//! Formats as written in a config: `Qm.n`, `auto`, and the roles a format fills.

use super::*;

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

pub(super) const FORMAT_HELP: &str =
    "write \"Qm.n\" with m integer and n fraction bits and m + n + 1 = \
                           8, 16 or 32 (for example \"Q3.12\"), \"Qn\" for Q0.n, \
                           { word = 16, frac = 12 }, or \"auto8\", \"auto16\", \"auto32\"";

/// The formats with the same integer bits `m` in each word, for a hint.
pub(super) fn same_range_hint(m: i64) -> String {
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
