//! The on-device calibration session: what each board's firmware trains, the two Rust files
//! it is built from, and the same session simulated on the host with the same core code.
//!
//! A session starts from the demo scenario (see `demo-data/README.md`): a float base model is
//! trained on the factory data and quantized ([`Base::train`]), then exported as `model.rs`
//! ([`crate::export::rust_source`]). `samples.rs` holds the new unit's ten calibration
//! samples, the same inputs with mislabelled targets (the reference values in reverse order,
//! as if typed in from the bottom of the sheet), the forty hold-out samples, the
//! number of passes, the guard's thresholds, the float twin's start and one
//! `hone_fw::train::Session` value that ties them together; then the throughput phase's model
//! for the board, chosen with the memory plan (see [`super::throughput`]).
//!
//! Everything is deterministic: the same repository gives the same files, byte for byte, and
//! [`simulate`] gives the results the device must reproduce bit for bit.
//!
//! The files are committed under `boards/<board>/session/`; [`generate`] rewrites them, and
//! the device tests check that they are current.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use hone_core::blob::{self, BlobBody, ChannelScale, TrainState};
use hone_core::float::{FloatParams, Twin};
use hone_core::guard::{GuardConfig, SessionReport};
use hone_core::layer::Tensor;
use hone_core::model::{ModelDesc, MAX_LAYERS};
use hone_core::num::{QFormat, Word};
use hone_core::plan::Plan;
use hone_core::session::{
    self as core_session, FloatSet, FloatTargets, LastGood, SampleSet, Targets,
};
use hone_core::train::Trainer;

use super::throughput::{self, Choice, ThroughputOutcome};
use crate::chips::{self, Chip};
use crate::config::Config;
use crate::memplan::{self, AdviceOptions, Budget, PlanReport};
use crate::pipeline::Base;
use crate::sim::{OwnedRaw, Prepared, PreparedTargets, QuantParams};

/// The factory data the base model is trained on, relative to the repository.
pub const FACTORY_CSV: &str = "demo-data/soil_factory.csv";
/// The new unit's calibration samples, relative to the repository.
pub const CALIBRATION_CSV: &str = "demo-data/soil_unit_calibration.csv";
/// The new unit's hold-out samples, relative to the repository.
pub const HOLDOUT_CSV: &str = "demo-data/soil_unit_holdout.csv";
/// Passes over the calibration samples, in stored order.
pub const PASSES: u16 = 3;
/// The guard's thresholds.
pub const GUARD: GuardConfig = GuardConfig::DEFAULT;

/// What one board trains.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct BoardSession {
    /// Board folder under `boards/`.
    pub board: &'static str,
    /// Chip of the built-in table whose RAM and flash the plan is checked against.
    pub chip: &'static str,
    /// Model config, relative to the repository.
    pub config: &'static str,
}

/// The boards with a calibration session. The 8-bit setup (bias-only first layer, `i8`
/// weights with `i32` master copies, stochastic rounding of updates, dynamic fixed point) runs
/// on the RISC-V board, so every engine path the 16-bit setup leaves out is also checked on a
/// device.
pub const BOARD_SESSIONS: [BoardSession; 5] = [
    BoardSession {
        board: "lm3s6965evb",
        chip: "lm3s6965",
        config: "configs/soil-moisture.toml",
    },
    BoardSession {
        board: "microbit",
        chip: "nrf51822",
        config: "configs/soil-moisture.toml",
    },
    BoardSession {
        board: "mps2-an386",
        chip: "mps2-an386",
        config: "configs/soil-moisture.toml",
    },
    BoardSession {
        board: "sifive-e",
        chip: "fe310",
        config: "configs/soil-moisture-8bit.toml",
    },
    BoardSession {
        board: "pico",
        chip: "rp2040",
        config: "configs/soil-moisture.toml",
    },
];

/// The session of `board`, if it has one.
#[must_use]
pub fn board_session(board: &str) -> Option<&'static BoardSession> {
    BOARD_SESSIONS.iter().find(|b| b.board == board)
}

/// The repository this library was built from (the parent of `host-cli`).
#[must_use]
pub fn default_repo_dir() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// Where the committed session files of `board` live: `boards/<board>/session`.
#[must_use]
pub fn committed_dir(boards_dir: &Path, board: &str) -> PathBuf {
    boards_dir.join(board).join("session")
}

/// The file names of a session, in the order they are written.
pub const FILES: [&str; 2] = ["model.rs", "samples.rs"];

/// Why a board's session could not be built, written, checked or simulated.
#[derive(Debug, thiserror::Error)]
pub enum SessionError {
    /// The board has no calibration session.
    #[error("no calibration session for board `{board}`; boards with one: {known}")]
    UnknownBoard {
        /// The board asked for.
        board: String,
        /// The boards with a session.
        known: String,
    },
    /// The session's chip is missing from the built-in table.
    #[error("chip `{0}` is not in the built-in table")]
    UnknownChip(&'static str),
    /// The model does not fit the chip by the memory plan.
    #[error("the model of {config} does not fit {chip}: {verdict}")]
    DoesNotFit {
        /// The session's config.
        config: String,
        /// The chip's name.
        chip: String,
        /// The plan's verdict.
        verdict: String,
    },
    /// A session file could not be read or written.
    #[error("{}: {source}", path.display())]
    Io {
        /// The file or folder.
        path: PathBuf,
        /// Operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// A committed session file differs from what the generator writes now.
    #[error(
        "{} is not what the generator writes now (first difference at line {line}); \
         regenerate the board's session files with \
         `cargo run -p hone -- device session --board <board>` (see \
         boards/README.md, \"Session files\")",
        path.display()
    )]
    Stale {
        /// The file.
        path: PathBuf,
        /// First differing line, from 1.
        line: usize,
    },
    /// More samples than a session's count holds.
    #[error("{0} samples: a session holds at most 65535")]
    TooManySamples(usize),
    /// The float twin's training failed.
    #[error("twin: {0}")]
    Twin(#[source] hone_core::Error),
    /// The session's config does not load.
    #[error(transparent)]
    Config(#[from] crate::config::ConfigError),
    /// Training, quantizing or preparing samples failed.
    #[error(transparent)]
    Pipeline(#[from] crate::pipeline::PipelineError),
    /// The model could not be exported.
    #[error(transparent)]
    Export(#[from] crate::export::ExportError),
    /// The memory plan failed.
    #[error(transparent)]
    Plan(#[from] crate::memplan::MemplanError),
    /// The throughput phase could not be set up or simulated.
    #[error(transparent)]
    Throughput(#[from] super::throughput::ThroughputError),
    /// The core refused a step.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
}

/// A board's calibration session, in memory.
#[derive(Clone, Debug)]
pub struct Session {
    /// Which board and setup.
    pub spec: BoardSession,
    /// The chip the plan was checked against.
    pub chip: &'static Chip,
    /// The quantized model description.
    pub desc: ModelDesc,
    /// Its factory parameters.
    pub params: QuantParams,
    /// Input scaling.
    pub scaling: Vec<ChannelScale>,
    /// The factory model blob (the guard's last good weights).
    pub blob: Vec<u8>,
    /// Calibration samples.
    pub calibration: Prepared,
    /// The calibration inputs with mislabelled targets.
    pub faulty: Prepared,
    /// Hold-out samples.
    pub holdout: Prepared,
    /// The float twin's start: the factory parameters in `f32`, per layer.
    pub float_params: Vec<(Vec<f32>, Vec<f32>)>,
    /// Calibration inputs in `f32` (the quantized inputs, exactly), flattened.
    pub float_x: Vec<f32>,
    /// Calibration targets in `f32` (the quantized targets, exactly), flattened; empty for
    /// classification.
    pub float_y: Vec<f32>,
    /// The memory plan report against the chip.
    pub plan_report: PlanReport,
    /// The throughput phase chosen for the chip (see [`throughput::choose`]).
    pub throughput: Choice,
    /// Upper bound of a checkpoint blob's length, bytes.
    pub checkpoint_capacity: usize,
    /// `model.rs`.
    pub model_rs: String,
    /// `samples.rs`.
    pub samples_rs: String,
}

impl Session {
    /// Builds the session of `board` from the repository at `repo`: trains and quantizes the
    /// base model, prepares the samples, checks the memory plan against the board's chip and
    /// renders both files.
    ///
    /// # Errors
    /// [`SessionError`] for an unknown board, unreadable config or data, or a model that does not
    /// fit the chip by the memory plan (with the measured engine overhead where the table has
    /// one for the chip's core).
    pub fn build(repo: &Path, board: &str) -> Result<Session, SessionError> {
        let spec = *board_session(board).ok_or_else(|| SessionError::UnknownBoard {
            board: board.to_owned(),
            known: BOARD_SESSIONS.map(|b| b.board).join(", "),
        })?;
        let chip = chips::find(spec.chip).ok_or(SessionError::UnknownChip(spec.chip))?;
        let config = Config::load(&repo.join(spec.config))?;
        let base = Base::train(config, &repo.join(FACTORY_CSV), &mut |_, _, _| {})?;
        let desc = base.quant.desc.clone();
        let params = base.quant.params.clone();
        let scaling = base.float.scaling.clone();
        let blob = crate::export::model_blob(&desc, &params, &scaling)?;
        let calibration = base.prepare(&repo.join(CALIBRATION_CSV))?;
        let holdout = base.prepare(&repo.join(HOLDOUT_CSV))?;
        let faulty = mislabel(&calibration);

        // The plan against the chip. The engine overhead is the measured one where the table
        // has it; the firmware's own RAM is the reserve.
        let overhead = memplan::measured_overhead(chip);
        let reserve = memplan::measured_firmware_reserve(chip).unwrap_or_default();
        let plan_report = memplan::plan_report(
            &desc,
            &Budget::chip(chip),
            reserve,
            overhead.as_ref(),
            &AdviceOptions::default(),
            None,
        )?;
        if !plan_report.fits {
            return Err(SessionError::DoesNotFit {
                config: spec.config.to_owned(),
                chip: chip.name.to_owned(),
                verdict: plan_report.verdict.to_string(),
            });
        }

        let float_params = params
            .layers
            .iter()
            .zip(desc.layers.iter())
            .map(|((w, b), l)| (to_f32(w, l.weight.value), to_f32(b, l.bias.value)))
            .collect();
        let float_x = calibration
            .xq
            .iter()
            .flat_map(|x| to_f32(x, desc.input_format))
            .collect();
        let float_y = match &calibration.target {
            PreparedTargets::Values { yq, format, .. } => {
                yq.iter().flat_map(|y| to_f32(y, *format)).collect()
            }
            PreparedTargets::Classes(_) => Vec::new(),
        };
        let checkpoint_capacity = checkpoint_capacity(&desc, &params, &scaling)?;
        let throughput = throughput::choose(chip, memplan::measured_row(chip))?;
        let origin = format!(
            "board `{}`, {} trained on {FACTORY_CSV} by hone_host::device::session",
            spec.board, spec.config
        );
        let model_rs = crate::export::rust_source(&desc, &params, &scaling, &origin)?;
        let mut s = Session {
            spec,
            chip,
            desc,
            params,
            scaling,
            blob,
            calibration,
            faulty,
            holdout,
            float_params,
            float_x,
            float_y,
            plan_report,
            throughput,
            checkpoint_capacity,
            model_rs,
            samples_rs: String::new(),
        };
        s.samples_rs = render_samples(&s);
        Ok(s)
    }

    /// The factory values of the trained tensors, laid out as a weights payload: what the
    /// device must send after a rollback.
    ///
    /// # Errors
    /// A message if the model does not plan.
    pub fn factory_weights(&self) -> Result<Vec<u8>, SessionError> {
        let plan = Plan::of(&self.desc)?;
        let mut out = Vec::new();
        for span in payload_layout(&self.desc, &plan, false) {
            let (w, b) = &self.params.layers[span.layer];
            let raw = if span.tensor == "weight" {
                w.raw()
            } else {
                b.raw()
            };
            let mut bytes = vec![0u8; raw.len() * raw.word().bytes()];
            raw.write_le(&mut bytes);
            out.extend_from_slice(&bytes);
        }
        Ok(out)
    }

    /// The two files as `(name, text)`.
    #[must_use]
    pub fn files(&self) -> [(&'static str, &str); 2] {
        [
            (FILES[0], self.model_rs.as_str()),
            (FILES[1], self.samples_rs.as_str()),
        ]
    }

    /// Writes both files into `dir` (created if missing). A file whose contents are already
    /// equal is left alone, so cargo sees no change. Returns the paths written.
    ///
    /// # Errors
    /// A message naming the file that could not be written.
    pub fn write(&self, dir: &Path) -> Result<Vec<PathBuf>, SessionError> {
        std::fs::create_dir_all(dir).map_err(|source| SessionError::Io {
            path: dir.to_path_buf(),
            source,
        })?;
        let mut written = Vec::new();
        for (name, text) in self.files() {
            let path = dir.join(name);
            if std::fs::read(&path).ok().as_deref() == Some(text.as_bytes()) {
                continue;
            }
            hone_report::fsutil::write_atomic(&path, text.as_bytes()).map_err(|source| {
                SessionError::Io {
                    path: path.to_path_buf(),
                    source,
                }
            })?;
            written.push(path);
        }
        Ok(written)
    }

    /// Checks that `dir` holds exactly this session's files.
    ///
    /// # Errors
    /// A message naming the first file that is missing or differs, and the command that
    /// regenerates it.
    pub fn check_current(&self, dir: &Path) -> Result<(), SessionError> {
        for (name, text) in self.files() {
            let path = dir.join(name);
            let on_disk = std::fs::read_to_string(&path).map_err(|source| SessionError::Io {
                path: path.to_path_buf(),
                source,
            })?;
            if on_disk != text {
                let line = on_disk
                    .lines()
                    .zip(text.lines())
                    .position(|(a, b)| a != b)
                    .map_or_else(
                        || on_disk.lines().count().min(text.lines().count()) + 1,
                        |i| i + 1,
                    );
                return Err(SessionError::Stale { path, line });
            }
        }
        Ok(())
    }
}

/// Writes the session files of `board` into `dir`, built from this source tree (see
/// [`Session::build`] and [`Session::write`]). Returns the paths that changed.
///
/// # Errors
/// As [`Session::build`] and [`Session::write`].
pub fn generate(dir: &Path, board: &str) -> Result<Vec<PathBuf>, SessionError> {
    Session::build(&default_repo_dir(), board)?.write(dir)
}

/// The same samples with the targets in reverse order.
fn mislabel(p: &Prepared) -> Prepared {
    let mut f = p.clone();
    match &mut f.target {
        PreparedTargets::Values { y, yq, .. } => {
            let reversed: Vec<usize> = (0..y.len()).rev().collect();
            *y = y.select(&reversed);
            yq.reverse();
        }
        PreparedTargets::Classes(l) => l.reverse(),
    }
    f
}

/// The real values of `raw` in `fmt`, as `f32` (exact for `i8` and `i16`; nearest for `i32`).
fn to_f32(raw: &OwnedRaw, fmt: QFormat) -> Vec<f32> {
    let r = raw.raw();
    (0..r.len()).map(|i| fmt.to_f32(r.at(i))).collect()
}

/// The length of a checkpoint of this model with the largest training state: every counter at
/// its maximum, so the postcard varints take their longest form.
fn checkpoint_capacity(
    desc: &ModelDesc,
    params: &QuantParams,
    scaling: &[ChannelScale],
) -> Result<usize, SessionError> {
    let plan = Plan::of(desc)?;
    let mut arena = vec![0u32; plan.ram_words()];
    let views = params.views();
    let t = Trainer::new(desc, &plan, &mut arena, &views)?;
    let body = t.checkpoint_body(scaling)?;
    let worst = BlobBody {
        state: Some(TrainState {
            steps: u32::MAX,
            updates: u32::MAX,
            rng: [u32::MAX; 4],
            fracs: [[u8::MAX; 4]; MAX_LAYERS],
            window: [[u32::MAX; _]; MAX_LAYERS],
        }),
        ..body
    };
    Ok(blob::encoded_len(&worst)?)
}

fn word_type(w: Word) -> &'static str {
    match w {
        Word::I8 => "i8",
        Word::I16 => "i16",
        Word::I32 => "i32",
    }
}

fn array<T: std::fmt::Debug>(out: &mut String, name: &str, ty: &str, values: &[T]) {
    let per_line = if ty == "f32" { 8 } else { 16 };
    let _ = write!(out, "pub static {name}: [{ty}; {}] = [", values.len());
    for (i, v) in values.iter().enumerate() {
        if i % per_line == 0 {
            out.push_str("\n    ");
        } else {
            out.push(' ');
        }
        let _ = write!(out, "{v:?},");
    }
    out.push_str("\n];\n");
}

/// The quantized values of every sample, flattened, as `i32`.
fn flat(rows: &[OwnedRaw]) -> (Word, Vec<i32>) {
    let word = rows.first().map_or(Word::I16, |r| r.raw().word());
    let values = rows
        .iter()
        .flat_map(|r| {
            let raw = r.raw();
            (0..raw.len()).map(move |i| raw.at(i))
        })
        .collect();
    (word, values)
}

fn int_array(out: &mut String, name: &str, word: Word, values: &[i32]) {
    array(out, name, word_type(word), values);
}

/// Writes the arrays of one sample set and returns the `SampleSet` expression.
fn sample_set(out: &mut String, prefix: &str, p: &Prepared, x_name: Option<&str>) -> String {
    let x = match x_name {
        Some(name) => name.to_owned(),
        None => {
            let (word, values) = flat(&p.xq);
            let name = format!("{prefix}_X");
            int_array(out, &name, word, &values);
            name
        }
    };
    let x_word = p.xq.first().map_or(Word::I16, |r| r.raw().word());
    let y = match &p.target {
        PreparedTargets::Values { yq, format, .. } => {
            let (word, values) = flat(yq);
            let name = format!("{prefix}_Y");
            int_array(out, &name, word, &values);
            format!(
                "hone_fw::train::Targets::Values(hone_core::layer::Tensor {{ raw: hone_core::num::Raw::{}(&{name}), fmt: {} }})",
                crate::export::word(word),
                crate::export::qf(*format)
            )
        }
        PreparedTargets::Classes(labels) => {
            let name = format!("{prefix}_LABELS");
            array(out, &name, "u16", labels);
            format!("hone_fw::train::Targets::Classes(&{name})")
        }
    };
    format!(
        "hone_fw::train::SampleSet {{\n        count: {},\n        x: hone_core::num::Raw::{}(&{x}),\n        y: {y},\n    }}",
        p.len(),
        crate::export::word(x_word)
    )
}

/// `samples.rs`: everything of the session besides the model.
fn render_samples(s: &Session) -> String {
    let mut out = String::new();
    let _ = writeln!(
        out,
        "// Generated by hone_host::device::session for board `{}`: the calibration session of\n\
         // {} ({} calibration samples from {CALIBRATION_CSV},\n\
         // the same with mislabelled targets, {} hold-out samples from {HOLDOUT_CSV}).\n\
         // Regenerate rather than edit (see boards/README.md). Included after `model.rs`.\n",
        s.spec.board,
        s.spec.config,
        s.calibration.len(),
        s.holdout.len()
    );
    let _ = writeln!(out, "/// Passes over the calibration samples.");
    let _ = writeln!(out, "pub const PASSES: u16 = {PASSES};\n");

    let calib = sample_set(&mut out, "CALIB", &s.calibration, None);
    let faulty = sample_set(&mut out, "FAULTY", &s.faulty, Some("CALIB_X"));
    let holdout = sample_set(&mut out, "HOLDOUT", &s.holdout, None);

    let _ = writeln!(
        out,
        "\n// The float twin: the quantized inputs, targets and factory parameters as `f32`."
    );
    array(&mut out, "CALIB_XF", "f32", &s.float_x);
    let float_y = if s.calibration.is_classification() {
        "hone_fw::train::FloatTargets::Classes(&CALIB_LABELS)".to_owned()
    } else {
        array(&mut out, "CALIB_YF", "f32", &s.float_y);
        "hone_fw::train::FloatTargets::Values(&CALIB_YF)".to_owned()
    };
    let mut entries = Vec::new();
    for (k, (l, (w, b))) in s.desc.layers.iter().zip(&s.float_params).enumerate() {
        if !l.kind.has_params() {
            entries.push("hone_core::float::FloatParams::NONE".to_owned());
            continue;
        }
        array(&mut out, &format!("FW{k}"), "f32", w);
        array(&mut out, &format!("FB{k}"), "f32", b);
        entries.push(format!(
            "hone_core::float::FloatParams {{ weight: &FW{k}, bias: &FB{k} }}"
        ));
    }
    let _ = writeln!(
        out,
        "pub static FLOAT_PARAMS: [hone_core::float::FloatParams<'static, f32>; {}] = [",
        entries.len()
    );
    for e in &entries {
        let _ = writeln!(out, "    {e},");
    }
    let _ = writeln!(out, "];");
    let _ = writeln!(
        out,
        "pub const FLOAT_PLAN: hone_core::plan::Plan =\n    match hone_core::plan::Plan::new_float(INPUT, &LAYERS, LOSS, &TRAIN, 4) {{\n        Ok(p) => p,\n        Err(_) => panic!(\"the exported model has no float plan\"),\n    }};"
    );
    let _ = writeln!(
        out,
        "pub const FLOAT_ARENA_WORDS: usize = FLOAT_PLAN.ram_words();"
    );
    let _ = writeln!(
        out,
        "\n/// Bytes of the buffer a checkpoint is written into (the longest checkpoint of this model).\npub const CHECKPOINT_BYTES: usize = {};",
        s.checkpoint_capacity
    );
    let g = GUARD;
    let _ = writeln!(
        out,
        "\npub static SESSION: hone_fw::train::Session<'static> = hone_fw::train::Session {{\n    \
         input: INPUT,\n    input_format: INPUT_FORMAT,\n    layers: &LAYERS,\n    loss: LOSS,\n    \
         train: TRAIN,\n    plan: &PLAN,\n    params: &PARAMS,\n    model_blob: &MODEL_BLOB,\n    \
         scaling: &SCALING,\n    calibration: {calib},\n    faulty: {faulty},\n    holdout: {holdout},\n    \
         passes: PASSES,\n    guard: hone_core::guard::GuardConfig {{\n        max_loss_rise_permille: {},\n        \
         loss_floor: hone_core::layer::loss::LossValue({}),\n        max_saturation_ppm: {},\n    }},\n    \
         float_plan: &FLOAT_PLAN,\n    float_params: &FLOAT_PARAMS,\n    \
         float_calibration: hone_fw::train::FloatSet {{\n        count: {},\n        x: &CALIB_XF,\n        y: {float_y},\n    }},\n}};",
        g.max_loss_rise_permille,
        g.loss_floor.0,
        g.max_saturation_ppm,
        s.calibration.len()
    );
    out.push_str(&throughput::render(&s.throughput));
    out
}

/// Where one trained tensor sits in a weights payload.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TensorSpan {
    /// Layer index.
    pub layer: usize,
    /// `weight` or `bias`.
    pub tensor: &'static str,
    /// Storage word (`None` for the float twin's `f32`).
    pub word: Option<Word>,
    /// Number of values.
    pub elems: usize,
    /// Offset in the payload, bytes.
    pub offset: usize,
}

impl TensorSpan {
    /// Bytes per value.
    #[must_use]
    pub fn value_bytes(&self) -> usize {
        self.word.map_or(4, Word::bytes)
    }
}

/// The trained tensors of `plan` in payload order (per layer: weight, then bias), with their
/// offsets; `float` lays them out as `f32`.
#[must_use]
pub fn payload_layout(desc: &ModelDesc, plan: &Plan, float: bool) -> Vec<TensorSpan> {
    let mut out = Vec::new();
    let mut offset = 0;
    for (k, l) in desc.layers.iter().enumerate() {
        let s = plan.layers[k];
        for (tensor, slot, word) in [
            ("weight", s.weight, l.weight.value.word),
            ("bias", s.bias, l.bias.value.word),
        ] {
            if !slot.is_some() {
                continue;
            }
            let word = (!float).then_some(word);
            let span = TensorSpan {
                layer: k,
                tensor,
                word,
                elems: slot.elems as usize,
                offset,
            };
            offset += span.elems * span.value_bytes();
            out.push(span);
        }
    }
    out
}

/// One guarded set, simulated.
#[derive(Clone, Debug)]
pub struct GuardedOutcome {
    /// What the core's `guard::calibrate` reported.
    pub report: SessionReport,
    /// The trained tensors at the end, in payload order.
    pub weights: Vec<u8>,
    /// The checkpoint blob at the end.
    pub checkpoint: Vec<u8>,
    /// The trainer's step count at the end.
    pub steps: u32,
    /// The trainer's update count at the end.
    pub updates: u32,
}

/// The whole session, simulated on the host.
#[derive(Clone, Debug)]
pub struct HostOutcome {
    /// The calibration samples.
    pub calibration: GuardedOutcome,
    /// The mislabelled samples.
    pub faulty: GuardedOutcome,
    /// The float twin's trained tensors, `f32` little-endian, in payload order.
    pub float_weights: Vec<u8>,
    /// The fixed-point plan.
    pub plan: Plan,
    /// The float twin's plan.
    pub float_plan: Plan,
    /// The throughput phase, on boards that run it.
    pub throughput: Option<ThroughputOutcome>,
}

/// Runs the session on the host, as the firmware does, with the same core code: for each
/// guarded set a fresh trainer from the factory parameters and
/// [`hone_core::session::calibrate_set`] over the calibration (or mislabelled) samples,
/// [`PASSES`] times in stored order, judged on the hold-out samples, going back to the factory
/// parameters on rejection; then [`hone_core::session::train_twin`] in `f32` on the calibration
/// samples; then the throughput phase, where the board has one ([`throughput::simulate`]).
///
/// # Errors
/// A message for any error of the core.
pub fn simulate(s: &Session) -> Result<HostOutcome, SessionError> {
    let desc = &s.desc;
    let plan = Plan::of(desc)?;
    let calibration = guarded(s, &plan, &s.calibration)?;
    let faulty = guarded(s, &plan, &s.faulty)?;

    let float_plan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 4)?;
    let mut arena = vec![0f32; float_plan.ram_words()];
    let views: Vec<FloatParams<'_, f32>> = s
        .float_params
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut twin = Twin::new(desc, &float_plan, &mut arena, &views).map_err(SessionError::Twin)?;
    let float_y: FloatTargets<'_, f32> = match &s.calibration.target {
        PreparedTargets::Values { .. } => FloatTargets::Values(&s.float_y),
        PreparedTargets::Classes(l) => FloatTargets::Classes(l),
    };
    let set = FloatSet {
        count: set_count(&s.calibration)?,
        x: &s.float_x,
        y: float_y,
    };
    core_session::train_twin(&mut twin, &float_plan, &set, PASSES).map_err(SessionError::Twin)?;
    let float_weights = float_payload(desc, &float_plan, &twin);
    let throughput = match &s.throughput.spec {
        Some(spec) => Some(throughput::simulate(spec)?),
        None => None,
    };
    Ok(HostOutcome {
        calibration,
        faulty,
        float_weights,
        plan,
        float_plan,
        throughput,
    })
}

fn guarded(s: &Session, plan: &Plan, set: &Prepared) -> Result<GuardedOutcome, SessionError> {
    let desc = &s.desc;
    let mut arena = vec![0u32; plan.ram_words()];
    let views = s.params.views();
    let mut t = Trainer::new(desc, plan, &mut arena, &views)?;
    let (train, holdout) = (FlatSet::of(set), FlatSet::of(&s.holdout));
    // The firmware's session: the same core procedure, going back to the factory parameters.
    let report = core_session::calibrate_set(
        &mut t,
        &train.view()?,
        PASSES,
        &holdout.view()?,
        &GUARD,
        LastGood::Params(&views),
        &mut (),
    )?;
    let weights = weights_payload(&t);
    let mut checkpoint = vec![0u8; s.checkpoint_capacity];
    let n = core_session::checkpoint(&t, &s.scaling, &mut checkpoint)?;
    checkpoint.truncate(n);
    Ok(GuardedOutcome {
        report,
        weights,
        checkpoint,
        steps: t.steps(),
        updates: t.updates(),
    })
}

/// Samples of a [`Prepared`] set flattened as the firmware stores them, for a [`SampleSet`].
pub(crate) struct FlatSet {
    count: usize,
    x: OwnedRaw,
    y: FlatTargets,
}

enum FlatTargets {
    Values(OwnedRaw, QFormat),
    Classes(Vec<u16>),
}

impl FlatSet {
    /// Flattens `p`.
    pub(crate) fn of(p: &Prepared) -> FlatSet {
        let (word, x) = flat(&p.xq);
        let y = match &p.target {
            PreparedTargets::Values { yq, format, .. } => {
                let (word, y) = flat(yq);
                FlatTargets::Values(owned(word, &y), *format)
            }
            PreparedTargets::Classes(l) => FlatTargets::Classes(l.clone()),
        };
        FlatSet {
            count: p.len(),
            x: owned(word, &x),
            y,
        }
    }

    /// The core's view of the samples.
    pub(crate) fn view(&self) -> Result<SampleSet<'_>, SessionError> {
        Ok(SampleSet {
            count: u16::try_from(self.count)
                .map_err(|_| SessionError::TooManySamples(self.count))?,
            x: self.x.raw(),
            y: match &self.y {
                FlatTargets::Values(y, fmt) => Targets::Values(Tensor {
                    raw: y.raw(),
                    fmt: *fmt,
                }),
                FlatTargets::Classes(l) => Targets::Classes(l),
            },
        })
    }
}

fn set_count(p: &Prepared) -> Result<u16, SessionError> {
    u16::try_from(p.len()).map_err(|_| SessionError::TooManySamples(p.len()))
}

/// `values` in storage words of `word` (each already in range: they came from that word).
fn owned(word: Word, values: &[i32]) -> OwnedRaw {
    match word {
        Word::I8 => OwnedRaw::I8(values.iter().map(|&v| v as i8).collect()),
        Word::I16 => OwnedRaw::I16(values.iter().map(|&v| v as i16).collect()),
        Word::I32 => OwnedRaw::I32(values.to_vec()),
    }
}

/// The trained tensors of `t` as the firmware sends them: layer by layer, weight then bias
/// ([`hone_core::session::trained_tensors`]), every value little-endian in its storage word.
pub(crate) fn weights_payload(t: &Trainer<'_>) -> Vec<u8> {
    let mut weights = Vec::new();
    for k in 0..t.desc().layers.len() {
        for raw in core_session::trained_tensors(t, k) {
            let mut bytes = vec![0u8; raw.len() * raw.word().bytes()];
            raw.write_le(&mut bytes);
            weights.extend_from_slice(&bytes);
        }
    }
    weights
}

/// The trained tensors of the twin `twin` (planned by `float_plan`) as the firmware sends
/// them: layer by layer, weight then bias ([`hone_core::session::twin_trained`]), every value
/// a little-endian `f32`.
pub(crate) fn float_payload(desc: &ModelDesc, float_plan: &Plan, twin: &Twin<'_, f32>) -> Vec<u8> {
    let mut out = Vec::new();
    for k in 0..desc.layers.len() {
        for values in core_session::twin_trained(twin, float_plan, k) {
            for v in values {
                out.extend_from_slice(&v.to_le_bytes());
            }
        }
    }
    out
}
