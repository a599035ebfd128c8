//! The arguments of every command, as clap reads them.

use crate::*;

#[derive(Parser)]
#[command(name = "hone", version, about = "Fine-tune sensor models in fixed point: train, quantize, measure drift, plan memory", long_about = None)]
pub(crate) struct Cli {
    #[command(subcommand)]
    pub(crate) command: Option<Command>,
}

#[derive(Subcommand)]
pub(crate) enum Command {
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
    Fleet(Box<crate::cmd::fleet::FleetArgs>),
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
    Onnx(crate::cmd::onnx::OnnxCmd),
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
pub(crate) struct ConfigArg {
    /// Model and training description (TOML).
    #[arg(long)]
    pub(crate) config: PathBuf,
}

#[derive(Args)]
pub(crate) struct ModelArgs {
    #[command(flatten)]
    pub(crate) cfg: ConfigArg,
    /// Float model from `hone train`.
    #[arg(long)]
    pub(crate) model: PathBuf,
}

#[derive(Args)]
pub(crate) struct DriftArgs {
    #[command(flatten)]
    pub(crate) model: ModelArgs,
    /// Samples to train on (for a unit's calibration: its reference samples).
    #[arg(long)]
    pub(crate) train: PathBuf,
    /// Samples to evaluate on after each epoch.
    #[arg(long)]
    pub(crate) eval: PathBuf,
    /// Data the quantizer takes activation ranges from, as `hone quantize --data` does
    /// (default: the training samples); give the same file to simulate exactly the exported
    /// model.
    #[arg(long)]
    pub(crate) calib: Option<PathBuf>,
    /// Passes over the training samples (default: the config's epochs).
    #[arg(long, value_parser = clap::value_parser!(u32).range(1..))]
    pub(crate) epochs: Option<u32>,
    /// Record every step, not only every epoch.
    #[arg(long)]
    pub(crate) per_step: bool,
    /// Training samples used to measure gradient SQNR after each epoch (at least 1: the
    /// verdict's gradient-SQNR check is made on them, so 0 is refused rather than skipping
    /// the check).
    #[arg(long, default_value_t = 32, value_parser = clap::value_parser!(u32).range(1..))]
    pub(crate) probe: u32,
    /// Keep the file order instead of shuffling each epoch.
    #[arg(long)]
    pub(crate) no_shuffle: bool,
    /// Print JSON instead of tables.
    #[arg(long)]
    pub(crate) json: bool,
    /// Write an HTML and Markdown report with plots into this folder.
    #[arg(long)]
    pub(crate) report: Option<PathBuf>,
    #[command(flatten)]
    pub(crate) limits: Limits,
}

/// The verdict's thresholds. Each is a finite number of 0 or more; NaN, an infinity or a
/// negative value is refused as bad input (exit status 2).
#[derive(Args)]
pub(crate) struct Limits {
    /// Largest amount by which the fixed-point evaluation loss exceeds float, % of the float
    /// loss.
    #[arg(long, default_value_t = Thresholds::default().max_loss_gap_pct, value_parser = limit)]
    pub(crate) max_loss_gap: f64,
    /// Largest amount by which the metric falls behind float: accuracy points, or % of the
    /// float RMSE.
    #[arg(long, default_value_t = Thresholds::default().max_metric_gap, value_parser = limit)]
    pub(crate) max_metric_gap: f64,
    /// Largest divergence of a trained tensor from float, % of the tensor's RMS.
    #[arg(long, default_value_t = Thresholds::default().max_weight_divergence_pct, value_parser = limit)]
    pub(crate) max_weight_divergence: f64,
    /// Smallest gradient SQNR at the start of the run, dB.
    #[arg(long, default_value_t = Thresholds::default().min_grad_sqnr_db, value_parser = limit)]
    pub(crate) min_grad_sqnr: f64,
    /// Largest saturation rate of any one tensor, parts per million.
    #[arg(long, default_value_t = Thresholds::default().max_saturation_ppm, value_parser = limit)]
    pub(crate) max_saturation_ppm: f64,
    /// Largest share of updates lost to rounding, %.
    #[arg(long, default_value_t = Thresholds::default().max_lost_updates_pct, value_parser = limit)]
    pub(crate) max_lost_updates: f64,
    /// Fail the loss and metric gaps either way, also when fixed point does better than float.
    #[arg(long)]
    pub(crate) two_sided: bool,
}

/// A threshold of `hone drift`: see [`hone_host::drift::parse_limit`].
pub(crate) fn limit(text: &str) -> Result<f64, hone_host::drift::LimitError> {
    hone_host::drift::parse_limit(text)
}

#[derive(Args)]
pub(crate) struct PlanArgs {
    #[command(flatten)]
    pub(crate) cfg: ConfigArg,
    /// Chip from the built-in table (see `hone chips`).
    #[arg(long, conflicts_with_all = ["ram", "flash", "core"])]
    pub(crate) chip: Option<String>,
    /// RAM of a custom target, e.g. 20k.
    #[arg(long, requires = "flash")]
    pub(crate) ram: Option<String>,
    /// Flash of a custom target, e.g. 64k.
    #[arg(long, requires = "ram")]
    pub(crate) flash: Option<String>,
    /// Core of a custom target, so the engine's overhead measured for it is counted:
    /// cortex-m0, cortex-m0+, cortex-m3, cortex-m4f, rv32imc or rv32imac. Without it the
    /// largest figures measured on any of these cores are counted, as an estimate.
    #[arg(long, requires = "ram")]
    pub(crate) core: Option<String>,
    /// RAM the rest of the firmware already uses.
    #[arg(long, default_value = "0")]
    pub(crate) reserve_ram: String,
    /// Flash the rest of the firmware already uses.
    #[arg(long, default_value = "0")]
    pub(crate) reserve_flash: String,
    /// Float model from `hone train`: formats are then chosen from data, and with --train and
    /// --eval the alternatives of the advice also get a drift cost. Fewer hidden units get
    /// none (marked "not computed"): a changed layer size needs a float model retrained with
    /// that shape.
    #[arg(long)]
    pub(crate) model: Option<PathBuf>,
    /// Calibration samples for the drift cost of each alternative.
    #[arg(long, requires_all = ["model", "eval"])]
    pub(crate) train: Option<PathBuf>,
    /// Evaluation samples for the drift cost.
    #[arg(long, requires_all = ["model", "train"])]
    pub(crate) eval: Option<PathBuf>,
    /// Data the quantizer takes activation ranges from, as `hone quantize --data` does
    /// (default: --train); give the same file to simulate exactly the exported
    /// model.
    #[arg(long)]
    pub(crate) calib: Option<PathBuf>,
    /// Passes over the calibration samples for each drift cost.
    #[arg(long, default_value_t = hone_host::pipeline::PLAN_DRIFT_EPOCHS, value_parser = clap::value_parser!(u32).range(1..))]
    pub(crate) epochs: u32,
    /// Print JSON.
    #[arg(long)]
    pub(crate) json: bool,
}

#[derive(Args)]
pub(crate) struct SweepArgs {
    #[command(flatten)]
    pub(crate) model: ModelArgs,
    /// Samples to train on.
    #[arg(long)]
    pub(crate) train: PathBuf,
    /// Samples to evaluate on.
    #[arg(long)]
    pub(crate) eval: PathBuf,
    /// Data the quantizer takes activation ranges from, as `hone quantize --data` does
    /// (default: the training samples); give the same file to simulate exactly the exported
    /// model.
    #[arg(long)]
    pub(crate) calib: Option<PathBuf>,
    /// Weight words to try, in bits: 8, 16, 32.
    #[arg(long, value_delimiter = ',')]
    pub(crate) weights: Vec<u32>,
    /// Activation words to try, in bits.
    #[arg(long, value_delimiter = ',')]
    pub(crate) activations: Vec<u32>,
    /// Fraction bits added to the quantizer's choice for weights (e.g. 0,-1,-2), each from
    /// -31 to 31; a point whose fraction bits would leave 0 to 31 is marked `error`.
    #[arg(long, value_delimiter = ',', allow_hyphen_values = true, value_parser = clap::value_parser!(i8).range(-31..=31))]
    pub(crate) frac_delta: Vec<i8>,
    /// Roundings of gradients and updates: nearest-even, toward-zero, stochastic.
    #[arg(long, value_delimiter = ',')]
    pub(crate) rounding: Vec<RoundingName>,
    /// Learning rates.
    #[arg(long, value_delimiter = ',')]
    pub(crate) lr: Vec<f64>,
    /// Train modes for the trainable layers: full, bias-only, weights-only.
    #[arg(long, value_delimiter = ',')]
    pub(crate) mode: Vec<ModeName>,
    /// Passes over the training samples (default: the config's epochs).
    #[arg(long, value_parser = clap::value_parser!(u32).range(1..))]
    pub(crate) epochs: Option<u32>,
    /// Worker threads, 1 to 1024 (default: every core).
    #[arg(long, value_parser = clap::value_parser!(u64).range(1..=1024))]
    pub(crate) jobs: Option<u64>,
    /// Print JSON.
    #[arg(long)]
    pub(crate) json: bool,
    /// Write the table, the plot and the JSON into this folder.
    #[arg(long)]
    pub(crate) out: Option<PathBuf>,
}

#[derive(Args)]
pub(crate) struct GeometryArgs {
    /// Erase sector size of the flash, bytes.
    #[arg(long, default_value_t = 4096)]
    pub(crate) erase: u32,
    /// Write (program) unit, bytes.
    #[arg(long, default_value_t = 4)]
    pub(crate) write: u32,
    /// Read unit, bytes.
    #[arg(long, default_value_t = 1)]
    pub(crate) read: u32,
}

#[derive(Subcommand)]
pub(crate) enum CheckpointCmd {
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
#[derive(Subcommand)]
pub(crate) enum DeviceCmd {
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
