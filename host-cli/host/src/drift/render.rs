//! The drift report for people: its tables, headline, verdict, plots and the document with
//! all of them.

use super::*;

impl DriftReport {
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
        s.push_str(&hone_report::report::render_text_table(
            &self.tensor_table(),
        ));
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
    pub(super) fn verdict_sentence(&self) -> String {
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

    pub(super) fn check_table(&self) -> hone_report::report::Table {
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
