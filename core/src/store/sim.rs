//! A simulated NOR flash with fault injection, for tests, the host tool and emulated firmware.
//!
//! [`SimFlash`] keeps its whole contents in a `[u8; SIZE]` array (no allocation) and follows
//! NOR rules: an erase sets a sector to `0xFF`, a write can only clear bits (the stored byte
//! becomes `old & new`). Writing to a word that is not fully erased is allowed by the hardware
//! model but counted as a *violation*, so a test can assert that the store never writes a flash
//! word twice between erases.
//!
//! Every `write` and `erase` call made while the power is on is one *step*, numbered from 0.
//! [`SimFlash::cut_power_at`] arms a power cut at a chosen step: either before the step (none
//! of it happens) or midway (a write stores only the first half of its bytes, an erase sets
//! only the first half of its range to `0xFF` and leaves the rest untouched). From the cut on,
//! every operation, reads included, fails with [`SimError::PowerCut`] until
//! [`SimFlash::power_on`] models the reboot.

use core::fmt;

use embedded_storage::nor_flash::{
    ErrorType, NorFlash, NorFlashError, NorFlashErrorKind, ReadNorFlash,
};

/// Errors of the simulated flash.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum SimError {
    /// Offset or length is not a multiple of the operation's unit.
    NotAligned,
    /// The range lies (partly) outside the flash, or a bit index is above 7.
    OutOfBounds,
    /// The power was cut; every operation fails until [`SimFlash::power_on`].
    PowerCut,
}

impl fmt::Display for SimError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NotAligned => f.write_str("simulated flash: access not aligned"),
            Self::OutOfBounds => f.write_str("simulated flash: access out of bounds"),
            Self::PowerCut => f.write_str("simulated flash: power is cut"),
        }
    }
}

impl NorFlashError for SimError {
    fn kind(&self) -> NorFlashErrorKind {
        match self {
            Self::NotAligned => NorFlashErrorKind::NotAligned,
            Self::OutOfBounds => NorFlashErrorKind::OutOfBounds,
            Self::PowerCut => NorFlashErrorKind::Other,
        }
    }
}

/// How an armed power cut hits its step.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Cut {
    /// The power fails just before the step: nothing of it reaches the flash.
    Before,
    /// The power fails halfway: a write stores only the first half of its bytes (rounded
    /// down), an erase sets only the first half of its range to `0xFF`.
    Midway,
}

/// A simulated NOR flash of `SIZE` bytes with erase sectors of `ERASE` bytes, a write unit of
/// `WRITE` bytes and a read unit of `READ` bytes (default 1).
///
/// The sizes are checked when [`SimFlash::new`] is compiled: `SIZE` must be a multiple of
/// `ERASE`, `ERASE` a multiple of `WRITE` and of `READ`, none of them zero, and `SIZE` must fit
/// a `u32` address.
#[derive(Clone)]
pub struct SimFlash<
    const SIZE: usize,
    const ERASE: usize,
    const WRITE: usize,
    const READ: usize = 1,
> {
    bytes: [u8; SIZE],
    steps: u32,
    cut: Option<(u32, Cut)>,
    powered: bool,
    violations: u32,
    first_violation: Option<u32>,
}

impl<const SIZE: usize, const ERASE: usize, const WRITE: usize, const READ: usize>
    SimFlash<SIZE, ERASE, WRITE, READ>
{
    /// Compile-time check of the geometry; evaluated when `new` is instantiated.
    const GEOMETRY_OK: () = assert!(
        ERASE > 0
            && WRITE > 0
            && READ > 0
            && SIZE.is_multiple_of(ERASE)
            && ERASE.is_multiple_of(WRITE)
            && ERASE.is_multiple_of(READ)
            && SIZE <= u32::MAX as usize,
        "SimFlash geometry: SIZE % ERASE, ERASE % WRITE and ERASE % READ must be 0"
    );

    /// A fully erased flash (all bytes `0xFF`), powered on, with no cut armed and step 0 next.
    #[must_use]
    pub const fn new() -> Self {
        let () = Self::GEOMETRY_OK;
        Self {
            bytes: [0xFF; SIZE],
            steps: 0,
            cut: None,
            powered: true,
            violations: 0,
            first_violation: None,
        }
    }

    /// The raw contents.
    #[must_use]
    pub const fn bytes(&self) -> &[u8; SIZE] {
        &self.bytes
    }

    /// The raw contents, mutable, for tests that craft flash images by hand. Changes made here
    /// bypass NOR rules, step counting and power state.
    pub fn bytes_mut(&mut self) -> &mut [u8; SIZE] {
        &mut self.bytes
    }

    /// Number of `write` and `erase` calls made while the power was on; the index the next
    /// such call gets.
    #[must_use]
    pub const fn steps(&self) -> u32 {
        self.steps
    }

    /// Arms a power cut at absolute step index `step` (compare [`SimFlash::steps`]), replacing
    /// any cut armed before. A step index already passed never fires.
    pub fn cut_power_at(&mut self, step: u32, how: Cut) {
        self.cut = Some((step, how));
    }

    /// Disarms a pending power cut, if any.
    pub fn cancel_cut(&mut self) {
        self.cut = None;
    }

    /// The reboot: turns the power back on and disarms any pending cut. The contents stay as
    /// the cut left them.
    pub fn power_on(&mut self) {
        self.powered = true;
        self.cut = None;
    }

    /// Whether the power is on.
    #[must_use]
    pub const fn is_powered(&self) -> bool {
        self.powered
    }

    /// How many write calls touched a word that was not fully erased.
    #[must_use]
    pub const fn violations(&self) -> u32 {
        self.violations
    }

    /// Address of the first word written twice without an erase, if any.
    #[must_use]
    pub const fn first_violation(&self) -> Option<u32> {
        self.first_violation
    }

    /// Inverts bit `bit` (0 = least significant) of the byte at `addr`, as a radiation hit or
    /// a worn cell would. Works whether or not the power is on and is not a step.
    ///
    /// # Errors
    ///
    /// [`SimError::OutOfBounds`] if `addr` is not below `SIZE` or `bit` is above 7.
    pub fn flip_bit(&mut self, addr: u32, bit: u8) -> Result<(), SimError> {
        let mask = 1u8
            .checked_shl(u32::from(bit))
            .filter(|_| bit < 8)
            .ok_or(SimError::OutOfBounds)?;
        let byte = usize::try_from(addr)
            .ok()
            .and_then(|a| self.bytes.get_mut(a))
            .ok_or(SimError::OutOfBounds)?;
        *byte ^= mask;
        Ok(())
    }

    /// Checks alignment to `unit` and bounds; returns the byte range.
    fn range(offset: u32, len: usize, unit: usize) -> Result<(usize, usize), SimError> {
        let start = usize::try_from(offset).map_err(|_| SimError::OutOfBounds)?;
        let end = start.checked_add(len).ok_or(SimError::OutOfBounds)?;
        if end > SIZE {
            return Err(SimError::OutOfBounds);
        }
        if start % unit != 0 || !len.is_multiple_of(unit) {
            return Err(SimError::NotAligned);
        }
        Ok((start, end))
    }

    /// Counts one step and reports whether the armed cut hits it.
    fn step(&mut self) -> Option<Cut> {
        let index = self.steps;
        self.steps = self.steps.wrapping_add(1);
        match self.cut {
            Some((at, how)) if at == index => {
                self.cut = None;
                self.powered = false;
                Some(how)
            }
            _ => None,
        }
    }

    /// ANDs `data` into the flash at `start`, recording violations for non-erased words in
    /// `start..check_end`.
    fn program(&mut self, start: usize, check_end: usize, data: &[u8]) {
        if let Some(target) = self.bytes.get(start..check_end) {
            let mut word_addr = start;
            for word in target.chunks(WRITE) {
                if word.iter().any(|&b| b != 0xFF) {
                    self.violations = self.violations.saturating_add(1);
                    if self.first_violation.is_none() {
                        self.first_violation = u32::try_from(word_addr).ok();
                    }
                }
                word_addr = word_addr.saturating_add(WRITE);
            }
        }
        if let Some(dst) = start
            .checked_add(data.len())
            .and_then(|end| self.bytes.get_mut(start..end))
        {
            for (d, s) in dst.iter_mut().zip(data) {
                *d &= *s;
            }
        }
    }
}

impl<const SIZE: usize, const ERASE: usize, const WRITE: usize, const READ: usize> Default
    for SimFlash<SIZE, ERASE, WRITE, READ>
{
    fn default() -> Self {
        Self::new()
    }
}

impl<const SIZE: usize, const ERASE: usize, const WRITE: usize, const READ: usize> fmt::Debug
    for SimFlash<SIZE, ERASE, WRITE, READ>
{
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.debug_struct("SimFlash")
            .field("size", &SIZE)
            .field("erase", &ERASE)
            .field("write", &WRITE)
            .field("read", &READ)
            .field("steps", &self.steps)
            .field("cut", &self.cut)
            .field("powered", &self.powered)
            .field("violations", &self.violations)
            .finish_non_exhaustive()
    }
}

impl<const SIZE: usize, const ERASE: usize, const WRITE: usize, const READ: usize> ErrorType
    for SimFlash<SIZE, ERASE, WRITE, READ>
{
    type Error = SimError;
}

impl<const SIZE: usize, const ERASE: usize, const WRITE: usize, const READ: usize> ReadNorFlash
    for SimFlash<SIZE, ERASE, WRITE, READ>
{
    const READ_SIZE: usize = READ;

    fn read(&mut self, offset: u32, bytes: &mut [u8]) -> Result<(), Self::Error> {
        if !self.powered {
            return Err(SimError::PowerCut);
        }
        let (start, end) = Self::range(offset, bytes.len(), READ)?;
        let src = self.bytes.get(start..end).ok_or(SimError::OutOfBounds)?;
        bytes.copy_from_slice(src);
        Ok(())
    }

    fn capacity(&self) -> usize {
        SIZE
    }
}

impl<const SIZE: usize, const ERASE: usize, const WRITE: usize, const READ: usize> NorFlash
    for SimFlash<SIZE, ERASE, WRITE, READ>
{
    const WRITE_SIZE: usize = WRITE;
    const ERASE_SIZE: usize = ERASE;

    fn erase(&mut self, from: u32, to: u32) -> Result<(), Self::Error> {
        if !self.powered {
            return Err(SimError::PowerCut);
        }
        let cut = self.step();
        if cut == Some(Cut::Before) {
            return Err(SimError::PowerCut);
        }
        let len = to.checked_sub(from).ok_or(SimError::OutOfBounds)?;
        let len = usize::try_from(len).map_err(|_| SimError::OutOfBounds)?;
        let (start, end) = Self::range(from, len, ERASE)?;
        let stop = if cut == Some(Cut::Midway) {
            start + (end - start) / 2
        } else {
            end
        };
        if let Some(dst) = self.bytes.get_mut(start..stop) {
            dst.fill(0xFF);
        }
        if cut.is_some() {
            Err(SimError::PowerCut)
        } else {
            Ok(())
        }
    }

    fn write(&mut self, offset: u32, bytes: &[u8]) -> Result<(), Self::Error> {
        if !self.powered {
            return Err(SimError::PowerCut);
        }
        let cut = self.step();
        if cut == Some(Cut::Before) {
            return Err(SimError::PowerCut);
        }
        let (start, end) = Self::range(offset, bytes.len(), WRITE)?;
        let data = if cut == Some(Cut::Midway) {
            bytes.get(..bytes.len() / 2).unwrap_or(&[])
        } else {
            bytes
        };
        self.program(start, end, data);
        if cut.is_some() {
            Err(SimError::PowerCut)
        } else {
            Ok(())
        }
    }
}

#[cfg(test)]
mod tests {
    extern crate std;

    use std::string::ToString;

    use super::*;

    type Flash = SimFlash<64, 16, 4>;

    #[test]
    fn starts_erased_and_powered() {
        let f = Flash::new();
        assert!(f.bytes().iter().all(|&b| b == 0xFF));
        assert!(f.is_powered());
        assert_eq!(f.steps(), 0);
        assert_eq!(f.violations(), 0);
        assert_eq!(f.capacity(), 64);
    }

    #[test]
    fn write_ands_bits_and_erase_restores_ones() {
        let mut f = Flash::new();
        f.write(16, &[0x0F, 0xF0, 0x00, 0xAA]).unwrap();
        assert_eq!(&f.bytes()[16..20], &[0x0F, 0xF0, 0x00, 0xAA]);
        // A second write to the same word can only clear bits, and is a violation.
        f.write(16, &[0xFF, 0x0F, 0xFF, 0x55]).unwrap();
        assert_eq!(&f.bytes()[16..20], &[0x0F, 0x00, 0x00, 0x00]);
        assert_eq!(f.violations(), 1);
        assert_eq!(f.first_violation(), Some(16));
        f.erase(16, 32).unwrap();
        assert!(f.bytes()[16..32].iter().all(|&b| b == 0xFF));
        // Untouched sectors stay as they were.
        assert_eq!(f.steps(), 3);
    }

    #[test]
    fn writing_ff_over_programmed_word_is_still_a_violation() {
        let mut f = Flash::new();
        f.write(0, &[0x00; 4]).unwrap();
        f.write(0, &[0xFF; 4]).unwrap();
        assert_eq!(f.violations(), 1);
        // Neighbouring erased word: no violation.
        f.write(4, &[0x00; 4]).unwrap();
        assert_eq!(f.violations(), 1);
    }

    #[test]
    fn alignment_and_bounds_are_checked() {
        let mut f = Flash::new();
        assert_eq!(f.write(2, &[0; 4]), Err(SimError::NotAligned));
        assert_eq!(f.write(0, &[0; 3]), Err(SimError::NotAligned));
        assert_eq!(f.write(60, &[0; 8]), Err(SimError::OutOfBounds));
        assert_eq!(f.write(u32::MAX, &[0; 4]), Err(SimError::OutOfBounds));
        assert_eq!(f.erase(8, 24), Err(SimError::NotAligned));
        assert_eq!(f.erase(32, 16), Err(SimError::OutOfBounds));
        assert_eq!(f.erase(48, 80), Err(SimError::OutOfBounds));
        let mut buf = [0u8; 4];
        assert_eq!(f.read(62, &mut buf), Err(SimError::OutOfBounds));
        // Edges: the last word and the last sector are reachable.
        f.write(60, &[0; 4]).unwrap();
        f.erase(48, 64).unwrap();
        f.read(60, &mut buf).unwrap();
        // Rejected calls are still steps.
        assert_eq!(f.steps(), 9);
        assert_eq!(f.violations(), 0);
    }

    #[test]
    fn read_size_is_enforced() {
        let mut f = SimFlash::<64, 16, 4, 4>::new();
        let mut buf = [0u8; 4];
        assert_eq!(f.read(1, &mut buf), Err(SimError::NotAligned));
        assert_eq!(f.read(0, &mut buf[..2]), Err(SimError::NotAligned));
        f.read(4, &mut buf).unwrap();
    }

    #[test]
    fn cut_before_leaves_flash_untouched_until_power_on() {
        let mut f = Flash::new();
        f.write(0, &[1, 2, 3, 4]).unwrap();
        f.cut_power_at(1, Cut::Before);
        assert_eq!(f.write(4, &[0; 4]), Err(SimError::PowerCut));
        assert!(!f.is_powered());
        assert_eq!(&f.bytes()[4..8], &[0xFF; 4]);
        let mut buf = [0u8; 4];
        assert_eq!(f.read(0, &mut buf), Err(SimError::PowerCut));
        assert_eq!(f.erase(0, 16), Err(SimError::PowerCut));
        assert_eq!(f.write(8, &[0; 4]), Err(SimError::PowerCut));
        // Calls while unpowered are not steps.
        assert_eq!(f.steps(), 2);
        f.power_on();
        f.read(0, &mut buf).unwrap();
        assert_eq!(buf, [1, 2, 3, 4]);
        f.write(4, &[5, 6, 7, 8]).unwrap();
        assert_eq!(f.violations(), 0);
    }

    #[test]
    fn cut_midway_write_stores_first_half() {
        let mut f = Flash::new();
        f.cut_power_at(0, Cut::Midway);
        assert_eq!(f.write(0, &[0x11; 12]), Err(SimError::PowerCut));
        assert_eq!(&f.bytes()[..6], &[0x11; 6]);
        assert_eq!(&f.bytes()[6..12], &[0xFF; 6]);
        // Shortest write: 4 bytes, first 2 land.
        f.power_on();
        f.cut_power_at(1, Cut::Midway);
        assert_eq!(f.write(32, &[0; 4]), Err(SimError::PowerCut));
        assert_eq!(&f.bytes()[32..36], &[0, 0, 0xFF, 0xFF]);
    }

    #[test]
    fn cut_midway_erase_erases_first_half_only() {
        let mut f = Flash::new();
        f.write(0, &[0u8; 32]).unwrap();
        f.cut_power_at(1, Cut::Midway);
        assert_eq!(f.erase(0, 32), Err(SimError::PowerCut));
        assert!(f.bytes()[..16].iter().all(|&b| b == 0xFF));
        assert!(f.bytes()[16..32].iter().all(|&b| b == 0));
    }

    #[test]
    fn passed_cut_never_fires_and_cancel_disarms() {
        let mut f = Flash::new();
        f.write(0, &[0; 4]).unwrap();
        f.cut_power_at(0, Cut::Before);
        f.write(4, &[0; 4]).unwrap();
        assert!(f.is_powered());
        f.cut_power_at(3, Cut::Before);
        f.cancel_cut();
        f.write(8, &[0; 4]).unwrap();
        f.write(12, &[0; 4]).unwrap();
        assert!(f.is_powered());
    }

    #[test]
    fn flip_bit_edges() {
        let mut f = Flash::new();
        f.flip_bit(0, 0).unwrap();
        f.flip_bit(63, 7).unwrap();
        assert_eq!(f.bytes()[0], 0xFE);
        assert_eq!(f.bytes()[63], 0x7F);
        assert_eq!(f.flip_bit(64, 0), Err(SimError::OutOfBounds));
        assert_eq!(f.flip_bit(0, 8), Err(SimError::OutOfBounds));
        assert_eq!(f.flip_bit(u32::MAX, 255), Err(SimError::OutOfBounds));
        f.flip_bit(0, 0).unwrap();
        assert_eq!(f.bytes()[0], 0xFF);
    }

    #[test]
    fn error_kinds_and_display() {
        assert_eq!(SimError::NotAligned.kind(), NorFlashErrorKind::NotAligned);
        assert_eq!(SimError::OutOfBounds.kind(), NorFlashErrorKind::OutOfBounds);
        assert_eq!(SimError::PowerCut.kind(), NorFlashErrorKind::Other);
        let texts = [
            SimError::NotAligned,
            SimError::OutOfBounds,
            SimError::PowerCut,
        ]
        .map(|e| e.to_string());
        assert!(texts.iter().all(|t| !t.is_empty()));
        assert_ne!(texts[0], texts[1]);
        assert_ne!(texts[1], texts[2]);
    }
}
