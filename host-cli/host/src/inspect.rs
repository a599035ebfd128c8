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
    fn of(s: QScalar) -> ScalarInfo {
        ScalarInfo {
            value: s.to_f64(),
            raw: s.raw,
            frac: s.frac,
        }
    }

    fn text(&self) -> String {
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
    fn of(s: Shape) -> ShapeInfo {
        ShapeInfo {
            channels: s.channels,
            len: s.len,
            values: s.size(),
        }
    }

    fn text(&self) -> String {
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
    fn of(p: &ParamFormats) -> ParamFormatsInfo {
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
        hone_report::fsutil::limits::FLASH_BYTES,
        "model blob or checkpoint",
    )
    .map_err(|source| InspectError::Read {
        file: file.clone(),
        source,
    })?;
    inspect(&file, &bytes)
}

/// A real number in at most six significant digits, without trailing zeros.
pub(crate) fn real(x: f64) -> String {
    real_sig(x, 6)
}

/// A real number in at most `sig` significant digits (1 to 17), without trailing zeros;
/// magnitudes below 10^-3 or from 10^sig up in exponent form.
pub(crate) fn real_sig(x: f64, sig: i32) -> String {
    if x == 0.0 {
        return "0".to_owned();
    }
    if !x.is_finite() {
        return x.to_string();
    }
    let sig = sig.clamp(1, 17);
    let mag = x.abs().log10().floor() as i32;
    if !(-3..sig).contains(&mag) {
        let s = format!("{x:.*e}", (sig - 1) as usize);
        return match s.split_once('e') {
            Some((m, e)) => format!("{}e{e}", m.trim_end_matches('0').trim_end_matches('.')),
            None => s,
        };
    }
    let decimals = (sig - 1 - mag).max(0) as usize;
    let s = format!("{x:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_owned()
    } else {
        s
    }
}

/// "[-8, 8 - 2^-12]": the range with its upper end written exactly.
fn range_text(f: &FormatInfo) -> String {
    if f.frac == 0 {
        format!("[{}, {}]", real(f.min), real(f.max))
    } else {
        format!("[{}, {} - 2^-{}]", real(f.min), real(-f.min), f.frac)
    }
}

fn format_line(f: &FormatInfo) -> String {
    format!(
        "{}: step 2^-{} = {}, range {}",
        f.label(),
        f.frac,
        real(f.step),
        range_text(f)
    )
}

fn mode_text(m: &str) -> &'static str {
    match m.parse::<ModeName>().map(|m| m.0) {
        Ok(TrainMode::Frozen) => "frozen",
        Ok(TrainMode::BiasOnly) => "trains the bias",
        Ok(TrainMode::WeightsOnly) => "trains the weights",
        Ok(TrainMode::Full) => "trains weights and bias",
        Err(_) => "unknown train mode",
    }
}

fn param_text(p: &ParamFormatsInfo) -> String {
    let mut s = p.value.label();
    if let Some(m) = &p.master {
        let _ = write!(s, ", master {}", m.label());
    }
    let _ = write!(s, ", accumulator {}", p.accum.label());
    s
}

/// The report as text for a terminal.
pub fn render(r: &InspectReport) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "{}: hone {}, blob format version {}, {}, CRC {} ok",
        r.file,
        r.kind,
        r.format_version,
        bytes(r.bytes as u64),
        r.crc
    );
    let m = &r.model;
    let _ = writeln!(o, "\nModel");
    let shape = if m.input.len == 1 {
        String::new()
    } else {
        format!(" ({} channels × {} samples)", m.input.channels, m.input.len)
    };
    let _ = writeln!(
        o,
        "  input {} values{shape} in {}",
        group(m.input.values as u64),
        m.input_format.label()
    );
    let loss = match m.loss.as_str() {
        "squared_error" => "squared error, ½ Σ (y − t)²",
        _ => "softmax cross-entropy",
    };
    let _ = writeln!(
        o,
        "  output {} values, loss: {loss}",
        group(m.output.values as u64)
    );
    for l in &m.layers {
        let mut line = format!(
            "  {:>2}  {:<16} {} → {}",
            l.index,
            l.kind,
            l.input.text(),
            l.output.text()
        );
        if l.weight.is_some() {
            let _ = write!(
                line,
                ", {} weights, {} biases, {} MACs, {}",
                group(l.weights as u64),
                group(l.biases as u64),
                group(l.macs as u64),
                mode_text(&l.train_mode)
            );
        }
        let _ = writeln!(o, "{line}");
        if let (Some(w), Some(b)) = (&l.weight, &l.bias) {
            let _ = writeln!(o, "        weights   {}", param_text(w));
            let _ = writeln!(o, "        bias      {}", param_text(b));
        }
        let _ = writeln!(
            o,
            "        output    {}, gradient {}",
            l.out.label(),
            l.grad.label()
        );
    }

    let t = &r.training;
    let _ = writeln!(o, "\nTraining");
    let _ = writeln!(
        o,
        "  batch {}, learning rate {}",
        t.batch,
        t.learning_rate.text()
    );
    let _ = writeln!(
        o,
        "  momentum {}, weight decay {}, clip {}",
        t.momentum.text(),
        t.weight_decay.text(),
        t.clip.text()
    );
    let _ = writeln!(
        o,
        "  rounding: activations {}, gradients {}, updates {}",
        t.rounding.activations, t.rounding.gradients, t.rounding.updates
    );
    match t.dynamic {
        Some(d) => {
            let _ = writeln!(
                o,
                "  dynamic fixed point: every {} updates, at most {} ppm saturated",
                d.interval, d.max_rate_ppm
            );
        }
        None => {
            let _ = writeln!(o, "  dynamic fixed point: off");
        }
    }
    let _ = writeln!(o, "  seed {}", t.seed);

    if r.scaling.is_empty() {
        let _ = writeln!(o, "\nInput scaling: none (inputs arrive scaled)");
    } else {
        let _ = writeln!(o, "\nInput scaling, x = (reading − offset) · gain");
        let rows: Vec<Vec<String>> = r
            .scaling
            .iter()
            .map(|s| {
                vec![
                    s.channel.to_string(),
                    real(s.offset as f64),
                    real(s.gain as f64),
                ]
            })
            .collect();
        o.push_str(&table(
            &["channel", "offset", "gain"],
            &[Align::Right, Align::Right, Align::Right],
            &rows,
        ));
    }

    if let Some(s) = &r.state {
        let _ = writeln!(o, "\nTraining state");
        let _ = writeln!(
            o,
            "  samples stepped: {}, updates applied: {}",
            group(s.steps as u64),
            group(s.updates as u64)
        );
        let _ = writeln!(
            o,
            "  generator state {:08X} {:08X} {:08X} {:08X}",
            s.rng[0], s.rng[1], s.rng[2], s.rng[3]
        );
        let pair = |now: u8, planned: u8| {
            if now == planned {
                now.to_string()
            } else {
                format!("{now} (planned {planned})")
            }
        };
        let rows: Vec<Vec<String>> = s
            .fracs
            .iter()
            .map(|f| {
                vec![
                    f.layer.to_string(),
                    pair(f.output, f.output_planned),
                    pair(f.gradient, f.gradient_planned),
                    f.weight_accum.map_or_else(String::new, |(n, p)| pair(n, p)),
                    f.bias_accum.map_or_else(String::new, |(n, p)| pair(n, p)),
                ]
            })
            .collect();
        let _ = writeln!(o, "  current fraction bits:");
        o.push_str(&table(
            &["layer", "output", "gradient", "weight accum", "bias accum"],
            &[
                Align::Right,
                Align::Left,
                Align::Left,
                Align::Left,
                Align::Left,
            ],
            &rows,
        ));
    }

    let _ = writeln!(o, "\nTensors (values in real units), by layer");
    let rank = |role: &str| {
        [
            "weight",
            "bias",
            "master_weight",
            "master_bias",
            "momentum_weight",
            "momentum_bias",
        ]
        .iter()
        .position(|r| *r == role)
    };
    let mut order: Vec<&TensorInfo> = r.tensors.iter().collect();
    order.sort_by_key(|t| (t.layer, rank(&t.role)));
    let rows: Vec<Vec<String>> = order
        .iter()
        .map(|t| {
            vec![
                t.role.replace('_', " "),
                t.format.label(),
                group(t.elems as u64),
                bytes(t.bytes as u64),
                real(t.min),
                real(t.max),
                real_sig(t.mean, 4),
                real_sig(t.rms, 4),
                group(t.saturated as u64),
            ]
        })
        .collect();
    let text = table(
        &[
            "tensor", "format", "values", "bytes", "min", "max", "mean", "RMS", "sat.",
        ],
        &[
            Align::Left,
            Align::Left,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
        ],
        &rows,
    );
    // A heading line before the tensors of each layer.
    let mut last = None;
    for (i, line) in text.lines().enumerate() {
        if let Some(t) = i.checked_sub(1).and_then(|k| order.get(k)) {
            if last != Some(t.layer) {
                let kind = m.layers.get(t.layer).map_or("", |l| l.kind.as_str());
                let _ = writeln!(o, "  · layer {} ({kind})", t.layer);
                last = Some(t.layer);
            }
        }
        let _ = writeln!(o, "{line}");
    }
    let mut formats: Vec<&FormatInfo> = Vec::new();
    for f in r.tensors.iter().map(|t| &t.format) {
        if !formats.iter().any(|g| g.q == f.q && g.word == f.word) {
            formats.push(f);
        }
    }
    let _ = writeln!(o, "  formats:");
    for f in formats {
        let _ = writeln!(o, "    {}", format_line(f));
    }
    let _ = writeln!(
        o,
        "  sat.: values at the word's smallest or largest raw value; mean and RMS in 4 digits"
    );
    for w in &r.warnings {
        let _ = writeln!(o, "\nwarning: {w}");
    }
    o
}

#[cfg(test)]
pub(crate) mod tests {
    use hone_core::blob::{BlobBody, ChannelScale, TensorBlob, TrainState};
    use hone_core::model::{
        LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
        MAX_LAYERS,
    };
    use hone_core::num::{QFormat, QScalar, Rng, Word};

    use super::*;

    const W16: QFormat = QFormat::new_unchecked(Word::I16, 12);
    const B32: QFormat = QFormat::new_unchecked(Word::I32, 16);
    const ACT: QFormat = QFormat::new_unchecked(Word::I16, 10);

    #[test]
    fn a_master_narrower_than_its_values_is_warned_of() {
        let mut desc = sample_desc();
        assert!(master_warnings(&desc).is_empty());
        // Q6.9 values under a Q3.28 master.
        desc.layers[0].weight.value = QFormat::new(Word::I16, 9).unwrap();
        desc.layers[0].weight.master = Some(QFormat::new(Word::I32, 28).unwrap());
        let w = master_warnings(&desc);
        assert_eq!(w.len(), 1, "{w:?}");
        assert!(
            w[0].starts_with("layer 0 weights: the master copy Q3.28"),
            "{w:?}"
        );
    }

    /// A small model for blob tests: 8 inputs, dense 16 with master weights, relu, dense 3;
    /// momentum on.
    pub(crate) fn sample_desc() -> ModelDesc {
        let mut w = ParamFormats::plain(W16, 20);
        w.master = Some(QFormat::new_unchecked(Word::I32, 24));
        let dense = |units, weight| LayerDesc {
            kind: LayerKind::Dense { units },
            mode: TrainMode::Full,
            weight,
            bias: ParamFormats::plain(B32, 20),
            out: ACT,
            grad: ACT,
        };
        let mut train = TrainDesc::sgd(QScalar { raw: 655, frac: 16 });
        train.momentum = QScalar {
            raw: 29491,
            frac: 15,
        };
        train.batch = 4;
        // Dynamic fixed point on, so a checkpoint's live fraction bits may differ from the
        // planned ones (the core refuses a differing state otherwise).
        train.dynamic = Some(hone_core::model::DynamicRule {
            max_rate_ppm: 100,
            interval: 50,
        });
        ModelDesc::new(
            Shape::vector(8),
            W16,
            &[
                dense(16, w),
                LayerDesc::simple(LayerKind::Relu, ACT, ACT),
                dense(3, ParamFormats::plain(W16, 20)),
            ],
            Loss::SquaredError,
            train,
        )
        .unwrap()
    }

    /// The raw weights of layer 0 in a blob made with `steps`: a spread of small values plus
    /// one value at each end of the i16 range.
    pub(crate) fn layer0_raws(steps: u32) -> Vec<i16> {
        let mut v: Vec<i16> = (0..8 * 16)
            .map(|i: i32| ((i * 37 + steps as i32) % 201 - 100) as i16)
            .collect();
        v[0] = i16::MAX;
        v[1] = i16::MIN;
        v
    }

    fn le<T: Copy, const N: usize>(v: &[T], f: impl Fn(T) -> [u8; N]) -> Vec<u8> {
        v.iter().flat_map(|&x| f(x)).collect()
    }

    /// An encoded blob of [`sample_desc`]: a factory model, or a checkpoint after `steps`
    /// samples with every tensor a checkpoint of this model must carry.
    pub(crate) fn sample_blob(kind: BlobKind, steps: u32) -> Vec<u8> {
        let desc = sample_desc();
        let s = steps as i32;
        let w0 = le(&layer0_raws(steps), i16::to_le_bytes);
        let b0 = le(
            &(0..16).map(|i| i * 1000 - s).collect::<Vec<i32>>(),
            i32::to_le_bytes,
        );
        let m0 = le(
            &(0..128).map(|i| i * 4096 + s).collect::<Vec<i32>>(),
            i32::to_le_bytes,
        );
        let mom_w0 = le(
            &(0..128).map(|i| i - 64).collect::<Vec<i32>>(),
            i32::to_le_bytes,
        );
        let mom_b0 = le(&(0..16).map(|i| -i).collect::<Vec<i32>>(), i32::to_le_bytes);
        let w2 = le(
            &(0..48).map(|i| (i * 11 - 200) as i16).collect::<Vec<i16>>(),
            i16::to_le_bytes,
        );
        let b2 = le(&[7i32, -7, 0], i32::to_le_bytes);
        let mom_w2 = le(
            &(0..48).map(|i| i * 3).collect::<Vec<i32>>(),
            i32::to_le_bytes,
        );
        let mom_b2 = le(&[1i32, 2, 3], i32::to_le_bytes);
        fn t(
            layer: u8,
            role: TensorRole,
            format: QFormat,
            elems: u32,
            data: &[u8],
        ) -> TensorBlob<'_> {
            TensorBlob {
                layer,
                role,
                format,
                elems,
                data,
            }
        }
        let acc = QFormat::new_unchecked(Word::I32, 20);
        let mut list = vec![
            t(0, TensorRole::Weight, W16, 128, &w0),
            t(0, TensorRole::Bias, B32, 16, &b0),
            t(2, TensorRole::Weight, W16, 48, &w2),
            t(2, TensorRole::Bias, B32, 3, &b2),
        ];
        let mut state = None;
        if kind == BlobKind::Checkpoint {
            list.extend([
                t(
                    0,
                    TensorRole::MasterWeight,
                    QFormat::new_unchecked(Word::I32, 24),
                    128,
                    &m0,
                ),
                t(0, TensorRole::MomentumWeight, acc, 128, &mom_w0),
                t(0, TensorRole::MomentumBias, acc, 16, &mom_b0),
                t(2, TensorRole::MomentumWeight, acc, 48, &mom_w2),
                t(2, TensorRole::MomentumBias, acc, 3, &mom_b2),
            ]);
            let mut fracs = [[0u8; 4]; MAX_LAYERS];
            for (f, l) in fracs.iter_mut().zip(desc.layers.iter()) {
                *f = [
                    l.out.frac,
                    l.grad.frac,
                    l.weight.accum.frac,
                    l.bias.accum.frac,
                ];
            }
            fracs[0][0] = 9;
            state = Some(TrainState {
                steps,
                updates: steps / 4,
                rng: Rng::new(u64::from(steps)).state(),
                fracs,
                window: [[0; _]; MAX_LAYERS],
            });
        }
        let mut body = BlobBody {
            kind,
            desc,
            scaling: Default::default(),
            state,
            tensors: Default::default(),
        };
        for c in 0..8 {
            body.scaling
                .push(ChannelScale {
                    offset: c as f32 * 0.5,
                    gain: 0.25,
                })
                .unwrap();
        }
        for x in list {
            body.tensors.push(x).unwrap();
        }
        let mut out = vec![0u8; blob::encoded_len(&body).unwrap()];
        let n = blob::encode(&body, &mut out).unwrap();
        out.truncate(n);
        out
    }

    #[test]
    fn tensor_statistics_match_the_values_put_in() {
        let bytes = sample_blob(BlobKind::Checkpoint, 7);
        let r = inspect("unit.blob", &bytes).unwrap();
        assert_eq!(r.kind, "checkpoint");
        assert_eq!(r.bytes, bytes.len());
        let w = r
            .tensors
            .iter()
            .find(|t| t.layer == 0 && t.role == "weight")
            .unwrap();
        let raws = layer0_raws(7);
        let step = 1.0 / 4096.0;
        let min = *raws.iter().min().unwrap() as f64 * step;
        let max = *raws.iter().max().unwrap() as f64 * step;
        let mean = raws.iter().map(|&x| x as f64).sum::<f64>() / raws.len() as f64 * step;
        assert_eq!((w.min, w.max), (min, max));
        assert_eq!((w.min, w.max), (-8.0, 32767.0 * step));
        assert!((w.mean - mean).abs() < 1e-12);
        assert_eq!(w.saturated, 2);
        assert_eq!((w.elems, w.bytes), (128, 256));
        assert_eq!(w.format.q, "Q3.12");
        let b2 = r
            .tensors
            .iter()
            .find(|t| t.layer == 2 && t.role == "bias")
            .unwrap();
        assert_eq!(
            (b2.min, b2.max, b2.saturated),
            (-7.0 / 65536.0, 7.0 / 65536.0, 0)
        );
        let rms = ((49.0 + 49.0) / 3.0f64).sqrt() / 65536.0;
        assert!((b2.rms - rms).abs() < 1e-15);
        let st = r.state.as_ref().unwrap();
        assert_eq!((st.steps, st.updates), (7, 1));
        assert_eq!((st.fracs[0].output, st.fracs[0].output_planned), (9, 10));
        assert_eq!(r.training.learning_rate.raw, 655);
        assert_eq!(r.training.learning_rate.value, 655.0 / 65536.0);
        assert_eq!(r.scaling.len(), 8);
        assert_eq!(r.model.layers[0].train_mode, "full");
        assert_eq!(r.model.layers[0].weights, 128);
        // The names the config and `hone sweep` use (`nearest-even`, not `nearest_even`).
        assert_eq!(r.training.rounding.activations, "nearest-even");
        let text = render(&r);
        assert!(
            text.contains("rounding: activations nearest-even, gradients nearest-even"),
            "{text}"
        );
        assert!(text.contains("hone checkpoint"), "{text}");
        assert!(text.contains("9 (planned 10)"), "{text}");
        assert!(
            text.contains("Q3.12 (i16): step 2^-12 = 2.44141e-4, range [-8, 8 - 2^-12]"),
            "{text}"
        );
        for line in text.lines() {
            assert!(line.chars().count() <= 100, "line too wide: {line:?}");
        }
    }

    #[test]
    fn model_blob_has_no_state() {
        let bytes = sample_blob(BlobKind::Model, 0);
        let r = inspect("factory.blob", &bytes).unwrap();
        assert_eq!(r.kind, "model");
        assert!(r.state.is_none());
        assert_eq!(r.tensors.len(), 4);
        let json = serde_json::to_value(&r).unwrap();
        for key in [
            "file",
            "kind",
            "format_version",
            "bytes",
            "crc",
            "model",
            "training",
            "tensors",
        ] {
            assert!(json.get(key).is_some(), "missing {key}");
        }
        assert_eq!(json["tensors"][0]["format"]["q"], "Q3.12");
        assert_eq!(json["training"]["learning_rate"]["raw"], 655);
    }

    #[test]
    fn flipped_byte_is_a_crc_error_naming_the_file() {
        let mut bytes = sample_blob(BlobKind::Model, 0);
        let mid = bytes.len() / 2;
        bytes[mid] ^= 0x01;
        let e = inspect("factory.blob", &bytes).unwrap_err();
        let text = e.to_string();
        assert!(text.starts_with("factory.blob: CRC mismatch"), "{text}");
        assert!(matches!(
            e,
            InspectError::Invalid {
                error: hone_core::Error::Blob(BlobError::CrcMismatch),
                ..
            }
        ));
    }

    #[test]
    fn wrong_magic_and_other_version() {
        let mut bytes = sample_blob(BlobKind::Model, 0);
        let current = hone_core::blob::FORMAT_VERSION;
        let other = current + 1;
        bytes[4..6].copy_from_slice(&other.to_le_bytes());
        let text = inspect("other.blob", &bytes).unwrap_err().to_string();
        assert!(
            text.starts_with(&format!("other.blob: blob format version {other}")),
            "{text}"
        );
        assert!(text.contains(&format!("reads version {current}")), "{text}");
        bytes[..4].copy_from_slice(b"PK\x03\x04");
        let text = inspect("archive.zip", &bytes).unwrap_err().to_string();
        assert!(text.starts_with("archive.zip: not a hone blob"), "{text}");
        assert!(text.contains("50 4B 03 04"), "{text}");
        let text = inspect("empty.blob", &[]).unwrap_err().to_string();
        assert!(text.contains("only 0 bytes"), "{text}");
    }

    #[test]
    fn missing_file_is_named() {
        let path = std::path::Path::new("no-such-dir").join("none.blob");
        let e = inspect_file(&path).unwrap_err();
        assert!(matches!(e, InspectError::Read { .. }));
        assert!(e.to_string().contains("none.blob"));
    }

    #[test]
    fn real_numbers_are_short() {
        assert_eq!(real(0.0), "0");
        assert_eq!(real(1.0), "1");
        assert_eq!(real(-8.0), "-8");
        assert_eq!(real(0.000244140625), "2.44141e-4");
        assert_eq!(real(0.0244140625), "0.0244141");
        assert_eq!(real(7.999755859375), "7.99976");
        assert_eq!(real(32768.0), "32768");
        assert_eq!(real(1.0e-7), "1e-7");
        assert_eq!(real(0.00001106), "1.106e-5");
        assert_eq!(real_sig(-0.000110626, 4), "-1.106e-4");
        assert_eq!(real_sig(7.99976, 4), "8");
        assert_eq!(real_sig(0.0142822, 4), "0.01428");
        assert_eq!(real(-1.5e9), "-1.5e9");
    }

    #[test]
    fn format_info_matches_the_core() {
        let q = QFormat::new(Word::I16, 12).unwrap();
        let f = FormatInfo::of(q);
        assert_eq!(f.label(), q.to_string());
        assert_eq!(f.step, 1.0 / 4096.0);
        assert_eq!((f.min, f.max), (-8.0, 8.0 - 1.0 / 4096.0));
    }

    #[test]
    fn explain_names_each_framing_problem() {
        let short = explain(&BlobError::TooShort.into(), b"HON");
        assert!(short.contains("3 bytes"), "{short}");
        let magic = explain(&BlobError::BadMagic.into(), b"ABCDxxxxxxxx");
        assert!(magic.contains("41 42 43 44"), "{magic}");
        let version = explain(&BlobError::UnsupportedVersion { found: 7 }.into(), b"");
        assert!(version.contains("version 7"), "{version}");
        let crc = explain(&BlobError::CrcMismatch.into(), &[0u8; 14]);
        assert!(crc.contains("stored 0x00000000"), "{crc}");
    }
}
