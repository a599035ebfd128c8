//! Static memory figures from linker symbols, and the stack high-water mark, for the whole run
//! and for one phase.
//!
//! Both `cortex-m-rt` and `riscv-rt` define the section bounds `__stext`/`__etext`,
//! `__srodata`/`__erodata`, `__sdata`/`__edata`, `__sbss`/`__ebss` and `__suninit`/`__euninit`.
//! The stack bounds differ per runtime and come from the architecture module.

use core::sync::atomic::{AtomicU32, Ordering};

#[cfg(feature = "cortex-m")]
use crate::cortex_m::{paint_below_sp, stack_bounds, stack_pointer};
#[cfg(feature = "riscv")]
use crate::riscv::{paint_below_sp, stack_bounds, stack_pointer};

/// Word the runtime paints the free stack with at reset.
pub const STACK_PAINT: u32 = 0xCCCC_CCCC;

/// Sizes in bytes of the program's sections, read from linker symbols at run time.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct StaticMemory {
    /// Code (`.text`).
    pub text: u32,
    /// Read-only data (`.rodata`), in flash.
    pub rodata: u32,
    /// Initialised statics (`.data`): in RAM, with their initial values in flash.
    pub data: u32,
    /// Zero-initialised statics (`.bss`), in RAM.
    pub bss: u32,
    /// Statics left uninitialised (`.uninit`), in RAM.
    pub uninit: u32,
}

impl StaticMemory {
    /// RAM taken by statics: `.data + .bss + .uninit`.
    #[must_use]
    pub const fn ram(&self) -> u32 {
        self.data + self.bss + self.uninit
    }
}

// Section bounds defined by the runtime's linker script. Only their addresses are used.
extern "C" {
    static __stext: u8;
    static __etext: u8;
    static __srodata: u8;
    static __erodata: u8;
    static __sdata: u8;
    static __edata: u8;
    static __sbss: u8;
    static __ebss: u8;
    static __suninit: u8;
    static __euninit: u8;
}

/// Byte distance between two linker symbols.
fn span(start: *const u8, end: *const u8) -> u32 {
    // Addresses on these 32-bit targets fit in u32.
    (end as usize).saturating_sub(start as usize) as u32
}

/// Reads the section sizes from the runtime's linker symbols.
#[must_use]
pub fn static_memory() -> StaticMemory {
    // Only the addresses of the linker-defined symbols are taken; nothing is read through them.
    StaticMemory {
        text: span(&raw const __stext, &raw const __etext),
        rodata: span(&raw const __srodata, &raw const __erodata),
        data: span(&raw const __sdata, &raw const __edata),
        bss: span(&raw const __sbss, &raw const __ebss),
        uninit: span(&raw const __suninit, &raw const __euninit),
    }
}

/// Stack size and the deepest point the stack reached so far.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct StackUsage {
    /// Bytes between the lowest and the highest stack address.
    pub size: u32,
    /// Bytes used at the deepest point: from the stack top down to the lowest word that no longer
    /// holds [`STACK_PAINT`]. Equal to `size` when the stack reached its bottom (a likely overflow).
    pub peak: u32,
}

/// The deepest stack seen before the last [`repaint_free_stack`], bytes from the top. Only this
/// module writes it, from the one thread of execution, so a load and a store suffice (Armv6-M has
/// no atomic read-modify-write).
static DEEPEST_BEFORE_REPAINT: AtomicU32 = AtomicU32::new(0);

/// Scans the painted stack upward from its lowest address for the first overwritten word: the
/// deepest point since reset or since the last [`repaint_free_stack`].
fn scan() -> StackUsage {
    let (bottom, top) = stack_bounds();
    let mut p = bottom as *const u32;
    let end = top as *const u32;
    // SAFETY: [bottom, top) is the stack region defined by the linker script, inside RAM and
    // 4-byte aligned; the words below the current stack pointer are not in use by anyone, and
    // reading them is the whole point of the scan. Volatile reads keep the compiler from assuming
    // their contents.
    unsafe {
        while p < end && core::ptr::read_volatile(p) == STACK_PAINT {
            p = p.add(1);
        }
    }
    StackUsage {
        size: top.saturating_sub(bottom) as u32,
        peak: top.saturating_sub(p as usize) as u32,
    }
}

/// The stack size and the deepest point the stack reached since reset.
#[must_use]
pub fn stack_usage() -> StackUsage {
    let now = scan();
    StackUsage {
        peak: now.peak.max(DEEPEST_BEFORE_REPAINT.load(Ordering::Relaxed)),
        ..now
    }
}

/// The stack size and the deepest point the stack reached since the last
/// [`repaint_free_stack`]: the stack of one phase.
#[must_use]
pub fn stack_usage_since_repaint() -> StackUsage {
    scan()
}

/// Bytes from the stack top down to the stack pointer of the caller.
#[inline(always)]
#[must_use]
pub fn stack_depth() -> u32 {
    let (_, top) = stack_bounds();
    top.saturating_sub(stack_pointer()) as u32
}

/// Paints the free stack, from its lowest address up to the current stack pointer, with
/// [`STACK_PAINT`] again, so that [`stack_usage_since_repaint`] shows the deepest point reached
/// after this call: the stack of one phase of a session. The deepest point before is kept for
/// [`stack_usage`].
pub fn repaint_free_stack() {
    let before = stack_usage().peak;
    DEEPEST_BEFORE_REPAINT.store(before, Ordering::Relaxed);
    let (bottom, _) = stack_bounds();
    paint_below_sp(bottom, STACK_PAINT);
}
