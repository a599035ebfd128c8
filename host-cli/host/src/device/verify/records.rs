//! What a verification found: the options, the records of each phase, the figures and the
//! summary.

use super::*;

/// What [`verify_board`] works with.
#[derive(Clone, Debug)]
pub struct VerifyOptions {
    /// The `boards/` folder.
    pub boards_dir: PathBuf,
    /// The repository the session is generated from.
    pub repo_dir: PathBuf,
    /// Where to write the session files for the build. `None` builds from the committed files
    /// under `boards/<board>/session`, which must then equal what the generator writes now.
    pub session_dir: Option<PathBuf>,
    /// Time limit of the QEMU run.
    pub timeout: Duration,
    /// Run this already built firmware image instead of building one. It must have been built
    /// from the board's session files (the committed ones, or those in `session_dir`); the
    /// comparison with the host tells if it was not.
    pub elf: Option<PathBuf>,
}

impl Default for VerifyOptions {
    fn default() -> Self {
        VerifyOptions {
            boards_dir: default_boards_dir(),
            repo_dir: session::default_repo_dir(),
            session_dir: None,
            timeout: crate::device::DEFAULT_TIMEOUT,
            elf: None,
        }
    }
}

/// The `engine` record.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct EngineRecord {
    /// Fixed-point arena, bytes.
    pub arena: u64,
    /// `size_of::<Trainer>()`.
    pub trainer: u64,
    /// `f32` arena, bytes.
    pub float_arena: u64,
    /// `size_of::<Twin<f32>>()`.
    pub twin: u64,
    /// `size_of::<CheckedBlob>()`.
    pub blob: u64,
    /// Forward multiply-accumulates per sample.
    pub forward_macs: u64,
    /// Backward multiply-accumulates per sample.
    pub backward_macs: u64,
}

/// A `guard` record.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct GuardRecord {
    /// `calib` or `faulty`.
    pub set: String,
    /// `accept`, `reject-loss` or `reject-saturation`.
    pub verdict: String,
    /// Mean hold-out loss before, raw (24 fraction bits).
    pub before: i64,
    /// Mean hold-out loss after, raw.
    pub after: i64,
    /// Saturated activations on the hold-out samples before.
    pub before_saturations: u64,
    /// Saturated activations on the hold-out samples after.
    pub after_saturations: u64,
    /// Samples trained on.
    pub trained: u64,
    /// Trainer steps at the end.
    pub steps: u64,
    /// Trainer updates at the end.
    pub updates: u64,
}

/// The `tput` record: the throughput phase's model and workload.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct ThroughputRecord {
    /// Input values per sample.
    pub inputs: u64,
    /// Output values per sample.
    pub outputs: u64,
    /// Parameter values.
    pub params: u64,
    /// Distinct samples drawn.
    pub pool: u64,
    /// Samples trained in each arithmetic.
    pub samples: u64,
    /// Multiply-accumulates per training sample.
    pub macs: u64,
    /// Fixed-point arena, bytes.
    pub arena: u64,
    /// `f32` arena, bytes.
    pub float_arena: u64,
}

/// A `stack` record.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct StackRecord {
    /// Phase name: `calib`, `faulty`, `f32`.
    pub phase: String,
    /// Stack depth where the phase started, bytes.
    pub entry: u64,
    /// Deepest point during the phase, bytes from the stack top.
    pub peak: u64,
}

/// One payload compared with the host's.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct PayloadCheck {
    /// Payload name.
    pub name: String,
    /// Bytes from the device.
    pub device_len: usize,
    /// Bytes from the host.
    pub host_len: usize,
    /// CRC-32 of the device's bytes.
    pub device_crc: u32,
    /// CRC-32 of the host's bytes.
    pub host_crc: u32,
    /// SHA-256 of the device's bytes, hexadecimal.
    pub device_sha256: String,
    /// SHA-256 of the host's bytes, hexadecimal.
    pub host_sha256: String,
    /// Readable differences (at most [`MAX_DIFFS`]); empty when equal.
    pub diffs: Vec<String>,
}

impl PayloadCheck {
    /// Whether the two are equal, byte for byte.
    #[must_use]
    pub fn equal(&self) -> bool {
        self.device_len == self.host_len
            && self.device_crc == self.host_crc
            && self.diffs.is_empty()
    }
}

/// Differences listed per payload at most.
pub const MAX_DIFFS: usize = 12;

/// Instructions per unit of work of one span.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
pub struct Rate {
    /// Instructions of the span.
    pub instructions: u64,
    /// Samples (or repetitions) in it.
    pub samples: u64,
    /// Multiply-accumulates in it.
    pub macs: u64,
}

impl Rate {
    /// Instructions per sample.
    #[must_use]
    pub fn per_sample(&self) -> f64 {
        self.instructions as f64 / self.samples.max(1) as f64
    }

    /// Instructions per multiply-accumulate.
    #[must_use]
    pub fn per_mac(&self) -> f64 {
        self.instructions as f64 / self.macs.max(1) as f64
    }
}

/// RAM measured against the prediction.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct RamFigures {
    /// Static RAM of the firmware (`.data + .bss + .uninit`), bytes.
    pub static_ram: u64,
    /// Stack depth where the firmware calls the engine, bytes.
    pub entry: u64,
    /// Deepest stack of the guarded sets (calibration and mislabelled), bytes from the top.
    pub fixed_peak: u64,
    /// Deepest stack of the float twin's phase, bytes from the top.
    pub float_peak: u64,
    /// The plan's arena, bytes.
    pub arena: u64,
    /// The float twin's arena, bytes.
    pub float_arena: u64,
    /// `size_of::<Trainer>()`.
    pub trainer: u64,
    /// `size_of::<Twin<f32>>()`.
    pub twin: u64,
    /// Engine stack beyond arena and trainer: `fixed_peak − entry − arena − trainer`.
    pub engine_stack: u64,
    /// RAM while training in fixed point: `static_ram + fixed_peak`.
    pub measured: u64,
    /// RAM while training the `f32` twin: `static_ram + float_peak`.
    pub measured_float: u64,
    /// The prediction from the plan and the measured-overhead table, when the table has a row
    /// for this board's target.
    pub predicted: Option<u64>,
    /// Deepest stack of the whole run (every phase, logging included), bytes.
    pub run_peak: u64,
    /// The stack region, bytes: with the static RAM, all the RAM the firmware has.
    pub stack_size: u64,
}

/// Code sizes from the ELF's symbols.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct FlashFigures {
    /// `.text` of the fixed-point engine (`hone_core` outside its float twin, the blob codec's
    /// crates, and the firmware's engine call wrappers), bytes.
    pub engine_text: u64,
    /// `.rodata` of the same symbols (lookup tables), bytes.
    pub engine_rodata: u64,
    /// `.text` of the float twin (`hone_core::float`, `micromath`, its wrappers), bytes.
    pub float_text: u64,
    /// `.text` of compiler runtime helpers (soft float, 64-bit division, `memcpy`), shared by
    /// everything, bytes.
    pub runtime_text: u64,
    /// `.text` of everything else (platform, logging, sessions), bytes.
    pub other_text: u64,
    /// The whole `.text` section, bytes.
    pub text_section: u64,
}

impl FlashFigures {
    /// The fixed-point engine's code and tables, as the memory plan counts them.
    #[must_use]
    pub fn engine_code(&self) -> u64 {
        self.engine_text + self.engine_rodata
    }
}

/// The throughput phase's figures.
#[derive(Clone, Debug, PartialEq)]
pub struct ThroughputFigures {
    /// The model, as `64-32-8`.
    pub model: String,
    /// Multiply-accumulates of one training sample (`Plan::training_macs`).
    pub macs_per_sample: u64,
    /// Fixed-point training.
    pub fixed: Rate,
    /// `f32` training (soft float, or the FPU on the M4F).
    pub float: Rate,
    /// The fixed-point arena, bytes.
    pub arena: u64,
    /// The `f32` arena, bytes.
    pub float_arena: u64,
    /// RAM while training in fixed point: static RAM + the part's deepest stack, bytes.
    pub fixed_ram: u64,
    /// RAM while training in `f32`, bytes.
    pub float_ram: u64,
    /// The generator's prediction of both, from the memory plan and the overhead table.
    pub predicted: PhaseRam,
    /// All the RAM the firmware has (static RAM + the stack region), bytes.
    pub board_ram: u64,
}

/// Everything measured on one board.
#[derive(Clone, Debug, PartialEq)]
pub struct Measures {
    /// Multiply-accumulates of one training sample: forward + backward.
    pub macs_per_sample: u64,
    /// Fixed-point training (calibration set).
    pub fixed: Rate,
    /// Fixed-point forward pass (hold-out evaluation before training).
    pub eval: Rate,
    /// `f32` twin training (soft float, or the FPU on the M4F).
    pub float: Rate,
    /// Phase-1 `i8` dot product.
    pub dot_i8: Rate,
    /// Phase-1 `i16` dot product.
    pub dot_i16: Rate,
    /// RAM.
    pub ram: RamFigures,
    /// Flash.
    pub flash: FlashFigures,
    /// The throughput phase, on boards that run it.
    pub throughput: Option<ThroughputFigures>,
}

/// The outcome of [`verify_board`].
#[derive(Clone, Debug)]
pub struct SessionCheck {
    /// The board.
    pub board: QemuBoard,
    /// The session that was built and simulated.
    pub session: Session,
    /// The firmware run.
    pub run: DeviceRun,
    /// The host's simulation.
    pub host: HostOutcome,
    /// The `engine` record.
    pub engine: EngineRecord,
    /// The `guard` records, in order.
    pub guards: Vec<GuardRecord>,
    /// The `stack` records, in order.
    pub stacks: Vec<StackRecord>,
    /// The `tput` record, on boards that run the throughput phase.
    pub throughput: Option<ThroughputRecord>,
    /// Every compared payload.
    pub payloads: Vec<PayloadCheck>,
    /// Guard figures that differ between device and host, as readable lines.
    pub guard_diffs: Vec<String>,
    /// The measurements.
    pub measures: Measures,
    /// The measured-overhead table's row for this board's target, if any.
    pub overhead: Option<MeasuredOverhead>,
}

/// One board's measurements as one flat record, for `hone device verify --json`. Keys are
/// stable; a figure the build does not measure is `None` (`null`).
#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct VerifySummary {
    /// Board name (`microbit-lean` for the lean build).
    pub board: String,
    /// Whether every compared payload equals the host's, bit for bit.
    pub bit_exact: bool,
    /// Whether RAM and engine code agree with the memory plan's prediction.
    pub prediction_ok: Option<bool>,
    /// The throughput phase's larger model, as `64-32-8`.
    pub throughput_model: Option<String>,
    /// Fixed-point instructions per multiply-accumulate, larger model.
    pub fixed_insn_per_mac: Option<f64>,
    /// `f32` twin's instructions per multiply-accumulate, larger model, same run.
    pub float_insn_per_mac: Option<f64>,
    /// Fixed-point instructions per training sample, calibration model.
    pub fixed_insn_per_sample: Option<f64>,
    /// `f32` twin's instructions per training sample, calibration model.
    pub float_insn_per_sample: Option<f64>,
    /// Engine code and tables (see [`FlashFigures::engine_code`]), bytes.
    pub engine_code_bytes: u64,
    /// `size_of::<Trainer>()`, bytes.
    pub trainer_bytes: Option<u64>,
    /// Engine stack beyond arena and trainer, bytes.
    pub engine_stack_bytes: Option<u64>,
    /// RAM while training in fixed point (static RAM + deepest stack), bytes.
    pub ram_measured_bytes: Option<u64>,
    /// The memory plan's prediction of it, bytes.
    pub ram_predicted_bytes: Option<u64>,
    /// The opt-level of the boards' release profile the firmware was built with.
    pub profile: String,
}
