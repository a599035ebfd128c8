//! hone firmware for QEMU's SiFive E machine (RV32IMAC): the shared session runner with the
//! Phase-1 workload and the calibration session. The tick counter is `minstret`, one tick per instruction.
#![no_std]
#![no_main]

use defmt_semihosting as _;
use hone_fw::riscv::InstretPlatform;

hone_fw::include_session!();

#[riscv_rt::entry]
fn main() -> ! {
    hone_fw::run(InstretPlatform::new("sifive-e"), session::run)
}
