//! Panic handler shared by every board: log the location, exit with [`exit_code::PANIC`].

use core::panic::PanicInfo;
use core::sync::atomic::{AtomicBool, Ordering};

use crate::{exit_code, record, semihosting_exit};

/// Set on the first panic, so a panic raised while logging the first one exits at once.
static PANICKING: AtomicBool = AtomicBool::new(false);

#[panic_handler]
fn panic(info: &PanicInfo) -> ! {
    // Single core and no preemption of the handler by itself, so load + store is enough
    // (and thumbv6m has no atomic swap).
    if !PANICKING.load(Ordering::Relaxed) {
        PANICKING.store(true, Ordering::Relaxed);
        match info.location() {
            Some(loc) => record::panic(loc.file(), loc.line()),
            None => record::panic("", 0),
        }
        record::done(exit_code::PANIC);
    }
    semihosting_exit(exit_code::PANIC)
}
