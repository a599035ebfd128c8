//! The quantization parameters of a run and the data prepared for both twins, with the epoch
//! order they share.

use super::*;

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
