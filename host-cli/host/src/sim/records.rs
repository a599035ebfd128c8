//! What a side-by-side run records: its options, the drift per epoch, per step and per tensor,
//! and its progress.

use super::*;

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
