//! Fixed-point training beside its float twin, on the host, with the core's own code.
//!
//! [`run_side_by_side`] takes a model description, a quantized start and the float start it
//! came from, and trains the core's fixed-point [`Trainer`] and the `f64` [`Twin`] on the
//! same samples in the same order with the same hyperparameters. After every epoch (and every
//! step on request) it records what a reviewer needs: both losses and metrics, how far the
//! fixed-point weights have moved from the float ones in steps of their format, the SQNR of
//! the fixed-point gradients against the float gradients, saturations and lost updates.
//! Because the fixed-point side is the very code the device runs, its numbers are the
//! device's numbers.

use std::path::PathBuf;

use hone_core::float::{FloatParams, FloatTarget, Twin};
use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::{Loss, ModelDesc};
use hone_core::num::{QFormat, Raw, Word};
use hone_core::plan::Plan;
use hone_core::train::{LayerParams, LayerStats, Trainer};
use serde::Serialize;

use crate::data::{Dataset, Rows, Targets};

/// Float parameters of a whole model: per layer, weights and bias.
pub type FloatLayers = Vec<(Vec<f64>, Vec<f64>)>;

/// Owned raw values of one word size.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum OwnedRaw {
    /// `i8` values.
    I8(Vec<i8>),
    /// `i16` values.
    I16(Vec<i16>),
    /// `i32` values.
    I32(Vec<i32>),
}

/// A value that is NaN or infinite, where a number to quantize was expected.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("value {index} is {value}, not a finite number")]
pub struct NotFinite {
    /// Position of the value, from 0.
    pub index: usize,
    /// The value.
    pub value: f64,
}

/// An error of the fixed-point simulation, naming the file and row, the layer or the sample.
#[derive(Debug, thiserror::Error)]
pub enum SimError {
    /// A parameter of the float model is not finite.
    #[error("layer {layer} {tensor}: {source}")]
    Param {
        /// Layer index.
        layer: usize,
        /// `weights` or `bias`.
        tensor: &'static str,
        /// The value.
        #[source]
        source: NotFinite,
    },
    /// A value of a data row is not finite.
    #[error("{}: row {row}: {field}: {source}", file.display())]
    Row {
        /// The data file.
        file: PathBuf,
        /// Data row, from 1.
        row: usize,
        /// `input` or `target`.
        field: &'static str,
        /// The value.
        #[source]
        source: NotFinite,
    },
    /// The data's targets do not suit the model's loss.
    #[error("{}: the targets do not match the loss {loss:?}", file.display())]
    TargetsMismatch {
        /// The data file.
        file: PathBuf,
        /// The model's loss.
        loss: Loss,
    },
    /// The core cannot plan the model's memory.
    #[error("the model does not plan: {0}")]
    Plan(#[source] hone_core::Error),
    /// The trainer or the float twin refused its start.
    #[error("{side} start: {source}")]
    Start {
        /// `fixed-point` or `float`.
        side: &'static str,
        /// The core's error.
        #[source]
        source: hone_core::Error,
    },
    /// A sample failed to train or evaluate.
    #[error("{what} {sample}: {source}")]
    Sample {
        /// `training sample`, `evaluation sample` or `sample`.
        what: &'static str,
        /// The sample, from 1.
        sample: usize,
        /// The core's error.
        #[source]
        source: hone_core::Error,
    },
    /// Any other refusal of the core.
    #[error(transparent)]
    Engine(#[from] hone_core::Error),
}

impl SimError {
    /// Wraps the core's refusal of the `side` (`fixed-point` or `float`) start.
    fn start(side: &'static str) -> impl FnOnce(hone_core::Error) -> SimError {
        move |source| SimError::Start { side, source }
    }
}

impl OwnedRaw {
    /// Quantizes `values` to nearest (ties to even), saturating. Returns the tensor and the
    /// number of values that saturated.
    ///
    /// # Errors
    /// [`NotFinite`] naming the first value that is NaN or infinite.
    pub fn quantize(values: &[f64], fmt: QFormat) -> Result<(OwnedRaw, usize), NotFinite> {
        let mut raw = Vec::with_capacity(values.len());
        let mut sat = 0;
        for (i, &v) in values.iter().enumerate() {
            let (r, s) = fmt
                .from_f64_saturating(v)
                .map_err(|_| NotFinite { index: i, value: v })?;
            sat += s as usize;
            raw.push(r);
        }
        Ok((OwnedRaw::from_i32(fmt.word, &raw), sat))
    }

    /// Values of `word` from `i32`s already in range.
    pub fn from_i32(word: Word, raw: &[i32]) -> OwnedRaw {
        match word {
            Word::I8 => OwnedRaw::I8(raw.iter().map(|&v| v as i8).collect()),
            Word::I16 => OwnedRaw::I16(raw.iter().map(|&v| v as i16).collect()),
            Word::I32 => OwnedRaw::I32(raw.to_vec()),
        }
    }

    /// A copy of a borrowed tensor.
    pub fn from_raw(raw: Raw<'_>) -> OwnedRaw {
        match raw {
            Raw::I8(s) => OwnedRaw::I8(s.to_vec()),
            Raw::I16(s) => OwnedRaw::I16(s.to_vec()),
            Raw::I32(s) => OwnedRaw::I32(s.to_vec()),
        }
    }

    /// A borrowed view.
    pub fn raw(&self) -> Raw<'_> {
        match self {
            OwnedRaw::I8(v) => Raw::I8(v),
            OwnedRaw::I16(v) => Raw::I16(v),
            OwnedRaw::I32(v) => Raw::I32(v),
        }
    }

    /// The real values in `fmt`.
    pub fn real(&self, fmt: QFormat) -> Vec<f64> {
        let r = self.raw();
        (0..r.len()).map(|i| fmt.to_f64(r.at(i))).collect()
    }

    /// Number of values.
    pub fn len(&self) -> usize {
        self.raw().len()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// Quantized parameters of a whole model: per layer, weights and bias.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct QuantParams {
    /// Per layer (empty tensors for layers without parameters).
    pub layers: Vec<(OwnedRaw, OwnedRaw)>,
}

impl QuantParams {
    /// Quantizes float parameters into the value formats of `desc`. Returns the parameters and
    /// the number of saturated values per layer.
    ///
    /// # Errors
    /// [`SimError::Param`] naming the layer and value that is not finite.
    pub fn quantize(
        desc: &ModelDesc,
        float: &[(Vec<f64>, Vec<f64>)],
    ) -> Result<(QuantParams, Vec<usize>), SimError> {
        let mut layers = Vec::new();
        let mut sats = Vec::new();
        for (k, (l, (w, b))) in desc.layers.iter().zip(float).enumerate() {
            let (qw, sw) =
                OwnedRaw::quantize(w, l.weight.value).map_err(|source| SimError::Param {
                    layer: k,
                    tensor: "weights",
                    source,
                })?;
            let (qb, sb) =
                OwnedRaw::quantize(b, l.bias.value).map_err(|source| SimError::Param {
                    layer: k,
                    tensor: "bias",
                    source,
                })?;
            layers.push((qw, qb));
            sats.push(sw + sb);
        }
        Ok((QuantParams { layers }, sats))
    }

    /// Borrowed views for [`Trainer::new`].
    pub fn views(&self) -> Vec<LayerParams<'_>> {
        self.layers
            .iter()
            .map(|(w, b)| LayerParams {
                weight: w.raw(),
                bias: b.raw(),
            })
            .collect()
    }

    /// The real values, per layer, in the value formats of `desc`.
    pub fn real(&self, desc: &ModelDesc) -> Vec<(Vec<f64>, Vec<f64>)> {
        self.layers
            .iter()
            .zip(desc.layers.iter())
            .map(|((w, b), l)| (w.real(l.weight.value), b.real(l.bias.value)))
            .collect()
    }
}

/// Samples ready for both sides: scaled `f64` inputs and targets for the twin, and their
/// quantized form for the fixed-point trainer.
#[derive(Clone, Debug)]
pub struct Prepared {
    /// Scaled inputs.
    pub x: Rows,
    /// Quantized inputs, in the model's input format.
    pub xq: Vec<OwnedRaw>,
    /// Targets.
    pub target: PreparedTargets,
    /// Input values that saturated when quantized.
    pub input_saturations: usize,
    /// Regression targets that saturated the last layer's output format when quantized: the
    /// fixed-point model cannot reach them, so its loss cannot fall to the float model's.
    pub target_saturations: usize,
}

/// Targets of [`Prepared`] samples.
#[derive(Clone, Debug)]
pub enum PreparedTargets {
    /// Regression targets, real and quantized into `format` (the last layer's output format).
    Values {
        /// Real targets.
        y: Rows,
        /// Quantized targets.
        yq: Vec<OwnedRaw>,
        /// Their format.
        format: QFormat,
    },
    /// Class labels.
    Classes(Vec<u16>),
}

impl Prepared {
    /// Prepares an already scaled dataset for `desc`.
    ///
    /// # Errors
    /// [`SimError::Row`] naming the row of a value that is not finite, or
    /// [`SimError::TargetsMismatch`] for a task that does not match the loss.
    pub fn new(data: &Dataset, desc: &ModelDesc) -> Result<Prepared, SimError> {
        let mut xq = Vec::with_capacity(data.x.len());
        let mut input_saturations = 0;
        for (i, row) in data.x.iter().enumerate() {
            let (q, s) =
                OwnedRaw::quantize(row, desc.input_format).map_err(|source| SimError::Row {
                    file: data.source.clone(),
                    row: i + 1,
                    field: "input",
                    source,
                })?;
            input_saturations += s;
            xq.push(q);
        }
        let mut target_saturations = 0;
        let target = match (&data.target, desc.loss) {
            (Targets::Values { y, .. }, Loss::SquaredError) => {
                let format = desc.layers.last().map(|l| l.out).unwrap_or(QFormat::Q0_7);
                let mut yq = Vec::with_capacity(y.len());
                for (i, t) in y.iter().enumerate() {
                    let (q, s) = OwnedRaw::quantize(t, format).map_err(|source| SimError::Row {
                        file: data.source.clone(),
                        row: i + 1,
                        field: "target",
                        source,
                    })?;
                    target_saturations += s;
                    yq.push(q);
                }
                PreparedTargets::Values {
                    y: y.clone(),
                    yq,
                    format,
                }
            }
            (Targets::Classes { labels, .. }, Loss::SoftmaxCrossEntropy) => {
                PreparedTargets::Classes(labels.clone())
            }
            _ => {
                return Err(SimError::TargetsMismatch {
                    file: data.source.clone(),
                    loss: desc.loss,
                })
            }
        };
        Ok(Prepared {
            x: data.x.clone(),
            xq,
            target,
            input_saturations,
            target_saturations,
        })
    }

    /// Number of samples.
    pub fn len(&self) -> usize {
        self.x.len()
    }

    /// Whether there are none.
    pub fn is_empty(&self) -> bool {
        self.x.is_empty()
    }

    /// Sample `i` for the fixed-point trainer.
    pub fn fixed(&self, i: usize, fmt: QFormat) -> (Tensor<'_>, Target<'_>) {
        let x = Tensor {
            raw: self.xq[i].raw(),
            fmt,
        };
        let t = match &self.target {
            PreparedTargets::Values { yq, format, .. } => Target::Values(Tensor {
                raw: yq[i].raw(),
                fmt: *format,
            }),
            PreparedTargets::Classes(l) => Target::Class(l[i]),
        };
        (x, t)
    }

    /// Sample `i` for the float twin.
    pub fn float(&self, i: usize) -> (&[f64], FloatTarget<'_, f64>) {
        let t = match &self.target {
            PreparedTargets::Values { y, .. } => FloatTarget::Values(&y[i]),
            PreparedTargets::Classes(l) => FloatTarget::Class(l[i]),
        };
        (&self.x[i], t)
    }

    /// Whether the task is classification.
    pub fn is_classification(&self) -> bool {
        matches!(self.target, PreparedTargets::Classes(_))
    }
}

/// The order of samples in an epoch: a Fisher–Yates shuffle with the core's generator, seeded
/// by `seed` and the epoch number, shared by both sides.
pub fn epoch_order(n: usize, epoch: u32, seed: u64) -> Vec<usize> {
    let mut rng = hone_core::num::Rng::new(seed ^ ((epoch as u64 + 1) << 40));
    let mut order: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        let j = rng.below(i as u64 + 1) as usize;
        order.swap(i, j);
    }
    order
}

/// What to record.
#[derive(Clone, Copy, Debug)]
pub struct RunOptions {
    /// Passes over the training samples.
    pub epochs: u32,
    /// Seed of the sample order.
    pub order_seed: u64,
    /// Record every step, not only every epoch.
    pub per_step: bool,
    /// Training samples used to measure gradient SQNR after each epoch (0: off).
    pub probe: usize,
    /// Shuffle the samples each epoch (otherwise file order).
    pub shuffle: bool,
}

/// One epoch of a side-by-side run.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct EpochDrift {
    /// Epoch, from 1 (0 is the start, before any training).
    pub epoch: u32,
    /// Mean training loss of the epoch, fixed point.
    pub fixed_train_loss: f64,
    /// Mean training loss of the epoch, float twin.
    pub float_train_loss: f64,
    /// Mean evaluation loss after the epoch, fixed point.
    pub fixed_eval_loss: f64,
    /// Mean evaluation loss after the epoch, float twin.
    pub float_eval_loss: f64,
    /// Evaluation metric after the epoch, fixed point: accuracy in % or RMSE in target units.
    pub fixed_metric: f64,
    /// The same for the float twin.
    pub float_metric: f64,
    /// Mean absolute error after the epoch in target units, fixed point (NaN, written `null`
    /// in JSON, for classification).
    pub fixed_mae: f64,
    /// The same for the float twin.
    pub float_mae: f64,
    /// Divergence of the trained tensor that moved furthest from float, relative to its own
    /// magnitude: `100 · RMS(fixed − float) / RMS(float)` in %, the denominator at least one
    /// step of the tensor's format.
    pub weight_rel_pct: f64,
    /// RMS over all trained values of |fixed − float| in steps of each value's format.
    pub weight_rms_steps: f64,
    /// Largest |fixed − float| of a trained value, in steps of its format.
    pub weight_max_steps: f64,
    /// SQNR of the fixed-point gradients against the float gradients on the probe samples, dB
    /// (`None` when not probed or no gradient). Each probe sample's weight and bias gradients
    /// are measured on their own, so gradients of opposite sign do not cancel into a sum that
    /// is mostly noise: `10·log10(Σ g² / Σ (g_fixed − g)²)` over samples and values.
    pub grad_sqnr_db: Option<f64>,
    /// Values that saturated during the epoch (activations, gradients, accumulators, updates).
    pub saturations: u64,
    /// Values written during the epoch.
    pub values: u64,
    /// Updates lost to rounding during the epoch.
    pub lost_updates: u64,
    /// Parameter values updated during the epoch.
    pub updates: u64,
}

/// One step of a side-by-side run (recorded on request).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct StepDrift {
    /// Step, from 1.
    pub step: u32,
    /// Loss of the step's sample, fixed point.
    pub fixed_loss: f64,
    /// Loss of the step's sample, float twin.
    pub float_loss: f64,
    /// As in [`EpochDrift`], after the step.
    pub weight_rms_steps: f64,
    /// As in [`EpochDrift`], after the step.
    pub weight_max_steps: f64,
}

/// Totals per tensor over a whole run.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct TensorTotals {
    /// Layer index.
    pub layer: usize,
    /// Tensor name: `out`, `grad`, `weight`, `bias`, `accum_weight`, `accum_bias`.
    pub tensor: &'static str,
    /// Values written.
    pub values: u64,
    /// Values that saturated.
    pub saturations: u64,
    /// Updates lost to rounding.
    pub lost_updates: u64,
    /// For trained weights and biases: the divergence from float at the end of the run,
    /// relative to the tensor's own magnitude, % (as [`EpochDrift::weight_rel_pct`]).
    pub divergence_pct: Option<f64>,
}

/// One evaluation sample at the end of a regression run: its reference (the true target of
/// the first output) and what each side predicts for it.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct Prediction {
    /// The true target.
    pub reference: f64,
    /// The fixed-point model's output.
    pub fixed: f64,
    /// The float twin's output.
    pub float: f64,
}

/// The outcome of [`run_side_by_side`].
#[derive(Clone, Debug)]
pub struct DriftRun {
    /// Epoch 0 (the start) and every epoch after.
    pub epochs: Vec<EpochDrift>,
    /// Every step, if recorded.
    pub steps: Vec<StepDrift>,
    /// Final fixed-point parameters.
    pub fixed_params: QuantParams,
    /// Final float parameters.
    pub float_params: Vec<(Vec<f64>, Vec<f64>)>,
    /// Per-tensor totals.
    pub tensors: Vec<TensorTotals>,
    /// The generator state of the fixed-point trainer at the end.
    pub rng_state: [u32; 4],
    /// Regression only: every evaluation sample's reference and both predictions at the end.
    pub predictions: Vec<Prediction>,
}

/// Progress of a run, for a progress bar.
#[derive(Clone, Copy, Debug)]
pub struct Progress {
    /// Steps done.
    pub done: u64,
    /// Steps in the run.
    pub total: u64,
}

fn stats_totals(s: &LayerStats) -> (u64, u64, u64, u64) {
    let all = [
        s.out,
        s.grad,
        s.weight,
        s.bias,
        s.accum_weight,
        s.accum_bias,
    ];
    let sat = all.iter().map(|t| t.saturations as u64).sum();
    let val = all.iter().map(|t| t.values as u64).sum();
    (
        sat,
        val,
        (s.weight.lost_updates + s.bias.lost_updates) as u64,
        (s.weight.values + s.bias.values) as u64,
    )
}

/// Divergence of the trained values from float.
#[derive(Clone, Debug, Default)]
struct Divergence {
    /// RMS of |fixed − float| in steps of each value's format, over every trained value.
    rms_steps: f64,
    /// Largest |fixed − float| in steps of its format.
    max_steps: f64,
    /// Per trained tensor: layer, `weight` or `bias`, and `100 · RMS(fixed − float) /
    /// max(RMS(float), step)`.
    relative: Vec<(usize, &'static str, f64)>,
}

impl Divergence {
    /// The largest relative divergence of any trained tensor, %.
    fn worst_pct(&self) -> f64 {
        self.relative.iter().map(|r| r.2).fold(0.0, f64::max)
    }
}

/// Divergence of the trained values: in steps of each value's format, and per tensor relative
/// to the tensor's own magnitude. Frozen tensors are equal on both sides by construction and
/// are left out.
fn divergence(
    desc: &ModelDesc,
    plan: &Plan,
    fixed: &Trainer<'_>,
    float: &Twin<'_, f64>,
) -> Divergence {
    let (mut sum, mut n, mut max) = (0f64, 0usize, 0f64);
    let mut relative = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        let (Some(q), Some(f)) = (fixed.params(k), float.params(k)) else {
            continue;
        };
        let s = plan.layers[k];
        for (name, raw, fv, fmt, trained) in [
            (
                "weight",
                q.weight,
                f.weight,
                l.weight.value,
                s.weight.is_some(),
            ),
            ("bias", q.bias, f.bias, l.bias.value, s.bias.is_some()),
        ] {
            if !trained || fv.is_empty() {
                continue;
            }
            let step = fmt.step();
            let (mut d2, mut f2) = (0f64, 0f64);
            for (i, &x) in fv.iter().enumerate() {
                let e = fmt.to_f64(raw.at(i)) - x;
                let d = (e / step).abs();
                sum += d * d;
                n += 1;
                max = max.max(d);
                d2 += e * e;
                f2 += x * x;
            }
            let m = fv.len() as f64;
            let scale = (f2 / m).sqrt().max(step);
            relative.push((k, name, 100.0 * (d2 / m).sqrt() / scale));
        }
    }
    Divergence {
        rms_steps: if n == 0 { 0.0 } else { (sum / n as f64).sqrt() },
        max_steps: max,
        relative,
    }
}

/// Loss and metrics of the fixed-point model and its float twin on one data set, every one
/// computed against the true targets (a target the output format cannot hold still counts
/// at its real value).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct PairFigures {
    /// Mean loss, fixed point.
    pub fixed_loss: f64,
    /// Mean loss, float twin.
    pub float_loss: f64,
    /// Accuracy in % or RMSE in target units, fixed point.
    pub fixed_metric: f64,
    /// The same for the float twin.
    pub float_metric: f64,
    /// Mean absolute error in target units, fixed point (NaN for classification).
    pub fixed_mae: f64,
    /// The same for the float twin.
    pub float_mae: f64,
}

/// `½ Σ (y − t)²` of a fixed-point output against real targets: the core's squared-error
/// loss, but against the true targets rather than their quantized form.
fn squared_error_true(y: Tensor<'_>, t: &[f64]) -> f64 {
    t.iter()
        .enumerate()
        .map(|(j, &t)| 0.5 * (y.fmt.to_f64(y.raw.at(j)) - t).powi(2))
        .sum()
}

/// Mean loss and metrics of both sides on `data` (no training, generators untouched).
fn evaluate_both(
    fixed: &mut Trainer<'_>,
    float: &mut Twin<'_, f64>,
    data: &Prepared,
    in_fmt: QFormat,
) -> Result<PairFigures, SimError> {
    if data.is_empty() {
        return Ok(PairFigures {
            fixed_loss: f64::NAN,
            float_loss: f64::NAN,
            fixed_metric: f64::NAN,
            float_metric: f64::NAN,
            fixed_mae: f64::NAN,
            float_mae: f64::NAN,
        });
    }
    let (mut lq, mut lf, mut mq, mut mf, mut aq, mut af) = (0f64, 0f64, 0f64, 0f64, 0f64, 0f64);
    for i in 0..data.len() {
        let (x, t) = data.fixed(i, in_fmt);
        let oq = fixed.evaluate(x, t).map_err(|source| SimError::Sample {
            what: "sample",
            sample: i + 1,
            source,
        })?;
        let (xf, tf) = data.float(i);
        let of = float.evaluate(xf, tf).map_err(|source| SimError::Sample {
            what: "sample",
            sample: i + 1,
            source,
        })?;
        lf += of.loss;
        match &data.target {
            PreparedTargets::Classes(labels) => {
                lq += oq.loss.to_f64();
                mq += (oq.predicted == Some(labels[i])) as u8 as f64;
                mf += (of.predicted == Some(labels[i])) as u8 as f64;
            }
            PreparedTargets::Values { y, .. } => {
                let yq = fixed.output();
                lq += squared_error_true(yq, &y[i]);
                let m = y[i].len() as f64;
                for (j, &t) in y[i].iter().enumerate() {
                    let e = yq.fmt.to_f64(yq.raw.at(j)) - t;
                    mq += e * e / m;
                    aq += e.abs() / m;
                }
                let out = float.output();
                for (j, &t) in y[i].iter().enumerate() {
                    let e = out[j] - t;
                    mf += e * e / m;
                    af += e.abs() / m;
                }
            }
        }
    }
    let n = data.len() as f64;
    Ok(if data.is_classification() {
        PairFigures {
            fixed_loss: lq / n,
            float_loss: lf / n,
            fixed_metric: 100.0 * mq / n,
            float_metric: 100.0 * mf / n,
            fixed_mae: f64::NAN,
            float_mae: f64::NAN,
        }
    } else {
        PairFigures {
            fixed_loss: lq / n,
            float_loss: lf / n,
            fixed_metric: (mq / n).sqrt(),
            float_metric: (mf / n).sqrt(),
            fixed_mae: aq / n,
            float_mae: af / n,
        }
    })
}

/// Gradient SQNR on the first `probe` training samples, each probed on its own, in dB.
fn grad_sqnr(
    desc: &ModelDesc,
    fixed: &mut Trainer<'_>,
    float: &mut Twin<'_, f64>,
    data: &Prepared,
    probe: usize,
) -> Result<Option<f64>, SimError> {
    let n = probe.min(data.len());
    if n == 0 {
        return Ok(None);
    }
    let in_fmt = desc.input_format;
    let (mut sig, mut noise) = (0f64, 0f64);
    for i in 0..n {
        fixed.probe_gradients(std::iter::once(data.fixed(i, in_fmt)))?;
        float.probe_gradients(std::iter::once(data.float(i)))?;
        for (k, l) in desc.layers.iter().enumerate() {
            let (Some(q), Some(f)) = (fixed.accumulators(k), float.accumulators(k)) else {
                continue;
            };
            let live = fixed.live_fracs(k).unwrap_or_default();
            let fw = QFormat {
                word: l.weight.accum.word,
                frac: live.accum_weight,
            };
            let fb = QFormat {
                word: l.bias.accum.word,
                frac: live.accum_bias,
            };
            for (raw, fv, fmt) in [(q.weight, f.weight, fw), (q.bias, f.bias, fb)] {
                for (i, &g) in fv.iter().enumerate() {
                    let e = fmt.to_f64(raw.at(i)) - g;
                    sig += g * g;
                    noise += e * e;
                }
            }
        }
        fixed.clear_probe();
        float.clear_probe();
    }
    Ok(match (sig > 0.0, noise > 0.0) {
        (false, _) => None,
        (true, false) => Some(f64::INFINITY),
        (true, true) => Some(10.0 * (sig / noise).log10()),
    })
}

/// Trains the fixed-point model and its float twin side by side. See the [module docs](self).
///
/// # Errors
/// A message for a model that does not plan, parameters that do not fit it, or a sample
/// that does not fit the model.
pub fn run_side_by_side(
    desc: &ModelDesc,
    init_fixed: &QuantParams,
    init_float: &[(Vec<f64>, Vec<f64>)],
    train: &Prepared,
    eval: &Prepared,
    opts: &RunOptions,
    progress: &mut dyn FnMut(Progress),
) -> Result<DriftRun, SimError> {
    let plan = Plan::of(desc).map_err(SimError::Plan)?;
    let fplan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 8)?;
    let mut arena = vec![0u32; plan.ram_words()];
    let mut farena = vec![0f64; fplan.ram_bytes as usize / 8];
    let views = init_fixed.views();
    let fviews: Vec<FloatParams<'_, f64>> = init_float
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut fixed =
        Trainer::new(desc, &plan, &mut arena, &views).map_err(SimError::start("fixed-point"))?;
    let mut float =
        Twin::new(desc, &fplan, &mut farena, &fviews).map_err(SimError::start("float"))?;
    let in_fmt = desc.input_format;
    let total = opts.epochs as u64 * train.len() as u64;
    let mut done = 0u64;
    let mut epochs = Vec::new();
    let mut steps = Vec::new();

    let e0 = evaluate_both(&mut fixed, &mut float, eval, in_fmt)?;
    let g0 = grad_sqnr(desc, &mut fixed, &mut float, train, opts.probe)?;
    // Before any step the weights differ by the quantization error alone.
    let d0 = divergence(desc, &plan, &fixed, &float);
    epochs.push(EpochDrift {
        epoch: 0,
        fixed_eval_loss: e0.fixed_loss,
        float_eval_loss: e0.float_loss,
        fixed_metric: e0.fixed_metric,
        float_metric: e0.float_metric,
        fixed_mae: e0.fixed_mae,
        float_mae: e0.float_mae,
        weight_rel_pct: d0.worst_pct(),
        weight_rms_steps: d0.rms_steps,
        weight_max_steps: d0.max_steps,
        grad_sqnr_db: g0,
        ..Default::default()
    });
    let mut prev = vec![(0u64, 0u64, 0u64, 0u64); desc.layers.len()];
    for epoch in 1..=opts.epochs {
        let order: Vec<usize> = if opts.shuffle {
            epoch_order(train.len(), epoch, opts.order_seed)
        } else {
            (0..train.len()).collect()
        };
        let (mut lq, mut lf) = (0f64, 0f64);
        for &i in &order {
            let (x, t) = train.fixed(i, in_fmt);
            let oq = fixed.step(x, t).map_err(|source| SimError::Sample {
                what: "training sample",
                sample: i + 1,
                source,
            })?;
            let (xf, tf) = train.float(i);
            // Regression losses count against the true targets, not their quantized form.
            let fixed_loss = match &train.target {
                PreparedTargets::Values { y, .. } => squared_error_true(fixed.output(), &y[i]),
                PreparedTargets::Classes(_) => oq.loss.to_f64(),
            };
            let of = float.step(xf, tf).map_err(|source| SimError::Sample {
                what: "training sample",
                sample: i + 1,
                source,
            })?;
            lq += fixed_loss;
            lf += of.loss;
            done += 1;
            if opts.per_step {
                let d = divergence(desc, &plan, &fixed, &float);
                steps.push(StepDrift {
                    step: done as u32,
                    fixed_loss,
                    float_loss: of.loss,
                    weight_rms_steps: d.rms_steps,
                    weight_max_steps: d.max_steps,
                });
            }
            if done.is_multiple_of(64) {
                progress(Progress { done, total });
            }
        }
        fixed.flush();
        float.flush();
        let n = train.len().max(1) as f64;
        let ev = evaluate_both(&mut fixed, &mut float, eval, in_fmt)?;
        let d = divergence(desc, &plan, &fixed, &float);
        let g = grad_sqnr(desc, &mut fixed, &mut float, train, opts.probe)?;
        let mut e = EpochDrift {
            epoch,
            fixed_train_loss: lq / n,
            float_train_loss: lf / n,
            fixed_eval_loss: ev.fixed_loss,
            float_eval_loss: ev.float_loss,
            fixed_metric: ev.fixed_metric,
            float_metric: ev.float_metric,
            fixed_mae: ev.fixed_mae,
            float_mae: ev.float_mae,
            weight_rel_pct: d.worst_pct(),
            weight_rms_steps: d.rms_steps,
            weight_max_steps: d.max_steps,
            grad_sqnr_db: g,
            ..Default::default()
        };
        for (k, p) in prev.iter_mut().enumerate() {
            let now = fixed.stats(k).map(stats_totals).unwrap_or_default();
            e.saturations += now.0 - p.0;
            e.values += now.1 - p.1;
            e.lost_updates += now.2 - p.2;
            e.updates += now.3 - p.3;
            *p = now;
        }
        epochs.push(e);
        progress(Progress { done, total });
    }
    let last = divergence(desc, &plan, &fixed, &float);
    let mut tensors = Vec::new();
    for k in 0..desc.layers.len() {
        let Some(s) = fixed.stats(k) else { continue };
        for (name, t) in [
            ("out", s.out),
            ("grad", s.grad),
            ("weight", s.weight),
            ("bias", s.bias),
            ("accum_weight", s.accum_weight),
            ("accum_bias", s.accum_bias),
        ] {
            // The core counts the first copy into a master among the tensor's saturations
            // (before any write is counted), so a tensor may have saturations without values.
            if t.values > 0 || t.saturations > 0 {
                tensors.push(TensorTotals {
                    layer: k,
                    tensor: name,
                    values: t.values as u64,
                    saturations: t.saturations as u64,
                    lost_updates: t.lost_updates as u64,
                    divergence_pct: last
                        .relative
                        .iter()
                        .find(|r| r.0 == k && r.1 == name)
                        .map(|r| r.2),
                });
            }
        }
    }
    let fixed_params = QuantParams {
        layers: (0..desc.layers.len())
            .map(|k| match fixed.params(k) {
                Some(p) => (OwnedRaw::from_raw(p.weight), OwnedRaw::from_raw(p.bias)),
                None => (OwnedRaw::I8(Vec::new()), OwnedRaw::I8(Vec::new())),
            })
            .collect(),
    };
    let float_params = (0..desc.layers.len())
        .map(|k| match float.params(k) {
            Some(p) => (p.weight.to_vec(), p.bias.to_vec()),
            None => (Vec::new(), Vec::new()),
        })
        .collect();
    let mut predictions = Vec::new();
    if let PreparedTargets::Values { y, .. } = &eval.target {
        for (i, t) in y.iter().enumerate() {
            let (x, _) = eval.fixed(i, in_fmt);
            let out = fixed.predict(x).map_err(|source| SimError::Sample {
                what: "evaluation sample",
                sample: i + 1,
                source,
            })?;
            let fx = out.fmt.to_f64(out.raw.at(0));
            let fl = float
                .predict(&eval.x[i])
                .map_err(|source| SimError::Sample {
                    what: "evaluation sample",
                    sample: i + 1,
                    source,
                })?
                .first()
                .copied()
                .unwrap_or(f64::NAN);
            predictions.push(Prediction {
                reference: t.first().copied().unwrap_or(f64::NAN),
                fixed: fx,
                float: fl,
            });
        }
    }
    let rng_state = fixed.rng().state();
    Ok(DriftRun {
        epochs,
        steps,
        fixed_params,
        float_params,
        tensors,
        rng_state,
        predictions,
    })
}

/// Mean loss and metrics of the quantized model and its float original on `data`, without
/// training, against the true targets.
///
/// # Errors
/// As [`run_side_by_side`].
pub fn evaluate_pair(
    desc: &ModelDesc,
    fixed: &QuantParams,
    float: &[(Vec<f64>, Vec<f64>)],
    data: &Prepared,
) -> Result<PairFigures, SimError> {
    let plan = Plan::of(desc).map_err(SimError::Plan)?;
    let fplan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 8)?;
    let mut arena = vec![0u32; plan.ram_words()];
    let mut farena = vec![0f64; fplan.ram_bytes as usize / 8];
    let views = fixed.views();
    let fviews: Vec<FloatParams<'_, f64>> = float
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut tq =
        Trainer::new(desc, &plan, &mut arena, &views).map_err(SimError::start("fixed-point"))?;
    let mut tf = Twin::new(desc, &fplan, &mut farena, &fviews).map_err(SimError::start("float"))?;
    evaluate_both(&mut tq, &mut tf, data, desc.input_format)
}

#[cfg(test)]
mod tests {
    use super::*;

    const ONE_DENSE: &str = r#"
loss = "squared-error"
[input]
channels = 2
[[layer]]
kind = "dense"
units = 1
[train]
epochs = 1
learning-rate = 0.01
[data]
target = "y"
"#;

    /// One step of a 2-1 dense model on `target`: the core's loss (against the target as
    /// quantized into the output format) and the host's loss against the true target.
    fn step_losses(target: f64) -> (f64, f64) {
        let cfg = crate::config::Config::parse(std::path::Path::new("t.toml"), ONE_DENSE)
            .expect("config");
        // Every auto format Q3.12: outputs and targets up to ±8.
        let desc = cfg.model_desc_with(|_| 12).expect("description");
        let float = vec![(vec![0.5, -0.25], vec![0.1])];
        let (params, _) = QuantParams::quantize(&desc, &float).expect("quantizes");
        let plan = Plan::of(&desc).expect("plans");
        let mut arena = vec![0u32; plan.ram_words()];
        let views = params.views();
        let mut t = Trainer::new(&desc, &plan, &mut arena, &views).expect("trainer");
        let (x, _) = OwnedRaw::quantize(&[1.0, 2.0], desc.input_format).expect("input");
        let out = desc.layers[0].out;
        let (y, _) = OwnedRaw::quantize(&[target], out).expect("target");
        let o = t
            .step(
                Tensor {
                    raw: x.raw(),
                    fmt: desc.input_format,
                },
                Target::Values(Tensor {
                    raw: y.raw(),
                    fmt: out,
                }),
            )
            .expect("steps");
        (o.loss.to_f64(), squared_error_true(t.output(), &[target]))
    }

    #[test]
    fn host_loss_matches_the_core_until_the_target_saturates() {
        // 0.5·1 − 0.25·2 + 0.1 = 0.1; against 0.375 (exact in Q3.12) the loss is ½·0.275²
        // on both sides, so the output read after a step is the step's own forward output.
        let (core, host) = step_losses(0.375);
        assert!((core - 0.5 * 0.275f64.powi(2)).abs() < 1e-3, "{core}");
        assert!((host - core).abs() < 1e-6, "{host} vs {core}");
        // A target of 100 saturates the Q3.12 output format at 8: the core sees ½·(8 − 0.1)²,
        // the host counts the true ½·(100 − 0.1)².
        let (core, host) = step_losses(100.0);
        assert!((core - 0.5 * 7.9f64.powi(2)).abs() < 1e-2, "{core}");
        assert!((host - 0.5 * 99.9f64.powi(2)).abs() < 1e-2, "{host}");
    }
}
