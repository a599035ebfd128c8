//! Puts `memory.x` where cortex-m-rt's `link.x` finds it, and the model hone exported for the
//! LM3S6965 board (`../lm3s6965evb/session/model.rs`) where `src/main.rs` includes it.

use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::write(out.join("memory.x"), include_bytes!("memory.x")).expect("write memory.x");
    println!("cargo:rustc-link-search={}", out.display());
    let model = PathBuf::from("../lm3s6965evb/session/model.rs");
    let text = fs::read(&model).unwrap_or_else(|e| panic!("read {}: {e}", model.display()));
    fs::write(out.join("model.rs"), text).expect("write model.rs");
    println!("cargo:rerun-if-changed={}", model.display());
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
}
