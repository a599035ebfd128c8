//! The workstation tool's float-model reader (JSON) on arbitrary text; an accepted model round-trips.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    hone_fuzz::host::check_float_model(data);
});
