//! Cortex-M support: SysTick tick counter, spin loop, fault handlers, stack bounds.

use core::arch::asm;
use core::sync::atomic::{AtomicU32, Ordering};

use cortex_m::peripheral::syst::SystClkSource;
use cortex_m::peripheral::{SCB, SYST};
use cortex_m_rt::{exception, ExceptionFrame};

use crate::platform::{Platform, TickUnit};
use crate::{exit_code, record, semihosting_exit};

/// SysTick reload value: the full 24-bit range.
const RELOAD: u32 = 0x00FF_FFFF;

/// SysTick wraps seen so far. Written only by the SysTick handler.
static WRAPS: AtomicU32 = AtomicU32::new(0);

#[exception]
fn SysTick() {
    // Only this handler writes WRAPS and it cannot preempt itself, so load + store is race-free
    // (thumbv6m has no atomic read-modify-write).
    WRAPS.store(
        WRAPS.load(Ordering::Relaxed).wrapping_add(1),
        Ordering::Release,
    );
}

/// A Cortex-M board whose tick counter is SysTick clocked from the core clock, extended to 64 bits
/// by counting wraps in the SysTick exception.
pub struct SysTickPlatform {
    board: &'static str,
    unit: TickUnit,
}

impl SysTickPlatform {
    /// Starts SysTick (core clock, reload `0xFF_FFFF`, wrap interrupt on) and returns the platform.
    ///
    /// `unit` is the board's documented relation of one SysTick tick to instructions (QEMU with
    /// `-icount shift=0`) or cycles (hardware); the runner checks it at boot.
    #[must_use]
    pub fn new(mut syst: SYST, board: &'static str, unit: TickUnit) -> Self {
        syst.disable_counter();
        syst.set_clock_source(SystClkSource::Core);
        syst.set_reload(RELOAD);
        syst.clear_current();
        syst.enable_interrupt();
        syst.enable_counter();
        Self { board, unit }
    }
}

impl Platform for SysTickPlatform {
    fn board(&self) -> &'static str {
        self.board
    }

    fn ticks(&self) -> u64 {
        loop {
            let before = WRAPS.load(Ordering::Acquire);
            let current = SYST::get_current();
            let pending = SCB::is_pendst_pending();
            let after = WRAPS.load(Ordering::Acquire);
            if before != after {
                continue;
            }
            // A wrap that happened but whose exception is not taken yet shows as a pending
            // SysTick. If the counter was read after that wrap it is near the reload value;
            // if before, near zero.
            let wraps = if pending && current > RELOAD / 2 {
                u64::from(before) + 1
            } else {
                u64::from(before)
            };
            return wraps * (u64::from(RELOAD) + 1) + u64::from(RELOAD - current);
        }
    }

    fn tick_unit(&self) -> TickUnit {
        self.unit
    }

    #[inline(never)]
    fn spin(&self, iterations: u32) {
        if iterations == 0 {
            return;
        }
        // SAFETY: a register-only countdown loop; touches no memory and no stack. Two
        // instructions per iteration: `subs` and `bne`.
        unsafe {
            asm!(
                "2:",
                "subs {n}, #1",
                "bne 2b",
                n = inout(reg) iterations => _,
                options(nomem, nostack),
            );
        }
    }

    const SPIN_INSNS_PER_ITER: u32 = 2;

    fn exit(&self, code: i32) -> ! {
        semihosting_exit(code)
    }
}

/// Lowest and one-past-highest stack address, from `cortex-m-rt`'s `_stack_end` and
/// `_stack_start`. The `paint-stack` feature fills this range with
/// [`crate::memory::STACK_PAINT`] at reset.
pub(crate) fn stack_bounds() -> (usize, usize) {
    extern "C" {
        static _stack_end: u32;
        static _stack_start: u32;
    }
    // Only the addresses of the linker-defined symbols are taken.
    (
        &raw const _stack_end as usize,
        &raw const _stack_start as usize,
    )
}

/// The current stack pointer.
#[inline(always)]
pub(crate) fn stack_pointer() -> usize {
    let sp: usize;
    // SAFETY: reads the stack pointer into a register; no memory access, no side effect.
    unsafe {
        asm!("mov {}, sp", out(reg) sp, options(nomem, nostack, preserves_flags));
    }
    sp
}

/// Writes `word` to every word from `bottom` (4-byte aligned) up to the stack pointer.
///
/// The stack pointer is read inside the same assembly block as the loop, which uses registers
/// only, so no frame of this code lies below it while it paints.
#[inline(always)]
pub(crate) fn paint_below_sp(bottom: usize, word: u32) {
    // SAFETY: the words below the stack pointer hold no live data (Arm code never stores below
    // it; an interrupt taken meanwhile pushes its frame there and may overwrite some painted
    // words, which can only make the next scan report more stack). `bottom` is the lowest
    // stack address from the linker script, inside RAM and 4-byte aligned. Thumb-1 encodings,
    // so the same code assembles for Armv6-M and Armv7-M.
    unsafe {
        asm!(
            "mov {end}, sp",
            "2:",
            "cmp {p}, {end}",
            "bhs 3f",
            "str {v}, [{p}]",
            "adds {p}, #4",
            "b 2b",
            "3:",
            p = inout(reg) bottom => _,
            end = out(reg) _,
            v = in(reg) word,
            options(nostack),
        );
    }
}

#[exception]
unsafe fn HardFault(frame: &ExceptionFrame) -> ! {
    record::fault(frame.pc());
    record::done(exit_code::FAULT);
    semihosting_exit(exit_code::FAULT)
}

#[exception]
unsafe fn DefaultHandler(irqn: i16) {
    // An exception or interrupt that nothing enabled on purpose: name it and stop.
    record::error("unexpected-exception");
    defmt::error!("unexpected exception or interrupt {=i16}", irqn);
    record::done(exit_code::FAULT);
    semihosting_exit(exit_code::FAULT)
}
