//! Properties of the blob format (`hone_core::blob`): round trips of random valid blobs,
//! rejection of every single-bit flip and every truncation, typed errors for bad framing and
//! for bodies that fail validation, and bit-exact continuation of a trainer restored from its
//! own checkpoint.
//!
//! Random descriptions come from a byte "genome" that proptest draws and shrinks: the genome is
//! read as a stream of choices (layer stack, sizes, formats, train modes, momentum, masters,
//! dynamic fixed point, blob kind, scaling, tensor bytes), so a shrunk failure is a small model.
//!
//! Outside data: the UCI iris table (Fisher 1936; UCI Machine Learning Repository) as shipped
//! inside the `linfa-datasets` crate (feature `iris`), through `hone_tests::iris_split`.

use hone_core::blob::{
    self, BlobBody, BlobError, BlobKind, ChannelScale, TensorBlob, TensorRole, TrainState,
};
use hone_core::error::LayerFault;
use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::{
    DynamicRule, LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
    MAX_LAYERS,
};
use hone_core::num::{QFormat, QScalar, Rounding, RoundingPlan, Word, MAX_FRAC};
use hone_core::plan::Plan;
use hone_core::train::Trainer;
use hone_core::Error;
use hone_tests::{
    dense, init_params, iris_split, layer_params, params_snapshot, q, quantize_params, Owned,
};
use proptest::prelude::*;

/// Choices read from a proptest-drawn byte string; past its end every choice is 0, which
/// picks the simplest option, so shrinking the genome simplifies the model.
struct Genome<'a> {
    bytes: &'a [u8],
    pos: usize,
}

impl Genome<'_> {
    fn byte(&mut self) -> u8 {
        let b = self.bytes.get(self.pos).copied().unwrap_or(0);
        self.pos += 1;
        b
    }

    /// A choice in `0..n`.
    fn pick(&mut self, n: u32) -> u32 {
        u32::from(self.byte()) % n
    }

    fn flag(&mut self) -> bool {
        self.byte() & 1 == 1
    }

    fn word(&mut self) -> Word {
        [Word::I8, Word::I16, Word::I32][self.pick(3) as usize]
    }

    fn format(&mut self) -> QFormat {
        let word = self.word();
        QFormat::new(word, self.pick(u32::from(MAX_FRAC) + 1) as u8).unwrap()
    }

    fn mode(&mut self) -> TrainMode {
        [
            TrainMode::Full,
            TrainMode::Frozen,
            TrainMode::BiasOnly,
            TrainMode::WeightsOnly,
        ][self.pick(4) as usize]
    }

    fn rounding(&mut self) -> Rounding {
        [
            Rounding::NearestEven,
            Rounding::TowardZero,
            Rounding::Stochastic,
        ][self.pick(3) as usize]
    }

    fn params(&mut self) -> ParamFormats {
        ParamFormats {
            value: self.format(),
            master: if self.flag() {
                Some(self.format())
            } else {
                None
            },
            accum: self.format(),
        }
    }

    fn param_layer(&mut self, kind: LayerKind) -> LayerDesc {
        LayerDesc {
            kind,
            mode: self.mode(),
            weight: self.params(),
            bias: self.params(),
            out: self.format(),
            grad: self.format(),
        }
    }

    fn activation(&mut self) -> LayerDesc {
        let kind = match self.pick(6) {
            0 => LayerKind::Relu,
            1 => LayerKind::LeakyRelu {
                shift: 1 + self.pick(15) as u8,
            },
            2 => LayerKind::HardTanh,
            3 => LayerKind::ClippedRelu {
                ceiling: 1 + self.pick(8) as u8,
            },
            4 => LayerKind::Sigmoid,
            _ => LayerKind::Tanh,
        };
        LayerDesc::simple(kind, self.format(), self.format())
    }

    fn desc(&mut self) -> ModelDesc {
        let mut layers = Vec::new();
        let input = if self.flag() {
            // 1-D stack: convolution, optional pooling, activation, dense.
            let channels = 1 + self.pick(3) as u16;
            let len = 4 + self.pick(9) as u16;
            let kernel = 1 + self.pick(u32::from(len)) as u16;
            let stride = 1 + self.pick(3) as u16;
            let filters = 1 + self.pick(3) as u16;
            layers.push(self.param_layer(LayerKind::Conv1d {
                filters,
                kernel,
                stride,
            }));
            let out_len = (len - kernel) / stride + 1;
            if self.flag() {
                let window = 1 + self.pick(u32::from(out_len)) as u16;
                let stride = 1 + self.pick(2) as u16;
                let kind = if self.flag() {
                    LayerKind::MaxPool1d { window, stride }
                } else {
                    LayerKind::AvgPool1d { window, stride }
                };
                layers.push(LayerDesc::simple(kind, self.format(), self.format()));
            }
            layers.push(self.activation());
            Shape { channels, len }
        } else {
            // Tabular stack: dense, activation, and maybe another dense and activation.
            let inputs = 1 + self.pick(6) as u16;
            let units = 1 + self.pick(8) as u16;
            layers.push(self.param_layer(LayerKind::Dense { units }));
            layers.push(self.activation());
            if self.flag() {
                let units = 1 + self.pick(5) as u16;
                layers.push(self.param_layer(LayerKind::Dense { units }));
                layers.push(self.activation());
            }
            Shape::vector(inputs)
        };
        let units = 2 + self.pick(3) as u16;
        layers.push(self.param_layer(LayerKind::Dense { units }));
        let loss = if self.flag() {
            Loss::SoftmaxCrossEntropy
        } else {
            Loss::SquaredError
        };
        let mut t = TrainDesc::sgd(QScalar {
            raw: i32::from(self.byte()) + 1,
            frac: 12,
        });
        t.batch = 1 + self.pick(4) as u16;
        if self.flag() {
            t.momentum = QScalar {
                raw: i32::from(self.byte() >> 1),
                frac: 8,
            };
        }
        if self.flag() {
            t.weight_decay = QScalar { raw: 3, frac: 16 };
        }
        if self.flag() {
            t.clip = QScalar { raw: 1, frac: 0 };
        }
        t.rounding = RoundingPlan {
            activations: self.rounding(),
            gradients: self.rounding(),
            updates: self.rounding(),
        };
        if self.flag() {
            t.dynamic = Some(DynamicRule {
                max_rate_ppm: u32::from(self.byte()) * 10,
                interval: 1 + self.pick(4) as u16,
            });
        }
        t.seed = u64::from_le_bytes(std::array::from_fn(|_| self.byte()));
        let input_format = self.format();
        ModelDesc::new(input, input_format, &layers, loss, t).expect("genome gives valid models")
    }
}

/// An owned tensor entry: layer, role, format, element count, bytes.
type OwnedTensor = (u8, TensorRole, QFormat, u32, Vec<u8>);

/// Everything a body borrows, owned.
struct OwnedBody {
    kind: BlobKind,
    desc: ModelDesc,
    scaling: Vec<ChannelScale>,
    state: Option<TrainState>,
    tensors: Vec<OwnedTensor>,
}

impl OwnedBody {
    fn body(&self) -> BlobBody<'_> {
        assert!(self.tensors.len() <= blob::MAX_TENSORS);
        let tensors = self
            .tensors
            .iter()
            .map(|(layer, role, format, elems, data)| TensorBlob {
                layer: *layer,
                role: *role,
                format: *format,
                elems: *elems,
                data,
            })
            .collect();
        BlobBody {
            kind: self.kind,
            desc: self.desc.clone(),
            scaling: self.scaling.iter().copied().collect(),
            state: self.state,
            tensors,
        }
    }

    fn encode(&self) -> Vec<u8> {
        encode(&self.body())
    }
}

fn encode(body: &BlobBody<'_>) -> Vec<u8> {
    let mut out = vec![0u8; blob::encoded_len(body).expect("length")];
    let n = blob::encode(body, &mut out).expect("encode");
    assert_eq!(n, out.len(), "encoded_len must be exact");
    out
}

/// The tensors a blob of `kind` must carry for `desc` (plus, for models, nothing else), with
/// bytes from the genome.
fn tensors_for(
    desc: &ModelDesc,
    kind: BlobKind,
    state: Option<&TrainState>,
    g: &mut Genome<'_>,
) -> Vec<OwnedTensor> {
    let shapes = hone_core::model::shapes(desc.input, &desc.layers, desc.loss).unwrap();
    let momentum = !desc.train.momentum.is_zero();
    let mut out = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        let geo = shapes.layers[k];
        let (tw, tb) = match kind {
            BlobKind::Model => (true, true),
            BlobKind::Checkpoint => (l.mode.trains_weight(), l.mode.trains_bias()),
        };
        let ckpt = kind == BlobKind::Checkpoint;
        // Momentum is in the accumulator format of the moment, which the state records.
        let fracs = state.map_or([0; 4], |s| s.fracs[k]);
        let moved = |f: QFormat, frac: u8| QFormat::new(f.word, frac).unwrap();
        let mut wanted: Vec<(TensorRole, QFormat, u32)> = Vec::new();
        if tw {
            wanted.push((TensorRole::Weight, l.weight.value, geo.weights));
        }
        if tb {
            wanted.push((TensorRole::Bias, l.bias.value, geo.biases));
        }
        if ckpt && tw {
            if let Some(m) = l.weight.master {
                wanted.push((TensorRole::MasterWeight, m, geo.weights));
            }
            if momentum {
                let f = moved(l.weight.accum, fracs[2]);
                wanted.push((TensorRole::MomentumWeight, f, geo.weights));
            }
        }
        if ckpt && tb {
            if let Some(m) = l.bias.master {
                wanted.push((TensorRole::MasterBias, m, geo.biases));
            }
            if momentum {
                let f = moved(l.bias.accum, fracs[3]);
                wanted.push((TensorRole::MomentumBias, f, geo.biases));
            }
        }
        for (role, format, elems) in wanted {
            let data = (0..elems as usize * format.word.bytes())
                .map(|_| g.byte())
                .collect();
            out.push((k as u8, role, format, elems, data));
        }
    }
    // Any order is valid: rotate by a genome-chosen amount.
    if !out.is_empty() {
        let r = g.pick(out.len() as u32) as usize;
        out.rotate_left(r);
    }
    out
}

fn random_body(genome: &[u8]) -> OwnedBody {
    let mut g = Genome {
        bytes: genome,
        pos: 0,
    };
    let desc = g.desc();
    let kind = if g.flag() {
        BlobKind::Checkpoint
    } else {
        BlobKind::Model
    };
    let scaling = if g.flag() {
        (0..desc.input.channels)
            .map(|_| ChannelScale {
                offset: f32::from(g.byte() as i8) / 4.0,
                gain: (1.0 + f32::from(g.byte())) / 64.0,
            })
            .collect()
    } else {
        Vec::new()
    };
    let state = (kind == BlobKind::Checkpoint).then(|| {
        // Where a format can move (dynamic fixed point on; for an accumulator, only if the
        // layer keeps one), any fraction bits up to MAX_FRAC; else exactly the description's.
        // Unused layer slots are zero, as a trainer writes.
        let mut fracs = [[0u8; 4]; MAX_LAYERS];
        for (f, l) in fracs.iter_mut().zip(desc.layers.iter()) {
            let own = [
                l.out.frac,
                l.grad.frac,
                l.weight.accum.frac,
                l.bias.accum.frac,
            ];
            let dynamic = desc.train.dynamic.is_some();
            let params = l.kind.has_params();
            let moves = [
                dynamic,
                dynamic,
                dynamic && params && l.mode.trains_weight(),
                dynamic && params && l.mode.trains_bias(),
            ];
            for ((b, o), m) in f.iter_mut().zip(own).zip(moves) {
                *b = if m {
                    g.pick(u32::from(MAX_FRAC) + 1) as u8
                } else {
                    o
                };
            }
        }
        TrainState {
            steps: u32::from_le_bytes(std::array::from_fn(|_| g.byte())),
            updates: u32::from(g.byte()),
            // Never all zero: xoshiro cannot leave that state, and decode refuses it.
            rng: [u32::from(g.byte()) | 1, 2, u32::from(g.byte()), 4],
            fracs,
            window: std::array::from_fn(|_| std::array::from_fn(|_| u32::from(g.byte()))),
        }
    });
    let tensors = tensors_for(&desc, kind, state.as_ref(), &mut g);
    OwnedBody {
        kind,
        desc,
        scaling,
        state,
        tensors,
    }
}

fn genome() -> impl Strategy<Value = Vec<u8>> {
    prop::collection::vec(any::<u8>(), 0..160)
}

fn blob_err(e: BlobError) -> Option<Error> {
    Some(Error::Blob(e))
}

/// The error a single-bit flip at byte `i` must produce: the framing field it hits decides.
fn expected_flip_error(flipped: &[u8], i: usize) -> Error {
    match i {
        0..=3 => Error::Blob(BlobError::BadMagic),
        4 | 5 => Error::Blob(BlobError::UnsupportedVersion {
            found: u16::from_le_bytes([flipped[4], flipped[5]]),
        }),
        _ => Error::Blob(BlobError::CrcMismatch),
    }
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(256))]

    /// Random valid descriptions with random tensors survive encode → decode unchanged, and
    /// re-encoding the decoded body gives the same bytes.
    #[test]
    fn random_blobs_round_trip(genome in genome()) {
        let owned = random_body(&genome);
        let body = owned.body();
        let bytes = encode(&body);
        let checked = blob::decode(&bytes);
        prop_assert!(checked.is_ok(), "valid body rejected: {:?}", checked.err());
        let checked = checked.unwrap();
        prop_assert_eq!(checked.to_body().unwrap(), body.clone());
        prop_assert_eq!(checked.kind(), owned.kind);
        prop_assert_eq!(checked.desc(), &owned.desc);
        prop_assert_eq!(checked.scaling(), hone_core::blob::Scaling::from(&owned.scaling[..]));
        prop_assert_eq!(checked.state(), owned.state);
        for (layer, role, _, _, data) in &owned.tensors {
            let t = checked.tensor(*layer as usize, *role);
            prop_assert_eq!(t.map(|t| t.data), Some(&data[..]));
        }
        prop_assert_eq!(&encode(&checked.to_body().unwrap()), &bytes);
    }

    /// Flipping any single bit of a valid blob is rejected, with the error of the field hit:
    /// never accepted as another model.
    #[test]
    fn single_bit_flips_are_rejected(genome in genome(), at in any::<prop::sample::Index>()) {
        let bytes = random_body(&genome).encode();
        let bit = at.index(bytes.len() * 8);
        let mut bad = bytes.clone();
        bad[bit / 8] ^= 1 << (bit % 8);
        let expected = expected_flip_error(&bad, bit / 8);
        prop_assert_eq!(blob::decode(&bad).err(), Some(expected));
    }

    /// Every truncation is rejected: too short for the framing, or a CRC mismatch.
    #[test]
    fn truncations_are_rejected(genome in genome(), at in any::<prop::sample::Index>()) {
        let bytes = random_body(&genome).encode();
        let n = at.index(bytes.len());
        let expected = if n < 10 { BlobError::TooShort } else { BlobError::CrcMismatch };
        prop_assert_eq!(blob::decode(&bytes[..n]).err(), blob_err(expected));
    }

    /// Another format version is `UnsupportedVersion`, checked before the CRC.
    #[test]
    fn other_versions_are_unsupported(genome in genome(), v in any::<u16>()) {
        prop_assume!(v != blob::FORMAT_VERSION);
        let mut bytes = random_body(&genome).encode();
        bytes[4..6].copy_from_slice(&v.to_le_bytes());
        prop_assert_eq!(
            blob::decode(&bytes).err(),
            blob_err(BlobError::UnsupportedVersion { found: v })
        );
    }

    /// Any other magic is `BadMagic`.
    #[test]
    fn other_magic_is_bad(genome in genome(), magic in any::<[u8; 4]>()) {
        prop_assume!(magic != blob::MAGIC);
        let mut bytes = random_body(&genome).encode();
        bytes[..4].copy_from_slice(&magic);
        prop_assert_eq!(blob::decode(&bytes).err(), blob_err(BlobError::BadMagic));
    }
}

/// Frames a raw body with a correct CRC (CRC-32/ISO-HDLC, as the blob module documents), to
/// reach the body checks behind the CRC.
fn frame(body: &[u8]) -> Vec<u8> {
    let crc = crc32(&[&blob::MAGIC[..], &blob::FORMAT_VERSION.to_le_bytes(), body].concat());
    [
        &blob::MAGIC[..],
        &blob::FORMAT_VERSION.to_le_bytes(),
        body,
        &crc.to_le_bytes(),
    ]
    .concat()
}

/// CRC-32/ISO-HDLC written out bit by bit (reflected polynomial 0xEDB88320, initial value and
/// final xor 0xFFFFFFFF; the CRC of zlib and PNG, from memory), independent of the `crc` crate
/// the core uses. Its check value for "123456789" is 0xCBF43926 (from memory), asserted below.
fn crc32(bytes: &[u8]) -> u32 {
    let mut c = 0xFFFF_FFFFu32;
    for &b in bytes {
        c ^= u32::from(b);
        for _ in 0..8 {
            c = if c & 1 == 1 {
                (c >> 1) ^ 0xEDB8_8320
            } else {
                c >> 1
            };
        }
    }
    !c
}

#[test]
fn independent_crc_matches_the_check_value_and_the_encoder() {
    assert_eq!(crc32(b"123456789"), 0xCBF4_3926);
    let bytes = random_body(&[7, 1, 2, 3, 200, 5, 6]).encode();
    let n = bytes.len();
    assert_eq!(
        crc32(&bytes[..n - 4]).to_le_bytes(),
        bytes[n - 4..],
        "the stored CRC is CRC-32/ISO-HDLC of everything before it"
    );
    assert_eq!(frame(&bytes[6..n - 4]), bytes);
}

/// A hand-made reference body: 3 inputs → dense 4 (full, with masters) → ReLU → dense 2
/// (bias only), squared error, momentum on.
fn reference(kind: BlobKind) -> OwnedBody {
    let (v, acc, act, grad) = (q(16, 12), q(32, 24), q(16, 11), q(16, 13));
    let mut first = dense(4, TrainMode::Full, v, acc, act, grad);
    first.weight.master = Some(q(32, 20));
    first.bias.master = Some(q(32, 20));
    let layers = [
        first,
        LayerDesc::simple(LayerKind::Relu, act, grad),
        dense(2, TrainMode::BiasOnly, q(8, 6), acc, act, grad),
    ];
    let mut t = TrainDesc::sgd(QScalar::from_f64(0.1, 16).unwrap());
    t.momentum = QScalar::from_f64(0.5, 8).unwrap();
    t.dynamic = Some(DynamicRule {
        max_rate_ppm: 100,
        interval: 4,
    });
    let desc = ModelDesc::new(Shape::vector(3), v, &layers, Loss::SquaredError, t).unwrap();
    let bytes = |n: usize, seed: u8| -> Vec<u8> {
        (0..n)
            .map(|i| (i as u8).wrapping_mul(31).wrapping_add(seed))
            .collect()
    };
    let tensors: Vec<OwnedTensor> = match kind {
        BlobKind::Model => vec![
            (0, TensorRole::Weight, v, 12, bytes(24, 1)),
            (0, TensorRole::Bias, v, 4, bytes(8, 2)),
            (2, TensorRole::Weight, q(8, 6), 8, bytes(8, 3)),
            (2, TensorRole::Bias, q(8, 6), 2, bytes(2, 4)),
        ],
        BlobKind::Checkpoint => vec![
            (0, TensorRole::Weight, v, 12, bytes(24, 1)),
            (0, TensorRole::Bias, v, 4, bytes(8, 2)),
            (0, TensorRole::MasterWeight, q(32, 20), 12, bytes(48, 5)),
            (0, TensorRole::MasterBias, q(32, 20), 4, bytes(16, 6)),
            (0, TensorRole::MomentumWeight, q(32, 22), 12, bytes(48, 7)),
            (0, TensorRole::MomentumBias, q(32, 24), 4, bytes(16, 8)),
            (2, TensorRole::Bias, q(8, 6), 2, bytes(2, 4)),
            (2, TensorRole::MomentumBias, q(32, 24), 2, bytes(8, 9)),
        ],
    };
    OwnedBody {
        kind,
        desc,
        scaling: Vec::new(),
        state: (kind == BlobKind::Checkpoint).then_some(TrainState {
            steps: 40,
            updates: 40,
            rng: [1, 2, 3, 4],
            // Layer 0's weight accumulator has moved to 22 fraction bits (dynamic fixed
            // point); its momentum tensor carries that format.
            // Unused layer slots are zero, as a trainer writes them.
            fracs: std::array::from_fn(|k| match k {
                0 => [11, 13, 22, 24],
                // The ReLU keeps no accumulator: its accumulator formats are the
                // description's own (those of `LayerDesc::simple`).
                1 => [11, 13, 0, 0],
                2 => [11, 13, 24, 24],
                _ => [0; 4],
            }),
            window: [[0; 12]; MAX_LAYERS],
        }),
        tensors,
    }
}

fn decode_err(b: &OwnedBody) -> Option<Error> {
    blob::decode(&b.encode()).err()
}

#[test]
fn reference_bodies_are_valid() {
    for kind in [BlobKind::Model, BlobKind::Checkpoint] {
        let b = reference(kind);
        let bytes = b.encode();
        assert_eq!(blob::decode(&bytes).unwrap().to_body().unwrap(), b.body());
    }
}

#[test]
fn every_bit_flip_of_a_reference_checkpoint_is_rejected() {
    let bytes = reference(BlobKind::Checkpoint).encode();
    for bit in 0..bytes.len() * 8 {
        let mut bad = bytes.clone();
        bad[bit / 8] ^= 1 << (bit % 8);
        assert_eq!(
            blob::decode(&bad).err(),
            Some(expected_flip_error(&bad, bit / 8)),
            "bit {bit}"
        );
    }
    for n in 0..bytes.len() {
        assert!(blob::decode(&bytes[..n]).is_err(), "truncated to {n}");
    }
}

#[test]
fn wrong_tensor_length_word_or_frac_is_tensor_shape() {
    let shape = blob_err(BlobError::TensorShape {
        layer: 0,
        role: TensorRole::Bias,
    });
    // One value short in the bytes.
    let mut b = reference(BlobKind::Model);
    b.tensors[1].4.truncate(6);
    assert_eq!(decode_err(&b), shape);
    // A valid format, but not the description's: the blob may not rescale a tensor.
    let mut b = reference(BlobKind::Model);
    b.tensors[1].2 = q(16, 11);
    assert_eq!(decode_err(&b), shape);
    // Momentum in another format than the state's accumulator format.
    let mut b = reference(BlobKind::Checkpoint);
    b.tensors[4].2 = q(32, 24);
    assert_eq!(decode_err(&b), shape_of(0, TensorRole::MomentumWeight));
    // A checkpoint carrying the weights of a layer that trains only its bias.
    let mut b = reference(BlobKind::Checkpoint);
    b.tensors
        .push((2, TensorRole::Weight, q(8, 6), 8, vec![0; 8]));
    assert_eq!(decode_err(&b), shape_of(2, TensorRole::Weight));
    // Element count and bytes agree with each other but not with the description.
    let mut b = reference(BlobKind::Model);
    b.tensors[1].3 = 3;
    b.tensors[1].4.truncate(6);
    assert_eq!(decode_err(&b), shape);
    // Another word.
    let mut b = reference(BlobKind::Model);
    b.tensors[1].2 = q(32, 12);
    b.tensors[1].4 = vec![0; 16];
    assert_eq!(decode_err(&b), shape);
    // Fraction bits beyond MAX_FRAC.
    let mut b = reference(BlobKind::Model);
    b.tensors[1].2 = QFormat::new_unchecked(Word::I16, MAX_FRAC + 1);
    assert_eq!(decode_err(&b), shape);
    // A master tensor for a layer whose description has no master copy: the layer cannot take
    // it, a shape error.
    let mut b = reference(BlobKind::Checkpoint);
    b.tensors
        .push((2, TensorRole::MasterBias, q(8, 6), 2, vec![0; 2]));
    assert_eq!(decode_err(&b), shape_of(2, TensorRole::MasterBias));
    // Momentum of a tensor that does not train (layer 2 trains its bias only).
    let mut b = reference(BlobKind::Checkpoint);
    b.tensors
        .push((2, TensorRole::MomentumWeight, q(32, 24), 8, vec![0; 32]));
    assert_eq!(decode_err(&b), shape_of(2, TensorRole::MomentumWeight));
}

fn shape_of(layer: u8, role: TensorRole) -> Option<Error> {
    blob_err(BlobError::TensorShape { layer, role })
}

#[test]
fn duplicate_tensor_is_typed() {
    let mut b = reference(BlobKind::Model);
    let dup = b.tensors[2].clone();
    b.tensors.push(dup);
    assert_eq!(
        decode_err(&b),
        blob_err(BlobError::Duplicate {
            layer: 2,
            role: TensorRole::Weight
        })
    );
}

#[test]
fn tensor_for_a_layer_without_parameters_is_typed() {
    // Layer 1 is the ReLU.
    let mut b = reference(BlobKind::Model);
    b.tensors
        .push((1, TensorRole::Weight, q(16, 12), 0, Vec::new()));
    assert_eq!(
        decode_err(&b),
        blob_err(BlobError::NoSuchLayer { layer: 1 })
    );
    // A layer past the end.
    let mut b = reference(BlobKind::Model);
    b.tensors
        .push((9, TensorRole::Bias, q(16, 12), 2, vec![0; 4]));
    assert_eq!(
        decode_err(&b),
        blob_err(BlobError::NoSuchLayer { layer: 9 })
    );
}

#[test]
fn missing_required_tensors_are_typed() {
    // A model needs every value tensor, frozen or not.
    let mut b = reference(BlobKind::Model);
    b.tensors.retain(|t| (t.0, t.1) != (2, TensorRole::Weight));
    assert_eq!(
        decode_err(&b),
        blob_err(BlobError::Missing {
            layer: 2,
            role: TensorRole::Weight
        })
    );
    // A checkpoint needs the master and momentum of every trained tensor.
    for (layer, role) in [
        (0, TensorRole::MasterWeight),
        (0, TensorRole::MomentumBias),
        (2, TensorRole::MomentumBias),
        (2, TensorRole::Bias),
    ] {
        let mut b = reference(BlobKind::Checkpoint);
        b.tensors.retain(|t| (t.0, t.1) != (layer, role));
        assert_eq!(
            decode_err(&b),
            blob_err(BlobError::Missing { layer, role }),
            "{role} of layer {layer}"
        );
    }
    // But a checkpoint does not carry the weights of a bias-only layer.
    let b = reference(BlobKind::Checkpoint);
    assert!(!b
        .tensors
        .iter()
        .any(|t| (t.0, t.1) == (2, TensorRole::Weight)));
    assert!(blob::decode(&b.encode()).is_ok());
}

#[test]
fn state_must_match_the_kind() {
    let mismatch = blob_err(BlobError::StateMismatch);
    let mut b = reference(BlobKind::Checkpoint);
    b.state = None;
    assert_eq!(decode_err(&b), mismatch, "checkpoint without state");
    let mut b = reference(BlobKind::Model);
    b.state = reference(BlobKind::Checkpoint).state;
    assert_eq!(decode_err(&b), mismatch, "model with state");
    let mut b = reference(BlobKind::Checkpoint);
    b.state.as_mut().unwrap().rng = [0; 4];
    assert_eq!(decode_err(&b), mismatch, "all-zero generator state");
    let mut b = reference(BlobKind::Checkpoint);
    b.state.as_mut().unwrap().fracs[2][0] = MAX_FRAC + 1;
    assert_eq!(decode_err(&b), mismatch, "fraction bits out of range");
    let mut b = reference(BlobKind::Checkpoint);
    b.state.as_mut().unwrap().fracs[3][2] = 1;
    assert_eq!(
        decode_err(&b),
        mismatch,
        "fraction bits in an unused layer slot"
    );
    // Without dynamic fixed point no format may move: layer 0's accumulator at 22 bits (the
    // reference's moved format, its momentum tensor following it) is refused.
    let mut b = reference(BlobKind::Checkpoint);
    b.desc.train.dynamic = None;
    assert_eq!(decode_err(&b), mismatch, "a fixed format moved");
}

#[test]
fn scaling_must_match_the_input() {
    let mut b = reference(BlobKind::Model);
    b.scaling = vec![
        ChannelScale {
            offset: 0.0,
            gain: 1.0
        };
        2
    ];
    assert_eq!(
        decode_err(&b),
        blob_err(BlobError::Scaling),
        "2 of 3 channels"
    );
    b.scaling.push(ChannelScale {
        offset: f32::NAN,
        gain: 1.0,
    });
    assert_eq!(decode_err(&b), blob_err(BlobError::Scaling), "NaN offset");
    b.scaling[2].offset = 1.0;
    b.scaling[0].gain = f32::INFINITY;
    assert_eq!(
        decode_err(&b),
        blob_err(BlobError::Scaling),
        "infinite gain"
    );
    b.scaling[0].gain = 0.5;
    assert!(blob::decode(&b.encode()).is_ok(), "3 finite channels");
}

#[test]
fn a_scaling_list_past_its_limit_or_its_bytes_is_malformed() {
    // The scaling count is the first body byte that differs between no entries and three.
    let mut b = reference(BlobKind::Model);
    let none = b.encode();
    b.scaling = vec![
        ChannelScale {
            offset: 1.0,
            gain: 0.5
        };
        3
    ];
    let three = b.encode();
    assert!(blob::decode(&three).is_ok());
    let at = (6..none.len())
        .find(|&i| none[i] != three[i])
        .expect("the count differs");
    assert_eq!((none[at], three[at]), (0, 3));
    let body = &three[6..three.len() - 4];
    let at = at - 6;
    // 65 entries, all present: one past `MAX_SCALED_CHANNELS` (a one-byte varint).
    let n = blob::MAX_SCALED_CHANNELS + 1;
    let entry = &body[at + 1..at + 1 + 8];
    let past = [
        &body[..at],
        &[n as u8][..],
        &entry.repeat(n),
        &body[at + 1 + 3 * 8..],
    ]
    .concat();
    assert_eq!(
        blob::decode(&frame(&past)).err(),
        blob_err(BlobError::Malformed)
    );
    // 64 entries claimed, 3 present and the rest of the body too short for them.
    let mut short = body[..at + 1 + 3 * 8].to_vec();
    short[at] = blob::MAX_SCALED_CHANNELS as u8;
    assert_eq!(
        blob::decode(&frame(&short)).err(),
        blob_err(BlobError::Malformed)
    );
    // The entries read back as written, one at a time.
    let checked = blob::decode(&three).unwrap();
    assert_eq!(checked.scaling().len(), 3);
    assert_eq!(checked.scaling().get(2), Some(b.scaling[2]));
    assert_eq!(checked.scaling().get(3), None);
    assert_eq!(checked.scaling().iter().collect::<Vec<_>>(), b.scaling);
}

#[test]
fn invalid_description_gives_its_own_error() {
    // Built field by field, past `ModelDesc::new`'s check.
    let mut b = reference(BlobKind::Model);
    b.desc.layers[2].kind = LayerKind::Dense { units: 0 };
    assert_eq!(
        decode_err(&b),
        Some(Error::Layer {
            layer: 2,
            fault: LayerFault::ZeroSize
        })
    );
    let mut b = reference(BlobKind::Model);
    b.desc.train.batch = 0;
    assert_eq!(decode_err(&b), Some(Error::InvalidTraining));
    let mut b = reference(BlobKind::Model);
    b.desc.input_format = QFormat::new_unchecked(Word::I16, 40);
    assert_eq!(decode_err(&b), Some(Error::InvalidFormat));
    let mut b = reference(BlobKind::Model);
    b.desc.layers[1].mode = TrainMode::Full;
    assert_eq!(
        decode_err(&b),
        Some(Error::Layer {
            layer: 1,
            fault: LayerFault::ModeWithoutParams
        })
    );
}

#[test]
fn garbage_behind_a_correct_crc_is_malformed() {
    for body in [&[][..], &[0xFF; 3][..], &[0, 0, 0, 0, 0, 9, 9][..]] {
        assert_eq!(
            blob::decode(&frame(body)).err(),
            blob_err(BlobError::Malformed),
            "{body:?}"
        );
    }
    // A valid body cut short, re-framed with a correct CRC.
    let bytes = reference(BlobKind::Checkpoint).encode();
    let body = &bytes[6..bytes.len() - 4];
    // Every cut: each field of the state (read past, not kept, by the decoder) ends early.
    for n in 1..body.len() {
        assert_eq!(
            blob::decode(&frame(&body[..n])).err(),
            blob_err(BlobError::Malformed),
            "body cut to {n}"
        );
    }
}

#[test]
fn encoder_refuses_a_short_buffer() {
    let b = reference(BlobKind::Checkpoint);
    let body = b.body();
    let n = blob::encoded_len(&body).unwrap();
    for short in [0, 9, 10, n / 2, n - 1] {
        let mut out = vec![0u8; short];
        assert_eq!(
            blob::encode(&body, &mut out).err(),
            blob_err(BlobError::BufferTooSmall),
            "buffer of {short}"
        );
    }
}

/// A 4-8-3 iris MLP in 16-bit fixed point with everything a checkpoint can carry: masters,
/// momentum, stochastic update rounding, mini-batches of 4 and dynamic fixed point.
fn iris_desc(dynamic: Option<DynamicRule>) -> ModelDesc {
    let (w, acc, act, grad) = (q(16, 12), q(32, 26), q(16, 11), q(16, 14));
    let mut first = dense(8, TrainMode::Full, w, acc, act, grad);
    first.weight.master = Some(q(32, 24));
    first.bias.master = Some(q(32, 24));
    let layers = [
        first,
        LayerDesc::simple(LayerKind::Relu, act, grad),
        dense(3, TrainMode::Full, w, acc, act, grad),
    ];
    let mut t = TrainDesc::sgd(QScalar::from_f64(0.05, 16).unwrap());
    t.momentum = QScalar::from_f64(0.5, 8).unwrap();
    t.batch = 4;
    t.rounding.updates = Rounding::Stochastic;
    t.dynamic = dynamic;
    t.seed = 3;
    ModelDesc::new(Shape::vector(4), w, &layers, Loss::SoftmaxCrossEntropy, t).unwrap()
}

/// Trains `before` samples, checkpoints, restores a fresh trainer from the checkpoint, and
/// trains both on `after` more samples: both must agree bit for bit at every step.
fn checkpoint_continues_bit_exact(desc: &ModelDesc, before: usize, after: usize) {
    let (train, _) = iris_split(11);
    let plan = Plan::of(desc).unwrap();
    let owned = quantize_params(desc, &init_params(desc, 5));
    let init = layer_params(&owned);
    let xs: Vec<Owned> = train
        .x
        .iter()
        .map(|x| Owned::quantize(x, desc.input_format))
        .collect();
    let sample = |i: usize| {
        let i = i % xs.len();
        (
            Tensor {
                raw: xs[i].raw(),
                fmt: desc.input_format,
            },
            Target::Class(train.label[i]),
        )
    };
    let mut a1 = vec![0u32; plan.ram_words()];
    let mut a = Trainer::new(desc, &plan, &mut a1, &init).unwrap();
    for i in 0..before {
        let (x, t) = sample(i * 7);
        a.step(x, t).unwrap();
    }
    assert_eq!(a.pending(), 0, "checkpoint at a batch boundary");
    let mut buf = vec![0u8; 4096];
    let n = a.write_checkpoint(&[], &mut buf).unwrap();
    let cp = blob::decode(&buf[..n]).unwrap();
    assert_eq!(cp.kind(), BlobKind::Checkpoint);
    assert_eq!(cp.state(), Some(a.train_state()));
    let mut a2 = vec![0u32; plan.ram_words()];
    let mut b = Trainer::new(desc, &plan, &mut a2, &init).unwrap();
    assert_ne!(
        params_snapshot(&b),
        params_snapshot(&a),
        "training changed the weights"
    );
    b.restore(&cp).unwrap();
    assert_eq!(params_snapshot(&b), params_snapshot(&a));
    assert_eq!(b.train_state(), a.train_state());
    for i in before..before + after {
        let (x, t) = sample(i * 7);
        assert_eq!(a.step(x, t).unwrap(), b.step(x, t).unwrap(), "step {i}");
        assert_eq!(
            params_snapshot(&a),
            params_snapshot(&b),
            "params after step {i}"
        );
    }
    assert_eq!(a.train_state(), b.train_state());
    for k in 0..desc.layers.len() {
        assert_eq!(
            a.live_fracs(k),
            b.live_fracs(k),
            "fraction bits of layer {k}"
        );
    }
}

#[test]
fn iris_checkpoint_restores_bit_exact() {
    // 10 updates of 4 samples, then 120 samples more.
    checkpoint_continues_bit_exact(&iris_desc(None), 40, 120);
}

#[test]
fn iris_checkpoint_restores_bit_exact_with_dynamic_fixed_point() {
    // Interval of 3 updates. After 9 updates the checkpoint falls on an interval boundary;
    // after 20 (80 samples) it falls in the middle of one, where the counts of the interval so
    // far travel in the checkpoint's state.
    let rule = DynamicRule {
        max_rate_ppm: 100,
        interval: 3,
    };
    checkpoint_continues_bit_exact(&iris_desc(Some(rule)), 36, 120);
    checkpoint_continues_bit_exact(&iris_desc(Some(rule)), 80, 120);
}

#[test]
fn trailing_bytes_after_the_body_are_malformed() {
    // A valid blob with one byte slipped in before the CRC, the CRC made right again: the
    // body no longer uses every byte.
    let bytes = reference(BlobKind::Model).encode();
    let mut longer = bytes[..bytes.len() - 4].to_vec();
    longer.push(0);
    let crc = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC).checksum(&longer);
    longer.extend_from_slice(&crc.to_le_bytes());
    assert_eq!(blob::decode(&longer).err(), blob_err(BlobError::Malformed));
    assert!(blob::decode(&bytes).is_ok());
}
