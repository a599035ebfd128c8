//! Power-fail-safe checkpoint store: the last good model survives a power cut in the middle of
//! a flash write and is never replaced by corrupted flash contents.
//!
//! Why hand-written: the general-purpose crate `sequential-storage` was checked first. Its
//! current releases are async-only (built on `embedded-storage-async`, so a device would need
//! an executor), and each stored item must fit inside one erase page and be staged whole in a
//! caller's RAM buffer; a model checkpoint of several KB does not fit a 1 KB nRF51 page. Two
//! A/B slots written by hand are synchronous, need no allocation and stream payloads of any
//! size up to half the region.
//!
//! # Region and slots
//!
//! The store owns a region of the flash (offset and length both multiples of the erase size).
//! The region is split into two slots, A (first half) and B (second half), each a whole number
//! of erase sectors; with an odd number of sectors the last one stays unused.
//!
//! # Byte layout of one slot (all integers little-endian)
//!
//! | offset      | size | field                                                          |
//! |-------------|------|----------------------------------------------------------------|
//! | 0           | 4    | magic `48 6E 43 6B` (ASCII `HnCk`)                             |
//! | 4           | 2    | store format version, `u16`, currently 1                       |
//! | 6           | 2    | reserved, `u16`, must be 0                                     |
//! | 8           | 4    | sequence number, `u32`                                         |
//! | 12          | 4    | payload length in bytes, `u32`                                 |
//! | 16          | 4    | CRC-32/ISO-HDLC, `u32`, over bytes 0..16 and then the payload  |
//! | 20          | H−20 | `0xFF` padding                                                 |
//! | H           | len  | payload                                                        |
//! | H + len     | …    | `0xFF` padding up to the next multiple of `WRITE_SIZE`         |
//!
//! `H` is [`HEADER_LEN`] rounded up to the least common multiple of the flash's `WRITE_SIZE`
//! and `READ_SIZE`, so header and payload never share a flash word.
//!
//! # Commit protocol
//!
//! A commit goes to the slot that does not hold the newest valid checkpoint. It erases the
//! sectors that header and payload need (header sector first, which invalidates the slot at
//! once), writes the payload in `WRITE_SIZE` units (the tail padded with `0xFF`), and writes
//! the header **last**: the header write is the commit point. No flash word is written twice
//! between erases. A power cut at any step before the header is complete leaves the slot
//! invalid, and the other slot still holds the previous checkpoint. After the header, the
//! store reads the slot back and checks its CRC.
//!
//! [`Store::open`] validates magic, version, reserved field, length bound and CRC of both
//! slots (the CRC streams through a 64-byte stack buffer) and picks the valid slot with the
//! newer sequence number by serial-number arithmetic (RFC 1982 style), so the `u32` sequence
//! may wrap. Invalid slots are ignored. A CRC-32 lets a damaged slot through only by a
//! 1-in-2³² coincidence; every single-bit error is caught.

pub mod sim;

use core::fmt;

use crc::{Crc, Digest, CRC_32_ISO_HDLC};
use embedded_storage::nor_flash::{NorFlash, NorFlashError, NorFlashErrorKind};

/// The four magic bytes that open every committed slot.
pub const MAGIC: [u8; 4] = *b"HnCk";

/// Format version of the slot layout written by this store.
pub const FORMAT_VERSION: u16 = 1;

/// Length of the encoded header in bytes, before padding.
pub const HEADER_LEN: usize = 20;

/// Largest `WRITE_SIZE`/`READ_SIZE` (least common multiple of the two) the store supports; it
/// is also the size of the stack buffer used for reading and CRC streaming.
pub const MAX_UNIT: usize = 64;

/// Sequence number of the first checkpoint written to a blank region.
pub const FIRST_SEQ: u32 = 1;

/// Header bytes covered by the CRC (everything before the CRC field).
const PREFIX_LEN: usize = 16;

static CRC32: Crc<u32> = Crc::<u32>::new(&CRC_32_ISO_HDLC);

/// Every way a store operation can fail. Small, `Copy`, no strings inside.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum StoreError {
    /// The flash driver reported an error (a power cut in the simulator shows up as `Other`).
    Flash(NorFlashErrorKind),
    /// The flash geometry is not supported: a zero size, `WRITE_SIZE` or `READ_SIZE` not
    /// dividing `ERASE_SIZE`, their least common multiple above [`MAX_UNIT`], or an erase size
    /// beyond `u32`.
    Geometry,
    /// Region offset or length is not a multiple of the erase size.
    RegionMisaligned,
    /// The region is too small for two slots that each hold at least a header.
    RegionTooSmall,
    /// The region reaches past the end of the flash.
    RegionOutOfBounds,
    /// The payload does not fit a slot.
    PayloadTooLarge {
        /// Largest payload a slot holds, in bytes.
        capacity: u32,
        /// Payload length asked for (saturated at `u32::MAX`).
        len: u32,
    },
    /// The store holds no valid checkpoint.
    NoCheckpoint,
    /// A read reaches past the end of the current checkpoint's payload.
    ReadOutOfRange {
        /// Start offset asked for.
        offset: u32,
        /// Length asked for (saturated at `u32::MAX`).
        len: u32,
        /// Payload length of the current checkpoint.
        available: u32,
    },
    /// A commit received a different number of bytes than announced; the commit is dropped.
    LengthMismatch {
        /// Length announced by `begin`.
        expected: u32,
        /// Bytes written (or attempted), saturated at `u32::MAX`.
        written: u32,
    },
    /// `write` or `finish` was called without a commit in progress.
    NotBegun,
    /// The slot read back after the commit point did not validate; the previous checkpoint
    /// stays current.
    VerifyFailed,
}

impl fmt::Display for StoreError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Self::Flash(kind) => write!(f, "checkpoint store: flash error: {kind}"),
            Self::Geometry => f.write_str("checkpoint store: unsupported flash geometry"),
            Self::RegionMisaligned => {
                f.write_str("checkpoint store: region offset or length is not a multiple of the erase size")
            }
            Self::RegionTooSmall => f.write_str("checkpoint store: region too small for two slots"),
            Self::RegionOutOfBounds => f.write_str("checkpoint store: region reaches past the end of the flash"),
            Self::PayloadTooLarge { capacity, len } => {
                write!(f, "checkpoint store: payload of {len} bytes exceeds slot capacity of {capacity} bytes")
            }
            Self::NoCheckpoint => f.write_str("checkpoint store: no valid checkpoint"),
            Self::ReadOutOfRange { offset, len, available } => write!(
                f,
                "checkpoint store: read of {len} bytes at offset {offset} exceeds payload of {available} bytes"
            ),
            Self::LengthMismatch { expected, written } => write!(
                f,
                "checkpoint store: commit announced {expected} bytes but received {written}"
            ),
            Self::NotBegun => f.write_str("checkpoint store: no commit in progress"),
            Self::VerifyFailed => f.write_str("checkpoint store: read-back after commit did not validate"),
        }
    }
}

fn flash_err<E: NorFlashError>(e: E) -> StoreError {
    StoreError::Flash(e.kind())
}

/// One of the two slots of the region.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Slot {
    /// The first half of the region.
    A,
    /// The second half of the region.
    B,
}

impl Slot {
    /// The other slot.
    #[must_use]
    pub const fn other(self) -> Self {
        match self {
            Self::A => Self::B,
            Self::B => Self::A,
        }
    }
}

/// A valid committed checkpoint found in the store.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Checkpoint {
    /// Sequence number; the next commit gets `seq.wrapping_add(1)`.
    pub seq: u32,
    /// Payload length in bytes.
    pub len: u32,
    /// The slot that holds it.
    pub slot: Slot,
}

/// Whether sequence number `a` is newer than `b` in serial-number arithmetic: `a` is newer if
/// it lies less than half the `u32` circle ahead of `b`. Equal numbers and numbers exactly half
/// the circle apart are not newer either way.
#[must_use]
pub const fn seq_newer(a: u32, b: u32) -> bool {
    let d = a.wrapping_sub(b);
    d != 0 && d < 0x8000_0000
}

/// Picks the newer of two optional checkpoints; slot A wins ties.
fn pick_newer(a: Option<Checkpoint>, b: Option<Checkpoint>) -> Option<Checkpoint> {
    match (a, b) {
        (Some(x), Some(y)) => Some(if seq_newer(y.seq, x.seq) { y } else { x }),
        (x, None) => x,
        (None, y) => y,
    }
}

/// Greatest common divisor (Euclid).
const fn gcd(mut a: usize, mut b: usize) -> usize {
    while b != 0 {
        let t = a % b;
        a = b;
        b = t;
    }
    a
}

/// Rounds `x` up to a multiple of `unit` (`unit` > 0); `None` on overflow.
fn round_up(x: usize, unit: usize) -> Option<usize> {
    match x % unit {
        0 => Some(x),
        r => x.checked_add(unit - r),
    }
}

/// The header bytes covered by the CRC.
fn header_prefix(seq: u32, len: u32) -> [u8; PREFIX_LEN] {
    let [m0, m1, m2, m3] = MAGIC;
    let [v0, v1] = FORMAT_VERSION.to_le_bytes();
    let [s0, s1, s2, s3] = seq.to_le_bytes();
    let [l0, l1, l2, l3] = len.to_le_bytes();
    [m0, m1, m2, m3, v0, v1, 0, 0, s0, s1, s2, s3, l0, l1, l2, l3]
}

/// The full encoded header.
fn encode_header(seq: u32, len: u32, crc: u32) -> [u8; HEADER_LEN] {
    let [p0, p1, p2, p3, p4, p5, p6, p7, p8, p9, p10, p11, p12, p13, p14, p15] =
        header_prefix(seq, len);
    let [c0, c1, c2, c3] = crc.to_le_bytes();
    [
        p0, p1, p2, p3, p4, p5, p6, p7, p8, p9, p10, p11, p12, p13, p14, p15, c0, c1, c2, c3,
    ]
}

/// Decoded header fields whose magic, version and reserved field are right: `(seq, len, crc)`.
fn decode_header(h: &[u8; HEADER_LEN]) -> Option<(u32, u32, u32)> {
    let [m0, m1, m2, m3, v0, v1, r0, r1, s0, s1, s2, s3, l0, l1, l2, l3, c0, c1, c2, c3] = *h;
    let ok = [m0, m1, m2, m3] == MAGIC
        && u16::from_le_bytes([v0, v1]) == FORMAT_VERSION
        && [r0, r1] == [0, 0];
    ok.then(|| {
        (
            u32::from_le_bytes([s0, s1, s2, s3]),
            u32::from_le_bytes([l0, l1, l2, l3]),
            u32::from_le_bytes([c0, c1, c2, c3]),
        )
    })
}

/// State of a commit between `begin` and `finish`.
struct Pending {
    slot: Slot,
    seq: u32,
    len: u32,
    /// Payload bytes accepted so far.
    written: u32,
    /// Payload bytes already programmed (a multiple of `WRITE_SIZE`).
    flushed: u32,
    digest: Digest<'static, u32>,
    /// Bytes waiting for a full write unit.
    tail: [u8; MAX_UNIT],
    tail_len: usize,
}

/// The checkpoint store over a NOR flash `F` (owned, or `&mut` to a flash the caller keeps).
///
/// Pass `&mut flash` if the flash is needed again after a failed [`Store::open`]: an owned
/// flash moved into a failing `open` is dropped.
pub struct Store<F: NorFlash> {
    flash: F,
    base: u32,
    slot_len: u32,
    /// Offset of the payload inside a slot (`H` in the layout table).
    payload_off: u32,
    latest: Option<Checkpoint>,
    pending: Option<Pending>,
}

impl<F: NorFlash> Store<F> {
    /// Opens the store on `len` bytes of `flash` starting at `offset` and finds the newest
    /// valid checkpoint, if any. Nothing is written.
    ///
    /// # Errors
    ///
    /// [`StoreError::Geometry`] for an unsupported flash geometry,
    /// [`StoreError::RegionMisaligned`], [`StoreError::RegionOutOfBounds`] or
    /// [`StoreError::RegionTooSmall`] for a bad region, and [`StoreError::Flash`] if a read
    /// fails.
    pub fn open(flash: F, offset: u32, len: u32) -> Result<Self, StoreError> {
        let write = F::WRITE_SIZE;
        let read = F::READ_SIZE;
        let erase = F::ERASE_SIZE;
        if write == 0 || read == 0 || erase == 0 {
            return Err(StoreError::Geometry);
        }
        let unit = (write / gcd(write, read))
            .checked_mul(read)
            .ok_or(StoreError::Geometry)?;
        if unit > MAX_UNIT || erase % unit != 0 {
            return Err(StoreError::Geometry);
        }
        let erase = u32::try_from(erase).map_err(|_| StoreError::Geometry)?;
        if !offset.is_multiple_of(erase) || !len.is_multiple_of(erase) {
            return Err(StoreError::RegionMisaligned);
        }
        let end = offset
            .checked_add(len)
            .ok_or(StoreError::RegionOutOfBounds)?;
        if usize::try_from(end).map_or(true, |e| e > flash.capacity()) {
            return Err(StoreError::RegionOutOfBounds);
        }
        let slot_len = len / erase / 2 * erase;
        let payload_off = round_up(HEADER_LEN, unit)
            .and_then(|h| u32::try_from(h).ok())
            .ok_or(StoreError::Geometry)?;
        if slot_len < payload_off {
            return Err(StoreError::RegionTooSmall);
        }
        let mut store = Self {
            flash,
            base: offset,
            slot_len,
            payload_off,
            latest: None,
            pending: None,
        };
        let a = store.scan(Slot::A)?;
        let b = store.scan(Slot::B)?;
        store.latest = pick_newer(a, b);
        Ok(store)
    }

    /// The newest valid checkpoint, if any.
    #[must_use]
    pub const fn latest(&self) -> Option<Checkpoint> {
        self.latest
    }

    /// Largest payload one slot holds, in bytes.
    #[must_use]
    pub const fn capacity(&self) -> u32 {
        self.slot_len - self.payload_off
    }

    /// Size of one slot in bytes (a whole number of erase sectors).
    #[must_use]
    pub const fn slot_len(&self) -> u32 {
        self.slot_len
    }

    /// Offset of the payload inside a slot: the header length padded to the write and read
    /// units.
    #[must_use]
    pub const fn payload_offset(&self) -> u32 {
        self.payload_off
    }

    /// Absolute flash address where `slot` starts.
    #[must_use]
    pub const fn slot_address(&self, slot: Slot) -> u32 {
        match slot {
            Slot::A => self.base,
            Slot::B => self.base + self.slot_len,
        }
    }

    /// Whether a commit is in progress (between `begin` and `finish`).
    #[must_use]
    pub const fn is_committing(&self) -> bool {
        self.pending.is_some()
    }

    /// Gives the flash back.
    #[must_use]
    pub fn release(self) -> F {
        self.flash
    }

    /// Reads `buf.len()` bytes of the current checkpoint's payload, starting at `offset`.
    /// Allowed during a commit: the commit writes the other slot.
    ///
    /// # Errors
    ///
    /// [`StoreError::NoCheckpoint`] if there is none, [`StoreError::ReadOutOfRange`] if the
    /// range reaches past the payload, [`StoreError::Flash`] if the read fails.
    pub fn read(&mut self, offset: u32, buf: &mut [u8]) -> Result<(), StoreError> {
        let cp = self.latest.ok_or(StoreError::NoCheckpoint)?;
        let n = u32::try_from(buf.len()).ok();
        let fits = n
            .and_then(|n| offset.checked_add(n))
            .is_some_and(|end| end <= cp.len);
        if !fits {
            return Err(StoreError::ReadOutOfRange {
                offset,
                len: n.unwrap_or(u32::MAX),
                available: cp.len,
            });
        }
        let addr = self.slot_address(cp.slot) + self.payload_off + offset;
        self.read_at(addr, buf)
    }

    /// Starts a commit of a payload of exactly `len` bytes into the slot that does not hold
    /// the newest checkpoint, erasing the sectors it needs. A commit already in progress is
    /// dropped. The current checkpoint stays readable and current until [`Store::finish`].
    ///
    /// # Errors
    ///
    /// [`StoreError::PayloadTooLarge`] if `len` exceeds [`Store::capacity`],
    /// [`StoreError::Flash`] if an erase fails (the commit is then dropped).
    pub fn begin(&mut self, len: u32) -> Result<(), StoreError> {
        let (slot, seq) = match self.latest {
            Some(cp) => (cp.slot.other(), cp.seq.wrapping_add(1)),
            None => (Slot::A, FIRST_SEQ),
        };
        self.begin_at(slot, seq, len)
    }

    /// `begin` with an explicit slot and sequence number.
    fn begin_at(&mut self, slot: Slot, seq: u32, len: u32) -> Result<(), StoreError> {
        self.pending = None;
        let capacity = self.capacity();
        if len > capacity {
            return Err(StoreError::PayloadTooLarge { capacity, len });
        }
        // `payload_off + len <= slot_len`, and `ERASE_SIZE` fits u32 (checked at open).
        let erase = F::ERASE_SIZE as u32;
        let used = self.payload_off + len;
        let sectors = used.div_ceil(erase);
        let start = self.slot_address(slot);
        for i in 0..sectors {
            let from = start + i * erase;
            self.flash.erase(from, from + erase).map_err(flash_err)?;
        }
        let mut digest = CRC32.digest();
        digest.update(&header_prefix(seq, len));
        self.pending = Some(Pending {
            slot,
            seq,
            len,
            written: 0,
            flushed: 0,
            digest,
            tail: [0xFF; MAX_UNIT],
            tail_len: 0,
        });
        Ok(())
    }

    /// Appends `chunk` to the commit in progress. Any chunk size works; whole write units are
    /// programmed at once, a partial unit waits in a small buffer.
    ///
    /// # Errors
    ///
    /// [`StoreError::NotBegun`] without a commit in progress,
    /// [`StoreError::LengthMismatch`] if the payload would exceed the announced length, and
    /// [`StoreError::Flash`] if a write fails. After an error the commit is dropped.
    pub fn write(&mut self, chunk: &[u8]) -> Result<(), StoreError> {
        let result = self.write_inner(chunk);
        if result.is_err() {
            self.pending = None;
        }
        result
    }

    fn write_inner(&mut self, chunk: &[u8]) -> Result<(), StoreError> {
        let unit = F::WRITE_SIZE;
        let start = self
            .pending
            .as_ref()
            .map(|p| self.slot_address(p.slot) + self.payload_off);
        let (Some(p), Some(start)) = (self.pending.as_mut(), start) else {
            return Err(StoreError::NotBegun);
        };
        let total = u32::try_from(chunk.len())
            .ok()
            .and_then(|n| p.written.checked_add(n));
        let total = match total {
            Some(t) if t <= p.len => t,
            _ => {
                let written =
                    u32::try_from(chunk.len()).map_or(u32::MAX, |n| p.written.saturating_add(n));
                return Err(StoreError::LengthMismatch {
                    expected: p.len,
                    written,
                });
            }
        };
        p.digest.update(chunk);
        let mut rest = chunk;
        if p.tail_len > 0 {
            let take = (unit - p.tail_len).min(rest.len());
            let (head, after) = rest.split_at(take);
            let dst = p
                .tail
                .get_mut(p.tail_len..p.tail_len + take)
                .ok_or(StoreError::Geometry)?;
            dst.copy_from_slice(head);
            p.tail_len += take;
            rest = after;
            if p.tail_len == unit {
                let word = p.tail.get(..unit).ok_or(StoreError::Geometry)?;
                self.flash
                    .write(start + p.flushed, word)
                    .map_err(flash_err)?;
                p.flushed += unit as u32;
                p.tail_len = 0;
            }
        }
        let direct = rest.len() - rest.len() % unit;
        let (body, after) = rest.split_at(direct);
        if !body.is_empty() {
            self.flash
                .write(start + p.flushed, body)
                .map_err(flash_err)?;
            // `body` is part of an accepted chunk, so it fits u32.
            p.flushed += body.len() as u32;
        }
        if !after.is_empty() {
            let dst = p
                .tail
                .get_mut(p.tail_len..p.tail_len + after.len())
                .ok_or(StoreError::Geometry)?;
            dst.copy_from_slice(after);
            p.tail_len += after.len();
        }
        p.written = total;
        Ok(())
    }

    /// Completes the commit: programs the padded tail, then the header (the commit point),
    /// reads the slot back and makes the new checkpoint current.
    ///
    /// # Errors
    ///
    /// [`StoreError::NotBegun`] without a commit in progress, [`StoreError::LengthMismatch`]
    /// if fewer bytes were written than announced, [`StoreError::Flash`] if a write or read
    /// fails, [`StoreError::VerifyFailed`] if the read-back does not validate. In every error
    /// case the commit is dropped and the previous checkpoint stays current.
    pub fn finish(&mut self) -> Result<Checkpoint, StoreError> {
        let p = self.pending.take().ok_or(StoreError::NotBegun)?;
        if p.written != p.len {
            return Err(StoreError::LengthMismatch {
                expected: p.len,
                written: p.written,
            });
        }
        let unit = F::WRITE_SIZE;
        let start = self.slot_address(p.slot);
        if p.tail_len > 0 {
            let mut word = p.tail;
            if let Some(pad) = word.get_mut(p.tail_len..unit) {
                pad.fill(0xFF);
            }
            let word = word.get(..unit).ok_or(StoreError::Geometry)?;
            self.flash
                .write(start + self.payload_off + p.flushed, word)
                .map_err(flash_err)?;
        }
        let crc = p.digest.finalize();
        let mut area = [0xFF; MAX_UNIT];
        let head = area.get_mut(..HEADER_LEN).ok_or(StoreError::Geometry)?;
        head.copy_from_slice(&encode_header(p.seq, p.len, crc));
        let area = area
            .get(..self.payload_off as usize)
            .ok_or(StoreError::Geometry)?;
        self.flash.write(start, area).map_err(flash_err)?;
        let cp = Checkpoint {
            seq: p.seq,
            len: p.len,
            slot: p.slot,
        };
        if self.scan(p.slot)? != Some(cp) {
            return Err(StoreError::VerifyFailed);
        }
        self.latest = Some(cp);
        Ok(cp)
    }

    /// Drops a commit in progress, if any. Nothing on the flash needs undoing: the partly
    /// written slot is invalid and the next commit erases it.
    pub fn abort(&mut self) {
        self.pending = None;
    }

    /// Commits `payload` in one call: [`Store::begin`], [`Store::write`], [`Store::finish`].
    ///
    /// # Example
    /// On a simulated flash of four 1 KB sectors written in 4-byte units, the two slots take
    /// turns, and a power cut in the middle of a commit leaves the last one in place:
    /// ```
    /// use hone_core::store::sim::{Cut, SimFlash};
    /// use hone_core::store::{Slot, Store};
    ///
    /// let mut store = Store::open(SimFlash::<4096, 1024, 4>::new(), 0, 4096)?;
    /// assert_eq!(store.latest(), None);
    /// let c = store.commit(b"factory model")?;
    /// assert_eq!((c.seq, c.len, c.slot), (1, 13, Slot::A));
    /// let c = store.commit(b"unit weights")?;
    /// assert_eq!((c.seq, c.len, c.slot), (2, 12, Slot::B));
    /// let mut back = [0u8; 12];
    /// store.read(0, &mut back)?;
    /// assert_eq!(&back, b"unit weights");
    ///
    /// // The power fails halfway through the third commit's fourth flash operation.
    /// let mut flash = store.release();
    /// flash.cut_power_at(flash.steps() + 3, Cut::Midway);
    /// let mut store = Store::open(flash, 0, 4096)?;
    /// assert!(store.commit(b"newer weights").is_err());
    /// let mut flash = store.release();
    /// flash.power_on();
    /// let mut store = Store::open(flash, 0, 4096)?;
    /// assert_eq!(store.latest().map(|c| (c.seq, c.slot)), Some((2, Slot::B)));
    /// store.read(0, &mut back)?;
    /// assert_eq!(&back, b"unit weights");
    /// # Ok::<(), hone_core::store::StoreError>(())
    /// ```
    ///
    /// # Errors
    ///
    /// As for the three steps; [`StoreError::PayloadTooLarge`] also if the length does not fit
    /// a `u32`.
    pub fn commit(&mut self, payload: &[u8]) -> Result<Checkpoint, StoreError> {
        let len = u32::try_from(payload.len()).map_err(|_| StoreError::PayloadTooLarge {
            capacity: self.capacity(),
            len: u32::MAX,
        })?;
        self.begin(len)?;
        self.write(payload)?;
        self.finish()
    }

    /// Validates one slot and returns its checkpoint if magic, version, reserved field,
    /// length bound and CRC are all right.
    fn scan(&mut self, slot: Slot) -> Result<Option<Checkpoint>, StoreError> {
        let start = self.slot_address(slot);
        let mut header = [0u8; HEADER_LEN];
        self.read_at(start, &mut header)?;
        let Some((seq, len, stored_crc)) = decode_header(&header) else {
            return Ok(None);
        };
        if len > self.capacity() {
            return Ok(None);
        }
        let mut digest = CRC32.digest();
        digest.update(header.get(..PREFIX_LEN).unwrap_or(&[]));
        let mut buf = [0u8; MAX_UNIT];
        let mut pos = 0u32;
        let payload = start + self.payload_off;
        while pos < len {
            let n = (len - pos).min(MAX_UNIT as u32);
            let chunk = buf.get_mut(..n as usize).ok_or(StoreError::Geometry)?;
            self.read_at(payload + pos, chunk)?;
            digest.update(chunk);
            pos += n;
        }
        Ok((digest.finalize() == stored_crc).then_some(Checkpoint { seq, len, slot }))
    }

    /// Reads `out.len()` bytes at absolute address `addr`, honouring `READ_SIZE` alignment
    /// through a stack buffer. The caller keeps the range inside one slot, whose bounds are
    /// multiples of `READ_SIZE`.
    fn read_at(&mut self, addr: u32, out: &mut [u8]) -> Result<(), StoreError> {
        let unit = F::READ_SIZE;
        if unit == 1 {
            return self.flash.read(addr, out).map_err(flash_err);
        }
        let window = MAX_UNIT - MAX_UNIT % unit;
        let mut scratch = [0u8; MAX_UNIT];
        let mut done = 0usize;
        let mut at = addr;
        while done < out.len() {
            let skew = at as usize % unit;
            let want = out.len() - done;
            let span = round_up(skew + want, unit)
                .ok_or(StoreError::Geometry)?
                .min(window);
            let buf = scratch.get_mut(..span).ok_or(StoreError::Geometry)?;
            self.flash.read(at - skew as u32, buf).map_err(flash_err)?;
            let take = (span - skew).min(want);
            let src = buf.get(skew..skew + take).ok_or(StoreError::Geometry)?;
            let dst = out.get_mut(done..done + take).ok_or(StoreError::Geometry)?;
            dst.copy_from_slice(src);
            done += take;
            at = at
                .checked_add(take as u32)
                .ok_or(StoreError::Flash(NorFlashErrorKind::OutOfBounds))?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    extern crate std;

    use std::boxed::Box;
    use std::string::ToString;
    use std::vec::Vec;
    use std::{eprintln, format, vec};

    use super::sim::{Cut, SimFlash};
    use super::*;

    /// nRF51-like: 1 KB pages, 4-byte words. 8 KB region, two 4 KB slots.
    type G1 = SimFlash<8192, 1024, 4>;
    /// 4 KB sectors, 8-byte write unit. 16 KB region, two 8 KB slots.
    type G2 = SimFlash<16384, 4096, 8>;
    /// Small sectors, 16-byte write unit and 8-byte read unit. 4 KB region, two 2 KB slots.
    type G3 = SimFlash<4096, 256, 16, 8>;

    const POWER_CUT: StoreError = StoreError::Flash(NorFlashErrorKind::Other);

    /// Invented test payload: a xorshift32 byte stream seeded by `tag` (test data only).
    fn pattern(tag: u32, len: usize) -> Vec<u8> {
        let mut x = tag.wrapping_mul(0x9E37_79B9) | 1;
        (0..len)
            .map(|_| {
                x ^= x << 13;
                x ^= x >> 17;
                x ^= x << 5;
                (x >> 7) as u8
            })
            .collect()
    }

    fn open<const S: usize, const E: usize, const W: usize, const R: usize>(
        f: &mut SimFlash<S, E, W, R>,
    ) -> Store<&mut SimFlash<S, E, W, R>> {
        Store::open(f, 0, S as u32).expect("the whole simulated flash is a valid region")
    }

    fn current<F: NorFlash>(st: &mut Store<F>) -> Option<(u32, Vec<u8>)> {
        let cp = st.latest()?;
        let mut buf = vec![0u8; cp.len as usize];
        st.read(0, &mut buf)
            .expect("read of the whole current payload");
        Some((cp.seq, buf))
    }

    fn reopened<const S: usize, const E: usize, const W: usize, const R: usize>(
        f: &mut SimFlash<S, E, W, R>,
    ) -> Option<(u32, Vec<u8>)> {
        current(&mut open(f))
    }

    #[derive(Clone, Copy, Debug)]
    enum Mode {
        /// `commit(&payload)`.
        OneShot,
        /// `begin`, then `write` in chunks of this many bytes, then `finish`.
        Chunked(usize),
    }

    fn do_commit<F: NorFlash>(
        st: &mut Store<F>,
        payload: &[u8],
        mode: Mode,
    ) -> Result<Checkpoint, StoreError> {
        match mode {
            Mode::OneShot => st.commit(payload),
            Mode::Chunked(c) => {
                st.begin(payload.len() as u32)?;
                for chunk in payload.chunks(c) {
                    st.write(chunk)?;
                }
                st.finish()
            }
        }
    }

    /// Flash steps (erase and write calls) one commit takes, derived from the geometry and the
    /// protocol in the module doc: one erase per sector under header and payload, whole write
    /// units of each chunk at once, the padded tail, then the header. `Chunked` sizes must be
    /// multiples of `w`.
    fn expected_steps(off: u32, len: usize, e: usize, w: usize, mode: Mode) -> u32 {
        let erases = (off as usize + len).div_ceil(e);
        let tail = usize::from(!len.is_multiple_of(w));
        let body = match mode {
            Mode::OneShot => usize::from(len >= w),
            Mode::Chunked(c) => {
                assert_eq!(c % w, 0, "chunk size must be a multiple of the write unit");
                len / c + usize::from(len % c >= w)
            }
        };
        (erases + body + tail + 1) as u32
    }

    /// Runs a sequence of commits; before applying each, repeats it on a copy of the flash
    /// with the power cut at every one of its steps in both styles, reboots and checks that
    /// the store yields exactly the previous checkpoint (or the new one when the cut hit the
    /// header write itself). Returns the number of cut points tried.
    fn exhaustive<const S: usize, const E: usize, const W: usize, const R: usize>(
        lens: &dyn Fn(u32) -> Vec<usize>,
        mode: Mode,
    ) -> usize {
        let mut base = Box::new(SimFlash::<S, E, W, R>::new());
        let (off, cap) = {
            let st = open(&mut *base);
            (st.payload_offset(), st.capacity())
        };
        let lens = lens(cap);
        let mut prev: Option<(u32, Vec<u8>)> = None;
        let mut tried = 0usize;
        let mut derived = 0usize;
        for (k, &len) in lens.iter().enumerate() {
            let seq = FIRST_SEQ + k as u32;
            let payload = pattern(seq.wrapping_mul(977).wrapping_add(len as u32), len);
            let steps = expected_steps(off, len, E, W, mode);
            derived += 2 * steps as usize;

            // Uninterrupted run: measures the steps the commit really takes.
            let mut done = base.clone();
            let before = done.steps();
            let cp = do_commit(&mut open(&mut *done), &payload, mode).expect("commit without cut");
            assert_eq!(
                cp,
                Checkpoint {
                    seq,
                    len: len as u32,
                    slot: if k % 2 == 0 { Slot::A } else { Slot::B }
                }
            );
            assert_eq!(
                done.steps() - before,
                steps,
                "steps of commit {k} ({len} bytes, {mode:?})"
            );

            for step in 0..steps {
                for how in [Cut::Before, Cut::Midway] {
                    let mut f = base.clone();
                    f.cut_power_at(f.steps() + step, how);
                    let r = do_commit(&mut open(&mut *f), &payload, mode);
                    assert_eq!(
                        r.err(),
                        Some(POWER_CUT),
                        "commit {k} cut at step {step} {how:?}"
                    );
                    assert!(!f.is_powered());
                    f.power_on();
                    let got = reopened(&mut *f);
                    if step + 1 == steps {
                        // The cut hit the commit point: old or new, nothing else.
                        assert!(
                            got == prev || got.as_ref() == Some(&(seq, payload.clone())),
                            "commit {k} cut in the header write {how:?}"
                        );
                    } else {
                        assert_eq!(got, prev, "commit {k} cut at step {step} {how:?}");
                    }
                    assert_eq!(
                        f.violations(),
                        0,
                        "word written twice at {:?}",
                        f.first_violation()
                    );
                    tried += 1;
                }
            }
            base = done;
            assert_eq!(base.violations(), 0);
            prev = reopened(&mut *base);
            assert_eq!(prev, Some((seq, payload)));
        }
        assert_eq!(tried, derived);
        assert!(tried > 0);
        tried
    }

    #[test]
    fn power_cut_at_every_step() {
        // Zero-length payloads, payloads spanning several sectors, and payloads of exactly the
        // slot capacity, in each geometry; both one-shot and chunked streaming commits.
        let g1 = |cap: u32| vec![0, 100, 1500, cap as usize, 3000, 1, 5, 0];
        let g2 = |cap: u32| vec![5000, 0, cap as usize, 13, 4096];
        let g3 = |cap: u32| vec![1900, 0, cap as usize, 17, 255, 1];
        let counts = [
            exhaustive::<8192, 1024, 4, 1>(&g1, Mode::OneShot),
            exhaustive::<8192, 1024, 4, 1>(&g1, Mode::Chunked(64)),
            exhaustive::<16384, 4096, 8, 1>(&g2, Mode::OneShot),
            exhaustive::<16384, 4096, 8, 1>(&g2, Mode::Chunked(64)),
            exhaustive::<4096, 256, 16, 8>(&g3, Mode::OneShot),
            exhaustive::<4096, 256, 16, 8>(&g3, Mode::Chunked(32)),
        ];
        let total: usize = counts.iter().sum();
        eprintln!("checkpoint store: power cut tried at {total} points {counts:?}");
    }

    #[test]
    fn step_formula_matches_hand_counts() {
        // Hand count for G1 (payload offset 20, erase 1024, write 4), one-shot, 1500 bytes:
        // 20 + 1500 = 1520 bytes need 2 sectors, one body write, no tail, one header write.
        assert_eq!(expected_steps(20, 1500, 1024, 4, Mode::OneShot), 4);
        // 0 bytes: 1 erase + header.
        assert_eq!(expected_steps(20, 0, 1024, 4, Mode::OneShot), 2);
        // 5 bytes: 1 erase, body 4, tail 1 padded, header.
        assert_eq!(expected_steps(20, 5, 1024, 4, Mode::OneShot), 4);
        // 130 bytes in chunks of 64: writes 64, 64, then 2 bytes wait for finish; 1 erase.
        assert_eq!(
            expected_steps(20, 130, 1024, 4, Mode::Chunked(64)),
            1 + 2 + 1 + 1
        );
    }

    #[test]
    fn round_trip_alternates_slots_and_reopens_newest() {
        let mut f = G1::new();
        let payloads = [pattern(1, 700), pattern(2, 10), pattern(3, 4076)];
        {
            let mut st = open(&mut f);
            assert_eq!(st.latest(), None);
            assert_eq!(st.capacity(), 4096 - 20);
            for (i, p) in payloads.iter().enumerate() {
                let cp = st.commit(p).unwrap();
                let slot = if i % 2 == 0 { Slot::A } else { Slot::B };
                assert_eq!(
                    cp,
                    Checkpoint {
                        seq: FIRST_SEQ + i as u32,
                        len: p.len() as u32,
                        slot
                    }
                );
                assert_eq!(st.latest(), Some(cp));
                assert_eq!(current(&mut st).unwrap().1, *p);
            }
        }
        let mut st = open(&mut f);
        let cp = st.latest().unwrap();
        assert_eq!((cp.seq, cp.slot), (3, Slot::A));
        // Piecewise reads at odd offsets match the payload.
        let want = &payloads[2];
        for (off, n) in [(0usize, 1usize), (1, 63), (1000, 77), (4075, 1), (4076, 0)] {
            let mut buf = vec![0u8; n];
            st.read(off as u32, &mut buf).unwrap();
            assert_eq!(buf, want[off..off + n]);
        }
        assert_eq!(f.violations(), 0);
    }

    #[test]
    fn unaligned_reads_with_read_unit() {
        let mut f = G3::new();
        let p = pattern(9, 1000);
        let mut st = open(&mut f);
        st.commit(&p).unwrap();
        for (off, n) in [
            (0usize, 1usize),
            (3, 5),
            (7, 200),
            (63, 65),
            (999, 1),
            (1, 999),
            (0, 1000),
        ] {
            let mut buf = vec![0u8; n];
            st.read(off as u32, &mut buf).unwrap();
            assert_eq!(buf, p[off..off + n], "offset {off} length {n}");
        }
    }

    #[test]
    fn owned_flash_and_release() {
        let mut st = Store::open(G1::new(), 0, 8192).unwrap();
        st.commit(b"owned").unwrap();
        let f = st.release();
        let mut st = Store::open(f, 0, 8192).unwrap();
        assert_eq!(current(&mut st), Some((1, b"owned".to_vec())));
    }

    #[test]
    fn stays_inside_region_and_ignores_odd_sector() {
        let mut f = SimFlash::<16384, 1024, 4>::new();
        // Region of 5 sectors at 4 KB: slots of 2 sectors, the fifth unused.
        {
            let mut st = Store::open(&mut f, 4096, 5 * 1024).unwrap();
            assert_eq!(st.slot_len(), 2048);
            assert_eq!(st.slot_address(Slot::A), 4096);
            assert_eq!(st.slot_address(Slot::B), 6144);
            let cap = st.capacity() as usize;
            st.commit(&pattern(1, cap)).unwrap();
            st.commit(&pattern(2, cap)).unwrap();
        }
        let bytes = f.bytes();
        assert!(bytes[..4096].iter().all(|&b| b == 0xFF));
        assert!(bytes[8192..].iter().all(|&b| b == 0xFF));
        assert!(bytes[4096..8192].iter().any(|&b| b != 0xFF));
    }

    #[test]
    fn stored_crc_matches_one_shot_crc_and_layout() {
        // Outside reference: CRC-32/ISO-HDLC check value for ASCII "123456789" is 0xCBF43926
        // (Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-32/ISO-HDLC entry; the
        // `crc-catalog` crate ships the same value as `CRC_32_ISO_HDLC.check`).
        assert_eq!(CRC32.checksum(b"123456789"), 0xCBF4_3926);
        assert_eq!(CRC_32_ISO_HDLC.check, 0xCBF4_3926);

        let mut f = G2::new();
        let p = pattern(4, 333);
        let cp = open(&mut f).commit(&p).unwrap();
        let raw = f.bytes();
        // Layout from the module doc table, 8-byte write unit: header padded to 24 bytes.
        assert_eq!(&raw[0..4], b"HnCk");
        assert_eq!(&raw[4..8], &[1, 0, 0, 0]);
        assert_eq!(&raw[8..12], &cp.seq.to_le_bytes());
        assert_eq!(&raw[12..16], &333u32.to_le_bytes());
        assert_eq!(&raw[20..24], &[0xFF; 4]);
        assert_eq!(&raw[24..24 + 333], &p[..]);
        assert_eq!(&raw[24 + 333..24 + 336], &[0xFF; 3]);
        // The streamed CRC equals a one-shot CRC over prefix and payload.
        let mut whole = raw[..16].to_vec();
        whole.extend_from_slice(&p);
        assert_eq!(&raw[16..20], &CRC32.checksum(&whole).to_le_bytes());
    }

    #[test]
    fn header_encoding_round_trip() {
        let h = encode_header(0x0403_0201, 0x0000_0105, 0xDDCC_BBAA);
        assert_eq!(
            h,
            [b'H', b'n', b'C', b'k', 1, 0, 0, 0, 1, 2, 3, 4, 5, 1, 0, 0, 0xAA, 0xBB, 0xCC, 0xDD]
        );
        assert_eq!(decode_header(&h), Some((0x0403_0201, 0x105, 0xDDCC_BBAA)));
        let mut bad = h;
        bad[6] = 1; // reserved field
        assert_eq!(decode_header(&bad), None);
        let mut bad = h;
        bad[4] = 2; // version
        assert_eq!(decode_header(&bad), None);
        assert_eq!(decode_header(&[0xFF; HEADER_LEN]), None);
    }

    #[test]
    fn serial_number_order() {
        assert!(seq_newer(1, 0));
        assert!(!seq_newer(0, 1));
        assert!(seq_newer(0, u32::MAX));
        assert!(!seq_newer(u32::MAX, 0));
        assert!(seq_newer(u32::MAX, u32::MAX - 1));
        assert!(!seq_newer(5, 5));
        assert!(seq_newer(0x7FFF_FFFF, 0));
        assert!(!seq_newer(0x8000_0000, 0));
        assert!(!seq_newer(0, 0x8000_0000));
        assert!(seq_newer(0x8000_0000, 1));
    }

    #[test]
    fn sequence_wraps_through_u32_max() {
        let mut f = G1::new();
        {
            let mut st = open(&mut f);
            st.begin_at(Slot::A, u32::MAX - 1, 3).unwrap();
            st.write(&[1, 2, 3]).unwrap();
            st.finish().unwrap();
        }
        assert_eq!(
            open(&mut f).latest().map(|c| (c.seq, c.slot)),
            Some((u32::MAX - 1, Slot::A))
        );
        assert_eq!(open(&mut f).commit(b"max").unwrap().seq, u32::MAX);
        assert_eq!(reopened(&mut f), Some((u32::MAX, b"max".to_vec())));

        // Commit across the wrap, with the power cut at each of its steps first.
        let steps = expected_steps(20, 4, 1024, 4, Mode::OneShot);
        for step in 0..steps {
            for how in [Cut::Before, Cut::Midway] {
                let mut g = f.clone();
                g.cut_power_at(g.steps() + step, how);
                assert_eq!(open(&mut g).commit(b"zero").err(), Some(POWER_CUT));
                g.power_on();
                assert_eq!(reopened(&mut g), Some((u32::MAX, b"max".to_vec())));
            }
        }
        let cp = open(&mut f).commit(b"zero").unwrap();
        assert_eq!((cp.seq, cp.slot), (0, Slot::A));
        // Plain comparison would pick u32::MAX in slot B; serial arithmetic picks 0.
        assert_eq!(reopened(&mut f), Some((0, b"zero".to_vec())));
        assert_eq!(open(&mut f).commit(b"one").unwrap().seq, 1);
        assert_eq!(reopened(&mut f), Some((1, b"one".to_vec())));
    }

    fn craft_both(seq_a: u32, seq_b: u32) -> Option<Checkpoint> {
        let mut f = G1::new();
        let mut st = open(&mut f);
        for (slot, seq) in [(Slot::A, seq_a), (Slot::B, seq_b)] {
            st.begin_at(slot, seq, 1).unwrap();
            st.write(&[seq as u8]).unwrap();
            st.finish().unwrap();
        }
        open(&mut f).latest()
    }

    #[test]
    fn ties_and_half_circle_pick_slot_a() {
        assert_eq!(craft_both(7, 7).map(|c| c.slot), Some(Slot::A));
        assert_eq!(craft_both(0, 0x8000_0000).map(|c| c.slot), Some(Slot::A));
        assert_eq!(craft_both(0x8000_0000, 0).map(|c| c.slot), Some(Slot::A));
        assert_eq!(craft_both(7, 8).map(|c| c.slot), Some(Slot::B));
        assert_eq!(craft_both(8, 7).map(|c| c.slot), Some(Slot::A));
    }

    #[test]
    fn every_bit_flip_of_newest_slot_falls_back() {
        let mut f = G1::new();
        let old = pattern(11, 301);
        let new = pattern(12, 301);
        let (b_start, off) = {
            let mut st = open(&mut f);
            st.commit(&old).unwrap();
            st.commit(&new).unwrap();
            (st.slot_address(Slot::B), st.payload_offset() as usize)
        };
        // Header, payload and the 3 padding bytes of the last word.
        let covered = off + new.len() + 3;
        let mut flips = 0;
        for i in 0..covered {
            for bit in 0..8 {
                let addr = b_start + i as u32;
                f.flip_bit(addr, bit).unwrap();
                let got = reopened(&mut f);
                let guarded = i < HEADER_LEN || (off..off + new.len()).contains(&i);
                if guarded {
                    assert_eq!(got, Some((1, old.clone())), "flip at byte {i} bit {bit}");
                } else {
                    // Padding is outside the CRC and carries no data.
                    assert_eq!(
                        got,
                        Some((2, new.clone())),
                        "flip at padding byte {i} bit {bit}"
                    );
                }
                f.flip_bit(addr, bit).unwrap();
                flips += 1;
            }
        }
        assert_eq!(flips, covered * 8);
        assert_eq!(reopened(&mut f), Some((2, new)));
    }

    #[test]
    fn bit_flips_of_older_slot_keep_newest() {
        let mut f = G1::new();
        let new = pattern(22, 64);
        {
            let mut st = open(&mut f);
            st.commit(&pattern(21, 64)).unwrap();
            st.commit(&new).unwrap();
        }
        for i in 0..(20 + 64) {
            for bit in 0..8 {
                f.flip_bit(i, bit).unwrap();
                assert_eq!(reopened(&mut f), Some((2, new.clone())));
                f.flip_bit(i, bit).unwrap();
            }
        }
    }

    #[test]
    fn single_checkpoint_with_flip_yields_nothing() {
        let mut f = G3::new();
        open(&mut f).commit(&pattern(5, 40)).unwrap();
        for i in (0..HEADER_LEN as u32).chain(32..72) {
            for bit in 0..8 {
                f.flip_bit(i, bit).unwrap();
                let mut st = open(&mut f);
                assert_eq!(st.latest(), None, "flip at byte {i} bit {bit}");
                assert_eq!(st.read(0, &mut [0u8; 1]), Err(StoreError::NoCheckpoint));
                f.flip_bit(i, bit).unwrap();
            }
        }
    }

    #[test]
    fn dense_flip_sample_of_full_large_slot() {
        let mut f = G2::new();
        let old = pattern(31, 8168);
        let new = pattern(32, 8168);
        let b_start = {
            let mut st = open(&mut f);
            assert_eq!(st.capacity(), 8168);
            st.commit(&old).unwrap();
            st.commit(&new).unwrap();
            st.slot_address(Slot::B)
        };
        // Every header bit, then every 13th bit of header and payload (24 + 8168 bytes; the
        // header padding is bytes 20..24).
        let bits = (0..HEADER_LEN * 8).chain((0..(24 + 8168) * 8).step_by(13));
        let mut tried = 0;
        for n in bits {
            let (i, bit) = (n / 8, (n % 8) as u8);
            if (20..24).contains(&i) {
                continue;
            }
            f.flip_bit(b_start + i as u32, bit).unwrap();
            assert_eq!(
                reopened(&mut f),
                Some((1, old.clone())),
                "flip at byte {i} bit {bit}"
            );
            f.flip_bit(b_start + i as u32, bit).unwrap();
            tried += 1;
        }
        assert!(tried > 5000);
    }

    #[test]
    fn corrupt_both_slots_yields_nothing() {
        let mut f = G1::new();
        {
            let mut st = open(&mut f);
            st.commit(b"first").unwrap();
            st.commit(b"second").unwrap();
        }
        f.flip_bit(20, 0).unwrap();
        f.flip_bit(4096 + 20, 0).unwrap();
        assert_eq!(reopened(&mut f), None);
        // A commit after that works and lands in slot A.
        let cp = open(&mut f).commit(b"third").unwrap();
        assert_eq!((cp.seq, cp.slot), (FIRST_SEQ, Slot::A));
        assert_eq!(f.violations(), 0);
    }

    #[test]
    fn region_errors() {
        let mut f = G1::new();
        assert_eq!(
            Store::open(&mut f, 4, 4096).err(),
            Some(StoreError::RegionMisaligned)
        );
        assert_eq!(
            Store::open(&mut f, 1024, 1000).err(),
            Some(StoreError::RegionMisaligned)
        );
        assert_eq!(
            Store::open(&mut f, 1024, 8192).err(),
            Some(StoreError::RegionOutOfBounds)
        );
        assert_eq!(
            Store::open(&mut f, 0, 9216).err(),
            Some(StoreError::RegionOutOfBounds)
        );
        assert_eq!(
            Store::open(&mut f, 0xFFFF_FC00, 2048).err(),
            Some(StoreError::RegionOutOfBounds)
        );
        assert_eq!(
            Store::open(&mut f, 0, 1024).err(),
            Some(StoreError::RegionTooSmall)
        );
        assert_eq!(
            Store::open(&mut f, 0, 0).err(),
            Some(StoreError::RegionTooSmall)
        );
        // Edges that work: the last two sectors, the whole flash.
        assert!(Store::open(&mut f, 6144, 2048).is_ok());
        assert!(Store::open(&mut f, 0, 8192).is_ok());
        // Sectors smaller than the header.
        let mut tiny = SimFlash::<64, 16, 4>::new();
        assert_eq!(
            Store::open(&mut tiny, 0, 32).err(),
            Some(StoreError::RegionTooSmall)
        );
        assert_eq!(
            Store::open(&mut tiny, 0, 48).err(),
            Some(StoreError::RegionTooSmall)
        );
        let st = Store::open(&mut tiny, 0, 64).unwrap();
        assert_eq!(st.capacity(), 32 - 20);
    }

    #[test]
    fn geometry_errors() {
        let mut wide = SimFlash::<1024, 256, 128>::new();
        assert_eq!(
            Store::open(&mut wide, 0, 1024).err(),
            Some(StoreError::Geometry)
        );
        // lcm(64, 48) = 192 exceeds the 64-byte unit limit.
        let mut odd = SimFlash::<768, 192, 64, 48>::new();
        assert_eq!(
            Store::open(&mut odd, 0, 768).err(),
            Some(StoreError::Geometry)
        );
        // lcm(64, 32) = 64 is the largest supported unit: header area of 64 bytes.
        let mut max = SimFlash::<1024, 256, 64, 32>::new();
        let mut st = Store::open(&mut max, 0, 1024).unwrap();
        assert_eq!(st.payload_offset(), 64);
        let p = pattern(3, 192);
        st.commit(&p).unwrap();
        assert_eq!(current(&mut st), Some((1, p)));
    }

    #[test]
    fn payload_too_large() {
        let mut tiny = SimFlash::<128, 32, 4>::new();
        let mut st = Store::open(&mut tiny, 0, 128).unwrap();
        assert_eq!(st.capacity(), 64 - 20);
        assert_eq!(
            st.commit(&[7u8; 45]).err(),
            Some(StoreError::PayloadTooLarge {
                capacity: 44,
                len: 45
            })
        );
        assert_eq!(
            st.begin(u32::MAX).err(),
            Some(StoreError::PayloadTooLarge {
                capacity: 44,
                len: u32::MAX
            })
        );
        assert!(!st.is_committing());
        let cp = st.commit(&[7u8; 44]).unwrap();
        assert_eq!(cp.len, 44);
    }

    #[test]
    fn read_errors() {
        let mut f = G1::new();
        let mut st = open(&mut f);
        assert_eq!(st.read(0, &mut []), Err(StoreError::NoCheckpoint));
        st.commit(&[1, 2, 3, 4, 5, 6, 7, 8, 9, 10]).unwrap();
        let mut one = [0u8; 1];
        st.read(9, &mut one).unwrap();
        assert_eq!(one, [10]);
        st.read(10, &mut []).unwrap();
        assert_eq!(
            st.read(10, &mut one),
            Err(StoreError::ReadOutOfRange {
                offset: 10,
                len: 1,
                available: 10
            })
        );
        assert_eq!(
            st.read(0, &mut [0u8; 11]),
            Err(StoreError::ReadOutOfRange {
                offset: 0,
                len: 11,
                available: 10
            })
        );
        assert_eq!(
            st.read(u32::MAX, &mut [0u8; 2]),
            Err(StoreError::ReadOutOfRange {
                offset: u32::MAX,
                len: 2,
                available: 10
            })
        );
    }

    #[test]
    fn streaming_length_errors() {
        let mut f = G1::new();
        let mut st = open(&mut f);
        assert_eq!(st.write(b"x"), Err(StoreError::NotBegun));
        assert_eq!(st.finish().err(), Some(StoreError::NotBegun));
        st.commit(b"kept").unwrap();

        // Too few bytes.
        st.begin(10).unwrap();
        st.write(&[0; 9]).unwrap();
        assert_eq!(
            st.finish().err(),
            Some(StoreError::LengthMismatch {
                expected: 10,
                written: 9
            })
        );
        assert!(!st.is_committing());
        assert_eq!(current(&mut st), Some((1, b"kept".to_vec())));

        // Too many bytes: refused at the write that overruns, nothing past the length written.
        st.begin(10).unwrap();
        st.write(&[0; 6]).unwrap();
        assert_eq!(
            st.write(&[0; 5]),
            Err(StoreError::LengthMismatch {
                expected: 10,
                written: 11
            })
        );
        assert_eq!(st.write(&[0; 4]), Err(StoreError::NotBegun));
        assert_eq!(st.finish().err(), Some(StoreError::NotBegun));
        assert_eq!(current(&mut st), Some((1, b"kept".to_vec())));

        // Abort, abandoned begin, and a fresh commit afterwards.
        st.begin(3).unwrap();
        st.abort();
        assert_eq!(st.write(b"abc"), Err(StoreError::NotBegun));
        st.begin(5).unwrap();
        st.write(b"ab").unwrap();
        st.begin(3).unwrap();
        st.write(b"abc").unwrap();
        let cp = st.finish().unwrap();
        assert_eq!((cp.seq, cp.slot), (2, Slot::B));
        assert_eq!(current(&mut st), Some((2, b"abc".to_vec())));
        assert_eq!(f.violations(), 0);
    }

    #[test]
    fn read_during_commit_sees_current() {
        let mut f = G3::new();
        let mut st = open(&mut f);
        let old = pattern(1, 500);
        let new = pattern(2, 500);
        st.commit(&old).unwrap();
        st.begin(500).unwrap();
        // Copy-while-writing: read the old checkpoint in pieces while streaming the new one.
        let mut buf = [0u8; 100];
        for (i, piece) in new.chunks(100).enumerate() {
            st.read((i * 100) as u32, &mut buf).unwrap();
            assert_eq!(buf[..], old[i * 100..i * 100 + 100]);
            st.write(piece).unwrap();
        }
        st.finish().unwrap();
        assert_eq!(current(&mut st), Some((2, new)));
    }

    #[test]
    fn odd_chunk_sizes_stream_correctly() {
        for chunk in [1usize, 3, 15, 16, 17, 31, 65, 1000] {
            let mut f = G3::new();
            let p = pattern(chunk as u32, 999);
            let mut st = open(&mut f);
            let cp = do_commit(&mut st, &p, Mode::Chunked(chunk)).unwrap();
            assert_eq!(cp.len, 999);
            assert_eq!(reopened(&mut f), Some((1, p)), "chunk {chunk}");
            assert_eq!(f.violations(), 0, "chunk {chunk}");
        }
    }

    #[test]
    fn flash_errors_are_typed() {
        let mut f = G1::new();
        f.cut_power_at(0, Cut::Before);
        let mut st = open(&mut f);
        assert_eq!(st.commit(b"x").err(), Some(POWER_CUT));
        assert!(!st.is_committing());
        // Reads fail too while the power is off.
        assert_eq!(Store::open(&mut f, 0, 8192).err(), Some(POWER_CUT));
    }

    #[test]
    fn display_texts_are_distinct() {
        let all = [
            StoreError::Flash(NorFlashErrorKind::OutOfBounds),
            StoreError::Geometry,
            StoreError::RegionMisaligned,
            StoreError::RegionTooSmall,
            StoreError::RegionOutOfBounds,
            StoreError::PayloadTooLarge {
                capacity: 4076,
                len: 4077,
            },
            StoreError::NoCheckpoint,
            StoreError::ReadOutOfRange {
                offset: 3,
                len: 9,
                available: 10,
            },
            StoreError::LengthMismatch {
                expected: 10,
                written: 9,
            },
            StoreError::NotBegun,
            StoreError::VerifyFailed,
        ];
        let texts: Vec<_> = all.iter().map(ToString::to_string).collect();
        for (i, a) in texts.iter().enumerate() {
            for b in &texts[i + 1..] {
                assert_ne!(a, b);
            }
        }
        assert!(texts[5].contains("4077") && texts[5].contains("4076"));
        assert!(texts[7].contains('3') && texts[7].contains('9') && texts[7].contains("10"));
        assert_eq!(format!("{}", StoreError::NotBegun), texts[9]);
    }

    /// One random operation: payload length pick, payload tag, chunk size, optional cut
    /// (step offset, midway).
    type Op = (u32, u16, usize, Option<(u32, bool)>);

    /// One random scenario: commits of random sizes and chunkings, each possibly cut at a
    /// random step; after every reboot the store holds the last good checkpoint or the new one.
    fn random_scenario<const S: usize, const E: usize, const W: usize, const R: usize>(ops: &[Op]) {
        let mut f = Box::new(SimFlash::<S, E, W, R>::new());
        let cap = open(&mut *f).capacity();
        let mut known: Option<(u32, Vec<u8>)> = None;
        for (i, &(len_pick, tag, chunk, cut)) in ops.iter().enumerate() {
            let len = (len_pick % (cap + 1)) as usize;
            let payload = pattern(u32::from(tag) ^ ((i as u32) << 16), len);
            let next_seq = known.as_ref().map_or(FIRST_SEQ, |(s, _)| s.wrapping_add(1));
            if let Some((k, mid)) = cut {
                let how = if mid { Cut::Midway } else { Cut::Before };
                f.cut_power_at(f.steps() + k, how);
            }
            let r = do_commit(&mut open(&mut *f), &payload, Mode::Chunked(chunk));
            f.cancel_cut();
            let new = Some((next_seq, payload));
            match r {
                Ok(_) => {
                    assert!(f.is_powered());
                    assert_eq!(reopened(&mut *f), new, "op {i}");
                }
                Err(e) => {
                    assert_eq!(e, POWER_CUT, "op {i}");
                    f.power_on();
                    let got = reopened(&mut *f);
                    assert!(got == known || got == new, "op {i}: neither old nor new");
                }
            }
            known = reopened(&mut *f);
            assert_eq!(f.violations(), 0, "op {i}");
        }
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]

        #[test]
        fn random_commits_and_cuts_small_sectors(
            ops in proptest::collection::vec(
                (
                    proptest::prelude::any::<u32>(),
                    proptest::prelude::any::<u16>(),
                    1usize..200,
                    proptest::option::of((0u32..40, proptest::prelude::any::<bool>())),
                ),
                1..10,
            )
        ) {
            random_scenario::<4096, 256, 16, 8>(&ops);
        }

        #[test]
        fn random_commits_and_cuts_nrf51_pages(
            ops in proptest::collection::vec(
                (
                    proptest::prelude::any::<u32>(),
                    proptest::prelude::any::<u16>(),
                    1usize..5000,
                    proptest::option::of((0u32..12, proptest::prelude::any::<bool>())),
                ),
                1..10,
            )
        ) {
            random_scenario::<8192, 1024, 4, 1>(&ops);
        }
    }
}
