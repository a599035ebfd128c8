//! The C interface to the hone core: a second way in, not a second engine. Every function is
//! glue: it checks the pointers C hands over, views them as the core's types and calls the
//! core (`hone_core::blob::decode`, `Plan::of`, `Trainer`, `guard::calibrate`, the checkpoint
//! `Store`). No training, rounding or judging happens here.
//!
//! # Memory
//!
//! Nothing is allocated. [`hone_memory_size`] tells how many bytes a model blob needs;
//! [`hone_init`] lays out, in one caller-provided block aligned to [`HONE_MEMORY_ALIGN`]
//! bytes, the session handle, the model's parameters (copied out of the blob) and the
//! trainer's arena. The block and the blob must stay where they are, untouched, for as long
//! as the session is used: the handle points into both. A second session needs a second block.
//!
//! # Samples
//!
//! An input is the model's input, in its input format ([`hone_input_info`]): `count` values of
//! 1, 2 or 4 bytes, aligned to their size. A regression target is a [`HoneTarget`] with its
//! own word and fraction bits; a class target has `values` NULL and a `label`.
//!
//! # Status codes
//!
//! Every function returns [`HONE_OK`] (0) or a negative `HONE_ERR_*` code, each documented
//! where it is defined; [`hone_error_str`] gives a short English text for any code.
//!
//! The header `include/hone.h` is generated from this file by cbindgen
//! (`cargo xtask ffi-header`); the test command fails when it is stale.
#![cfg_attr(target_os = "none", no_std)]
#![deny(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]
#![deny(clippy::undocumented_unsafe_blocks)]

use core::ffi::{c_char, c_void};
use core::mem::{align_of, size_of, MaybeUninit};
use core::ptr::{addr_of, addr_of_mut};

use embedded_storage::nor_flash::{
    ErrorType, NorFlash, NorFlashError, NorFlashErrorKind, ReadNorFlash,
};
use hone_core::blob::{self, BlobError, BlobKind, CheckedBlob, TensorRole};
use hone_core::guard::{self, GuardConfig, Rejection, Verdict};
use hone_core::layer::loss::{LossValue, Target};
use hone_core::layer::Tensor;
use hone_core::model::{ModelDesc, MAX_LAYERS};
use hone_core::num::{QFormat, Raw, RawMut, Word};
use hone_core::plan::Plan;
use hone_core::store::{Store, StoreError};
use hone_core::train::{LayerParams, Trainer};
use hone_core::Error;

/// Success.
pub const HONE_OK: i32 = 0;
/// A pointer the call needs is NULL.
pub const HONE_ERR_NULL: i32 = -1;
/// The memory block, a sample or a target is not aligned as required.
pub const HONE_ERR_ALIGN: i32 = -2;
/// The memory block is smaller than [`hone_memory_size`] says.
pub const HONE_ERR_MEMORY: i32 = -3;
/// The blob is malformed or corrupted (bad magic, version, CRC or contents).
pub const HONE_ERR_BLOB: i32 = -4;
/// The model description is invalid, or uses a layer kind, loss, value word or training part
/// this library was built without.
pub const HONE_ERR_MODEL: i32 = -5;
/// A sample does not fit the model: wrong input or target length, a class label out of
/// range, or a target of the wrong kind for the loss.
pub const HONE_ERR_SAMPLE: i32 = -6;
/// The handle is not a session made by [`hone_init`].
pub const HONE_ERR_SESSION: i32 = -7;
/// Samples of a partial batch are pending; call [`hone_flush`] before a checkpoint.
pub const HONE_ERR_PENDING: i32 = -8;
/// An output or scratch buffer is too small.
pub const HONE_ERR_BUFFER: i32 = -9;
/// A flash callback reported an error (or is missing).
pub const HONE_ERR_FLASH: i32 = -10;
/// The flash region holds no valid checkpoint.
pub const HONE_ERR_NO_CHECKPOINT: i32 = -11;
/// The flash region or geometry is unusable (misaligned, too small, out of bounds, an
/// unsupported erase size), the checkpoint does not fit a slot, or it did not read back.
pub const HONE_ERR_STORE: i32 = -12;
/// The blob describes another model than the session's.
pub const HONE_ERR_OTHER_MODEL: i32 = -13;
/// Any other error of the core.
pub const HONE_ERR_INTERNAL: i32 = -14;

/// Alignment, in bytes, the memory block of [`hone_init`] needs.
pub const HONE_MEMORY_ALIGN: usize = 8;
/// Write unit of the flash behind [`HoneFlash`], in bytes: every write callback gets an
/// offset and a length that are multiples of it.
pub const HONE_FLASH_WRITE_SIZE: u32 = 4;

const MAGIC: u32 = 0x686F_6E65;

/// A session: the decoded factory blob, the memory plan, the parameters and the trainer,
/// inside the caller's memory block. Opaque to C.
pub struct HoneSession {
    magic: u32,
    factory: CheckedBlob<'static>,
    plan: Plan,
    params: [LayerParams<'static>; MAX_LAYERS],
    trainer: MaybeUninit<Trainer<'static>>,
}

// The C side promises 8-byte alignment and nothing more.
const _: () = assert!(align_of::<HoneSession>() <= HONE_MEMORY_ALIGN);

/// A regression target (`values` not NULL) or a class label (`values` NULL).
#[repr(C)]
#[derive(Clone, Copy)]
pub struct HoneTarget {
    /// `count` values of `word_bits` bits (8, 16 or 32), aligned to their size, or NULL for
    /// a class target.
    pub values: *const c_void,
    /// Number of values.
    pub count: u32,
    /// Bits of one value: 8, 16 or 32.
    pub word_bits: u8,
    /// Fraction bits of the values (0 to 31).
    pub frac: u8,
    /// The class label, when `values` is NULL.
    pub label: u16,
}

/// One sample: an input in the model's input format, and its target.
#[repr(C)]
#[derive(Clone, Copy)]
pub struct HoneSample {
    /// The input: as many values as the model takes, in its input word (see
    /// [`hone_input_info`]), aligned to their size.
    pub x: *const c_void,
    /// The target.
    pub y: HoneTarget,
}

/// What one training step or evaluation gave.
#[repr(C)]
#[derive(Clone, Copy, Default)]
pub struct HoneOutcome {
    /// The sample's loss, in units of 2^-24.
    pub loss: i64,
    /// Activations that saturated in the sample's forward pass.
    pub saturations: u32,
    /// The predicted class, or -1 for a regression model.
    pub predicted: i32,
    /// 1 if this step completed a batch and the weights changed, else 0.
    pub updated: u8,
}

/// The guard's thresholds (see `hone_core::guard::GuardConfig`).
#[repr(C)]
#[derive(Clone, Copy)]
pub struct HoneGuardConfig {
    /// Largest tolerated rise of the mean held-back loss, in parts per thousand.
    pub max_loss_rise_permille: u32,
    /// Largest tolerated saturation rate of activations on the held-back samples, in parts per
    /// million.
    pub max_saturation_ppm: u32,
    /// Rises below this absolute loss (units of 2^-24) are tolerated whatever the ratio.
    pub loss_floor: i64,
}

/// What one guarded calibration did.
#[repr(C)]
#[derive(Clone, Copy, Default)]
pub struct HoneReport {
    /// Mean held-back loss before training, in units of 2^-24.
    pub before_loss: i64,
    /// Mean held-back loss after training, in units of 2^-24.
    pub after_loss: i64,
    /// Saturated activations on the held-back samples before training.
    pub before_saturations: u32,
    /// Saturated activations on the held-back samples after training.
    pub after_saturations: u32,
    /// Samples trained on.
    pub trained: u32,
    /// 1 if the new weights were kept; 0 if the trainer was rolled back.
    pub accepted: u8,
    /// Why it was rolled back: 0 not rolled back, 1 the loss rose, 2 saturations spiked.
    pub rejection: u8,
}

/// The caller's flash, through callbacks. Offsets are from the start of the flash device the
/// callbacks address.
#[repr(C)]
#[derive(Clone, Copy)]
pub struct HoneFlash {
    /// Passed to every callback unchanged.
    pub ctx: *mut c_void,
    /// Size of the flash device in bytes.
    pub capacity: u32,
    /// Erase sector size in bytes: 1024, 2048 or 4096.
    pub erase_size: u32,
    /// Reads `len` bytes at `offset` into `buf`; returns 0 on success.
    pub read:
        Option<unsafe extern "C" fn(ctx: *mut c_void, offset: u32, buf: *mut u8, len: u32) -> i32>,
    /// Writes `len` bytes from `data` at `offset` (both multiples of [`HONE_FLASH_WRITE_SIZE`],
    /// into erased flash); returns 0 on success.
    pub write: Option<
        unsafe extern "C" fn(ctx: *mut c_void, offset: u32, data: *const u8, len: u32) -> i32,
    >,
    /// Erases `[from, to)` (both multiples of the erase size) to `0xFF`; returns 0 on success.
    pub erase: Option<unsafe extern "C" fn(ctx: *mut c_void, from: u32, to: u32) -> i32>,
}

/// The status code of a core error.
fn status(e: Error) -> i32 {
    match e {
        Error::InputLength { .. }
        | Error::TargetLength { .. }
        | Error::LabelOutOfRange { .. }
        | Error::TargetKind => HONE_ERR_SAMPLE,
        Error::Blob(BlobError::BufferTooSmall) => HONE_ERR_BUFFER,
        Error::Blob(_) => HONE_ERR_BLOB,
        Error::ArenaTooSmall { .. } => HONE_ERR_MEMORY,
        Error::PlanMismatch => HONE_ERR_OTHER_MODEL,
        Error::InvalidFormat
        | Error::FormatMismatch
        | Error::NotFinite
        | Error::EmptyModel
        | Error::TooManyLayers
        | Error::Layer { .. }
        | Error::Params { .. }
        | Error::NotBuilt(_) => HONE_ERR_MODEL,
        Error::InvalidTraining => HONE_ERR_PENDING,
        Error::Store(s) => store_status(s),
        _ => HONE_ERR_INTERNAL,
    }
}

fn store_status(e: StoreError) -> i32 {
    match e {
        StoreError::Flash(_) => HONE_ERR_FLASH,
        StoreError::NoCheckpoint => HONE_ERR_NO_CHECKPOINT,
        _ => HONE_ERR_STORE,
    }
}

fn word_of(bits: u8) -> Option<Word> {
    match bits {
        8 => Some(Word::I8),
        16 => Some(Word::I16),
        32 => Some(Word::I32),
        _ => None,
    }
}

/// 4-byte words that hold `elems` values of `word`.
fn words(elems: u32, word: Word) -> usize {
    (elems as usize * word.bytes()).div_ceil(4)
}

/// Bytes before the word region: the handle, rounded up to the block's alignment.
const HEADER: usize = size_of::<HoneSession>().div_ceil(HONE_MEMORY_ALIGN) * HONE_MEMORY_ALIGN;

/// Words of the parameter copies and of the arena.
fn layout(desc: &ModelDesc, plan: &Plan) -> (usize, usize) {
    let mut params = 0;
    for (l, g) in desc.layers.iter().zip(plan.shapes.layers.iter()) {
        if l.kind.has_params() {
            params += words(g.weights, l.weight.value.word) + words(g.biases, l.bias.value.word);
        }
    }
    (params, plan.ram_words())
}

/// A raw view of `len` values of `word` over `data`.
///
/// # Safety
/// `data` must be valid for reads of `len` values of `word` for `'a`, aligned to the word.
unsafe fn raw_from<'a>(data: *const c_void, word: Word, len: usize) -> Result<Raw<'a>, i32> {
    if data.is_null() {
        return Err(HONE_ERR_NULL);
    }
    if !(data as usize).is_multiple_of(word.bytes()) {
        return Err(HONE_ERR_ALIGN);
    }
    // SAFETY: the caller guarantees `len` readable values of this word at `data`, which is
    // non-null and aligned (checked above) and not written during `'a`.
    Ok(unsafe {
        match word {
            Word::I8 => Raw::I8(core::slice::from_raw_parts(data.cast::<i8>(), len)),
            Word::I16 => Raw::I16(core::slice::from_raw_parts(data.cast::<i16>(), len)),
            Word::I32 => Raw::I32(core::slice::from_raw_parts(data.cast::<i32>(), len)),
        }
    })
}

/// The core's sample for a C sample.
///
/// # Safety
/// As [`raw_from`] for the input (the model's input size and word) and for the target.
unsafe fn sample<'a>(
    desc: &ModelDesc,
    x: *const c_void,
    y: &HoneTarget,
) -> Result<(Tensor<'a>, Target<'a>), i32> {
    let fmt = desc.input_format;
    // SAFETY: forwarded from this function's contract.
    let x = unsafe { raw_from(x, fmt.word, desc.input.size() as usize)? };
    let target = if y.values.is_null() {
        Target::Class(y.label)
    } else {
        let word = word_of(y.word_bits).ok_or(HONE_ERR_SAMPLE)?;
        let yfmt = QFormat::new(word, y.frac).map_err(|_| HONE_ERR_SAMPLE)?;
        // SAFETY: forwarded from this function's contract.
        let raw = unsafe { raw_from(y.values, word, y.count as usize)? };
        Target::Values(Tensor { raw, fmt: yfmt })
    };
    Ok((Tensor { raw: x, fmt }, target))
}

/// The blob bytes at `blob`.
///
/// # Safety
/// `blob` must be valid for reads of `len` bytes for `'a`.
unsafe fn bytes<'a>(blob: *const u8, len: usize) -> Result<&'a [u8], i32> {
    if blob.is_null() {
        return Err(HONE_ERR_NULL);
    }
    // SAFETY: non-null, and readable for `len` bytes by the caller's contract.
    Ok(unsafe { core::slice::from_raw_parts(blob, len) })
}

/// The session's trainer and factory blob.
///
/// # Safety
/// `s` must be NULL or a handle from [`hone_init`] whose memory block is still in place and
/// not used by another call at the same time.
unsafe fn session<'s>(
    s: *mut HoneSession,
) -> Result<(&'s mut Trainer<'static>, &'s CheckedBlob<'static>), i32> {
    if s.is_null() {
        return Err(HONE_ERR_NULL);
    }
    if !(s as usize).is_multiple_of(align_of::<HoneSession>()) {
        return Err(HONE_ERR_ALIGN);
    }
    // SAFETY: `s` is non-null and aligned, and points to a block at least as large as a
    // handle (the caller's contract); the magic is written last by `hone_init`.
    let magic = unsafe { addr_of!((*s).magic).read() };
    if magic != MAGIC {
        return Err(HONE_ERR_SESSION);
    }
    // SAFETY: `hone_init` wrote the trainer before the magic. The trainer borrows the
    // factory blob, plan and parameters immutably and the arena mutably; the mutable
    // reference made here covers only the trainer field, and the shared one only the factory
    // field, so neither overlaps what the other or the trainer's own borrows reach mutably.
    unsafe {
        let trainer = (*addr_of_mut!((*s).trainer)).assume_init_mut();
        let factory = &*addr_of!((*s).factory);
        Ok((trainer, factory))
    }
}

fn decode_status(bytes: &[u8]) -> Result<CheckedBlob<'_>, i32> {
    blob::decode(bytes).map_err(status)
}

/// Writes the bytes a memory block for `blob` needs into `*out_bytes`.
///
/// # Safety
/// `blob` must be readable for `blob_len` bytes and `out_bytes` writable.
#[no_mangle]
pub unsafe extern "C" fn hone_memory_size(
    blob: *const u8,
    blob_len: usize,
    out_bytes: *mut usize,
) -> i32 {
    if out_bytes.is_null() {
        return HONE_ERR_NULL;
    }
    // SAFETY: the caller's contract.
    let bytes = match unsafe { bytes(blob, blob_len) } {
        Ok(b) => b,
        Err(e) => return e,
    };
    let decoded = match decode_status(bytes) {
        Ok(d) => d,
        Err(e) => return e,
    };
    let plan = match Plan::of(decoded.desc()) {
        Ok(p) => p,
        Err(e) => return status(e),
    };
    let (params, arena) = layout(decoded.desc(), &plan);
    // SAFETY: checked non-null; writable by the caller's contract.
    unsafe { out_bytes.write(HEADER + 4 * (params + arena)) };
    HONE_OK
}

/// Starts a session for the model `blob` (a factory model, or a checkpoint to resume from)
/// in the memory block `mem` of `mem_len` bytes, aligned to [`HONE_MEMORY_ALIGN`], and
/// writes its handle into `*out`.
///
/// # Safety
/// `blob` must be readable for `blob_len` bytes and `mem` writable for `mem_len` bytes; both
/// must stay in place and unchanged (except through this library) while the session is used.
/// `out` must be writable.
#[no_mangle]
pub unsafe extern "C" fn hone_init(
    mem: *mut c_void,
    mem_len: usize,
    blob: *const u8,
    blob_len: usize,
    out: *mut *mut HoneSession,
) -> i32 {
    if mem.is_null() || out.is_null() {
        return HONE_ERR_NULL;
    }
    if !(mem as usize).is_multiple_of(HONE_MEMORY_ALIGN) {
        return HONE_ERR_ALIGN;
    }
    // SAFETY: the blob outlives the session by the caller's contract.
    let bytes: &'static [u8] = match unsafe { bytes(blob, blob_len) } {
        Ok(b) => b,
        Err(e) => return e,
    };
    let factory = match decode_status(bytes) {
        Ok(d) => d,
        Err(e) => return e,
    };
    let plan = match Plan::of(factory.desc()) {
        Ok(p) => p,
        Err(e) => return status(e),
    };
    let (params_words, arena_words) = layout(factory.desc(), &plan);
    if mem_len < HEADER + 4 * (params_words + arena_words) {
        return HONE_ERR_MEMORY;
    }
    let s = mem.cast::<HoneSession>();
    // SAFETY: `mem` is aligned and large enough for the handle and the word region (checked
    // above), writable, and stays in place for the session (the caller's contract). Each
    // field is written through a raw pointer before any reference to it is made; the word
    // region starts after the handle and does not overlap it.
    unsafe {
        addr_of_mut!((*s).magic).write(0);
        addr_of_mut!((*s).factory).write(factory);
        addr_of_mut!((*s).plan).write(plan);
        addr_of_mut!((*s).params).write([LayerParams::NONE; MAX_LAYERS]);
        let region = core::slice::from_raw_parts_mut(
            mem.cast::<u8>().add(HEADER).cast::<u32>(),
            params_words + arena_words,
        );
        region.fill(0);
        let (param_words, arena) = region.split_at_mut(params_words);
        let factory: &'static CheckedBlob<'static> = &*addr_of!((*s).factory);
        let plan: &'static Plan = &*addr_of!((*s).plan);
        let params = &mut *addr_of_mut!((*s).params);
        if let Err(e) = copy_params(factory, plan, param_words, params) {
            return e;
        }
        let params: &'static [LayerParams<'static>] =
            params.get(..factory.desc().layers.len()).unwrap_or(&[]);
        let mut trainer = match Trainer::new(factory.desc(), plan, arena, params) {
            Ok(t) => t,
            Err(e) => return status(e),
        };
        if factory.kind() == BlobKind::Checkpoint {
            if let Err(e) = trainer.restore(factory) {
                return status(e);
            }
        }
        addr_of_mut!((*s).trainer).write(MaybeUninit::new(trainer));
        addr_of_mut!((*s).magic).write(MAGIC);
        out.write(s);
    }
    HONE_OK
}

/// Copies every parameter tensor of `blob` into `words`, and points `params` at the copies.
fn copy_params(
    blob: &CheckedBlob<'static>,
    plan: &Plan,
    mut free: &'static mut [u32],
    params: &mut [LayerParams<'static>; MAX_LAYERS],
) -> Result<(), i32> {
    let desc = blob.desc();
    for (k, ((l, g), p)) in desc
        .layers
        .iter()
        .zip(plan.shapes.layers.iter())
        .zip(params.iter_mut())
        .enumerate()
    {
        if !l.kind.has_params() {
            continue;
        }
        let mut take = |role: TensorRole, word: Word, elems: u32| -> Result<Raw<'static>, i32> {
            let n = words(elems, word);
            if free.len() < n {
                return Err(HONE_ERR_MEMORY);
            }
            let (here, rest) = core::mem::take(&mut free).split_at_mut(n);
            free = rest;
            let tensor = blob.tensor(k, role).ok_or(HONE_ERR_BLOB)?;
            let mut raw = RawMut::from_words(here, word, elems as usize).ok_or(HONE_ERR_BLOB)?;
            blob::copy_tensor(&tensor, &mut raw).map_err(status)?;
            Ok(match raw {
                RawMut::I8(v) => Raw::I8(v),
                RawMut::I16(v) => Raw::I16(v),
                RawMut::I32(v) => Raw::I32(v),
            })
        };
        let weight = take(TensorRole::Weight, l.weight.value.word, g.weights)?;
        let bias = take(TensorRole::Bias, l.bias.value.word, g.biases)?;
        *p = LayerParams { weight, bias };
    }
    Ok(())
}

/// Writes the model's input size (values per sample), its input word in bits and its input
/// fraction bits.
///
/// # Safety
/// `s` is a handle from [`hone_init`]; the out pointers are writable or NULL.
#[no_mangle]
pub unsafe extern "C" fn hone_input_info(
    s: *mut HoneSession,
    count: *mut u32,
    word_bits: *mut u8,
    frac: *mut u8,
) -> i32 {
    // SAFETY: the caller's contract.
    let (t, _) = match unsafe { session(s) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    let desc = t.desc();
    // SAFETY: each pointer is checked for NULL and writable by the caller's contract.
    unsafe {
        if !count.is_null() {
            count.write(desc.input.size());
        }
        if !word_bits.is_null() {
            word_bits.write(desc.input_format.word.bits() as u8);
        }
        if !frac.is_null() {
            frac.write(desc.input_format.frac);
        }
    }
    HONE_OK
}

fn outcome(o: hone_core::train::StepOutcome) -> HoneOutcome {
    HoneOutcome {
        loss: o.loss.0,
        saturations: o.saturations,
        predicted: o.predicted.map_or(-1, i32::from),
        updated: u8::from(o.updated),
    }
}

/// One training step on the sample `x`, `y`; the outcome goes to `*out` unless it is NULL.
///
/// # Safety
/// `s` is a handle from [`hone_init`]; `x` and `y` are a valid input and target (see
/// [`HoneSample`]); `out` is writable or NULL.
#[no_mangle]
pub unsafe extern "C" fn hone_step(
    s: *mut HoneSession,
    x: *const c_void,
    y: *const HoneTarget,
    out: *mut HoneOutcome,
) -> i32 {
    // SAFETY: the caller's contract.
    unsafe { step_or_evaluate(s, x, y, out, true) }
}

/// Evaluates the sample `x`, `y` under the current weights, without training.
///
/// # Safety
/// As [`hone_step`].
#[no_mangle]
pub unsafe extern "C" fn hone_evaluate(
    s: *mut HoneSession,
    x: *const c_void,
    y: *const HoneTarget,
    out: *mut HoneOutcome,
) -> i32 {
    // SAFETY: the caller's contract.
    unsafe { step_or_evaluate(s, x, y, out, false) }
}

/// # Safety
/// As [`hone_step`].
unsafe fn step_or_evaluate(
    s: *mut HoneSession,
    x: *const c_void,
    y: *const HoneTarget,
    out: *mut HoneOutcome,
    train: bool,
) -> i32 {
    if y.is_null() {
        return HONE_ERR_NULL;
    }
    // SAFETY: the caller's contract.
    let t = match unsafe { session(s) } {
        Ok((t, _)) => t,
        Err(e) => return e,
    };
    // SAFETY: `y` is non-null (checked above) and readable by the caller's contract.
    let y = unsafe { &*y };
    // SAFETY: the caller's contract.
    let (x, y) = match unsafe { sample(t.desc(), x, y) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    let result = if train {
        t.step(x, y)
    } else {
        t.evaluate(x, y)
    };
    match result {
        Ok(o) => {
            if !out.is_null() {
                // SAFETY: non-null and writable by the caller's contract.
                unsafe { out.write(outcome(o)) };
            }
            HONE_OK
        }
        Err(e) => status(e),
    }
}

/// Applies the samples of a partial batch now. `*updated` (unless NULL) says whether the
/// weights changed.
///
/// # Safety
/// `s` is a handle from [`hone_init`]; `updated` is writable or NULL.
#[no_mangle]
pub unsafe extern "C" fn hone_flush(s: *mut HoneSession, updated: *mut u8) -> i32 {
    // SAFETY: the caller's contract.
    let (t, _) = match unsafe { session(s) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    let u = t.flush();
    if !updated.is_null() {
        // SAFETY: non-null and writable by the caller's contract.
        unsafe { updated.write(u8::from(u)) };
    }
    HONE_OK
}

/// Writes the core's default guard thresholds into `*cfg`.
///
/// # Safety
/// `cfg` is writable.
#[no_mangle]
pub unsafe extern "C" fn hone_guard_default(cfg: *mut HoneGuardConfig) -> i32 {
    if cfg.is_null() {
        return HONE_ERR_NULL;
    }
    let d = GuardConfig::DEFAULT;
    // SAFETY: non-null and writable by the caller's contract.
    unsafe {
        cfg.write(HoneGuardConfig {
            max_loss_rise_permille: d.max_loss_rise_permille,
            max_saturation_ppm: d.max_saturation_ppm,
            loss_floor: d.loss_floor.0,
        });
    }
    HONE_OK
}

/// Checks every sample of `samples` against the model, so the core's iterators can convert
/// them without failing.
///
/// # Safety
/// `samples` is readable for `n` samples, each valid as [`HoneSample`] says.
unsafe fn samples<'a>(
    desc: &ModelDesc,
    samples: *const HoneSample,
    n: usize,
) -> Result<&'a [HoneSample], i32> {
    if n == 0 {
        return Ok(&[]);
    }
    if samples.is_null() {
        return Err(HONE_ERR_NULL);
    }
    if !(samples as usize).is_multiple_of(align_of::<HoneSample>()) {
        return Err(HONE_ERR_ALIGN);
    }
    // SAFETY: non-null, aligned, readable for `n` samples by the caller's contract.
    let list = unsafe { core::slice::from_raw_parts(samples, n) };
    for smp in list {
        // SAFETY: the caller's contract.
        unsafe { sample(desc, smp.x, &smp.y)? };
    }
    Ok(list)
}

/// One guarded calibration (the core's `guard::calibrate`): evaluates `holdout`, trains on
/// `train` `passes` times in order, flushes, evaluates `holdout` again and judges with `cfg`
/// (NULL: [`hone_guard_default`]). On rejection the trainer goes back to `last_good`
/// (`last_good_len` bytes; NULL: the blob the session started from). The report goes to
/// `*report` unless it is NULL.
///
/// # Safety
/// `s` is a handle from [`hone_init`]; `train` and `holdout` are readable for `n_train` and
/// `n_holdout` valid samples; `cfg` is readable or NULL; `last_good` readable for
/// `last_good_len` bytes or NULL; `report` writable or NULL.
#[no_mangle]
#[allow(clippy::too_many_arguments)]
pub unsafe extern "C" fn hone_calibrate(
    s: *mut HoneSession,
    train: *const HoneSample,
    n_train: usize,
    passes: u16,
    holdout: *const HoneSample,
    n_holdout: usize,
    cfg: *const HoneGuardConfig,
    last_good: *const u8,
    last_good_len: usize,
    report: *mut HoneReport,
) -> i32 {
    // SAFETY: the caller's contract.
    let (t, factory) = match unsafe { session(s) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    let desc: &'static ModelDesc = factory.desc();
    // SAFETY: the caller's contract.
    let (train, holdout) = match unsafe {
        (
            samples(desc, train, n_train),
            samples(desc, holdout, n_holdout),
        )
    } {
        (Ok(a), Ok(b)) => (a, b),
        (Err(e), _) | (_, Err(e)) => return e,
    };
    let cfg = if cfg.is_null() {
        GuardConfig::DEFAULT
    } else {
        // SAFETY: non-null and readable by the caller's contract.
        let c = unsafe { &*cfg };
        GuardConfig {
            max_loss_rise_permille: c.max_loss_rise_permille,
            loss_floor: LossValue(c.loss_floor),
            max_saturation_ppm: c.max_saturation_ppm,
        }
    };
    let decoded;
    let last_good = if last_good.is_null() {
        factory
    } else {
        // SAFETY: the caller's contract.
        let b = match unsafe { bytes(last_good, last_good_len) } {
            Ok(b) => b,
            Err(e) => return e,
        };
        decoded = match decode_status(b) {
            Ok(d) => d,
            Err(e) => return e,
        };
        &decoded
    };
    // Checked by `samples` above: the conversion cannot fail here.
    let convert = |smp: &HoneSample| {
        // SAFETY: every sample was checked by `samples` under the caller's contract.
        unsafe { sample(desc, smp.x, &smp.y) }.unwrap_or((
            Tensor {
                raw: Raw::EMPTY,
                fmt: desc.input_format,
            },
            Target::Class(u16::MAX),
        ))
    };
    let train_iter = (0..passes).flat_map(|_| train.iter().map(convert));
    let holdout_iter = holdout.iter().map(convert);
    match guard::calibrate(t, train_iter, holdout_iter, &cfg, last_good) {
        Ok(r) => {
            if !report.is_null() {
                let (accepted, rejection) = match r.verdict {
                    Verdict::Accept => (1, 0),
                    Verdict::Reject(Rejection::LossRose { .. }) => (0, 1),
                    Verdict::Reject(Rejection::Saturations { .. }) => (0, 2),
                };
                // SAFETY: non-null and writable by the caller's contract.
                unsafe {
                    report.write(HoneReport {
                        before_loss: r.before.mean_loss.0,
                        after_loss: r.after.mean_loss.0,
                        before_saturations: r.before.saturations,
                        after_saturations: r.after.saturations,
                        trained: r.trained,
                        accepted,
                        rejection,
                    });
                }
            }
            HONE_OK
        }
        Err(e) => status(e),
    }
}

/// The trained tensors of `t`, in order: layer by layer, weights then bias, each value
/// little-endian in its storage word. Calls `put` with each value's bytes.
fn for_each_trained(t: &Trainer<'_>, mut put: impl FnMut(&[u8])) {
    let plan = t.plan();
    for k in 0..t.desc().layers.len() {
        let (Some(p), Some(slots)) = (t.params(k), plan.layers.get(k)) else {
            continue;
        };
        for (raw, kept) in [
            (p.weight, slots.weight.is_some()),
            (p.bias, slots.bias.is_some()),
        ] {
            if !kept {
                continue;
            }
            for i in 0..raw.len() {
                let v = raw.at(i);
                match raw {
                    Raw::I8(_) => put(&[v as u8]),
                    Raw::I16(_) => put(&(v as i16).to_le_bytes()),
                    Raw::I32(_) => put(&v.to_le_bytes()),
                }
            }
        }
    }
}

/// Copies the trained tensors (layer by layer, weights then bias, every value little-endian
/// in its storage word) into `out`, `out_len` bytes long, and writes their length into
/// `*written`. With `out` NULL only the length is written.
///
/// # Safety
/// `s` is a handle from [`hone_init`]; `out` is writable for `out_len` bytes or NULL;
/// `written` is writable.
#[no_mangle]
pub unsafe extern "C" fn hone_weights(
    s: *mut HoneSession,
    out: *mut u8,
    out_len: usize,
    written: *mut usize,
) -> i32 {
    if written.is_null() {
        return HONE_ERR_NULL;
    }
    // SAFETY: the caller's contract.
    let (t, _) = match unsafe { session(s) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    let mut n = 0usize;
    for_each_trained(t, |b| n += b.len());
    // SAFETY: non-null and writable by the caller's contract.
    unsafe { written.write(n) };
    if out.is_null() {
        return HONE_OK;
    }
    if out_len < n {
        return HONE_ERR_BUFFER;
    }
    // SAFETY: non-null, writable for `out_len ≥ n` bytes by the caller's contract.
    let dst = unsafe { core::slice::from_raw_parts_mut(out, n) };
    let mut at = 0;
    for_each_trained(t, |b| {
        if let Some(d) = dst.get_mut(at..at + b.len()) {
            d.copy_from_slice(b);
        }
        at += b.len();
    });
    HONE_OK
}

/// Writes the length of the session's checkpoint blob into `*bytes`: the scratch buffer
/// [`hone_checkpoint_save`] and [`hone_checkpoint_load`] need.
///
/// # Safety
/// `s` is a handle from [`hone_init`]; `bytes` is writable.
#[no_mangle]
pub unsafe extern "C" fn hone_checkpoint_size(s: *mut HoneSession, bytes: *mut usize) -> i32 {
    if bytes.is_null() {
        return HONE_ERR_NULL;
    }
    // SAFETY: the caller's contract.
    let (t, factory) = match unsafe { session(s) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    let n = match t
        .checkpoint_body(factory.scaling())
        .and_then(|b| blob::encoded_len(&b))
    {
        Ok(n) => n,
        Err(e) => return status(e),
    };
    // SAFETY: non-null and writable by the caller's contract.
    unsafe { bytes.write(n) };
    HONE_OK
}

/// The caller's flash as the store's `NorFlash`, erase size `E`.
struct CFlash<const E: usize>(HoneFlash);

/// A flash callback failed or is missing.
#[derive(Debug)]
struct CFlashError;

impl NorFlashError for CFlashError {
    fn kind(&self) -> NorFlashErrorKind {
        NorFlashErrorKind::Other
    }
}

impl<const E: usize> ErrorType for CFlash<E> {
    type Error = CFlashError;
}

fn ok_if_zero(r: i32) -> Result<(), CFlashError> {
    if r == 0 {
        Ok(())
    } else {
        Err(CFlashError)
    }
}

impl<const E: usize> ReadNorFlash for CFlash<E> {
    const READ_SIZE: usize = 1;

    fn read(&mut self, offset: u32, bytes: &mut [u8]) -> Result<(), Self::Error> {
        let f = self.0.read.ok_or(CFlashError)?;
        // SAFETY: the callback gets a buffer writable for exactly `bytes.len()` bytes; the
        // rest is the callback's contract with its caller (see `hone_checkpoint_save`).
        ok_if_zero(unsafe { f(self.0.ctx, offset, bytes.as_mut_ptr(), bytes.len() as u32) })
    }

    fn capacity(&self) -> usize {
        self.0.capacity as usize
    }
}

impl<const E: usize> NorFlash for CFlash<E> {
    const WRITE_SIZE: usize = HONE_FLASH_WRITE_SIZE as usize;
    const ERASE_SIZE: usize = E;

    fn erase(&mut self, from: u32, to: u32) -> Result<(), Self::Error> {
        let f = self.0.erase.ok_or(CFlashError)?;
        // SAFETY: plain values; the callback's contract is its caller's.
        ok_if_zero(unsafe { f(self.0.ctx, from, to) })
    }

    fn write(&mut self, offset: u32, bytes: &[u8]) -> Result<(), Self::Error> {
        let f = self.0.write.ok_or(CFlashError)?;
        // SAFETY: the callback gets a buffer readable for exactly `bytes.len()` bytes.
        ok_if_zero(unsafe { f(self.0.ctx, offset, bytes.as_ptr(), bytes.len() as u32) })
    }
}

/// Runs `op` on a store opened over the caller's flash, monomorphised for its erase size.
fn with_store(
    flash: HoneFlash,
    offset: u32,
    len: u32,
    op: impl FnOnce(&mut dyn StoreOps) -> Result<(), i32>,
) -> Result<(), i32> {
    fn open<const E: usize>(
        flash: HoneFlash,
        offset: u32,
        len: u32,
        op: impl FnOnce(&mut dyn StoreOps) -> Result<(), i32>,
    ) -> Result<(), i32> {
        let mut store = Store::open(CFlash::<E>(flash), offset, len).map_err(store_status)?;
        op(&mut store)
    }
    match flash.erase_size {
        1024 => open::<1024>(flash, offset, len, op),
        2048 => open::<2048>(flash, offset, len, op),
        4096 => open::<4096>(flash, offset, len, op),
        _ => Err(HONE_ERR_STORE),
    }
}

/// What the checkpoint calls need of a store, whatever its erase size.
trait StoreOps {
    fn commit(&mut self, payload: &[u8]) -> Result<u32, i32>;
    fn read_latest<'b>(&mut self, buf: &'b mut [u8]) -> Result<&'b [u8], i32>;
}

impl<const E: usize> StoreOps for Store<CFlash<E>> {
    fn commit(&mut self, payload: &[u8]) -> Result<u32, i32> {
        Store::commit(self, payload)
            .map(|c| c.seq)
            .map_err(store_status)
    }

    fn read_latest<'b>(&mut self, buf: &'b mut [u8]) -> Result<&'b [u8], i32> {
        let latest = self.latest().ok_or(HONE_ERR_NO_CHECKPOINT)?;
        let buf = buf.get_mut(..latest.len as usize).ok_or(HONE_ERR_BUFFER)?;
        self.read(0, buf).map_err(store_status)?;
        Ok(buf)
    }
}

/// Writes the session's checkpoint into `scratch` (`scratch_len` bytes, at least
/// [`hone_checkpoint_size`]) and commits it to the power-fail-safe A/B store in `region_len`
/// bytes of `flash` from `region_offset` (both multiples of the erase size). The committed
/// sequence number goes to `*seq` unless it is NULL.
///
/// # Safety
/// `s` is a handle from [`hone_init`]; `flash` is readable and its callbacks honour their
/// documented contracts; `scratch` is writable for `scratch_len` bytes; `seq` is writable or
/// NULL.
#[no_mangle]
pub unsafe extern "C" fn hone_checkpoint_save(
    s: *mut HoneSession,
    flash: *const HoneFlash,
    region_offset: u32,
    region_len: u32,
    scratch: *mut u8,
    scratch_len: usize,
    seq: *mut u32,
) -> i32 {
    if flash.is_null() || scratch.is_null() {
        return HONE_ERR_NULL;
    }
    // SAFETY: the caller's contract.
    let (t, factory) = match unsafe { session(s) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    // SAFETY: non-null; readable / writable by the caller's contract.
    let (flash, scratch) = unsafe {
        (
            *flash,
            core::slice::from_raw_parts_mut(scratch, scratch_len),
        )
    };
    let n = match t.write_checkpoint(factory.scaling(), scratch) {
        Ok(n) => n,
        Err(e) => return status(e),
    };
    let payload = scratch.get(..n).unwrap_or(&[]);
    let result = with_store(flash, region_offset, region_len, |store| {
        let committed = store.commit(payload)?;
        if !seq.is_null() {
            // SAFETY: non-null and writable by the caller's contract.
            unsafe { seq.write(committed) };
        }
        Ok(())
    });
    result.err().unwrap_or(HONE_OK)
}

/// Loads the newest valid checkpoint of the store in `flash` (as [`hone_checkpoint_save`]
/// wrote it) through `scratch` and restores the trainer from it.
///
/// # Safety
/// As [`hone_checkpoint_save`].
#[no_mangle]
pub unsafe extern "C" fn hone_checkpoint_load(
    s: *mut HoneSession,
    flash: *const HoneFlash,
    region_offset: u32,
    region_len: u32,
    scratch: *mut u8,
    scratch_len: usize,
) -> i32 {
    if flash.is_null() || scratch.is_null() {
        return HONE_ERR_NULL;
    }
    // SAFETY: the caller's contract.
    let (t, _) = match unsafe { session(s) } {
        Ok(v) => v,
        Err(e) => return e,
    };
    // SAFETY: non-null; readable / writable by the caller's contract.
    let (flash, scratch) = unsafe {
        (
            *flash,
            core::slice::from_raw_parts_mut(scratch, scratch_len),
        )
    };
    let result = with_store(flash, region_offset, region_len, |store| {
        let bytes = store.read_latest(scratch)?;
        let blob = decode_status(bytes)?;
        t.restore(&blob).map_err(status)
    });
    result.err().unwrap_or(HONE_OK)
}

/// A short English text for a status code, NUL-terminated, in static memory.
#[no_mangle]
pub extern "C" fn hone_error_str(code: i32) -> *const c_char {
    let s: &'static [u8] = match code {
        HONE_OK => b"ok\0",
        HONE_ERR_NULL => b"a required pointer is NULL\0",
        HONE_ERR_ALIGN => b"memory, sample or target is misaligned\0",
        HONE_ERR_MEMORY => b"memory block smaller than hone_memory_size says\0",
        HONE_ERR_BLOB => b"blob is malformed or corrupted\0",
        HONE_ERR_MODEL => b"model description is invalid or not built into this library\0",
        HONE_ERR_SAMPLE => b"sample does not fit the model\0",
        HONE_ERR_SESSION => b"not a session made by hone_init\0",
        HONE_ERR_PENDING => b"a partial batch is pending: call hone_flush first\0",
        HONE_ERR_BUFFER => b"buffer too small\0",
        HONE_ERR_FLASH => b"a flash callback failed\0",
        HONE_ERR_NO_CHECKPOINT => b"no valid checkpoint in the flash region\0",
        HONE_ERR_STORE => b"flash region or geometry unusable, or checkpoint too large\0",
        HONE_ERR_OTHER_MODEL => b"blob describes another model\0",
        HONE_ERR_INTERNAL => b"internal error of the core\0",
        _ => b"unknown status code\0",
    };
    s.as_ptr().cast()
}

/// A firmware has no unwinder: a panic (which the core never raises on input) stops here.
#[cfg(target_os = "none")]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo<'_>) -> ! {
    loop {
        core::hint::spin_loop();
    }
}
