//! Raw tensor storage: slices of `i8`, `i16` or `i32` whose word size is known at run time.
//!
//! [`Raw`] and [`RawMut`] are the borrowed forms the kernels take. Inner loops are generic over
//! [`Sample`] and monomorphized per word combination; the match on the word size happens once
//! per row or per tensor, never per multiply.

use super::format::Word;

/// A storage integer: `i8`, `i16` or `i32`.
pub trait Sample: Copy + Default + bytemuck::Pod + 'static {
    /// The word this type stores.
    const WORD: Word;
    /// Widening conversion.
    fn to_i32(self) -> i32;
    /// Narrowing conversion of a value already known to be in range (wraps otherwise; every
    /// caller saturates first).
    fn from_i32_in_range(v: i32) -> Self;
    /// A run-time-word view of a typed slice.
    fn raw(s: &[Self]) -> Raw<'_>;
}

impl Sample for i8 {
    const WORD: Word = Word::I8;
    #[inline(always)]
    fn raw(s: &[Self]) -> Raw<'_> {
        Raw::I8(s)
    }
    #[inline(always)]
    fn to_i32(self) -> i32 {
        self as i32
    }
    #[inline(always)]
    fn from_i32_in_range(v: i32) -> Self {
        v as i8
    }
}

impl Sample for i16 {
    const WORD: Word = Word::I16;
    #[inline(always)]
    fn raw(s: &[Self]) -> Raw<'_> {
        Raw::I16(s)
    }
    #[inline(always)]
    fn to_i32(self) -> i32 {
        self as i32
    }
    #[inline(always)]
    fn from_i32_in_range(v: i32) -> Self {
        v as i16
    }
}

impl Sample for i32 {
    const WORD: Word = Word::I32;
    #[inline(always)]
    fn raw(s: &[Self]) -> Raw<'_> {
        Raw::I32(s)
    }
    #[inline(always)]
    fn to_i32(self) -> i32 {
        self
    }
    #[inline(always)]
    fn from_i32_in_range(v: i32) -> Self {
        v
    }
}

/// A borrowed, read-only tensor of raw values.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Raw<'a> {
    /// 8-bit values.
    I8(&'a [i8]),
    /// 16-bit values.
    I16(&'a [i16]),
    /// 32-bit values.
    I32(&'a [i32]),
}

/// A borrowed, writable tensor of raw values.
#[derive(Debug, PartialEq, Eq)]
pub enum RawMut<'a> {
    /// 8-bit values.
    I8(&'a mut [i8]),
    /// 16-bit values.
    I16(&'a mut [i16]),
    /// 32-bit values.
    I32(&'a mut [i32]),
}

impl<'a> Raw<'a> {
    /// An empty tensor.
    pub const EMPTY: Raw<'static> = Raw::I8(&[]);

    /// Number of values.
    pub const fn len(&self) -> usize {
        match self {
            Raw::I8(s) => s.len(),
            Raw::I16(s) => s.len(),
            Raw::I32(s) => s.len(),
        }
    }

    /// Whether there are no values.
    pub const fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The storage word.
    pub const fn word(&self) -> Word {
        match self {
            Raw::I8(_) => Word::I8,
            Raw::I16(_) => Word::I16,
            Raw::I32(_) => Word::I32,
        }
    }

    /// Value `i` widened to `i32`, or `None` past the end.
    #[inline]
    pub fn get(&self, i: usize) -> Option<i32> {
        match self {
            Raw::I8(s) => s.get(i).map(|&v| v as i32),
            Raw::I16(s) => s.get(i).map(|&v| v as i32),
            Raw::I32(s) => s.get(i).copied(),
        }
    }

    /// Value `i`, or 0 past the end. For loops whose bounds were checked once up front.
    #[inline]
    pub fn at(&self, i: usize) -> i32 {
        self.get(i).unwrap_or(0)
    }

    /// A sub-range, or `None` if it is out of bounds.
    pub fn slice(&self, start: usize, len: usize) -> Option<Raw<'a>> {
        let end = start.checked_add(len)?;
        Some(match *self {
            Raw::I8(s) => Raw::I8(s.get(start..end)?),
            Raw::I16(s) => Raw::I16(s.get(start..end)?),
            Raw::I32(s) => Raw::I32(s.get(start..end)?),
        })
    }

    /// Writes the values into `out` as little-endian bytes. Returns the number of bytes
    /// written, or `None` if `out` is too short.
    pub fn write_le(&self, out: &mut [u8]) -> Option<usize> {
        let n = self.len() * self.word().bytes();
        let out = out.get_mut(..n)?;
        match self {
            Raw::I8(s) => {
                for (o, v) in out.iter_mut().zip(s.iter()) {
                    *o = *v as u8;
                }
            }
            Raw::I16(s) => {
                for (o, v) in out.chunks_exact_mut(2).zip(s.iter()) {
                    o.copy_from_slice(&v.to_le_bytes());
                }
            }
            Raw::I32(s) => {
                for (o, v) in out.chunks_exact_mut(4).zip(s.iter()) {
                    o.copy_from_slice(&v.to_le_bytes());
                }
            }
        }
        Some(n)
    }
}

impl<'a> RawMut<'a> {
    /// Number of values.
    pub fn len(&self) -> usize {
        self.as_raw().len()
    }

    /// Whether there are no values.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The storage word.
    pub fn word(&self) -> Word {
        self.as_raw().word()
    }

    /// A read-only view.
    pub fn as_raw(&self) -> Raw<'_> {
        match self {
            RawMut::I8(s) => Raw::I8(s),
            RawMut::I16(s) => Raw::I16(s),
            RawMut::I32(s) => Raw::I32(s),
        }
    }

    /// A shorter-lived writable view of the same values.
    pub fn reborrow(&mut self) -> RawMut<'_> {
        match self {
            RawMut::I8(s) => RawMut::I8(s),
            RawMut::I16(s) => RawMut::I16(s),
            RawMut::I32(s) => RawMut::I32(s),
        }
    }

    /// Value `i` widened, or 0 past the end.
    #[inline]
    pub fn at(&self, i: usize) -> i32 {
        match self {
            RawMut::I8(s) => s.get(i).map_or(0, |&v| v as i32),
            RawMut::I16(s) => s.get(i).map_or(0, |&v| v as i32),
            RawMut::I32(s) => s.get(i).copied().unwrap_or(0),
        }
    }

    /// Stores `v` at `i`. `v` must already be in the word's range (the requantizers saturate
    /// first); an index past the end is ignored, bounds were checked by the caller.
    #[inline]
    pub fn put(&mut self, i: usize, v: i32) {
        match self {
            RawMut::I8(s) => {
                if let Some(x) = s.get_mut(i) {
                    *x = v as i8;
                }
            }
            RawMut::I16(s) => {
                if let Some(x) = s.get_mut(i) {
                    *x = v as i16;
                }
            }
            RawMut::I32(s) => {
                if let Some(x) = s.get_mut(i) {
                    *x = v;
                }
            }
        }
    }

    /// Sets every value to zero.
    pub fn clear(&mut self) {
        match self {
            RawMut::I8(s) => s.fill(0),
            RawMut::I16(s) => s.fill(0),
            RawMut::I32(s) => s.fill(0),
        }
    }

    /// Copies `src` into this tensor, which must have the same word and length.
    ///
    /// Returns `false` (and copies nothing) on a word or length mismatch.
    pub fn copy_from(&mut self, src: Raw<'_>) -> bool {
        match (self, src) {
            (RawMut::I8(d), Raw::I8(s)) if d.len() == s.len() => d.copy_from_slice(s),
            (RawMut::I16(d), Raw::I16(s)) if d.len() == s.len() => d.copy_from_slice(s),
            (RawMut::I32(d), Raw::I32(s)) if d.len() == s.len() => d.copy_from_slice(s),
            _ => return false,
        }
        true
    }

    /// Views `words` (4-byte aligned storage from the arena) as `len` values of `word`.
    /// Returns `None` if the storage is too short.
    pub fn from_words(words: &'a mut [u32], word: Word, len: usize) -> Option<RawMut<'a>> {
        let bytes: &'a mut [u8] = bytemuck::cast_slice_mut(words);
        let bytes = bytes.get_mut(..len * word.bytes())?;
        Some(match word {
            Word::I8 => RawMut::I8(bytemuck::cast_slice_mut(bytes)),
            Word::I16 => RawMut::I16(bytemuck::try_cast_slice_mut(bytes).ok()?),
            Word::I32 => RawMut::I32(bytemuck::try_cast_slice_mut(bytes).ok()?),
        })
    }

    /// Reads little-endian bytes into this tensor (same length in values). Returns `false` if
    /// `bytes` has the wrong length.
    pub fn read_le(&mut self, bytes: &[u8]) -> bool {
        if bytes.len() != self.len() * self.word().bytes() {
            return false;
        }
        match self {
            RawMut::I8(d) => {
                for (x, b) in d.iter_mut().zip(bytes) {
                    *x = *b as i8;
                }
            }
            RawMut::I16(d) => {
                for (x, b) in d.iter_mut().zip(bytes.chunks_exact(2)) {
                    *x = i16::from_le_bytes([b[0], b[1]]);
                }
            }
            RawMut::I32(d) => {
                for (x, b) in d.iter_mut().zip(bytes.chunks_exact(4)) {
                    *x = i32::from_le_bytes([b[0], b[1], b[2], b[3]]);
                }
            }
        }
        true
    }
}

/// Runs `$body` with `$s` bound to the typed slice inside a [`Raw`] (or [`RawMut`]), once per
/// word size, so the body is monomorphized for each.
#[macro_export]
#[doc(hidden)]
macro_rules! with_raw {
    ($raw:expr, $s:ident => $body:expr) => {
        match $raw {
            $crate::num::Raw::I8($s) => $body,
            $crate::num::Raw::I16($s) => $body,
            $crate::num::Raw::I32($s) => $body,
        }
    };
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn views_over_arena_words() {
        let mut words = [0u32; 3];
        let mut t = RawMut::from_words(&mut words, Word::I16, 5).unwrap();
        t.put(4, -2);
        t.put(9, 1); // ignored
        assert_eq!(t.at(4), -2);
        assert_eq!(t.len(), 5);
        assert!(RawMut::from_words(&mut words, Word::I32, 4).is_none());
        let mut bytes = [0u8; 10];
        let r = RawMut::from_words(&mut words, Word::I16, 5).unwrap();
        assert_eq!(r.as_raw().write_le(&mut bytes), Some(10));
        assert_eq!(&bytes[8..10], &(-2i16).to_le_bytes());
        let mut back = [0u32; 3];
        let mut t2 = RawMut::from_words(&mut back, Word::I16, 5).unwrap();
        assert!(t2.read_le(&bytes));
        assert_eq!(t2.at(4), -2);
        assert!(!t2.read_le(&bytes[..9]));
    }

    #[test]
    fn slices_are_checked() {
        let v = [1i8, 2, 3];
        let r = Raw::I8(&v);
        assert_eq!(r.slice(1, 2), Some(Raw::I8(&v[1..3])));
        assert_eq!(r.slice(2, 2), None);
        assert_eq!(r.slice(usize::MAX, 2), None);
        assert_eq!(r.get(3), None);
    }
}
