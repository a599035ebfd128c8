//! The drift report: fixed-point training beside float training, judged against thresholds.
//!
//! [`DriftReport::from_run`] turns a [`DriftRun`] into the document users read and CI checks:
//! per-epoch figures, per-tensor totals, and a verdict made of named checks, each with its
//! measured value, its limit and whether it passed. The defaults of [`Thresholds`] are our own
//! starting points, not published figures; every one can be set from the command line.

use serde::Serialize;

use crate::sim::{DriftRun, EpochDrift, StepDrift, TensorTotals};

mod render;

/// `|fixed − float|` in % of `|float|`: 0 when both are 0, infinite when only the float is 0,
/// NaN when either is not a finite number (a diverged run), so that a check against a limit
/// fails rather than passes.
pub fn gap_pct(fixed: f64, float: f64) -> f64 {
    if !fixed.is_finite() || !float.is_finite() {
        return f64::NAN;
    }
    let d = (fixed - float).abs();
    if d == 0.0 {
        0.0
    } else {
        100.0 * d / float.abs()
    }
}

/// How far fixed point falls behind float, for a one-sided gap: `fixed − float` in % of
/// `|float|` when lower is better (a loss, an RMSE), so a fixed-point model that does better
/// than float has a negative gap and passes. NaN when either is not a finite number. With
/// `two_sided`, the size of the difference either way ([`gap_pct`]).
pub fn shortfall_pct(fixed: f64, float: f64, two_sided: bool) -> f64 {
    if two_sided {
        return gap_pct(fixed, float);
    }
    if !fixed.is_finite() || !float.is_finite() {
        return f64::NAN;
    }
    let d = fixed - float;
    if d == 0.0 {
        0.0
    } else {
        100.0 * d / float.abs()
    }
}

/// Limits the verdict checks. Each applies to the end of the run.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Thresholds {
    /// Largest amount by which the fixed-point evaluation loss exceeds the float one, in % of
    /// the float loss.
    pub max_loss_gap_pct: f64,
    /// Largest amount by which the fixed-point metric falls behind float: percentage points of
    /// accuracy, or % of the float RMSE.
    pub max_metric_gap: f64,
    /// Largest divergence of a trained tensor from float, relative to its own magnitude
    /// (`100 · RMS(fixed − float) / RMS(float)`), %.
    pub max_weight_divergence_pct: f64,
    /// Smallest gradient SQNR at the start of the run, dB.
    pub min_grad_sqnr_db: f64,
    /// Largest share of saturated writes of any one tensor, parts per million.
    pub max_saturation_ppm: f64,
    /// Largest share of updates lost to rounding over the run, %.
    pub max_lost_updates_pct: f64,
    /// Judge the loss and metric gaps both ways: fixed point doing better than float by more
    /// than the limit fails too.
    pub two_sided: bool,
}

impl Default for Thresholds {
    fn default() -> Thresholds {
        Thresholds {
            max_loss_gap_pct: 10.0,
            max_metric_gap: 2.0,
            max_weight_divergence_pct: 25.0,
            min_grad_sqnr_db: 15.0,
            max_saturation_ppm: 1000.0,
            max_lost_updates_pct: 50.0,
            two_sided: false,
        }
    }
}

/// Why a threshold given on the command line was refused.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum LimitError {
    /// The text is not a decimal number.
    #[error("`{0}` is not a number; give a limit of 0 or more, such as 10 or 2.5")]
    NotANumber(String),
    /// NaN or an infinity: no measurement could be compared with it.
    #[error("`{0}` is not a finite number; give a limit of 0 or more, such as 10 or 2.5")]
    NotFinite(String),
    /// Below zero: every measured figure (a gap, a divergence, a rate, an SQNR the verdict
    /// would accept) is compared with a limit of 0 or more.
    #[error("`{0}` is negative; every limit is 0 or more")]
    Negative(String),
}

/// Parses a threshold: a finite decimal number of 0 or more. A gap, divergence or rate
/// below 0 cannot be measured, and a gradient SQNR below 0 dB means more noise than signal,
/// so a negative limit is a mistake rather than a choice.
///
/// # Errors
/// [`LimitError`] saying what is wrong with the text.
pub fn parse_limit(text: &str) -> Result<f64, LimitError> {
    let v: f64 = text
        .trim()
        .parse()
        .map_err(|_| LimitError::NotANumber(text.to_owned()))?;
    if !v.is_finite() {
        return Err(LimitError::NotFinite(text.to_owned()));
    }
    if v < 0.0 {
        return Err(LimitError::Negative(text.to_owned()));
    }
    Ok(v)
}

/// One check of the verdict.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Check {
    /// Stable name, for JSON consumers.
    pub name: &'static str,
    /// What it measures, with its unit.
    pub description: String,
    /// The measured value.
    pub value: f64,
    /// The limit.
    pub limit: f64,
    /// Whether the value is within the limit.
    pub pass: bool,
    /// The tensor the value comes from, for checks judged per tensor (the worst one), such as
    /// `layer 2 grad`.
    pub tensor: Option<String>,
    /// What to change when the check fails, if the run can tell (for saturation: the format
    /// that would have held the values).
    pub advice: Option<String>,
}

/// A check that could not be made because the run measured nothing to judge.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct NotRun {
    /// Stable name, as in [`Check::name`].
    pub name: &'static str,
    /// What it would have measured.
    pub description: String,
    /// Why it was not made.
    pub reason: String,
}

/// The verdict: every check, and whether all passed.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Verdict {
    /// All checks that were made passed.
    pub pass: bool,
    /// The checks.
    pub checks: Vec<Check>,
    /// Checks that were not made; the verdict says so beside its result.
    pub not_run: Vec<NotRun>,
}

impl Verdict {
    /// The verdict in one line.
    pub fn summary(&self) -> String {
        let base = if self.pass {
            "within every threshold"
        } else {
            "thresholds exceeded (exit status 1)"
        };
        if self.not_run.is_empty() {
            return base.to_owned();
        }
        let names: Vec<&str> = self.not_run.iter().map(|n| n.name).collect();
        format!("{base}; not checked: {}", names.join(", "))
    }
}

/// A complete drift report. Field names are stable for `--json`.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct DriftReport {
    /// What was run: model, data, formats, hyperparameters.
    pub setup: Vec<(String, String)>,
    /// `accuracy_pct` or `rmse`.
    pub metric: String,
    /// Unit of the regression target (`data.unit`), empty if the config names none; set by
    /// the caller after [`DriftReport::from_run`].
    pub unit: String,
    /// Epoch 0 (before training) and every epoch.
    pub epochs: Vec<EpochDrift>,
    /// Every step, when recorded.
    pub steps: Vec<StepDrift>,
    /// Totals per tensor.
    pub tensors: Vec<TensorTotals>,
    /// Regression only: each evaluation sample's reference and both predictions at the end.
    pub predictions: Vec<crate::sim::Prediction>,
    /// The thresholds applied.
    pub thresholds: Thresholds,
    /// The verdict.
    pub verdict: Verdict,
}

impl DriftReport {
    /// Judges a run. `classification` picks the metric; `setup` is shown as is.
    ///
    /// The checks, and why each is measured the way it is:
    /// - **loss and metric gaps**: one-sided unless [`Thresholds::two_sided`]: fixed point
    ///   doing better than float is not a failure.
    /// - **weight divergence**: per trained tensor, relative to the tensor's own magnitude,
    ///   the worst tensor named; a count in steps of the format would fail a fine format for
    ///   differences far below anything the metric notices.
    /// - **gradient SQNR**: at the start of the run, where both sides hold the same weights up
    ///   to quantization, so the figure measures the fixed-point gradient arithmetic. Later
    ///   the two sides follow different paths and, near a minimum, gradients shrink towards
    ///   noise: those figures are shown per epoch but not judged.
    /// - **saturation**: per tensor, the worst named; a total over all tensors hides a small
    ///   tensor that saturates often behind the large ones that never do.
    /// - **lost updates**: over the run.
    pub fn from_run(
        run: &DriftRun,
        classification: bool,
        setup: Vec<(String, String)>,
        t: Thresholds,
    ) -> DriftReport {
        let last = run.epochs.last().copied().unwrap_or_default();
        let loss_gap = shortfall_pct(last.fixed_eval_loss, last.float_eval_loss, t.two_sided);
        let metric_gap = if classification {
            let d = last.float_metric - last.fixed_metric;
            if t.two_sided {
                d.abs()
            } else {
                d
            }
        } else {
            shortfall_pct(last.fixed_metric, last.float_metric, t.two_sided)
        };
        // `None` when the start measured no gradient SQNR; an infinite value (no quantization
        // noise at all) is a measurement and passes any limit.
        let start_sqnr = run.epochs.first().and_then(|e| e.grad_sqnr_db);
        let (lost, upd) = run
            .epochs
            .iter()
            .fold((0u64, 0u64), |a, e| (a.0 + e.lost_updates, a.1 + e.updates));
        let lost_pct = if upd > 0 {
            100.0 * lost as f64 / upd as f64
        } else {
            0.0
        };
        let worst_sat = run
            .tensors
            .iter()
            .filter(|x| x.saturations > 0)
            .map(|x| (x, 1e6 * x.saturations as f64 / x.values.max(1) as f64))
            .max_by(|a, b| a.1.total_cmp(&b.1));
        let worst_div = run
            .tensors
            .iter()
            .filter_map(|x| x.divergence_pct.map(|d| (x, d)))
            .max_by(|a, b| a.1.total_cmp(&b.1));
        let name = |x: &TensorTotals| format!("layer {} {}", x.layer, x.tensor);
        let sided = if t.two_sided {
            "either way"
        } else {
            "fixed behind float"
        };
        let metric_desc = if classification {
            format!("accuracy gap ({sided}), percentage points")
        } else {
            format!("RMSE gap ({sided}), % of the float RMSE")
        };
        let within = |v: f64, limit: f64| v <= limit;
        let mut checks = vec![
            Check {
                name: "loss_gap_pct",
                description: format!("evaluation loss gap ({sided}), % of the float loss"),
                value: loss_gap,
                limit: t.max_loss_gap_pct,
                pass: within(loss_gap, t.max_loss_gap_pct),
                tensor: None,
                advice: None,
            },
            Check {
                name: "metric_gap",
                description: metric_desc,
                value: metric_gap,
                limit: t.max_metric_gap,
                pass: within(metric_gap, t.max_metric_gap),
                tensor: None,
                advice: None,
            },
        ];
        let div = worst_div.map_or(0.0, |w| w.1);
        checks.push(Check {
            name: "weight_divergence_pct",
            description: "divergence of the worst trained tensor, % of its RMS".into(),
            value: div,
            limit: t.max_weight_divergence_pct,
            pass: within(div, t.max_weight_divergence_pct),
            tensor: worst_div.map(|w| name(w.0)),
            advice: None,
        });
        let sqnr_description = "gradient SQNR at the start, per probe sample, dB".to_owned();
        let mut not_run = Vec::new();
        match start_sqnr {
            Some(v) => checks.push(Check {
                name: "grad_sqnr_db",
                description: sqnr_description,
                value: v,
                limit: t.min_grad_sqnr_db,
                pass: v >= t.min_grad_sqnr_db,
                tensor: None,
                advice: None,
            }),
            None => not_run.push(NotRun {
                name: "grad_sqnr_db",
                description: sqnr_description,
                reason: "no gradient was measured: no probe samples, or every probed \
                         gradient of the trained layers was zero"
                    .into(),
            }),
        }
        let sat = worst_sat.map_or(0.0, |w| w.1);
        checks.push(Check {
            name: "saturation_ppm",
            description: "saturated writes of the worst tensor, parts per million".into(),
            value: sat,
            limit: t.max_saturation_ppm,
            pass: within(sat, t.max_saturation_ppm),
            tensor: worst_sat.map(|w| name(w.0)),
            advice: None,
        });
        checks.push(Check {
            name: "lost_updates_pct",
            description: "updates lost to rounding, %".into(),
            value: lost_pct,
            limit: t.max_lost_updates_pct,
            pass: within(lost_pct, t.max_lost_updates_pct),
            tensor: None,
            advice: None,
        });
        let pass = checks.iter().all(|c| c.pass);
        DriftReport {
            setup,
            metric: if classification {
                "accuracy_pct".into()
            } else {
                "rmse".into()
            },
            unit: String::new(),
            epochs: run.epochs.clone(),
            steps: run.steps.clone(),
            tensors: run.tensors.clone(),
            predictions: run.predictions.clone(),
            thresholds: t,
            verdict: Verdict {
                pass,
                checks,
                not_run,
            },
        }
    }

    /// When the saturation check failed, says which format would have held the worst
    /// tensor's values: the same word with the fraction bits [`crate::ranges`] chooses from
    /// the float twin's ranges on `train` (outputs, gradients, accumulators) or from the float
    /// twin's final parameters (weights and biases).
    ///
    /// # Errors
    /// The core's error when the float ranges cannot be measured.
    pub fn advise_saturation(
        &mut self,
        desc: &hone_core::model::ModelDesc,
        run: &DriftRun,
        train: &crate::sim::Prepared,
        float_start: &[(Vec<f64>, Vec<f64>)],
    ) -> Result<(), hone_core::Error> {
        use crate::ranges::{accumulator_need, float_ranges, holding_format};
        let Some(check) = self
            .verdict
            .checks
            .iter_mut()
            .find(|c| c.name == "saturation_ppm" && !c.pass)
        else {
            return Ok(());
        };
        let Some(worst) = run
            .tensors
            .iter()
            .filter(|x| x.saturations > 0)
            .max_by(|a, b| {
                let r = |x: &TensorTotals| x.saturations as f64 / x.values.max(1) as f64;
                r(a).total_cmp(&r(b))
            })
        else {
            return Ok(());
        };
        let k = worst.layer;
        let Some(l) = desc.layers.get(k) else {
            return Ok(());
        };
        let ranges = float_ranges(desc, float_start, train)?;
        let r = ranges[k];
        let tr = &desc.train;
        let accum = |g: f64| accumulator_need(g, tr.batch, tr.momentum.to_f64(), tr.clip.to_f64());
        let max_param = |v: &[f64]| v.iter().fold(0f64, |m, x| m.max(x.abs()));
        let params = run.float_params.get(k);
        let (now, need, what) = match worst.tensor {
            "out" => (l.out, r.out, "outputs"),
            "grad" => (l.grad, r.grad, "output gradients"),
            "accum_weight" => (l.weight.accum, accum(r.weight_grad), "weight-gradient sums"),
            "accum_bias" => (l.bias.accum, accum(r.bias_grad), "bias-gradient sums"),
            "weight" => (
                l.weight.update_target(),
                params.map_or(0.0, |p| max_param(&p.0)),
                "trained weights",
            ),
            _ => (
                l.bias.update_target(),
                params.map_or(0.0, |p| max_param(&p.1)),
                "trained biases",
            ),
        };
        let held = holding_format(need, now.word);
        check.advice = Some(if held.frac < now.frac {
            format!(
                "the float twin's {what} of layer {k} reach {need:.4}; {held} would hold them \
                 with a margin of {}× (now {now})",
                crate::ranges::GRADIENT_MARGIN
            )
        } else {
            format!(
                "the float twin's {what} of layer {k} reach {need:.4}, within {now}: the \
                 fixed-point values outgrew float; a wider word, or a lower learning rate, \
                 would hold them"
            )
        });
        Ok(())
    }
}

#[cfg(test)]
mod tests;
