//! The input as a blob body (framed with a correct CRC, or taken whole if it starts with the
//! blob magic); a valid blob whose model fits a small budget restores a trainer, which runs a
//! guarded calibration session and writes a checkpoint that must restore bit-exact.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    hone_fuzz::trainer_target(data);
});
