//! A simulated NOR flash image filled from the input, opened as the checkpoint store: the
//! newest checkpoint is read fully and checked as a blob, then a new commit must land.
//! The first byte picks the geometry, the region and whether slot CRCs are repaired.
#![no_main]

use hone_fuzz::{exercise_store, GEOMETRIES};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Some((&ctl, image)) = data.split_first() else {
        return;
    };
    match usize::from(ctl) % GEOMETRIES.len() {
        0 => exercise_store::<8192, 1024, 4, 1>(ctl, image),
        1 => exercise_store::<4096, 256, 16, 8>(ctl, image),
        _ => exercise_store::<2048, 128, 1, 1>(ctl, image),
    }
});
