//! The boards' calibration sessions: what each board trains, simulated on the host and compared
//! with the device bit for bit.
//!
//! Building firmware, running QEMU, decoding defmt and measuring ELF images is `hone_qemu`, whose
//! items are re-exported here so a caller finds the whole device side in one place. The session
//! code stays in this library because it is made of the library's own parts (the config, the
//! chip table, the memory plan, the export and the simulation), which `hone_qemu` sits below.
//!
//! [`session`] generates what a board's calibration session trains and simulates it on the
//! host; [`throughput`] adds a larger model to it for the instruction figures; [`verify`] runs
//! it on the board and compares the result bit for bit; [`lean`] does the same for the lean
//! build.

pub mod lean;
pub mod session;
pub mod throughput;
pub mod verify;

pub use hone_qemu::*;
