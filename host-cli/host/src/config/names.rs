//! Names of rounding and train modes, as the config and the command line spell them.

use super::*;

/// A name that is not one of a table's names.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error("`{given}` is not a {what}; use {}", one_of(expected))]
pub struct UnknownName {
    /// What the name was meant to be (`rounding`, `train mode`).
    pub what: &'static str,
    /// The name given.
    pub given: String,
    /// The names there are.
    pub expected: &'static [&'static str],
}

/// `a, b or c`.
pub(super) fn one_of(names: &[&str]) -> String {
    match names {
        [] => String::new(),
        [one] => (*one).to_owned(),
        [init @ .., last] => format!("{} or {last}", init.join(", ")),
    }
}

/// Defines a name table: a newtype over a core enumeration whose `Display` and `FromStr` (and
/// serde's forms) write and read the one name of each variant. The config, the command line,
/// `hone sweep` and `hone inspect` all name these values through it.
macro_rules! name_table {
    ($(#[$doc:meta])* $name:ident($ty:ident), $what:literal, { $($variant:ident => $text:literal),+ $(,)? }) => {
        $(#[$doc])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
        pub struct $name(pub $ty);

        impl $name {
            /// Every value, in the order of [`Self::NAMES`].
            pub const ALL: &'static [$ty] = &[$($ty::$variant),+];
            /// Every name, in the order of [`Self::ALL`].
            pub const NAMES: &'static [&'static str] = &[$($text),+];

            /// The value's name.
            #[must_use]
            pub const fn as_str(self) -> &'static str {
                match self.0 {
                    $($ty::$variant => $text),+
                }
            }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str(self.as_str())
            }
        }

        impl std::str::FromStr for $name {
            type Err = UnknownName;

            fn from_str(s: &str) -> Result<Self, UnknownName> {
                Self::ALL
                    .iter()
                    .map(|&v| Self(v))
                    .find(|v| v.as_str() == s)
                    .ok_or_else(|| UnknownName {
                        what: $what,
                        given: s.to_owned(),
                        expected: Self::NAMES,
                    })
            }
        }

        impl<'de> Deserialize<'de> for $name {
            fn deserialize<D: Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
                let s = String::deserialize(d)?;
                s.parse()
                    .map_err(|_| de::Error::unknown_variant(&s, Self::NAMES))
            }
        }

        impl serde::Serialize for $name {
            fn serialize<S: serde::Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
                s.serialize_str(self.as_str())
            }
        }
    };
}

name_table! {
    /// A rounding mode by name: `nearest-even`, `toward-zero`, `stochastic`.
    RoundingName(Rounding), "rounding", {
        NearestEven => "nearest-even",
        TowardZero => "toward-zero",
        Stochastic => "stochastic",
    }
}

name_table! {
    /// A train mode by name: `frozen`, `bias-only`, `weights-only`, `full`.
    ModeName(TrainMode), "train mode", {
        Frozen => "frozen",
        BiasOnly => "bias-only",
        WeightsOnly => "weights-only",
        Full => "full",
    }
}
