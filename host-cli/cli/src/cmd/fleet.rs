//! `hone fleet`: the arguments of the fleet study and the files it writes.

use std::path::PathBuf;

use anyhow::Result;
use clap::Args;
use hone_host::fleet::{self, FleetOptions};

/// The fleet study's arguments.
#[derive(Args)]
pub struct FleetArgs {
    #[command(flatten)]
    model: crate::ModelArgs,
    /// Reference rows the units' samples are drawn from (CSV with the config's columns); each
    /// unit distorts them as the config's `[fleet]` section says.
    #[arg(long)]
    data: PathBuf,
    /// Data the quantizer takes activation ranges from, as `hone quantize --data` does
    /// (default: --data).
    #[arg(long)]
    calib: Option<PathBuf>,
    /// Reference samples per unit to compare, e.g. 3,5,10,20.
    #[arg(long, value_delimiter = ',', default_value = "3,5,10,20")]
    samples: Vec<usize>,
    /// Units to simulate.
    #[arg(long, default_value_t = fleet::DEFAULT_UNITS)]
    units: usize,
    /// Evaluation samples per unit.
    #[arg(long, default_value_t = fleet::DEFAULT_EVAL_SAMPLES)]
    eval_samples: usize,
    /// Samples the rollback guard holds back per unit.
    #[arg(long, default_value_t = fleet::DEFAULT_GUARD_HOLDOUT)]
    guard_holdout: usize,
    /// Passes over the reference samples (default: the config's epochs).
    #[arg(long)]
    epochs: Option<u32>,
    /// Seed of the units' distortions and samples (default: the config's train.seed).
    #[arg(long)]
    seed: Option<u64>,
    /// The spec limit (default: the config's fleet.spec): RMSE in the target's unit, or error
    /// rate in % for classification.
    #[arg(long)]
    spec: Option<f64>,
    /// Worker threads, 1 to 1024 (default: every core).
    #[arg(long, value_parser = clap::value_parser!(u64).range(1..=1024))]
    jobs: Option<u64>,
    /// Print JSON instead of the table.
    #[arg(long)]
    json: bool,
    /// Write the report (HTML, Markdown, plots), the table and the JSON into this folder.
    #[arg(long)]
    out: Option<PathBuf>,
}

/// Runs the study; returns what to print.
pub fn run(a: FleetArgs) -> Result<String> {
    let calib = a.calib.clone().unwrap_or_else(|| a.data.clone());
    let base = crate::load_base(&a.model, &calib)?;
    let opts = FleetOptions {
        samples: a.samples.clone(),
        units: a.units,
        eval_samples: a.eval_samples,
        guard_holdout: a.guard_holdout,
        epochs: a.epochs.unwrap_or(base.config.epochs()),
        seed: a.seed.unwrap_or(base.config.train().seed),
        spec: a.spec,
        threads: a.jobs.map(|j| j as usize).unwrap_or_else(|| {
            std::thread::available_parallelism()
                .map(|n| n.get())
                .unwrap_or(1)
        }),
    };
    // Settings and the config's section first, so a mistake costs no data loading.
    opts.check()?;
    if base.config.fleet().is_none() {
        return Err(fleet::FleetError::NoSection {
            config: a.model.cfg.config.clone(),
        }
        .into());
    }
    let pool = fleet::load_pool(&base, &a.data)?;
    let b = crate::bar(opts.units as u64, "units");
    let started = std::time::Instant::now();
    let report = fleet::run(&base, &pool, &opts, &|done, _| b.set_position(done as u64))?;
    b.finish_and_clear();
    let elapsed = started.elapsed().as_secs_f64();
    if let Some(dir) = &a.out {
        let setup = vec![
            (
                "config".to_string(),
                a.model.cfg.config.display().to_string(),
            ),
            ("model".into(), a.model.model.display().to_string()),
            (
                "reference rows".into(),
                format!("{} ({} rows)", a.data.display(), pool.len()),
            ),
        ];
        let mut files = fleet::render::document(&report, setup).files("fleet")?;
        files.push((
            "fleet.json".into(),
            serde_json::to_string_pretty(&report)?.into_bytes(),
        ));
        files.push((
            "fleet.txt".into(),
            fleet::render::render_text(&report).into_bytes(),
        ));
        for f in hone_report::fsutil::write_all_in(dir, &files)? {
            eprintln!("written: {}", f.display());
        }
    }
    eprintln!(
        "{} units × {} counts in {elapsed:.1} s on {} threads",
        opts.units,
        opts.samples.len(),
        opts.threads
    );
    Ok(if a.json {
        format!("{}\n", serde_json::to_string_pretty(&report)?)
    } else {
        fleet::render::render_text(&report)
    })
}
