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

mod args;
mod cmd {
    pub(crate) mod checkpoint;
    pub(crate) mod device;
    pub(crate) mod drift;
    pub(crate) mod fleet;
    pub(crate) mod onnx;
    pub(crate) mod plan;
    pub(crate) mod sweep;
}

use args::*;
use cmd::checkpoint::checkpoint;
use cmd::device::device;
use cmd::drift::drift;
use cmd::plan::plan;
use cmd::sweep::sweep;

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
            out!("{}", cmd::fleet::run(*a)?);
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
            outln!("{}", cmd::onnx::run(c)?);
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

fn size(s: &str, what: &str) -> Result<u32> {
    hone_host::memplan::parse_size(s).with_context(|| format!("--{what}"))
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

/// Refuses outputs that name one file twice or name an input (see
/// [`hone_report::fsutil::check_outputs`]).
fn distinct(inputs: &[(&str, &Path)], outputs: &[(&str, &Path)]) -> Result<()> {
    Ok(hone_report::fsutil::check_outputs(inputs, outputs)?)
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
