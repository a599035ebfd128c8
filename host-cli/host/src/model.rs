//! The float model file: a trained base model in `f64` with everything needed to use it
//! again — architecture, input scaling, the names of its inputs and outputs, the weights.
//!
//! # Format
//! A JSON document (UTF-8, one object) with these keys:
//!
//! | key | content |
//! |---|---|
//! | `format` | the string `"hone-float-model"` |
//! | `version` | `1` |
//! | `input` | `{ "channels": c, "len": l }` |
//! | `loss` | `"SquaredError"` or `"SoftmaxCrossEntropy"` |
//! | `layers` | per layer: `kind` (as in the core's `LayerKind`, e.g. `{"Dense": {"units": 8}}` or `"Relu"`), `mode`, `weights` and `bias` (arrays of numbers, row-major as the core stores them; empty for layers without parameters) |
//! | `scaling` | per input channel `{ "offset": o, "gain": g }`: `x = (raw − o)·g` before the model (empty: none) |
//! | `features` | input column names in input order |
//! | `outputs` | target column names (regression) or class names in output order (classification) |
//! | `history` | per epoch of the training that made it: `{ "epoch", "loss", "metric", "eval_loss", "eval_metric" }` (the last two on the rows held out, or null) |
//!
//! Numbers are written with Rust's shortest round-trip formatting, so reading a file back gives
//! the very same `f64` weights. A key not listed here is an error, as in the config file, so a
//! misspelt key is not silently ignored. Every scaling offset must be a finite number and every
//! gain a finite number other than zero.

use std::path::Path;

use hone_core::blob::ChannelScale;
use hone_core::model::{LayerKind, Loss, Shape, TrainMode};
use serde::{Deserialize, Serialize};

/// The largest magnitude of a parameter: the largest value of any format the device has
/// (an `i32` word with no fraction bits).
const MAX_PARAM: f64 = 2_147_483_648.0;

/// The value of the `format` key.
pub const FORMAT_NAME: &str = "hone-float-model";
/// The version this build writes and reads.
pub const FORMAT_VERSION: u32 = 1;

/// One layer of a float model.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FloatLayer {
    /// What it computes.
    pub kind: LayerKind,
    /// What fine-tuning may change.
    pub mode: TrainMode,
    /// Weights, row-major (`[units][inputs]` or `[filters][channels][kernel]`).
    pub weights: Vec<f64>,
    /// Bias.
    pub bias: Vec<f64>,
}

/// One epoch of the training that produced a model.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EpochRecord {
    /// Epoch number, from 1.
    pub epoch: u32,
    /// Mean training loss.
    pub loss: f64,
    /// Accuracy in % (classification) or mean absolute error (regression) on the training data.
    pub metric: f64,
    /// Mean loss on the rows held out of training (`data.holdout`), if any.
    #[serde(default)]
    pub eval_loss: Option<f64>,
    /// The metric on the held-out rows, if any.
    #[serde(default)]
    pub eval_metric: Option<f64>,
    /// Root-mean-square error on the training data, target units (regression only).
    #[serde(default)]
    pub rmse: Option<f64>,
    /// Root-mean-square error on the held-out rows, if any (regression only).
    #[serde(default)]
    pub eval_rmse: Option<f64>,
}

/// A trained float model. See the [module docs](self).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FloatModel {
    /// Always [`FORMAT_NAME`].
    pub format: String,
    /// Always [`FORMAT_VERSION`].
    pub version: u32,
    /// Input shape.
    pub input: Shape,
    /// Loss.
    pub loss: Loss,
    /// Layers.
    pub layers: Vec<FloatLayer>,
    /// Input scaling per channel.
    #[serde(with = "scaling_entries")]
    pub scaling: Vec<ChannelScale>,
    /// Input column names.
    pub features: Vec<String>,
    /// Output names: target columns or classes.
    pub outputs: Vec<String>,
    /// Training history.
    pub history: Vec<EpochRecord>,
}

/// The `scaling` entries, read with unknown keys refused (the core's [`ChannelScale`] reads
/// leniently, as the blob decoder does not need names).
mod scaling_entries {
    use hone_core::blob::ChannelScale;
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    #[derive(Serialize, Deserialize)]
    #[serde(deny_unknown_fields)]
    struct Entry {
        offset: f32,
        gain: f32,
    }

    pub fn serialize<S: Serializer>(v: &[ChannelScale], s: S) -> Result<S::Ok, S::Error> {
        s.collect_seq(v.iter().map(|c| Entry {
            offset: c.offset,
            gain: c.gain,
        }))
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<ChannelScale>, D::Error> {
        Ok(Vec::<Entry>::deserialize(d)?
            .into_iter()
            .map(|e| ChannelScale {
                offset: e.offset,
                gain: e.gain,
            })
            .collect())
    }
}

/// A problem with a float model file.
#[derive(Debug, thiserror::Error)]
pub enum ModelError {
    /// Reading or writing failed.
    #[error("{path}: {source}")]
    Io {
        /// The file.
        path: String,
        /// The cause.
        #[source]
        source: std::io::Error,
    },
    /// Not valid JSON or not the expected structure.
    #[error("{path}:{line}:{column}: not a hone float model: {message}")]
    Parse {
        /// The file.
        path: String,
        /// Line, from 1.
        line: usize,
        /// Column, from 1.
        column: usize,
        /// What the parser said.
        message: String,
    },
    /// Valid structure, wrong content.
    #[error("{path}: {source}")]
    Check {
        /// The file.
        path: String,
        /// What is wrong and what to do.
        #[source]
        source: ModelFault,
    },
    /// The model could not be written as JSON.
    #[error("{path}: {message}")]
    Invalid {
        /// The file.
        path: String,
        /// What is wrong and what to do.
        message: String,
    },
}

/// What is wrong with a float model's content (its structure parsed).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ModelFault {
    /// The `format` field names another format.
    #[error("`format` is {0:?}, expected {FORMAT_NAME:?}")]
    Format(String),
    /// The `version` field is not the one this build reads.
    #[error("`version` is {0}, this build reads version {FORMAT_VERSION}")]
    Version(u32),
    /// The core rejects the architecture.
    #[error("architecture: {0}")]
    Architecture(#[source] hone_core::Error),
    /// A layer's parameter counts differ from its architecture's.
    #[error(
        "layer {layer}: {weights} weights and {biases} biases, the architecture needs \
         {need_weights} and {need_biases}"
    )]
    ParamCount {
        /// Layer index.
        layer: usize,
        /// Weights in the file.
        weights: usize,
        /// Biases in the file.
        biases: usize,
        /// Weights the architecture needs.
        need_weights: usize,
        /// Biases the architecture needs.
        need_biases: usize,
    },
    /// A parameter is NaN or infinite.
    #[error("layer {layer}: parameter {index} is not a finite number")]
    NotFinite {
        /// Layer index.
        layer: usize,
        /// Parameter index (weights, then biases).
        index: usize,
    },
    /// A parameter is larger than any fixed-point format holds.
    #[error(
        "layer {layer}: parameter {index} is {value:e}, larger than any fixed-point format holds \
         (2^31); the model is corrupted or its training diverged"
    )]
    TooLarge {
        /// Layer index.
        layer: usize,
        /// Parameter index (weights, then biases).
        index: usize,
        /// The value.
        value: f64,
    },
    /// A layer without parameters has a train mode.
    #[error("layer {layer}: a train mode is set on a layer without parameters")]
    ModeWithoutParams {
        /// Layer index.
        layer: usize,
    },
    /// The scaling list does not have one entry per input channel.
    #[error("{entries} scaling entries for {channels} input channels")]
    ScalingCount {
        /// Entries in the file.
        entries: usize,
        /// Input channels.
        channels: usize,
    },
    /// A scaling offset is not finite.
    #[error(
        "`scaling[{channel}].offset` is {value}, not a finite number; train the model again \
         or correct the entry"
    )]
    ScalingOffset {
        /// Channel index.
        channel: usize,
        /// The offset.
        value: f32,
    },
    /// A scaling gain is not finite or is 0.
    #[error(
        "`scaling[{channel}].gain` is {value}; a gain must be a finite number other than 0 \
         (a zero gain erases the channel); train the model again or correct the entry"
    )]
    ScalingGain {
        /// Channel index.
        channel: usize,
        /// The gain.
        value: f32,
    },
    /// The feature names do not match the input size.
    #[error("{names} feature names for an input of {values} values")]
    FeatureCount {
        /// Feature names in the file.
        names: usize,
        /// Values of the input.
        values: usize,
    },
}

impl FloatModel {
    /// Per layer, the weights and bias as slices.
    pub fn params(&self) -> Vec<(&[f64], &[f64])> {
        self.layers
            .iter()
            .map(|l| (&l.weights[..], &l.bias[..]))
            .collect()
    }

    /// Reads and checks a model file.
    ///
    /// # Errors
    /// [`ModelError`] naming the file, and the line and column of a syntax error.
    pub fn load(path: &Path) -> Result<FloatModel, ModelError> {
        let shown = path.display().to_string();
        let text =
            hone_report::fsutil::read_text_limited(path, crate::limits::MODEL_BYTES, "float model")
                .map_err(|source| ModelError::Io {
                    path: shown.clone(),
                    source,
                })?;
        FloatModel::parse(&shown, &text)
    }

    /// Parses and checks model text; `shown` names its source in errors.
    ///
    /// # Errors
    /// As [`FloatModel::load`], without the I/O errors.
    pub fn parse(shown: &str, text: &str) -> Result<FloatModel, ModelError> {
        let shown = shown.to_owned();
        let m: FloatModel = serde_json::from_str(text).map_err(|e| ModelError::Parse {
            path: shown.clone(),
            line: e.line(),
            column: e.column(),
            message: e.to_string(),
        })?;
        m.check().map_err(|source| ModelError::Check {
            path: shown,
            source,
        })?;
        Ok(m)
    }

    /// Writes the model atomically (temporary file, then rename).
    ///
    /// # Errors
    /// [`ModelError::Io`].
    pub fn save(&self, path: &Path) -> Result<(), ModelError> {
        let text = serde_json::to_string_pretty(self).map_err(|e| ModelError::Invalid {
            path: path.display().to_string(),
            message: e.to_string(),
        })?;
        hone_report::fsutil::write_atomic(path, text.as_bytes()).map_err(|source| ModelError::Io {
            path: path.display().to_string(),
            source,
        })
    }

    /// The shapes of every layer, from the architecture alone (formats play no part).
    ///
    /// # Errors
    /// The core's error for an architecture it rejects.
    pub fn shapes(&self) -> Result<hone_core::model::Shapes, hone_core::Error> {
        let probe: Vec<hone_core::model::LayerDesc> = self
            .layers
            .iter()
            .map(|l| {
                hone_core::model::LayerDesc::simple(
                    l.kind,
                    hone_core::num::QFormat::Q0_7,
                    hone_core::num::QFormat::Q0_7,
                )
            })
            .collect();
        hone_core::model::shapes(self.input, &probe, self.loss)
    }

    /// Checks format name, version, shapes against the architecture, and finiteness.
    ///
    /// # Errors
    /// A [`ModelFault`] saying what is wrong.
    pub fn check(&self) -> Result<(), ModelFault> {
        if self.format != FORMAT_NAME {
            return Err(ModelFault::Format(self.format.clone()));
        }
        if self.version != FORMAT_VERSION {
            return Err(ModelFault::Version(self.version));
        }
        let shapes = self.shapes().map_err(ModelFault::Architecture)?;
        for (k, l) in self.layers.iter().enumerate() {
            let g = shapes.layers[k];
            if l.weights.len() != g.weights as usize || l.bias.len() != g.biases as usize {
                return Err(ModelFault::ParamCount {
                    layer: k,
                    weights: l.weights.len(),
                    biases: l.bias.len(),
                    need_weights: g.weights as usize,
                    need_biases: g.biases as usize,
                });
            }
            if let Some(i) = l
                .weights
                .iter()
                .chain(l.bias.iter())
                .position(|v| !v.is_finite())
            {
                return Err(ModelFault::NotFinite { layer: k, index: i });
            }
            if let Some((i, v)) = l
                .weights
                .iter()
                .chain(l.bias.iter())
                .enumerate()
                .find(|(_, v)| v.abs() > MAX_PARAM)
            {
                return Err(ModelFault::TooLarge {
                    layer: k,
                    index: i,
                    value: *v,
                });
            }
            if !l.kind.has_params() && l.mode != TrainMode::Frozen {
                return Err(ModelFault::ModeWithoutParams { layer: k });
            }
        }
        if !self.scaling.is_empty() && self.scaling.len() != self.input.channels as usize {
            return Err(ModelFault::ScalingCount {
                entries: self.scaling.len(),
                channels: self.input.channels as usize,
            });
        }
        for (c, sc) in self.scaling.iter().enumerate() {
            if !sc.offset.is_finite() {
                return Err(ModelFault::ScalingOffset {
                    channel: c,
                    value: sc.offset,
                });
            }
            if !sc.gain.is_finite() || sc.gain == 0.0 {
                return Err(ModelFault::ScalingGain {
                    channel: c,
                    value: sc.gain,
                });
            }
        }
        if self.features.len() != self.input.size() as usize {
            return Err(ModelFault::FeatureCount {
                names: self.features.len(),
                values: self.input.size() as usize,
            });
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A 2-input, 1-output dense model with two scaled channels.
    fn small() -> FloatModel {
        FloatModel {
            format: FORMAT_NAME.into(),
            version: FORMAT_VERSION,
            input: Shape {
                channels: 2,
                len: 1,
            },
            loss: Loss::SquaredError,
            layers: vec![FloatLayer {
                kind: LayerKind::Dense { units: 1 },
                mode: TrainMode::Full,
                weights: vec![0.5, -0.25],
                bias: vec![0.125],
            }],
            scaling: vec![
                ChannelScale {
                    offset: 2000.0,
                    gain: 0.002,
                },
                ChannelScale {
                    offset: 20.0,
                    gain: 0.1,
                },
            ],
            features: vec!["raw_counts".into(), "temp_c".into()],
            outputs: vec!["vwc".into()],
            history: Vec::new(),
        }
    }

    fn load_text(text: &str) -> Result<FloatModel, ModelError> {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("m.json");
        std::fs::write(&p, text).unwrap();
        FloatModel::load(&p)
    }

    #[test]
    fn saves_and_loads_the_same_model() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("m.json");
        small().save(&p).unwrap();
        assert_eq!(FloatModel::load(&p).unwrap(), small());
    }

    /// Every f64 reads back as itself, also those that a fast, not correctly rounded number
    /// parser gets one unit in the last place wrong (this one was, before serde_json's
    /// `float_roundtrip` feature was turned on).
    #[test]
    fn weights_read_back_to_the_bit() {
        let mut m = small();
        m.layers[0].weights = vec![0.42008569836616516, -0.44885167479515076];
        m.layers[0].bias = vec![-0.44025424122810364];
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("m.json");
        m.save(&p).unwrap();
        let back = FloatModel::load(&p).unwrap();
        for (a, b) in back.layers[0]
            .weights
            .iter()
            .chain(&back.layers[0].bias)
            .zip(m.layers[0].weights.iter().chain(&m.layers[0].bias))
        {
            assert_eq!(a.to_bits(), b.to_bits());
        }
    }

    #[test]
    fn bad_scaling_values_are_refused_naming_the_field() {
        assert!(small().check().is_ok());
        for (c, offset, gain, field) in [
            (0, f32::NAN, 1.0, "`scaling[0].offset`"),
            (1, f32::INFINITY, 1.0, "`scaling[1].offset`"),
            (1, 20.0, 0.0, "`scaling[1].gain`"),
            (0, 20.0, f32::NEG_INFINITY, "`scaling[0].gain`"),
            (0, 20.0, f32::NAN, "`scaling[0].gain`"),
        ] {
            let mut m = small();
            m.scaling[c] = ChannelScale { offset, gain };
            let e = m.check().unwrap_err();
            assert!(e.to_string().starts_with(field), "{field}: {e}");
        }
        // Through a file: a gain beyond the f32 range is refused by the reader (exact float
        // parsing reports it as out of range, with its place).
        let text = serde_json::to_string(&small())
            .unwrap()
            .replace("\"gain\":0.1", "\"gain\":1e39");
        let e = load_text(&text).unwrap_err().to_string();
        assert!(
            e.contains("m.json:1:") && e.contains("number out of range"),
            "{e}"
        );
    }

    #[test]
    fn unknown_keys_are_refused() {
        let good = serde_json::to_string(&small()).unwrap();
        assert!(load_text(&good).is_ok());
        for (from, to, key) in [
            (
                "\"version\":1",
                "\"version\":1,\"comment\":\"x\"",
                "comment",
            ),
            (
                "\"bias\":[0.125]",
                "\"bias\":[0.125],\"biases\":[1]",
                "biases",
            ),
            ("\"gain\":0.1", "\"gain\":0.1,\"gian\":1", "gian"),
        ] {
            assert_eq!(good.matches(from).count(), 1, "{from}");
            let e = load_text(&good.replacen(from, to, 1))
                .unwrap_err()
                .to_string();
            assert!(e.contains("not a hone float model"), "{e}");
            assert!(e.contains(&format!("unknown field `{key}`")), "{e}");
        }
    }
}
