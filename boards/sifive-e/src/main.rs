//! hone firmware for QEMU's SiFive E machine (RV32IMAC): the shared session runner with the
//! Phase-1 workload. The tick counter is `minstret`, one tick per instruction.
#![no_std]
#![no_main]

use defmt_semihosting as _;
use hone_fw::riscv::InstretPlatform;

#[riscv_rt::entry]
fn main() -> ! {
    hone_fw::run(InstretPlatform::new("sifive-e"), hone_fw::workload::phase1)
}
