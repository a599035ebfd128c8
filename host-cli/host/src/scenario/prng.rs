//! Seeded randomness and portable elementary functions for the demo generators.
//!
//! The demo CSVs must come out byte-identical on every platform. Integer arithmetic is exact
//! everywhere, and IEEE 754 makes `+ - * /` and `sqrt` correctly rounded, so they agree across
//! platforms too. `f64::ln`, `f64::sin` and `f64::cos`, on the other hand, call the platform's
//! maths library, whose last bit may differ from one system to the next. This module therefore
//! builds the logarithm, sine and cosine the generators need out of those exact operations only
//! (series evaluated in a fixed order), so that the numbers do not depend on the platform.
//!
//! - [`SplitMix64`]: Steele, Lea and Flood, "Fast splittable pseudorandom number generators",
//!   OOPSLA 2014; the constants are those of Vigna's public-domain reference `splitmix64.c`.
//! - [`Sampler::standard_normal`]: the Box–Muller transform, Box and Muller, "A note on the
//!   generation of random normal deviates", Annals of Mathematical Statistics 29(2), 1958.

/// Golden-ratio increment of SplitMix64 (2^64 / φ, rounded to odd).
const GOLDEN_GAMMA: u64 = 0x9E37_79B9_7F4A_7C15;

/// The SplitMix64 output function: a bijective mix of one 64-bit word.
const fn mix64(mut z: u64) -> u64 {
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// SplitMix64 pseudo-random generator (see the [module docs](self)): a 64-bit counter stepped
/// by the golden-ratio increment and passed through a bijective mixer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct SplitMix64 {
    state: u64,
}

impl SplitMix64 {
    /// A generator whose first output is `mix64(seed + GOLDEN_GAMMA)`, as in the reference code.
    pub const fn new(seed: u64) -> SplitMix64 {
        SplitMix64 { state: seed }
    }

    /// A generator for one named sub-stream of `seed`. Each table of the demo draws from its own
    /// stream, so changing how many rows one table has leaves the others unchanged.
    pub const fn stream(seed: u64, stream: u64) -> SplitMix64 {
        SplitMix64::new(mix64(seed ^ mix64(stream.wrapping_add(GOLDEN_GAMMA))))
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(GOLDEN_GAMMA);
        mix64(self.state)
    }

    /// A uniform number in `[0, 1)` with 53 random bits: the top 53 bits of [`next_u64`]
    /// scaled by 2^-53, which is exact in `f64`.
    ///
    /// [`next_u64`]: SplitMix64::next_u64
    pub fn next_f64(&mut self) -> f64 {
        const SCALE: f64 = 1.0 / ((1u64 << 53) as f64);
        (self.next_u64() >> 11) as f64 * SCALE
    }
}

/// Draws uniform and normal variates from a [`SplitMix64`] stream.
#[derive(Clone, Debug)]
pub struct Sampler {
    rng: SplitMix64,
    spare: Option<f64>,
}

impl Sampler {
    /// A sampler over sub-stream `stream` of `seed` (see [`SplitMix64::stream`]).
    pub const fn new(seed: u64, stream: u64) -> Sampler {
        Sampler {
            rng: SplitMix64::stream(seed, stream),
            spare: None,
        }
    }

    /// A uniform number in `[0, 1)`.
    pub fn unit(&mut self) -> f64 {
        self.rng.next_f64()
    }

    /// A uniform number in `[lo, hi)`.
    pub fn uniform(&mut self, lo: f64, hi: f64) -> f64 {
        lo + (hi - lo) * self.unit()
    }

    /// A uniform integer in `0..n`. `n` must be non-zero; the tiny modulo bias (below 2^-40 for
    /// the small `n` used here) is irrelevant for demo data.
    pub fn below(&mut self, n: u64) -> u64 {
        assert!(n > 0, "below(0) has no value to return");
        self.rng.next_u64() % n
    }

    /// A standard normal variate by the Box–Muller transform. Each pair of uniforms gives two
    /// normals; the second is kept for the next call.
    pub fn standard_normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        // 1 - u lies in (0, 1], so the logarithm is finite.
        let u1 = 1.0 - self.unit();
        let u2 = self.unit();
        let radius = (-2.0 * ln(u1)).sqrt();
        let (sin, cos) = sin_cos_turns(u2);
        self.spare = Some(radius * sin);
        radius * cos
    }

    /// A normal variate with the given mean and standard deviation.
    pub fn normal(&mut self, mean: f64, sd: f64) -> f64 {
        mean + sd * self.standard_normal()
    }
}

/// ln 2 split in two: the high part has 21 trailing zero bits so that `k * LN2_HI` is exact
/// for every exponent `k` of an `f64`; the low part carries the rest. The bit patterns are
/// fdlibm's `ln2_hi` and `ln2_lo` from `e_log.c`, written down from memory; the test
/// `ln2_split_sums_to_ln2` checks them and `portable_ln_matches_std` checks the logarithm.
const LN2_HI: f64 = f64::from_bits(0x3FE6_2E42_FEE0_0000);
const LN2_LO: f64 = f64::from_bits(0x3DEA_39EF_3579_3C76);

/// Natural logarithm computed with `+ - * /` only, so every platform gets the same bits.
///
/// Returns NaN for negative or NaN input, negative infinity for zero and positive infinity for
/// positive infinity, like `f64::ln`. Accurate to a few units in the last place.
pub fn ln(x: f64) -> f64 {
    if x.is_nan() || x < 0.0 {
        return f64::NAN;
    }
    if x == 0.0 {
        return f64::NEG_INFINITY;
    }
    if x.is_infinite() {
        return f64::INFINITY;
    }
    // Bring subnormals into the normal range first (2^54 is exact).
    let (x, mut exp) = if x < f64::MIN_POSITIVE {
        (x * 18_014_398_509_481_984.0, -54i64)
    } else {
        (x, 0i64)
    };
    let bits = x.to_bits();
    exp += ((bits >> 52) & 0x7ff) as i64 - 1023;
    // Mantissa in [1, 2), then folded into [sqrt(1/2), sqrt(2)).
    let mut m = f64::from_bits((bits & 0x000F_FFFF_FFFF_FFFF) | 0x3FF0_0000_0000_0000);
    if m > std::f64::consts::SQRT_2 {
        m *= 0.5;
        exp += 1;
    }
    // ln m = 2 atanh(s) = 2 (s + s^3/3 + s^5/5 + ...), |s| <= 0.1716, so s^2 <= 0.0295 and
    // fourteen terms leave a truncation error far below one ulp.
    let s = (m - 1.0) / (m + 1.0);
    let s2 = s * s;
    let mut poly = 0.0;
    let mut k = 27.0;
    while k > 1.0 {
        poly = (poly + 1.0 / k) * s2;
        k -= 2.0;
    }
    let ln_m = 2.0 * s + 2.0 * s * poly;
    let e = exp as f64;
    e * LN2_HI + (e * LN2_LO + ln_m)
}

/// Sine and cosine of an angle given in turns (one turn = 2π radians), computed with
/// `+ - * /` only, so every platform gets the same bits.
///
/// Working in turns makes the range reduction exact: the integer part of the turn count is
/// dropped and the rest is split into a quarter-turn count and a remainder of at most 1/8 turn,
/// both by exact subtractions. The remainder is converted to radians (one rounding) and the
/// Taylor series of sine and cosine, truncated after the x^21 and x^20 terms, are summed
/// innermost first; on |x| <= π/4 the first dropped term is below 1e-22. Returns NaN for
/// non-finite input.
pub fn sin_cos_turns(turns: f64) -> (f64, f64) {
    if !turns.is_finite() {
        return (f64::NAN, f64::NAN);
    }
    let t = turns - turns.round();
    let quarter = (t * 4.0).round();
    let r = t - quarter * 0.25;
    let x = r * std::f64::consts::TAU;
    let x2 = x * x;
    // sin x = x (1 - x^2/(2*3) (1 - x^2/(4*5) (1 - ...))), cos likewise with (1*2), (3*4), ...
    let mut sin_acc = 1.0;
    let mut cos_acc = 1.0;
    let mut n = 20.0;
    while n >= 2.0 {
        sin_acc = 1.0 - x2 / (n * (n + 1.0)) * sin_acc;
        cos_acc = 1.0 - x2 / ((n - 1.0) * n) * cos_acc;
        n -= 2.0;
    }
    let s = x * sin_acc;
    let c = cos_acc;
    // quarter is in -2..=2; rotate by that many quarter turns.
    match quarter as i64 {
        0 => (s, c),
        1 => (c, -s),
        -1 => (-c, s),
        _ => (-s, -c),
    }
}

/// Sine of an angle in turns; see [`sin_cos_turns`].
pub fn sin_turns(turns: f64) -> f64 {
    sin_cos_turns(turns).0
}

/// Cosine of an angle in turns; see [`sin_cos_turns`].
pub fn cos_turns(turns: f64) -> f64 {
    sin_cos_turns(turns).1
}

#[cfg(test)]
mod tests {
    use super::*;

    /// First five outputs of SplitMix64 seeded with 1234567. Reference values from memory, as
    /// listed by the Rosetta Code task "Pseudo-random numbers/Splitmix64"; they also agree with
    /// a separate implementation of Vigna's reference `splitmix64.c` run while writing this test.
    #[test]
    fn splitmix64_matches_published_sequence() {
        let mut g = SplitMix64::new(1_234_567);
        let got: Vec<u64> = (0..5).map(|_| g.next_u64()).collect();
        assert_eq!(
            got,
            [
                6_457_827_717_110_365_317,
                3_203_168_211_198_807_973,
                9_817_491_932_198_370_423,
                4_593_380_528_125_082_431,
                16_408_922_859_458_223_821,
            ]
        );
    }

    #[test]
    fn streams_differ_and_repeat() {
        let a: Vec<u64> = {
            let mut g = SplitMix64::stream(7, 1);
            (0..4).map(|_| g.next_u64()).collect()
        };
        let b: Vec<u64> = {
            let mut g = SplitMix64::stream(7, 2);
            (0..4).map(|_| g.next_u64()).collect()
        };
        let a2: Vec<u64> = {
            let mut g = SplitMix64::stream(7, 1);
            (0..4).map(|_| g.next_u64()).collect()
        };
        assert_eq!(a, a2);
        assert_ne!(a, b);
    }

    #[test]
    fn unit_uniforms_stay_in_range_and_average_one_half() {
        let mut s = Sampler::new(11, 0);
        let n = 20_000;
        let mut sum = 0.0;
        for _ in 0..n {
            let u = s.unit();
            assert!((0.0..1.0).contains(&u));
            sum += u;
        }
        // Standard error of the mean of U(0,1) is sqrt(1/12/n) = 0.002; allow 5 of them.
        assert!((sum / n as f64 - 0.5).abs() < 0.01);
    }

    /// Box–Muller output should have mean 0, variance 1 and about 68.27 % of its mass within
    /// one standard deviation (the normal distribution's 1-sigma fraction, erf(1/sqrt 2)).
    #[test]
    fn box_muller_moments() {
        let mut s = Sampler::new(3, 9);
        let n = 40_000;
        let (mut sum, mut sum2, mut within) = (0.0, 0.0, 0usize);
        for _ in 0..n {
            let z = s.standard_normal();
            sum += z;
            sum2 += z * z;
            if z.abs() < 1.0 {
                within += 1;
            }
        }
        let mean = sum / n as f64;
        let var = sum2 / n as f64 - mean * mean;
        assert!(mean.abs() < 0.02, "mean {mean}");
        assert!((var - 1.0).abs() < 0.03, "variance {var}");
        let frac = within as f64 / n as f64;
        assert!((frac - 0.682_689).abs() < 0.01, "within 1 sd: {frac}");
    }

    /// The two halves of ln 2 add up to `std::f64::consts::LN_2`, and the high half's low 21
    /// bits are zero.
    #[test]
    fn ln2_split_sums_to_ln2() {
        assert_eq!(LN2_HI + LN2_LO, std::f64::consts::LN_2);
        assert!(LN2_LO.abs() < 1e-9);
        assert_eq!(LN2_HI.to_bits() & ((1 << 21) - 1), 0);
    }

    /// The portable logarithm against the platform's `f64::ln` (an independent implementation).
    #[test]
    fn portable_ln_matches_std() {
        let mut s = Sampler::new(5, 5);
        let mut xs = vec![
            1.0,
            2.0,
            0.5,
            10.0,
            1e-300,
            5e-324,
            1e300,
            f64::MIN_POSITIVE,
        ];
        for _ in 0..5_000 {
            xs.push(1.0 - s.unit());
            xs.push(s.uniform(0.0, 1e6));
        }
        for &x in &xs {
            if x == 0.0 {
                continue;
            }
            let want = x.ln();
            let got = ln(x);
            let tol = 4.0 * f64::EPSILON * want.abs().max(1.0);
            assert!((got - want).abs() <= tol, "ln({x}): {got} vs {want}");
        }
        assert_eq!(ln(1.0), 0.0);
        assert!(ln(-1.0).is_nan());
        assert_eq!(ln(0.0), f64::NEG_INFINITY);
    }

    /// The portable sine and cosine against the platform's `f64::sin_cos`.
    #[test]
    fn portable_sin_cos_match_std() {
        let mut s = Sampler::new(6, 6);
        let mut ts = vec![0.0, 0.125, 0.25, 0.5, 0.75, -0.25, 1.0, 3.3, -7.9];
        for _ in 0..5_000 {
            ts.push(s.uniform(-40.0, 40.0));
        }
        for &t in &ts {
            let (ws, wc) = (t * std::f64::consts::TAU).sin_cos();
            let (gs, gc) = sin_cos_turns(t);
            // The std reference itself loses accuracy when converting big turn counts to
            // radians (|t| <= 40 turns gives about 1e-14 absolute), hence the tolerance.
            assert!((gs - ws).abs() < 1e-13, "sin({t} turns): {gs} vs {ws}");
            assert!((gc - wc).abs() < 1e-13, "cos({t} turns): {gc} vs {wc}");
        }
        assert_eq!(sin_cos_turns(0.25), (1.0, 0.0));
        assert_eq!(cos_turns(0.5), -1.0);
        assert_eq!(sin_turns(0.0), 0.0);
        assert!(sin_turns(f64::INFINITY).is_nan());
    }
}
