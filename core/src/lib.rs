#![doc = include_str!("../README.md")]
#![cfg_attr(docsrs, feature(doc_cfg))]
#![cfg_attr(not(any(test, feature = "std")), no_std)]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

pub mod approx;
pub mod blob;
pub mod error;
pub mod features;
pub mod float;
pub mod guard;
pub mod kernel;
pub mod layer;
pub mod model;
pub mod num;
pub mod plan;
pub mod reading;
pub mod session;
pub mod store;
pub mod train;

pub use error::Error;
