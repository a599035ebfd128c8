//! RISC-V support: `minstret` tick counter, spin loop, stack painting, trap handler.

use core::arch::{asm, global_asm};

use crate::platform::{Platform, TickUnit};
use crate::{exit_code, record, semihosting_exit};

/// A RISC-V board whose tick counter is the `minstret` CSR.
///
/// Under QEMU with `-icount shift=0`, `minstret` returns the instruction count, so one tick is one
/// instruction; the runner checks this at boot.
pub struct InstretPlatform {
    board: &'static str,
}

impl InstretPlatform {
    /// Returns the platform; `minstret` runs from reset and needs no set-up in machine mode.
    #[must_use]
    pub const fn new(board: &'static str) -> Self {
        Self { board }
    }
}

impl Platform for InstretPlatform {
    fn board(&self) -> &'static str {
        self.board
    }

    fn ticks(&self) -> u64 {
        riscv::register::minstret::read64()
    }

    fn tick_unit(&self) -> TickUnit {
        TickUnit::Instructions { num: 1, den: 1 }
    }

    #[inline(never)]
    fn spin(&self, iterations: u32) {
        if iterations == 0 {
            return;
        }
        // SAFETY: a register-only countdown loop; touches no memory and no stack. Two
        // instructions per iteration: `addi` and `bnez`.
        unsafe {
            asm!(
                "2:",
                "addi {n}, {n}, -1",
                "bnez {n}, 2b",
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

// riscv-rt has no stack painting, so hone-fw supplies `__pre_init` (enabled by riscv-rt's
// `pre-init` feature), which runs before RAM initialisation with sp at `_stack_start`. It fills
// [__estack, sp) with the paint word using temporaries only: no stack, no RAM besides the painted
// range, which nobody uses yet.
global_asm!(
    r#".section .init.pre_init, "ax"
    .global __pre_init
__pre_init:
    la t0, __estack
    mv t1, sp
    li t2, 0xCCCCCCCC
3:
    bgeu t0, t1, 4f
    sw t2, 0(t0)
    addi t0, t0, 4
    j 3b
4:
    ret"#
);

/// Lowest and one-past-highest stack address, from `riscv-rt`'s `__estack` and `_stack_start`.
pub(crate) fn stack_bounds() -> (usize, usize) {
    extern "C" {
        static __estack: u32;
        static _stack_start: u32;
    }
    // Only the addresses of the linker-defined symbols are taken.
    (
        &raw const __estack as usize,
        &raw const _stack_start as usize,
    )
}

/// The current stack pointer.
#[inline(always)]
pub(crate) fn stack_pointer() -> usize {
    let sp: usize;
    // SAFETY: copies the stack pointer into a register; no memory access, no side effect.
    unsafe {
        asm!("mv {}, sp", out(reg) sp, options(nomem, nostack, preserves_flags));
    }
    sp
}

/// Writes `word` to every word from `bottom` (4-byte aligned) up to the stack pointer.
///
/// The stack pointer is read inside the same assembly block as the loop, which uses registers
/// only, so no frame of this code lies below it while it paints.
#[inline(always)]
pub(crate) fn paint_below_sp(bottom: usize, word: u32) {
    // SAFETY: the words below the stack pointer hold no live data (RISC-V code here never
    // stores below it, and traps end the run). `bottom` is the lowest stack address from the
    // linker script, inside RAM and 4-byte aligned.
    unsafe {
        asm!(
            "mv {end}, sp",
            "2:",
            "bgeu {p}, {end}, 3f",
            "sw {v}, 0({p})",
            "addi {p}, {p}, 4",
            "j 2b",
            "3:",
            p = inout(reg) bottom => _,
            end = out(reg) _,
            v = in(reg) word,
            options(nostack),
        );
    }
}

/// Trap handler for every exception: report the faulting address and stop.
#[export_name = "ExceptionHandler"]
fn exception_handler(_frame: &riscv_rt::TrapFrame) -> ! {
    let pc = riscv::register::mepc::read();
    record::fault(pc as u32);
    record::done(exit_code::FAULT);
    semihosting_exit(exit_code::FAULT)
}
