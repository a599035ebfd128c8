//! The input as a blob body, framed with a correct magic, version and CRC, so the fuzzer
//! explores the postcard structure and the validation behind the CRC.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let framed = hone_fuzz::frame(data);
    hone_fuzz::check_blob(&framed);
});
