//! Puts the micro:bit's `memory.x` (the same file as `../microbit`'s) where the runtime's
//! `link.x` finds it.

use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::write(out.join("memory.x"), include_bytes!("../microbit/memory.x"))
        .expect("write memory.x to OUT_DIR");
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rerun-if-changed=../microbit/memory.x");
    println!("cargo:rerun-if-changed=build.rs");
}
