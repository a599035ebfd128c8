//! The demo: the whole job on the bundled, invented soil-moisture scenario (see
//! `demo-data/README.md`).
//!
//! 1. train a float base model on the factory data of many simulated probes;
//! 2. quantize it (16-bit, formats chosen from data) and export the device blob and Rust file;
//! 3. plan its training memory for a chip;
//! 4. calibrate one new probe on ten reference samples, in fixed point beside float, and judge
//!    the drift;
//! 5. run the rollback guard on the calibrated weights;
//! 6. write everything into one folder: an HTML and a Markdown report with plots, the JSON
//!    figures, the float model, the blob and the Rust file.
//!
//! The data and config are compiled into the binary, so the demo runs from anywhere.

use std::path::{Path, PathBuf};

use hone_core::guard::{self, GuardConfig};
use hone_core::plan::Plan;
use hone_core::train::Trainer;

use crate::config::Config;
use crate::drift::{DriftReport, Thresholds};
use crate::memplan::{self, AdviceOptions, Budget, Reserve};
use crate::pipeline::Base;
use crate::sim::{run_side_by_side, Prepared, RunOptions};
use hone_report::report::{Block, Report, Section};

/// The demo's config (the soil-moisture example).
pub const CONFIG: &str = include_str!("../../../configs/soil-moisture.toml");
/// Factory data of many simulated probes.
pub const FACTORY: &str = include_str!("../../../demo-data/soil_factory.csv");
/// Ten reference samples of the new probe.
pub const CALIBRATION: &str = include_str!("../../../demo-data/soil_unit_calibration.csv");
/// Forty more samples of the new probe, for evaluation.
pub const HOLDOUT: &str = include_str!("../../../demo-data/soil_unit_holdout.csv");

/// The chip the demo plans for by default: the BBC micro:bit's nRF51822 (16 KB of RAM).
pub const DEFAULT_CHIP: &str = "nrf51822";

/// What the demo produced.
#[derive(Clone, Debug)]
pub struct DemoOutcome {
    /// Files written.
    pub files: Vec<PathBuf>,
    /// Whether the calibration stayed within the drift thresholds.
    pub drift_pass: bool,
    /// Whether the plan fits the chip.
    pub fits: bool,
    /// The text printed to the terminal.
    pub summary: String,
}

/// Why the demo stopped.
#[derive(Debug, thiserror::Error)]
pub enum DemoError {
    /// A folder or file could not be written.
    #[error("{}: {source}", path.display())]
    Io {
        /// The folder or file.
        path: PathBuf,
        /// Operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The chip is not in the built-in table.
    #[error("unknown chip `{0}`; `hone chips` lists the built-in ones")]
    UnknownChip(String),
    /// The bundled config does not load.
    #[error(transparent)]
    Config(#[from] crate::config::ConfigError),
    /// Training, quantizing or preparing samples failed.
    #[error(transparent)]
    Pipeline(#[from] crate::pipeline::PipelineError),
    /// The float model could not be saved.
    #[error(transparent)]
    Model(#[from] crate::model::ModelError),
    /// The model could not be exported.
    #[error(transparent)]
    Export(#[from] crate::export::ExportError),
    /// The memory plan failed.
    #[error(transparent)]
    Plan(#[from] crate::memplan::MemplanError),
    /// The simulated calibration failed.
    #[error(transparent)]
    Sim(#[from] crate::sim::SimError),
    /// The core refused a step of the guarded session.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
    /// A report could not be rendered as JSON.
    #[error(transparent)]
    Json(#[from] serde_json::Error),
}

fn write(dir: &Path, name: &str, bytes: &[u8], files: &mut Vec<PathBuf>) -> Result<(), DemoError> {
    let p = dir.join(name);
    hone_report::fsutil::write_atomic(&p, bytes).map_err(|source| DemoError::Io {
        path: p.to_path_buf(),
        source,
    })?;
    files.push(p);
    Ok(())
}

/// Runs the demo into `out` (created if missing). `chip` picks the planning target.
/// `progress` receives one-line status messages.
///
/// # Errors
/// [`DemoError`] naming the file or step that failed.
pub fn run(
    out: &Path,
    chip: &str,
    progress: &mut dyn FnMut(&str),
) -> Result<DemoOutcome, DemoError> {
    std::fs::create_dir_all(out).map_err(|source| DemoError::Io {
        path: out.to_path_buf(),
        source,
    })?;
    let mut files = Vec::new();
    let inputs = out.join("inputs");
    std::fs::create_dir_all(&inputs).map_err(|source| DemoError::Io {
        path: inputs.to_path_buf(),
        source,
    })?;
    for (name, text) in [
        ("soil-moisture.toml", CONFIG),
        ("soil_factory.csv", FACTORY),
        ("soil_unit_calibration.csv", CALIBRATION),
        ("soil_unit_holdout.csv", HOLDOUT),
    ] {
        write(&inputs, name, text.as_bytes(), &mut files)?;
    }
    let config = Config::load(&inputs.join("soil-moisture.toml"))?;
    let epochs = config.epochs();

    progress("1/5 training the float base model on the factory data");
    let base = Base::train(
        config,
        &inputs.join("soil_factory.csv"),
        &mut |e, n, loss| {
            if e == n || e % 10 == 0 {
                progress(&format!("    epoch {e}/{n}: loss {loss:.6}"));
            }
        },
    )?;
    base.float.save(&out.join("base-model.json"))?;
    files.push(out.join("base-model.json"));

    progress("2/5 quantizing and exporting for the device");
    let q = &base.quant;
    let blob = crate::export::model_blob(&q.desc, &q.params, &base.float.scaling)?;
    write(out, "base-model.honb", &blob, &mut files)?;
    let rust = crate::export::rust_source(
        &q.desc,
        &q.params,
        &base.float.scaling,
        "the demo's soil-moisture base model",
    )?;
    write(out, "base_model.rs", rust.as_bytes(), &mut files)?;
    let quant_text = crate::quant::render(&q.report);

    let cal = base.prepare(&inputs.join("soil_unit_calibration.csv"))?;
    let hold = base.prepare(&inputs.join("soil_unit_holdout.csv"))?;

    progress(&format!("3/5 planning training memory for {chip}"));
    let chip_info =
        crate::chips::find(chip).ok_or_else(|| DemoError::UnknownChip(chip.to_owned()))?;
    // Every alternative of the advice gets its drift cost on the new probe's samples, as
    // `hone plan --model --train --eval` gives it.
    let drift_cost = |d: &hone_core::model::ModelDesc| {
        crate::pipeline::drift_cost(&base, &cal, &hold, crate::pipeline::PLAN_DRIFT_EPOCHS, d)
            .map_err(Into::into)
    };
    let plan_report = memplan::plan_report(
        &q.desc,
        &Budget::chip(chip_info),
        Reserve::default(),
        Some(&memplan::engine_overhead(chip_info)),
        &AdviceOptions::default(),
        Some(&drift_cost),
    )?;
    let plan_text = memplan::render_table(&plan_report);
    write(
        out,
        "plan.json",
        serde_json::to_string_pretty(&plan_report)?.as_bytes(),
        &mut files,
    )?;

    progress("4/5 calibrating the new probe in fixed point beside float");
    let opts = RunOptions {
        epochs: 30,
        order_seed: base.config.train().seed,
        per_step: true,
        probe: cal.len(),
        shuffle: true,
    };
    let run = run_side_by_side(
        &q.desc,
        &q.params,
        &q.float_params,
        &cal,
        &hold,
        &opts,
        &mut |_| {},
    )?;
    let setup = vec![
        (
            "base model".to_string(),
            format!(
                "soil moisture, {} factory rows, {epochs} epochs",
                FACTORY.lines().count() - 1
            ),
        ),
        (
            "calibration".into(),
            format!("{} reference samples of a new probe, 30 passes", cal.len()),
        ),
        (
            "evaluation".into(),
            format!("{} further samples of the same probe", hold.len()),
        ),
        ("formats".into(), format_summary(&q.desc)),
        (
            "training".into(),
            format!(
                "batch {}, learning rate {}, momentum {}, seed {}",
                q.desc.train.batch,
                hone_report::report::short_decimal(q.desc.train.lr.to_f64()),
                hone_report::report::short_decimal(q.desc.train.momentum.to_f64()),
                q.desc.train.seed
            ),
        ),
    ];
    let mut drift = DriftReport::from_run(&run, false, setup, Thresholds::default());
    drift.unit = base.config.data().unit.clone();
    // A failed saturation check names the format that would have held the values, as in
    // `hone drift`.
    drift.advise_saturation(&q.desc, &run, &cal, &q.float_params)?;
    write(
        out,
        "drift.json",
        serde_json::to_string_pretty(&drift)?.as_bytes(),
        &mut files,
    )?;

    progress("5/5 guarding the calibrated weights");
    let guard = guard_session(&q.desc, &q.params, &blob, &cal, &hold)?;
    let guard_text: String = guard.iter().map(|(k, v)| format!("  {k}: {v}\n")).collect();

    let mut report: Report = drift.document("hone demo: calibrating a soil-moisture probe");
    report.sections.insert(
        0,
        Section {
            heading: "About this demo".into(),
            blocks: vec![Block::Paragraph(
                "All data here are invented by hone's seeded scenario generator (a capacitive soil-moisture probe, water content by the Topp et al. 1980 equation). A base model learns many probes; one new probe is then calibrated on ten reference samples, in fixed point exactly as the device would, beside its float twin."
                    .into(),
            )],
        },
    );
    report.sections.push(Section {
        heading: "Quantization".into(),
        blocks: crate::quant::blocks(&q.report),
    });
    report.sections.push(Section {
        heading: format!("Memory plan for {}", chip_info.name),
        blocks: memplan::plan_blocks(&plan_report),
    });
    report.sections.push(Section {
        heading: "Rollback guard".into(),
        blocks: vec![Block::KeyValues(guard)],
    });
    files.extend(
        report
            .write(out, "report")
            .map_err(|source| DemoError::Io {
                path: out.to_path_buf(),
                source,
            })?,
    );

    let summary = format!(
        "{quant_text}\n{plan_text}\n{}\nRollback guard\n{guard_text}\nWritten to {}:\n{}",
        drift.render_text(),
        out.display(),
        files
            .iter()
            .map(|f| format!("  {}", f.display()))
            .collect::<Vec<_>>()
            .join("\n")
    );
    Ok(DemoOutcome {
        files,
        drift_pass: drift.verdict.pass,
        fits: plan_report.fits,
        summary,
    })
}

fn format_summary(d: &hone_core::model::ModelDesc) -> String {
    let mut parts = vec![format!("input {}", d.input_format)];
    for (k, l) in d.layers.iter().enumerate() {
        if l.kind.has_params() {
            parts.push(format!(
                "layer {k}: weights {}, bias {}, out {}",
                l.weight.value, l.bias.value, l.out
            ));
        }
    }
    parts.join("; ")
}

/// The device's guarded session on the host: the calibration samples train, the hold-out
/// samples judge, the factory blob is the fallback.
fn guard_session(
    desc: &hone_core::model::ModelDesc,
    params: &crate::sim::QuantParams,
    blob: &[u8],
    cal: &Prepared,
    hold: &Prepared,
) -> Result<Vec<(String, String)>, hone_core::Error> {
    let plan = Plan::of(desc)?;
    let mut arena = vec![0u32; plan.ram_words()];
    let views = params.views();
    let mut t = Trainer::new(desc, &plan, &mut arena, &views)?;
    let last_good = hone_core::blob::decode(blob)?;
    let f = desc.input_format;
    let train: Vec<_> = (0..3)
        .flat_map(|_| (0..cal.len()).map(|i| cal.fixed(i, f)))
        .collect();
    let holdout: Vec<_> = (0..hold.len()).map(|i| hold.fixed(i, f)).collect();
    let cfg = GuardConfig::DEFAULT;
    let r = guard::calibrate(&mut t, train, holdout, &cfg, &last_good)?;
    Ok(vec![
        (
            "held-back loss".into(),
            format!(
                "before {:.6}, after {:.6}",
                r.before.mean_loss.to_f64(),
                r.after.mean_loss.to_f64()
            ),
        ),
        (
            "saturations".into(),
            format!("{} ppm", r.after.saturation_ppm()),
        ),
        ("trained on".into(), format!("{} samples", r.trained)),
        ("verdict".into(), format!("{:?}", r.verdict)),
        (
            "limits".into(),
            format!(
                "loss may rise {} ‰, saturations ≤ {} ppm",
                cfg.max_loss_rise_permille, cfg.max_saturation_ppm
            ),
        ),
    ])
}
