//! The minimal on-device example (`boards/minimal`): the core's public API end to end (the
//! exported model, training memory from the const plan, readings quantized in integers,
//! `step`/`evaluate`, `guard::calibrate`, the checkpoint committed to the store). Its work,
//! `boards/minimal/src/calibrate.rs`, is compiled into this test as well; the test runs it on
//! the host, builds the firmware, runs it under QEMU on the LM3S6965 (Cortex-M3) and requires
//! every printed result to be the same, bit for bit.
//!
//! Needs `qemu-system-arm` (Debian package `qemu-system-arm`) and the rustup target
//! `thumbv7m-none-eabi`; the test command installs both.

use std::fmt::Write as _;
use std::process::Command;

/// The model hone exported for the LM3S6965 board, as the firmware includes it.
#[allow(dead_code)]
mod model {
    include!("../../../boards/lm3s6965evb/session/model.rs");
}

#[path = "../../../boards/minimal/src/calibrate.rs"]
mod calibrate;

/// The lines the firmware prints for `(name, bytes)`: 128 bytes of hex per line.
fn lines(name: &str, bytes: &[u8], out: &mut String) {
    let mut chunks: Vec<&[u8]> = bytes.chunks(128).collect();
    if chunks.is_empty() {
        chunks.push(&[]);
    }
    for c in chunks {
        let _ = write!(out, "{name} ");
        for b in c {
            let _ = write!(out, "{b:02x}");
        }
        out.push('\n');
    }
}

#[test]
fn minimal_example_matches_the_host_bit_for_bit() {
    let mut host = String::new();
    calibrate::run(&mut |name, bytes| lines(name, bytes, &mut host)).expect("host run");
    lines("done", &[], &mut host);
    assert!(host.contains("\nweights "), "{host}");

    let dir = hone_host::device::session::default_repo_dir().join("boards/minimal");
    let build = Command::new("cargo")
        .args(["build", "--release", "--locked"])
        .current_dir(&dir)
        .env_remove("CARGO_TARGET_DIR")
        .output()
        .expect("cargo build of boards/minimal");
    assert!(
        build.status.success(),
        "build failed:\n{}",
        String::from_utf8_lossy(&build.stderr)
    );
    let elf = dir.join("../target/thumbv7m-none-eabi/release/hone-minimal");
    // The boards' runner script owns the QEMU command line (machine, `-icount`, semihosting).
    let run = Command::new(dir.join("../qemu-run.sh"))
        .args(["--plain", "lm3s6965evb"])
        .arg(&elf)
        .output()
        .unwrap_or_else(|e| panic!("cannot start boards/qemu-run.sh: {e}"));
    // QEMU 7.2 writes the semihosting console to its standard error, after its own notice
    // about the board's timer.
    let stderr = String::from_utf8_lossy(&run.stderr);
    assert!(
        run.status.success(),
        "firmware failed ({}):\n{stderr}",
        run.status
    );
    let device: String = stderr
        .lines()
        .filter(|l| !l.starts_with("Timer with period zero"))
        .map(|l| format!("{l}\n"))
        .collect();
    assert_eq!(device, host, "device and host differ");
}
