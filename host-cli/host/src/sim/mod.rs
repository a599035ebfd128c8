//! Fixed-point training beside its float twin, on the host, with the core's own code.
//!
//! [`run_side_by_side`] takes a model description, a quantized start and the float start it
//! came from, and trains the core's fixed-point [`Trainer`] and the `f64` [`Twin`] on the
//! same samples in the same order with the same hyperparameters. After every epoch (and every
//! step on request) it records what a reviewer needs: both losses and metrics, how far the
//! fixed-point weights have moved from the float ones in steps of their format, the SQNR of
//! the fixed-point gradients against the float gradients, saturations and lost updates.
//! Because the fixed-point side is the very code the device runs, its numbers are the
//! device's numbers.

use std::path::PathBuf;

use hone_core::float::{FloatParams, FloatTarget, Twin};
use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::{Loss, ModelDesc};
use hone_core::num::{QFormat, Raw, Word};
use hone_core::plan::Plan;
use hone_core::train::{LayerParams, LayerStats, Trainer};
use serde::Serialize;

use crate::data::{Dataset, Rows, Targets};

mod prepared;
mod records;
mod run;

pub use prepared::*;
pub use records::*;
pub use run::*;

/// Float parameters of a whole model: per layer, weights and bias.
pub type FloatLayers = Vec<(Vec<f64>, Vec<f64>)>;

/// Owned raw values of one word size.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum OwnedRaw {
    /// `i8` values.
    I8(Vec<i8>),
    /// `i16` values.
    I16(Vec<i16>),
    /// `i32` values.
    I32(Vec<i32>),
}

/// A value that is NaN or infinite, where a number to quantize was expected.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("value {index} is {value}, not a finite number")]
pub struct NotFinite {
    /// Position of the value, from 0.
    pub index: usize,
    /// The value.
    pub value: f64,
}

/// An error of the fixed-point simulation, naming the file and row, the layer or the sample.
#[derive(Debug, thiserror::Error)]
pub enum SimError {
    /// A parameter of the float model is not finite.
    #[error("layer {layer} {tensor}: {source}")]
    Param {
        /// Layer index.
        layer: usize,
        /// `weights` or `bias`.
        tensor: &'static str,
        /// The value.
        #[source]
        source: NotFinite,
    },
    /// A value of a data row is not finite.
    #[error("{}: row {row}: {field}: {source}", file.display())]
    Row {
        /// The data file.
        file: PathBuf,
        /// Data row, from 1.
        row: usize,
        /// `input` or `target`.
        field: &'static str,
        /// The value.
        #[source]
        source: NotFinite,
    },
    /// The data's targets do not suit the model's loss.
    #[error("{}: the targets do not match the loss {loss:?}", file.display())]
    TargetsMismatch {
        /// The data file.
        file: PathBuf,
        /// The model's loss.
        loss: Loss,
    },
    /// The core cannot plan the model's memory.
    #[error("the model does not plan: {0}")]
    Plan(#[source] hone_core::Error),
    /// The trainer or the float twin refused its start.
    #[error("{side} start: {source}")]
    Start {
        /// `fixed-point` or `float`.
        side: &'static str,
        /// The core's error.
        #[source]
        source: hone_core::Error,
    },
    /// A sample failed to train or evaluate.
    #[error("{what} {sample}: {source}")]
    Sample {
        /// `training sample`, `evaluation sample` or `sample`.
        what: &'static str,
        /// The sample, from 1.
        sample: usize,
        /// The core's error.
        #[source]
        source: hone_core::Error,
    },
    /// Any other refusal of the core.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
}

impl SimError {
    /// Wraps the core's refusal of the `side` (`fixed-point` or `float`) start.
    fn start(side: &'static str) -> impl FnOnce(hone_core::Error) -> SimError {
        move |source| SimError::Start { side, source }
    }
}

impl OwnedRaw {
    /// Quantizes `values` to nearest (ties to even), saturating. Returns the tensor and the
    /// number of values that saturated.
    ///
    /// # Errors
    /// [`NotFinite`] naming the first value that is NaN or infinite.
    pub fn quantize(values: &[f64], fmt: QFormat) -> Result<(OwnedRaw, usize), NotFinite> {
        let mut raw = Vec::with_capacity(values.len());
        let mut sat = 0;
        for (i, &v) in values.iter().enumerate() {
            let (r, s) = fmt
                .from_f64_saturating(v)
                .map_err(|_| NotFinite { index: i, value: v })?;
            sat += s as usize;
            raw.push(r);
        }
        Ok((OwnedRaw::from_i32(fmt.word, &raw), sat))
    }

    /// Values of `word` from `i32`s already in range.
    pub fn from_i32(word: Word, raw: &[i32]) -> OwnedRaw {
        match word {
            Word::I8 => OwnedRaw::I8(raw.iter().map(|&v| v as i8).collect()),
            Word::I16 => OwnedRaw::I16(raw.iter().map(|&v| v as i16).collect()),
            Word::I32 => OwnedRaw::I32(raw.to_vec()),
        }
    }

    /// A copy of a borrowed tensor.
    pub fn from_raw(raw: Raw<'_>) -> OwnedRaw {
        match raw {
            Raw::I8(s) => OwnedRaw::I8(s.to_vec()),
            Raw::I16(s) => OwnedRaw::I16(s.to_vec()),
            Raw::I32(s) => OwnedRaw::I32(s.to_vec()),
        }
    }

    /// A borrowed view.
    pub fn raw(&self) -> Raw<'_> {
        match self {
            OwnedRaw::I8(v) => Raw::I8(v),
            OwnedRaw::I16(v) => Raw::I16(v),
            OwnedRaw::I32(v) => Raw::I32(v),
        }
    }

    /// The real values in `fmt`.
    pub fn real(&self, fmt: QFormat) -> Vec<f64> {
        let r = self.raw();
        (0..r.len()).map(|i| fmt.to_f64(r.at(i))).collect()
    }

    /// Number of values.
    pub fn len(&self) -> usize {
        self.raw().len()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

#[cfg(test)]
mod tests;
