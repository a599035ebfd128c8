use hone_core::blob::{BlobBody, ChannelScale, TensorBlob, TrainState};
use hone_core::model::{
    LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode, MAX_LAYERS,
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
    fn t(layer: u8, role: TensorRole, format: QFormat, elems: u32, data: &[u8]) -> TensorBlob<'_> {
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
