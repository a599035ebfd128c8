//! Measured engine overheads (boards/README.md, "Measurements").
//!
//! Written from the figures `cargo test -p hone-host --test device_qemu -- --nocapture` prints,
//! and checked by that test on every run: for each board, the RAM the firmware measures while it
//! trains must be at most the prediction built from this table and the memory plan, and the
//! prediction at most 5 % above it. The engine's code size is checked the same way.

use super::*;

/// Overheads of the training engine and of the board firmware around it, measured once on a
/// QEMU board by its calibration session.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct MeasuredOverhead {
    /// Board the figures were measured on (its folder under `boards/`).
    pub board: &'static str,
    /// Rust target the firmware was built for: the figures hold for every core that runs
    /// code built for it.
    pub target: &'static str,
    /// Model config of the board's session (the engine's stack and code depend a little on
    /// which layer kinds and training options the model uses).
    pub config: &'static str,
    /// `size_of::<Trainer>()`, bytes.
    pub trainer_bytes: u32,
    /// Stack of a guarded calibration beyond the arena and the trainer object: the model
    /// description, the decoded last good blob, and the frames of the engine's functions,
    /// bytes.
    pub engine_stack_bytes: u32,
    /// `.text` and `.rodata` of the fixed-point engine's symbols, bytes.
    pub engine_code_bytes: u32,
    /// Static RAM of the board firmware (`.data`, `.bss`, `.uninit`), bytes.
    pub firmware_static_bytes: u32,
    /// Stack depth at which the board firmware calls the engine, bytes.
    pub firmware_stack_bytes: u32,
    /// Instructions per training sample of the session's model, fixed point, exact (the
    /// `calib_train` span over its 10 samples × 3 passes), rounded to a whole instruction.
    pub insn_per_sample: u32,
}

/// Where the figures of [`MEASURED_OVERHEADS`] come from.
pub const MEASURED_SOURCE: &str = "measured under QEMU 7.2 by the board's calibration session \
     (cargo test -p hone-host --test device_qemu -- --nocapture; firmware built with rustc 1.95.0 in \
     the release profile of boards/: opt-level 3, fat LTO; method in boards/README.md)";

/// The measured overheads, one row per QEMU board. The engine stack is the measurement rounded
/// up to a multiple of 128 bytes (fine enough for the device test's 5 % bound on the whole
/// prediction), the engine code to a multiple of 2 KiB; the other figures are exact.
pub const MEASURED_OVERHEADS: [MeasuredOverhead; 4] = [
    MeasuredOverhead {
        board: "lm3s6965evb",
        target: "thumbv7m-none-eabi",
        config: "configs/soil-moisture.toml",
        trainer_bytes: 84,
        engine_stack_bytes: 2048,
        engine_code_bytes: 100352,
        firmware_static_bytes: 28,
        firmware_stack_bytes: 128,
        insn_per_sample: 14389,
    },
    MeasuredOverhead {
        board: "microbit",
        target: "thumbv6m-none-eabi",
        config: "configs/soil-moisture.toml",
        trainer_bytes: 84,
        engine_stack_bytes: 2304,
        engine_code_bytes: 104448,
        firmware_static_bytes: 28,
        firmware_stack_bytes: 168,
        insn_per_sample: 22346,
    },
    MeasuredOverhead {
        board: "mps2-an386",
        target: "thumbv7em-none-eabihf",
        config: "configs/soil-moisture.toml",
        trainer_bytes: 84,
        engine_stack_bytes: 2048,
        engine_code_bytes: 100352,
        firmware_static_bytes: 28,
        firmware_stack_bytes: 128,
        insn_per_sample: 14393,
    },
    MeasuredOverhead {
        board: "sifive-e",
        target: "riscv32imc-unknown-none-elf",
        config: "configs/soil-moisture-8bit.toml",
        trainer_bytes: 84,
        engine_stack_bytes: 1792,
        engine_code_bytes: 106496,
        firmware_static_bytes: 24,
        firmware_stack_bytes: 112,
        insn_per_sample: 12951,
    },
];

/// The Rust target whose measured figures apply to a core, if one was measured.
pub(super) fn measured_target_of(core: CoreKind, fpu: Fpu) -> Option<&'static str> {
    match (core, fpu) {
        (CoreKind::CortexM0 | CoreKind::CortexM0Plus, _) => Some("thumbv6m-none-eabi"),
        (CoreKind::CortexM3, _) => Some("thumbv7m-none-eabi"),
        (CoreKind::CortexM4, Fpu::Single) => Some("thumbv7em-none-eabihf"),
        (CoreKind::Rv32imc | CoreKind::Rv32imac, _) => Some("riscv32imc-unknown-none-elf"),
        _ => None,
    }
}

/// The Rust target whose measured figures apply to `chip`'s core, if one was measured.
pub(super) fn measured_target(chip: &Chip) -> Option<&'static str> {
    measured_target_of(chip.core, chip.fpu)
}

/// A core with a measured row, as `hone plan --core` names it.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct MeasuredCore {
    /// The name on the command line: the core's label in lower case, e.g. `cortex-m4f`.
    pub name: &'static str,
    /// The core.
    pub core: CoreKind,
    /// Its floating-point unit.
    pub fpu: Fpu,
}

/// Every core whose engine overhead was measured, by way of a board built for the same Rust
/// target (see [`MEASURED_OVERHEADS`]).
pub const MEASURED_CORES: [MeasuredCore; 6] = [
    MeasuredCore {
        name: "cortex-m0",
        core: CoreKind::CortexM0,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "cortex-m0+",
        core: CoreKind::CortexM0Plus,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "cortex-m3",
        core: CoreKind::CortexM3,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "cortex-m4f",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
    },
    MeasuredCore {
        name: "rv32imc",
        core: CoreKind::Rv32imc,
        fpu: Fpu::None,
    },
    MeasuredCore {
        name: "rv32imac",
        core: CoreKind::Rv32imac,
        fpu: Fpu::None,
    },
];

/// A core name that has no measured row.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
#[error(
    "`{0}` is not a measured core; use one of {list}, or leave the option out to count the \
     largest figures measured on any of them",
    list = measured_core_names()
)]
pub struct UnknownCore(pub String);

/// The names of [`MEASURED_CORES`], comma-separated.
pub fn measured_core_names() -> String {
    MEASURED_CORES
        .iter()
        .map(|c| c.name)
        .collect::<Vec<_>>()
        .join(", ")
}

/// The measured core called `name` (case-insensitive).
///
/// # Errors
/// [`UnknownCore`] listing the names that are accepted.
pub fn measured_core(name: &str) -> Result<&'static MeasuredCore, UnknownCore> {
    MEASURED_CORES
        .iter()
        .find(|c| c.name.eq_ignore_ascii_case(name.trim()))
        .ok_or_else(|| UnknownCore(name.to_owned()))
}

pub(super) fn row_of_target(target: &str) -> Option<&'static MeasuredOverhead> {
    MEASURED_OVERHEADS.iter().find(|m| m.target == target)
}

/// The measured row for `chip`'s core, if there is one.
pub fn measured_row(chip: &Chip) -> Option<&'static MeasuredOverhead> {
    row_of_target(measured_target(chip)?)
}

pub(super) fn overhead_of_row(m: &MeasuredOverhead) -> EngineOverhead {
    EngineOverhead {
        basis: OverheadBasis::Measured,
        code_flash: m.engine_code_bytes,
        state_ram: m.trainer_bytes,
        stack: m.engine_stack_bytes,
        source: format!(
            "{MEASURED_SOURCE}: board {} ({}), model {}",
            m.board, m.target, m.config
        ),
    }
}

/// The engine overhead measured for `chip`'s core (trainer object, engine stack, engine
/// code), with its source, for [`plan_report`]; `None` when no board with that core was
/// measured.
pub fn measured_overhead(chip: &Chip) -> Option<EngineOverhead> {
    measured_row(chip).map(overhead_of_row)
}

/// The engine overhead measured for a core named on the command line.
pub fn measured_core_overhead(core: &MeasuredCore) -> EngineOverhead {
    let row = measured_target_of(core.core, core.fpu).and_then(row_of_target);
    match row {
        Some(m) => overhead_of_row(m),
        // Every entry of MEASURED_CORES has a row (checked by a test); should one ever lack
        // it, the estimate is the safe figure.
        None => estimated_overhead(),
    }
}

/// A conservative stand-in for a core that was not measured: the largest trainer object,
/// engine stack and engine code over every row of [`MEASURED_OVERHEADS`], each taken on its
/// own, with a source that says so and names the measured cores.
pub fn estimated_overhead() -> EngineOverhead {
    let max = |f: fn(&MeasuredOverhead) -> u32| MEASURED_OVERHEADS.iter().map(f).max();
    let cores: Vec<String> = MEASURED_OVERHEADS
        .iter()
        .map(|m| {
            let labels: Vec<String> = MEASURED_CORES
                .iter()
                .filter(|c| measured_target_of(c.core, c.fpu) == Some(m.target))
                .map(|c| crate::chips::core_label(c.core, c.fpu))
                .collect();
            format!("{} ({})", labels.join("/"), m.board)
        })
        .collect();
    EngineOverhead {
        basis: OverheadBasis::Estimated,
        code_flash: max(|m| m.engine_code_bytes).unwrap_or(0),
        state_ram: max(|m| m.trainer_bytes).unwrap_or(0),
        stack: max(|m| m.engine_stack_bytes).unwrap_or(0),
        source: format!(
            "estimate: this core was not measured, so the largest figure of each kind measured \
             on {} is counted; {MEASURED_SOURCE}",
            cores.join(", ")
        ),
    }
}

/// The engine overhead to count for `chip`: its core's measured row, or
/// [`estimated_overhead`] when its core was not measured.
pub fn engine_overhead(chip: &Chip) -> EngineOverhead {
    measured_overhead(chip).unwrap_or_else(estimated_overhead)
}

/// The RAM of hone's own board firmware around the engine (its statics and the stack depth
/// where it calls the engine), as a [`Reserve`]; `None` when no board with `chip`'s core was
/// measured. Flash is not counted here.
pub fn measured_firmware_reserve(chip: &Chip) -> Option<Reserve> {
    let m = measured_row(chip)?;
    Some(Reserve {
        ram_bytes: m.firmware_static_bytes + m.firmware_stack_bytes,
        flash_bytes: 0,
    })
}

/// Time and energy of one calibration session on a chip, estimated from the instruction
/// count measured on a QEMU board with the chip's core.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct SessionEstimate {
    /// Always true: this is an estimate, not a measurement on the chip.
    pub estimate: bool,
    /// Board whose measured instructions it uses.
    pub measured_on: &'static str,
    /// The model config that board trains (the figure is for that model).
    pub config: &'static str,
    /// Measured instructions per training sample.
    pub instructions_per_sample: u32,
    /// Samples of the session.
    pub samples: u32,
    /// Passes over them.
    pub passes: u32,
    /// Instructions of the session: per sample × samples × passes.
    pub instructions: u64,
    /// Cycles per instruction assumed for the chip's core.
    pub cycles_per_instruction: f64,
    /// Clock, MHz.
    pub clock_mhz: f64,
    /// Estimated time, seconds.
    pub seconds: f64,
    /// Run current at that clock, mA; `None` when the chip table has no power figures.
    pub current_ma: Option<f64>,
    /// Supply voltage, volts.
    pub supply_v: Option<f64>,
    /// Estimated energy, millijoules: time × current × voltage.
    pub energy_mj: Option<f64>,
    /// Where the clock, current, voltage and cycles per instruction come from.
    pub source: String,
}

/// Samples of a board's calibration session: the rows of `demo-data/soil_unit_calibration.csv`.
pub const SESSION_SAMPLES: u32 = 10;

impl SessionEstimate {
    /// One paragraph for the plan's table.
    #[must_use]
    pub fn render(&self) -> String {
        let energy = match (self.energy_mj, self.current_ma, self.supply_v) {
            (Some(e), Some(i), Some(v)) => format!(", about {e:.3} mJ ({i:.2} mA at {v:.1} V)"),
            _ => ", energy unknown (no run current for this chip in the table)".to_owned(),
        };
        format!(
            "estimate, one calibration session ({} samples × {} passes of the model in {}, \
             {} instructions per sample measured on {}): {} instructions × {:.1} cycles each at \
             {} MHz = about {:.1} ms{energy}; {}",
            self.samples,
            self.passes,
            self.config,
            self.instructions_per_sample,
            self.measured_on,
            self.instructions,
            self.cycles_per_instruction,
            self.clock_mhz,
            self.seconds * 1e3,
            self.source
        )
    }
}

/// The time and energy of one calibration session (the boards' session: [`SESSION_SAMPLES`]
/// samples, [`crate::device::session::PASSES`] passes) on `chip`: measured instructions ×
/// cycles per instruction of its core ÷ its clock, and that time × run current × supply
/// voltage. `None` when no board with the chip's core was measured or the chip has no clock
/// in [`crate::chips::CHIP_POWER`] (QEMU boards are listed with their emulated chip's
/// figures where known).
#[must_use]
pub fn session_estimate(chip: &Chip) -> Option<SessionEstimate> {
    let row = measured_row(chip)?;
    let power = crate::chips::power(chip.id)?;
    let (cpi, cpi_source) = crate::chips::cycles_per_instruction(chip.core);
    let passes = u32::from(crate::device::session::PASSES);
    let instructions =
        u64::from(row.insn_per_sample) * u64::from(SESSION_SAMPLES) * u64::from(passes);
    let seconds = instructions as f64 * cpi / (power.clock_mhz * 1e6);
    let current_ma = power.run_ua_per_mhz * power.clock_mhz / 1e3;
    Some(SessionEstimate {
        estimate: true,
        measured_on: row.board,
        config: row.config,
        instructions_per_sample: row.insn_per_sample,
        samples: SESSION_SAMPLES,
        passes,
        instructions,
        cycles_per_instruction: cpi,
        clock_mhz: power.clock_mhz,
        seconds,
        current_ma: Some(current_ma),
        supply_v: Some(power.supply_v),
        energy_mj: Some(seconds * current_ma * power.supply_v),
        source: format!(
            "clock and current: {}; cycles per instruction: {cpi_source}",
            power.source
        ),
    })
}
