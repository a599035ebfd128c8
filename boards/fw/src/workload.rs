//! The Phase-1 workload: repeated integer dot products, measured, and a known byte pattern sent
//! through the payload channel.
//!
//! It exists to prove the measurement and output chain on every board. The host recomputes the
//! dot products from the same generator and seeds and recovers the pattern bit for bit.

use core::hint::black_box;

use crate::platform::Platform;
use crate::record;
use crate::session::{Ctx, SessionError};

/// Elements per dot product.
pub const DOT_LEN: usize = 320;
/// Times each dot product is repeated inside one measured span.
pub const DOT_REPS: u32 = 100;
/// Generator seed of the `i8` operands.
pub const SEED_I8: u32 = 0x1234_5678;
/// Generator seed of the `i16` operands.
pub const SEED_I16: u32 = 0x9E37_79B9;
/// Length of the test pattern payload.
pub const PATTERN_LEN: usize = 4096;

/// Marsaglia's xorshift32: a tiny deterministic generator the host reproduces exactly.
#[derive(Clone, Copy, Debug)]
pub struct XorShift32 {
    state: u32,
}

impl XorShift32 {
    /// Starts the generator; a zero seed is replaced by 1 (zero is a fixed point).
    #[must_use]
    pub const fn new(seed: u32) -> Self {
        Self {
            state: if seed == 0 { 1 } else { seed },
        }
    }

    /// Next 32-bit output.
    pub fn next_u32(&mut self) -> u32 {
        let mut x = self.state;
        x ^= x << 13;
        x ^= x >> 17;
        x ^= x << 5;
        self.state = x;
        x
    }
}

/// Fills two `i8` operand vectors: `a` first, then `b`, each element the low byte of one output.
pub fn fill_i8(seed: u32, a: &mut [i8], b: &mut [i8]) {
    let mut g = XorShift32::new(seed);
    for x in a.iter_mut().chain(b.iter_mut()) {
        *x = g.next_u32() as u8 as i8;
    }
}

/// Fills two `i16` operand vectors: `a` first, then `b`, each element the low half of one output.
pub fn fill_i16(seed: u32, a: &mut [i16], b: &mut [i16]) {
    let mut g = XorShift32::new(seed);
    for x in a.iter_mut().chain(b.iter_mut()) {
        *x = g.next_u32() as u16 as i16;
    }
}

/// Dot product of `i8` vectors accumulated in `i32` (exact for up to 2^16 elements).
#[must_use]
pub fn dot_i8(a: &[i8], b: &[i8]) -> i32 {
    a.iter()
        .zip(b)
        .map(|(&x, &y)| i32::from(x) * i32::from(y))
        .sum()
}

/// Dot product of `i16` vectors accumulated in `i64` (each product is exact in `i32`).
#[must_use]
pub fn dot_i16(a: &[i16], b: &[i16]) -> i64 {
    a.iter()
        .zip(b)
        .map(|(&x, &y)| i64::from(i32::from(x) * i32::from(y)))
        .sum()
}

/// Byte `i` of the test pattern: the little-endian bytes of a 16-bit counter, so every 256-byte
/// chunk of a 4 KiB pattern differs from every other and a misplaced chunk is caught.
#[must_use]
pub const fn pattern_byte(i: u32) -> u8 {
    let counter = (i / 2) as u16;
    counter.to_le_bytes()[(i % 2) as usize]
}

/// The Phase-1 session: measure both dot products and send the 4 KiB test pattern.
///
/// Kept out of line so its operand buffers take stack only while it runs.
///
/// # Errors
/// Whatever the payload channel reports ([`SessionError`]).
#[inline(never)]
pub fn phase1<P: Platform>(ctx: &mut Ctx<'_, P>) -> Result<(), SessionError> {
    let macs = DOT_LEN as u32 * DOT_REPS;

    let mut a8 = [0i8; DOT_LEN];
    let mut b8 = [0i8; DOT_LEN];
    fill_i8(SEED_I8, &mut a8, &mut b8);
    let (total8, _) = ctx.measure("dot_i8", macs, || {
        let mut acc = 0i64;
        for _ in 0..DOT_REPS {
            // black_box keeps the compiler from hoisting the loop-invariant product out of the
            // repetition loop.
            acc += i64::from(dot_i8(black_box(&a8), black_box(&b8)));
        }
        acc
    });
    record::dot("dot_i8", DOT_LEN as u32, DOT_REPS, SEED_I8, total8);

    let mut a16 = [0i16; DOT_LEN];
    let mut b16 = [0i16; DOT_LEN];
    fill_i16(SEED_I16, &mut a16, &mut b16);
    let (total16, _) = ctx.measure("dot_i16", macs, || {
        let mut acc = 0i64;
        for _ in 0..DOT_REPS {
            acc += dot_i16(black_box(&a16), black_box(&b16));
        }
        acc
    });
    record::dot("dot_i16", DOT_LEN as u32, DOT_REPS, SEED_I16, total16);

    send_pattern(ctx)
}

/// Sends the [`PATTERN_LEN`]-byte test pattern, generated piecewise so it needs no 4 KiB buffer.
///
/// # Errors
/// Whatever the payload channel reports ([`SessionError`]).
pub fn send_pattern<P: Platform>(ctx: &mut Ctx<'_, P>) -> Result<(), SessionError> {
    let mut w = ctx.blob("pattern", PATTERN_LEN as u32)?;
    let mut buf = [0u8; crate::blob::CHUNK];
    let mut off = 0u32;
    while (off as usize) < PATTERN_LEN {
        let n = buf.len().min(PATTERN_LEN - off as usize);
        for (i, b) in buf[..n].iter_mut().enumerate() {
            *b = pattern_byte(off + i as u32);
        }
        w.write(&buf[..n])?;
        off += n as u32;
    }
    w.finish()
}
