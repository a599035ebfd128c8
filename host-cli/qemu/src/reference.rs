//! Host-side reimplementation of the Phase-1 workload inputs, for checking what a board reports.
//!
//! These mirror `boards/fw/src/workload.rs` independently: the firmware's results are compared
//! with values computed here, so a wrong multiply, a lost repetition or a corrupted payload on the
//! board shows up as a mismatch.

/// Marsaglia's xorshift32, as the firmware uses it.
#[derive(Clone, Copy, Debug)]
pub struct XorShift32(u32);

impl XorShift32 {
    /// Starts the generator; a zero seed becomes 1.
    #[must_use]
    pub const fn new(seed: u32) -> Self {
        Self(if seed == 0 { 1 } else { seed })
    }

    /// Next output.
    pub fn next_u32(&mut self) -> u32 {
        let mut x = self.0;
        x ^= x << 13;
        x ^= x >> 17;
        x ^= x << 5;
        self.0 = x;
        x
    }
}

/// Reference result of the firmware's repeated `i8` dot product: `reps` times the dot product of
/// the two `len`-element vectors the generator yields from `seed` (first `a`, then `b`).
#[must_use]
pub fn dot_i8_total(seed: u32, len: usize, reps: u64) -> i64 {
    let mut g = XorShift32::new(seed);
    let v: Vec<i64> = (0..2 * len)
        .map(|_| i64::from(g.next_u32() as u8 as i8))
        .collect();
    let dot: i64 = v[..len].iter().zip(&v[len..]).map(|(a, b)| a * b).sum();
    dot * reps as i64
}

/// Reference result of the firmware's repeated `i16` dot product, as for [`dot_i8_total`].
#[must_use]
pub fn dot_i16_total(seed: u32, len: usize, reps: u64) -> i64 {
    let mut g = XorShift32::new(seed);
    let v: Vec<i64> = (0..2 * len)
        .map(|_| i64::from(g.next_u32() as u16 as i16))
        .collect();
    let dot: i64 = v[..len].iter().zip(&v[len..]).map(|(a, b)| a * b).sum();
    dot * reps as i64
}

/// The firmware's test pattern: the little-endian bytes of a 16-bit counter.
#[must_use]
pub fn counter_pattern(len: usize) -> Vec<u8> {
    (0..len / 2 + 1)
        .flat_map(|i| (i as u16).to_le_bytes())
        .take(len)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn xorshift32_known_sequence() {
        // Marsaglia (2003), "Xorshift RNGs": the 13/17/5 generator from seed 1.
        let mut g = XorShift32::new(1);
        let first: Vec<u32> = (0..3).map(|_| g.next_u32()).collect();
        assert_eq!(first, [270_369, 67_634_689, 2_647_435_461]);
        assert_eq!(XorShift32::new(0).next_u32(), 270_369);
    }

    #[test]
    fn pattern_chunks_are_distinct() {
        let p = counter_pattern(4096);
        assert_eq!(p.len(), 4096);
        assert_eq!(&p[..6], &[0, 0, 1, 0, 2, 0]);
        assert_eq!(&p[4094..], &[0xFF, 0x07]);
        let chunks: std::collections::HashSet<&[u8]> = p.chunks(256).collect();
        assert_eq!(chunks.len(), 16);
        assert_eq!(counter_pattern(3), [0, 0, 1]);
    }

    #[test]
    fn dot_totals_scale_with_repetitions() {
        let one = dot_i8_total(5, 40, 1);
        assert_eq!(dot_i8_total(5, 40, 7), 7 * one);
        // Vectors of one element: the product of the first two outputs' low bytes.
        let mut g = XorShift32::new(9);
        let (a, b) = (g.next_u32() as u8 as i8, g.next_u32() as u8 as i8);
        assert_eq!(dot_i8_total(9, 1, 1), i64::from(a) * i64::from(b));
        let mut g = XorShift32::new(9);
        let (a, b) = (g.next_u32() as u16 as i16, g.next_u32() as u16 as i16);
        assert_eq!(dot_i16_total(9, 1, 3), 3 * i64::from(a) * i64::from(b));
    }
}
