//! The workstation tool's config reader (TOML) on arbitrary text.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    hone_fuzz::host::check_toml(data);
});
