//! Host side of the device's checkpoint store: images of the checkpoint region.
//!
//! A technician pulls a unit's checkpoint region over a debug link as a raw image file and
//! reads the newest checkpoint on the desk, or prepares an image to write to a unit. The
//! image is opened with the device's own store ([`hone_core::store::Store`]), so the slots
//! are validated (magic, version, length, CRC) and picked exactly as the device picks them,
//! and a prepared image has exactly the device's byte layout. The payload is then validated
//! as a blob with [`hone_core::blob::decode`].
//!
//! # Flash model
//! [`ImageFlash`] is a NOR flash over a `Vec<u8>` of any length with the rules of the core's
//! simulator ([`hone_core::store::sim`]): erase sets a sector to `0xFF`, a write can only
//! clear bits, and writing a word that is not erased counts as a violation. The simulator
//! keeps its contents in a fixed-size array, so an image file of any size needs this
//! variant; it reuses the simulator's error type.
//!
//! The embedded-storage traits fix the erase, write and read sizes as constants, so a run-time
//! [`Geometry`] is dispatched to one of a set of compiled instances. Erase sizes from 128 B to
//! 256 KiB (powers of two) are supported. The byte layout of a slot depends on the write and
//! read units only through the header padding (the header is padded to their least common
//! multiple, and a payload's last write unit is padded with `0xFF`, which is what erased flash
//! holds anyway), so the host programs in units of that least common multiple, rounded to one
//! of 4, 8, 16 or 64 bytes that give the same padding, and reads byte by byte. The images
//! produced are byte for byte the device's; a test checks this against the simulator.

use std::path::Path;

use embedded_storage::nor_flash::{ErrorType, NorFlash, ReadNorFlash};
use hone_core::blob::{self, BlobKind};
use hone_core::store::sim::SimError;
use hone_core::store::{self, Checkpoint, Slot, Store, StoreError};
use serde::Serialize;

use crate::inspect::explain;

/// A NOR flash over an in-memory image, with erase sectors of `ERASE` bytes, a write unit of
/// `WRITE` bytes and a read unit of `READ` bytes. See the [module docs](self).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ImageFlash<const ERASE: usize, const WRITE: usize, const READ: usize = 1> {
    bytes: Vec<u8>,
    violations: u32,
}

impl<const ERASE: usize, const WRITE: usize, const READ: usize> ImageFlash<ERASE, WRITE, READ> {
    /// Compile-time check of the geometry; evaluated when a constructor is instantiated.
    const GEOMETRY_OK: () = assert!(
        ERASE > 0
            && WRITE > 0
            && READ > 0
            && ERASE.is_multiple_of(WRITE)
            && ERASE.is_multiple_of(READ),
        "ImageFlash geometry: ERASE % WRITE and ERASE % READ must be 0"
    );

    /// A fully erased flash of `sectors` erase sectors.
    pub fn erased(sectors: usize) -> Self {
        let () = Self::GEOMETRY_OK;
        Self {
            bytes: vec![0xFF; sectors.saturating_mul(ERASE)],
            violations: 0,
        }
    }

    /// A flash holding `image`.
    ///
    /// # Errors
    /// Gives the image back if its length is not a whole number of erase sectors or does not
    /// fit a 32-bit address.
    pub fn from_image(image: Vec<u8>) -> Result<Self, Vec<u8>> {
        let () = Self::GEOMETRY_OK;
        if !image.len().is_multiple_of(ERASE) || u32::try_from(image.len()).is_err() {
            return Err(image);
        }
        Ok(Self {
            bytes: image,
            violations: 0,
        })
    }

    /// The contents.
    pub fn bytes(&self) -> &[u8] {
        &self.bytes
    }

    /// The contents, mutable, for tests that damage an image by hand. Changes made here
    /// bypass NOR rules.
    pub fn bytes_mut(&mut self) -> &mut [u8] {
        &mut self.bytes
    }

    /// The contents, by value.
    pub fn into_bytes(self) -> Vec<u8> {
        self.bytes
    }

    /// How many write calls touched a word that was not fully erased.
    pub fn violations(&self) -> u32 {
        self.violations
    }

    fn range(&self, offset: u32, len: usize, unit: usize) -> Result<(usize, usize), SimError> {
        let start = usize::try_from(offset).map_err(|_| SimError::OutOfBounds)?;
        let end = start.checked_add(len).ok_or(SimError::OutOfBounds)?;
        if end > self.bytes.len() {
            return Err(SimError::OutOfBounds);
        }
        if !start.is_multiple_of(unit) || !len.is_multiple_of(unit) {
            return Err(SimError::NotAligned);
        }
        Ok((start, end))
    }
}

impl<const ERASE: usize, const WRITE: usize, const READ: usize> ErrorType
    for ImageFlash<ERASE, WRITE, READ>
{
    type Error = SimError;
}

impl<const ERASE: usize, const WRITE: usize, const READ: usize> ReadNorFlash
    for ImageFlash<ERASE, WRITE, READ>
{
    const READ_SIZE: usize = READ;

    fn read(&mut self, offset: u32, bytes: &mut [u8]) -> Result<(), Self::Error> {
        let (start, end) = self.range(offset, bytes.len(), READ)?;
        let src = self.bytes.get(start..end).ok_or(SimError::OutOfBounds)?;
        bytes.copy_from_slice(src);
        Ok(())
    }

    fn capacity(&self) -> usize {
        self.bytes.len()
    }
}

impl<const ERASE: usize, const WRITE: usize, const READ: usize> NorFlash
    for ImageFlash<ERASE, WRITE, READ>
{
    const WRITE_SIZE: usize = WRITE;
    const ERASE_SIZE: usize = ERASE;

    fn erase(&mut self, from: u32, to: u32) -> Result<(), Self::Error> {
        let len = to.checked_sub(from).ok_or(SimError::OutOfBounds)?;
        let len = usize::try_from(len).map_err(|_| SimError::OutOfBounds)?;
        let (start, end) = self.range(from, len, ERASE)?;
        if let Some(dst) = self.bytes.get_mut(start..end) {
            dst.fill(0xFF);
        }
        Ok(())
    }

    fn write(&mut self, offset: u32, bytes: &[u8]) -> Result<(), Self::Error> {
        let (start, end) = self.range(offset, bytes.len(), WRITE)?;
        let dst = self
            .bytes
            .get_mut(start..end)
            .ok_or(SimError::OutOfBounds)?;
        let mut violated = 0u32;
        for (word, data) in dst.chunks_mut(WRITE).zip(bytes.chunks(WRITE)) {
            if word.iter().any(|&b| b != 0xFF) {
                violated += 1;
            }
            for (d, s) in word.iter_mut().zip(data) {
                *d &= *s;
            }
        }
        self.violations = self.violations.saturating_add(violated);
        Ok(())
    }
}

/// The flash geometry of the unit the image comes from (or goes to).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
pub struct Geometry {
    /// Erase sector size, bytes.
    pub erase: u32,
    /// Write (program) unit, bytes.
    pub write: u32,
    /// Read unit, bytes.
    pub read: u32,
}

/// What went wrong with an image, before a file name is attached (see [`CheckpointError`]).
#[derive(Debug, thiserror::Error)]
pub enum ImageError {
    /// The geometry is not one the host supports.
    #[error(
        "flash geometry erase {} B, write {} B, read {} B is not supported: {reason}",
        .geometry.erase, .geometry.write, .geometry.read
    )]
    Geometry {
        /// The geometry given.
        geometry: Geometry,
        /// Why.
        reason: &'static str,
    },
    /// The image is not a whole number of erase sectors.
    #[error(
        "image of {len} B is not a whole number of {erase} B erase sectors: pull the whole \
         checkpoint region, or give the unit's erase size"
    )]
    ImageSize {
        /// Image length.
        len: usize,
        /// Erase size.
        erase: u32,
    },
    /// Neither slot holds a valid checkpoint.
    #[error(
        "no valid checkpoint: both slots are blank or corrupted (checked magic, version, \
         length and CRC of slots A and B)"
    )]
    NoCheckpoint,
    /// The blob does not fit one slot.
    #[error(
        "a blob of {len} B does not fit a slot of {capacity} B: the region needs at least \
         {region_needed} B"
    )]
    TooLarge {
        /// Blob length.
        len: u32,
        /// Payload capacity of a slot.
        capacity: u32,
        /// Smallest region that holds the blob with this geometry.
        region_needed: u64,
    },
    /// The newest valid slot holds bytes that are not a valid blob.
    #[error(
        "checkpoint {seq} in slot {slot} passes the store's CRC but is not a valid blob: \
         {message}"
    )]
    BlobInvalid {
        /// Sequence number of the checkpoint.
        seq: u32,
        /// "A" or "B".
        slot: &'static str,
        /// What is wrong.
        message: String,
        /// The core's error.
        error: hone_core::Error,
    },
    /// A blob to be written is not valid.
    #[error("the blob to write is not valid: {message}")]
    BlobRejected {
        /// What is wrong.
        message: String,
        /// The core's error.
        error: hone_core::Error,
    },
    /// Both slots hold something, and neither is a valid checkpoint: committing would start
    /// the sequence again at 1 over whatever the unit had.
    #[error(
        "neither slot holds a valid checkpoint, and the image is not blank (both slots \
         corrupted); committing would restart the sequence at 1: pull the region again, or \
         give --start-over to write over it"
    )]
    BothSlotsInvalid,
    /// A fresh region larger than [`crate::limits::FLASH_BYTES`].
    #[error(
        "{len} B is larger than the largest flash of any built-in chip ({limit} B); give the \
         size of the device's checkpoint area"
    )]
    RegionTooLarge {
        /// The region asked for.
        len: u64,
        /// The limit.
        limit: u64,
    },
    /// Any other error of the store.
    #[error("{0}")]
    Store(StoreError),
}

/// An [`ImageError`] or an I/O error, with the file it concerns.
#[derive(Debug, thiserror::Error)]
pub enum CheckpointError {
    /// Reading or writing a file failed.
    #[error("{file}: {source}")]
    Io {
        /// The file.
        file: String,
        /// The I/O error.
        source: std::io::Error,
    },
    /// The image or blob is wrong.
    #[error("{file}: {problem}")]
    Image {
        /// The file.
        file: String,
        /// What is wrong.
        problem: ImageError,
    },
    /// A setting is wrong: the flash geometry, or the size of a fresh region. Named by its
    /// command-line option (`--erase`, `--write`, `--read`, `--region`).
    #[error("{option}: {problem}")]
    Setting {
        /// The option.
        option: &'static str,
        /// What is wrong.
        problem: ImageError,
    },
}

/// The option of the geometry field at fault in `g`, checked in the order [`unit_class`]
/// checks them.
fn geometry_option(g: Geometry) -> &'static str {
    if !g.erase.is_power_of_two() || !(128..=256 * 1024).contains(&g.erase) {
        "--erase"
    } else if !g.write.is_power_of_two() || g.write as usize > store::MAX_UNIT {
        "--write"
    } else {
        "--read"
    }
}

/// Checks that the host supports geometry `g`.
///
/// # Errors
/// [`CheckpointError::Setting`] naming the option at fault.
pub fn check_geometry(g: Geometry) -> Result<(), CheckpointError> {
    unit_class(g)
        .map(|_| ())
        .map_err(|problem| CheckpointError::Setting {
            option: geometry_option(g),
            problem,
        })
}

/// Attaches a geometry error to its option and any other error to `path`.
fn in_file_or_setting(path: &Path, g: Geometry) -> impl Fn(ImageError) -> CheckpointError + '_ {
    move |problem| match problem {
        ImageError::Geometry { .. } => CheckpointError::Setting {
            option: geometry_option(g),
            problem,
        },
        other => in_file(path)(other),
    }
}

/// The checkpoint found, where it is, and what it holds.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct CheckpointInfo {
    /// Sequence number.
    pub seq: u32,
    /// Payload (blob) length, bytes.
    pub len: u32,
    /// "A" or "B".
    pub slot: &'static str,
    /// Offset of the slot in the image, bytes.
    pub slot_offset: u32,
    /// Offset of the payload in the image, bytes.
    pub payload_offset: u32,
    /// Size of one slot, bytes.
    pub slot_len: u32,
    /// Largest payload one slot holds, bytes.
    pub capacity: u32,
    /// "model" or "checkpoint": the kind of the blob.
    pub blob_kind: &'static str,
    /// The other slot, as the store's validation sees it.
    pub other_slot: OtherSlot,
}

/// What the slot that does not hold the newest checkpoint holds.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct OtherSlot {
    /// "A" or "B".
    pub slot: &'static str,
    /// "older" (a valid older checkpoint), "blank" (all bytes erased) or "invalid" (not blank
    /// and not valid: corrupted, or a write that was cut short).
    pub state: &'static str,
    /// Sequence number of the older checkpoint.
    pub seq: Option<u32>,
}

fn slot_name(s: Slot) -> &'static str {
    match s {
        Slot::A => "A",
        Slot::B => "B",
    }
}

/// The store operations the host needs, over any compiled geometry.
trait HostStore {
    fn latest(&self) -> Option<Checkpoint>;
    fn capacity(&self) -> u32;
    fn slot_len(&self) -> u32;
    fn slot_address(&self, slot: Slot) -> u32;
    fn payload_offset(&self) -> u32;
    fn read(&mut self, offset: u32, buf: &mut [u8]) -> Result<(), StoreError>;
    fn commit(&mut self, payload: &[u8]) -> Result<Checkpoint, StoreError>;
    fn into_image(self: Box<Self>) -> Vec<u8>;
}

impl<const E: usize, const W: usize> HostStore for Store<ImageFlash<E, W, 1>> {
    fn latest(&self) -> Option<Checkpoint> {
        Store::latest(self)
    }
    fn capacity(&self) -> u32 {
        Store::capacity(self)
    }
    fn slot_len(&self) -> u32 {
        Store::slot_len(self)
    }
    fn slot_address(&self, slot: Slot) -> u32 {
        Store::slot_address(self, slot)
    }
    fn payload_offset(&self) -> u32 {
        Store::payload_offset(self)
    }
    fn read(&mut self, offset: u32, buf: &mut [u8]) -> Result<(), StoreError> {
        Store::read(self, offset, buf)
    }
    fn commit(&mut self, payload: &[u8]) -> Result<Checkpoint, StoreError> {
        Store::commit(self, payload)
    }
    fn into_image(self: Box<Self>) -> Vec<u8> {
        self.release().into_bytes()
    }
}

fn open_with<const E: usize, const W: usize>(
    image: Vec<u8>,
) -> Result<Box<dyn HostStore>, ImageError> {
    let len = image.len();
    let flash = ImageFlash::<E, W, 1>::from_image(image).map_err(|_| ImageError::ImageSize {
        len,
        erase: E as u32,
    })?;
    let region = u32::try_from(len).map_err(|_| ImageError::ImageSize {
        len,
        erase: E as u32,
    })?;
    let store = Store::open(flash, 0, region).map_err(ImageError::Store)?;
    Ok(Box::new(store))
}

/// The host's program unit for a device geometry: the least common multiple of write and
/// read unit, rounded to a unit that gives the same header padding.
fn unit_class(g: Geometry) -> Result<u32, ImageError> {
    let bad = |reason| ImageError::Geometry {
        geometry: g,
        reason,
    };
    if !g.erase.is_power_of_two() || !(128..=256 * 1024).contains(&g.erase) {
        return Err(bad(
            "the erase size must be a power of two from 128 B to 256 KiB",
        ));
    }
    if !g.write.is_power_of_two() || !g.read.is_power_of_two() {
        return Err(bad("write and read units must be powers of two"));
    }
    // Both are powers of two, so their least common multiple is the larger.
    let unit = g.write.max(g.read);
    if unit as usize > store::MAX_UNIT {
        return Err(bad(
            "write and read units above 64 B are not supported by the store",
        ));
    }
    Ok(match unit {
        1..=4 => 4,
        8 => 8,
        16 | 32 => 16,
        _ => 64,
    })
}

macro_rules! dispatch {
    ($image:expr, $geometry:expr, $unit:expr; $($e:literal)*) => {
        match ($geometry.erase, $unit) {
            $(
                ($e, 4) => open_with::<$e, 4>($image),
                ($e, 8) => open_with::<$e, 8>($image),
                ($e, 16) => open_with::<$e, 16>($image),
                ($e, 64) => open_with::<$e, 64>($image),
            )*
            _ => Err(ImageError::Geometry {
                geometry: $geometry,
                reason: "no compiled instance for this geometry",
            }),
        }
    };
}

/// Opens the device's store on an image (the whole image is the checkpoint region).
fn open_store(image: Vec<u8>, g: Geometry) -> Result<Box<dyn HostStore>, ImageError> {
    let unit = unit_class(g)?;
    dispatch!(image, g, unit;
        128 256 512 1024 2048 4096 8192 16384 32768 65536 131072 262144)
}

fn store_error(e: StoreError, erase: u32, payload_offset: u32) -> ImageError {
    match e {
        StoreError::NoCheckpoint => ImageError::NoCheckpoint,
        StoreError::PayloadTooLarge { capacity, len } => {
            let slot = (payload_offset as u64 + len as u64).div_ceil(erase as u64) * erase as u64;
            ImageError::TooLarge {
                len,
                capacity,
                region_needed: 2 * slot,
            }
        }
        other => ImageError::Store(other),
    }
}

/// The state of the slot other than `cp`'s: the store is opened again on a copy of the image
/// with `cp`'s slot erased, so the other slot is judged by the store's own validation.
fn other_slot(
    image: &[u8],
    geometry: Geometry,
    st: &dyn HostStore,
    cp: Checkpoint,
) -> Result<OtherSlot, ImageError> {
    let other = cp.slot.other();
    let len = st.slot_len() as usize;
    let range = |slot| {
        let at = st.slot_address(slot) as usize;
        at..at + len
    };
    let mut copy = image.to_vec();
    if let Some(s) = copy.get_mut(range(cp.slot)) {
        s.fill(0xFF);
    }
    let found = open_store(copy, geometry)?.latest();
    let blank = image
        .get(range(other))
        .is_some_and(|s| s.iter().all(|&b| b == 0xFF));
    let (state, seq) = match found {
        Some(c) if c.slot == other => ("older", Some(c.seq)),
        _ if blank => ("blank", None),
        _ => ("invalid", None),
    };
    Ok(OtherSlot {
        slot: slot_name(other),
        state,
        seq,
    })
}

fn info(st: &dyn HostStore, cp: Checkpoint, kind: BlobKind, other: OtherSlot) -> CheckpointInfo {
    let slot_offset = st.slot_address(cp.slot);
    CheckpointInfo {
        seq: cp.seq,
        len: cp.len,
        slot: slot_name(cp.slot),
        slot_offset,
        payload_offset: slot_offset + st.payload_offset(),
        slot_len: st.slot_len(),
        capacity: st.capacity(),
        blob_kind: match kind {
            BlobKind::Model => "model",
            BlobKind::Checkpoint => "checkpoint",
        },
        other_slot: other,
    }
}

/// Opens the store on `image`, reads the newest valid checkpoint and validates it as a blob.
///
/// # Errors
/// [`ImageError::Geometry`] or [`ImageError::ImageSize`] for an image the geometry does not
/// describe, [`ImageError::NoCheckpoint`] if neither slot is valid,
/// [`ImageError::BlobInvalid`] if the newest valid slot holds an invalid blob, and
/// [`ImageError::Store`] for other store errors.
pub fn read_latest(
    image: &[u8],
    geometry: Geometry,
) -> Result<(CheckpointInfo, Vec<u8>), ImageError> {
    let mut st = open_store(image.to_vec(), geometry)?;
    let off = st.payload_offset();
    let cp = st.latest().ok_or(ImageError::NoCheckpoint)?;
    let mut payload = vec![0u8; cp.len as usize];
    st.read(0, &mut payload)
        .map_err(|e| store_error(e, geometry.erase, off))?;
    let kind = match blob::decode(&payload) {
        Ok(b) => b.kind(),
        Err(error) => {
            return Err(ImageError::BlobInvalid {
                seq: cp.seq,
                slot: slot_name(cp.slot),
                message: explain(&error, &payload),
                error,
            })
        }
    };
    let other = other_slot(image, geometry, &*st, cp)?;
    Ok((info(&*st, cp, kind, other), payload))
}

fn checked_kind(blob_bytes: &[u8]) -> Result<BlobKind, ImageError> {
    blob::decode(blob_bytes)
        .map(|b| b.kind())
        .map_err(|error| ImageError::BlobRejected {
            message: explain(&error, blob_bytes),
            error,
        })
}

/// Commits `blob_bytes` into `image` as the next checkpoint, as the device would: into the
/// slot that does not hold the newest valid checkpoint, with the next sequence number.
/// Returns the new image and where the checkpoint went.
///
/// # Errors
/// [`ImageError::BlobRejected`] if the blob does not validate; [`ImageError::TooLarge`] if it
/// does not fit a slot; as [`read_latest`] for the image and geometry.
pub fn append(
    image: &[u8],
    geometry: Geometry,
    blob_bytes: &[u8],
) -> Result<(CheckpointInfo, Vec<u8>), ImageError> {
    append_owned(image.to_vec(), geometry, blob_bytes, false)
}

/// [`append`] on an image it owns. With `start_over` an image whose two slots are both
/// corrupted is written over (the sequence restarts at 1); without it such an image is
/// refused with [`ImageError::BothSlotsInvalid`]. A blank image is always accepted.
///
/// # Errors
/// As [`append`], and [`ImageError::BothSlotsInvalid`].
pub fn append_owned(
    image: Vec<u8>,
    geometry: Geometry,
    blob_bytes: &[u8],
    start_over: bool,
) -> Result<(CheckpointInfo, Vec<u8>), ImageError> {
    let kind = checked_kind(blob_bytes)?;
    let (cp, new_image) = commit(image, geometry, blob_bytes, start_over)?;
    let st = open_store(new_image.clone(), geometry)?;
    let other = other_slot(&new_image, geometry, &*st, cp)?;
    let info = info(&*st, cp, kind, other);
    Ok((info, new_image))
}

/// Commits `blob_bytes` into `image` without copying it; see [`append_owned`].
fn commit(
    image: Vec<u8>,
    geometry: Geometry,
    blob_bytes: &[u8],
    start_over: bool,
) -> Result<(Checkpoint, Vec<u8>), ImageError> {
    let blank = image.iter().all(|&b| b == 0xFF);
    let mut st = open_store(image, geometry)?;
    if st.latest().is_none() && !blank && !start_over {
        return Err(ImageError::BothSlotsInvalid);
    }
    let off = st.payload_offset();
    let cp = st
        .commit(blob_bytes)
        .map_err(|e| store_error(e, geometry.erase, off))?;
    Ok((cp, st.into_image()))
}

/// A fresh erased image of `region_len` bytes holding `blob_bytes` as its one committed
/// checkpoint (sequence 1, slot A).
///
/// # Errors
/// [`ImageError::RegionTooLarge`] past [`crate::limits::FLASH_BYTES`];
/// [`ImageError::ImageSize`] if `region_len` is not a whole number of erase sectors; as
/// [`append`] otherwise. The image is built in one buffer of `region_len` bytes.
pub fn write_image(
    blob_bytes: &[u8],
    geometry: Geometry,
    region_len: u32,
) -> Result<Vec<u8>, ImageError> {
    checked_kind(blob_bytes)?;
    unit_class(geometry)?;
    let limit = crate::limits::FLASH_BYTES;
    if u64::from(region_len) > limit {
        return Err(ImageError::RegionTooLarge {
            len: region_len.into(),
            limit,
        });
    }
    if !region_len.is_multiple_of(geometry.erase) {
        return Err(ImageError::ImageSize {
            len: region_len as usize,
            erase: geometry.erase,
        });
    }
    commit(vec![0xFF; region_len as usize], geometry, blob_bytes, true).map(|(_, image)| image)
}

fn in_file(path: &Path) -> impl Fn(ImageError) -> CheckpointError + '_ {
    move |problem| CheckpointError::Image {
        file: path.display().to_string(),
        problem,
    }
}

fn io_error(path: &Path) -> impl Fn(std::io::Error) -> CheckpointError + '_ {
    move |source| CheckpointError::Io {
        file: path.display().to_string(),
        source,
    }
}

/// Reads an image or a blob: at most [`crate::limits::FLASH_BYTES`].
fn read(path: &Path) -> Result<Vec<u8>, CheckpointError> {
    hone_report::fsutil::read_limited(path, crate::limits::FLASH_BYTES, "checkpoint image or blob")
        .map_err(io_error(path))
}

/// [`read_latest`] on an image file.
///
/// # Errors
/// [`CheckpointError::Io`] if the file cannot be read; [`CheckpointError::Image`] naming the
/// file otherwise.
pub fn read_latest_file(
    path: &Path,
    geometry: Geometry,
) -> Result<(CheckpointInfo, Vec<u8>), CheckpointError> {
    read_latest(&read(path)?, geometry).map_err(in_file_or_setting(path, geometry))
}

/// Commits the blob in `blob_file` into the image file `image` and writes the new image to
/// `out` atomically (`out` may be `image` itself, to update it in place). An exclusive lock
/// on `image` is held for the whole read-modify-write, so concurrent commits into one image
/// happen one after the other and none is lost. `start_over` as for [`append_owned`].
///
/// # Errors
/// [`CheckpointError::Io`] if a file cannot be read, locked or written;
/// [`CheckpointError::Image`] naming the blob file for a blob problem and the image file for
/// the rest.
pub fn commit_file(
    image: &Path,
    geometry: Geometry,
    blob_file: &Path,
    out: &Path,
    start_over: bool,
) -> Result<(CheckpointInfo, u64), CheckpointError> {
    let b = read(blob_file)?;
    let mut lock = hone_report::fsutil::lock_file(image).map_err(io_error(image))?;
    let img = hone_report::fsutil::read_limited_from(
        lock.file(),
        crate::limits::FLASH_BYTES,
        "checkpoint image",
    )
    .map_err(io_error(image))?;
    let (info, new_image) = append_owned(img, geometry, &b, start_over).map_err(|e| match e {
        ImageError::BlobRejected { .. } | ImageError::TooLarge { .. } => in_file(blob_file)(e),
        other => in_file_or_setting(image, geometry)(other),
    })?;
    hone_report::fsutil::write_atomic(out, &new_image).map_err(io_error(out))?;
    drop(lock);
    Ok((info, new_image.len() as u64))
}

/// [`write_image`] with the blob read from a file.
///
/// # Errors
/// [`CheckpointError::Io`] if the file cannot be read; [`CheckpointError::Setting`] naming
/// `--erase`, `--write` or `--read` for a geometry the host does not support, and `--region`
/// for a region that is not whole sectors, is too small for the store's two slots, or too
/// small for this blob; [`CheckpointError::Image`] naming the blob file for a blob that does
/// not validate.
pub fn write_image_file(
    blob_file: &Path,
    geometry: Geometry,
    region_len: u32,
) -> Result<Vec<u8>, CheckpointError> {
    let region = |problem| CheckpointError::Setting {
        option: "--region",
        problem,
    };
    write_image(&read(blob_file)?, geometry, region_len).map_err(|e| match e {
        ImageError::ImageSize { .. }
        | ImageError::TooLarge { .. }
        | ImageError::RegionTooLarge { .. }
        | ImageError::Store(
            StoreError::RegionTooSmall
            | StoreError::RegionMisaligned
            | StoreError::RegionOutOfBounds,
        ) => region(e),
        other => in_file_or_setting(blob_file, geometry)(other),
    })
}

#[cfg(test)]
mod tests;
