//! The file as written: serde mirror types of the TOML schema, with the spans of their values.

use super::*;

#[derive(Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "kebab-case")]
pub(super) enum KindName {
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
pub(super) enum LossName {
    SquaredError,
    SoftmaxCrossEntropy,
}

#[derive(Deserialize, Clone, Copy, Debug, PartialEq, Eq)]
#[serde(rename_all = "kebab-case")]
pub(super) enum TaskName {
    Regression,
    Classification,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub(super) struct RawConfig {
    pub(super) loss: Spanned<LossName>,
    pub(super) input: Spanned<RawInput>,
    #[serde(default)]
    pub(super) formats: RawFormats,
    #[serde(default)]
    pub(super) layer: Vec<Spanned<RawLayer>>,
    pub(super) train: Spanned<RawTrain>,
    pub(super) data: Spanned<RawData>,
    pub(super) fleet: Option<Spanned<crate::fleet::spread::RawFleet>>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub(super) struct RawInput {
    pub(super) channels: Spanned<u16>,
    pub(super) length: Option<Spanned<u16>>,
    pub(super) format: Option<Spanned<FormatChoice>>,
}

pub(super) type Slot = Option<Spanned<FormatChoice>>;

#[derive(Deserialize, Default)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub(super) struct RawFormats {
    pub(super) weights: Slot,
    pub(super) bias: Slot,
    pub(super) weights_master: Slot,
    pub(super) bias_master: Slot,
    pub(super) activations: Slot,
    pub(super) gradients: Slot,
    pub(super) accumulators: Slot,
}

impl RawFormats {
    pub(super) fn get(&self, role: FormatRole) -> Option<&Spanned<FormatChoice>> {
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
pub(super) struct RawLayer {
    pub(super) kind: Spanned<KindName>,
    pub(super) units: Option<Spanned<u16>>,
    pub(super) filters: Option<Spanned<u16>>,
    pub(super) kernel: Option<Spanned<u16>>,
    pub(super) stride: Option<Spanned<u16>>,
    pub(super) window: Option<Spanned<u16>>,
    pub(super) shift: Option<Spanned<u8>>,
    pub(super) ceiling: Option<Spanned<u8>>,
    pub(super) train: Option<Spanned<ModeName>>,
    pub(super) weights: Slot,
    pub(super) bias: Slot,
    pub(super) weights_master: Slot,
    pub(super) bias_master: Slot,
    pub(super) activations: Slot,
    pub(super) gradients: Slot,
    pub(super) accumulators: Slot,
}

impl RawLayer {
    pub(super) fn format(&self, role: FormatRole) -> Option<&Spanned<FormatChoice>> {
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
    pub(super) fn sizes(&self) -> [(&'static str, Option<Range<usize>>); 7] {
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
pub(super) struct RawTrain {
    pub(super) epochs: Spanned<u32>,
    pub(super) batch: Option<Spanned<u16>>,
    pub(super) learning_rate: Spanned<f64>,
    pub(super) momentum: Option<Spanned<f64>>,
    pub(super) weight_decay: Option<Spanned<f64>>,
    pub(super) clip: Option<Spanned<f64>>,
    pub(super) seed: Option<u64>,
    pub(super) rounding: Option<RawRounding>,
    pub(super) dynamic: Option<RawDynamic>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub(super) struct RawRounding {
    pub(super) activations: Option<RoundingName>,
    pub(super) gradients: Option<RoundingName>,
    pub(super) updates: Option<RoundingName>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub(super) struct RawDynamic {
    pub(super) max_rate_ppm: Spanned<u32>,
    pub(super) interval: Spanned<u16>,
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields, rename_all = "kebab-case")]
pub(super) struct RawData {
    pub(super) target: Spanned<Names>,
    pub(super) features: Option<Spanned<Vec<String>>>,
    #[serde(default)]
    pub(super) ignore: Vec<String>,
    pub(super) task: Option<Spanned<TaskName>>,
    pub(super) classes: Option<Spanned<Vec<Label>>>,
    pub(super) standardize: Option<bool>,
    pub(super) holdout: Option<Spanned<f64>>,
    pub(super) unit: Option<String>,
}

/// One column name, or a list of them.
pub(super) struct Names(pub(super) Vec<String>);

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
pub(super) struct Label(pub(super) String);

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
