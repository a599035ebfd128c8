//! Measuring work with the board's tick counter.

use crate::platform::{Platform, TickUnit};

/// One measured span of work.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Span {
    /// Units of work done in the span (for a dot product: multiply-accumulates).
    pub work: u32,
    /// Counter ticks elapsed.
    pub ticks: u64,
    /// `ticks` converted to instructions or cycles, see [`TickUnit`].
    pub units: u64,
}

impl Span {
    /// Instructions (or cycles) per unit of work, times 1000, rounded down; 0 when `work` is 0.
    #[must_use]
    pub const fn milli_units_per_work(&self) -> u64 {
        if self.work == 0 {
            0
        } else {
            self.units * 1000 / self.work as u64
        }
    }
}

/// Runs `f` and returns its result with the ticks it took.
///
/// The count includes the two counter reads around `f`, a few dozen instructions, which is below
/// one tick on the QEMU boards.
pub fn time<P: Platform, R>(platform: &P, f: impl FnOnce() -> R) -> (R, u64) {
    let start = platform.ticks();
    let r = f();
    let end = platform.ticks();
    (r, end.saturating_sub(start))
}

/// Outcome of [`calibrate`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Calibration {
    /// Extra spin-loop iterations of the long run over the short run.
    pub iterations: u32,
    /// Instructions those extra iterations retire.
    pub instructions: u64,
    /// Extra ticks the long run took over the short run.
    pub ticks: u64,
    /// Whether `ticks` agrees with the board's documented ratio within the counter's resolution.
    /// Always true for boards whose counter counts cycles.
    pub ok: bool,
}

/// Spin-loop iterations of the short calibration run.
pub const CALIB_SHORT: u32 = 1_000;
/// Spin-loop iterations of the long calibration run.
pub const CALIB_LONG: u32 = 1_001_000;

/// Checks the board's ticks-to-instructions ratio against a spin loop of known length.
///
/// Two runs of different length are timed and subtracted, which cancels the loop's entry and exit
/// overhead; the remaining instruction count is exact by construction of [`Platform::spin`]. Each
/// run's tick count can be off by less than one tick, so the difference must match the ratio within
/// two ticks.
pub fn calibrate<P: Platform>(platform: &P) -> Calibration {
    let ((), short) = time(platform, || platform.spin(CALIB_SHORT));
    let ((), long) = time(platform, || platform.spin(CALIB_LONG));
    let iterations = CALIB_LONG - CALIB_SHORT;
    let instructions = u64::from(iterations) * u64::from(P::SPIN_INSNS_PER_ITER);
    let ticks = long.saturating_sub(short);
    let ok = match platform.tick_unit() {
        TickUnit::Instructions { num, den } => {
            // ticks * num / den should equal instructions: compare ticks * num with
            // instructions * den, allowing two ticks (2 * num) of quantisation.
            let lhs = ticks * u64::from(num);
            let rhs = instructions * u64::from(den);
            lhs.abs_diff(rhs) <= 2 * u64::from(num)
        }
        TickUnit::CoreCycles { .. } => true,
    };
    Calibration {
        iterations,
        instructions,
        ticks,
        ok,
    }
}
