//! Puts this board's `memory.x` where the runtime's `link.x` finds it.

use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::write(out.join("memory.x"), include_bytes!("memory.x")).expect("write memory.x to OUT_DIR");
    println!("cargo:rustc-link-search={}", out.display());
    // Flash starts at 0x10000100, not on a page boundary: keep the linker from page-aligning
    // sections. Given here rather than in RUSTFLAGS so the micro:bit build, which shares the
    // thumbv6m target directory, keeps identical flags and no rebuilds are triggered.
    println!("cargo:rustc-link-arg-bins=--nmagic");
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
}
