//! hone firmware for the TI Stellaris LM3S6965 evaluation board (Cortex-M3) under QEMU: the shared session runner with the Phase-1 workload and the calibration session.
#![no_std]
#![no_main]

use defmt_semihosting as _;
use hone_fw::cortex_m::SysTickPlatform;
use hone_fw::{exit_code, semihosting_exit, TickUnit};

hone_fw::include_session!();

/// Instructions per SysTick tick under `-icount shift=0`: QEMU clocks SysTick at 12.5 MHz, 80 ns per tick, one instruction per ns.
/// The runner checks it against a spin loop at every boot.
const UNIT: TickUnit = TickUnit::Instructions { num: 80, den: 1 };

#[cortex_m_rt::entry]
fn main() -> ! {
    let Some(core) = cortex_m::Peripherals::take() else {
        hone_fw::record::error("core-peripherals-taken");
        semihosting_exit(exit_code::SESSION_FAILED);
    };
    let platform = SysTickPlatform::new(core.SYST, "lm3s6965evb", UNIT);
    hone_fw::run(platform, session::run)
}
