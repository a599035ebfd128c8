//! The smallest training build of hone: the core with every optional layer kind turned off
//! (`default-features = false`), so only the dense layer, the shift/clamp activations, squared
//! error and SGD are linked. It trains the model of [`hone_lean_session`] (shared with the
//! host) on the micro:bit (Cortex-M0)
//! under QEMU and prints the trained weights over semihosting as plain text:
//!
//! ```text
//! lean w0 <values>
//! lean b0 <values>
//! lean w2 <values>
//! lean b2 <values>
//! lean loss <before> <after>
//! ```
//!
//! then exits with 0 (1 and `lean error` on an error of the core, 101 on a panic). The host's device test runs
//! the same session on the host and compares the lines, and sizes this build's engine code
//! against the full firmware's.
#![no_std]
#![no_main]

use semihosting::{print, println};

use hone_lean_session as session;

#[cortex_m_rt::entry]
fn main() -> ! {
    let mut arena = [0u32; session::ARENA_WORDS];
    let result = session::run(&mut arena, |name, values| {
        print!("lean {name}");
        for v in values {
            print!(" {v}");
        }
        println!();
    });
    match result {
        Ok(s) => {
            println!("lean loss {} {}", s.before, s.after);
            semihosting::process::exit(0)
        }
        // No `Debug` formatting on the device: it would add kilobytes of code. The host runs
        // the same session and shows the core's error in full.
        Err(_) => {
            println!("lean error");
            semihosting::process::exit(1)
        }
    }
}

#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    semihosting::process::exit(101)
}
