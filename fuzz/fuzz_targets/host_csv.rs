//! The workstation tool's data reader (CSV) on arbitrary bytes; the first byte picks the column selection.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    hone_fuzz::host::check_csv(data);
});
