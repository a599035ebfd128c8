//! # hone-core
//!
//! A `no_std`, allocation-free engine that trains small neural networks in fixed-point
//! integer arithmetic, so a microcontroller next to a sensor can calibrate or fine-tune its
//! own model. The same code runs on the workstation, so the host predicts the device's
//! result bit for bit.
//!
//! The crate reads from the bottom up:
//!
//! 1. [`num`]: word sizes and Q-formats chosen at run time, named rounding (nearest-even,
//!    toward zero, stochastic), the seeded generator, raw storage views, the edge to `fixed`.
//! 2. [`kernel`]: dot products with wide accumulators that saturate and count instead of
//!    wrapping.
//! 3. [`approx`]: lookup tables for sigmoid, tanh, exp and ln, one file each with its error.
//! 4. [`layer`]: forward and backward of dense, 1-D convolution, activations, pooling, and the
//!    losses.
//! 5. [`model`]: the model description shared by device (postcard) and host (TOML).
//! 6. [`plan`]: the `const fn` memory plan that sizes every buffer.
//! 7. [`train`]: the fixed-point trainer: SGD with mini-batches, momentum, weight decay,
//!    clipping, master weights, dynamic fixed point, statistics.
//! 8. [`float`]: the float twin of the same procedure in `f32` (device) and `f64` (host).
//! 9. [`blob`], [`store`], [`guard`]: the versioned blob format, the power-fail-safe
//!    checkpoint store, and the rollback guard.
//!
//! # Rules the crate keeps
//! - It never allocates and never does I/O; the caller owns every buffer.
//! - It never panics on input: every fallible operation returns [`Error`].
//! - Every rounding and every saturation is named, and saturations are counted.
//!
//! # Features
//! - `std`: the `f64` float twin's transcendental functions and `std::error::Error`.
//! - `defmt`: `defmt::Format` on errors and small public types.
//! - `all-layers` (default) = `conv1d`, `pool1d`, `table-activations` (sigmoid and tanh),
//!   `cross-entropy` (softmax cross-entropy). A firmware that uses fewer turns default features
//!   off and names the ones it needs: the others are not linked, and a description that uses
//!   one is rejected with [`error::LayerFault::NotBuilt`] (at compile time for a `const` plan).
//!   Dense, the shift and clamp activations, squared error and the trainer are always built.
#![cfg_attr(not(any(test, feature = "std")), no_std)]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

pub mod approx;
pub mod blob;
pub mod error;
pub mod float;
pub mod guard;
pub mod kernel;
pub mod layer;
pub mod model;
pub mod num;
pub mod plan;
pub mod store;
pub mod train;

pub use error::Error;
