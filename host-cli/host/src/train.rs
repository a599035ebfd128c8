//! Float training of a base model on the host: the `f64` twin of the core, run over the
//! factory data for the configured epochs.
//!
//! Factory training trains every layer that has parameters, whatever its `train` mode: the
//! modes say what the *device* may change later, during calibration. The saved model keeps
//! the configured modes.

use std::path::PathBuf;

use hone_core::float::{FloatParams, FloatTarget, Twin};
use hone_core::model::{LayerDesc, ModelDesc, TrainMode};
use hone_core::num::Rng;
use hone_core::plan::Plan;

use crate::config::Config;
use crate::data::{ConstantChannel, Dataset, Rows, Scaling, Targets};
use crate::model::{EpochRecord, FloatLayer, FloatModel, FORMAT_NAME, FORMAT_VERSION};
use crate::sim::epoch_order;

/// Why the float model could not be trained.
#[derive(Debug, thiserror::Error)]
pub enum TrainError {
    /// The data do not suit the config.
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
    /// The config does not give a description.
    #[error(transparent)]
    Config(#[from] crate::config::ConfigError),
    /// The core rejects the description.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
    /// A training row failed.
    #[error("{}: row {row}: {source}", file.display())]
    Row {
        /// The data file.
        file: PathBuf,
        /// Data row, from 1.
        row: usize,
        /// The core's error.
        #[source]
        source: hone_core::Error,
    },
    /// A loss or weight stopped being a finite number.
    #[error(
        "{}: training diverged (a loss or weight is no longer a finite number); lower \
         train.learning-rate (now {learning_rate}) or add train.clip",
        config.display()
    )]
    Diverged {
        /// The config file.
        config: PathBuf,
        /// The learning rate, as written in the message.
        learning_rate: String,
    },
}

/// Initial weights: uniform in ±√(6 / (fan_in + fan_out)) (Glorot and Bengio, "Understanding
/// the difficulty of training deep feedforward neural networks", AISTATS 2010, eq. 16), biases
/// zero. Seeded, so a config and a seed give one start.
pub fn glorot_init(
    desc: &ModelDesc,
    seed: u64,
) -> Result<crate::sim::FloatLayers, hone_core::Error> {
    let shapes = hone_core::model::shapes(desc.input, &desc.layers, desc.loss)?;
    let mut rng = Rng::new(seed ^ 0x9E37_79B9);
    Ok((0..desc.layers.len())
        .map(|k| {
            let g = shapes.layers[k];
            if g.weights == 0 {
                return (Vec::new(), Vec::new());
            }
            let fan_in = g.weights / g.biases.max(1);
            let fan_out = match desc.layers[k].kind {
                hone_core::model::LayerKind::Conv1d { kernel, .. } => g.biases * kernel as u32,
                _ => g.biases,
            };
            let a = (6.0 / (fan_in + fan_out) as f64).sqrt();
            let w = (0..g.weights)
                .map(|_| a * (2.0 * (rng.next_u32() as f64 / 4294967296.0) - 1.0))
                .collect();
            (w, vec![0.0; g.biases as usize])
        })
        .collect())
}

/// The description with every parameter layer set to train fully (factory training).
pub fn all_trainable(desc: &ModelDesc) -> ModelDesc {
    let mut d = desc.clone();
    for l in d.layers.iter_mut() {
        if l.kind.has_params() {
            *l = LayerDesc {
                mode: TrainMode::Full,
                ..*l
            };
        }
    }
    d
}

/// Fraction bits that stand in for `auto` formats where formats do not matter (float
/// training): three integer bits.
pub fn provisional_frac(a: crate::config::AutoFormat) -> u8 {
    (a.word.bits() - 4) as u8
}

/// Fits the input scaling the config asks for on `fit_on`: standardization per input channel
/// when `data.standardize` is on, nothing (no scales, no constant channels) when it is off.
///
/// # Errors
/// A message naming the file and, for statistics the device's `f32` scaling cannot hold, the
/// column.
pub fn fit_scaling(cfg: &Config, fit_on: &Dataset) -> Result<Scaling, TrainError> {
    if !cfg.data().standardize {
        return Ok(Scaling {
            scales: Vec::new(),
            constant: Vec::new(),
        });
    }
    Ok(Scaling::fit_per_channel(
        fit_on,
        cfg.input().channels as usize,
    )?)
}

/// A float model fresh from [`train_float`], with what its training saw.
#[derive(Clone, Debug)]
pub struct Trained {
    /// The model.
    pub model: FloatModel,
    /// Rows the model was trained on.
    pub trained_rows: usize,
    /// Rows held out of training (`data.holdout`) and scored after every epoch.
    pub held_out_rows: usize,
    /// Input channels that do not vary over the training rows: they were given gain 1 and
    /// carry no information. The caller should tell the user.
    pub constant: Vec<ConstantChannel>,
}

/// Mean loss, metric (accuracy in % or mean absolute error) and, for regression, the RMSE of
/// the twin on `data`.
fn score(
    twin: &mut Twin<'_, f64>,
    data: &Dataset,
) -> Result<(f64, f64, Option<f64>), hone_core::Error> {
    let (mut loss, mut metric, mut count, mut sq) = (0f64, 0f64, 0usize, 0f64);
    for (i, x) in data.x.iter().enumerate() {
        match &data.target {
            Targets::Classes { labels, .. } => {
                let o = twin.evaluate(x, FloatTarget::Class(labels[i]))?;
                loss += o.loss;
                metric += (o.predicted == Some(labels[i])) as u8 as f64;
                count += 1;
            }
            Targets::Values { y, .. } => {
                let o = twin.evaluate(x, FloatTarget::Values(&y[i]))?;
                loss += o.loss;
                for (p, t) in twin.output().iter().zip(y[i].iter()) {
                    metric += (p - t).abs();
                    sq += (p - t) * (p - t);
                    count += 1;
                }
            }
        }
    }
    let n = data.x.len().max(1) as f64;
    Ok(match &data.target {
        Targets::Classes { .. } => (loss / n, 100.0 * metric / n, None),
        Targets::Values { .. } => {
            let m = count.max(1) as f64;
            (loss / n, metric / m, Some((sq / m).sqrt()))
        }
    })
}

/// A value in the target's unit: `0.01300 m³/m³`, or the bare number when the config names
/// no unit.
pub fn in_unit(v: f64, unit: &str) -> String {
    if unit.is_empty() {
        format!("{v:.5}")
    } else {
        format!("{v:.5} {unit}")
    }
}

/// The last epoch's figures in one line: on the held-out rows when `data.holdout` kept some,
/// else on the training rows; RMSE and MAE in `unit` for regression, accuracy for
/// classification.
pub fn final_figures(history: &[EpochRecord], unit: &str) -> String {
    let Some(h) = history.last() else {
        return "no epoch recorded".into();
    };
    let (rows, metric, rmse) = match h.eval_metric {
        Some(m) => ("held-out rows", m, h.eval_rmse),
        None => ("training rows", h.metric, h.rmse),
    };
    match rmse {
        Some(r) => format!(
            "{rows}: RMSE {}, MAE {}",
            in_unit(r, unit),
            in_unit(metric, unit)
        ),
        None => format!("{rows}: accuracy {metric:.2} %"),
    }
}

/// Trains a float base model on `data` (unscaled, as loaded). `progress` is called with
/// (epoch, epochs, mean loss) after each epoch.
///
/// # Errors
/// A message naming what failed: a description the core rejects, data that do not fit, a
/// column whose statistics the device's scaling cannot hold.
pub fn train_float(
    cfg: &Config,
    data: &Dataset,
    progress: &mut dyn FnMut(u32, u32, f64),
) -> Result<Trained, TrainError> {
    cfg.check_dataset(data)?;
    let desc = cfg.model_desc_with(provisional_frac)?;
    let train_desc = all_trainable(&desc);
    let seed = cfg.train().seed;
    // Rows held out of training (data.holdout) are scored after every epoch.
    let (fit_rows, held) = if cfg.data().holdout > 0.0 {
        crate::data::split(data, cfg.data().holdout, seed)?
    } else {
        (
            data.clone(),
            Dataset {
                x: Rows::new(data.x.width()),
                target: data.target.select(&[]),
                ..data.clone()
            },
        )
    };
    let Scaling {
        scales: scaling,
        constant,
    } = fit_scaling(cfg, &fit_rows)?;
    let mut scaled = fit_rows;
    crate::data::apply(&scaling, &mut scaled)?;
    let mut held = held;
    crate::data::apply(&scaling, &mut held)?;
    let params = glorot_init(&train_desc, seed)?;
    let plan = Plan::new_float(
        train_desc.input,
        &train_desc.layers,
        train_desc.loss,
        &train_desc.train,
        8,
    )?;
    let mut arena = vec![0f64; plan.ram_bytes as usize / 8];
    let views: Vec<FloatParams<'_, f64>> = params
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut twin = Twin::new(&train_desc, &plan, &mut arena, &views)?;
    let n = scaled.len();
    let mut history = Vec::new();
    let diverged = || TrainError::Diverged {
        config: cfg.source().to_path_buf(),
        learning_rate: hone_report::report::short_decimal(cfg.train().lr.to_f64()),
    };
    for epoch in 1..=cfg.epochs() {
        let mut loss = 0f64;
        for i in epoch_order(n, epoch, seed) {
            let x = &scaled.x[i];
            let out = match &scaled.target {
                Targets::Values { y, .. } => twin.step(x, FloatTarget::Values(&y[i])),
                Targets::Classes { labels, .. } => twin.step(x, FloatTarget::Class(labels[i])),
            }
            .map_err(|source| TrainError::Row {
                file: data.source.clone(),
                row: i + 1,
                source,
            })?;
            loss += out.loss;
        }
        twin.flush();
        let loss = loss / n.max(1) as f64;
        if !loss.is_finite() {
            return Err(diverged());
        }
        let (_, metric, rmse) = score(&mut twin, &scaled)?;
        let (eval_loss, eval_metric, eval_rmse) = if held.is_empty() {
            (None, None, None)
        } else {
            let (l, m, r) = score(&mut twin, &held)?;
            (Some(l), Some(m), r)
        };
        history.push(EpochRecord {
            epoch,
            loss,
            metric,
            rmse,
            eval_loss,
            eval_metric,
            eval_rmse,
        });
        progress(epoch, cfg.epochs(), loss);
    }
    let layers = desc
        .layers
        .iter()
        .enumerate()
        .map(|(k, l)| {
            let p = twin.params(k);
            FloatLayer {
                kind: l.kind,
                mode: l.mode,
                weights: p.map(|p| p.weight.to_vec()).unwrap_or_default(),
                bias: p.map(|p| p.bias.to_vec()).unwrap_or_default(),
            }
        })
        .collect();
    let outputs = match &data.target {
        Targets::Values { names, .. } | Targets::Classes { names, .. } => names.clone(),
    };
    let model = FloatModel {
        format: FORMAT_NAME.into(),
        version: FORMAT_VERSION,
        input: desc.input,
        loss: desc.loss,
        layers,
        scaling,
        features: data.features.clone(),
        outputs,
        history,
    };
    model.check().map_err(|_| diverged())?;
    Ok(Trained {
        model,
        trained_rows: n,
        held_out_rows: held.len(),
        constant,
    })
}
