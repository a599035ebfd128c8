//! The fleet study: how many reference samples must a technician take per unit, and what share
//! of units then meets the spec?
//!
//! Many units of one product are simulated. Each unit distorts the inputs in its own way: a
//! gain and an offset per input column, drawn once per unit, and noise drawn per reading, from
//! the distributions of the config's `[fleet]` section ([`spread`]). Each unit draws its rows
//! from a pool of reference data (a CSV read with the config's columns) and distorts them:
//! `n_max` reference samples to calibrate on, [`FleetOptions::guard_holdout`] further samples
//! the rollback guard holds back, and [`FleetOptions::eval_samples`] further samples to judge
//! the unit by.
//!
//! For every count `N` in [`FleetOptions::samples`] the unit is calibrated on its first `N`
//! reference samples (so a larger `N` extends the session of a smaller one), with the config's
//! training setup, by [`crate::sim::run_side_by_side`]: the core's fixed-point trainer, the
//! device's exact arithmetic, beside the `f64` twin. The unit's error is then measured on its
//! evaluation samples: RMSE in the target's unit (regression) or error rate in % (classification).
//! A second session of the same samples in the same order goes through the core's rollback
//! guard ([`hone_core::guard::calibrate`], default thresholds) with the guard samples held
//! back; on these clean sessions every rejection is a false alarm. That session runs as the
//! firmware runs it (every pass, then one flush of a partial batch), where the measured
//! calibration flushes after every pass as `hone drift` does, so with a batch that does not
//! divide N the guard judges a session that differs from the measured one by those flushes.
//!
//! Every unit has its own random stream, derived from the seed and the unit's index, so the
//! result does not depend on how many threads run or in which order units finish.

pub mod render;
pub mod spread;
pub mod stats;

use std::path::PathBuf;
use std::sync::atomic::{AtomicUsize, Ordering};

use hone_core::guard::{self, GuardConfig, Verdict};
use hone_core::plan::Plan;
use hone_core::train::Trainer;
use rayon::prelude::*;
use serde::Serialize;

use crate::data::{Dataset, Rows, Task};
use crate::pipeline::Base;
use crate::scenario::prng::Sampler;
use crate::sim::{epoch_order, run_side_by_side, Prepared, RunOptions};
use spread::{FeatureSpread, FleetSpread};
use stats::{share_within, Spread};

/// Simulated units when the command is not told otherwise.
pub const DEFAULT_UNITS: usize = 500;
/// Evaluation samples per unit when the command is not told otherwise.
pub const DEFAULT_EVAL_SAMPLES: usize = 40;
/// Samples the guard holds back per unit when the command is not told otherwise.
pub const DEFAULT_GUARD_HOLDOUT: usize = 3;
/// Largest number of units, reference, guard or evaluation samples per unit: far beyond any
/// study, small enough that a mistyped number is refused rather than run for days.
pub const MAX_COUNT: usize = 1_000_000;

/// What to simulate.
#[derive(Clone, Debug, PartialEq)]
pub struct FleetOptions {
    /// Reference-sample counts to compare, each at least 1, none repeated.
    pub samples: Vec<usize>,
    /// Units to simulate.
    pub units: usize,
    /// Evaluation samples per unit.
    pub eval_samples: usize,
    /// Samples the rollback guard holds back per unit.
    pub guard_holdout: usize,
    /// Passes over the reference samples in each calibration.
    pub epochs: u32,
    /// Seed of the units' distortions and rows.
    pub seed: u64,
    /// The spec limit, overriding the config's `fleet.spec`.
    pub spec: Option<f64>,
    /// Worker threads (at least 1).
    pub threads: usize,
}

/// Why a study cannot run.
#[derive(Debug, thiserror::Error)]
pub enum FleetError {
    /// A setting is out of range.
    #[error("{option}: {message}")]
    Option {
        /// The option, as the command line writes it.
        option: &'static str,
        /// What is wrong and what to do.
        message: String,
    },
    /// The config has no `[fleet]` section.
    #[error(
        "{}: no `[fleet]` section; add one saying how units differ (see configs/soil-moisture.toml \
         for an example)",
        config.display()
    )]
    NoSection {
        /// The config file.
        config: PathBuf,
    },
    /// A `[fleet.feature.NAME]` table names a column the data does not feed the model.
    #[error(
        "{}: `fleet.feature.{name}`: `{name}` is not an input column of {} (its inputs: {})",
        config.display(),
        data.display(),
        columns.join(", ")
    )]
    UnknownFeature {
        /// The config file.
        config: PathBuf,
        /// The data file.
        data: PathBuf,
        /// The name.
        name: String,
        /// The input columns.
        columns: Vec<String>,
    },
    /// The data file has no rows to draw from.
    #[error("{}: no rows to draw units' samples from", data.display())]
    EmptyPool {
        /// The data file.
        data: PathBuf,
    },
    /// The data could not be read or do not suit the model.
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
    /// The model could not be exported as the units' fallback blob.
    #[error(transparent)]
    Export(#[from] crate::export::ExportError),
    /// The worker threads could not start.
    #[error("cannot start worker threads: {0}")]
    Threads(#[source] rayon::ThreadPoolBuildError),
    /// One unit's simulation failed.
    #[error("unit {unit}: {source}")]
    Unit {
        /// The unit's index, from 0.
        unit: usize,
        /// What failed.
        #[source]
        source: UnitError,
    },
}

/// Why one unit's simulation failed.
#[derive(Debug, thiserror::Error)]
pub enum UnitError {
    /// The unit's samples do not suit the model.
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
    /// Preparing samples or the calibration run failed.
    #[error(transparent)]
    Sim(#[from] crate::sim::SimError),
    /// The core refused a step.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
    /// The calibration recorded no epoch.
    #[error("the calibration recorded no epoch")]
    NoEpoch,
    /// The guarded session failed.
    #[error("guarded session: {0}")]
    Guarded(#[source] hone_core::Error),
}

impl FleetOptions {
    /// Checks the counts and the spec limit.
    ///
    /// # Errors
    /// [`FleetError::Option`] naming the option.
    pub fn check(&self) -> Result<(), FleetError> {
        let bad =
            |option: &'static str, message: String| Err(FleetError::Option { option, message });
        if self.samples.is_empty() {
            return bad(
                "--samples",
                "no reference-sample counts given; list the counts to compare, e.g. 3,5,10,20"
                    .into(),
            );
        }
        for (i, &n) in self.samples.iter().enumerate() {
            if n == 0 || n > MAX_COUNT {
                return bad(
                    "--samples",
                    format!("{n} is not a count of reference samples from 1 to {MAX_COUNT}"),
                );
            }
            if self.samples[..i].contains(&n) {
                return bad(
                    "--samples",
                    format!("{n} is given twice; give each count once"),
                );
            }
        }
        for (option, v) in [
            ("--units", self.units),
            ("--eval-samples", self.eval_samples),
            ("--guard-holdout", self.guard_holdout),
        ] {
            if v == 0 || v > MAX_COUNT {
                return bad(option, format!("{v} is not a count from 1 to {MAX_COUNT}"));
            }
        }
        if self.epochs == 0 {
            return bad("--epochs", "must be at least 1".into());
        }
        if self.threads == 0 {
            return bad("--jobs", "must be at least 1".into());
        }
        if let Some(s) = self.spec {
            if !(s.is_finite() && s > 0.0) {
                return bad(
                    "--spec",
                    format!("{s} is not a spec limit; give a finite number greater than 0"),
                );
            }
        }
        Ok(())
    }
}

/// The figures of one reference-sample count.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FleetRow {
    /// Reference samples per unit.
    pub samples: usize,
    /// Units' error after calibration in fixed point (the device).
    pub fixed: Spread,
    /// The same in float.
    pub float: Spread,
    /// Units within the spec after calibration in fixed point, %.
    pub fixed_within_spec_pct: f64,
    /// The same in float, %.
    pub float_within_spec_pct: f64,
    /// Clean sessions the rollback guard rejected, % of units.
    pub guard_rejected_pct: f64,
    /// Per unit, fixed-point error minus float error.
    pub fixed_minus_float: Spread,
}

/// The distortion of one input column, as the report states it.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FeatureSetup {
    /// Column.
    pub name: String,
    /// Gain mean and standard deviation.
    pub gain: [f64; 2],
    /// Offset mean and standard deviation, in the column's unit.
    pub offset: [f64; 2],
    /// Noise standard deviation per reading, in the column's unit.
    pub noise: f64,
}

/// What was simulated.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FleetSetup {
    /// Units simulated.
    pub units: usize,
    /// Evaluation samples per unit.
    pub eval_samples: usize,
    /// Samples the guard held back per unit.
    pub guard_holdout: usize,
    /// Passes over the reference samples.
    pub epochs: u32,
    /// Seed.
    pub seed: u64,
    /// The spec limit.
    pub spec: f64,
    /// `rmse` (regression) or `error_rate_pct` (classification).
    pub metric: &'static str,
    /// Unit of the error (the target's unit, or `%`).
    pub unit: String,
    /// Rows in the pool the units drew from.
    pub pool_rows: usize,
    /// The distorted columns.
    pub features: Vec<FeatureSetup>,
}

/// The outcome of a study.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FleetReport {
    /// What was simulated.
    pub setup: FleetSetup,
    /// Units' error before calibration, fixed point (the factory model on the unit).
    pub before_fixed: Spread,
    /// The same in float.
    pub before_float: Spread,
    /// Units within the spec before calibration, fixed point, %.
    pub before_within_spec_pct: f64,
    /// One row per reference-sample count, in the order given.
    pub rows: Vec<FleetRow>,
    /// Input values that saturated the model's input format, over all units' samples.
    pub input_saturations: u64,
}

/// One unit's figures.
#[derive(Clone, Debug, Default, PartialEq)]
struct UnitResult {
    before_fixed: f64,
    before_float: f64,
    /// Per reference-sample count.
    fixed: Vec<f64>,
    float: Vec<f64>,
    rejected: Vec<bool>,
    input_saturations: u64,
}

/// Loads the pool of reference rows with the config's columns, unscaled (the units distort
/// the columns as read).
///
/// # Errors
/// [`FleetError::Data`] for a file that does not load or fit the model,
/// [`FleetError::EmptyPool`] for a file without rows.
pub fn load_pool(base: &Base, csv: &std::path::Path) -> Result<Dataset, FleetError> {
    let classes =
        (base.config.data().spec.task == Task::Classification).then_some(&base.float.outputs[..]);
    let data = base.config.load_data(csv, classes)?;
    data.check_features(&base.float.features)?;
    if data.is_empty() {
        return Err(FleetError::EmptyPool {
            data: csv.to_path_buf(),
        });
    }
    Ok(data)
}

/// Everything every unit shares.
struct Shared<'a> {
    base: &'a Base,
    pool: &'a Dataset,
    /// Per input column of the pool, its spread if it has one.
    spreads: Vec<Option<&'a FeatureSpread>>,
    blob: Vec<u8>,
    opts: &'a FleetOptions,
    classification: bool,
}

/// Runs the study. `progress(done, total)` is called as units finish, from any thread.
///
/// # Errors
/// [`FleetError`]: options out of range, a config without `[fleet]`, a spread for a column
/// the data does not have, an empty pool, a unit whose simulation fails (the first by index).
pub fn run(
    base: &Base,
    pool: &Dataset,
    opts: &FleetOptions,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Result<FleetReport, FleetError> {
    opts.check()?;
    let fleet: &FleetSpread = base.config.fleet().ok_or_else(|| FleetError::NoSection {
        config: base.config.source().to_path_buf(),
    })?;
    if pool.is_empty() {
        return Err(FleetError::EmptyPool {
            data: pool.source.clone(),
        });
    }
    for f in &fleet.features {
        if !pool.features.contains(&f.name) {
            return Err(FleetError::UnknownFeature {
                config: base.config.source().to_path_buf(),
                data: pool.source.clone(),
                name: f.name.clone(),
                columns: pool.features.clone(),
            });
        }
    }
    let spreads = pool
        .features
        .iter()
        .map(|n| fleet.features.iter().find(|f| &f.name == n))
        .collect();
    let q = &base.quant;
    let blob = crate::export::model_blob(&q.desc, &q.params, &base.float.scaling)?;
    let classification = pool.target.task() == Task::Classification;
    let shared = Shared {
        base,
        pool,
        spreads,
        blob,
        opts,
        classification,
    };
    let workers = rayon::ThreadPoolBuilder::new()
        .num_threads(opts.threads)
        .build()
        .map_err(FleetError::Threads)?;
    let done = AtomicUsize::new(0);
    let results: Vec<Result<UnitResult, UnitError>> = workers.install(|| {
        (0..opts.units)
            .into_par_iter()
            .map(|u| {
                let r = unit(&shared, u);
                progress(done.fetch_add(1, Ordering::Relaxed) + 1, opts.units);
                r
            })
            .collect()
    });
    let mut units = Vec::with_capacity(results.len());
    for (u, r) in results.into_iter().enumerate() {
        units.push(r.map_err(|source| FleetError::Unit { unit: u, source })?);
    }
    let spec = opts.spec.unwrap_or(fleet.spec);
    Ok(summarize(&shared, fleet, spec, &units))
}

fn summarize(s: &Shared<'_>, fleet: &FleetSpread, spec: f64, units: &[UnitResult]) -> FleetReport {
    let col = |f: &dyn Fn(&UnitResult) -> f64| units.iter().map(f).collect::<Vec<f64>>();
    let before_fixed = col(&|u| u.before_fixed);
    let rows = s
        .opts
        .samples
        .iter()
        .enumerate()
        .map(|(k, &n)| {
            let fixed = col(&|u| u.fixed[k]);
            let float = col(&|u| u.float[k]);
            let diff: Vec<f64> = fixed.iter().zip(&float).map(|(a, b)| a - b).collect();
            let rejected = units.iter().filter(|u| u.rejected[k]).count();
            FleetRow {
                samples: n,
                fixed: Spread::of(&fixed),
                float: Spread::of(&float),
                fixed_within_spec_pct: share_within(&fixed, spec),
                float_within_spec_pct: share_within(&float, spec),
                guard_rejected_pct: 100.0 * rejected as f64 / units.len().max(1) as f64,
                fixed_minus_float: Spread::of(&diff),
            }
        })
        .collect();
    let config = &s.base.config;
    FleetReport {
        setup: FleetSetup {
            units: s.opts.units,
            eval_samples: s.opts.eval_samples,
            guard_holdout: s.opts.guard_holdout,
            epochs: s.opts.epochs,
            seed: s.opts.seed,
            spec,
            metric: if s.classification {
                "error_rate_pct"
            } else {
                "rmse"
            },
            unit: if s.classification {
                "%".into()
            } else {
                config.data().unit.clone()
            },
            pool_rows: s.pool.len(),
            features: fleet
                .features
                .iter()
                .map(|f| FeatureSetup {
                    name: f.name.clone(),
                    gain: [f.gain.mean, f.gain.sd],
                    offset: [f.offset.mean, f.offset.sd],
                    noise: f.noise,
                })
                .collect(),
        },
        before_within_spec_pct: share_within(&before_fixed, spec),
        before_fixed: Spread::of(&before_fixed),
        before_float: Spread::of(&col(&|u| u.before_float)),
        rows,
        input_saturations: units.iter().map(|u| u.input_saturations).sum(),
    }
}

/// The unit's random stream: sub-stream `unit` of the seed, so it depends on nothing but
/// these two.
fn unit_stream(seed: u64, unit: usize) -> Sampler {
    Sampler::new(seed, unit as u64)
}

/// Draws `count` rows of the pool and distorts them with the unit's gains and offsets and
/// fresh noise.
fn draw(
    s: &Shared<'_>,
    rng: &mut Sampler,
    distortion: &[(f64, f64, f64)],
    count: usize,
) -> Dataset {
    let rows: Vec<usize> = (0..count)
        .map(|_| rng.below(s.pool.len() as u64) as usize)
        .collect();
    let mut x = Rows::with_capacity(s.pool.x.width(), rows.len());
    let mut row = Vec::with_capacity(s.pool.x.width());
    for &r in &rows {
        row.clear();
        row.extend(
            s.pool.x[r]
                .iter()
                .zip(distortion)
                .map(|(&v, &(gain, offset, noise))| {
                    let n = if noise > 0.0 {
                        noise * rng.standard_normal()
                    } else {
                        0.0
                    };
                    gain * v + offset + n
                }),
        );
        x.push(&row);
    }
    Dataset {
        source: s.pool.source.clone(),
        features: s.pool.features.clone(),
        x,
        target: s.pool.target.select(&rows),
    }
}

/// The unit's rows, scaled for the model and quantized.
fn prepare(s: &Shared<'_>, mut data: Dataset) -> Result<Prepared, UnitError> {
    crate::data::apply(&s.base.float.scaling, &mut data)?;
    Ok(Prepared::new(&data, &s.base.quant.desc)?)
}

/// The first `n` samples of `all`.
fn first(all: &Dataset, n: usize) -> Dataset {
    let rows: Vec<usize> = (0..n).collect();
    Dataset {
        source: all.source.clone(),
        features: all.features.clone(),
        x: all.x.head(n),
        target: all.target.select(&rows),
    }
}

/// The error the study reports: RMSE, or 100 − accuracy for classification.
fn error_of(s: &Shared<'_>, metric: f64) -> f64 {
    if s.classification {
        100.0 - metric
    } else {
        metric
    }
}

fn unit(s: &Shared<'_>, u: usize) -> Result<UnitResult, UnitError> {
    let opts = s.opts;
    let mut rng = unit_stream(opts.seed, u);
    let distortion: Vec<(f64, f64, f64)> = s
        .spreads
        .iter()
        .map(|sp| match sp {
            Some(f) => (
                rng.normal(f.gain.mean, f.gain.sd),
                rng.normal(f.offset.mean, f.offset.sd),
                f.noise,
            ),
            None => (1.0, 0.0, 0.0),
        })
        .collect();
    let n_max = opts.samples.iter().copied().max().unwrap_or(0);
    let reference = draw(s, &mut rng, &distortion, n_max);
    let held = prepare(s, draw(s, &mut rng, &distortion, opts.guard_holdout))?;
    let eval = prepare(s, draw(s, &mut rng, &distortion, opts.eval_samples))?;
    let q = &s.base.quant;
    let order_seed = s.base.config.train().seed;
    let run_opts = RunOptions {
        epochs: opts.epochs,
        order_seed,
        per_step: false,
        probe: 0,
        shuffle: true,
    };
    let mut out = UnitResult {
        input_saturations: (held.input_saturations + eval.input_saturations) as u64,
        ..UnitResult::default()
    };
    let last_good = hone_core::blob::decode(&s.blob)?;
    let plan = Plan::of(&q.desc)?;
    let mut arena = vec![0u32; plan.ram_words()];
    for (k, &n) in opts.samples.iter().enumerate() {
        let train = prepare(s, first(&reference, n))?;
        if n == n_max {
            out.input_saturations += train.input_saturations as u64;
        }
        let run = run_side_by_side(
            &q.desc,
            &q.params,
            &q.float_params,
            &train,
            &eval,
            &run_opts,
            &mut |_| {},
        )?;
        let (start, end) = match (run.epochs.first(), run.epochs.last()) {
            (Some(a), Some(b)) => (a, b),
            _ => return Err(UnitError::NoEpoch),
        };
        if k == 0 {
            out.before_fixed = error_of(s, start.fixed_metric);
            out.before_float = error_of(s, start.float_metric);
        }
        out.fixed.push(error_of(s, end.fixed_metric));
        out.float.push(error_of(s, end.float_metric));
        // The device's guarded session on the same samples in the same order.
        let views = q.params.views();
        let mut t = Trainer::new(&q.desc, &plan, &mut arena, &views)?;
        let f = q.desc.input_format;
        let steps: Vec<_> = (1..=opts.epochs)
            .flat_map(|e| epoch_order(n, e, order_seed))
            .map(|i| train.fixed(i, f))
            .collect();
        let holdout: Vec<_> = (0..held.len()).map(|i| held.fixed(i, f)).collect();
        let r = guard::calibrate(&mut t, steps, holdout, &GuardConfig::DEFAULT, &last_good)
            .map_err(UnitError::Guarded)?;
        out.rejected.push(matches!(r.verdict, Verdict::Reject(_)));
    }
    Ok(out)
}
