//! Conversions at the API edge between a run-time [`QValue`] and the `fixed` crate's
//! compile-time types (`FixedI8<U7>` and so on), for firmware that already speaks `fixed`.

use fixed::types::extra::{LeEqU16, LeEqU32, LeEqU8};
use fixed::{FixedI16, FixedI32, FixedI8};

use super::format::{QFormat, Word, MAX_FRAC};
use crate::error::Error;

/// One raw value together with its format.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct QValue {
    /// The format of `raw`.
    pub format: QFormat,
    /// The raw integer, within the word's range.
    pub raw: i32,
}

impl QValue {
    /// The real value.
    pub fn to_f64(self) -> f64 {
        self.format.to_f64(self.raw)
    }
}

macro_rules! fixed_edge {
    ($Fixed:ident, $Le:ident, $inner:ty, $word:expr, $to:ident) => {
        impl<Frac: $Le> TryFrom<$Fixed<Frac>> for QValue {
            type Error = Error;
            /// Keeps the bits; fails only when the type has more than
            /// [`MAX_FRAC`](super::format::MAX_FRAC) fraction bits.
            fn try_from(v: $Fixed<Frac>) -> Result<QValue, Error> {
                let frac = Frac::U32;
                if frac > MAX_FRAC as u32 {
                    return Err(Error::InvalidFormat);
                }
                Ok(QValue {
                    format: QFormat {
                        word: $word,
                        frac: frac as u8,
                    },
                    raw: v.to_bits() as i32,
                })
            }
        }

        impl QValue {
            /// The same bits as a `fixed` value.
            ///
            /// # Errors
            /// [`Error::FormatMismatch`] unless word and fraction bits match the target type
            /// exactly (no silent rescaling at the edge); [`Error::InvalidFormat`] if the raw
            /// value lies outside the word's range.
            pub fn $to<Frac: $Le>(self) -> Result<$Fixed<Frac>, Error> {
                if self.format.word != $word || self.format.frac as u32 != Frac::U32 {
                    return Err(Error::FormatMismatch);
                }
                if self.raw < $word.min_raw() || self.raw > $word.max_raw() {
                    return Err(Error::InvalidFormat);
                }
                Ok($Fixed::<Frac>::from_bits(self.raw as $inner))
            }
        }
    };
}

fixed_edge!(FixedI8, LeEqU8, i8, Word::I8, to_fixed_i8);
fixed_edge!(FixedI16, LeEqU16, i16, Word::I16, to_fixed_i16);
fixed_edge!(FixedI32, LeEqU32, i32, Word::I32, to_fixed_i32);

#[cfg(test)]
mod tests {
    use super::*;
    use fixed::types::extra::{U12, U32, U7};

    #[test]
    fn round_trips_through_fixed() {
        let f = FixedI16::<U12>::from_num(1.5);
        let q = QValue::try_from(f).unwrap();
        assert_eq!(q.format, QFormat::new(Word::I16, 12).unwrap());
        assert_eq!(q.to_f64(), 1.5);
        assert_eq!(q.to_fixed_i16::<U12>().unwrap(), f);
        assert_eq!(q.to_fixed_i8::<U7>(), Err(Error::FormatMismatch));
        let wide = QValue {
            format: QFormat::new(Word::I8, 7).unwrap(),
            raw: 300,
        };
        assert_eq!(wide.to_fixed_i8::<U7>(), Err(Error::InvalidFormat));
        let g = FixedI8::<U7>::from_bits(-128);
        assert_eq!(QValue::try_from(g).unwrap().to_f64(), -1.0);
        assert_eq!(
            QValue::try_from(FixedI32::<U32>::ZERO),
            Err(Error::InvalidFormat)
        );
    }
}
