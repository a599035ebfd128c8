//! Value ranges of the float twin on data: the largest magnitude of every layer's output, of
//! the loss gradient of that output, and of the weight and bias gradients, sample by sample.
//!
//! The quantizer chooses `auto` formats for gradients and accumulators from these ranges, and
//! the drift verdict uses them to say which format would have held a tensor that saturated.
//! The float twin (the core's `f64` arithmetic) is the reference: the fixed-point values
//! follow it up to quantization noise.

use hone_core::float::{backward, forward};
use hone_core::model::{Loss, ModelDesc};
use hone_core::num::{QFormat, Word};
use serde::Serialize;

use crate::sim::{Prepared, PreparedTargets};

/// Margin over the largest gradient magnitude seen on calibration data: two integer bits of
/// headroom. One bit, as for activations, covers inputs beyond the calibration data; the
/// second covers a unit that starts further from its targets than the factory model does
/// from the factory data (our policy).
pub const GRADIENT_MARGIN: f64 = 4.0;

/// Largest magnitudes of one layer's values over a data set.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct LayerRanges {
    /// The layer's output.
    pub out: f64,
    /// The loss gradient of the output (the core's `grad` tensor).
    pub grad: f64,
    /// One sample's weight gradient.
    pub weight_grad: f64,
    /// One sample's bias gradient.
    pub bias_grad: f64,
}

/// The loss gradient of the last layer's output `y` for one sample: `y − t` for squared error,
/// `softmax(y) − onehot` for cross-entropy.
fn loss_gradient(loss: Loss, y: &[f64], target: &PreparedTargets, i: usize) -> Vec<f64> {
    match (loss, target) {
        (Loss::SquaredError, PreparedTargets::Values { y: t, .. }) => {
            y.iter().zip(&t[i]).map(|(a, b)| a - b).collect()
        }
        (_, PreparedTargets::Classes(labels)) => {
            let m = y.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            let e: Vec<f64> = y.iter().map(|v| (v - m).exp()).collect();
            let s: f64 = e.iter().sum();
            e.iter()
                .enumerate()
                .map(|(j, v)| v / s - if j == labels[i] as usize { 1.0 } else { 0.0 })
                .collect()
        }
        _ => vec![0.0; y.len()],
    }
}

/// Runs every sample of `data` through the float model forward and backward and returns the
/// largest magnitudes per layer.
///
/// # Errors
/// A message when the description has no valid geometry.
pub fn float_ranges(
    desc: &ModelDesc,
    params: &[(Vec<f64>, Vec<f64>)],
    data: &Prepared,
) -> Result<Vec<LayerRanges>, hone_core::Error> {
    let shapes = hone_core::model::shapes(desc.input, &desc.layers, desc.loss)?;
    let n = desc.layers.len();
    let mut out = vec![LayerRanges::default(); n];
    let max_abs = |v: &[f64], m: f64| v.iter().fold(m, |m, x| m.max(x.abs()));
    for i in 0..data.len() {
        let mut acts: Vec<Vec<f64>> = vec![data.x[i].to_vec()];
        for (k, l) in desc.layers.iter().enumerate() {
            let g = shapes.layers[k];
            let mut y = vec![0f64; g.output.size() as usize];
            forward(l.kind, &g, &params[k].0, &params[k].1, &acts[k], &mut y);
            out[k].out = max_abs(&y, out[k].out);
            acts.push(y);
        }
        let mut gy = loss_gradient(desc.loss, &acts[n], &data.target, i);
        for k in (0..n).rev() {
            let l = desc.layers[k];
            let g = shapes.layers[k];
            out[k].grad = max_abs(&gy, out[k].grad);
            let mut gx = vec![0f64; g.input.size() as usize];
            let (mut aw, mut ab) = if l.kind.has_params() {
                (
                    vec![0f64; g.weights as usize],
                    vec![0f64; g.biases as usize],
                )
            } else {
                (Vec::new(), Vec::new())
            };
            backward(
                l.kind,
                &g,
                &params[k].0,
                &acts[k],
                &acts[k + 1],
                &gy,
                &mut gx,
                &mut aw,
                &mut ab,
            );
            out[k].weight_grad = max_abs(&aw, out[k].weight_grad);
            out[k].bias_grad = max_abs(&ab, out[k].bias_grad);
            gy = gx;
        }
    }
    Ok(out)
}

/// The largest magnitude an accumulator of one layer must hold, from one sample's gradient
/// `g`: the sum of a mini-batch of `batch` such gradients, or the momentum buffer
/// `v ← μv + ḡ`, whose steady state under a constant gradient is `ḡ / (1 − μ)`. Gradient
/// clipping bounds the averaged gradient first.
pub fn accumulator_need(g: f64, batch: u16, momentum: f64, clip: f64) -> f64 {
    let avg = if clip > 0.0 { g.min(clip) } else { g };
    let momentum_peak = if momentum > 0.0 && momentum < 1.0 {
        avg / (1.0 - momentum)
    } else {
        avg
    };
    (g * batch.max(1) as f64).max(momentum_peak)
}

/// The format of `word` that holds `max_abs` with [`GRADIENT_MARGIN`], written `Qm.n`.
pub fn holding_format(max_abs: f64, word: Word) -> QFormat {
    QFormat::new_unchecked(word, crate::quant::frac_for(max_abs, GRADIENT_MARGIN, word))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn accumulator_need_covers_batch_and_momentum() {
        // Batch 8 of gradients up to 0.5: a sum up to 4.
        assert_eq!(accumulator_need(0.5, 8, 0.0, 0.0), 4.0);
        // Momentum 0.9 with batch 4: the buffer reaches 10 × 0.5 = 5 > 4 × 0.5.
        assert!((accumulator_need(0.5, 4, 0.9, 0.0) - 5.0).abs() < 1e-12);
        // Clipping at 0.1 bounds the momentum peak: 1.0, below the batch sum of 2.
        assert!((accumulator_need(0.5, 4, 0.9, 0.1) - 2.0).abs() < 1e-12);
    }

    #[test]
    fn cross_entropy_gradient_sums_to_zero() {
        let t = PreparedTargets::Classes(vec![1]);
        let g = loss_gradient(Loss::SoftmaxCrossEntropy, &[0.5, 2.0, -1.0], &t, 0);
        assert!(g.iter().sum::<f64>().abs() < 1e-12);
        assert!(g[1] < 0.0 && g[0] > 0.0 && g[2] > 0.0);
    }
}
