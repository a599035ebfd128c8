//! Which optional training parts this build of the core includes.
//!
//! Each part has a cargo feature of the same name, all on by default (together
//! `all-training`). A firmware that turns one off does not link its code, and a description
//! that needs it is refused: [`crate::Error::NotBuilt`] for the training setup (rounding modes,
//! momentum, weight decay and clipping, dynamic fixed point), and
//! [`crate::error::LayerFault::NotBuilt`] for a layer with a master copy. The checks are
//! `const fn`, so a `const` plan refuses an unbuilt part at compile time.
//!
//! The engine's dispatch points read the flags below as constants: with a feature off, the
//! arm that serves the part is removed by the compiler, and a call that would have taken it
//! (possible only for an unchecked description) takes the always-built path instead
//! (nearest-even rounding, no momentum, no master copy, no decay or clip, fixed formats).

use core::fmt;

/// An optional training part, named after its cargo feature.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Feature {
    /// Stochastic rounding (`stochastic`).
    Stochastic,
    /// Rounding toward zero (`toward-zero`).
    TowardZero,
    /// Momentum buffers (`momentum`).
    Momentum,
    /// Master copies of the weights in a wider format (`master-weights`).
    MasterWeights,
    /// Weight decay and gradient clipping (`decay-clip`).
    DecayClip,
    /// Dynamic fixed point: formats adjusted from saturation rates (`dynamic`).
    Dynamic,
}

impl Feature {
    /// Every optional training part.
    pub const ALL: [Feature; 6] = [
        Feature::Stochastic,
        Feature::TowardZero,
        Feature::Momentum,
        Feature::MasterWeights,
        Feature::DecayClip,
        Feature::Dynamic,
    ];

    /// The cargo feature's name.
    pub const fn name(self) -> &'static str {
        match self {
            Feature::Stochastic => "stochastic",
            Feature::TowardZero => "toward-zero",
            Feature::Momentum => "momentum",
            Feature::MasterWeights => "master-weights",
            Feature::DecayClip => "decay-clip",
            Feature::Dynamic => "dynamic",
        }
    }

    /// Whether this build of the core includes the part.
    pub const fn is_built(self) -> bool {
        match self {
            Feature::Stochastic => STOCHASTIC,
            Feature::TowardZero => TOWARD_ZERO,
            Feature::Momentum => MOMENTUM,
            Feature::MasterWeights => MASTER_WEIGHTS,
            Feature::DecayClip => DECAY_CLIP,
            Feature::Dynamic => DYNAMIC,
        }
    }
}

impl fmt::Display for Feature {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Stochastic rounding is built.
pub(crate) const STOCHASTIC: bool = cfg!(feature = "stochastic");
/// Rounding toward zero is built.
pub(crate) const TOWARD_ZERO: bool = cfg!(feature = "toward-zero");
/// Momentum is built.
pub(crate) const MOMENTUM: bool = cfg!(feature = "momentum");
/// Master weights are built.
pub(crate) const MASTER_WEIGHTS: bool = cfg!(feature = "master-weights");
/// Weight decay and clipping are built.
pub(crate) const DECAY_CLIP: bool = cfg!(feature = "decay-clip");
/// Dynamic fixed point is built.
pub(crate) const DYNAMIC: bool = cfg!(feature = "dynamic");
