//! The minimal on-device example: the hone core's public API and nothing else, on the
//! LM3S6965 (Cortex-M3) under QEMU. The work is in `calibrate.rs`, which the host test
//! (host-cli/host/tests/minimal_qemu.rs) runs on the workstation too; this file only prints each
//! result as a line `<name> <hex bytes>` on the semihosting console and exits with 0 (or 1 on
//! an error of the core).
#![no_std]
#![no_main]

mod calibrate;

/// The model hone exported for this board (copied from `../lm3s6965evb/session/` by build.rs).
#[allow(dead_code)]
mod model {
    include!(concat!(env!("OUT_DIR"), "/model.rs"));
}

/// A semihosting call (Arm's `bkpt 0xAB` convention, which QEMU implements).
fn semihost(op: u32, arg: *const u8) -> u32 {
    let mut r0 = op;
    // SAFETY: the semihosting trap reads the block `arg` points to (a NUL-terminated string
    // or the exit block, both alive for the call) and touches no other memory.
    unsafe {
        core::arch::asm!("bkpt 0xAB", inout("r0") r0, in("r1") arg, options(nostack));
    }
    r0
}

fn exit(code: u32) -> ! {
    // SYS_EXIT_EXTENDED with ADP_Stopped_ApplicationExit: QEMU exits with `code`.
    let block = [0x20026u32, code];
    semihost(0x20, block.as_ptr().cast());
    loop {
        cortex_m::asm::nop();
    }
}

/// Prints `name`, a space, `bytes` in hex and a newline (SYS_WRITE0), 128 bytes per line.
fn print(name: &str, bytes: &[u8]) {
    const HEX: &[u8; 16] = b"0123456789abcdef";
    let mut chunks = bytes.chunks(128);
    let mut first = Some(&[][..]);
    while let Some(chunk) = chunks.next().or(first.take()) {
        first = None;
        let mut line = [0u8; 64 + 2 * 128 + 2];
        let mut n = 0;
        for &b in name.as_bytes().iter().take(62).chain(b" ") {
            line[n] = b;
            n += 1;
        }
        for &b in chunk {
            line[n] = HEX[usize::from(b >> 4)];
            line[n + 1] = HEX[usize::from(b & 15)];
            n += 2;
        }
        line[n] = b'\n';
        semihost(0x04, line.as_ptr());
    }
}

#[cortex_m_rt::entry]
fn main() -> ! {
    match calibrate::run(&mut print) {
        Ok(()) => {
            print("done", &[]);
            exit(0)
        }
        Err(_) => exit(1),
    }
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo<'_>) -> ! {
    exit(101)
}
