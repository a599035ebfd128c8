//! Exports for the device (`hone quantize --blob --rust`): the model blob (see `hone_core::blob`) and a Rust source file a
//! firmware includes with `include!`.
//!
//! The Rust file defines, as `const` and `static` items in the scope it is included into:
//!
//! | item | type | what |
//! |---|---|---|
//! | `INPUT` | `Shape` | input shape |
//! | `INPUT_FORMAT` | `QFormat` | input format |
//! | `LOSS` | `Loss` | loss |
//! | `TRAIN` | `TrainDesc` | training setup |
//! | `LAYERS` | `[LayerDesc; N]` | the layers with every format |
//! | `PLAN` | `Plan` | the memory plan, computed at compile time by the core's `const fn` |
//! | `DESC` | `static ModelDesc` | the description, checked against `PLAN` at compile time, in flash (for `Trainer::new_planned`) |
//! | `ARENA_WORDS` | `usize` | size of the `[u32]` working memory the trainer needs |
//! | `W0`, `B0`, … | `[i8 / i16 / i32; n]` | factory parameters of each layer with parameters, in flash |
//! | `PARAMS` | `[LayerParams<'static>; N]` | the parameters as the trainer takes them |
//! | `SCALING` | `[ChannelScale; C]` | input scaling per channel |
//! | `MODEL_BLOB` | `[u8; n]` | the same model as a validated blob (for checkpoints and checks) |
//!
//! It expects `hone_core` to be a dependency of the crate including it, and imports what it
//! needs by full path.

use hone_core::blob::{self, BlobBody, BlobKind, ChannelScale, TensorBlob, TensorRole};
use hone_core::model::{LayerDesc, LayerKind, ModelDesc, ParamFormats, TrainMode};
use hone_core::num::{QFormat, QScalar, Raw, Rounding, Word};
use std::fmt::Write as _;

use crate::sim::QuantParams;

/// Little-endian bytes of a tensor.
fn le_bytes(raw: Raw<'_>) -> Vec<u8> {
    let mut v = vec![0u8; raw.len() * raw.word().bytes()];
    raw.write_le(&mut v);
    v
}

/// Why a model could not be exported.
#[derive(Debug, thiserror::Error)]
pub enum ExportError {
    /// More parameter tensors than a blob holds.
    #[error("too many tensors for one blob (at most {})", blob::MAX_TENSORS)]
    TooManyTensors,
    /// More scaled input channels than a blob holds.
    #[error("{0} scaling entries; a blob holds at most {max}", max = blob::MAX_SCALED_CHANNELS)]
    TooManyChannels(usize),
    /// The blob encoder refused the model.
    #[error("{0}")]
    Encode(#[source] hone_core::Error),
    /// The encoded blob does not pass the decoder's checks.
    #[error("the encoded blob does not validate: {0}")]
    Validate(#[source] hone_core::Error),
}

/// Encodes a factory-model blob.
///
/// # Errors
/// [`ExportError`] if the blob cannot be encoded (too many channels for the scaling list, or a
/// parameter that does not match the description).
pub fn model_blob(
    desc: &ModelDesc,
    params: &QuantParams,
    scaling: &[ChannelScale],
) -> Result<Vec<u8>, ExportError> {
    let bytes: Vec<(usize, Vec<u8>, Vec<u8>)> = params
        .layers
        .iter()
        .enumerate()
        .filter(|(k, _)| desc.layers[*k].kind.has_params())
        .map(|(k, (w, b))| (k, le_bytes(w.raw()), le_bytes(b.raw())))
        .collect();
    let mut tensors = heapless::Vec::<TensorBlob<'_>, { blob::MAX_TENSORS }>::new();
    for (k, w, b) in &bytes {
        let l = desc.layers[*k];
        for (role, fmt, data, elems) in [
            (
                TensorRole::Weight,
                l.weight.value,
                w,
                params.layers[*k].0.len(),
            ),
            (TensorRole::Bias, l.bias.value, b, params.layers[*k].1.len()),
        ] {
            tensors
                .push(TensorBlob {
                    layer: *k as u8,
                    role,
                    format: fmt,
                    elems: elems as u32,
                    data,
                })
                .map_err(|_| ExportError::TooManyTensors)?;
        }
    }
    let body = BlobBody {
        kind: BlobKind::Model,
        desc: desc.clone(),
        scaling: heapless::Vec::from_slice(scaling)
            .map_err(|_| ExportError::TooManyChannels(scaling.len()))?,
        state: None,
        tensors,
    };
    let n = blob::encoded_len(&body).map_err(ExportError::Encode)?;
    let mut out = vec![0u8; n];
    let len = blob::encode(&body, &mut out).map_err(ExportError::Encode)?;
    out.truncate(len);
    blob::decode(&out).map_err(ExportError::Validate)?;
    Ok(out)
}

/// The name of a word's variant (`I8`, `I16`, `I32`), for generated Rust.
pub(crate) fn word(w: Word) -> &'static str {
    match w {
        Word::I8 => "I8",
        Word::I16 => "I16",
        Word::I32 => "I32",
    }
}

/// A Rust expression for a Q-format, for generated Rust.
pub(crate) fn qf(f: QFormat) -> String {
    format!(
        "hone_core::num::QFormat::new_unchecked(hone_core::num::Word::{}, {})",
        word(f.word),
        f.frac
    )
}

fn qs(s: QScalar) -> String {
    format!(
        "hone_core::num::QScalar {{ raw: {}, frac: {} }}",
        s.raw, s.frac
    )
}

fn rounding(r: Rounding) -> &'static str {
    match r {
        Rounding::NearestEven => "hone_core::num::Rounding::NearestEven",
        Rounding::TowardZero => "hone_core::num::Rounding::TowardZero",
        Rounding::Stochastic => "hone_core::num::Rounding::Stochastic",
    }
}

fn kind(k: LayerKind) -> String {
    let p = "hone_core::model::LayerKind::";
    match k {
        LayerKind::Dense { units } => format!("{p}Dense {{ units: {units} }}"),
        LayerKind::Conv1d {
            filters,
            kernel,
            stride,
        } => format!("{p}Conv1d {{ filters: {filters}, kernel: {kernel}, stride: {stride} }}"),
        LayerKind::Relu => format!("{p}Relu"),
        LayerKind::LeakyRelu { shift } => format!("{p}LeakyRelu {{ shift: {shift} }}"),
        LayerKind::HardTanh => format!("{p}HardTanh"),
        LayerKind::ClippedRelu { ceiling } => format!("{p}ClippedRelu {{ ceiling: {ceiling} }}"),
        LayerKind::Sigmoid => format!("{p}Sigmoid"),
        LayerKind::Tanh => format!("{p}Tanh"),
        LayerKind::AvgPool1d { window, stride } => {
            format!("{p}AvgPool1d {{ window: {window}, stride: {stride} }}")
        }
        LayerKind::MaxPool1d { window, stride } => {
            format!("{p}MaxPool1d {{ window: {window}, stride: {stride} }}")
        }
    }
}

fn mode(m: TrainMode) -> String {
    format!("hone_core::model::TrainMode::{m:?}")
}

fn pf(p: &ParamFormats) -> String {
    let master = match p.master {
        Some(m) => format!("Some({})", qf(m)),
        None => "None".into(),
    };
    format!(
        "hone_core::model::ParamFormats {{ value: {}, master: {master}, accum: {} }}",
        qf(p.value),
        qf(p.accum)
    )
}

fn layer(l: &LayerDesc) -> String {
    format!(
        "hone_core::model::LayerDesc {{\n        kind: {},\n        mode: {},\n        weight: {},\n        bias: {},\n        out: {},\n        grad: {},\n    }}",
        kind(l.kind),
        mode(l.mode),
        pf(&l.weight),
        pf(&l.bias),
        qf(l.out),
        qf(l.grad)
    )
}

fn array(name: &str, raw: Raw<'_>) -> String {
    let (ty, vals): (&str, Vec<String>) = match raw {
        Raw::I8(s) => ("i8", s.iter().map(|v| v.to_string()).collect()),
        Raw::I16(s) => ("i16", s.iter().map(|v| v.to_string()).collect()),
        Raw::I32(s) => ("i32", s.iter().map(|v| v.to_string()).collect()),
    };
    let mut out = format!("pub static {name}: [{ty}; {}] = [", vals.len());
    for (i, v) in vals.iter().enumerate() {
        if i % 16 == 0 {
            out.push_str("\n    ");
        } else {
            out.push(' ');
        }
        out.push_str(v);
        out.push(',');
    }
    out.push_str("\n];\n");
    out
}

fn raw_variant(raw: Raw<'_>) -> &'static str {
    match raw {
        Raw::I8(_) => "I8",
        Raw::I16(_) => "I16",
        Raw::I32(_) => "I32",
    }
}

/// The Rust source file for a firmware. `origin` is a line saying where the model came from.
///
/// # Errors
/// As [`model_blob`].
pub fn rust_source(
    desc: &ModelDesc,
    params: &QuantParams,
    scaling: &[ChannelScale],
    origin: &str,
) -> Result<String, ExportError> {
    let blob = model_blob(desc, params, scaling)?;
    let mut s = String::new();
    let t = &desc.train;
    let _ = writeln!(
        s,
        "// Generated by hone (`hone quantize --rust`): {origin}."
    );
    let _ = writeln!(s, "// Regenerate rather than edit. Include with `include!` in a crate that depends on hone-core.\n");
    let _ = writeln!(s, "pub const INPUT: hone_core::model::Shape = hone_core::model::Shape {{ channels: {}, len: {} }};", desc.input.channels, desc.input.len);
    let _ = writeln!(
        s,
        "pub const INPUT_FORMAT: hone_core::num::QFormat = {};",
        qf(desc.input_format)
    );
    let _ = writeln!(
        s,
        "pub const LOSS: hone_core::model::Loss = hone_core::model::Loss::{:?};",
        desc.loss
    );
    let dynamic = match t.dynamic {
        Some(d) => format!(
            "Some(hone_core::model::DynamicRule {{ max_rate_ppm: {}, interval: {} }})",
            d.max_rate_ppm, d.interval
        ),
        None => "None".into(),
    };
    let _ = writeln!(
        s,
        "pub const TRAIN: hone_core::model::TrainDesc = hone_core::model::TrainDesc {{\n    batch: {},\n    lr: {},\n    momentum: {},\n    weight_decay: {},\n    clip: {},\n    rounding: hone_core::num::RoundingPlan {{ activations: {}, gradients: {}, updates: {} }},\n    dynamic: {dynamic},\n    seed: {},\n}};",
        t.batch,
        qs(t.lr),
        qs(t.momentum),
        qs(t.weight_decay),
        qs(t.clip),
        rounding(t.rounding.activations),
        rounding(t.rounding.gradients),
        rounding(t.rounding.updates),
        t.seed
    );
    let _ = writeln!(
        s,
        "pub const LAYERS: [hone_core::model::LayerDesc; {}] = [",
        desc.layers.len()
    );
    for l in desc.layers.iter() {
        let _ = writeln!(s, "    {},", layer(l));
    }
    let _ = writeln!(s, "];");
    let _ = writeln!(
        s,
        "pub const PLAN: hone_core::plan::Plan = match hone_core::plan::Plan::new(INPUT, &LAYERS, LOSS, &TRAIN) {{\n    Ok(p) => p,\n    Err(_) => panic!(\"the exported model does not plan\"),\n}};"
    );
    let _ = writeln!(
        s,
        "pub static DESC: hone_core::model::ModelDesc = match hone_core::model::ModelDesc::check_planned(INPUT, INPUT_FORMAT, &LAYERS, LOSS, &TRAIN, &PLAN) {{\n    Ok(()) => hone_core::model::ModelDesc::from_array(INPUT, INPUT_FORMAT, LAYERS, LOSS, TRAIN),\n    Err(_) => panic!(\"the exported model does not match its plan\"),\n}};"
    );
    let _ = writeln!(s, "pub const ARENA_WORDS: usize = PLAN.ram_words();\n");
    let mut entries = Vec::new();
    for (k, (l, (w, b))) in desc.layers.iter().zip(params.layers.iter()).enumerate() {
        if !l.kind.has_params() {
            entries.push("hone_core::train::LayerParams::NONE".to_string());
            continue;
        }
        s.push_str(&array(&format!("W{k}"), w.raw()));
        s.push_str(&array(&format!("B{k}"), b.raw()));
        entries.push(format!(
            "hone_core::train::LayerParams {{ weight: hone_core::num::Raw::{}(&W{k}), bias: hone_core::num::Raw::{}(&B{k}) }}",
            raw_variant(w.raw()),
            raw_variant(b.raw())
        ));
    }
    let _ = writeln!(
        s,
        "\npub static PARAMS: [hone_core::train::LayerParams<'static>; {}] = [",
        entries.len()
    );
    for e in &entries {
        let _ = writeln!(s, "    {e},");
    }
    let _ = writeln!(s, "];");
    let _ = writeln!(
        s,
        "pub static SCALING: [hone_core::blob::ChannelScale; {}] = [",
        scaling.len()
    );
    for c in scaling {
        let _ = writeln!(
            s,
            "    hone_core::blob::ChannelScale {{ offset: {:?}, gain: {:?} }},",
            c.offset, c.gain
        );
    }
    let _ = writeln!(s, "];");
    let _ = write!(s, "pub static MODEL_BLOB: [u8; {}] = [", blob.len());
    for (i, b) in blob.iter().enumerate() {
        if i % 20 == 0 {
            s.push_str("\n    ");
        } else {
            s.push(' ');
        }
        let _ = write!(s, "{b},");
    }
    s.push_str("\n];\n");
    Ok(s)
}
