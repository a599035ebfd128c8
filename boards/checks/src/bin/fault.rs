//! Reads past the end of RAM, which the micro:bit machine answers with a HardFault: the run must
//! end with a `fault` record and exit code 3.
#![no_std]
#![no_main]

use defmt_semihosting as _;

/// First address past the micro:bit's 16 KiB of RAM.
const PAST_RAM: usize = 0x2000_4000;

// The one `unsafe` of this firmware: the read that faults on purpose.
#[allow(unsafe_code)]
#[cortex_m_rt::entry]
fn main() -> ! {
    hone_fw::run(hone_checks::platform(), |_ctx| {
        let p = core::hint::black_box(PAST_RAM) as *const u32;
        // SAFETY: none; this read is meant to fault. It is volatile so it is not optimised away.
        let v = unsafe { core::ptr::read_volatile(p) };
        defmt::info!("read {=u32}", v);
        Ok(())
    })
}
