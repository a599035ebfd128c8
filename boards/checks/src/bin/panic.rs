//! Panics inside the session: the run must end with a `panic` record and exit code 101.
#![no_std]
#![no_main]

use defmt_semihosting as _;

#[cortex_m_rt::entry]
fn main() -> ! {
    hone_fw::run(hone_checks::platform(), |_ctx| {
        // An index the optimiser cannot prove in range, so the bounds check stays.
        let table = [1u8, 2, 3];
        let i = core::hint::black_box(7usize);
        defmt::info!("value {=u8}", table[i]);
        Ok(())
    })
}
