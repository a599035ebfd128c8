//! Board-agnostic firmware platform for hone.
//!
//! Every board crate under `boards/` is a thin `main` that builds a [`Platform`] for its chip and
//! hands it, together with a *session* closure, to [`run`]. The runner then
//!
//! 1. logs a boot record naming the board and the unit of its counter,
//! 2. checks the counter against a spin loop of known instruction count ([`measure::calibrate`]),
//! 3. calls the session with a [`Ctx`] through which the session measures spans of work and
//!    sends byte payloads to the host,
//! 4. logs static memory figures and the stack high-water mark ([`memory`]),
//! 5. exits with a status code the host sees ([`exit_code`]).
//!
//! Two sessions ship: the integer dot-product workload in [`workload`] (Phase 1, the floor of
//! instructions per multiply-accumulate), and the calibration session in [`train`], which
//! fine-tunes the model hone exported with the core's trainer, guards the result and sends the
//! weights to the host. Both are closures of the type
//! `FnOnce(&mut Ctx<P>) -> Result<(), SessionError>`; [`include_session!`] builds a board's,
//! which ends with the throughput phase of [`throughput`]: a larger model trained on values
//! the board draws itself, for the instruction figures per multiply-accumulate.
//!
//! All output goes through `defmt` in fixed record shapes documented in [`record`]; the host
//! decoder in `host-cli/qemu` parses them by field name.
#![no_std]
#![deny(missing_docs)]

#[cfg(all(feature = "cortex-m", feature = "riscv"))]
compile_error!("enable exactly one of the features `cortex-m` and `riscv`");

pub mod blob;
pub mod measure;
// Paints and scans the stack in assembly.
#[allow(unsafe_code)]
pub mod memory;
pub mod platform;
pub mod record;
pub mod session;
pub mod throughput;
pub mod train;
pub mod workload;

// Counter and stack-pointer assembly, and the fault handlers.
#[cfg(feature = "cortex-m")]
#[allow(unsafe_code)]
pub mod cortex_m;
// Counter and stack-pointer assembly, the stack painting before `main`, the trap handler.
#[cfg(feature = "riscv")]
#[allow(unsafe_code)]
pub mod riscv;

mod panic;

pub use hone_core;
pub use platform::{Platform, TickUnit};
pub use session::{run, Ctx, SessionError};

/// Exit codes the firmware reports through semihosting.
pub mod exit_code {
    /// The session finished and every self-check passed.
    pub const SUCCESS: i32 = 0;
    /// The session returned an error.
    pub const SESSION_FAILED: i32 = 1;
    /// The counter disagreed with the board's documented ticks-to-instructions ratio.
    pub const CALIBRATION_MISMATCH: i32 = 2;
    /// The CPU took a fault exception (HardFault on Cortex-M, a trap on RISC-V).
    pub const FAULT: i32 = 3;
    /// The firmware panicked.
    pub const PANIC: i32 = 101;
}

/// Ends the program with `code` through the semihosting `SYS_EXIT_EXTENDED` call, which QEMU
/// passes on as its own exit status and which probe-based runners also honour.
pub fn semihosting_exit(code: i32) -> ! {
    semihosting::process::exit(code)
}
