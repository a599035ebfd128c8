//! The seeded pseudo-random generator inside the core.
//!
//! xoshiro128++ (Blackman and Vigna, "Scrambled linear pseudorandom number generators", ACM
//! TOMS 2021): 128 bits of state, 32-bit output, only adds, shifts, rotates and xors, so it is
//! cheap on a Cortex-M0. Seeds are expanded with SplitMix64 (Steele, Lea, Flood 2014), as the
//! xoshiro authors recommend. Host and device run the same generator from the same seed, which
//! is what makes stochastic rounding reproducible and bit-exact between them.

use serde::{Deserialize, Serialize};

/// xoshiro128++ state. See the [module docs](self).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Rng {
    s: [u32; 4],
}

impl Rng {
    /// A generator seeded from a 64-bit seed through SplitMix64. Every seed, zero included,
    /// gives a valid (non-zero) state.
    pub const fn new(seed: u64) -> Rng {
        let mut z = seed;
        let mut words = [0u32; 4];
        let mut i = 0;
        while i < 2 {
            z = z.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut x = z;
            x = (x ^ (x >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            x = (x ^ (x >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            x ^= x >> 31;
            words[2 * i] = x as u32;
            words[2 * i + 1] = (x >> 32) as u32;
            i += 1;
        }
        if words[0] | words[1] | words[2] | words[3] == 0 {
            words[0] = 1;
        }
        Rng { s: words }
    }

    /// The raw state, for checkpoints.
    pub const fn state(&self) -> [u32; 4] {
        self.s
    }

    /// A generator resumed from a saved state. Returns `None` for the all-zero state, which
    /// xoshiro cannot leave.
    pub const fn from_state(s: [u32; 4]) -> Option<Rng> {
        if s[0] | s[1] | s[2] | s[3] == 0 {
            None
        } else {
            Some(Rng { s })
        }
    }

    /// The next 32 random bits.
    #[inline]
    pub fn next_u32(&mut self) -> u32 {
        let s = &mut self.s;
        let result = s[0].wrapping_add(s[3]).rotate_left(7).wrapping_add(s[0]);
        let t = s[1] << 9;
        s[2] ^= s[0];
        s[3] ^= s[1];
        s[1] ^= s[2];
        s[0] ^= s[3];
        s[2] ^= t;
        s[3] = s[3].rotate_left(11);
        result
    }

    /// The next 64 random bits (two outputs, high word first).
    #[inline]
    pub fn next_u64(&mut self) -> u64 {
        let hi = self.next_u32() as u64;
        let lo = self.next_u32() as u64;
        (hi << 32) | lo
    }

    /// `bits` uniformly random bits in the low end of a `u64`, `bits ≤ 64`. Draws one 32-bit
    /// output for up to 32 bits and two beyond.
    #[inline]
    pub fn bits(&mut self, bits: u32) -> u64 {
        match bits {
            0 => 0,
            1..=32 => (self.next_u32() >> (32 - bits)) as u64,
            _ => self.next_u64() >> (64 - bits.min(64)),
        }
    }

    /// A uniform integer in `0..bound` (`bound ≥ 1`), without bias: rejection sampling on the
    /// bottom of the range (the division form of Lemire, "Fast random integer generation in
    /// an interval", ACM TOMACS 2019).
    pub fn below(&mut self, bound: u64) -> u64 {
        if bound <= 1 {
            return 0;
        }
        if bound.is_power_of_two() {
            return self.bits(bound.trailing_zeros());
        }
        if bound <= 1 << 32 {
            // 32-bit draws. Values below 2^32 mod b are rejected, so the accepted range has a
            // length that is a multiple of b and `x % b` is uniform.
            let b = bound as u32;
            let reject_below = b.wrapping_neg() % b;
            loop {
                let x = self.next_u32();
                if x >= reject_below {
                    return (x % b) as u64;
                }
            }
        }
        let reject_below = bound.wrapping_neg() % bound;
        loop {
            let x = self.next_u64();
            if x >= reject_below {
                return x % bound;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reference_sequence() {
        // xoshiro128++ from the state [1, 2, 3, 4]; the first outputs recomputed here by the
        // algorithm's definition in u64 arithmetic, independently of `next_u32`.
        let mut r = Rng::from_state([1, 2, 3, 4]).unwrap();
        let mut s: [u64; 4] = [1, 2, 3, 4];
        for _ in 0..100 {
            let m = 0xFFFF_FFFFu64;
            let sum = (s[0] + s[3]) & m;
            let rot = ((sum << 7) | (sum >> 25)) & m;
            let expect = (rot + s[0]) & m;
            let t = (s[1] << 9) & m;
            s[2] ^= s[0];
            s[3] ^= s[1];
            s[1] ^= s[2];
            s[0] ^= s[3];
            s[2] ^= t;
            s[3] = ((s[3] << 11) | (s[3] >> 21)) & m;
            assert_eq!(r.next_u32() as u64, expect);
        }
    }

    #[test]
    fn first_output_from_small_state() {
        // By hand: s = [1,2,3,4]: (1 + 4) rotl 7 = 640, + 1 = 641.
        let mut r = Rng::from_state([1, 2, 3, 4]).unwrap();
        assert_eq!(r.next_u32(), 641);
    }

    #[test]
    fn zero_state_is_refused_and_seeds_differ() {
        assert!(Rng::from_state([0; 4]).is_none());
        assert_ne!(Rng::new(0).state(), [0; 4]);
        assert_ne!(Rng::new(1).state(), Rng::new(2).state());
    }

    #[test]
    fn below_is_in_range_and_roughly_uniform() {
        let mut r = Rng::new(7);
        let mut counts = [0u32; 5];
        for _ in 0..50_000 {
            let v = r.below(5);
            counts[v as usize] += 1;
        }
        // Each bucket expects 10 000 with standard deviation sqrt(50000·0.2·0.8) ≈ 89;
        // 6 standard deviations is about 540.
        for c in counts {
            assert!((c as i64 - 10_000).abs() < 540, "{counts:?}");
        }
        for _ in 0..1000 {
            assert!(r.below(3_000_000_000_000) < 3_000_000_000_000);
            assert!(r.bits(5) < 32);
        }
    }
}
