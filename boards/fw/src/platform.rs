//! What a board must provide to the shared runner.

/// How one tick of a board's free-running counter relates to the work the CPU did.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum TickUnit {
    /// One tick is `num / den` retired instructions.
    ///
    /// This holds under QEMU started with `-icount shift=0`, where virtual time advances 1 ns per
    /// instruction, so a counter clocked at `f` Hz ticks once every `1e9 / f` instructions.
    Instructions {
        /// Numerator of instructions per tick.
        num: u32,
        /// Denominator of instructions per tick.
        den: u32,
    },
    /// One tick is one core clock cycle (real hardware).
    CoreCycles {
        /// Core clock frequency in Hz, for converting ticks to time.
        hz: u32,
    },
}

impl TickUnit {
    /// Name of the unit in the boot record: `"insn"` or `"cycle"`.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Instructions { .. } => "insn",
            Self::CoreCycles { .. } => "cycle",
        }
    }

    /// Units (instructions or cycles) per tick as the fraction `(num, den)`.
    #[must_use]
    pub const fn ratio(self) -> (u32, u32) {
        match self {
            Self::Instructions { num, den } => (num, den),
            Self::CoreCycles { .. } => (1, 1),
        }
    }

    /// Converts a tick count to units, rounding down.
    #[must_use]
    pub const fn to_units(self, ticks: u64) -> u64 {
        let (num, den) = self.ratio();
        ticks * num as u64 / den as u64
    }
}

/// The few services the shared runner needs from a board.
pub trait Platform {
    /// Short board name written into the boot record, e.g. `"lm3s6965evb"`.
    fn board(&self) -> &'static str;

    /// Reads the free-running tick counter. It must be monotonic and must not wrap within a run.
    fn ticks(&self) -> u64;

    /// The unit of one counter tick.
    fn tick_unit(&self) -> TickUnit;

    /// Runs a loop of exactly `iterations` times [`Platform::SPIN_INSNS_PER_ITER`] instructions,
    /// plus a fixed entry and exit overhead. Used to check [`Platform::tick_unit`].
    fn spin(&self, iterations: u32);

    /// Instructions retired by one iteration of [`Platform::spin`].
    const SPIN_INSNS_PER_ITER: u32;

    /// Ends the program with the given exit status.
    fn exit(&self, code: i32) -> !;
}
