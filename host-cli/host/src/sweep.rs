//! Sweeps: the same calibration run over a grid of formats, rounding, learning rates and train
//! modes, in parallel on every core, with the Pareto front of RAM against drift.
//!
//! Every grid point starts from the same quantized base description and float weights. Its
//! description differs only in the swept settings; its RAM is the core's plan, its drift and
//! metric come from [`crate::sim::run_side_by_side`] on the same samples in the same order.
//! A point is on the Pareto front when no other point needs less or equal RAM *and* drifts
//! less or equally, with one of the two strictly better.

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use hone_core::model::{ModelDesc, TrainMode};
use hone_core::num::{QFormat, QScalar, Rounding, Word};
use hone_core::plan::Plan;
use serde::Serialize;

use crate::config::{ModeName, RoundingName};
use crate::quant::{frac_for, WEIGHT_MARGIN};
use crate::sim::{run_side_by_side, Prepared, QuantParams, RunOptions};

/// The axes of a sweep; every combination is one grid point. An empty axis keeps the base
/// description's setting.
#[derive(Clone, Debug, Default)]
pub struct Grid {
    /// Word of weights and biases (fraction bits re-chosen by the quantizer's rule). Empty:
    /// the base description's formats, as the config or the quantizer fixed them.
    pub weight_words: Vec<Word>,
    /// Word of activations (integer bits kept, fraction bits follow the word).
    pub activation_words: Vec<Word>,
    /// Fraction bits added to the weights' format (negative: more headroom); biases keep
    /// theirs.
    pub frac_deltas: Vec<i8>,
    /// Rounding of gradients and updates.
    pub roundings: Vec<Rounding>,
    /// Learning rates.
    pub learning_rates: Vec<f64>,
    /// Train mode applied to every trainable layer (`BiasOnly` keeps weights in flash).
    pub modes: Vec<TrainMode>,
}

/// One grid point's settings.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PointSettings {
    /// Weight word (`i8`, `i16`, `i32`) or `base`.
    pub weights: String,
    /// Activation word or `base`.
    pub activations: String,
    /// Fraction-bit change of the weights.
    pub frac_delta: i8,
    /// Rounding of gradients and updates.
    pub rounding: String,
    /// Learning rate.
    pub learning_rate: f64,
    /// Train mode of the trainable layers.
    pub mode: String,
}

/// One grid point's result.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct PointResult {
    /// Settings.
    pub settings: PointSettings,
    /// RAM of the training arena, bytes.
    pub ram_bytes: u32,
    /// Flash of the factory parameters, bytes.
    pub flash_bytes: u32,
    /// Final evaluation loss, fixed point.
    pub fixed_eval_loss: f64,
    /// Final evaluation loss, float twin.
    pub float_eval_loss: f64,
    /// Drift: |fixed − float| evaluation loss in % of the float loss.
    pub drift_pct: f64,
    /// Final metric, fixed point (accuracy % or RMSE).
    pub metric: f64,
    /// Final RMS weight divergence in steps.
    pub weight_rms_steps: f64,
    /// Saturated values over the run.
    pub saturations: u64,
    /// Lost updates over the run.
    pub lost_updates: u64,
    /// On the Pareto front of RAM against drift.
    pub pareto: bool,
    /// Why the point could not run, if it could not.
    pub error: Option<String>,
}

fn word_name(w: Word) -> String {
    w.to_string()
}

/// Why one grid point could not run (shown in its row; the other points go on).
#[derive(Debug, thiserror::Error)]
pub enum PointError {
    /// The fraction-bit offset leaves a tensor outside 0 to 31 fraction bits.
    #[error(
        "fraction-bit offset {delta:+} gives layer {layer} {tensor} {frac} fraction bits, \
         outside 0 to 31"
    )]
    FracOutOfRange {
        /// The offset.
        delta: i8,
        /// Layer index.
        layer: usize,
        /// `weights` or `biases`.
        tensor: &'static str,
        /// The fraction bits it gives.
        frac: i32,
    },
    /// The learning rate does not fit its format.
    #[error("learning rate {lr}: {source}")]
    LearningRate {
        /// The learning rate.
        lr: f64,
        /// The core's error.
        #[source]
        source: hone_core::Error,
    },
    /// The evaluation loss stopped being a finite number.
    #[error(
        "training diverged (evaluation loss fixed {fixed}, float {float}); lower the learning rate"
    )]
    Diverged {
        /// Fixed-point evaluation loss.
        fixed: f64,
        /// Float evaluation loss.
        float: f64,
    },
    /// The core rejects the point's description.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
    /// Quantizing or simulating the point failed.
    #[error(transparent)]
    Sim(#[from] crate::sim::SimError),
}

/// The description and start parameters of one grid point.
///
/// # Errors
/// A message if the settings give an invalid description.
#[allow(clippy::too_many_arguments)]
pub fn variant(
    base: &ModelDesc,
    float: &[(Vec<f64>, Vec<f64>)],
    weights: Option<Word>,
    activations: Option<Word>,
    frac_delta: i8,
    rounding: Option<Rounding>,
    lr: Option<f64>,
    mode: Option<TrainMode>,
) -> Result<(ModelDesc, QuantParams), PointError> {
    let mut d = base.clone();
    for (k, l) in d.layers.iter_mut().enumerate() {
        if let Some(a) = activations {
            let int_bits = l.out.int_bits();
            let frac = (a.bits() as i32 - 1 - int_bits).clamp(0, 31) as u8;
            l.out = QFormat::new(a, frac)?;
        }
        if !l.kind.has_params() {
            continue;
        }
        let (w, b) = &float[k];
        // A new word gets its fraction bits from the quantizer's rule; the fraction-bit offset
        // moves the weights only. Without either, the base description's formats stay.
        for (is_weight, p, vals) in [(true, &mut l.weight, w), (false, &mut l.bias, b)] {
            let delta = if is_weight { frac_delta as i32 } else { 0 };
            let frac = match weights {
                Some(word) => {
                    let max = vals.iter().fold(0f64, |m, v| m.max(v.abs()));
                    Some((word, frac_for(max, WEIGHT_MARGIN, word) as i32 + delta))
                }
                None if delta != 0 => Some((p.value.word, p.value.frac as i32 + delta)),
                None => None,
            };
            let Some((word, frac)) = frac else { continue };
            // Out of range is an error of this point, not a silent clamp that would keep the
            // offset's label on a format it does not describe.
            if !(0..=31).contains(&frac) {
                return Err(PointError::FracOutOfRange {
                    delta: frac_delta,
                    layer: k,
                    tensor: if is_weight { "weights" } else { "biases" },
                    frac,
                });
            }
            p.value = QFormat::new(word, frac as u8)?;
            if let Some(m) = p.master {
                if m.frac < p.value.frac {
                    p.master = Some(QFormat::new(m.word, p.value.frac)?);
                }
            }
        }
        if let Some(m) = mode {
            if l.mode != TrainMode::Frozen {
                l.mode = m;
            }
        }
    }
    if let Some(r) = rounding {
        d.train.rounding.gradients = r;
        d.train.rounding.updates = r;
    }
    if let Some(lr) = lr {
        d.train.lr = QScalar::from_f64(lr, d.train.lr.frac)
            .map_err(|source| PointError::LearningRate { lr, source })?;
    }
    d.check()?;
    let (params, _) = QuantParams::quantize(&d, float)?;
    Ok((d, params))
}

/// Marks the Pareto front (minimize RAM and drift) among points that ran.
pub fn mark_pareto(points: &mut [PointResult]) {
    let n = points.len();
    for i in 0..n {
        if points[i].error.is_some() {
            continue;
        }
        let (ri, di) = (points[i].ram_bytes, points[i].drift_pct);
        let dominated = (0..n).any(|j| {
            j != i
                && points[j].error.is_none()
                && points[j].ram_bytes <= ri
                && points[j].drift_pct <= di
                && (points[j].ram_bytes < ri || points[j].drift_pct < di)
        });
        points[i].pareto = !dominated;
    }
}

/// Runs the whole grid on `threads` workers. `progress(done, total)` is called as points
/// finish.
#[allow(clippy::too_many_arguments)]
pub fn run(
    base: &ModelDesc,
    float: &[(Vec<f64>, Vec<f64>)],
    grid: &Grid,
    train: &Prepared,
    eval: &Prepared,
    opts: &RunOptions,
    threads: usize,
    progress: &(dyn Fn(usize, usize) + Sync),
) -> Vec<PointResult> {
    fn axis<T: Clone>(v: &[T]) -> Vec<Option<T>> {
        if v.is_empty() {
            vec![None]
        } else {
            v.iter().cloned().map(Some).collect()
        }
    }
    let mut combos = Vec::new();
    for w in axis(&grid.weight_words) {
        for a in axis(&grid.activation_words) {
            for &fd in if grid.frac_deltas.is_empty() {
                &[0i8][..]
            } else {
                &grid.frac_deltas[..]
            } {
                for r in axis(&grid.roundings) {
                    for lr in axis(&grid.learning_rates) {
                        for m in axis(&grid.modes) {
                            combos.push((w, a, fd, r, lr, m));
                        }
                    }
                }
            }
        }
    }
    let total = combos.len();
    let next = AtomicUsize::new(0);
    let done = AtomicUsize::new(0);
    let results: Mutex<Vec<Option<PointResult>>> = Mutex::new(vec![None; total]);
    std::thread::scope(|s| {
        for _ in 0..threads.max(1).min(total.max(1)) {
            s.spawn(|| loop {
                let i = next.fetch_add(1, Ordering::Relaxed);
                let Some(&(w, a, fd, r, lr, m)) = combos.get(i) else {
                    break;
                };
                let settings = PointSettings {
                    weights: w.map_or("base".into(), word_name),
                    activations: a.map_or("base".into(), word_name),
                    frac_delta: fd,
                    rounding: r.map_or("base".into(), |r| RoundingName(r).to_string()),
                    learning_rate: lr.unwrap_or_else(|| base.train.lr.to_f64()),
                    mode: m.map_or("base".into(), |m| ModeName(m).to_string()),
                };
                let result = point(base, float, (w, a, fd, r, lr, m), train, eval, opts)
                    .unwrap_or_else(|e| PointResult {
                        settings: settings.clone(),
                        ram_bytes: 0,
                        flash_bytes: 0,
                        fixed_eval_loss: f64::NAN,
                        float_eval_loss: f64::NAN,
                        drift_pct: f64::NAN,
                        metric: f64::NAN,
                        weight_rms_steps: f64::NAN,
                        saturations: 0,
                        lost_updates: 0,
                        pareto: false,
                        error: Some(e.to_string()),
                    });
                let result = PointResult { settings, ..result };
                if let Ok(mut r) = results.lock() {
                    r[i] = Some(result);
                }
                progress(done.fetch_add(1, Ordering::Relaxed) + 1, total);
            });
        }
    });
    let mut out: Vec<PointResult> = results
        .into_inner()
        .unwrap_or_default()
        .into_iter()
        .flatten()
        .collect();
    mark_pareto(&mut out);
    out
}

type Combo = (
    Option<Word>,
    Option<Word>,
    i8,
    Option<Rounding>,
    Option<f64>,
    Option<TrainMode>,
);

fn point(
    base: &ModelDesc,
    float: &[(Vec<f64>, Vec<f64>)],
    c: Combo,
    train: &Prepared,
    eval: &Prepared,
    opts: &RunOptions,
) -> Result<PointResult, PointError> {
    let (d, q) = variant(base, float, c.0, c.1, c.2, c.3, c.4, c.5)?;
    let plan = Plan::of(&d)?;
    // Inputs are quantized in the base input format, which the sweep does not change.
    let run = run_side_by_side(&d, &q, float, train, eval, opts, &mut |_| {})?;
    let last = run.epochs.last().copied().unwrap_or_default();
    let drift = crate::drift::gap_pct(last.fixed_eval_loss, last.float_eval_loss);
    if !drift.is_finite() {
        return Err(PointError::Diverged {
            fixed: last.fixed_eval_loss,
            float: last.float_eval_loss,
        });
    }
    Ok(PointResult {
        settings: PointSettings {
            weights: String::new(),
            activations: String::new(),
            frac_delta: 0,
            rounding: String::new(),
            learning_rate: 0.0,
            mode: String::new(),
        },
        ram_bytes: plan.ram_bytes,
        flash_bytes: plan.flash_bytes,
        fixed_eval_loss: last.fixed_eval_loss,
        float_eval_loss: last.float_eval_loss,
        drift_pct: drift,
        metric: last.fixed_metric,
        weight_rms_steps: last.weight_rms_steps,
        saturations: run.epochs.iter().map(|e| e.saturations).sum(),
        lost_updates: run.epochs.iter().map(|e| e.lost_updates).sum(),
        pareto: false,
        error: None,
    })
}

/// The Pareto table (front first, then the rest), sorted by RAM.
pub fn table(points: &[PointResult], classification: bool) -> hone_report::report::Table {
    use hone_report::report::Align::{Left, Right};
    let mut order: Vec<&PointResult> = points.iter().collect();
    order.sort_by(|a, b| {
        b.pareto
            .cmp(&a.pareto)
            .then(a.ram_bytes.cmp(&b.ram_bytes))
            .then(a.drift_pct.total_cmp(&b.drift_pct))
    });
    let metric = if classification { "acc %" } else { "RMSE" };
    hone_report::report::Table {
        headers: [
            "front",
            "weights",
            "activations",
            "Δfrac",
            "rounding",
            "lr",
            "mode",
            "RAM B",
            "flash B",
            "drift %",
            metric,
            "w RMS steps",
            "sat.",
            "lost",
        ]
        .iter()
        .map(|s| s.to_string())
        .collect(),
        rows: order
            .iter()
            .map(|p| {
                let s = &p.settings;
                let err = p.error.is_some();
                vec![
                    if p.pareto {
                        "●".into()
                    } else if err {
                        "error".into()
                    } else {
                        String::new()
                    },
                    s.weights.clone(),
                    s.activations.clone(),
                    format!("{:+}", s.frac_delta),
                    s.rounding.clone(),
                    hone_report::report::short_decimal(s.learning_rate),
                    s.mode.clone(),
                    if err {
                        "–".into()
                    } else {
                        p.ram_bytes.to_string()
                    },
                    if err {
                        "–".into()
                    } else {
                        p.flash_bytes.to_string()
                    },
                    if err {
                        p.error.clone().unwrap_or_default()
                    } else {
                        format!("{:.3}", p.drift_pct)
                    },
                    if err {
                        "–".into()
                    } else if classification {
                        format!("{:.2}", p.metric)
                    } else {
                        format!("{:.5}", p.metric)
                    },
                    if err {
                        "–".into()
                    } else {
                        format!("{:.2}", p.weight_rms_steps)
                    },
                    p.saturations.to_string(),
                    p.lost_updates.to_string(),
                ]
            })
            .collect(),
        align: vec![
            Left, Left, Left, Right, Left, Right, Left, Right, Right, Right, Right, Right, Right,
            Right,
        ],
    }
}

/// Scatter plot of RAM against drift, the front joined.
pub fn plot(points: &[PointResult]) -> String {
    use hone_report::plot::{Point, ScatterPlot};
    ScatterPlot {
        title: "Sweep: RAM against drift".into(),
        x_label: "training RAM (bytes)".into(),
        y_label: "drift (% of float loss)".into(),
        points: points
            .iter()
            .filter(|p| p.error.is_none())
            .map(|p| Point {
                x: p.ram_bytes as f64,
                y: p.drift_pct,
                label: if p.pareto {
                    Some(format!(
                        "{}/{} {} {}",
                        p.settings.weights,
                        p.settings.activations,
                        p.settings.rounding,
                        p.settings.mode
                    ))
                } else {
                    None
                },
                highlight: p.pareto,
            })
            .collect(),
        connect_highlighted: true,
    }
    .to_svg()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn pr(ram: u32, drift: f64) -> PointResult {
        PointResult {
            settings: PointSettings {
                weights: String::new(),
                activations: String::new(),
                frac_delta: 0,
                rounding: String::new(),
                learning_rate: 0.0,
                mode: String::new(),
            },
            ram_bytes: ram,
            flash_bytes: 0,
            fixed_eval_loss: 0.0,
            float_eval_loss: 0.0,
            drift_pct: drift,
            metric: 0.0,
            weight_rms_steps: 0.0,
            saturations: 0,
            lost_updates: 0,
            pareto: false,
            error: None,
        }
    }

    #[test]
    fn pareto_front() {
        let mut p = vec![
            pr(100, 5.0),
            pr(200, 1.0),
            pr(150, 6.0),
            pr(100, 5.0),
            pr(300, 1.0),
            pr(50, 20.0),
        ];
        mark_pareto(&mut p);
        let front: Vec<bool> = p.iter().map(|x| x.pareto).collect();
        // (150, 6) is dominated by (100, 5); (300, 1) by (200, 1); equal points both stay.
        assert_eq!(front, vec![true, true, false, true, false, true]);
    }
}
