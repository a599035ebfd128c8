//! Validating and describing a blob: a factory model or a checkpoint pulled from a unit.
//!
//! Validation is the core's own ([`hone_core::blob::decode`]): what the device would accept,
//! this accepts, and what it would reject is reported here with the reason in words. The
//! description then lists the model (every layer with its sizes, train mode and formats), the
//! training setup, the input scaling, a checkpoint's training state, and every tensor with
//! its format and the statistics of its values in real units.

use std::fmt::Write as _;
use std::path::Path;

use hone_core::blob::{self, BlobError, BlobKind, CheckedBlob, TensorBlob, TensorRole};
use hone_core::model::{shapes, Loss, ParamFormats, Shape, Shapes, TrainMode};
use hone_core::num::{QFormat, QScalar, Word};
use serde::Serialize;

use crate::config::{ModeName, RoundingName};
use crate::memplan::{bytes, group, kind_label, table, Align};

mod info;
mod render;

pub use info::*;
pub use render::*;

/// Why a blob could not be inspected. Every message starts with the file's name.
#[derive(Debug, thiserror::Error)]
pub enum InspectError {
    /// The file could not be read.
    #[error("{file}: cannot read: {source}")]
    Read {
        /// The file.
        file: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The bytes are not a valid blob.
    #[error("{file}: {message}")]
    Invalid {
        /// The file.
        file: String,
        /// What is wrong, in words.
        message: String,
        /// The core's error.
        error: hone_core::Error,
    },
}

const CRC: crc::Crc<u32> = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);

/// The CRC stored in the last four bytes of a blob and the CRC computed over the rest.
fn crcs(bytes: &[u8]) -> Option<(u32, u32)> {
    let split = bytes.len().checked_sub(4)?;
    let (body, tail) = bytes.split_at(split);
    let stored = u32::from_le_bytes(tail.try_into().ok()?);
    Some((stored, CRC.checksum(body)))
}

/// A sentence that says what is wrong with a blob, from the core's error and the bytes.
pub fn explain(error: &hone_core::Error, bytes: &[u8]) -> String {
    match error {
        hone_core::Error::Blob(e) => match *e {
            BlobError::TooShort => format!(
                "only {} bytes: too short to be a hone blob (magic, version and CRC alone \
                 take 10)",
                bytes.len()
            ),
            BlobError::BadMagic => {
                let head = &bytes[..bytes.len().min(4)];
                let hex: Vec<String> = head.iter().map(|b| format!("{b:02X}")).collect();
                format!(
                    "not a hone blob: it starts with bytes {} where a blob starts with \"HONB\" \
                     (48 4F 4E 42)",
                    hex.join(" ")
                )
            }
            BlobError::UnsupportedVersion { found } => format!(
                "blob format version {found}, but this build of hone reads version {}: \
                 inspect it with the hone release that wrote it, or export the model again",
                blob::FORMAT_VERSION
            ),
            BlobError::CrcMismatch => match crcs(bytes) {
                Some((stored, computed)) => format!(
                    "CRC mismatch: stored 0x{stored:08X}, computed 0x{computed:08X} over {} \
                     bytes: the file is corrupted or truncated; pull or export it again",
                    bytes.len() - 4
                ),
                None => "CRC mismatch: the file is corrupted".to_owned(),
            },
            BlobError::Malformed => "the CRC is right but the body does not decode: the \
                                     blob was not written by a compatible hone"
                .to_owned(),
            BlobError::BufferTooSmall | BlobError::TooManyTensors => {
                format!("the blob cannot be read: {e}")
            }
            _ => format!("the blob is inconsistent with its own model description: {e}"),
        },
        other => format!("the model description inside the blob is invalid: {other}"),
    }
}

/// Warnings about a valid description: master copies whose range is narrower than the values
/// they feed (`hone` refuses such a config; a blob from elsewhere may carry one).
pub fn master_warnings(desc: &hone_core::model::ModelDesc) -> Vec<String> {
    let mut out = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        for (what, p) in [("weights", l.weight), ("bias", l.bias)] {
            if let Some(m) = p.master {
                if m.max_value() < p.value.max_value() {
                    out.push(format!(
                        "layer {k} {what}: the master copy {m} holds at most {}, the values {} \
                         reach {}; training clamps every value beyond the master's range at \
                         its first copy",
                        m.max_value() + m.step(),
                        p.value,
                        p.value.max_value() + p.value.step()
                    ));
                }
            }
        }
    }
    out
}

fn role_name(r: TensorRole) -> &'static str {
    match r {
        TensorRole::Weight => "weight",
        TensorRole::Bias => "bias",
        TensorRole::MasterWeight => "master_weight",
        TensorRole::MasterBias => "master_bias",
        TensorRole::MomentumWeight => "momentum_weight",
        TensorRole::MomentumBias => "momentum_bias",
    }
}

/// Raw values of a tensor, little-endian per its word.
pub fn raw_values(t: &TensorBlob<'_>) -> Vec<i32> {
    match t.format.word {
        Word::I8 => t.data.iter().map(|&b| b as i8 as i32).collect(),
        Word::I16 => t
            .data
            .chunks_exact(2)
            .map(|c| i16::from_le_bytes([c[0], c[1]]) as i32)
            .collect(),
        Word::I32 => t
            .data
            .chunks_exact(4)
            .map(|c| i32::from_le_bytes([c[0], c[1], c[2], c[3]]))
            .collect(),
    }
}

fn tensor_info(t: &TensorBlob<'_>) -> TensorInfo {
    let raws = raw_values(t);
    let step = t.format.step();
    let (lo, hi) = (t.format.word.min_raw(), t.format.word.max_raw());
    let n = raws.len().max(1) as f64;
    let min = raws.iter().copied().min().unwrap_or(0);
    let max = raws.iter().copied().max().unwrap_or(0);
    let sum: f64 = raws.iter().map(|&r| r as f64).sum();
    let sum_sq: f64 = raws.iter().map(|&r| (r as f64) * (r as f64)).sum();
    TensorInfo {
        layer: t.layer as usize,
        role: role_name(t.role).to_owned(),
        format: FormatInfo::of(t.format),
        elems: t.elems,
        bytes: t.data.len(),
        min: min as f64 * step,
        max: max as f64 * step,
        mean: sum / n * step,
        rms: (sum_sq / n).sqrt() * step,
        saturated: raws.iter().filter(|&&r| r == lo || r == hi).count() as u32,
    }
}

fn describe(file: &str, bytes: &[u8], b: &CheckedBlob<'_>, shapes: &Shapes) -> InspectReport {
    let desc = b.desc();
    let layers = desc
        .layers
        .iter()
        .zip(shapes.layers.iter())
        .enumerate()
        .map(|(k, (l, g))| {
            let params = l.kind.has_params();
            LayerInfo {
                index: k,
                kind: kind_label(&l.kind),
                input: ShapeInfo::of(g.input),
                output: ShapeInfo::of(g.output),
                weights: g.weights,
                biases: g.biases,
                macs: g.macs,
                train_mode: ModeName(l.mode).to_string(),
                weight: params.then(|| ParamFormatsInfo::of(&l.weight)),
                bias: params.then(|| ParamFormatsInfo::of(&l.bias)),
                out: FormatInfo::of(l.out),
                grad: FormatInfo::of(l.grad),
            }
        })
        .collect();
    let t = &desc.train;
    let state = b.state().map(|s| StateInfo {
        steps: s.steps,
        updates: s.updates,
        rng: s.rng,
        fracs: desc
            .layers
            .iter()
            .zip(s.fracs.iter())
            .enumerate()
            .map(|(k, (l, f))| {
                let params = l.kind.has_params();
                LayerFracs {
                    layer: k,
                    output: f[0],
                    output_planned: l.out.frac,
                    gradient: f[1],
                    gradient_planned: l.grad.frac,
                    weight_accum: params.then_some((f[2], l.weight.accum.frac)),
                    bias_accum: params.then_some((f[3], l.bias.accum.frac)),
                }
            })
            .collect(),
    });
    InspectReport {
        file: file.to_owned(),
        kind: match b.kind() {
            BlobKind::Model => "model",
            BlobKind::Checkpoint => "checkpoint",
        }
        .to_owned(),
        format_version: u16::from_le_bytes([bytes[4], bytes[5]]),
        bytes: bytes.len(),
        crc: crcs(bytes).map_or_else(String::new, |(s, _)| format!("0x{s:08X}")),
        crc_ok: true,
        model: ModelInfo {
            input: ShapeInfo::of(desc.input),
            input_format: FormatInfo::of(desc.input_format),
            output: ShapeInfo::of(shapes.output),
            loss: match desc.loss {
                Loss::SquaredError => "squared_error",
                Loss::SoftmaxCrossEntropy => "softmax_cross_entropy",
            }
            .to_owned(),
            layers,
        },
        training: TrainingInfo {
            batch: t.batch,
            learning_rate: ScalarInfo::of(t.lr),
            momentum: ScalarInfo::of(t.momentum),
            weight_decay: ScalarInfo::of(t.weight_decay),
            clip: ScalarInfo::of(t.clip),
            rounding: RoundingInfo {
                activations: RoundingName(t.rounding.activations).to_string(),
                gradients: RoundingName(t.rounding.gradients).to_string(),
                updates: RoundingName(t.rounding.updates).to_string(),
            },
            dynamic: t.dynamic.map(|d| DynamicInfo {
                max_rate_ppm: d.max_rate_ppm,
                interval: d.interval,
            }),
            seed: t.seed,
        },
        scaling: b
            .scaling()
            .iter()
            .enumerate()
            .map(|(channel, s)| ScaleInfo {
                channel,
                offset: s.offset,
                gain: s.gain,
            })
            .collect(),
        state,
        tensors: b.tensors().map(|t| tensor_info(&t)).collect(),
        warnings: master_warnings(desc),
    }
}

/// Validates `bytes` with the core's decoder and describes the blob. `file` names it in the
/// report and in errors.
///
/// # Errors
/// [`InspectError::Invalid`] with a sentence saying what is wrong (bad magic, other version,
/// CRC mismatch, inconsistent tensors, invalid description).
pub fn inspect(file: &str, bytes: &[u8]) -> Result<InspectReport, InspectError> {
    let invalid = |error| InspectError::Invalid {
        file: file.to_owned(),
        message: explain(&error, bytes),
        error,
    };
    let checked = blob::decode(bytes).map_err(invalid)?;
    let d = checked.desc();
    // The decoder has checked the description, so this only fails if the core changes.
    let shapes = shapes(d.input, &d.layers, d.loss).map_err(invalid)?;
    Ok(describe(file, bytes, &checked, &shapes))
}

/// Reads a file and inspects it.
///
/// # Errors
/// [`InspectError::Read`] if the file cannot be read; otherwise as [`inspect`].
pub fn inspect_file(path: &Path) -> Result<InspectReport, InspectError> {
    let file = path.display().to_string();
    let bytes = hone_report::fsutil::read_limited(
        path,
        crate::limits::FLASH_BYTES,
        "model blob or checkpoint",
    )
    .map_err(|source| InspectError::Read {
        file: file.clone(),
        source,
    })?;
    inspect(&file, &bytes)
}

#[cfg(test)]
pub(crate) mod tests;
