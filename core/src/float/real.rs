//! The scalar types of the float twin: `f32` on the device, `f64` on the host.
//!
//! `f32` takes `exp` and `ln` from `micromath` (no FPU or `libm` needed), and builds sigmoid
//! and tanh from `exp`. The test `f32_error_bounds` measures them against the standard
//! library's `f64` functions: on the grids it sweeps, micromath's `exp` is off by at most
//! 2.39e-3 relative on [−20, 20], the sigmoid and tanh built from it by at most 1.05e-3
//! absolute, and `ln` by at most 6.2e-5 absolute on [1, 10^6]. The twin only takes `ln` of a
//! softmax denominator, which is at least 1; below 1 micromath's `ln` is far worse (0.12 off
//! at 0.023, measured), so it is not used there. The bounds below are what the test enforces.
//! `f64` uses the standard library (feature `std`).

/// Bound on the relative error of the `f32` twin's `exp` over [−20, 20] (measured 2.39e-3).
pub const F32_EXP_REL_ERROR: f64 = 2.5e-3;
/// Bound on the absolute error of the `f32` twin's sigmoid and tanh over [−20, 20]
/// (measured 1.05e-3).
pub const F32_SQUASH_ABS_ERROR: f64 = 1.2e-3;
/// Bound on the absolute error of the `f32` twin's `ln` over [1, 10^6] (measured 6.15e-5).
pub const F32_LN_ABS_ERROR: f64 = 1e-4;

/// A float the twin can train with.
pub trait Real:
    Copy
    + PartialOrd
    + Default
    + core::fmt::Debug
    + core::ops::Add<Output = Self>
    + core::ops::Sub<Output = Self>
    + core::ops::Mul<Output = Self>
    + core::ops::Div<Output = Self>
    + core::ops::Neg<Output = Self>
    + core::ops::AddAssign
{
    /// 0.
    const ZERO: Self;
    /// 1.
    const ONE: Self;
    /// Bytes per value (for the float plan).
    const BYTES: u32;
    /// From `f64`, rounded to nearest.
    fn from_f64(x: f64) -> Self;
    /// To `f64`, exact.
    fn to_f64(self) -> f64;
    /// e^x.
    fn exp(self) -> Self;
    /// Natural logarithm.
    fn ln(self) -> Self;
    /// 1 / (1 + e^−x).
    fn sigmoid(self) -> Self {
        Self::ONE / (Self::ONE + (-self).exp())
    }
    /// Hyperbolic tangent.
    fn tanh(self) -> Self;
    /// Whether the value is finite.
    fn is_finite(self) -> bool;
}

impl Real for f32 {
    const ZERO: f32 = 0.0;
    const ONE: f32 = 1.0;
    const BYTES: u32 = 4;
    fn from_f64(x: f64) -> f32 {
        x as f32
    }
    fn to_f64(self) -> f64 {
        self as f64
    }
    fn exp(self) -> f32 {
        micromath::F32Ext::exp(self)
    }
    fn ln(self) -> f32 {
        micromath::F32Ext::ln(self)
    }
    fn tanh(self) -> f32 {
        // tanh x = 1 − 2 / (e^{2x} + 1), stable at both ends.
        let e = micromath::F32Ext::exp(2.0 * self.clamp(-20.0, 20.0));
        1.0 - 2.0 / (e + 1.0)
    }
    fn is_finite(self) -> bool {
        f32::is_finite(self)
    }
}

#[cfg(any(test, feature = "std"))]
#[cfg_attr(docsrs, doc(cfg(feature = "std")))]
impl Real for f64 {
    const ZERO: f64 = 0.0;
    const ONE: f64 = 1.0;
    const BYTES: u32 = 8;
    fn from_f64(x: f64) -> f64 {
        x
    }
    fn to_f64(self) -> f64 {
        self
    }
    fn exp(self) -> f64 {
        f64::exp(self)
    }
    fn ln(self) -> f64 {
        f64::ln(self)
    }
    fn tanh(self) -> f64 {
        f64::tanh(self)
    }
    fn is_finite(self) -> bool {
        f64::is_finite(self)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn f32_error_bounds() {
        // Reference: Rust's std f64 functions.
        let (mut e_exp, mut e_sq, mut e_ln) = (0f64, 0f64, 0f64);
        for i in -20_000..=20_000 {
            let x = i as f64 / 1000.0;
            let xf = x as f32;
            let rel = ((Real::exp(xf) as f64) - x.exp()).abs() / x.exp();
            e_exp = e_exp.max(rel);
            e_sq = e_sq.max(((Real::sigmoid(xf) as f64) - 1.0 / (1.0 + (-x).exp())).abs());
            e_sq = e_sq.max(((Real::tanh(xf) as f64) - x.tanh()).abs());
        }
        for i in 0..=600 {
            let x = 10f64.powf(i as f64 / 100.0);
            e_ln = e_ln.max(((Real::ln(x as f32) as f64) - x.ln()).abs());
        }
        eprintln!("f32 twin: exp rel {e_exp:.3e}, sigmoid/tanh abs {e_sq:.3e}, ln abs {e_ln:.3e}");
        assert!(e_exp <= F32_EXP_REL_ERROR, "exp {e_exp}");
        assert!(e_sq <= F32_SQUASH_ABS_ERROR, "squash {e_sq}");
        assert!(e_ln <= F32_LN_ABS_ERROR, "ln {e_ln}");
    }
}
