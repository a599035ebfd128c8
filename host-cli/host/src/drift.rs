//! The drift report: fixed-point training beside float training, judged against thresholds.
//!
//! [`DriftReport::from_run`] turns a [`DriftRun`] into the document users read and CI checks:
//! per-epoch figures, per-tensor totals, and a verdict made of named checks, each with its
//! measured value, its limit and whether it passed. The defaults of [`Thresholds`] are our own
//! starting points, not published figures; every one can be set from the command line.

use serde::Serialize;

use crate::sim::{DriftRun, EpochDrift, StepDrift, TensorTotals};

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

    /// The per-epoch table as text.
    pub fn epoch_table(&self) -> hone_report::report::Table {
        let acc = self.metric == "accuracy_pct";
        let m = if acc { "acc %" } else { "RMSE" };
        let headers = [
            "epoch",
            "train loss fx",
            "train loss fl",
            "eval loss fx",
            "eval loss fl",
            &format!("{m} fx"),
            &format!("{m} fl"),
            "w RMS steps",
            "w max steps",
            "grad SQNR dB",
            "sat.",
            "lost",
        ];
        let rows = self
            .epochs
            .iter()
            .map(|e| {
                let metric = |v: f64| {
                    if acc {
                        format!("{v:.2}")
                    } else {
                        format!("{v:.5}")
                    }
                };
                vec![
                    e.epoch.to_string(),
                    if e.epoch == 0 {
                        "–".into()
                    } else {
                        format!("{:.6}", e.fixed_train_loss)
                    },
                    if e.epoch == 0 {
                        "–".into()
                    } else {
                        format!("{:.6}", e.float_train_loss)
                    },
                    format!("{:.6}", e.fixed_eval_loss),
                    format!("{:.6}", e.float_eval_loss),
                    metric(e.fixed_metric),
                    metric(e.float_metric),
                    format!("{:.2}", e.weight_rms_steps),
                    format!("{:.2}", e.weight_max_steps),
                    e.grad_sqnr_db.map_or("–".into(), |v| {
                        if v.is_finite() {
                            format!("{v:.1}")
                        } else {
                            "exact".into()
                        }
                    }),
                    e.saturations.to_string(),
                    e.lost_updates.to_string(),
                ]
            })
            .collect();
        hone_report::report::Table {
            headers: headers.iter().map(|h| h.to_string()).collect(),
            rows,
            align: (0..12).map(|_| hone_report::report::Align::Right).collect(),
        }
    }

    /// Per-tensor totals as a table (only tensors that saturated or lost updates, plus the
    /// trained ones).
    pub fn tensor_table(&self) -> hone_report::report::Table {
        let rows = self
            .tensors
            .iter()
            .filter(|t| {
                t.saturations > 0
                    || t.lost_updates > 0
                    || t.tensor == "weight"
                    || t.tensor == "bias"
            })
            .map(|t| {
                let ppm = if t.values > 0 {
                    1e6 * t.saturations as f64 / t.values as f64
                } else {
                    0.0
                };
                vec![
                    t.layer.to_string(),
                    t.tensor.to_string(),
                    t.values.to_string(),
                    t.saturations.to_string(),
                    format!("{ppm:.1}"),
                    t.lost_updates.to_string(),
                ]
            })
            .collect();
        use hone_report::report::Align::{Left, Right};
        hone_report::report::Table {
            headers: [
                "layer",
                "tensor",
                "values written",
                "saturated",
                "sat. ppm",
                "lost updates",
            ]
            .iter()
            .map(|h| h.to_string())
            .collect(),
            rows,
            align: vec![Right, Left, Right, Right, Right, Right],
        }
    }

    /// The headline: the evaluation error before and after calibration, fixed point beside
    /// float, in the target's unit (RMSE and MAE) or in accuracy, and the verdict in a word.
    pub fn headline(&self) -> String {
        let (Some(first), Some(last)) = (self.epochs.first(), self.epochs.last()) else {
            return String::new();
        };
        let verdict = if self.verdict.pass { "pass" } else { "FAIL" };
        if self.metric == "accuracy_pct" {
            return format!(
                "accuracy on the evaluation samples: before {:.2} % → after {:.2} % in fixed \
                 point (float {:.2} % → {:.2} %); {verdict}",
                first.fixed_metric, last.fixed_metric, first.float_metric, last.float_metric
            );
        }
        let u = |v: f64| crate::train::in_unit(v, &self.unit);
        format!(
            "RMSE on the evaluation samples: before {} → after {} in fixed point (float {} → \
             {}); MAE after {} (float {}); {verdict}",
            u(first.fixed_metric),
            u(last.fixed_metric),
            u(first.float_metric),
            u(last.float_metric),
            u(last.fixed_mae),
            u(last.float_mae)
        )
    }

    /// The verdict as text lines.
    pub fn verdict_text(&self) -> String {
        let mut s = String::new();
        for c in &self.verdict.checks {
            let cmp = if c.name == "grad_sqnr_db" {
                "≥"
            } else {
                "≤"
            };
            s.push_str(&format!(
                "  {} {:<58} {:>12.4} {cmp} {:<10}{}\n",
                if c.pass { "pass" } else { "FAIL" },
                c.description,
                c.value,
                c.limit,
                c.tensor
                    .as_deref()
                    .map_or(String::new(), |t| format!(" ({t})"))
            ));
            if let Some(a) = &c.advice {
                s.push_str(&format!("       {a}\n"));
            }
        }
        for n in &self.verdict.not_run {
            s.push_str(&format!("  not run {:<58} {}\n", n.description, n.reason));
        }
        s.push_str(&format!("{}\n", self.headline()));
        s.push_str(&format!("verdict: {}\n", self.verdict.summary()));
        s
    }

    /// The whole report as terminal text.
    pub fn render_text(&self) -> String {
        let mut s = String::new();
        for (k, v) in &self.setup {
            s.push_str(&format!("{k:>18}: {v}\n"));
        }
        s.push('\n');
        s.push_str(&hone_report::report::render_text_table(&self.epoch_table()));
        s.push_str("\n(fx: fixed point, fl: float twin; weight divergence in steps of each weight's format)\n\n");
        s.push_str(&hone_report::report::render_text_table(&self.tensor_table()));
        s.push('\n');
        s.push_str(&self.verdict_text());
        s
    }

    /// The plots: both loss curves, and divergence over steps (or epochs).
    pub fn plots(&self) -> Vec<(String, String, String)> {
        use hone_report::plot::{LinePlot, Series};
        let pts = |f: &dyn Fn(&EpochDrift) -> f64| {
            self.epochs
                .iter()
                .map(|e| (e.epoch as f64, f(e)))
                .collect::<Vec<_>>()
        };
        let train = |f: &dyn Fn(&EpochDrift) -> f64| {
            self.epochs
                .iter()
                .filter(|e| e.epoch > 0)
                .map(|e| (e.epoch as f64, f(e)))
                .collect::<Vec<_>>()
        };
        let loss = LinePlot {
            title: "Loss: fixed point beside float".into(),
            x_label: "epoch".into(),
            y_label: "loss".into(),
            series: vec![
                Series {
                    name: "train, fixed point".into(),
                    points: train(&|e| e.fixed_train_loss),
                    dashed: false,
                },
                Series {
                    name: "train, float".into(),
                    points: train(&|e| e.float_train_loss),
                    dashed: true,
                },
                Series {
                    name: "eval, fixed point".into(),
                    points: pts(&|e| e.fixed_eval_loss),
                    dashed: false,
                },
                Series {
                    name: "eval, float".into(),
                    points: pts(&|e| e.float_eval_loss),
                    dashed: true,
                },
            ],
            log_y: true,
            width: 720,
            height: 400,
        };
        let divergence = if self.steps.is_empty() {
            LinePlot {
                title: "Weight divergence, fixed point from float".into(),
                x_label: "epoch".into(),
                y_label: "steps of the weight format".into(),
                series: vec![
                    Series {
                        name: "RMS".into(),
                        points: pts(&|e| e.weight_rms_steps),
                        dashed: false,
                    },
                    Series {
                        name: "max".into(),
                        points: pts(&|e| e.weight_max_steps),
                        dashed: true,
                    },
                ],
                log_y: false,
                width: 720,
                height: 400,
            }
        } else {
            LinePlot {
                title: "Weight divergence, fixed point from float".into(),
                x_label: "step".into(),
                y_label: "steps of the weight format".into(),
                series: vec![
                    Series {
                        name: "RMS".into(),
                        points: self
                            .steps
                            .iter()
                            .map(|s| (s.step as f64, s.weight_rms_steps))
                            .collect(),
                        dashed: false,
                    },
                    Series {
                        name: "max".into(),
                        points: self
                            .steps
                            .iter()
                            .map(|s| (s.step as f64, s.weight_max_steps))
                            .collect(),
                        dashed: true,
                    },
                ],
                log_y: false,
                width: 720,
                height: 400,
            }
        };
        let acc = self.metric == "accuracy_pct";
        let unit = if acc {
            "accuracy points".to_owned()
        } else if self.unit.is_empty() {
            "target units".to_owned()
        } else {
            self.unit.clone()
        };
        let gap = LinePlot {
            title: format!(
                "{} on the evaluation samples: fixed point minus float",
                if acc { "Accuracy" } else { "RMSE" }
            ),
            x_label: "epoch".into(),
            y_label: unit,
            series: vec![Series {
                name: "fixed − float".into(),
                points: pts(&|e| e.fixed_metric - e.float_metric),
                dashed: false,
            }],
            log_y: false,
            width: 720,
            height: 400,
        };
        let mut plots = vec![
            (
                "loss".into(),
                "Training and evaluation loss of the fixed-point model and its float twin.".into(),
                loss.to_svg(),
            ),
            (
                "gap".into(),
                "The evaluation metric of fixed point minus that of float, per epoch: the gap \
                 the loss curves above are too close to show."
                    .into(),
                gap.to_svg(),
            ),
            (
                "divergence".into(),
                "How far the fixed-point weights moved from the float weights.".into(),
                divergence.to_svg(),
            ),
        ];
        if !self.predictions.is_empty() {
            use hone_report::plot::{Point, ScatterPlot};
            let unit = if self.unit.is_empty() {
                String::new()
            } else {
                format!(", {}", self.unit)
            };
            let mut scatter = ScatterPlot::new(
                "Predicted against reference, after calibration",
                format!("reference{unit}"),
                format!("predicted{unit}"),
            );
            scatter.connect_highlighted = false;
            for p in &self.predictions {
                scatter.points.push(Point::new(p.reference, p.float));
                scatter.points.push(Point {
                    highlight: true,
                    ..Point::new(p.reference, p.fixed)
                });
            }
            plots.push((
                "predicted".into(),
                "Each evaluation sample's prediction against its reference after calibration: \
                 filled dots fixed point, hollow circles the float twin; a perfect model lies on \
                 the diagonal."
                    .into(),
                scatter.to_svg(),
            ));
        }
        plots
    }

    /// The report as a document (HTML and Markdown).
    pub fn document(&self, title: &str) -> hone_report::report::Report {
        use hone_report::report::{Block, Report, Section};
        let figures = self
            .plots()
            .into_iter()
            .map(|(stem, caption, svg)| Block::Figure {
                svg,
                caption,
                file_stem: stem,
            })
            .collect();
        Report {
            title: title.into(),
            subtitle: Some("Fixed-point training beside its float twin, same start, same data order".into()),
            sections: vec![
                Section { heading: "Verdict".into(), blocks: vec![Block::Verdict { pass: self.verdict.pass, text: self.verdict_sentence() }, Block::Paragraph(self.headline()), Block::Table(self.check_table())] },
                Section { heading: "Setup".into(), blocks: vec![Block::KeyValues(self.setup.clone())] },
                Section { heading: "Curves".into(), blocks: figures },
                Section { heading: "Per epoch".into(), blocks: vec![Block::Table(self.epoch_table()), Block::Paragraph("fx: fixed point; fl: float twin. Weight divergence is |fixed − float| of every trained value in steps of its format. Gradient SQNR compares the fixed-point gradients of a probe set with the float gradients.".into())] },
                Section { heading: "Saturations and lost updates per tensor".into(), blocks: vec![Block::Table(self.tensor_table())] },
            ],
        }
    }

    /// The verdict as a sentence for documents, naming the checks not made.
    fn verdict_sentence(&self) -> String {
        let mut text = if self.verdict.pass {
            "Within every threshold.".to_owned()
        } else {
            "Thresholds exceeded.".to_owned()
        };
        for n in &self.verdict.not_run {
            text.push_str(&format!(" Not checked: {} ({}).", n.description, n.reason));
        }
        text
    }

    fn check_table(&self) -> hone_report::report::Table {
        use hone_report::report::Align::{Left, Right};
        hone_report::report::Table {
            headers: ["check", "value", "limit", "result", "tensor", "advice"]
                .iter()
                .map(|h| h.to_string())
                .collect(),
            rows: self
                .verdict
                .checks
                .iter()
                .map(|c| {
                    vec![
                        c.description.clone(),
                        format!("{:.4}", c.value),
                        format!(
                            "{}{}",
                            if c.name == "grad_sqnr_db" {
                                "≥ "
                            } else {
                                "≤ "
                            },
                            c.limit
                        ),
                        if c.pass { "pass".into() } else { "FAIL".into() },
                        c.tensor.clone().unwrap_or_default(),
                        c.advice.clone().unwrap_or_default(),
                    ]
                })
                .collect(),
            align: vec![Left, Right, Right, Left, Left, Left],
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::{DriftRun, EpochDrift, QuantParams, TensorTotals};

    fn run_with_sqnr(sqnr: &[Option<f64>]) -> DriftRun {
        DriftRun {
            epochs: sqnr
                .iter()
                .enumerate()
                .map(|(i, &g)| EpochDrift {
                    epoch: i as u32,
                    fixed_eval_loss: 1.0,
                    float_eval_loss: 1.0,
                    grad_sqnr_db: g,
                    ..EpochDrift::default()
                })
                .collect(),
            steps: Vec::new(),
            fixed_params: QuantParams { layers: Vec::new() },
            float_params: Vec::new(),
            tensors: Vec::new(),
            rng_state: [0; 4],
            predictions: Vec::new(),
        }
    }

    #[test]
    fn limits_must_be_finite_and_not_negative() {
        assert_eq!(parse_limit("10"), Ok(10.0));
        assert_eq!(parse_limit("0"), Ok(0.0));
        assert_eq!(parse_limit(" 2.5 "), Ok(2.5));
        for bad in ["NaN", "nan", "inf", "-inf"] {
            assert_eq!(parse_limit(bad), Err(LimitError::NotFinite(bad.into())));
        }
        assert_eq!(parse_limit("-1"), Err(LimitError::Negative("-1".into())));
        assert_eq!(
            parse_limit("ten"),
            Err(LimitError::NotANumber("ten".into()))
        );
    }

    #[test]
    fn unmeasured_sqnr_is_reported_as_not_checked() {
        let r = DriftReport::from_run(
            &run_with_sqnr(&[None, None]),
            false,
            Vec::new(),
            Thresholds::default(),
        );
        assert!(r.verdict.pass);
        assert!(r.verdict.checks.iter().all(|c| c.name != "grad_sqnr_db"));
        assert_eq!(r.verdict.not_run.len(), 1);
        assert_eq!(r.verdict.not_run[0].name, "grad_sqnr_db");
        let text = r.verdict_text();
        assert!(
            text.contains("verdict: within every threshold; not checked: grad_sqnr_db"),
            "{text}"
        );
        assert!(
            text.contains("not run gradient SQNR at the start"),
            "{text}"
        );
    }

    #[test]
    fn sqnr_check_uses_the_start_and_passes_exact_gradients() {
        let t = Thresholds::default();
        // Exact gradients (no noise) measure as infinite SQNR: a pass, not a skipped check.
        let r = DriftReport::from_run(&run_with_sqnr(&[Some(f64::INFINITY)]), false, vec![], t);
        let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
        assert!(c.is_some_and(|c| c.pass), "{:?}", r.verdict);
        assert!(r.verdict.not_run.is_empty());
        // The start decides: a low figure near the end (gradients near zero) is not judged,
        // a low figure at the start fails the verdict.
        let low = t.min_grad_sqnr_db - 1.0;
        let r = DriftReport::from_run(
            &run_with_sqnr(&[Some(40.0), None, Some(low)]),
            false,
            vec![],
            t,
        );
        let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
        assert_eq!(c.map(|c| (c.value, c.pass)), Some((40.0, true)));
        let r = DriftReport::from_run(&run_with_sqnr(&[Some(low), Some(40.0)]), false, vec![], t);
        let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
        assert_eq!(c.map(|c| (c.value, c.pass)), Some((low, false)));
        assert!(!r.verdict.pass);
    }

    fn tensor(layer: usize, name: &'static str, values: u64, sat: u64) -> TensorTotals {
        TensorTotals {
            layer,
            tensor: name,
            values,
            saturations: sat,
            lost_updates: 0,
            divergence_pct: None,
        }
    }

    fn check<'r>(r: &'r DriftReport, name: &str) -> &'r Check {
        r.verdict
            .checks
            .iter()
            .find(|c| c.name == name)
            .expect("check present")
    }

    #[test]
    fn saturation_is_judged_per_tensor_and_names_the_worst() {
        // A bias tensor saturating 1.5 % of its writes beside a large tensor that never
        // saturates: 103 ppm overall, but 15 000 ppm in the bias.
        let mut run = run_with_sqnr(&[None]);
        run.tensors = vec![
            tensor(0, "out", 144_000, 0),
            tensor(2, "bias", 1_000, 15),
            tensor(2, "weight", 960, 0),
        ];
        let r = DriftReport::from_run(&run, false, vec![], Thresholds::default());
        let c = check(&r, "saturation_ppm");
        assert!(!c.pass);
        assert_eq!(c.value, 15_000.0);
        assert_eq!(c.tensor.as_deref(), Some("layer 2 bias"));
        // The same run with the saturation spread evenly passes.
        run.tensors[1].saturations = 0;
        run.tensors[0].saturations = 15;
        let r = DriftReport::from_run(&run, false, vec![], Thresholds::default());
        assert!(check(&r, "saturation_ppm").pass);
    }

    #[test]
    fn headline_states_before_and_after_in_the_unit() {
        let mut run = run_with_sqnr(&[None, None]);
        (run.epochs[0].fixed_metric, run.epochs[0].float_metric) = (0.094, 0.094);
        (run.epochs[1].fixed_metric, run.epochs[1].float_metric) = (0.013, 0.0129);
        (run.epochs[1].fixed_mae, run.epochs[1].float_mae) = (0.01, 0.0099);
        let mut r = DriftReport::from_run(&run, false, vec![], Thresholds::default());
        r.unit = "m³/m³".into();
        let h = r.headline();
        assert!(
            h.contains("before 0.09400 m³/m³ → after 0.01300 m³/m³ in fixed point"),
            "{h}"
        );
        assert!(h.contains("MAE after 0.01000 m³/m³"), "{h}");
        assert!(h.ends_with("pass"), "{h}");
        assert!(r.render_text().contains(&h));
    }

    #[test]
    fn gaps_are_one_sided_unless_asked() {
        let mut run = run_with_sqnr(&[None]);
        // Fixed point 5 % better than float in RMSE and loss.
        run.epochs[0].fixed_metric = 0.95;
        run.epochs[0].float_metric = 1.0;
        run.epochs[0].fixed_eval_loss = 0.8;
        let t = Thresholds::default();
        let r = DriftReport::from_run(&run, false, vec![], t);
        assert!(check(&r, "metric_gap").pass);
        assert!(check(&r, "loss_gap_pct").pass);
        assert!((check(&r, "metric_gap").value + 5.0).abs() < 1e-9);
        let two = Thresholds {
            two_sided: true,
            ..t
        };
        let r = DriftReport::from_run(&run, false, vec![], two);
        assert!(!check(&r, "metric_gap").pass);
        assert!(!check(&r, "loss_gap_pct").pass);
        // Fixed point 5 % worse fails either way.
        run.epochs[0].fixed_metric = 1.05;
        let r = DriftReport::from_run(&run, false, vec![], t);
        assert!(!check(&r, "metric_gap").pass);
        // Classification: accuracy above float passes one-sided, fails two-sided at 3 points.
        run.epochs[0].fixed_metric = 93.0;
        run.epochs[0].float_metric = 90.0;
        let r = DriftReport::from_run(&run, true, vec![], t);
        assert!(check(&r, "metric_gap").pass);
        let r = DriftReport::from_run(&run, true, vec![], two);
        assert!(!check(&r, "metric_gap").pass);
    }
}
