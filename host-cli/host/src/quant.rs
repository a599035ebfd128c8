//! Quantization: choosing the Q-formats the config leaves to data, converting the float
//! model, and measuring what the conversion costs.
//!
//! # Headroom policy
//! A format is chosen by its fraction bits: as many as possible while the largest magnitude,
//! times a margin, still fits the word's range.
//!
//! - **Weights and biases**: the largest magnitude in the tensor, with a margin of
//!   [`WEIGHT_MARGIN`] = 1.25, so fine-tuning can grow a weight by a quarter before it
//!   saturates (our policy).
//! - **Activations**: the largest magnitude of the layer's output over the calibration data,
//!   run through the float model, with a margin of [`ACTIVATION_MARGIN`] = 2, one integer
//!   bit of headroom for inputs beyond the calibration data (common practice).
//! - **Bounded activations** (tanh and hard-tanh: ±1; sigmoid: [0, 1]; clipped ReLU: [0,
//!   ceiling]): the margin stops at the bound, since no input can push the output past it.
//!   The bound itself must be representable: hard-tanh and clipped ReLU output it exactly
//!   whenever they clamp, and the core's tanh and sigmoid tables return exactly ±1 (or 1)
//!   past their domain, so a format that stops one step short (Q0.15 for tanh) would count
//!   a saturation at every clamped output, and the per-tensor saturation check would fail
//!   healthy models. So tanh gets Q1.14 in an `i16` (range [−2, 2), step 2^-14): one bit
//!   finer than the Q2.13 the doubled data range gives, and never a saturation. When the
//!   data stay below half the bound, the ordinary rule gives a finer format and is used.
//! - **Gradients** (`auto` in `gradients`): the largest magnitude of the loss gradient of
//!   the layer's output, run through the float twin forward and backward over the
//!   calibration data, sample by sample, with a margin of
//!   [`crate::ranges::GRADIENT_MARGIN`] = 4: a unit to be calibrated starts further from its
//!   targets than the factory data, so its gradients are larger (our policy).
//! - **Accumulators** (`auto` in `accumulators`): one sample's largest weight or bias
//!   gradient, times what the buffer must hold ([`crate::ranges::accumulator_need`]: the
//!   mini-batch sum, or the momentum buffer's steady state `ḡ/(1 − μ)`, after clipping),
//!   with the same margin.
//! - A tensor that is all zero gets the finest format whose range still covers ±1.
//!
//! # Report
//! Per parameter tensor: RMS and maximum quantization error in real units and the SQNR
//! (`10·log10(Σw² / Σ(w − q)²)`, dB); per chosen format: the range it was chosen for; and the
//! metric of the float model and of the quantized model on the calibration data, so the cost
//! of quantization in the user's own metric is one line.

use hone_core::model::ModelDesc;
use hone_core::num::{QFormat, Word, MAX_FRAC};
use serde::Serialize;

use crate::config::{AutoFormat, Config, FormatRole};
use crate::data::Dataset;
use crate::model::FloatModel;
use crate::ranges::GRADIENT_MARGIN;
use crate::sim::{evaluate_pair, Prepared, QuantParams};

/// Margin over the largest weight or bias magnitude.
pub const WEIGHT_MARGIN: f64 = 1.25;
/// Margin over the largest activation magnitude seen on calibration data.
pub const ACTIVATION_MARGIN: f64 = 2.0;

/// The largest magnitude a layer kind can output whatever its input, if it is bounded: 1 for
/// tanh, hard-tanh and sigmoid, the ceiling for clipped ReLU.
pub fn output_bound(kind: hone_core::model::LayerKind) -> Option<f64> {
    use hone_core::model::LayerKind;
    match kind {
        LayerKind::Tanh | LayerKind::HardTanh | LayerKind::Sigmoid => Some(1.0),
        LayerKind::ClippedRelu { ceiling } => Some(ceiling as f64),
        _ => None,
    }
}

/// The most fraction bits for which `max_abs · margin` still fits `word`.
pub fn frac_for(max_abs: f64, margin: f64, word: Word) -> u8 {
    let need = if max_abs > 0.0 { max_abs * margin } else { 1.0 };
    let mut best = 0u8;
    for f in 0..=MAX_FRAC {
        let fmt = QFormat::new_unchecked(word, f);
        if fmt.max_value() >= need && fmt.min_value() <= -need {
            best = f;
        }
    }
    best
}

/// One format chosen from data.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ChosenFormat {
    /// Layer index.
    pub layer: usize,
    /// `weights`, `bias` or `activations`.
    pub role: String,
    /// The chosen format, written `Qm.n (iW)`.
    pub format: String,
    /// Largest magnitude it was chosen for.
    pub max_abs: f64,
    /// Margin applied.
    pub margin: f64,
    /// For a bounded activation, the bound the margin stopped at.
    pub bound: Option<f64>,
}

/// Quantization error of one parameter tensor.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TensorError {
    /// Layer index.
    pub layer: usize,
    /// `weights` or `bias`.
    pub role: String,
    /// Format, `Qm.n (iW)`.
    pub format: String,
    /// Values.
    pub values: usize,
    /// Largest magnitude in float.
    pub max_abs: f64,
    /// RMS of the error, real units.
    pub rms_error: f64,
    /// Largest error, real units.
    pub max_error: f64,
    /// Signal-to-quantization-noise ratio, dB (infinite when exact).
    pub sqnr_db: f64,
    /// Values that saturated.
    pub saturated: usize,
}

/// What quantization chose and cost.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct QuantReport {
    /// Formats chosen from data.
    pub chosen: Vec<ChosenFormat>,
    /// Error per parameter tensor.
    pub tensors: Vec<TensorError>,
    /// Name of the metric: `accuracy_pct` or `rmse`.
    pub metric: String,
    /// Float model on the calibration data: loss, against the true targets (as every loss
    /// and metric here).
    pub float_loss: f64,
    /// Float metric.
    pub float_metric: f64,
    /// Quantized model on the same data.
    pub fixed_loss: f64,
    /// Quantized metric.
    pub fixed_metric: f64,
    /// Float model's mean absolute error in target units (NaN, `null` in JSON, for
    /// classification).
    pub float_mae: f64,
    /// Quantized model's mean absolute error.
    pub fixed_mae: f64,
    /// Input values that saturated when quantized.
    pub input_saturations: usize,
    /// Regression targets that saturated the output format when quantized.
    pub target_saturations: usize,
    /// Samples evaluated.
    pub samples: usize,
    /// Whether those are the rows `hone train` holds out of the same file (`data.holdout`,
    /// split with the train seed) rather than every row.
    pub held_out: bool,
    /// Unit of the regression target (`data.unit`), empty if the config names none.
    pub unit: String,
}

/// A quantized model ready to export or fine-tune.
#[derive(Clone, Debug)]
pub struct Quantized {
    /// The complete description with every format fixed.
    pub desc: ModelDesc,
    /// Quantized parameters.
    pub params: QuantParams,
    /// The float parameters they came from.
    pub float_params: Vec<(Vec<f64>, Vec<f64>)>,
    /// The report.
    pub report: QuantReport,
}

/// Why a model could not be quantized.
#[derive(Debug, thiserror::Error)]
pub enum QuantError {
    /// The calibration data do not suit the model.
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
    /// The config does not give a description.
    #[error(transparent)]
    Config(#[from] crate::config::ConfigError),
    /// The core rejects the description.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
    /// Quantizing the parameters or evaluating the pair failed.
    #[error(transparent)]
    Sim(#[from] crate::sim::SimError),
}

/// Largest output magnitude of every layer over `data` (already scaled), run through the
/// float model.
fn activation_ranges(
    desc: &ModelDesc,
    params: &[(Vec<f64>, Vec<f64>)],
    data: &Dataset,
) -> Result<Vec<f64>, hone_core::Error> {
    let shapes = hone_core::model::shapes(desc.input, &desc.layers, desc.loss)?;
    let mut max = vec![0f64; desc.layers.len()];
    for row in &data.x {
        let mut x = row.to_vec();
        for (k, l) in desc.layers.iter().enumerate() {
            let g = shapes.layers[k];
            let mut y = vec![0f64; g.output.size() as usize];
            hone_core::float::forward(l.kind, &g, &params[k].0, &params[k].1, &x, &mut y);
            max[k] = y.iter().fold(max[k], |m, v| m.max(v.abs()));
            x = y;
        }
    }
    Ok(max)
}

fn tensor_error(
    layer: usize,
    role: &str,
    float: &[f64],
    q: &[f64],
    fmt: QFormat,
    saturated: usize,
) -> TensorError {
    let (mut sig, mut noise, mut max_e, mut max_abs) = (0f64, 0f64, 0f64, 0f64);
    for (a, b) in float.iter().zip(q) {
        let e = a - b;
        sig += a * a;
        noise += e * e;
        max_e = max_e.max(e.abs());
        max_abs = max_abs.max(a.abs());
    }
    let n = float.len().max(1) as f64;
    TensorError {
        layer,
        role: role.into(),
        format: fmt.to_string(),
        values: float.len(),
        max_abs,
        rms_error: (noise / n).sqrt(),
        max_error: max_e,
        sqnr_db: if noise == 0.0 {
            f64::INFINITY
        } else {
            10.0 * (sig / noise).log10()
        },
        saturated,
    }
}

/// Quantizes `model` as `cfg` says, choosing `auto` formats from the model's weights and from
/// activations on `calib` (unscaled, as loaded; the model's scaling is applied here).
///
/// # Errors
/// [`QuantError`] for data that do not fit the model or a description the core rejects.
pub fn quantize(
    cfg: &Config,
    model: &FloatModel,
    calib: &Dataset,
) -> Result<Quantized, QuantError> {
    let float_params: Vec<(Vec<f64>, Vec<f64>)> = model
        .layers
        .iter()
        .map(|l| (l.weights.clone(), l.bias.clone()))
        .collect();
    let mut scaled = calib.clone();
    crate::data::apply(&model.scaling, &mut scaled)?;
    let provisional = cfg.model_desc_with(crate::train::provisional_frac)?;
    let ranges = activation_ranges(&provisional, &float_params, &scaled)?;
    let auto_grads = cfg
        .auto_formats()
        .iter()
        .any(|a| matches!(a.role, FormatRole::Gradients | FormatRole::Accumulators));
    let grads = if auto_grads {
        let p = Prepared::new(&scaled, &provisional)?;
        crate::ranges::float_ranges(&provisional, &float_params, &p)?
    } else {
        Vec::new()
    };
    let train = cfg.train();
    let mut chosen = Vec::new();
    let desc = cfg.model_desc_with(|a: AutoFormat| {
        let (max_abs, margin) = match a.role {
            FormatRole::Weights => (
                float_params[a.layer]
                    .0
                    .iter()
                    .fold(0f64, |m, v| m.max(v.abs())),
                WEIGHT_MARGIN,
            ),
            FormatRole::Bias => (
                float_params[a.layer]
                    .1
                    .iter()
                    .fold(0f64, |m, v| m.max(v.abs())),
                WEIGHT_MARGIN,
            ),
            FormatRole::Gradients => (grads[a.layer].grad, GRADIENT_MARGIN),
            FormatRole::Accumulators => {
                let g = &grads[a.layer];
                (
                    crate::ranges::accumulator_need(
                        g.weight_grad.max(g.bias_grad),
                        train.batch,
                        train.momentum.to_f64(),
                        train.clip.to_f64(),
                    ),
                    GRADIENT_MARGIN,
                )
            }
            _ => (ranges[a.layer], ACTIVATION_MARGIN),
        };
        let bound = match a.role {
            FormatRole::Activations => cfg
                .layers()
                .get(a.layer)
                .and_then(|l| output_bound(l.kind))
                .filter(|&b| max_abs * margin > b),
            _ => None,
        };
        let frac = match bound {
            Some(b) => frac_for(b, 1.0, a.word),
            None => frac_for(max_abs, margin, a.word),
        };
        chosen.push(ChosenFormat {
            layer: a.layer,
            role: a.role.key().into(),
            format: QFormat::new_unchecked(a.word, frac).to_string(),
            max_abs,
            margin,
            bound,
        });
        frac
    })?;
    let (params, _) = QuantParams::quantize(&desc, &float_params)?;
    let mut tensors = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        let (qw, qb) = &params.layers[k];
        let (fw, fb) = &float_params[k];
        let sat = |raw: hone_core::num::Raw<'_>, f: QFormat| {
            (0..raw.len())
                .filter(|&i| raw.at(i) == f.word.min_raw() || raw.at(i) == f.word.max_raw())
                .count()
        };
        tensors.push(tensor_error(
            k,
            "weights",
            fw,
            &qw.real(l.weight.value),
            l.weight.value,
            sat(qw.raw(), l.weight.value),
        ));
        tensors.push(tensor_error(
            k,
            "bias",
            fb,
            &qb.real(l.bias.value),
            l.bias.value,
            sat(qb.raw(), l.bias.value),
        ));
    }
    let prepared = Prepared::new(&scaled, &desc)?;
    // The figures are those of the rows `hone train` holds out of the same file (data.holdout,
    // split with the train seed), so quantize and train report the same rows; without a
    // hold-out, or when it would leave no row, every row counts.
    let held = if cfg.data().holdout > 0.0 {
        let (_, h) = crate::data::split(&scaled, cfg.data().holdout, cfg.train().seed)?;
        (!h.is_empty()).then_some(h)
    } else {
        None
    };
    let scored = match &held {
        Some(h) => Prepared::new(h, &desc)?,
        None => prepared.clone(),
    };
    let pair = evaluate_pair(&desc, &params, &float_params, &scored)?;
    let report = QuantReport {
        chosen,
        tensors,
        metric: if prepared.is_classification() {
            "accuracy_pct".into()
        } else {
            "rmse".into()
        },
        float_loss: pair.float_loss,
        float_metric: pair.float_metric,
        fixed_loss: pair.fixed_loss,
        fixed_metric: pair.fixed_metric,
        float_mae: pair.float_mae,
        fixed_mae: pair.fixed_mae,
        input_saturations: prepared.input_saturations,
        target_saturations: prepared.target_saturations,
        samples: scored.len(),
        held_out: held.is_some(),
        unit: cfg.data().unit.clone(),
    };
    Ok(Quantized {
        desc,
        params,
        float_params,
        report,
    })
}

/// The two tables of a quantization report: the formats chosen from data (`None` when the
/// config chose every format), and the error per parameter tensor.
pub fn tables(
    r: &QuantReport,
) -> (
    Option<hone_report::report::Table>,
    hone_report::report::Table,
) {
    use hone_report::report::{Align, Table};
    let strings = |v: &[&str]| v.iter().map(|h| h.to_string()).collect::<Vec<_>>();
    let chosen = (!r.chosen.is_empty()).then(|| Table {
        headers: strings(&["layer", "role", "format", "max |value|", "margin"]),
        rows: r
            .chosen
            .iter()
            .map(|c| {
                vec![
                    c.layer.to_string(),
                    c.role.clone(),
                    c.format.clone(),
                    format!("{:.5}", c.max_abs),
                    match c.bound {
                        Some(b) => format!("bound {b}"),
                        None => format!("{:.2}×", c.margin),
                    },
                ]
            })
            .collect(),
        align: vec![
            Align::Right,
            Align::Left,
            Align::Left,
            Align::Right,
            Align::Right,
        ],
    });
    let errors = Table {
        headers: strings(&[
            "layer", "tensor", "format", "values", "max |w|", "RMS err", "max err", "SQNR dB",
            "sat.",
        ]),
        rows: r
            .tensors
            .iter()
            .map(|t| {
                vec![
                    t.layer.to_string(),
                    t.role.clone(),
                    t.format.clone(),
                    t.values.to_string(),
                    format!("{:.3e}", t.max_abs),
                    format!("{:.3e}", t.rms_error),
                    format!("{:.3e}", t.max_error),
                    if t.sqnr_db.is_finite() {
                        format!("{:.1}", t.sqnr_db)
                    } else {
                        "exact".into()
                    },
                    t.saturated.to_string(),
                ]
            })
            .collect(),
        align: vec![
            Align::Right,
            Align::Left,
            Align::Left,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
        ],
    };
    (chosen, errors)
}

/// The lines below the tables: the metrics before and after quantization against the true
/// targets, and the values the formats could not hold.
pub fn summary(r: &QuantReport) -> String {
    let mut s = String::new();
    let figures = |metric: f64, mae: f64| {
        if r.metric == "accuracy_pct" {
            format!("accuracy {metric:.2} %")
        } else {
            format!(
                "RMSE {}, MAE {}",
                crate::train::in_unit(metric, &r.unit),
                crate::train::in_unit(mae, &r.unit)
            )
        }
    };
    s.push_str(&format!(
        "On {} {}, against the true targets:\n  float      {}, loss {:.6}\n  quantized  {}, loss {:.6} (change {:+.6})\n",
        r.samples,
        if r.held_out {
            "rows held out by data.holdout, as `hone train` scores them"
        } else {
            "calibration samples"
        },
        figures(r.float_metric, r.float_mae),
        r.float_loss,
        figures(r.fixed_metric, r.fixed_mae),
        r.fixed_loss,
        r.fixed_loss - r.float_loss
    ));
    if r.input_saturations > 0 {
        s.push_str(&format!(
            "  {} input values saturated the input format\n",
            r.input_saturations
        ));
    }
    if r.target_saturations > 0 {
        s.push_str(&format!(
            "  {} target values saturated the output format: the quantized model cannot reach them\n",
            r.target_saturations
        ));
    }
    s
}

/// What the margin column means, for documents.
pub const MARGIN_NOTE: &str = "A format keeps as many fraction bits as its largest value \
    times the margin leaves: weights and biases 1.25× (fine-tuning may grow them by a \
    quarter), activations 2× (one integer bit for inputs beyond the calibration data), \
    gradients and accumulators 4×; a bounded activation (tanh, sigmoid, hard-tanh, clipped \
    ReLU) stops at its bound.";

/// Renders a quantization report as aligned text.
pub fn render(r: &QuantReport) -> String {
    use hone_report::report::render_text_table;
    let mut s = String::new();
    let (chosen, errors) = tables(r);
    if let Some(t) = chosen {
        s.push_str("Formats chosen from data\n");
        s.push_str(&render_text_table(&t));
        s.push('\n');
    }
    s.push_str("Quantization error per parameter tensor\n");
    s.push_str(&render_text_table(&errors));
    s.push('\n');
    s.push_str(&summary(r));
    s
}

/// The report as document blocks: both tables, the margins explained, the summary.
pub fn blocks(r: &QuantReport) -> Vec<hone_report::report::Block> {
    use hone_report::report::Block;
    let (chosen, errors) = tables(r);
    let mut b = Vec::new();
    if let Some(t) = chosen {
        b.push(Block::Paragraph("Formats chosen from data".into()));
        b.push(Block::Table(t));
        b.push(Block::Paragraph(MARGIN_NOTE.into()));
    }
    b.push(Block::Paragraph(
        "Quantization error per parameter tensor".into(),
    ));
    b.push(Block::Table(errors));
    b.push(Block::Paragraph(summary(r).trim_end().to_owned()));
    b
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frac_rule() {
        // 0.9 × 1.25 = 1.125 needs one integer bit: Q1.14 in i16.
        assert_eq!(frac_for(0.9, 1.25, Word::I16), 14);
        // 0.7 × 1.25 = 0.875 fits Q0.15.
        assert_eq!(frac_for(0.7, 1.25, Word::I16), 15);
        // 3.0 × 2 = 6 needs three integer bits: Q3.4 in i8.
        assert_eq!(frac_for(3.0, 2.0, Word::I8), 4);
        // All zero: range ±1 is still covered.
        assert_eq!(frac_for(0.0, 2.0, Word::I8), 6);
        // Tiny values get many fraction bits, capped at 31.
        assert_eq!(frac_for(1e-12, 1.0, Word::I32), 31);
    }

    #[test]
    fn bounded_outputs_get_the_format_of_their_bound() {
        use hone_core::model::LayerKind;
        // ±1 needs one integer bit to be representable: Q1.14 in i16, Q1.6 in i8.
        assert_eq!(output_bound(LayerKind::Tanh), Some(1.0));
        assert_eq!(frac_for(1.0, 1.0, Word::I16), 14);
        assert_eq!(frac_for(1.0, 1.0, Word::I8), 6);
        // The data rule gives Q2.13 once a float tanh output reaches 1 (it does for inputs
        // beyond about 19, where f64's tanh rounds to 1).
        assert_eq!(frac_for(1.0, ACTIVATION_MARGIN, Word::I16), 13);
        // A ceiling of 6 needs three integer bits.
        assert_eq!(
            output_bound(LayerKind::ClippedRelu { ceiling: 6 }),
            Some(6.0)
        );
        assert_eq!(frac_for(6.0, 1.0, Word::I16), 12);
        assert_eq!(output_bound(LayerKind::Relu), None);
    }

    #[test]
    fn error_figures() {
        let f = [0.5, -0.25, 0.1];
        let q = [0.5, -0.25, 0.125];
        let e = tensor_error(0, "weights", &f, &q, QFormat::Q0_7, 0);
        assert!((e.max_error - 0.025).abs() < 1e-12);
        assert!((e.rms_error - (0.025f64.powi(2) / 3.0).sqrt()).abs() < 1e-12);
        let sig: f64 = f.iter().map(|v| v * v).sum();
        assert!((e.sqnr_db - 10.0 * (sig / 0.025f64.powi(2)).log10()).abs() < 1e-9);
    }
}
