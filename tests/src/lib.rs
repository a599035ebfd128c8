//! Shared helpers for the cross-checks in `tests/tests/`: owned tensors, quick model
//! builders, and a small interval arithmetic used to derive fixed-point tolerances from the
//! formats instead of picking them by hand.

use hone_core::model::{LayerDesc, LayerKind, ParamFormats, TrainMode};
use hone_core::num::{QFormat, Raw, Word};

/// Owned raw values of one word size.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Owned {
    /// `i8` values.
    I8(Vec<i8>),
    /// `i16` values.
    I16(Vec<i16>),
    /// `i32` values.
    I32(Vec<i32>),
}

impl Owned {
    /// Quantizes `values` into `fmt` (nearest, ties to even, saturating). Panics on NaN: test
    /// data are finite by construction.
    pub fn quantize(values: &[f64], fmt: QFormat) -> Owned {
        let raw: Vec<i32> = values.iter().map(|&v| fmt.from_f64_saturating(v).expect("finite test data").0).collect();
        match fmt.word {
            Word::I8 => Owned::I8(raw.iter().map(|&v| v as i8).collect()),
            Word::I16 => Owned::I16(raw.iter().map(|&v| v as i16).collect()),
            Word::I32 => Owned::I32(raw),
        }
    }

    /// A borrowed view.
    pub fn raw(&self) -> Raw<'_> {
        match self {
            Owned::I8(v) => Raw::I8(v),
            Owned::I16(v) => Raw::I16(v),
            Owned::I32(v) => Raw::I32(v),
        }
    }

    /// Real values of a borrowed tensor in `fmt`.
    pub fn real(raw: Raw<'_>, fmt: QFormat) -> Vec<f64> {
        (0..raw.len()).map(|i| fmt.to_f64(raw.at(i))).collect()
    }
}

/// A Q-format by word bits and fraction bits.
pub fn q(bits: u32, frac: u8) -> QFormat {
    QFormat::new(Word::from_bits(bits).expect("8, 16 or 32 bits"), frac).expect("valid test format")
}

/// A dense layer with the same value format for weights and bias.
pub fn dense(units: u16, mode: TrainMode, value: QFormat, accum: QFormat, out: QFormat, grad: QFormat) -> LayerDesc {
    let p = ParamFormats { value, master: None, accum };
    LayerDesc { kind: LayerKind::Dense { units }, mode, weight: p, bias: p, out, grad }
}

/// A closed interval of reals, for worst-case error propagation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Interval {
    /// Lower end.
    pub lo: f64,
    /// Upper end.
    pub hi: f64,
}

impl Interval {
    /// `[x − e, x + e]`.
    pub fn around(x: f64, e: f64) -> Interval {
        Interval { lo: x - e, hi: x + e }
    }

    /// A single point.
    pub fn point(x: f64) -> Interval {
        Interval { lo: x, hi: x }
    }

    /// The interval widened by `e` on both sides (one rounding of at most `e`).
    pub fn widen(self, e: f64) -> Interval {
        Interval { lo: self.lo - e, hi: self.hi + e }
    }

    /// Rounding into `fmt` to nearest: widened by half a step.
    pub fn round(self, fmt: QFormat) -> Interval {
        self.widen(fmt.step() / 2.0)
    }

    /// Sum.
    pub fn add(self, o: Interval) -> Interval {
        Interval { lo: self.lo + o.lo, hi: self.hi + o.hi }
    }

    /// Difference.
    pub fn sub(self, o: Interval) -> Interval {
        Interval { lo: self.lo - o.hi, hi: self.hi - o.lo }
    }

    /// Product.
    pub fn mul(self, o: Interval) -> Interval {
        let c = [self.lo * o.lo, self.lo * o.hi, self.hi * o.lo, self.hi * o.hi];
        Interval { lo: c.iter().cloned().fold(f64::INFINITY, f64::min), hi: c.iter().cloned().fold(f64::NEG_INFINITY, f64::max) }
    }

    /// Image under a non-decreasing function.
    pub fn monotone(self, f: impl Fn(f64) -> f64) -> Interval {
        Interval { lo: f(self.lo), hi: f(self.hi) }
    }

    /// Whether `x` lies inside.
    pub fn contains(self, x: f64) -> bool {
        self.lo <= x && x <= self.hi
    }

    /// Half the width: the tolerance around the midpoint.
    pub fn radius(self) -> f64 {
        (self.hi - self.lo) / 2.0
    }
}

/// Logistic sigmoid in f64.
pub fn sigmoid(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}
