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

/// Limits the verdict checks. Each applies to the end of the run.
#[derive(Clone, Copy, Debug, PartialEq, Serialize)]
pub struct Thresholds {
    /// Largest gap between the fixed-point and float evaluation losses, in % of the float loss.
    pub max_loss_gap_pct: f64,
    /// Largest gap between the metrics: percentage points of accuracy, or % of the float RMSE.
    pub max_metric_gap: f64,
    /// Largest RMS divergence of the trained weights, in steps of their formats.
    pub max_weight_rms_steps: f64,
    /// Smallest gradient SQNR over the run's probes, dB.
    pub min_grad_sqnr_db: f64,
    /// Largest share of saturated values over the run, parts per million.
    pub max_saturation_ppm: f64,
    /// Largest share of updates lost to rounding over the run, %.
    pub max_lost_updates_pct: f64,
}

impl Default for Thresholds {
    fn default() -> Thresholds {
        Thresholds {
            max_loss_gap_pct: 10.0,
            max_metric_gap: 2.0,
            max_weight_rms_steps: 32.0,
            min_grad_sqnr_db: 15.0,
            max_saturation_ppm: 1000.0,
            max_lost_updates_pct: 50.0,
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
    /// Epoch 0 (before training) and every epoch.
    pub epochs: Vec<EpochDrift>,
    /// Every step, when recorded.
    pub steps: Vec<StepDrift>,
    /// Totals per tensor.
    pub tensors: Vec<TensorTotals>,
    /// The thresholds applied.
    pub thresholds: Thresholds,
    /// The verdict.
    pub verdict: Verdict,
}

impl DriftReport {
    /// Judges a run. `classification` picks the metric; `setup` is shown as is.
    pub fn from_run(
        run: &DriftRun,
        classification: bool,
        setup: Vec<(String, String)>,
        t: Thresholds,
    ) -> DriftReport {
        let last = run.epochs.last().copied().unwrap_or_default();
        let loss_gap = gap_pct(last.fixed_eval_loss, last.float_eval_loss);
        let metric_gap = if classification {
            (last.fixed_metric - last.float_metric).abs()
        } else {
            gap_pct(last.fixed_metric, last.float_metric)
        };
        // `None` when no epoch measured a gradient SQNR; an infinite value (no quantization
        // noise at all) is a measurement and passes any limit.
        let min_sqnr = run
            .epochs
            .iter()
            .filter_map(|e| e.grad_sqnr_db)
            .reduce(f64::min);
        let (sat, vals, lost, upd) = run.epochs.iter().fold((0u64, 0u64, 0u64, 0u64), |a, e| {
            (
                a.0 + e.saturations,
                a.1 + e.values,
                a.2 + e.lost_updates,
                a.3 + e.updates,
            )
        });
        let sat_ppm = if vals > 0 {
            1e6 * sat as f64 / vals as f64
        } else {
            0.0
        };
        let lost_pct = if upd > 0 {
            100.0 * lost as f64 / upd as f64
        } else {
            0.0
        };
        let metric_desc = if classification {
            "accuracy gap, percentage points".to_string()
        } else {
            "RMSE gap, % of the float RMSE".to_string()
        };
        let mut checks = vec![
            Check {
                name: "loss_gap_pct",
                description: "evaluation loss gap, % of the float loss".into(),
                value: loss_gap,
                limit: t.max_loss_gap_pct,
                pass: loss_gap <= t.max_loss_gap_pct,
            },
            Check {
                name: "metric_gap",
                description: metric_desc,
                value: metric_gap,
                limit: t.max_metric_gap,
                pass: metric_gap <= t.max_metric_gap,
            },
            Check {
                name: "weight_rms_steps",
                description: "RMS divergence of trained weights, steps of their format".into(),
                value: last.weight_rms_steps,
                limit: t.max_weight_rms_steps,
                pass: last.weight_rms_steps <= t.max_weight_rms_steps,
            },
            Check {
                name: "saturation_ppm",
                description: "saturated values, parts per million".into(),
                value: sat_ppm,
                limit: t.max_saturation_ppm,
                pass: sat_ppm <= t.max_saturation_ppm,
            },
            Check {
                name: "lost_updates_pct",
                description: "updates lost to rounding, %".into(),
                value: lost_pct,
                limit: t.max_lost_updates_pct,
                pass: lost_pct <= t.max_lost_updates_pct,
            },
        ];
        let sqnr_description = "lowest gradient SQNR of the probes, dB".to_owned();
        let mut not_run = Vec::new();
        match min_sqnr {
            Some(v) => checks.insert(
                3,
                Check {
                    name: "grad_sqnr_db",
                    description: sqnr_description,
                    value: v,
                    limit: t.min_grad_sqnr_db,
                    pass: v >= t.min_grad_sqnr_db,
                },
            ),
            None => not_run.push(NotRun {
                name: "grad_sqnr_db",
                description: sqnr_description,
                reason: "no gradient was measured: no probe samples, or every probed \
                         gradient of the trained layers was zero"
                    .into(),
            }),
        }
        let pass = checks.iter().all(|c| c.pass);
        DriftReport {
            setup,
            metric: if classification {
                "accuracy_pct".into()
            } else {
                "rmse".into()
            },
            epochs: run.epochs.clone(),
            steps: run.steps.clone(),
            tensors: run.tensors.clone(),
            thresholds: t,
            verdict: Verdict {
                pass,
                checks,
                not_run,
            },
        }
    }

    /// The per-epoch table as text.
    pub fn epoch_table(&self) -> crate::report::Table {
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
        crate::report::Table {
            headers: headers.iter().map(|h| h.to_string()).collect(),
            rows,
            align: (0..12).map(|_| crate::report::Align::Right).collect(),
        }
    }

    /// Per-tensor totals as a table (only tensors that saturated or lost updates, plus the
    /// trained ones).
    pub fn tensor_table(&self) -> crate::report::Table {
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
        use crate::report::Align::{Left, Right};
        crate::report::Table {
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
                "  {} {:<58} {:>12.4} {cmp} {:<10}\n",
                if c.pass { "pass" } else { "FAIL" },
                c.description,
                c.value,
                c.limit
            ));
        }
        for n in &self.verdict.not_run {
            s.push_str(&format!("  not run {:<58} {}\n", n.description, n.reason));
        }
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
        s.push_str(&crate::report::render_text_table(&self.epoch_table()));
        s.push_str("\n(fx: fixed point, fl: float twin; weight divergence in steps of each weight's format)\n\n");
        s.push_str(&crate::report::render_text_table(&self.tensor_table()));
        s.push('\n');
        s.push_str(&self.verdict_text());
        s
    }

    /// The plots: both loss curves, and divergence over steps (or epochs).
    pub fn plots(&self) -> Vec<(String, String, String)> {
        use crate::plot::{LinePlot, Series};
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
        vec![
            (
                "loss".into(),
                "Training and evaluation loss of the fixed-point model and its float twin.".into(),
                loss.to_svg(),
            ),
            (
                "divergence".into(),
                "How far the fixed-point weights moved from the float weights.".into(),
                divergence.to_svg(),
            ),
        ]
    }

    /// The report as a document (HTML and Markdown).
    pub fn document(&self, title: &str) -> crate::report::Report {
        use crate::report::{Block, Report, Section};
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
                Section { heading: "Verdict".into(), blocks: vec![Block::Verdict { pass: self.verdict.pass, text: self.verdict_sentence() }, Block::Table(self.check_table())] },
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

    fn check_table(&self) -> crate::report::Table {
        use crate::report::Align::{Left, Right};
        crate::report::Table {
            headers: ["check", "value", "limit", "result"]
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
                    ]
                })
                .collect(),
            align: vec![Left, Right, Right, Left],
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sim::{DriftRun, EpochDrift, QuantParams};

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
        assert!(text.contains("not run lowest gradient SQNR"), "{text}");
    }

    #[test]
    fn sqnr_check_uses_the_lowest_measurement_and_passes_exact_gradients() {
        let t = Thresholds::default();
        // Exact gradients (no noise) measure as infinite SQNR: a pass, not a skipped check.
        let r = DriftReport::from_run(&run_with_sqnr(&[Some(f64::INFINITY)]), false, vec![], t);
        let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
        assert!(c.is_some_and(|c| c.pass), "{:?}", r.verdict);
        assert!(r.verdict.not_run.is_empty());
        // The lowest epoch decides; one below the limit fails the verdict.
        let low = t.min_grad_sqnr_db - 1.0;
        let r = DriftReport::from_run(
            &run_with_sqnr(&[Some(40.0), None, Some(low)]),
            false,
            vec![],
            t,
        );
        let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
        assert_eq!(c.map(|c| (c.value, c.pass)), Some((low, false)));
        assert!(!r.verdict.pass);
    }
}
