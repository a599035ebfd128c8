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

mod files;
mod payload;

use files::*;
pub use payload::*;

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

/// The hone source tree ([`crate::device::find_repo`]); the current directory when there is
/// none (reading its files then fails naming them).
#[must_use]
pub fn default_repo_dir() -> PathBuf {
    crate::device::find_repo().unwrap_or_else(|_| PathBuf::from("."))
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
