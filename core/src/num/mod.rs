//! Numbers: word sizes and Q-formats, named rounding, the seeded generator, raw storage views
//! and the edge to the `fixed` crate.

pub mod edge;
pub mod format;
pub mod raw;
pub mod rng;
pub mod round;

pub use edge::QValue;
pub use format::{QFormat, QScalar, Word, MAX_FRAC};
pub use raw::{Raw, RawMut, Sample};
pub use rng::Rng;
pub use round::{Rounding, RoundingPlan};
