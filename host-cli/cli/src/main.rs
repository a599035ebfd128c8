//! The `hone` command: a thin layer that turns arguments into library calls.
//!
//! Exit status: 0 success, 1 a check failed (drift over a threshold, a plan that does not fit),
//! 2 bad usage or bad input.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::{anyhow, bail, Context, Result};
use clap::{Args, Parser, Subcommand};
use hone_core::model::TrainMode;
use hone_core::num::{QScalar, Word};
use hone_host::config::{Config, ModeName, RoundingName};
use hone_host::drift::{DriftReport, Thresholds};
use hone_host::model::FloatModel;
use hone_host::pipeline::Base;
use hone_host::sim::{run_side_by_side, RunOptions};
use indicatif::{ProgressBar, ProgressStyle};

mod fleet_cmd;
mod onnx_cmd;

#[derive(Parser)]
#[command(name = "hone", version, about = "Fine-tune sensor models in fixed point: train, quantize, measure drift, plan memory", long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Option<Command>,
}

#[derive(Subcommand)]
enum Command {
    /// Run the whole job on the bundled demo data and write a report folder (the default).
    Demo {
        /// Folder for the report and exports.
        #[arg(long, default_value = "hone-demo")]
        out: PathBuf,
        /// Chip to plan training memory for (see `hone chips`).
        #[arg(long, default_value = hone_host::demo::DEFAULT_CHIP)]
        chip: String,
    },
    /// Train the float base model on factory data.
    Train {
        #[command(flatten)]
        cfg: ConfigArg,
        /// Training data (CSV with a header).
        #[arg(long)]
        data: PathBuf,
        /// Where to write the float model (JSON).
        #[arg(long)]
        out: PathBuf,
    },
    /// Choose Q-formats, report quantization error, export the device blob and Rust source.
    Quantize {
        #[command(flatten)]
        model: ModelArgs,
        /// Calibration data for activation ranges and the metric check.
        #[arg(long)]
        data: PathBuf,
        /// Write the model blob here.
        #[arg(long)]
        blob: Option<PathBuf>,
        /// Write a Rust source file a firmware can `include!` here.
        #[arg(long)]
        rust: Option<PathBuf>,
        /// Print JSON instead of tables.
        #[arg(long)]
        json: bool,
    },
    /// Train in fixed point beside the float twin and report the drift.
    ///
    /// Exit status 1 when a threshold is exceeded. A check that could not be made (no
    /// gradient measured for the SQNR check) is named beside the verdict. Every threshold
    /// (--max-loss-gap … --max-lost-updates) is a finite number of 0 or more: NaN, an
    /// infinity or a negative value is refused as bad input (exit status 2).
    Drift(DriftArgs),
    /// Memory plan of training on a chip, with advice when it does not fit.
    ///
    /// RAM counts the training memory, the trainer object, the engine's stack peak and the
    /// reserve; flash counts the factory parameters, the engine's code and the reserve. The
    /// engine's figures are those measured on a board with the chip's core (or the core named
    /// by --core for a custom --ram/--flash target); for a core that was not measured they are
    /// the largest figures measured on any core, shown as an estimate and counted in the
    /// verdict. Exit status 1 when the model does not fit.
    Plan(PlanArgs),
    /// List the built-in microcontrollers.
    Chips {
        /// Print JSON.
        #[arg(long)]
        json: bool,
    },
    /// Run a grid of formats, rounding, learning rates and train modes; show the Pareto front.
    ///
    /// Exit status 1 when no grid point ran (every one failed); points that failed beside
    /// others that ran are marked `error` in the table and do not change the status.
    Sweep(SweepArgs),
    /// Simulate many units of a product: how many reference samples per unit, and what share
    /// of units then meets the spec (the config's `[fleet]` section says how units differ).
    Fleet(Box<fleet_cmd::FleetArgs>),
    /// Validate and describe a model blob or checkpoint.
    Inspect {
        /// The blob file.
        file: PathBuf,
        /// Print JSON.
        #[arg(long)]
        json: bool,
    },
    /// Read or write the checkpoint area of a device's flash (an image file).
    #[command(subcommand)]
    Checkpoint(CheckpointCmd),
    /// Run a board's calibration session under QEMU and compare it bit for bit with the host.
    #[command(subcommand)]
    Device(DeviceCmd),
    /// Import a model from an ONNX file, or export one to ONNX.
    #[command(subcommand)]
    Onnx(onnx_cmd::OnnxCmd),
    /// Write the invented demo data again from its seeded generator.
    DemoData {
        /// Folder to write the CSV files into.
        #[arg(long, default_value = "demo-data")]
        out: PathBuf,
        /// Generator seed.
        #[arg(long, default_value_t = hone_host::scenario::DEMO_SEED)]
        seed: u64,
    },
}

#[derive(Args)]
struct ConfigArg {
    /// Model and training description (TOML).
    #[arg(long)]
    config: PathBuf,
}

#[derive(Args)]
struct ModelArgs {
    #[command(flatten)]
    cfg: ConfigArg,
    /// Float model from `hone train`.
    #[arg(long)]
    model: PathBuf,
}

#[derive(Args)]
struct DriftArgs {
    #[command(flatten)]
    model: ModelArgs,
    /// Samples to train on (for a unit's calibration: its reference samples).
    #[arg(long)]
    train: PathBuf,
    /// Samples to evaluate on after each epoch.
    #[arg(long)]
    eval: PathBuf,
    /// Data the quantizer takes activation ranges from, as `hone quantize --data` does
    /// (default: the training samples); give the same file to simulate exactly the exported
    /// model.
    #[arg(long)]
    calib: Option<PathBuf>,
    /// Passes over the training samples (default: the config's epochs).
    #[arg(long, value_parser = clap::value_parser!(u32).range(1..))]
    epochs: Option<u32>,
    /// Record every step, not only every epoch.
    #[arg(long)]
    per_step: bool,
    /// Training samples used to measure gradient SQNR after each epoch (at least 1: the
    /// verdict's gradient-SQNR check is made on them, so 0 is refused rather than skipping
    /// the check).
    #[arg(long, default_value_t = 32, value_parser = clap::value_parser!(u32).range(1..))]
    probe: u32,
    /// Keep the file order instead of shuffling each epoch.
    #[arg(long)]
    no_shuffle: bool,
    /// Print JSON instead of tables.
    #[arg(long)]
    json: bool,
    /// Write an HTML and Markdown report with plots into this folder.
    #[arg(long)]
    report: Option<PathBuf>,
    #[command(flatten)]
    limits: Limits,
}

/// The verdict's thresholds. Each is a finite number of 0 or more; NaN, an infinity or a
/// negative value is refused as bad input (exit status 2).
#[derive(Args)]
struct Limits {
    /// Largest amount by which the fixed-point evaluation loss exceeds float, % of the float
    /// loss.
    #[arg(long, default_value_t = Thresholds::default().max_loss_gap_pct, value_parser = limit)]
    max_loss_gap: f64,
    /// Largest amount by which the metric falls behind float: accuracy points, or % of the
    /// float RMSE.
    #[arg(long, default_value_t = Thresholds::default().max_metric_gap, value_parser = limit)]
    max_metric_gap: f64,
    /// Largest divergence of a trained tensor from float, % of the tensor's RMS.
    #[arg(long, default_value_t = Thresholds::default().max_weight_divergence_pct, value_parser = limit)]
    max_weight_divergence: f64,
    /// Smallest gradient SQNR at the start of the run, dB.
    #[arg(long, default_value_t = Thresholds::default().min_grad_sqnr_db, value_parser = limit)]
    min_grad_sqnr: f64,
    /// Largest saturation rate of any one tensor, parts per million.
    #[arg(long, default_value_t = Thresholds::default().max_saturation_ppm, value_parser = limit)]
    max_saturation_ppm: f64,
    /// Largest share of updates lost to rounding, %.
    #[arg(long, default_value_t = Thresholds::default().max_lost_updates_pct, value_parser = limit)]
    max_lost_updates: f64,
    /// Fail the loss and metric gaps either way, also when fixed point does better than float.
    #[arg(long)]
    two_sided: bool,
}

/// A threshold of `hone drift`: see [`hone_host::drift::parse_limit`].
fn limit(text: &str) -> Result<f64, hone_host::drift::LimitError> {
    hone_host::drift::parse_limit(text)
}

#[derive(Args)]
struct PlanArgs {
    #[command(flatten)]
    cfg: ConfigArg,
    /// Chip from the built-in table (see `hone chips`).
    #[arg(long, conflicts_with_all = ["ram", "flash", "core"])]
    chip: Option<String>,
    /// RAM of a custom target, e.g. 20k.
    #[arg(long, requires = "flash")]
    ram: Option<String>,
    /// Flash of a custom target, e.g. 64k.
    #[arg(long, requires = "ram")]
    flash: Option<String>,
    /// Core of a custom target, so the engine's overhead measured for it is counted:
    /// cortex-m0, cortex-m0+, cortex-m3, cortex-m4f, rv32imc or rv32imac. Without it the
    /// largest figures measured on any of these cores are counted, as an estimate.
    #[arg(long, requires = "ram")]
    core: Option<String>,
    /// RAM the rest of the firmware already uses.
    #[arg(long, default_value = "0")]
    reserve_ram: String,
    /// Flash the rest of the firmware already uses.
    #[arg(long, default_value = "0")]
    reserve_flash: String,
    /// Float model from `hone train`: formats are then chosen from data, and with --train and
    /// --eval the alternatives of the advice also get a drift cost. Fewer hidden units get
    /// none (marked "not computed"): a changed layer size needs a float model retrained with
    /// that shape.
    #[arg(long)]
    model: Option<PathBuf>,
    /// Calibration samples for the drift cost of each alternative.
    #[arg(long, requires_all = ["model", "eval"])]
    train: Option<PathBuf>,
    /// Evaluation samples for the drift cost.
    #[arg(long, requires_all = ["model", "train"])]
    eval: Option<PathBuf>,
    /// Data the quantizer takes activation ranges from, as `hone quantize --data` does
    /// (default: --train); give the same file to simulate exactly the exported
    /// model.
    #[arg(long)]
    calib: Option<PathBuf>,
    /// Passes over the calibration samples for each drift cost.
    #[arg(long, default_value_t = hone_host::pipeline::PLAN_DRIFT_EPOCHS, value_parser = clap::value_parser!(u32).range(1..))]
    epochs: u32,
    /// Print JSON.
    #[arg(long)]
    json: bool,
}

#[derive(Args)]
struct SweepArgs {
    #[command(flatten)]
    model: ModelArgs,
    /// Samples to train on.
    #[arg(long)]
    train: PathBuf,
    /// Samples to evaluate on.
    #[arg(long)]
    eval: PathBuf,
    /// Data the quantizer takes activation ranges from, as `hone quantize --data` does
    /// (default: the training samples); give the same file to simulate exactly the exported
    /// model.
    #[arg(long)]
    calib: Option<PathBuf>,
    /// Weight words to try, in bits: 8, 16, 32.
    #[arg(long, value_delimiter = ',')]
    weights: Vec<u32>,
    /// Activation words to try, in bits.
    #[arg(long, value_delimiter = ',')]
    activations: Vec<u32>,
    /// Fraction bits added to the quantizer's choice for weights (e.g. 0,-1,-2), each from
    /// -31 to 31; a point whose fraction bits would leave 0 to 31 is marked `error`.
    #[arg(long, value_delimiter = ',', allow_hyphen_values = true, value_parser = clap::value_parser!(i8).range(-31..=31))]
    frac_delta: Vec<i8>,
    /// Roundings of gradients and updates: nearest-even, toward-zero, stochastic.
    #[arg(long, value_delimiter = ',')]
    rounding: Vec<RoundingName>,
    /// Learning rates.
    #[arg(long, value_delimiter = ',')]
    lr: Vec<f64>,
    /// Train modes for the trainable layers: full, bias-only, weights-only.
    #[arg(long, value_delimiter = ',')]
    mode: Vec<ModeName>,
    /// Passes over the training samples (default: the config's epochs).
    #[arg(long, value_parser = clap::value_parser!(u32).range(1..))]
    epochs: Option<u32>,
    /// Worker threads, 1 to 1024 (default: every core).
    #[arg(long, value_parser = clap::value_parser!(u64).range(1..=1024))]
    jobs: Option<u64>,
    /// Print JSON.
    #[arg(long)]
    json: bool,
    /// Write the table, the plot and the JSON into this folder.
    #[arg(long)]
    out: Option<PathBuf>,
}

#[derive(Args)]
struct GeometryArgs {
    /// Erase sector size of the flash, bytes.
    #[arg(long, default_value_t = 4096)]
    erase: u32,
    /// Write (program) unit, bytes.
    #[arg(long, default_value_t = 4)]
    write: u32,
    /// Read unit, bytes.
    #[arg(long, default_value_t = 1)]
    read: u32,
}

#[derive(Subcommand)]
enum CheckpointCmd {
    /// Read the newest valid checkpoint from a flash image, validate it, and write the blob.
    Read {
        /// Image of the checkpoint area.
        image: PathBuf,
        #[command(flatten)]
        geometry: GeometryArgs,
        /// Write the blob here.
        #[arg(long)]
        out: Option<PathBuf>,
        /// Print JSON.
        #[arg(long)]
        json: bool,
    },
    /// Commit a blob into a flash image: a fresh erased image, or an existing one.
    Write {
        /// The blob (model or checkpoint).
        blob: PathBuf,
        /// The image to write.
        #[arg(long)]
        out: PathBuf,
        /// Commit into this existing image instead of a fresh one.
        #[arg(long)]
        into: Option<PathBuf>,
        /// Size of a fresh image (the checkpoint area), e.g. 16k; at most the largest flash of
        /// a built-in chip (16M).
        #[arg(long, default_value = "16k")]
        region: String,
        /// With --into: write over an image whose two slots are both corrupted (the sequence
        /// restarts at 1). Without it such an image is refused.
        #[arg(long, requires = "into")]
        start_over: bool,
        #[command(flatten)]
        geometry: GeometryArgs,
    },
}

/// Writes to standard output. When the reader has gone away (`hone chips | head -1`), the
/// rest of the output has nowhere to go: the command stops quietly with status 0 instead of
/// panicking like `print!` does.
fn emit(args: std::fmt::Arguments<'_>) {
    use std::io::Write;
    let mut out = std::io::stdout().lock();
    if let Err(e) = out.write_fmt(args).and_then(|_| out.flush()) {
        if e.kind() == std::io::ErrorKind::BrokenPipe {
            std::process::exit(0);
        }
        eprintln!("error: cannot write to standard output: {e}");
        std::process::exit(2);
    }
}

macro_rules! out {
    ($($t:tt)*) => { emit(format_args!($($t)*)) };
}

macro_rules! outln {
    () => { emit(format_args!("\n")) };
    ($($t:tt)*) => {{ emit(format_args!($($t)*)); emit(format_args!("\n")) }};
}

#[derive(Subcommand)]
enum DeviceCmd {
    /// Build the board's firmware, run it under QEMU, simulate the same session on the host,
    /// compare the final weights bit for bit, and print the measurements.
    Verify {
        /// QEMU board: lm3s6965evb, microbit, mps2-an386 or sifive-e; or microbit-lean, the
        /// lean build (boards/lean: the core without its optional layer kinds, dense + ReLU +
        /// squared error + SGD) on the micro:bit, which reports bit-exactness and engine code
        /// only.
        #[arg(long)]
        board: String,
        /// Build from freshly generated session files in this folder instead of the committed
        /// ones under boards/<board>/session.
        #[arg(long)]
        session_dir: Option<PathBuf>,
        /// Run this firmware image instead of building one.
        #[arg(long)]
        elf: Option<PathBuf>,
        /// Print one JSON object with the board's figures (stable snake_case keys; null for a
        /// figure the build does not measure) instead of the report.
        #[arg(long)]
        json: bool,
    },
    /// Profile a board's training step per function: run its firmware under QEMU with an
    /// execution trace, charge every executed instruction to the function that holds it, and
    /// print the functions with the most instructions.
    Profile {
        /// QEMU board: lm3s6965evb, microbit, mps2-an386 or sifive-e.
        #[arg(long)]
        board: String,
        /// What to profile: calib (training on the calibration set), faulty (on the mislabelled
        /// set), tput (the throughput phase's larger model) or whole (the whole run).
        #[arg(long, default_value = "calib")]
        phase: hone_host::device::profile::Phase,
        /// Functions to list.
        #[arg(long, default_value_t = 30)]
        top: usize,
        /// Profile this firmware image instead of building the board's.
        #[arg(long)]
        elf: Option<PathBuf>,
        /// Time limit of the traced run, seconds.
        #[arg(long, default_value_t = 600)]
        timeout: u64,
        /// Print JSON (every function) instead of the table.
        #[arg(long)]
        json: bool,
    },
    /// Write a board's session files (the exported model and its calibration samples).
    Session {
        /// Board: one of the QEMU boards, or pico.
        #[arg(long)]
        board: String,
        /// Folder to write into (default: the committed boards/<board>/session).
        #[arg(long)]
        out: Option<PathBuf>,
    },
}

/// A failed check: printed, then exit status 1.
struct CheckFailed;

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli.command.unwrap_or(Command::Demo {
        out: PathBuf::from("hone-demo"),
        chip: hone_host::demo::DEFAULT_CHIP.into(),
    })) {
        Ok(None) => ExitCode::SUCCESS,
        Ok(Some(CheckFailed)) => ExitCode::from(1),
        Err(e) => {
            eprintln!("error: {}", error_text(&e));
            ExitCode::from(2)
        }
    }
}

/// The error and its causes, joined by `: `, each said once: a cause whose text an outer
/// message already shows (a library error that names its source) is not repeated.
fn error_text(e: &anyhow::Error) -> String {
    let mut text = e.to_string();
    for cause in e.chain().skip(1) {
        let c = cause.to_string();
        if !text.contains(&c) {
            text.push_str(": ");
            text.push_str(&c);
        }
    }
    text
}

fn bar(len: u64, what: &str) -> ProgressBar {
    let b = ProgressBar::new(len);
    b.set_style(
        ProgressStyle::with_template("{msg:>12} [{bar:40}] {pos}/{len} ({eta})")
            .unwrap_or_else(|_| ProgressStyle::default_bar())
            .progress_chars("=> "),
    );
    b.set_message(what.to_string());
    b
}

fn load_config(c: &ConfigArg) -> Result<Config> {
    Ok(Config::load(&c.config)?)
}

fn load_base(m: &ModelArgs, calib: &Path) -> Result<Base> {
    let config = load_config(&m.cfg)?;
    let float = FloatModel::load(&m.model)?;
    Base::from_float(config, float, calib).with_context(|| {
        format!(
            "model {} with config {}",
            m.model.display(),
            m.cfg.config.display()
        )
    })
}

fn print_json<T: serde::Serialize>(v: &T) -> Result<()> {
    outln!("{}", serde_json::to_string_pretty(v)?);
    Ok(())
}

fn run(cmd: Command) -> Result<Option<CheckFailed>> {
    match cmd {
        Command::Demo { out, chip } => {
            if hone_host::chips::find(&chip).is_none() {
                return Err(anyhow!(
                    "--chip: unknown chip `{chip}`; `hone chips` lists the built-in ones"
                ));
            }
            let o = hone_host::demo::run(&out, &chip, &mut |m| eprintln!("{m}")).context("demo")?;
            outln!("{}", o.summary);
            Ok((!o.drift_pass || !o.fits).then_some(CheckFailed))
        }
        Command::Train { cfg, data, out } => {
            distinct(
                &[("--config", &cfg.config), ("--data", &data)],
                &[("--out", &out)],
            )?;
            let config = load_config(&cfg)?;
            let dataset = config.load_data(&data, None)?;
            let b = bar(config.epochs() as u64, "epochs");
            let trained = hone_host::train::train_float(&config, &dataset, &mut |e, _, loss| {
                b.set_position(e as u64);
                b.set_message(format!("loss {loss:.5}"));
            })?;
            b.finish_and_clear();
            for c in &trained.constant {
                eprintln!("warning: {}: {c}", data.display());
            }
            let model = &trained.model;
            model.save(&out)?;
            let last = model.history.last().map(|h| h.loss).unwrap_or_default();
            let held = if trained.held_out_rows > 0 {
                format!(
                    " ({} held out of {} by data.holdout)",
                    trained.held_out_rows,
                    dataset.len()
                )
            } else {
                String::new()
            };
            outln!(
                "trained {} epochs on {} rows{held}: final loss {last:.6}; {}; written to {}",
                config.epochs(),
                trained.trained_rows,
                hone_host::train::final_figures(&model.history, &config.data().unit),
                out.display()
            );
            Ok(None)
        }
        Command::Quantize {
            model,
            data,
            blob,
            rust,
            json,
        } => {
            let outputs: Vec<(&str, &Path)> = [("--blob", &blob), ("--rust", &rust)]
                .into_iter()
                .filter_map(|(o, p)| p.as_deref().map(|p| (o, p)))
                .collect();
            distinct(
                &[
                    ("--config", &model.cfg.config),
                    ("--model", &model.model),
                    ("--data", &data),
                ],
                &outputs,
            )?;
            let base = load_base(&model, &data)?;
            let q = &base.quant;
            // Render every output before writing any, then write them as one set: a failure
            // while writing leaves none of them (see `fsutil::write_all` for the rare failed
            // rename).
            let blob_bytes = match &blob {
                Some(_) => Some(hone_host::export::model_blob(
                    &q.desc,
                    &q.params,
                    &base.float.scaling,
                )?),
                None => None,
            };
            let rust_src = match &rust {
                Some(_) => {
                    let origin = format!(
                        "{} quantized with {}",
                        model.model.display(),
                        model.cfg.config.display()
                    );
                    Some(hone_host::export::rust_source(
                        &q.desc,
                        &q.params,
                        &base.float.scaling,
                        &origin,
                    )?)
                }
                None => None,
            };
            let mut set: Vec<(&Path, &[u8])> = Vec::new();
            if let (Some(p), Some(bytes)) = (&blob, &blob_bytes) {
                set.push((p, bytes));
            }
            if let (Some(p), Some(src)) = (&rust, &rust_src) {
                set.push((p, src.as_bytes()));
            }
            hone_report::fsutil::write_all(&set)?;
            if json {
                print_json(&q.report)?;
            } else {
                out!("{}", hone_host::quant::render(&q.report));
                for p in blob.iter().chain(rust.iter()) {
                    outln!("written: {}", p.display());
                }
            }
            Ok(None)
        }
        Command::Drift(a) => drift(a),
        Command::Plan(a) => plan(a),
        Command::Chips { json } => {
            let chips = hone_host::chips::all();
            if json {
                let rows: Vec<serde_json::Value> = chips
                    .iter()
                    .map(|c| serde_json::json!({ "id": c.id, "name": c.name, "vendor": c.vendor, "core": c.core.to_string(), "fpu": c.fpu.to_string(), "ram_bytes": c.ram_bytes, "flash_bytes": c.flash_bytes, "qemu_machine": c.qemu_machine, "note": c.note, "source": c.source }))
                    .collect();
                print_json(&rows)?;
            } else {
                out!("{}", hone_host::chips::render_text(chips));
            }
            Ok(None)
        }
        Command::Sweep(a) => sweep(a),
        Command::Fleet(a) => {
            out!("{}", fleet_cmd::run(*a)?);
            Ok(None)
        }
        Command::Inspect { file, json } => {
            let r = hone_host::inspect::inspect_file(&file)?;
            if json {
                print_json(&r)?;
            } else {
                out!("{}", hone_host::inspect::render(&r));
            }
            Ok(None)
        }
        Command::Checkpoint(c) => checkpoint(c),
        Command::Device(d) => device(d),
        Command::Onnx(c) => {
            outln!("{}", onnx_cmd::run(c)?);
            Ok(None)
        }
        Command::DemoData { out, seed } => {
            let files = hone_host::scenario::write_all(&out, seed)
                .with_context(|| out.display().to_string())?;
            for f in files {
                outln!("written: {}", f.display());
            }
            Ok(None)
        }
    }
}

fn drift(a: DriftArgs) -> Result<Option<CheckFailed>> {
    let base = load_base(&a.model, a.calib.as_ref().unwrap_or(&a.train))?;
    let train = prepare(&base, &a.train)?;
    let eval = prepare(&base, &a.eval)?;
    let epochs = a.epochs.unwrap_or(base.config.epochs());
    let opts = RunOptions {
        epochs,
        order_seed: base.config.train().seed,
        per_step: a.per_step,
        probe: a.probe as usize,
        shuffle: !a.no_shuffle,
    };
    let q = &base.quant;
    let b = bar(epochs as u64 * train.len() as u64, "steps");
    let run = run_side_by_side(
        &q.desc,
        &q.params,
        &q.float_params,
        &train,
        &eval,
        &opts,
        &mut |p| b.set_position(p.done),
    )?;
    b.finish_and_clear();
    let setup = vec![
        (
            "config".to_string(),
            a.model.cfg.config.display().to_string(),
        ),
        ("model".into(), a.model.model.display().to_string()),
        (
            "train".into(),
            format!(
                "{} ({} samples, {epochs} epochs)",
                a.train.display(),
                train.len()
            ),
        ),
        (
            "eval".into(),
            format!("{} ({} samples)", a.eval.display(), eval.len()),
        ),
        ("seed".into(), base.config.train().seed.to_string()),
    ];
    let t = Thresholds {
        max_loss_gap_pct: a.limits.max_loss_gap,
        max_metric_gap: a.limits.max_metric_gap,
        max_weight_divergence_pct: a.limits.max_weight_divergence,
        min_grad_sqnr_db: a.limits.min_grad_sqnr,
        max_saturation_ppm: a.limits.max_saturation_ppm,
        max_lost_updates_pct: a.limits.max_lost_updates,
        two_sided: a.limits.two_sided,
    };
    let mut report = DriftReport::from_run(&run, train.is_classification(), setup, t);
    report.unit = base.config.data().unit.clone();
    report.advise_saturation(&q.desc, &run, &train, &q.float_params)?;
    if a.json {
        print_json(&report)?;
    } else {
        out!("{}", report.render_text());
    }
    if let Some(dir) = &a.report {
        // The report, its figures and the JSON are one set: all written or none.
        let mut files = report.document("hone drift report").files("drift")?;
        files.push((
            "drift.json".into(),
            serde_json::to_string_pretty(&report)?.into_bytes(),
        ));
        for f in hone_report::fsutil::write_all_in(dir, &files)? {
            eprintln!("written: {}", f.display());
        }
    }
    Ok((!report.verdict.pass).then_some(CheckFailed))
}

fn size(s: &str, what: &str) -> Result<u32> {
    hone_host::memplan::parse_size(s).with_context(|| format!("--{what}"))
}

fn plan(a: PlanArgs) -> Result<Option<CheckFailed>> {
    use hone_host::memplan::{self, plan_report, render_table, AdviceOptions, Budget, Reserve};
    let config = load_config(&a.cfg)?;
    let base = match (&a.model, &a.train) {
        (Some(model), Some(train)) => Some(load_base(&ModelArgs { cfg: ConfigArg { config: a.cfg.config.clone() }, model: model.clone() }, a.calib.as_ref().unwrap_or(train))?),
        (Some(_), None) => return Err(anyhow!("--model without --train and --eval: give calibration and evaluation samples, or leave out --model")),
        _ => None,
    };
    // Memory depends on word sizes only, so without a model `auto` formats may take any
    // fraction bits here.
    let desc = match &base {
        Some(b) => b.quant.desc.clone(),
        None => config.model_desc_with(hone_host::train::provisional_frac)?,
    };
    let data = match (&base, &a.train, &a.eval) {
        (Some(b), Some(t), Some(e)) => Some((prepare(b, t)?, prepare(b, e)?)),
        _ => None,
    };
    let drift_cost = |d: &hone_core::model::ModelDesc| match (base.as_ref(), data.as_ref()) {
        (Some(b), Some((train, eval))) => {
            hone_host::pipeline::drift_cost(b, train, eval, a.epochs, d).map_err(Into::into)
        }
        _ => Err("no calibration data".into()),
    };
    let chip = match &a.chip {
        Some(id) => Some(hone_host::chips::find(id).ok_or_else(|| anyhow!("--chip: unknown chip `{id}`; `hone chips` lists the built-in ones, or give --ram and --flash"))?),
        None => None,
    };
    let budget = match (chip, &a.ram, &a.flash) {
        (Some(c), _, _) => Budget::chip(c),
        (None, Some(r), Some(f)) => Budget::custom(size(r, "ram")?, size(f, "flash")?),
        _ => {
            return Err(anyhow!(
                "give a target: --chip ID, or --ram SIZE and --flash SIZE"
            ))
        }
    };
    let reserve = Reserve {
        ram_bytes: size(&a.reserve_ram, "reserve-ram")?,
        flash_bytes: size(&a.reserve_flash, "reserve-flash")?,
    };
    // The engine's own code, state and stack: measured on a board with the chip's (or the
    // named) core, or else the largest measured figures, marked as an estimate.
    let overhead = match (chip, &a.core) {
        (Some(c), _) => memplan::engine_overhead(c),
        (None, Some(name)) => {
            memplan::measured_core_overhead(memplan::measured_core(name).context("--core")?)
        }
        (None, None) => memplan::estimated_overhead(),
    };
    let report = plan_report(
        &desc,
        &budget,
        reserve,
        Some(&overhead),
        &AdviceOptions::default(),
        data.as_ref()
            .map(|_| &drift_cost as hone_host::memplan::DriftFn<'_>),
    )
    .with_context(|| a.cfg.config.display().to_string())?;
    let report = match chip {
        Some(c) => report.with_chip(c, &desc),
        None => report,
    };
    if a.json {
        print_json(&report)?;
    } else {
        out!("{}", render_table(&report));
        if base.is_none() {
            if let Some(note) = memplan::placeholder_note(&config) {
                outln!("\n{note}");
            }
        }
    }
    Ok((!report.fits).then_some(CheckFailed))
}

/// Loads and quantizes `csv` for the model; warns on stderr about values the model's
/// formats cannot hold.
fn prepare(base: &Base, csv: &Path) -> Result<hone_host::sim::Prepared> {
    let p = base.prepare(csv)?;
    if p.input_saturations > 0 {
        eprintln!(
            "warning: {}: {} input values saturated the model's input format {}",
            csv.display(),
            p.input_saturations,
            base.quant.desc.input_format
        );
    }
    if p.target_saturations > 0 {
        eprintln!(
            "warning: {}: {} target values saturated the output format; the fixed-point model \
             cannot reach them",
            csv.display(),
            p.target_saturations
        );
    }
    Ok(p)
}

/// A train mode for the sweep's grid: one that trains something.
fn sweep_mode(m: ModeName) -> Result<TrainMode> {
    if m.0 == TrainMode::Frozen {
        bail!("--mode: {m} trains nothing; use full, bias-only or weights-only");
    }
    Ok(m.0)
}

/// A sweep learning rate must be positive and survive the description's learning-rate
/// format without saturating or rounding to zero.
fn check_sweep_lr(lr: f64, frac: u8) -> Result<f64> {
    if !lr.is_finite() || lr <= 0.0 {
        bail!("--lr: {lr} is not a positive learning rate");
    }
    match QScalar::from_f64(lr, frac) {
        Ok(q) if q.raw != 0 => Ok(lr),
        Ok(_) => bail!(
            "--lr: {lr} rounds to zero with {frac} fraction bits (the model's train.lr format); \
             the smallest step is {}",
            (-(frac as f64)).exp2()
        ),
        Err(_) => bail!("--lr: {lr} does not fit an i32 with {frac} fraction bits"),
    }
}

fn parse_word(bits: u32, what: &str) -> Result<Word> {
    Word::from_bits(bits)
        .ok_or_else(|| anyhow!("--{what}: {bits} bits is not a word size; use 8, 16 or 32"))
}

/// Refuses a grid list that repeats a value: the repeated rows would be marked on the front
/// twice.
fn no_repeats<T: PartialEq + std::fmt::Display>(option: &str, values: &[T]) -> Result<()> {
    for (i, v) in values.iter().enumerate() {
        if values[..i].contains(v) {
            bail!("--{option}: {v} is given twice; give each value once");
        }
    }
    Ok(())
}

/// Refuses outputs that name one file twice or name an input (see
/// [`hone_report::fsutil::check_outputs`]).
fn distinct(inputs: &[(&str, &Path)], outputs: &[(&str, &Path)]) -> Result<()> {
    Ok(hone_report::fsutil::check_outputs(inputs, outputs)?)
}

fn sweep(a: SweepArgs) -> Result<Option<CheckFailed>> {
    use hone_host::sweep::{plot, run, table, Grid};
    no_repeats("weights", &a.weights)?;
    no_repeats("activations", &a.activations)?;
    no_repeats("frac-delta", &a.frac_delta)?;
    no_repeats("rounding", &a.rounding)?;
    no_repeats("lr", &a.lr)?;
    no_repeats("mode", &a.mode)?;
    // The settings first, so a mistake costs no data loading.
    let modes = a
        .mode
        .iter()
        .map(|&m| sweep_mode(m))
        .collect::<Result<_>>()?;
    let base = load_base(&a.model, a.calib.as_ref().unwrap_or(&a.train))?;
    let train = prepare(&base, &a.train)?;
    let eval = prepare(&base, &a.eval)?;
    let grid = Grid {
        weight_words: a
            .weights
            .iter()
            .map(|&b| parse_word(b, "weights"))
            .collect::<Result<_>>()?,
        activation_words: a
            .activations
            .iter()
            .map(|&b| parse_word(b, "activations"))
            .collect::<Result<_>>()?,
        frac_deltas: a.frac_delta.clone(),
        roundings: a.rounding.iter().map(|r| r.0).collect(),
        learning_rates: a
            .lr
            .iter()
            .map(|&lr| check_sweep_lr(lr, base.quant.desc.train.lr.frac))
            .collect::<Result<_>>()?,
        modes,
    };
    let opts = RunOptions {
        epochs: a.epochs.unwrap_or(base.config.epochs()),
        order_seed: base.config.train().seed,
        per_step: false,
        probe: 0,
        shuffle: true,
    };
    let threads = a.jobs.map(|j| j as usize).unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    });
    let b = bar(0, "grid points");
    let points = run(
        &base.quant.desc,
        &base.quant.float_params,
        &grid,
        &train,
        &eval,
        &opts,
        threads,
        &|done, total| {
            b.set_length(total as u64);
            b.set_position(done as u64);
        },
    );
    b.finish_and_clear();
    let classification = train.is_classification();
    let t = table(&points, classification);
    if a.json {
        print_json(&points)?;
    } else {
        out!("{}", hone_report::report::render_text_table(&t));
        outln!("● on the Pareto front of training RAM against drift (|fixed − float| evaluation loss, % of float)");
        outln!("RAM B: the training memory alone, without the trainer object, stack and reserve that `hone plan` adds");
        outln!("base: the setting as the config and the quantizer chose it");
    }
    if let Some(dir) = &a.out {
        let files = vec![
            (
                "sweep.json".to_owned(),
                serde_json::to_string_pretty(&points)?.into_bytes(),
            ),
            ("sweep.svg".to_owned(), plot(&points).into_bytes()),
            (
                "sweep.txt".to_owned(),
                hone_report::report::render_text_table(&t).into_bytes(),
            ),
        ];
        for p in hone_report::fsutil::write_all_in(dir, &files)? {
            eprintln!("written: {}", p.display());
        }
    }
    if points.iter().all(|p| p.error.is_some()) {
        eprintln!(
            "check failed: none of the {} grid points ran, so there is nothing to compare; each \
             point's error says why",
            points.len()
        );
        return Ok(Some(CheckFailed));
    }
    Ok(None)
}

fn device(d: DeviceCmd) -> Result<Option<CheckFailed>> {
    use hone_host::device::{self, QemuBoard};
    let board_named = |name: &str| {
        QemuBoard::ALL
            .into_iter()
            .find(|b| b.name() == name)
            .ok_or_else(|| {
                anyhow!(
                    "--board: `{name}` is not a QEMU board; use one of {}",
                    QemuBoard::ALL.map(|b| b.name()).join(", ")
                )
            })
    };
    match d {
        DeviceCmd::Verify {
            board,
            session_dir,
            elf,
            json,
        } => {
            let boards_dir = device::default_boards_dir();
            if board == device::lean::LEAN_BOARD {
                let profile =
                    device::verify::profile_opt_level(&boards_dir, device::lean::LEAN_PROFILE)?;
                if session_dir.is_some() || elf.is_some() {
                    bail!(
                        "--board {board}: --session-dir and --elf do not apply to the lean build"
                    );
                }
                let check = device::lean::verify_lean(&boards_dir, device::DEFAULT_TIMEOUT)?;
                if json {
                    outln!("{}", serde_json::to_string(&check.summary(&profile))?);
                } else {
                    out!("{}", check.render());
                }
                if !check.bit_exact() {
                    eprintln!(
                        "check failed: the lean build's output differs from the host's\n\
                         device:\n{}\nhost:\n{}",
                        check.device, check.host
                    );
                    return Ok(Some(CheckFailed));
                }
                return Ok(None);
            }
            let b = board_named(&board)?;
            let profile = device::verify::profile_opt_level(&boards_dir, device::RELEASE_PROFILE)?;
            let opts = device::verify::VerifyOptions {
                session_dir,
                elf,
                boards_dir,
                ..Default::default()
            };
            let check = device::verify::verify_board(b, &opts)?;
            if json {
                outln!("{}", serde_json::to_string(&check.summary(&profile))?);
            } else {
                out!("{}", check.render());
            }
            let exact = check.ensure_bit_exact();
            let predicted = check.ensure_prediction();
            for e in [&exact, &predicted]
                .into_iter()
                .filter_map(|r| r.as_ref().err())
            {
                eprintln!("check failed: {e}");
            }
            Ok((exact.is_err() || predicted.is_err()).then_some(CheckFailed))
        }
        DeviceCmd::Profile {
            board,
            phase,
            top,
            elf,
            timeout,
            json,
        } => {
            let b = board_named(&board)?;
            let elf = match elf {
                Some(e) => e,
                None => device::build_firmware(b, &device::default_boards_dir())?,
            };
            let opts = device::profile::ProfileOptions {
                phase,
                timeout: std::time::Duration::from_secs(timeout),
            };
            let p = device::profile::profile_elf(b, &elf, &opts)?;
            if json {
                print_json(&p)?;
            } else {
                out!("{}", p.render(top));
            }
            Ok(None)
        }
        DeviceCmd::Session { board, out } => {
            let dir = match out {
                Some(d) => d,
                None => device::session::committed_dir(&device::default_boards_dir(), &board),
            };
            let files = device::session::generate(&dir, &board)?;
            if files.is_empty() {
                outln!("{}: session files already current", dir.display());
            }
            for f in files {
                outln!("written: {}", f.display());
            }
            Ok(None)
        }
    }
}

fn geometry(g: &GeometryArgs) -> hone_host::checkpoint::Geometry {
    hone_host::checkpoint::Geometry {
        erase: g.erase,
        write: g.write,
        read: g.read,
    }
}

fn checkpoint(c: CheckpointCmd) -> Result<Option<CheckFailed>> {
    match c {
        CheckpointCmd::Read {
            image,
            geometry: g,
            out,
            json,
        } => {
            if let Some(p) = &out {
                distinct(&[("the image", &image)], &[("--out", p)])?;
            }
            let (info, blob) = hone_host::checkpoint::read_latest_file(&image, geometry(&g))?;
            if let Some(p) = &out {
                hone_report::fsutil::write_atomic(p, &blob)
                    .with_context(|| p.display().to_string())?;
            }
            let report = hone_host::inspect::inspect(&image.display().to_string(), &blob)?;
            if json {
                print_json(&serde_json::json!({ "checkpoint": info, "blob": report }))?;
            } else {
                outln!(
                    "checkpoint seq {} in slot {} ({} bytes); other slot {}: {}",
                    info.seq,
                    info.slot,
                    info.len,
                    info.other_slot.slot,
                    info.other_slot.state
                );
                out!("{}", hone_host::inspect::render(&report));
            }
            Ok(None)
        }
        CheckpointCmd::Write {
            blob,
            out,
            into,
            region,
            start_over,
            geometry: g,
        } => {
            // `--out` may be the `--into` image: updating it in place is the point.
            distinct(&[("the blob", &blob)], &[("--out", &out)])?;
            let image = match &into {
                Some(existing) => {
                    let (_, len) = hone_host::checkpoint::commit_file(
                        existing,
                        geometry(&g),
                        &blob,
                        &out,
                        start_over,
                    )?;
                    outln!("written: {} ({len} bytes)", out.display());
                    return Ok(None);
                }
                None => {
                    let region_len = size(&region, "region")?;
                    hone_host::checkpoint::check_geometry(geometry(&g))?;
                    if !region_len.is_multiple_of(g.erase) {
                        return Err(anyhow!(
                            "--region: {region_len} B is not a whole number of {} B erase \
                             sectors; give the size of the device's checkpoint area, a multiple \
                             of --erase",
                            g.erase
                        ));
                    }
                    hone_host::checkpoint::write_image_file(&blob, geometry(&g), region_len)?
                }
            };
            hone_report::fsutil::write_atomic(&out, &image)
                .with_context(|| out.display().to_string())?;
            outln!("written: {} ({} bytes)", out.display(), image.len());
            Ok(None)
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn error_text_says_each_cause_once() {
        // A library error that prints its source and also returns it from `source()`.
        let io = std::io::Error::other("disk on fire");
        let e = anyhow::Error::new(hone_host::config::ConfigError::Io {
            path: PathBuf::from("a.toml"),
            source: io,
        })
        .context("--config");
        assert_eq!(
            error_text(&e),
            "--config: a.toml: cannot read the config file: disk on fire"
        );
        // A cause the outer message does not show is still said.
        let e = anyhow!("inner").context("outer");
        assert_eq!(error_text(&e), "outer: inner");
    }
}
