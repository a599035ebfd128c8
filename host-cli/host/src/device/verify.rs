//! The proof that hone works on a device: a board fine-tunes the model on the chip, and its
//! final weights must equal, bit for bit, what the host computes with the same core code.
//!
//! [`verify_board`] builds the board's firmware from its session files (see [`super::session`]),
//! runs it under QEMU, decodes what it reports, simulates the same session on the host
//! ([`super::session::simulate`]) and compares:
//!
//! - the trained tensors of the calibration set and of the mislabelled set, byte for byte;
//! - the checkpoint blob after the calibration set, byte for byte (values, momentum, generator
//!   state, counters);
//! - the float twin's `f32` tensors, bit for bit;
//! - the guard's verdicts and hold-out losses;
//! - on boards with a throughput phase (see [`super::throughput`]), its trained tensors in
//!   fixed point and in `f32`, byte for byte.
//!
//! It also gathers the measurements: instructions per training sample and per
//! multiply-accumulate (fixed point, the `f32` twin, the Phase-1 dot product floor, and the
//! throughput phase's larger model in both arithmetics), RAM
//! measured against the memory plan's prediction, and the engine's code size from the ELF's
//! symbols.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Duration;

use object::{Object, ObjectSection, ObjectSymbol, SectionKind};

use super::report::crc32;
use super::session::{self, payload_layout, HostOutcome, Session, TensorSpan};
use super::sha256::sha256_hex;
use super::throughput::{PhaseRam, MARGIN_BYTES};
use super::{build_firmware_with, default_boards_dir, run_elf, DeviceError, DeviceRun, QemuBoard};
use crate::memplan::{self, MeasuredOverhead};
use hone_core::session::training_macs;

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
            timeout: super::DEFAULT_TIMEOUT,
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

/// The `opt-level` of the cargo profile `profile` in the boards' `Cargo.toml`, as written
/// there (`3`, `s` or `z`), following `inherits`; cargo's defaults when unset (`3` for
/// `release`, `0` for `dev`).
///
/// # Errors
/// [`DeviceError::Io`] when the file cannot be read, [`DeviceError::Manifest`] when it is not
/// valid TOML, [`DeviceError::Profile`] when the profile or one it inherits from is not there
/// (or inherits in a circle).
pub fn profile_opt_level(boards_dir: &Path, profile: &str) -> Result<String, DeviceError> {
    let path = boards_dir.join("Cargo.toml");
    let text = std::fs::read_to_string(&path).map_err(|source| DeviceError::Io {
        path: path.clone(),
        source,
    })?;
    let bad = |detail: String| DeviceError::Profile {
        path: path.clone(),
        detail,
    };
    let doc: toml::Table = text.parse().map_err(|source| DeviceError::Manifest {
        path: path.clone(),
        source,
    })?;
    let profiles = doc.get("profile");
    let mut name = profile.to_owned();
    // Cargo's own profiles need not be written; a chain longer than the table is a circle.
    for _ in 0..=profiles
        .and_then(toml::Value::as_table)
        .map_or(0, |t| t.len())
    {
        let table = profiles.and_then(|p| p.get(&name));
        match table.and_then(|t| t.get("opt-level")) {
            Some(toml::Value::Integer(n)) => return Ok(n.to_string()),
            Some(toml::Value::String(s)) => return Ok(s.clone()),
            Some(other) => return Err(bad(format!("profile.{name}.opt-level is {other}"))),
            None => {}
        }
        match table
            .and_then(|t| t.get("inherits"))
            .and_then(toml::Value::as_str)
        {
            Some(parent) => name = parent.to_owned(),
            None if name == "release" || name == "bench" => return Ok("3".to_owned()),
            None if name == "dev" || name == "test" => return Ok("0".to_owned()),
            None => return Err(bad(format!("no [profile.{name}] with an opt-level"))),
        }
    }
    Err(bad(format!("profile `{profile}` inherits in a circle")))
}

impl SessionCheck {
    /// The flat record of [`VerifySummary`], with the build's `profile` (see
    /// [`profile_opt_level`]).
    #[must_use]
    pub fn summary(&self, profile: &str) -> VerifySummary {
        let m = &self.measures;
        let t = m.throughput.as_ref();
        VerifySummary {
            board: self.board.name().to_owned(),
            bit_exact: self.bit_exact(),
            prediction_ok: Some(self.ensure_prediction().is_ok()),
            throughput_model: t.map(|t| t.model.clone()),
            fixed_insn_per_mac: t.map(|t| t.fixed.per_mac()),
            float_insn_per_mac: t.map(|t| t.float.per_mac()),
            fixed_insn_per_sample: Some(m.fixed.per_sample()),
            float_insn_per_sample: Some(m.float.per_sample()),
            engine_code_bytes: m.flash.engine_code(),
            trainer_bytes: Some(m.ram.trainer),
            engine_stack_bytes: Some(m.ram.engine_stack),
            ram_measured_bytes: Some(m.ram.measured),
            ram_predicted_bytes: m.ram.predicted,
            profile: profile.to_owned(),
        }
    }
}

fn protocol(line: usize, detail: impl Into<String>) -> DeviceError {
    DeviceError::Protocol {
        line,
        detail: detail.into(),
    }
}

/// Builds, runs and checks the calibration session of `board` (see the [module docs](self)).
///
/// # Errors
/// [`DeviceError::Session`] when the session cannot be generated, or its committed files are
/// not current; the build and run errors of [`super::run_board`];
/// [`DeviceError::FirmwareFailed`] for a run that did not finish cleanly;
/// [`DeviceError::Protocol`] for missing records or payloads. Differences between device and
/// host are not errors here: see [`SessionCheck::ensure_bit_exact`].
pub fn verify_board(board: QemuBoard, opts: &VerifyOptions) -> Result<SessionCheck, DeviceError> {
    let session_err = |source| DeviceError::Session {
        board: board.name(),
        source: Box::new(source),
    };
    let session = Session::build(&opts.repo_dir, board.name()).map_err(session_err)?;
    let dir = match &opts.session_dir {
        Some(dir) => {
            session.write(dir).map_err(session_err)?;
            Some(dir.as_path())
        }
        None => {
            session
                .check_current(&session::committed_dir(&opts.boards_dir, board.name()))
                .map_err(session_err)?;
            None
        }
    };
    let elf = match &opts.elf {
        Some(elf) => elf.clone(),
        None => build_firmware_with(board, &opts.boards_dir, dir)?,
    };
    let run = run_elf(board, &elf, opts.timeout)?;
    run.ensure_success()?;
    let host = session::simulate(&session).map_err(session_err)?;
    check_run(board, session, run, host)
}

fn check_run(
    board: QemuBoard,
    session: Session,
    run: DeviceRun,
    host: HostOutcome,
) -> Result<SessionCheck, DeviceError> {
    let mut engine = None;
    let mut throughput = None;
    let mut guards = Vec::new();
    let mut stacks = Vec::new();
    for (i, line) in run.lines.iter().enumerate() {
        let Some(r) = &line.record else { continue };
        let p = |e: super::record::RecordError| protocol(i, e.0);
        match r.kind.as_str() {
            "engine" => {
                if engine.is_some() {
                    return Err(protocol(i, "second `engine` record"));
                }
                engine = Some(EngineRecord {
                    arena: r.unsigned("arena").map_err(p)?,
                    trainer: r.unsigned("trainer").map_err(p)?,
                    float_arena: r.unsigned("float_arena").map_err(p)?,
                    twin: r.unsigned("twin").map_err(p)?,
                    blob: r.unsigned("blob").map_err(p)?,
                    forward_macs: r.unsigned("fwd_macs").map_err(p)?,
                    backward_macs: r.unsigned("bwd_macs").map_err(p)?,
                });
            }
            "guard" => guards.push(GuardRecord {
                set: r.text("set").map_err(p)?.to_owned(),
                verdict: r.text("verdict").map_err(p)?.to_owned(),
                before: r.signed("before").map_err(p)?,
                after: r.signed("after").map_err(p)?,
                before_saturations: r.unsigned("before_sat").map_err(p)?,
                after_saturations: r.unsigned("after_sat").map_err(p)?,
                trained: r.unsigned("trained").map_err(p)?,
                steps: r.unsigned("steps").map_err(p)?,
                updates: r.unsigned("updates").map_err(p)?,
            }),
            "tput" => {
                if throughput.is_some() {
                    return Err(protocol(i, "second `tput` record"));
                }
                throughput = Some(ThroughputRecord {
                    inputs: r.unsigned("inputs").map_err(p)?,
                    outputs: r.unsigned("outputs").map_err(p)?,
                    params: r.unsigned("params").map_err(p)?,
                    pool: r.unsigned("pool").map_err(p)?,
                    samples: r.unsigned("samples").map_err(p)?,
                    macs: r.unsigned("macs").map_err(p)?,
                    arena: r.unsigned("arena").map_err(p)?,
                    float_arena: r.unsigned("float_arena").map_err(p)?,
                });
            }
            "stack" => stacks.push(StackRecord {
                phase: r.text("phase").map_err(p)?.to_owned(),
                entry: r.unsigned("entry").map_err(p)?,
                peak: r.unsigned("peak").map_err(p)?,
            }),
            _ => {}
        }
    }
    let end = run.lines.len();
    let engine = engine.ok_or_else(|| protocol(end, "no `engine` record"))?;
    let desc = &session.desc;
    let layout = payload_layout(desc, &host.plan, false);
    let float_layout = payload_layout(desc, &host.float_plan, true);

    let blob = |name: &str| -> Result<Vec<u8>, DeviceError> {
        run.report
            .blob(name)
            .map(|b| b.bytes.clone())
            .ok_or_else(|| protocol(end, format!("no `{name}` payload")))
    };
    let mut payloads = vec![
        compare(
            "calib_weights",
            &blob("calib_weights")?,
            &host.calibration.weights,
            Some(&layout),
        ),
        compare(
            "calib_checkpoint",
            &blob("calib_checkpoint")?,
            &host.calibration.checkpoint,
            None,
        ),
        compare(
            "faulty_weights",
            &blob("faulty_weights")?,
            &host.faulty.weights,
            Some(&layout),
        ),
        compare(
            "faulty_checkpoint",
            &blob("faulty_checkpoint")?,
            &host.faulty.checkpoint,
            None,
        ),
        compare(
            "f32_weights",
            &blob("f32_weights")?,
            &host.float_weights,
            Some(&float_layout),
        ),
    ];

    match (&session.throughput.spec, &host.throughput, &throughput) {
        (Some(spec), Some(h), Some(_)) => {
            payloads.push(compare(
                "tput_weights",
                &blob("tput_weights")?,
                &h.weights,
                Some(&payload_layout(&spec.desc, &spec.plan, false)),
            ));
            payloads.push(compare(
                "tput_f32_weights",
                &blob("tput_f32_weights")?,
                &h.float_weights,
                Some(&payload_layout(&spec.desc, &spec.float_plan, true)),
            ));
        }
        (Some(_), _, None) => return Err(protocol(end, "no `tput` record")),
        (None, _, Some(_)) => {
            return Err(protocol(
                end,
                "a `tput` record, but the session has no throughput phase for this board",
            ))
        }
        (Some(_), None, Some(_)) => {
            return Err(protocol(
                end,
                "the host did not simulate the throughput phase",
            ))
        }
        (None, _, None) => {}
    }

    let mut guard_diffs = Vec::new();
    for (set, h) in [("calib", &host.calibration), ("faulty", &host.faulty)] {
        let Some(d) = guards.iter().find(|g| g.set == set) else {
            return Err(protocol(end, format!("no `guard` record for set `{set}`")));
        };
        let verdict = match h.report.verdict {
            hone_core::guard::Verdict::Accept => "accept",
            hone_core::guard::Verdict::Reject(hone_core::guard::Rejection::LossRose { .. }) => {
                "reject-loss"
            }
            hone_core::guard::Verdict::Reject(hone_core::guard::Rejection::Saturations {
                ..
            }) => "reject-saturation",
        };
        let host_fields: [(&str, String); 9] = [
            ("verdict", verdict.to_owned()),
            ("before", h.report.before.mean_loss.0.to_string()),
            ("after", h.report.after.mean_loss.0.to_string()),
            ("before_sat", h.report.before.saturations.to_string()),
            ("after_sat", h.report.after.saturations.to_string()),
            ("trained", h.report.trained.to_string()),
            ("steps", h.steps.to_string()),
            ("updates", h.updates.to_string()),
            ("set", set.to_owned()),
        ];
        let device_fields = [
            d.verdict.clone(),
            d.before.to_string(),
            d.after.to_string(),
            d.before_saturations.to_string(),
            d.after_saturations.to_string(),
            d.trained.to_string(),
            d.steps.to_string(),
            d.updates.to_string(),
            d.set.clone(),
        ];
        for ((name, host_value), device_value) in host_fields.iter().zip(device_fields) {
            if *host_value != device_value {
                guard_diffs.push(format!(
                    "guard `{set}` {name}: device {device_value}, host {host_value}"
                ));
            }
        }
    }

    let overhead = memplan::MEASURED_OVERHEADS
        .iter()
        .find(|m| m.board == board.name())
        .copied();
    let mut measures = measure(&session, &host, &run, &engine, &stacks, overhead.as_ref())?;
    measures.throughput = match &throughput {
        Some(t) => Some(measure_throughput(&session, &run, t, &stacks)?),
        None => None,
    };
    Ok(SessionCheck {
        board,
        session,
        run,
        host,
        engine,
        guards,
        stacks,
        throughput,
        payloads,
        guard_diffs,
        measures,
        overhead,
    })
}

/// Compares two payloads; with a layout, differences are named by layer, tensor and index.
fn compare(name: &str, device: &[u8], host: &[u8], layout: Option<&[TensorSpan]>) -> PayloadCheck {
    let mut diffs = Vec::new();
    if device.len() != host.len() {
        diffs.push(format!(
            "length: device {} bytes, host {} bytes",
            device.len(),
            host.len()
        ));
    }
    match layout {
        Some(layout) => {
            for span in layout {
                let w = span.value_bytes();
                for i in 0..span.elems {
                    let at = span.offset + i * w;
                    let (Some(d), Some(h)) = (device.get(at..at + w), host.get(at..at + w)) else {
                        continue;
                    };
                    if d != h && diffs.len() < MAX_DIFFS {
                        diffs.push(format!(
                            "layer {} {}[{i}]: device {}, host {}",
                            span.layer,
                            span.tensor,
                            show_value(span, d),
                            show_value(span, h)
                        ));
                    }
                }
            }
        }
        None => {
            for (i, (d, h)) in device.iter().zip(host).enumerate() {
                if d != h && diffs.len() < MAX_DIFFS {
                    diffs.push(format!("byte {i}: device {d:#04x}, host {h:#04x}"));
                }
            }
        }
    }
    PayloadCheck {
        name: name.to_owned(),
        device_len: device.len(),
        host_len: host.len(),
        device_crc: crc32(device),
        host_crc: crc32(host),
        device_sha256: sha256_hex(device),
        host_sha256: sha256_hex(host),
        diffs,
    }
}

/// One value of a payload as text: the raw integer, or the `f32` with its bits.
fn show_value(span: &TensorSpan, bytes: &[u8]) -> String {
    let mut b = [0u8; 4];
    b[..bytes.len().min(4)].copy_from_slice(&bytes[..bytes.len().min(4)]);
    match span.word {
        Some(hone_core::num::Word::I8) => (b[0] as i8).to_string(),
        Some(hone_core::num::Word::I16) => i16::from_le_bytes([b[0], b[1]]).to_string(),
        Some(hone_core::num::Word::I32) => i32::from_le_bytes(b).to_string(),
        None => {
            let v = f32::from_le_bytes(b);
            format!("{v:e} ({:#010x})", v.to_bits())
        }
    }
}

fn span_rate(run: &DeviceRun, name: &str, samples: u64) -> Result<Rate, DeviceError> {
    let s = run
        .report
        .span(name)
        .ok_or_else(|| protocol(run.lines.len(), format!("no `{name}` span")))?;
    Ok(Rate {
        instructions: s.units,
        samples,
        macs: s.work,
    })
}

fn measure(
    session: &Session,
    host: &HostOutcome,
    run: &DeviceRun,
    engine: &EngineRecord,
    stacks: &[StackRecord],
    overhead: Option<&MeasuredOverhead>,
) -> Result<Measures, DeviceError> {
    let end = run.lines.len();
    let (forward, backward) = training_macs(&host.plan);
    if (forward, backward) != (engine.forward_macs, engine.backward_macs) {
        return Err(protocol(
            end,
            format!(
                "the firmware counts {}+{} multiply-accumulates per sample, the host {forward}+{backward}",
                engine.forward_macs, engine.backward_macs
            ),
        ));
    }
    let steps = u64::from(session::PASSES) * session.calibration.len() as u64;
    let fixed = span_rate(run, "calib_train", steps)?;
    let float = span_rate(run, "f32_train", steps)?;
    let eval = span_rate(run, "calib_eval_before", session.holdout.len() as u64)?;
    for r in [&fixed, &float] {
        if r.macs != steps * (forward + backward) {
            return Err(protocol(
                end,
                format!(
                    "a training span counts {} multiply-accumulates, expected {}",
                    r.macs,
                    steps * (forward + backward)
                ),
            ));
        }
    }
    let dot = |name: &str| -> Result<Rate, DeviceError> {
        let d = run
            .report
            .dots
            .iter()
            .find(|d| d.name == name)
            .ok_or_else(|| protocol(end, format!("no `{name}` dot record")))?;
        span_rate(run, name, d.reps)
    };
    let dot_i8 = dot("dot_i8")?;
    let dot_i16 = dot("dot_i16")?;

    let stack = |phase: &str| -> Result<&StackRecord, DeviceError> {
        stacks
            .iter()
            .find(|s| s.phase == phase)
            .ok_or_else(|| protocol(end, format!("no `stack` record for `{phase}`")))
    };
    let (calib, faulty, twin) = (stack("calib")?, stack("faulty")?, stack("f32")?);
    let mem = run
        .report
        .memory
        .ok_or_else(|| protocol(end, "no `mem` record"))?;
    let fixed_peak = calib.peak.max(faulty.peak);
    let entry = calib.entry;
    let arena = u64::from(host.plan.ram_bytes);
    if engine.arena != arena || engine.float_arena != u64::from(host.float_plan.ram_bytes) {
        return Err(protocol(
            end,
            format!(
                "arenas: firmware {} and {} bytes, host plans {} and {}",
                engine.arena, engine.float_arena, arena, host.float_plan.ram_bytes
            ),
        ));
    }
    let engine_stack = fixed_peak
        .saturating_sub(entry)
        .saturating_sub(arena)
        .saturating_sub(engine.trainer);
    let predicted = overhead.map(|o| {
        u64::from(o.firmware_static_bytes)
            + u64::from(o.firmware_stack_bytes)
            + arena
            + u64::from(o.trainer_bytes)
            + u64::from(o.engine_stack_bytes)
    });
    let ram = RamFigures {
        static_ram: mem.static_ram,
        entry,
        fixed_peak,
        float_peak: twin.peak,
        arena,
        float_arena: engine.float_arena,
        trainer: engine.trainer,
        twin: engine.twin,
        engine_stack,
        measured: mem.static_ram + fixed_peak,
        measured_float: mem.static_ram + twin.peak,
        predicted,
        run_peak: mem.stack_peak,
        stack_size: mem.stack_size,
    };
    let bytes = std::fs::read(&run.elf).map_err(|source| DeviceError::Io {
        path: run.elf.clone(),
        source,
    })?;
    let flash = flash_figures(&bytes, &run.elf)?;
    Ok(Measures {
        macs_per_sample: forward + backward,
        fixed,
        eval,
        float,
        dot_i8,
        dot_i16,
        ram,
        flash,
        throughput: None,
    })
}

/// The throughput phase's figures, after checking its record against the host's spec.
fn measure_throughput(
    session: &Session,
    run: &DeviceRun,
    record: &ThroughputRecord,
    stacks: &[StackRecord],
) -> Result<ThroughputFigures, DeviceError> {
    let end = run.lines.len();
    let spec = session
        .throughput
        .spec
        .as_ref()
        .ok_or_else(|| protocol(end, "no throughput phase in the session"))?;
    let (inputs, outputs) = spec.sample_values();
    let (forward, backward) = training_macs(&spec.plan);
    let macs = spec.plan.training_macs();
    let want = ThroughputRecord {
        inputs: inputs as u64,
        outputs: outputs as u64,
        params: spec.param_values() as u64,
        pool: u64::from(spec.pool),
        samples: spec.samples(),
        macs,
        arena: u64::from(spec.plan.ram_bytes),
        float_arena: u64::from(spec.float_plan.ram_bytes),
    };
    if *record != want || forward + backward != macs {
        return Err(protocol(
            end,
            format!(
                "the `tput` record is {record:?}, the host's spec gives {want:?} \
                 ({forward}+{backward} multiply-accumulates per sample)"
            ),
        ));
    }
    let fixed = span_rate(run, "tput_train", spec.samples())?;
    let float = span_rate(run, "tput_f32_train", spec.samples())?;
    for r in [&fixed, &float] {
        if r.macs != spec.samples() * macs {
            return Err(protocol(
                end,
                format!(
                    "a throughput span counts {} multiply-accumulates, expected {}",
                    r.macs,
                    spec.samples() * macs
                ),
            ));
        }
    }
    let peak = |phase: &str| -> Result<u64, DeviceError> {
        stacks
            .iter()
            .find(|s| s.phase == phase)
            .map(|s| s.peak)
            .ok_or_else(|| protocol(end, format!("no `stack` record for `{phase}`")))
    };
    let mem = run
        .report
        .memory
        .ok_or_else(|| protocol(end, "no `mem` record"))?;
    Ok(ThroughputFigures {
        model: spec.name(),
        macs_per_sample: macs,
        fixed,
        float,
        arena: want.arena,
        float_arena: want.float_arena,
        fixed_ram: mem.static_ram + peak("tput")?,
        float_ram: mem.static_ram + peak("tput_f32")?,
        predicted: spec.predicted,
        board_ram: mem.static_ram + mem.stack_size,
    })
}

/// Which part of the firmware a symbol belongs to, from its mangled name.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CodePart {
    /// The fixed-point engine.
    Engine,
    /// The float twin.
    Float,
    /// Compiler runtime helpers.
    Runtime,
    /// Everything else.
    Other,
}

/// Classifies a (legacy- or v0-mangled) symbol name. Crate names appear in both manglings
/// with their length in front (`9hone_core`) or, inside trait-impl paths, followed by `..`.
#[must_use]
pub fn code_part(name: &str) -> CodePart {
    let has = |krate: &str| {
        name.contains(&format!("{}{krate}", krate.len())) || name.contains(&format!("{krate}.."))
    };
    let fw_engine = "7hone_fw5train6engine";
    if name.contains("9hone_core5float")
        || name.contains("hone_core..float")
        || has("micromath")
        || name.contains(&format!("{fw_engine}8new_twin"))
        || name.contains(&format!("{fw_engine}10train_twin"))
        || name.contains("9hone_core7session10train_twin")
        || name.contains("9hone_core7session12twin_trained")
    {
        return CodePart::Float;
    }
    // The lean build's calls into the core (boards/lean-session), out of line as the
    // full firmware's are.
    let lean_engine = "17hone_lean_session6engine";
    if has("hone_core")
        || name.contains(fw_engine)
        || name.contains(lean_engine)
        || ["postcard", "serde", "heapless", "crc", "fixed", "bytemuck"]
            .iter()
            .any(|k| has(k))
    {
        return CodePart::Engine;
    }
    if name.starts_with("__")
        || has("compiler_builtins")
        || matches!(name, "memcpy" | "memmove" | "memset" | "memcmp" | "bcmp")
    {
        return CodePart::Runtime;
    }
    CodePart::Other
}

/// Sizes the firmware's code by symbol (see [`code_part`]).
///
/// # Errors
/// [`DeviceError::Elf`] when the image cannot be parsed.
pub fn flash_figures(elf: &[u8], path: &Path) -> Result<FlashFigures, DeviceError> {
    let file = object::File::parse(elf).map_err(|e| DeviceError::Elf {
        path: path.to_owned(),
        detail: e.to_string(),
    })?;
    let mut f = FlashFigures::default();
    for section in file.sections() {
        if section.name() == Ok(".text") {
            f.text_section = section.size();
        }
    }
    for sym in file.symbols() {
        let (Ok(name), Some(index)) = (sym.name(), sym.section_index()) else {
            continue;
        };
        if sym.size() == 0 {
            continue;
        }
        let Ok(section) = file.section_by_index(index) else {
            continue;
        };
        let (Ok(sname), kind) = (section.name(), section.kind()) else {
            continue;
        };
        let part = code_part(name);
        let size = sym.size();
        match (sname, kind) {
            (".text", _) | (_, SectionKind::Text) => match part {
                CodePart::Engine => f.engine_text += size,
                CodePart::Float => f.float_text += size,
                CodePart::Runtime => f.runtime_text += size,
                CodePart::Other => f.other_text += size,
            },
            (".rodata", _) if part == CodePart::Engine => f.engine_rodata += size,
            _ => {}
        }
    }
    Ok(f)
}

impl SessionCheck {
    /// Whether every payload and guard figure equals the host's.
    #[must_use]
    pub fn bit_exact(&self) -> bool {
        self.payloads.iter().all(PayloadCheck::equal) && self.guard_diffs.is_empty()
    }

    /// Checks that the device ended exactly where the host did.
    ///
    /// # Errors
    /// [`DeviceError::Mismatch`] with every difference, readable.
    pub fn ensure_bit_exact(&self) -> Result<(), DeviceError> {
        if self.bit_exact() {
            return Ok(());
        }
        let mut detail = String::new();
        for p in self.payloads.iter().filter(|p| !p.equal()) {
            let _ = writeln!(
                detail,
                "payload `{}`: device {} bytes SHA-256 {}, host {} bytes SHA-256 {}",
                p.name, p.device_len, p.device_sha256, p.host_len, p.host_sha256
            );
            for d in &p.diffs {
                let _ = writeln!(detail, "  {d}");
            }
        }
        for d in &self.guard_diffs {
            let _ = writeln!(detail, "{d}");
        }
        Err(DeviceError::Mismatch {
            board: self.board.name(),
            detail,
        })
    }

    /// Checks the memory prediction against the measurement: the measured RAM while training
    /// must not exceed the prediction (plan arena + measured-overhead table), and the
    /// prediction must be at most 5 % above it; the engine's code likewise against the table.
    /// On boards with a throughput phase, its RAM in both arithmetics must not exceed the
    /// prediction the model was chosen with, and must leave [`MARGIN_BYTES`] free.
    ///
    /// # Errors
    /// [`DeviceError::Prediction`] naming the figure and both values, and the table row to
    /// update; also when the table has no row for this board.
    pub fn ensure_prediction(&self) -> Result<(), DeviceError> {
        let board = self.board.name();
        let err = |detail: String| DeviceError::Prediction { board, detail };
        let o = self.overhead.ok_or_else(|| {
            err("the measured-overhead table (host-cli/src/memplan.rs) has no row for it".into())
        })?;
        let r = &self.measures.ram;
        let predicted = r.predicted.unwrap_or(0);
        let mut problems = Vec::new();
        if !within(r.measured, predicted) {
            problems.push(format!(
                "RAM while training: measured {} B (static {} + stack {}), predicted {} B \
                 (firmware {} + {} stack, arena {}, trainer {}, engine stack {})",
                r.measured,
                r.static_ram,
                r.fixed_peak,
                predicted,
                o.firmware_static_bytes,
                o.firmware_stack_bytes,
                r.arena,
                o.trainer_bytes,
                o.engine_stack_bytes
            ));
        }
        let code = self.measures.flash.engine_code();
        if !within(code, u64::from(o.engine_code_bytes)) {
            problems.push(format!(
                "engine code: measured {code} B, table {} B",
                o.engine_code_bytes
            ));
        }
        let throughput = self.throughput_problems();
        if problems.is_empty() && throughput.is_empty() {
            return Ok(());
        }
        let mut detail = Vec::new();
        if !problems.is_empty() {
            detail.push(format!(
                "{}; the measured figures now are: trainer {} B, engine stack {} B, engine code {} B, \
                 firmware static {} B, firmware stack {} B (update the row and its provenance, see \
                 boards/README.md)",
                problems.join("; "),
                r.trainer,
                r.engine_stack,
                code,
                r.static_ram,
                r.entry
            ));
        }
        detail.extend(throughput);
        Err(err(detail.join("; ")))
    }

    /// The throughput phase's RAM against the generator's prediction: each part's measured
    /// RAM must not exceed what the model was chosen with, and must leave [`MARGIN_BYTES`] of
    /// the board's RAM free. One line per problem; none for a board without the phase.
    fn throughput_problems(&self) -> Vec<String> {
        let Some(t) = &self.measures.throughput else {
            return Vec::new();
        };
        let mut problems = Vec::new();
        for (part, measured, predicted) in [
            ("fixed point", t.fixed_ram, t.predicted.fixed),
            ("f32", t.float_ram, t.predicted.float),
        ] {
            if measured > predicted || measured + MARGIN_BYTES > t.board_ram {
                problems.push(format!(
                    "throughput model {} in {part}: measured {measured} B, predicted {predicted} B, \
                     board RAM {} B with a margin of {MARGIN_BYTES} B (the prediction is made in \
                     host-cli/src/device/throughput.rs)",
                    t.model, t.board_ram
                ));
            }
        }
        problems
    }

    /// The figures as text: digests, verdicts, instructions, RAM and flash.
    #[must_use]
    pub fn render(&self) -> String {
        let m = &self.measures;
        let mut s = String::new();
        let _ = writeln!(
            s,
            "{} ({}), model {}",
            self.board,
            self.board.target(),
            self.session.spec.config
        );
        for p in &self.payloads {
            let _ = writeln!(
                s,
                "  {:<17} {:>4} B  device SHA-256 {}  {}",
                p.name,
                p.device_len,
                p.device_sha256,
                if p.equal() { "equal" } else { "DIFFERENT" }
            );
            let _ = writeln!(
                s,
                "  {:<17} {:>4} B  host   SHA-256 {}",
                "", p.host_len, p.host_sha256
            );
            for d in &p.diffs {
                let _ = writeln!(s, "      {d}");
            }
        }
        for g in &self.guards {
            let _ = writeln!(
                s,
                "  guard {:<6}: {}, hold-out loss {:.6} -> {:.6}, {} samples trained, {} updates",
                g.set,
                g.verdict,
                g.before as f64 / f64::from(1u32 << 24),
                g.after as f64 / f64::from(1u32 << 24),
                g.trained,
                g.updates
            );
        }
        for d in &self.guard_diffs {
            let _ = writeln!(s, "      {d}");
        }
        let _ = writeln!(
            s,
            "  instructions: {} MACs per training sample ({} forward + {} backward)",
            m.macs_per_sample, self.engine.forward_macs, self.engine.backward_macs
        );
        let float_kind = if self.board == QemuBoard::Mps2An386 {
            "f32 (FPU)"
        } else {
            "f32 (soft float)"
        };
        for (what, r) in [("fixed point", &m.fixed), (float_kind, &m.float)] {
            let _ = writeln!(
                s,
                "    {what:<16} {:>9.1} insn/sample {:>8.1} insn/MAC",
                r.per_sample(),
                r.per_mac()
            );
        }
        let _ = writeln!(
            s,
            "    {:<16} {:>9.1} insn/sample {:>8.1} insn/MAC (forward only)",
            "hold-out eval",
            m.eval.per_sample(),
            m.eval.per_mac()
        );
        let _ = writeln!(
            s,
            "    ISA floor        dot i16 {:.3} insn/MAC, dot i8 {:.3} insn/MAC",
            m.dot_i16.per_mac(),
            m.dot_i8.per_mac()
        );
        match (&m.throughput, &self.session.throughput.spec) {
            (Some(t), Some(spec)) => {
                let train = &spec.desc.train;
                let momentum = if train.momentum.is_zero() {
                    "no momentum".to_owned()
                } else {
                    format!("momentum {}", train.momentum.to_f64())
                };
                let _ = writeln!(
                    s,
                    "  throughput: model {} (dense, ReLU, dense; squared error, SGD batch {}, {momentum}), \
                     {} MACs per training sample, {} samples trained ({} drawn on the board)",
                    t.model, train.batch, t.macs_per_sample, t.fixed.samples, spec.pool
                );
                for (what, r) in [("fixed point", &t.fixed), (float_kind, &t.float)] {
                    let _ = writeln!(
                        s,
                        "    {what:<16} {:>9.1} insn/sample {:>8.1} insn/MAC",
                        r.per_sample(),
                        r.per_mac()
                    );
                }
                let _ = writeln!(
                    s,
                    "    RAM: fixed point {} B (arena {}, predicted {}), f32 {} B (arena {}, predicted {}), of {} B",
                    t.fixed_ram,
                    t.arena,
                    t.predicted.fixed,
                    t.float_ram,
                    t.float_arena,
                    t.predicted.float,
                    t.board_ram
                );
            }
            _ => {
                let _ = writeln!(s, "  throughput: no phase on this board");
                for n in &self.session.throughput.notes {
                    let _ = writeln!(s, "    {n}");
                }
            }
        }
        let r = &m.ram;
        let _ = writeln!(
            s,
            "  RAM fixed point: measured {} B = static {} + stack {} (entry {}, arena {}, trainer {}, engine {})",
            r.measured, r.static_ram, r.fixed_peak, r.entry, r.arena, r.trainer, r.engine_stack
        );
        match r.predicted {
            Some(p) => {
                let diff = p as i64 - r.measured as i64;
                let _ = writeln!(
                    s,
                    "    predicted {p} B (plan arena {} + table), difference {diff:+} B ({:+.2} %)",
                    r.arena,
                    diff as f64 * 100.0 / r.measured.max(1) as f64
                );
            }
            None => {
                let _ = writeln!(
                    s,
                    "    no prediction: the overhead table has no row for this board"
                );
            }
        }
        let _ = writeln!(
            s,
            "  RAM f32 twin:    measured {} B = static {} + stack {} (arena {}, twin {})",
            r.measured_float, r.static_ram, r.float_peak, r.float_arena, r.twin
        );
        let _ = writeln!(
            s,
            "  RAM whole run:   {} B = static {} + deepest stack {}, of {} B (static + stack region)",
            r.static_ram + r.run_peak,
            r.static_ram,
            r.run_peak,
            r.static_ram + r.stack_size
        );
        let p = &self.session.plan_report.ram;
        let _ = writeln!(
            s,
            "  plan for {}: arena {} + trainer {} + engine stack {} + firmware {} = {} of {} B: {}",
            self.session.chip.id,
            p.arena_bytes,
            p.engine_state_bytes.map_or("?".into(), |b| b.to_string()),
            p.stack_bytes.map_or("?".into(), |b| b.to_string()),
            p.reserve_bytes,
            p.total_bytes,
            p.budget_bytes,
            if p.fits { "fits" } else { "does not fit" }
        );
        let f = &m.flash;
        let _ = writeln!(
            s,
            "  flash: fixed-point engine {} B (.text {} + .rodata {}), f32 twin .text {} B, runtime helpers {} B, rest {} B, .text section {} B",
            f.engine_code(),
            f.engine_text,
            f.engine_rodata,
            f.float_text,
            f.runtime_text,
            f.other_text,
            f.text_section
        );
        s
    }
}

/// `measured ≤ predicted ≤ measured × 1.05`.
fn within(measured: u64, predicted: u64) -> bool {
    predicted >= measured && predicted * 100 <= measured * 105
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The keys `hone device verify --json` promises (README, "On the devices").
    #[test]
    fn the_summary_has_the_documented_keys() {
        let lean = super::super::lean::LeanCheck {
            exit_code: 0,
            device: "x".into(),
            host: "x".into(),
            loss_before: 2,
            loss_after: 1,
            flash: FlashFigures::default(),
        };
        let v = serde_json::to_value(lean.summary("z")).expect("serialises");
        let keys: Vec<&str> = v
            .as_object()
            .expect("object")
            .keys()
            .map(String::as_str)
            .collect();
        for key in [
            "board",
            "bit_exact",
            "fixed_insn_per_mac",
            "float_insn_per_mac",
            "fixed_insn_per_sample",
            "float_insn_per_sample",
            "engine_code_bytes",
            "trainer_bytes",
            "engine_stack_bytes",
            "ram_measured_bytes",
            "ram_predicted_bytes",
            "profile",
        ] {
            assert!(keys.contains(&key), "missing {key} in {keys:?}");
        }
        assert_eq!(v["bit_exact"], true);
        assert_eq!(v["profile"], "z");
        assert!(v["fixed_insn_per_mac"].is_null());
    }

    #[test]
    fn the_opt_level_is_read_from_the_manifest() {
        let dir = tempfile::tempdir().expect("temp dir");
        let manifest = dir.path().join("Cargo.toml");
        let lean = "[profile.lean]\ninherits = \"release\"\nopt-level = \"z\"\n";
        let bare = "[profile.lean]\ninherits = \"release\"\n";
        for (text, profile, want) in [
            ("[profile.release]\nopt-level = 3\n", "release", "3"),
            ("[profile.release]\nopt-level = \"z\"\n", "release", "z"),
            // Cargo's default for release builds.
            ("[workspace]\n", "release", "3"),
            (lean, "lean", "z"),
            (lean, "release", "3"),
            // A custom profile without its own opt-level takes its parent's.
            (bare, "lean", "3"),
        ] {
            std::fs::write(&manifest, text).expect("write");
            assert_eq!(
                profile_opt_level(dir.path(), profile).expect("parses"),
                want,
                "{text} {profile}"
            );
        }
        for (text, profile) in [
            ("[profile.release\n", "release"),
            ("[workspace]\n", "lean"),
            (
                "[profile.a]\ninherits = \"b\"\n[profile.b]\ninherits = \"a\"\n",
                "a",
            ),
        ] {
            std::fs::write(&manifest, text).expect("write");
            assert!(
                profile_opt_level(dir.path(), profile).is_err(),
                "{text} {profile}"
            );
        }
    }

    #[test]
    fn symbols_are_sorted_into_parts() {
        assert_eq!(
            code_part("_ZN9hone_core5train7Trainer4step17h0123456789abcdefE"),
            CodePart::Engine
        );
        assert_eq!(
            code_part("_ZN65_$LT$f32$u20$as$u20$hone_core..float..real..Real$GT$3exp17h0123E"),
            CodePart::Float
        );
        assert_eq!(
            code_part("_ZN9hone_core5float4Twin$LT$R$GT$4step17h0123E"),
            CodePart::Float
        );
        assert_eq!(
            code_part("_ZN7hone_fw5train6engine5train17h0123E"),
            CodePart::Engine
        );
        assert_eq!(
            code_part("_ZN7hone_fw5train6engine10train_twin17h0123E"),
            CodePart::Float
        );
        assert_eq!(
            code_part("_ZN9hone_core7session10train_twin17h0123E"),
            CodePart::Float
        );
        assert_eq!(
            code_part("_ZN9hone_core7session13calibrate_set17h0123E"),
            CodePart::Engine
        );
        assert_eq!(
            code_part("_ZN17hone_lean_session6engine4step17h0123E"),
            CodePart::Engine
        );
        assert_eq!(
            code_part("_ZN17hone_lean_session3run17h0123E"),
            CodePart::Other
        );
        assert_eq!(code_part("_ZN8postcard2de5take17h0E"), CodePart::Engine);
        assert_eq!(code_part("__aeabi_fmul"), CodePart::Runtime);
        assert_eq!(code_part("memcpy"), CodePart::Runtime);
        assert_eq!(
            code_part("_ZN7hone_fw7session3run17h5e54153ef723123cE"),
            CodePart::Other
        );
        assert_eq!(code_part("_ZN7hone_fw5train3run17h0E"), CodePart::Other);
    }

    #[test]
    fn chips_take_the_row_of_their_core() {
        let row = |id: &str| {
            let chip = crate::chips::find(id).expect("chip in the table");
            memplan::measured_row(chip).map(|m| m.board)
        };
        assert_eq!(row("nrf51822"), Some("microbit"));
        assert_eq!(row("rp2040"), Some("microbit")); // Cortex-M0+ runs the same thumbv6m code
        assert_eq!(row("stm32f103c8"), Some("lm3s6965evb"));
        assert_eq!(row("stm32f411ce"), Some("mps2-an386"));
        assert_eq!(row("fe310"), Some("sifive-e"));
        assert_eq!(row("stm32h743zi"), None); // Cortex-M7: not measured
        let chip = crate::chips::find("nrf51822").expect("chip in the table");
        let o = memplan::measured_overhead(chip).expect("a row");
        assert!(o.source.contains("microbit") && o.stack > 0 && o.state_ram > 0);
        let r = memplan::measured_firmware_reserve(chip).expect("a row");
        assert!(r.ram_bytes > 0 && r.flash_bytes == 0);
    }

    #[test]
    fn prediction_window() {
        assert!(within(1000, 1000));
        assert!(within(1000, 1050));
        assert!(!within(1000, 1051));
        assert!(!within(1000, 999));
    }

    #[test]
    fn payload_differences_are_named() {
        let layout = [
            TensorSpan {
                layer: 0,
                tensor: "weight",
                word: Some(hone_core::num::Word::I16),
                elems: 2,
                offset: 0,
            },
            TensorSpan {
                layer: 2,
                tensor: "bias",
                word: None,
                elems: 1,
                offset: 4,
            },
        ];
        let host = [1, 0, 0xFF, 0xFF, 0, 0, 0x80, 0x3F];
        let same = compare("w", &host, &host, Some(&layout));
        assert!(same.equal() && same.diffs.is_empty());
        let mut device = host;
        device[2] = 0xFE;
        device[7] = 0x40;
        let c = compare("w", &device, &host, Some(&layout));
        assert!(!c.equal());
        assert_eq!(c.diffs[0], "layer 0 weight[1]: device -2, host -1");
        assert!(
            c.diffs[1].starts_with("layer 2 bias[0]: device 4e0 (0x40800000)"),
            "{}",
            c.diffs[1]
        );
        assert!(
            c.diffs[1].ends_with("host 1e0 (0x3f800000)"),
            "{}",
            c.diffs[1]
        );
        let short = compare("c", &host[..3], &host, None);
        assert!(!short.equal());
        assert!(short.diffs[0].starts_with("length"));
    }
}
