//! Checks shared by the fuzz targets of hone-core, and the seed blobs they start from.
//!
//! Every decoder of outside bytes in the core has a target:
//!
//! - `blob_decode`: [`hone_core::blob::decode`] on arbitrary bytes, then [`check_round_trip`].
//! - `blob_body`: the same, but the input is taken as the postcard body and framed with a
//!   correct magic, version and CRC ([`frame`]), so the fuzzer spends its time in the body's
//!   structure and validation instead of guessing CRCs.
//! - `store_open`: a simulated flash image filled from the input, opened as a checkpoint store
//!   ([`exercise_store`]).
//! - `trainer_restore`: a framed body; if it is a valid blob whose model fits a small budget, a
//!   trainer is restored from it and runs a guarded calibration session
//!   ([`exercise_trainer`]).
//!
//! - `host_csv`, `host_toml`, `host_float_model`: the workstation tool's readers of data,
//!   config and float-model files ([`host`]).
//!
//! The checks panic on a broken invariant (that is how libFuzzer learns of it); the code under
//! test must never panic by itself.

pub mod host;

use hone_core::blob::{self, BlobBody, BlobError, BlobKind, CheckedBlob};
use hone_core::guard::{self, GuardConfig, Verdict};
use hone_core::layer::loss::{LossValue, Target};
use hone_core::layer::Tensor;
use hone_core::model::{
    DynamicRule, LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
};
use hone_core::num::{QFormat, QScalar, Raw, Rounding, RoundingPlan, Word};
use hone_core::plan::Plan;
use hone_core::store::sim::SimFlash;
use hone_core::store::{Checkpoint, Slot, Store, FIRST_SEQ, HEADER_LEN};
use hone_core::train::{LayerParams, Trainer};
use hone_core::Error;

/// The blob CRC: CRC-32/ISO-HDLC, as documented in `hone_core::blob`.
const CRC: crc::Crc<u32> = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);

/// Largest arena (in `u32` words) a fuzzed model may ask for before the trainer is skipped.
pub const MAX_ARENA_WORDS: usize = 1 << 14;
/// Largest forward pass (multiply-accumulates) a fuzzed model may ask for.
pub const MAX_FORWARD_MACS: u64 = 1 << 14;

/// Frames `body` as a blob: magic, format version, the body, and its correct CRC.
pub fn frame(body: &[u8]) -> Vec<u8> {
    let mut out = Vec::with_capacity(body.len() + 10);
    out.extend_from_slice(&blob::MAGIC);
    out.extend_from_slice(&blob::FORMAT_VERSION.to_le_bytes());
    out.extend_from_slice(body);
    let crc = CRC.checksum(&out);
    out.extend_from_slice(&crc.to_le_bytes());
    out
}

/// The postcard body of a well-framed blob (the bytes between the header and the CRC).
pub fn body_of(blob_bytes: &[u8]) -> &[u8] {
    blob_bytes
        .get(6..blob_bytes.len().saturating_sub(4))
        .unwrap_or(&[])
}

/// Re-encodes a checked body and decodes it again: the encoder must accept every body the
/// decoder accepted, report its length exactly, refuse a buffer one byte short, and the second
/// decode must give an equal body whose encoding is byte-identical.
pub fn check_round_trip(body: &BlobBody<'_>) {
    let n = blob::encoded_len(body).expect("a checked body has an encoded length");
    let mut out = vec![0u8; n];
    let written = blob::encode(body, &mut out).expect("a checked body encodes");
    assert_eq!(written, n, "encoded_len and encode disagree");
    assert_eq!(
        blob::encode(body, &mut out[..n - 1]),
        Err(Error::Blob(BlobError::BufferTooSmall)),
        "a buffer one byte short must be refused"
    );
    let again = blob::decode(&out).expect("a re-encoded checked body decodes");
    let again = again.to_body().expect("a decoded blob gathers its tensors");
    assert_eq!(&again, body, "the round trip changed the body");
    let mut out2 = vec![0u8; n];
    let written2 = blob::encode(&again, &mut out2).expect("encodes again");
    assert_eq!(&out2[..written2], &out[..], "encoding is not deterministic");
}

/// Decodes `bytes` as a blob and, if it is valid, runs [`check_round_trip`].
pub fn check_blob(bytes: &[u8]) -> Option<CheckedBlob<'_>> {
    let checked = blob::decode(bytes).ok()?;
    check_round_trip(
        &checked
            .to_body()
            .expect("a decoded blob gathers its tensors"),
    );
    Some(checked)
}

/// A cursor over the fuzz input that never runs dry (it wraps, and yields zeros for an empty
/// input), for deriving sample values and thresholds.
pub struct Stream<'a> {
    bytes: &'a [u8],
    pos: usize,
}

impl<'a> Stream<'a> {
    /// A stream over `bytes`.
    pub fn new(bytes: &'a [u8]) -> Self {
        Self { bytes, pos: 0 }
    }

    /// The next byte.
    pub fn byte(&mut self) -> u8 {
        if self.bytes.is_empty() {
            return 0;
        }
        let b = self.bytes[self.pos % self.bytes.len()];
        self.pos = self.pos.wrapping_add(1);
        b
    }

    /// A raw value for `word`: a signed byte scaled by a power of two that may reach the
    /// word's range, so samples can saturate.
    pub fn raw(&mut self, word: Word) -> i32 {
        let v = self.byte() as i8 as i64;
        let shift = u32::from(self.byte()) % word.bits();
        word.saturate(v << shift).0
    }
}

/// Owned values of one word size.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Owned {
    /// `i8` values.
    I8(Vec<i8>),
    /// `i16` values.
    I16(Vec<i16>),
    /// `i32` values.
    I32(Vec<i32>),
}

impl Owned {
    /// `len` values of `word` from `f` (each already in the word's range).
    pub fn from_fn(word: Word, len: usize, mut f: impl FnMut(usize) -> i32) -> Owned {
        match word {
            Word::I8 => Owned::I8(
                (0..len)
                    .map(|i| word.saturate(f(i) as i64).0 as i8)
                    .collect(),
            ),
            Word::I16 => Owned::I16(
                (0..len)
                    .map(|i| word.saturate(f(i) as i64).0 as i16)
                    .collect(),
            ),
            Word::I32 => Owned::I32((0..len).map(&mut f).collect()),
        }
    }

    /// A copy of a borrowed tensor.
    pub fn of(raw: Raw<'_>) -> Owned {
        match raw {
            Raw::I8(s) => Owned::I8(s.to_vec()),
            Raw::I16(s) => Owned::I16(s.to_vec()),
            Raw::I32(s) => Owned::I32(s.to_vec()),
        }
    }

    /// A borrowed view.
    pub fn raw(&self) -> Raw<'_> {
        match self {
            Owned::I8(v) => Raw::I8(v),
            Owned::I16(v) => Raw::I16(v),
            Owned::I32(v) => Raw::I32(v),
        }
    }
}

/// One sample, owned: the input in the model's input format and its target.
struct Sample {
    x: Owned,
    target: OwnedTarget,
}

enum OwnedTarget {
    Values(Owned, QFormat),
    Class(u16),
}

impl Sample {
    fn view(&self, fmt: QFormat) -> (Tensor<'_>, Target<'_>) {
        let t = match &self.target {
            OwnedTarget::Values(v, f) => Target::Values(Tensor {
                raw: v.raw(),
                fmt: *f,
            }),
            OwnedTarget::Class(c) => Target::Class(*c),
        };
        (
            Tensor {
                raw: self.x.raw(),
                fmt,
            },
            t,
        )
    }
}

fn samples(desc: &ModelDesc, outputs: u32, n: usize, s: &mut Stream<'_>) -> Vec<Sample> {
    let inputs = desc.input.size() as usize;
    let out_fmt = desc.layers.last().map_or(desc.input_format, |l| l.out);
    (0..n)
        .map(|_| {
            let x = Owned::from_fn(desc.input_format.word, inputs, |_| {
                s.raw(desc.input_format.word)
            });
            let target = match desc.loss {
                Loss::SquaredError => OwnedTarget::Values(
                    Owned::from_fn(out_fmt.word, outputs as usize, |_| s.raw(out_fmt.word)),
                    out_fmt,
                ),
                Loss::SoftmaxCrossEntropy => {
                    OwnedTarget::Class((u32::from(s.byte()) % outputs.max(1)) as u16)
                }
            };
            Sample { x, target }
        })
        .collect()
}

/// Deterministic initial parameters for every layer of `desc` (small values, not all zero).
pub fn init_params(desc: &ModelDesc) -> Option<Vec<(Owned, Owned)>> {
    let shapes = hone_core::model::shapes(desc.input, &desc.layers, desc.loss).ok()?;
    Some(
        desc.layers
            .iter()
            .enumerate()
            .map(|(k, l)| {
                if !l.kind.has_params() {
                    return (Owned::I8(Vec::new()), Owned::I8(Vec::new()));
                }
                let g = shapes.layers[k];
                let pattern = |i: usize| ((i * 37 + 11 + k * 5) % 61) as i32 - 30;
                (
                    Owned::from_fn(l.weight.value.word, g.weights as usize, pattern),
                    Owned::from_fn(l.bias.value.word, g.biases as usize, |i| pattern(i + 7)),
                )
            })
            .collect(),
    )
}

fn layer_params(owned: &[(Owned, Owned)]) -> Vec<LayerParams<'_>> {
    owned
        .iter()
        .map(|(w, b)| LayerParams {
            weight: w.raw(),
            bias: b.raw(),
        })
        .collect()
}

fn snapshot(t: &Trainer<'_>) -> Vec<Option<(Owned, Owned)>> {
    (0..t.desc().layers.len())
        .map(|k| {
            t.params(k)
                .map(|p| (Owned::of(p.weight), Owned::of(p.bias)))
        })
        .collect()
}

/// Restores a trainer from a checked blob and runs it, if the blob's model fits the budget
/// ([`MAX_ARENA_WORDS`], [`MAX_FORWARD_MACS`]). Invariants checked:
///
/// - a trainer builds for every checked description (from deterministic initial values), and
///   restores from the blob;
/// - a guarded calibration session with the blob as last good runs without error, and on
///   rejection leaves the parameters bit-identical to those right after the restore;
/// - the checkpoint the trainer then writes decodes, and a fresh trainer restored from it
///   holds the same parameters and training state, and both continue bit-exact.
///
/// Returns whether a trainer ran.
pub fn exercise_trainer(checked: &CheckedBlob<'_>, input: &[u8]) -> bool {
    let desc = checked.desc();
    let Ok(plan) = Plan::of(desc) else {
        return false;
    };
    if plan.ram_words() > MAX_ARENA_WORDS || plan.forward_macs() > MAX_FORWARD_MACS {
        return false;
    }
    let Some(init) = init_params(desc) else {
        return false;
    };
    let init = layer_params(&init);
    let mut arena = vec![0u32; plan.ram_words()];
    let mut t = Trainer::new(desc, &plan, &mut arena, &init).expect("a checked model builds");
    // `blob::decode` admits only the tensors a blob of its kind may carry for its own
    // description (a checkpoint carries the trained tensors alone, so never a frozen layer's
    // values), each in the format the description or the state gives it, and the trainer was
    // built from that description: restoring must succeed. A failure means the decoder and
    // the trainer disagree about what a valid blob is; the panic is the crash the fuzzer
    // reports.
    t.restore(checked)
        .expect("a checked blob restores into a trainer of its own description");
    let last_good = snapshot(&t);
    let outputs = plan.shapes.output.size();
    let mut s = Stream::new(input);
    let batch = usize::from(desc.train.batch).min(8);
    let train = samples(desc, outputs, batch + 2, &mut s);
    let holdout = samples(desc, outputs, 3, &mut s);
    let fx = desc.input_format;
    let cfg = GuardConfig {
        max_loss_rise_permille: u32::from(s.byte()) * 4,
        loss_floor: LossValue(i64::from(s.byte()) << 10),
        max_saturation_ppm: u32::from(s.byte()) * 4000,
    };
    let report = guard::calibrate(
        &mut t,
        train.iter().map(|x| x.view(fx)),
        holdout.iter().map(|x| x.view(fx)),
        &cfg,
        checked,
    )
    .expect("a session on fitting samples runs");
    if let Verdict::Reject(_) = report.verdict {
        assert_eq!(
            snapshot(&t),
            last_good,
            "rejection did not restore the last good weights"
        );
    }

    let len = blob::encoded_len(
        &t.checkpoint_body(checked.scaling())
            .expect("checkpoint body"),
    )
    .expect("checkpoint length");
    let mut buf = vec![0u8; len];
    let n = t
        .write_checkpoint(checked.scaling(), &mut buf)
        .expect("checkpoint writes");
    let cp = blob::decode(&buf[..n]).expect("a written checkpoint decodes");
    assert_eq!(cp.kind(), BlobKind::Checkpoint);
    let mut arena2 = vec![0u32; plan.ram_words()];
    let mut t2 = Trainer::new(desc, &plan, &mut arena2, &init).expect("second trainer");
    t2.restore(&cp).expect("a written checkpoint restores");
    assert_eq!(snapshot(&t2), snapshot(&t), "restored parameters differ");
    assert_eq!(t2.train_state(), t.train_state(), "restored state differs");
    let more = samples(desc, outputs, 2 * batch, &mut s);
    // The checkpoint carries the tallies of the current dynamic fixed-point interval too, so
    // the writer and the restored trainer continue together in every case.
    continue_together(&mut t, &mut t2, &more, fx);
    true
}

/// Steps two trainers on the same samples; they must agree bit for bit.
fn continue_together(a: &mut Trainer<'_>, b: &mut Trainer<'_>, more: &[Sample], fx: QFormat) {
    for x in more {
        let (xa, ta) = x.view(fx);
        let oa = a.step(xa, ta).expect("step");
        let ob = b.step(xa, ta).expect("step");
        assert_eq!(oa, ob, "restored trainer steps differently");
    }
    assert_eq!(snapshot(a), snapshot(b), "restored trainer diverged");
    assert_eq!(a.train_state(), b.train_state(), "restored state diverged");
}

/// The small fixed model the seeds describe: 4 inputs, dense 6 with 16-bit values and 32-bit
/// masters, leaky ReLU, dense 3, softmax cross-entropy; momentum, batch 2, stochastic update
/// rounding and dynamic fixed point on, so a checkpoint carries every kind of tensor and state.
pub fn small_desc() -> ModelDesc {
    let act = QFormat::new(Word::I16, 11).expect("format");
    let grad = QFormat::new(Word::I16, 13).expect("format");
    let mut p = ParamFormats::plain(QFormat::new(Word::I16, 12).expect("format"), 26);
    p.master = Some(QFormat::new(Word::I32, 24).expect("format"));
    let layers = [
        LayerDesc {
            kind: LayerKind::Dense { units: 6 },
            mode: TrainMode::Full,
            weight: p,
            bias: p,
            out: act,
            grad,
        },
        LayerDesc::simple(LayerKind::LeakyRelu { shift: 3 }, act, grad),
        LayerDesc {
            kind: LayerKind::Dense { units: 3 },
            mode: TrainMode::BiasOnly,
            weight: ParamFormats::plain(QFormat::new(Word::I8, 6).expect("format"), 20),
            bias: p,
            out: act,
            grad,
        },
    ];
    let mut t = TrainDesc::sgd(QScalar::from_f64(0.05, 16).expect("lr"));
    t.momentum = QScalar::from_f64(0.5, 15).expect("momentum");
    t.batch = 2;
    t.rounding = RoundingPlan {
        updates: Rounding::Stochastic,
        ..RoundingPlan::NEAREST
    };
    t.dynamic = Some(DynamicRule {
        max_rate_ppm: 100,
        interval: 2,
    });
    t.seed = 11;
    ModelDesc::new(
        Shape::vector(4),
        QFormat::new(Word::I16, 12).expect("format"),
        &layers,
        Loss::SoftmaxCrossEntropy,
        t,
    )
    .expect("valid seed model")
}

/// Seed blobs: `(name, bytes)` of a factory model and two checkpoints of [`small_desc`], and of
/// a regression model with a 1-D convolution, pooling and input scaling.
pub fn seed_blobs() -> Vec<(String, Vec<u8>)> {
    let mut seeds = Vec::new();
    for desc in [small_desc(), conv_desc()] {
        let name = if desc.loss == Loss::SquaredError {
            "conv"
        } else {
            "small"
        };
        let plan = Plan::of(&desc).expect("plan");
        let owned = init_params(&desc).expect("init");
        let init = layer_params(&owned);
        let scaling: Vec<blob::ChannelScale> = (0..desc.input.channels)
            .map(|c| blob::ChannelScale {
                offset: f32::from(c) * 0.5,
                gain: 1.0 / (1.0 + f32::from(c)),
            })
            .collect();
        let scaling = if name == "conv" { &scaling[..] } else { &[] };
        let mut arena = vec![0u32; plan.ram_words()];
        let mut t = Trainer::new(&desc, &plan, &mut arena, &init).expect("trainer");
        // The factory model: every value tensor.
        let mut bytes_of = Vec::new();
        for (k, l) in desc.layers.iter().enumerate() {
            if let Some(p) = t.params(k) {
                for (role, raw, fmt) in [
                    (blob::TensorRole::Weight, p.weight, l.weight.value),
                    (blob::TensorRole::Bias, p.bias, l.bias.value),
                ] {
                    let mut b = vec![0u8; raw.len() * fmt.word.bytes()];
                    raw.write_le(&mut b).expect("sized");
                    bytes_of.push((k as u8, role, fmt, raw.len() as u32, b));
                }
            }
        }
        let mut tensors = heapless::Vec::new();
        for (layer, role, format, elems, data) in &bytes_of {
            tensors
                .push(blob::TensorBlob {
                    layer: *layer,
                    role: *role,
                    format: *format,
                    elems: *elems,
                    data,
                })
                .expect("room");
        }
        let model = BlobBody {
            kind: BlobKind::Model,
            desc: desc.clone(),
            scaling: heapless::Vec::from_slice(scaling).expect("room"),
            state: None,
            tensors,
        };
        let mut buf = vec![0u8; blob::encoded_len(&model).expect("len")];
        blob::encode(&model, &mut buf).expect("encode");
        seeds.push((format!("{name}-model"), buf));
        // Checkpoints after a few steps.
        let outputs = plan.shapes.output.size();
        let mut s = Stream::new(b"hone seed samples: a fixed byte string");
        for round in 0..2 {
            for x in samples(&desc, outputs, 5, &mut s) {
                let (xa, ta) = x.view(desc.input_format);
                t.step(xa, ta).expect("step");
            }
            t.flush();
            let body = t.checkpoint_body(scaling).expect("body");
            let mut buf = vec![0u8; blob::encoded_len(&body).expect("len")];
            t.write_checkpoint(scaling, &mut buf).expect("write");
            seeds.push((format!("{name}-checkpoint-{round}"), buf));
        }
    }
    seeds
}

/// A regression model with every other layer kind the seeds do not cover yet: 2 channels of
/// 8 samples, 1-D convolution, max pooling, tanh, dense 2, squared error; 8-bit activations.
pub fn conv_desc() -> ModelDesc {
    let act = QFormat::new(Word::I8, 5).expect("format");
    let grad = QFormat::new(Word::I16, 12).expect("format");
    let p = ParamFormats::plain(QFormat::new(Word::I8, 6).expect("format"), 22);
    let layers = [
        LayerDesc {
            kind: LayerKind::Conv1d {
                filters: 3,
                kernel: 3,
                stride: 1,
            },
            mode: TrainMode::WeightsOnly,
            weight: p,
            bias: p,
            out: act,
            grad,
        },
        LayerDesc::simple(
            LayerKind::MaxPool1d {
                window: 2,
                stride: 2,
            },
            act,
            grad,
        ),
        LayerDesc::simple(LayerKind::Tanh, act, grad),
        LayerDesc::simple(
            LayerKind::AvgPool1d {
                window: 3,
                stride: 1,
            },
            act,
            grad,
        ),
        LayerDesc {
            kind: LayerKind::Dense { units: 2 },
            mode: TrainMode::Full,
            weight: p,
            bias: p,
            out: act,
            grad,
        },
    ];
    let mut t = TrainDesc::sgd(QScalar::from_f64(0.02, 16).expect("lr"));
    t.weight_decay = QScalar::from_f64(0.001, 20).expect("decay");
    t.clip = QScalar::from_f64(1.0, 8).expect("clip");
    ModelDesc::new(
        Shape {
            channels: 2,
            len: 8,
        },
        QFormat::new(Word::I8, 5).expect("format"),
        &layers,
        Loss::SquaredError,
        t,
    )
    .expect("valid seed model")
}

/// Flash geometries the store target picks from: `(size, erase, write, read)`.
pub const GEOMETRIES: [(usize, usize, usize, usize); 3] =
    [(8192, 1024, 4, 1), (4096, 256, 16, 8), (2048, 128, 1, 1)];

/// Opens a checkpoint store over a flash image filled from `image` and checks it.
///
/// `ctl` selects the region (whole flash, or from the second sector, which may leave an odd
/// sector unused) and whether the slot headers are repaired first: magic, version and reserved
/// field set and the CRC recomputed over the claimed payload, so the fuzzer also reaches
/// checkpoints that validate.
///
/// Invariants: opening a valid region never fails; the newest checkpoint reads back fully and
/// chunk by chunk alike; if it is a blob it passes [`check_blob`]; a new commit succeeds, never
/// writes a flash word twice, becomes the newest with the next sequence number, and a reopened
/// store finds exactly it.
pub fn exercise_store<const S: usize, const E: usize, const W: usize, const R: usize>(
    ctl: u8,
    image: &[u8],
) {
    let mut flash = SimFlash::<S, E, W, R>::new();
    let n = image.len().min(S);
    flash.bytes_mut()[..n].copy_from_slice(&image[..n]);
    let offset = if ctl & 0x10 != 0 { E as u32 } else { 0 };
    let len = S as u32 - offset;
    if ctl & 0x20 != 0 {
        let (a, b, off, cap) = {
            let st = Store::open(&mut flash, offset, len).expect("a valid region opens");
            (
                st.slot_address(Slot::A) as usize,
                st.slot_address(Slot::B) as usize,
                st.payload_offset() as usize,
                st.capacity() as usize,
            )
        };
        for start in [a, b] {
            repair_slot(flash.bytes_mut(), start, off, cap);
        }
    }
    let (before, cp, payload) = commit_over(&mut flash, ctl, image, offset, len);
    // Filling the image by hand is no step, so every violation would be the store's.
    assert_eq!(flash.violations(), 0, "a flash word was written twice");
    let mut again = Store::open(&mut flash, offset, len).expect("reopens");
    assert_eq!(again.latest(), Some(cp), "reopen found another checkpoint");
    let mut back = vec![0u8; payload.len()];
    again.read(0, &mut back).expect("reads back");
    assert_eq!(back, payload, "committed payload reads back differently");
    if let Some(b) = before {
        assert_eq!(
            cp.slot,
            b.slot.other(),
            "a commit overwrote the newest slot"
        );
    }
}

/// Opens the store, checks its newest checkpoint (full and chunked reads agree, a read past
/// the end fails, a blob passes [`check_blob`]) and commits a payload taken from `image`.
/// Returns the checkpoint found at open, the one committed, and the payload.
fn commit_over<const S: usize, const E: usize, const W: usize, const R: usize>(
    flash: &mut SimFlash<S, E, W, R>,
    ctl: u8,
    image: &[u8],
    offset: u32,
    len: u32,
) -> (Option<Checkpoint>, Checkpoint, Vec<u8>) {
    let mut store = Store::open(flash, offset, len).expect("a valid region opens");
    let before = store.latest();
    if let Some(cp) = before {
        assert!(cp.len <= store.capacity(), "checkpoint longer than a slot");
        let mut whole = vec![0u8; cp.len as usize];
        store
            .read(0, &mut whole)
            .expect("the newest checkpoint reads");
        let chunk = usize::from(ctl % 7) + 1;
        let mut pieces = Vec::with_capacity(whole.len());
        let mut buf = vec![0u8; chunk];
        let mut at = 0u32;
        while (at as usize) < whole.len() {
            let take = chunk.min(whole.len() - at as usize);
            store.read(at, &mut buf[..take]).expect("chunk reads");
            pieces.extend_from_slice(&buf[..take]);
            at += take as u32;
        }
        assert_eq!(pieces, whole, "chunked read differs");
        assert!(
            store.read(cp.len, &mut [0u8; 1]).is_err(),
            "read past the end"
        );
        check_blob(&whole);
    }
    let payload: Vec<u8> = image
        .iter()
        .rev()
        .take(store.capacity() as usize)
        .copied()
        .collect();
    let cp = store
        .commit(&payload)
        .expect("a commit on a healthy flash succeeds");
    let expected_seq = before.map_or(FIRST_SEQ, |b| b.seq.wrapping_add(1));
    assert_eq!(cp.seq, expected_seq);
    assert_eq!(store.latest(), Some(cp));
    (before, cp, payload)
}

/// Writes a consistent header (magic, version, zero reserved field, CRC over the claimed
/// payload) into the slot at `start` if its claimed length fits; the sequence number and length
/// stay as the fuzzer wrote them.
fn repair_slot(bytes: &mut [u8], start: usize, payload_off: usize, capacity: usize) {
    let Some(head) = bytes.get_mut(start..start + HEADER_LEN) else {
        return;
    };
    head[..4].copy_from_slice(&hone_core::store::MAGIC);
    head[4..6].copy_from_slice(&hone_core::store::FORMAT_VERSION.to_le_bytes());
    head[6..8].copy_from_slice(&[0, 0]);
    let len = u32::from_le_bytes([head[12], head[13], head[14], head[15]]) as usize;
    let len = len % (capacity + 1);
    head[12..16].copy_from_slice(&(len as u32).to_le_bytes());
    let mut digest = CRC.digest();
    digest.update(&bytes[start..start + 16]);
    digest.update(&bytes[start + payload_off..start + payload_off + len]);
    let crc = digest.finalize();
    bytes[start + 16..start + 20].copy_from_slice(&crc.to_le_bytes());
}

/// The `trainer_restore` target: `data` is a whole blob if it starts with the blob magic, else
/// a body framed by [`frame`]; a valid blob goes through [`check_blob`] and
/// [`exercise_trainer`].
pub fn trainer_target(data: &[u8]) {
    let framed;
    let bytes = if data.starts_with(&blob::MAGIC) {
        data
    } else {
        framed = frame(data);
        &framed[..]
    };
    let checked = check_blob(bytes);
    if let Some(checked) = &checked {
        exercise_trainer(checked, data);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every seed passes every target's checks, and the trainer target really trains on the
    /// seeds (the models fit the budget).
    #[test]
    fn seeds_pass_every_target() {
        let seeds = seed_blobs();
        assert_eq!(seeds.len(), 6);
        for (name, blob) in &seeds {
            let checked = check_blob(blob).unwrap_or_else(|| panic!("{name} decodes"));
            assert!(exercise_trainer(&checked, blob), "{name} trains");
            assert!(
                check_blob(&frame(body_of(blob))).is_some(),
                "{name} reframes"
            );
            let mut image = vec![0xFF; 4096];
            image[..blob.len()].copy_from_slice(blob);
            exercise_store::<4096, 256, 16, 8>(0x20, &image);
            exercise_store::<8192, 1024, 4, 1>(0x10, blob);
        }
    }

    /// A repaired flash image with a committed seed checkpoint reads it back as a blob.
    #[test]
    fn committed_seed_survives_the_store_target() {
        let (_, blob) = &seed_blobs()[1];
        let mut flash = SimFlash::<2048, 128, 1, 1>::new();
        Store::open(&mut flash, 0, 2048)
            .expect("opens")
            .commit(blob)
            .expect("commits");
        let image = flash.bytes().to_vec();
        exercise_store::<2048, 128, 1, 1>(2, &image);
        exercise_store::<2048, 128, 1, 1>(2 | 0x20, &image);
    }

    /// The two inputs that crashed the targets (see `fuzz/README.md`) now pass: an overflowing
    /// convolution size, and a pooling layer with an invalid unused format.
    #[test]
    fn former_crashes_pass() {
        let mut desc = conv_desc();
        desc.layers[0].kind = LayerKind::Conv1d {
            filters: u16::MAX,
            kernel: 8,
            stride: 1,
        };
        desc.input.channels = u16::MAX;
        assert!(desc.check().is_err());
        let mut desc = conv_desc();
        desc.layers[3].weight.accum = QFormat::new_unchecked(Word::I32, 32);
        assert!(desc.check().is_err());
    }
}
