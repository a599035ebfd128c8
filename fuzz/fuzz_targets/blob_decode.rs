//! `hone_core::blob::decode` on arbitrary bytes; a blob that decodes must re-encode and decode
//! to an equal body.
#![no_main]

use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    hone_fuzz::check_blob(data);
});
