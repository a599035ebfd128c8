//! Shared set-up of the failure-path firmware: the micro:bit platform, as in `boards/microbit`.
#![no_std]

use hone_fw::cortex_m::SysTickPlatform;
use hone_fw::{exit_code, record, semihosting_exit, TickUnit};

/// The micro:bit platform: SysTick at 16 MHz under QEMU, 62.5 instructions per tick.
pub fn platform() -> SysTickPlatform {
    let Some(core) = cortex_m::Peripherals::take() else {
        record::error("core-peripherals-taken");
        semihosting_exit(exit_code::SESSION_FAILED);
    };
    SysTickPlatform::new(
        core.SYST,
        "microbit",
        TickUnit::Instructions { num: 125, den: 2 },
    )
}
