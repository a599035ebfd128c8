//! The blob format for models and checkpoints, and its validating decoder.
//!
//! # Layout
//!
//! | bytes | content |
//! |---|---|
//! | 0..4 | magic `HONB` |
//! | 4..6 | format version, `u16` little-endian ([`FORMAT_VERSION`]) |
//! | 6..n−4 | body: [`BlobBody`] in postcard |
//! | n−4..n | CRC-32 (ISO-HDLC, the CRC of zlib and PNG) of bytes 0..n−4, little-endian |
//!
//! The body holds the kind (factory model or checkpoint), the full model description (layers,
//! Q-formats, loss, training setup), the input scaling, the training state of a checkpoint
//! (steps, updates, generator state, the current fraction bits of every moving tensor) and the
//! tensors, each tagged with its layer, role and format and carried as little-endian bytes.
//!
//! # Validation
//! [`decode`] checks, in order: length, magic, version, CRC, postcard structure, then the
//! meaning: the description is valid, every tensor belongs to an existing layer with
//! parameters, its word, element count and byte length match the description, no tensor
//! appears twice, every tensor the kind requires is present and nothing else, and every
//! tensor's format is exactly the one the description (or, for momentum, the state) gives. What
//! comes out is a [`CheckedBlob`]; code past that point trusts it. Nothing in the decoder
//! panics on any input (a fuzz target exercises it).

use heapless::Vec;
use serde::{Deserialize, Serialize};

use crate::error::Error;
use crate::model::{ModelDesc, MAX_LAYERS};
use crate::num::{QFormat, RawMut, MAX_FRAC};

/// First four bytes of every blob.
pub const MAGIC: [u8; 4] = *b"HONB";
/// The format version this crate writes and reads. Version 2 added the outer-half counts of
/// dynamic fixed point to a checkpoint's training state; a version-1 blob is rejected with
/// [`BlobError::UnsupportedVersion`] (export the model again).
pub const FORMAT_VERSION: u16 = 2;
/// The most input channels a scaling entry list may hold.
pub const MAX_SCALED_CHANNELS: usize = 64;
/// The most tensors a blob may carry: value, master and momentum of weight and bias per layer.
pub const MAX_TENSORS: usize = 6 * MAX_LAYERS;

const CRC: crc::Crc<u32> = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);

/// Why a blob was rejected.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BlobError {
    /// Shorter than magic, version and CRC.
    TooShort,
    /// The first four bytes are not `HONB`.
    BadMagic,
    /// Written by another format version.
    UnsupportedVersion {
        /// The version found.
        found: u16,
    },
    /// The CRC does not match: the bytes were corrupted.
    CrcMismatch,
    /// The body is not a valid postcard encoding of the expected structure.
    Malformed,
    /// A tensor names a layer that does not exist or has no parameters.
    NoSuchLayer {
        /// The layer named.
        layer: u8,
    },
    /// A tensor's word, element count or byte length does not match the description.
    TensorShape {
        /// The layer.
        layer: u8,
        /// The role.
        role: TensorRole,
    },
    /// The same tensor appears twice.
    Duplicate {
        /// The layer.
        layer: u8,
        /// The role.
        role: TensorRole,
    },
    /// A tensor the blob kind requires is missing.
    Missing {
        /// The layer.
        layer: u8,
        /// The role.
        role: TensorRole,
    },
    /// A checkpoint without training state, or a model with one.
    StateMismatch,
    /// Scaling entries do not match the input channels.
    Scaling,
    /// The output buffer is too small for the encoding.
    BufferTooSmall,
    /// Too many tensors for [`MAX_TENSORS`].
    TooManyTensors,
}

impl core::fmt::Display for BlobError {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        match *self {
            BlobError::TooShort => f.write_str("too short to be a blob"),
            BlobError::BadMagic => f.write_str("not a hone blob (bad magic)"),
            BlobError::UnsupportedVersion { found } => {
                write!(
                    f,
                    "format version {found}, this build reads version {FORMAT_VERSION}"
                )
            }
            BlobError::CrcMismatch => f.write_str("CRC mismatch: the blob is corrupted"),
            BlobError::Malformed => f.write_str("body is malformed"),
            BlobError::NoSuchLayer { layer } => {
                write!(f, "tensor for layer {layer}, which has no parameters")
            }
            BlobError::TensorShape { layer, role } => write!(
                f,
                "layer {layer} {role}: word or size does not match the description"
            ),
            BlobError::Duplicate { layer, role } => write!(f, "layer {layer} {role} appears twice"),
            BlobError::Missing { layer, role } => write!(f, "layer {layer} {role} is missing"),
            BlobError::StateMismatch => f.write_str("training state does not match the blob kind"),
            BlobError::Scaling => f.write_str("input scaling does not match the input channels"),
            BlobError::BufferTooSmall => f.write_str("output buffer too small"),
            BlobError::TooManyTensors => f.write_str("too many tensors"),
        }
    }
}

impl From<BlobError> for Error {
    fn from(e: BlobError) -> Error {
        Error::Blob(e)
    }
}

/// What a blob holds.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum BlobKind {
    /// A factory model: every parameter tensor, no training state.
    Model,
    /// A checkpoint of training: the trained tensors and the training state.
    Checkpoint,
}

/// Which tensor of a layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum TensorRole {
    /// Weights (value format).
    Weight,
    /// Bias (value format).
    Bias,
    /// Master weights.
    MasterWeight,
    /// Master bias.
    MasterBias,
    /// Weight momentum (accumulator format).
    MomentumWeight,
    /// Bias momentum (accumulator format).
    MomentumBias,
}

impl core::fmt::Display for TensorRole {
    fn fmt(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
        f.write_str(match self {
            TensorRole::Weight => "weights",
            TensorRole::Bias => "bias",
            TensorRole::MasterWeight => "master weights",
            TensorRole::MasterBias => "master bias",
            TensorRole::MomentumWeight => "weight momentum",
            TensorRole::MomentumBias => "bias momentum",
        })
    }
}

/// Scaling of one input channel: `x = (raw − offset) · gain`, applied before quantizing to
/// the input format. Learned on the host from the factory data; the device applies the same.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ChannelScale {
    /// Subtracted from the raw reading.
    pub offset: f32,
    /// Multiplies the difference.
    pub gain: f32,
}

/// The training state carried by a checkpoint.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TrainState {
    /// Samples stepped.
    pub steps: u32,
    /// Updates applied.
    pub updates: u32,
    /// Generator state.
    pub rng: [u32; 4],
    /// Current fraction bits per layer: output, gradient, weight accumulator, bias
    /// accumulator.
    pub fracs: [[u8; 4]; MAX_LAYERS],
    /// Dynamic fixed point: values written, values saturated and values in the outer half
    /// of the range ([`crate::kernel::Tally::high`]) since the last adjustment, per layer, for
    /// output, gradient, weight accumulator and bias accumulator (in that order: four values,
    /// four saturations, four outer-half counts), so a restored trainer adjusts at the same
    /// moment and in the same way as the one that wrote the checkpoint.
    pub window: [[u32; 12]; MAX_LAYERS],
}

/// One tensor as carried in a blob.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct TensorBlob<'a> {
    /// Layer index.
    pub layer: u8,
    /// Role.
    pub role: TensorRole,
    /// Format of the values.
    pub format: QFormat,
    /// Number of values.
    pub elems: u32,
    /// Little-endian bytes, `elems × word bytes` long.
    pub data: &'a [u8],
}

/// The postcard body of a blob.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct BlobBody<'a> {
    /// Model or checkpoint.
    pub kind: BlobKind,
    /// The model description.
    pub desc: ModelDesc,
    /// Input scaling per input channel (empty: inputs are already scaled).
    pub scaling: Vec<ChannelScale, MAX_SCALED_CHANNELS>,
    /// Training state (checkpoints only).
    pub state: Option<TrainState>,
    /// The tensors.
    #[serde(borrow)]
    pub tensors: Vec<TensorBlob<'a>, MAX_TENSORS>,
}

/// A blob that passed every check of [`decode`].
///
/// It keeps the description and borrows the rest from the blob's bytes: the scaling, the
/// training state and the tensors are read when asked for ([`CheckedBlob::scaling`],
/// [`CheckedBlob::state`], [`CheckedBlob::tensors`]), so a device decoding a blob holds the
/// description and one tensor header at a time, not the scaling table, the state or the list.
#[derive(Clone, Debug, PartialEq)]
pub struct CheckedBlob<'a> {
    kind: BlobKind,
    desc: ModelDesc,
    scaling: Scaling<'a>,
    /// Postcard bytes of the training state (after the `Option` tag); validated by [`decode`].
    state: Option<&'a [u8]>,
    /// Postcard bytes of the tensors, after the count; validated by [`decode`].
    tensor_bytes: &'a [u8],
    count: usize,
}

/// A list of [`ChannelScale`]: borrowed from memory, or read entry by entry from a checked
/// blob's bytes (postcard writes an `f32` as its 4 little-endian bytes, so an entry is 8 bytes
/// and needs no parsing state).
#[derive(Clone, Copy, Debug)]
pub struct Scaling<'a>(ScalingRepr<'a>);

#[derive(Clone, Copy, Debug)]
enum ScalingRepr<'a> {
    Items(&'a [ChannelScale]),
    /// `8 × n` bytes of `n` entries.
    Encoded(&'a [u8]),
}

/// Bytes of one [`ChannelScale`] in postcard.
const SCALE_BYTES: usize = 8;

impl<'a> Scaling<'a> {
    /// No scaling: inputs are already scaled.
    pub const NONE: Scaling<'static> = Scaling(ScalingRepr::Items(&[]));

    /// Number of entries.
    pub fn len(&self) -> usize {
        match self.0 {
            ScalingRepr::Items(s) => s.len(),
            ScalingRepr::Encoded(b) => b.len() / SCALE_BYTES,
        }
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Entry `i`.
    pub fn get(&self, i: usize) -> Option<ChannelScale> {
        match self.0 {
            ScalingRepr::Items(s) => s.get(i).copied(),
            ScalingRepr::Encoded(b) => {
                let e = b.get(i * SCALE_BYTES..(i + 1) * SCALE_BYTES)?;
                let f = |k: usize| f32::from_le_bytes([e[k], e[k + 1], e[k + 2], e[k + 3]]);
                Some(ChannelScale {
                    offset: f(0),
                    gain: f(4),
                })
            }
        }
    }

    /// The entries in order.
    pub fn iter(&self) -> impl Iterator<Item = ChannelScale> + 'a {
        let s = *self;
        (0..s.len()).filter_map(move |i| s.get(i))
    }
}

impl<'a> From<&'a [ChannelScale]> for Scaling<'a> {
    fn from(s: &'a [ChannelScale]) -> Scaling<'a> {
        Scaling(ScalingRepr::Items(s))
    }
}

impl<'a, const N: usize> From<&'a Vec<ChannelScale, N>> for Scaling<'a> {
    fn from(s: &'a Vec<ChannelScale, N>) -> Scaling<'a> {
        Scaling(ScalingRepr::Items(s))
    }
}

impl<'a, const N: usize> From<&'a [ChannelScale; N]> for Scaling<'a> {
    fn from(s: &'a [ChannelScale; N]) -> Scaling<'a> {
        Scaling(ScalingRepr::Items(s))
    }
}

impl PartialEq for Scaling<'_> {
    fn eq(&self, other: &Self) -> bool {
        // Bitwise, as the encoded bytes compare.
        self.len() == other.len()
            && self.iter().zip(other.iter()).all(|(a, b)| {
                a.offset.to_bits() == b.offset.to_bits() && a.gain.to_bits() == b.gain.to_bits()
            })
    }
}

/// Written as postcard writes a list of entries, so a blob re-encoded from a checked one
/// carries the same bytes.
impl Serialize for Scaling<'_> {
    fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        use serde::ser::SerializeSeq;
        let mut seq = s.serialize_seq(Some(self.len()))?;
        for e in self.iter() {
            seq.serialize_element(&e)?;
        }
        seq.end()
    }
}

/// What [`decode`] checks of a checkpoint's state before trusting it: the generator and the
/// fraction bits. The interval counts are read past, not kept, so the check holds 72 bytes,
/// not the whole state.
#[derive(Deserialize)]
struct StateHead {
    #[allow(dead_code)]
    steps: u32,
    #[allow(dead_code)]
    updates: u32,
    rng: [u32; 4],
    fracs: [[u8; 4]; MAX_LAYERS],
    #[allow(dead_code)]
    window: SkipWindow,
}

/// Reads a [`TrainState::window`] and keeps nothing of it.
struct SkipWindow;

impl<'de> Deserialize<'de> for SkipWindow {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<SkipWindow, D::Error> {
        struct Rows;
        impl<'de> serde::de::Visitor<'de> for Rows {
            type Value = SkipWindow;
            fn expecting(&self, f: &mut core::fmt::Formatter<'_>) -> core::fmt::Result {
                f.write_str("interval counts")
            }
            fn visit_seq<A: serde::de::SeqAccess<'de>>(
                self,
                mut a: A,
            ) -> Result<SkipWindow, A::Error> {
                for _ in 0..MAX_LAYERS {
                    a.next_element::<[u32; 12]>()?
                        .ok_or_else(|| serde::de::Error::invalid_length(0, &self))?;
                }
                Ok(SkipWindow)
            }
        }
        d.deserialize_tuple(MAX_LAYERS, Rows)
    }
}

/// The tensors of a [`CheckedBlob`], read one at a time from the validated bytes.
#[derive(Clone, Debug)]
pub struct Tensors<'a> {
    rest: &'a [u8],
    left: usize,
}

impl<'a> Iterator for Tensors<'a> {
    type Item = TensorBlob<'a>;

    fn next(&mut self) -> Option<TensorBlob<'a>> {
        if self.left == 0 {
            return None;
        }
        // The bytes were validated by `decode`, so this parse succeeds; should it not, the
        // iteration simply ends.
        let (t, rest) = postcard::take_from_bytes::<TensorBlob<'a>>(self.rest).ok()?;
        self.rest = rest;
        self.left -= 1;
        Some(t)
    }

    fn size_hint(&self) -> (usize, Option<usize>) {
        (0, Some(self.left))
    }
}

impl<'a> CheckedBlob<'a> {
    /// Model or checkpoint.
    pub fn kind(&self) -> BlobKind {
        self.kind
    }

    /// The model description.
    pub fn desc(&self) -> &ModelDesc {
        &self.desc
    }

    /// Input scaling, read from the blob's bytes.
    pub fn scaling(&self) -> Scaling<'a> {
        self.scaling
    }

    /// Training state of a checkpoint, read from the blob's bytes (648 bytes: hold it only
    /// where it is needed).
    pub fn state(&self) -> Option<TrainState> {
        // The bytes were validated by `decode`, so this parse succeeds.
        postcard::take_from_bytes::<TrainState>(self.state?)
            .ok()
            .map(|(st, _)| st)
    }

    /// The tensors, in blob order.
    pub fn tensors(&self) -> Tensors<'a> {
        Tensors {
            rest: self.tensor_bytes,
            left: self.count,
        }
    }

    /// Number of tensors.
    pub fn tensor_count(&self) -> usize {
        self.count
    }

    /// The tensor of a layer and role, if the blob carries it.
    pub fn tensor(&self, layer: usize, role: TensorRole) -> Option<TensorBlob<'a>> {
        self.tensors()
            .find(|t| t.layer as usize == layer && t.role == role)
    }

    /// The whole body, tensors gathered into a list (for re-encoding and comparisons).
    ///
    /// # Errors
    /// [`BlobError::TooManyTensors`] cannot happen for a decoded blob, whose count was
    /// checked; it is the error of a list that does not fit.
    pub fn to_body(&self) -> Result<BlobBody<'a>, Error> {
        let mut tensors = Vec::new();
        for t in self.tensors() {
            tensors.push(t).map_err(|_| BlobError::TooManyTensors)?;
        }
        let mut scaling = Vec::new();
        for e in self.scaling.iter() {
            scaling.push(e).map_err(|_| BlobError::Scaling)?;
        }
        Ok(BlobBody {
            kind: self.kind,
            desc: self.desc.clone(),
            scaling,
            state: self.state(),
            tensors,
        })
    }
}

/// Copies a tensor's bytes into a raw buffer of the same word and length.
///
/// # Errors
/// [`BlobError::TensorShape`] if word or length differ.
pub fn copy_tensor(t: &TensorBlob<'_>, out: &mut RawMut<'_>) -> Result<(), Error> {
    if out.word() != t.format.word || out.len() != t.elems as usize || !out.read_le(t.data) {
        return Err(BlobError::TensorShape {
            layer: t.layer,
            role: t.role,
        }
        .into());
    }
    Ok(())
}

/// The exact format a tensor of `role` must have in layer `layer`, and whether a blob of this
/// kind may carry it at all. A factory model carries the values of every parameter tensor; a
/// checkpoint carries what training changes: the values of trained tensors, their master
/// copies where the description has them, and their momentum when momentum is on, in the
/// accumulator format of the moment (`state.fracs`). `None` for a layer that does not exist or
/// has no parameters.
fn expected(
    desc: &ModelDesc,
    kind: BlobKind,
    fracs: Option<&[[u8; 4]; MAX_LAYERS]>,
    layer: usize,
    role: TensorRole,
) -> Option<(QFormat, bool)> {
    let l = desc.layers.get(layer)?;
    if !l.kind.has_params() {
        return None;
    }
    let checkpoint = kind == BlobKind::Checkpoint;
    let (tw, tb) = (l.mode.trains_weight(), l.mode.trains_bias());
    let momentum = !desc.train.momentum.is_zero();
    let fracs = fracs.and_then(|f| f.get(layer)).copied().unwrap_or([0; 4]);
    Some(match role {
        TensorRole::Weight => (l.weight.value, !checkpoint || tw),
        TensorRole::Bias => (l.bias.value, !checkpoint || tb),
        TensorRole::MasterWeight => match l.weight.master {
            Some(m) => (m, checkpoint && tw),
            None => (l.weight.value, false),
        },
        TensorRole::MasterBias => match l.bias.master {
            Some(m) => (m, checkpoint && tb),
            None => (l.bias.value, false),
        },
        TensorRole::MomentumWeight => (
            QFormat {
                word: l.weight.accum.word,
                frac: fracs[2],
            },
            checkpoint && tw && momentum,
        ),
        TensorRole::MomentumBias => (
            QFormat {
                word: l.bias.accum.word,
                frac: fracs[3],
            },
            checkpoint && tb && momentum,
        ),
    })
}

/// Validates a blob and returns its checked form. See the [module docs](self).
///
/// # Example
/// ```
/// use hone_core::blob::{self, BlobKind, TensorBlob, TensorRole};
/// # use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape};
/// # use hone_core::model::{TrainDesc, TrainMode};
/// # use hone_core::num::{QFormat, QScalar, Word};
/// # let q = QFormat::new_unchecked(Word::I16, 12);
/// # let p = ParamFormats::plain(q, 20);
/// # let dense = LayerDesc { kind: LayerKind::Dense { units: 1 }, mode: TrainMode::Full,
/// #                         weight: p, bias: p, out: q, grad: q };
/// # let train = TrainDesc::sgd(QScalar { raw: 1, frac: 1 });
/// // A one-weight model y = w·x + b in Q3.12, w = 0.5 (raw 2048), b = 0, as a factory blob.
/// let desc = ModelDesc::new(Shape::vector(1), q, &[dense], Loss::SquaredError, train)?;
/// let w = TensorBlob { layer: 0, role: TensorRole::Weight, format: q, elems: 1,
///                      data: &2048i16.to_le_bytes() };
/// let b = TensorBlob { role: TensorRole::Bias, data: &[0, 0], ..w };
/// let mut buf = [0u8; 256];
/// let n = blob::encode_parts(BlobKind::Model, &desc, &[], None, 2, [w, b].into_iter(), &mut buf)?;
/// let checked = blob::decode(&buf[..n])?;
/// assert_eq!(checked.kind(), BlobKind::Model);
/// assert_eq!(checked.desc(), &desc);
/// let weight = checked.tensor(0, TensorRole::Weight).unwrap();
/// assert_eq!(weight.format.to_f64(i32::from(i16::from_le_bytes([weight.data[0], weight.data[1]]))), 0.5);
/// // One flipped bit and the CRC refuses the blob.
/// buf[8] ^= 1;
/// assert!(blob::decode(&buf[..n]).is_err());
/// # Ok::<(), hone_core::Error>(())
/// ```
///
/// # Errors
/// [`Error::Blob`] for framing and tensor problems; the description's own errors for an
/// invalid model description inside a well-framed blob.
pub fn decode(bytes: &[u8]) -> Result<CheckedBlob<'_>, Error> {
    if bytes.len() < 10 {
        return Err(BlobError::TooShort.into());
    }
    let (head, rest) = bytes.split_at(6);
    if head[..4] != MAGIC {
        return Err(BlobError::BadMagic.into());
    }
    let version = u16::from_le_bytes([head[4], head[5]]);
    if version != FORMAT_VERSION {
        return Err(BlobError::UnsupportedVersion { found: version }.into());
    }
    let (body_bytes, crc_bytes) = rest.split_at(rest.len() - 4);
    let stored = u32::from_le_bytes([crc_bytes[0], crc_bytes[1], crc_bytes[2], crc_bytes[3]]);
    let computed = CRC.checksum(&bytes[..bytes.len() - 4]);
    if stored != computed {
        return Err(BlobError::CrcMismatch.into());
    }
    // The body is read field by field in the order postcard wrote `BlobBody`, so the tensor
    // list never has to be held whole.
    fn take<'b, T: Deserialize<'b>>(b: &'b [u8]) -> Result<(T, &'b [u8]), Error> {
        postcard::take_from_bytes(b).map_err(|_| BlobError::Malformed.into())
    }
    let (kind, rest): (BlobKind, _) = take(body_bytes)?;
    let (desc, rest): (ModelDesc, _) = take(rest)?;
    // The scaling entries are 8 bytes each: kept as bytes, read when asked for.
    let (n, rest): (u64, _) = take(rest)?;
    if n > MAX_SCALED_CHANNELS as u64 || (n as usize) * SCALE_BYTES > rest.len() {
        return Err(BlobError::Malformed.into());
    }
    let (scaling, rest) = rest.split_at(n as usize * SCALE_BYTES);
    // The state is checked through its head and kept as bytes.
    let (head, after): (Option<StateHead>, _) = take(rest)?;
    let state = head.as_ref().map(|_| &rest[1..rest.len() - after.len()]);
    let (count, tensor_bytes): (u64, _) = take(after)?;
    if count > MAX_TENSORS as u64 {
        return Err(BlobError::TooManyTensors.into());
    }
    let blob = CheckedBlob {
        kind,
        desc,
        scaling: Scaling(ScalingRepr::Encoded(scaling)),
        state,
        tensor_bytes,
        count: count as usize,
    };
    check(&blob, head.as_ref())?;
    Ok(blob)
}

/// Whether a checkpoint state's fraction bits fit `desc`. They must be the description's
/// wherever they cannot have moved: every one when dynamic fixed point is off; the
/// accumulator formats of a layer that keeps no such accumulator (no parameters, or the
/// weights or the bias not training); and the unused layer slots always (a trainer writes
/// zeros there). With dynamic fixed point a moving tensor may sit anywhere up to [`MAX_FRAC`].
pub(crate) fn state_fracs_fit(desc: &ModelDesc, fracs: &[[u8; 4]; MAX_LAYERS]) -> bool {
    fracs.iter().enumerate().all(|(k, f)| {
        let Some(l) = desc.layers.get(k) else {
            return *f == [0; 4];
        };
        let own = [
            l.out.frac,
            l.grad.frac,
            l.weight.accum.frac,
            l.bias.accum.frac,
        ];
        let params = l.kind.has_params();
        let moves = match desc.train.dynamic {
            None => [false; 4],
            Some(_) => [
                true,
                true,
                params && l.mode.trains_weight(),
                params && l.mode.trains_bias(),
            ],
        };
        f.iter()
            .zip(own.iter().zip(moves))
            .all(|(&b, (&o, m))| if m { b <= MAX_FRAC } else { b == o })
    })
}

/// Checks a parsed blob: description, scaling, state, every tensor, required tensors, and
/// that the tensor list ends exactly at the end of the body.
fn check(b: &CheckedBlob<'_>, head: Option<&StateHead>) -> Result<(), Error> {
    let desc = &b.desc;
    desc.check()?;
    let shapes = crate::model::shapes(desc.input, &desc.layers, desc.loss)?;
    if !b.scaling.is_empty() && b.scaling.len() != desc.input.channels as usize {
        return Err(BlobError::Scaling.into());
    }
    if b.scaling
        .iter()
        .any(|s| !s.offset.is_finite() || !s.gain.is_finite())
    {
        return Err(BlobError::Scaling.into());
    }
    match (b.kind, head) {
        (BlobKind::Model, None) => {}
        (BlobKind::Checkpoint, Some(st)) => {
            if crate::num::Rng::from_state(st.rng).is_none() || !state_fracs_fit(desc, &st.fracs) {
                return Err(BlobError::StateMismatch.into());
            }
        }
        _ => return Err(BlobError::StateMismatch.into()),
    }
    // One bit per (layer, role): what the blob carries.
    let mut seen = [0u8; MAX_LAYERS];
    let mut rest = b.tensor_bytes;
    for _ in 0..b.count {
        let (t, r): (TensorBlob<'_>, _) =
            postcard::take_from_bytes(rest).map_err(|_| BlobError::Malformed)?;
        rest = r;
        let layer = t.layer as usize;
        let Some((format, allowed)) = expected(desc, b.kind, head.map(|h| &h.fracs), layer, t.role)
        else {
            return Err(BlobError::NoSuchLayer { layer: t.layer }.into());
        };
        let word = format.word;
        let g = &shapes.layers[layer];
        let elems = match t.role {
            TensorRole::Weight | TensorRole::MasterWeight | TensorRole::MomentumWeight => g.weights,
            _ => g.biases,
        };
        // The format must be exactly the description's (or the state's, for momentum): a blob
        // cannot rescale a tensor behind the description's back.
        let shape_ok = allowed
            && t.format == format
            && t.elems == elems
            && t.data.len() == elems as usize * word.bytes();
        if !shape_ok {
            return Err(BlobError::TensorShape {
                layer: t.layer,
                role: t.role,
            }
            .into());
        }
        let bit = 1u8 << role_index(t.role);
        if seen[layer] & bit != 0 {
            return Err(BlobError::Duplicate {
                layer: t.layer,
                role: t.role,
            }
            .into());
        }
        seen[layer] |= bit;
    }
    // The body must use every byte: trailing bytes would be data nobody validated.
    if !rest.is_empty() {
        return Err(BlobError::Malformed.into());
    }
    // Required tensors: a model carries every value tensor; a checkpoint carries the value
    // of every trained tensor and, where the description has them, its master and momentum.
    let with_momentum = !desc.train.momentum.is_zero();
    for (k, l) in desc.layers.iter().enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        let (tw, tb) = match b.kind {
            BlobKind::Model => (true, true),
            BlobKind::Checkpoint => (l.mode.trains_weight(), l.mode.trains_bias()),
        };
        let checkpoint = b.kind == BlobKind::Checkpoint;
        let required = [
            (TensorRole::Weight, tw),
            (TensorRole::Bias, tb),
            (
                TensorRole::MasterWeight,
                checkpoint && tw && l.weight.master.is_some(),
            ),
            (
                TensorRole::MasterBias,
                checkpoint && tb && l.bias.master.is_some(),
            ),
            (
                TensorRole::MomentumWeight,
                checkpoint && tw && with_momentum,
            ),
            (TensorRole::MomentumBias, checkpoint && tb && with_momentum),
        ];
        for (role, needed) in required {
            if needed && seen[k] & (1 << role_index(role)) == 0 {
                return Err(BlobError::Missing {
                    layer: k as u8,
                    role,
                }
                .into());
            }
        }
    }
    Ok(())
}

const fn role_index(role: TensorRole) -> u8 {
    match role {
        TensorRole::Weight => 0,
        TensorRole::Bias => 1,
        TensorRole::MasterWeight => 2,
        TensorRole::MasterBias => 3,
        TensorRole::MomentumWeight => 4,
        TensorRole::MomentumBias => 5,
    }
}

/// Encodes a body into `out`: magic, version, postcard body, CRC. Returns the bytes written.
///
/// # Errors
/// [`BlobError::BufferTooSmall`] if `out` is too short; [`BlobError::Malformed`] if the body
/// cannot be serialized.
pub fn encode(body: &BlobBody<'_>, out: &mut [u8]) -> Result<usize, Error> {
    encode_parts(
        body.kind,
        &body.desc,
        &body.scaling,
        body.state.as_ref(),
        body.tensors.len(),
        body.tensors.iter().copied(),
        out,
    )
}

/// Encodes a blob from its parts, writing the tensors as they come from `tensors` (which must
/// yield exactly `count` of them), so no tensor list is held in memory. The bytes are those
/// [`encode`] writes for the same body. Returns the bytes written.
///
/// # Errors
/// [`BlobError::BufferTooSmall`] if `out` is too short; [`BlobError::TooManyTensors`] past
/// [`MAX_TENSORS`] or when `tensors` does not yield `count` items; [`BlobError::Scaling`] past
/// [`MAX_SCALED_CHANNELS`].
pub fn encode_parts<'t, 's, I>(
    kind: BlobKind,
    desc: &ModelDesc,
    scaling: impl Into<Scaling<'s>>,
    state: Option<&TrainState>,
    count: usize,
    tensors: I,
    out: &mut [u8],
) -> Result<usize, Error>
where
    I: Iterator<Item = TensorBlob<'t>>,
{
    let scaling = scaling.into();
    if count > MAX_TENSORS {
        return Err(BlobError::TooManyTensors.into());
    }
    if scaling.len() > MAX_SCALED_CHANNELS {
        return Err(BlobError::Scaling.into());
    }
    if out.len() < 10 {
        return Err(BlobError::BufferTooSmall.into());
    }
    out[..4].copy_from_slice(&MAGIC);
    out[4..6].copy_from_slice(&FORMAT_VERSION.to_le_bytes());
    let room = out.len() - 4;
    let mut pos = 6;
    // Postcard writes a struct as its fields in order and a list as a varint length followed
    // by the items, so writing the parts one after the other gives the body's bytes.
    fn put<T: Serialize + ?Sized>(
        v: &T,
        out: &mut [u8],
        pos: &mut usize,
        room: usize,
    ) -> Result<(), Error> {
        let dest = out.get_mut(*pos..room).ok_or(BlobError::BufferTooSmall)?;
        match postcard::to_slice(v, dest) {
            Ok(w) => {
                *pos += w.len();
                Ok(())
            }
            Err(postcard::Error::SerializeBufferFull) => Err(BlobError::BufferTooSmall.into()),
            Err(_) => Err(BlobError::Malformed.into()),
        }
    }
    put(&kind, out, &mut pos, room)?;
    put(desc, out, &mut pos, room)?;
    put(&scaling, out, &mut pos, room)?;
    put(&state, out, &mut pos, room)?;
    put(&(count as u64), out, &mut pos, room)?;
    let mut written = 0usize;
    for t in tensors {
        if written == count {
            return Err(BlobError::TooManyTensors.into());
        }
        put(&t, out, &mut pos, room)?;
        written += 1;
    }
    if written != count {
        return Err(BlobError::TooManyTensors.into());
    }
    let crc = CRC.checksum(&out[..pos]);
    out[pos..pos + 4].copy_from_slice(&crc.to_le_bytes());
    Ok(pos + 4)
}

/// Bytes [`encode`] will write for `body`.
///
/// # Errors
/// [`BlobError::Malformed`] if the body cannot be serialized.
pub fn encoded_len(body: &BlobBody<'_>) -> Result<usize, Error> {
    postcard::experimental::serialized_size(body)
        .map(|n| n + 10)
        .map_err(|_| BlobError::Malformed.into())
}
