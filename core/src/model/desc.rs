//! The model description: layers, formats, loss and training setup.
//!
//! One type serves three readers: the `const fn` memory plan (through slices of
//! [`LayerDesc`]), the device (decoded from a postcard blob) and the host (read from TOML
//! through serde). Fixed-capacity storage comes from `heapless`.

use heapless::Vec;
use serde::{Deserialize, Serialize};

use crate::error::{Error, LayerFault};
use crate::features::Feature;
use crate::num::{QFormat, QScalar, Rounding, RoundingPlan, Word};

/// The most layers a model may have. Activation functions and pooling count as layers.
pub const MAX_LAYERS: usize = 12;

/// A 1-D signal: `channels` rows of `len` samples, stored channel-major (`[c][t]`).
/// Tabular features are `channels = n, len = 1`; a 3-axis accelerometer window of 64 samples
/// is `channels = 3, len = 64`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Shape {
    /// Channels (features).
    pub channels: u16,
    /// Samples per channel.
    pub len: u16,
}

impl Shape {
    /// A flat vector of `n` features.
    pub const fn vector(n: u16) -> Shape {
        Shape {
            channels: n,
            len: 1,
        }
    }

    /// Number of values.
    pub const fn size(self) -> u32 {
        self.channels as u32 * self.len as u32
    }
}

/// What a layer computes.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LayerKind {
    /// Fully connected: flattens its input and produces `units` values (`Shape::vector`).
    /// Weights are `[units][inputs]`, row-major; bias `[units]`.
    Dense {
        /// Output units.
        units: u16,
    },
    /// 1-D convolution without padding ("valid"): output length `(len − kernel)/stride + 1`.
    /// Kernel `[filters][in_channels][kernel]`; bias `[filters]`.
    Conv1d {
        /// Output channels.
        filters: u16,
        /// Kernel length in samples.
        kernel: u16,
        /// Step between windows.
        stride: u16,
    },
    /// max(0, x).
    Relu,
    /// x for x > 0, x · 2^-shift otherwise.
    LeakyRelu {
        /// Slope of the negative side as a right shift, 1 to 15 (3 gives 1/8).
        shift: u8,
    },
    /// Hard tanh: clamp(x, −1, 1).
    HardTanh,
    /// Clipped ReLU: clamp(x, 0, ceiling), for example ceiling 6.
    ClippedRelu {
        /// Upper clamp, a whole number of at least 1.
        ceiling: u8,
    },
    /// Logistic sigmoid by lookup table (see [`crate::approx::sigmoid`]).
    Sigmoid,
    /// tanh by lookup table (see [`crate::approx::tanh`]).
    Tanh,
    /// Average over windows of `window` samples every `stride` samples, per channel.
    AvgPool1d {
        /// Window length.
        window: u16,
        /// Step between windows.
        stride: u16,
    },
    /// Maximum over windows, per channel.
    MaxPool1d {
        /// Window length.
        window: u16,
        /// Step between windows.
        stride: u16,
    },
}

impl LayerKind {
    /// Whether the layer has weights and a bias.
    pub const fn has_params(self) -> bool {
        matches!(self, LayerKind::Dense { .. } | LayerKind::Conv1d { .. })
    }

    /// Whether this build of the core includes the layer kind. Convolution, pooling and the
    /// table activations each have a cargo feature (`conv1d`, `pool1d`, `table-activations`,
    /// all on by default); a firmware that turns one off does not link its code, and a
    /// description that uses it is rejected with [`LayerFault::NotBuilt`].
    // Which arms are `true` depends on the features, so `matches!` would not read better.
    #[allow(clippy::match_like_matches_macro)]
    pub const fn is_built(self) -> bool {
        match self {
            LayerKind::Conv1d { .. } => cfg!(feature = "conv1d"),
            LayerKind::AvgPool1d { .. } | LayerKind::MaxPool1d { .. } => cfg!(feature = "pool1d"),
            LayerKind::Sigmoid | LayerKind::Tanh => cfg!(feature = "table-activations"),
            _ => true,
        }
    }
}

/// Which parameters of a layer training may change.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum TrainMode {
    /// Nothing changes. Weights and bias may stay in flash as `&'static` data, and no
    /// activations are kept for this layer unless a trainable layer before it needs them.
    Frozen,
    /// Only the bias changes (a cheap per-unit offset calibration); weights stay in flash.
    BiasOnly,
    /// Only the weights change; the bias stays in flash.
    WeightsOnly,
    /// Weights and bias change.
    Full,
}

impl TrainMode {
    /// Whether the weights are trained.
    pub const fn trains_weight(self) -> bool {
        matches!(self, TrainMode::WeightsOnly | TrainMode::Full)
    }

    /// Whether the bias is trained.
    pub const fn trains_bias(self) -> bool {
        matches!(self, TrainMode::BiasOnly | TrainMode::Full)
    }
}

/// Formats of one parameter tensor (weights or bias) and of its training state.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ParamFormats {
    /// The values used in forward and backward propagation.
    pub value: QFormat,
    /// Optional higher-precision master copy that receives the updates; the propagated values
    /// are rounded from it after each update (Courbariaux, Bengio, David 2014).
    pub master: Option<QFormat>,
    /// The gradient accumulator of a mini-batch, also the format of the momentum buffer.
    pub accum: QFormat,
}

impl ParamFormats {
    /// Value format only, with an `i32` accumulator of `accum_frac` fraction bits.
    pub const fn plain(value: QFormat, accum_frac: u8) -> ParamFormats {
        ParamFormats {
            value,
            master: None,
            accum: QFormat::new_unchecked(Word::I32, accum_frac),
        }
    }

    /// The format updates are written into: the master copy if there is one.
    pub const fn update_target(&self) -> QFormat {
        match self.master {
            Some(m) => m,
            None => self.value,
        }
    }

    const fn is_valid(&self) -> bool {
        self.value.is_valid()
            && self.accum.is_valid()
            && match self.master {
                Some(m) => m.is_valid(),
                None => true,
            }
    }
}

/// One layer: what it computes, how it trains, and the formats of its tensors.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LayerDesc {
    /// What the layer computes.
    pub kind: LayerKind,
    /// What training may change. Must be [`TrainMode::Frozen`] for layers without parameters.
    pub mode: TrainMode,
    /// Weight formats (unused for layers without parameters, but checked like the others).
    pub weight: ParamFormats,
    /// Bias formats (unused for layers without parameters, but checked like the others).
    pub bias: ParamFormats,
    /// Format of the layer's output activations.
    pub out: QFormat,
    /// Format of the loss gradient with respect to the layer's output.
    pub grad: QFormat,
}

impl LayerDesc {
    /// A layer without parameters (activation or pooling), frozen, with the given output and
    /// gradient formats.
    pub const fn simple(kind: LayerKind, out: QFormat, grad: QFormat) -> LayerDesc {
        let unused = ParamFormats::plain(QFormat::Q0_7, 0);
        LayerDesc {
            kind,
            mode: TrainMode::Frozen,
            weight: unused,
            bias: unused,
            out,
            grad,
        }
    }

    /// The same layer with another train mode.
    pub const fn with_mode(mut self, mode: TrainMode) -> LayerDesc {
        self.mode = mode;
        self
    }
}

/// The loss the model is trained on.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Loss {
    /// Squared error with the conventional one half, summed over outputs:
    /// `L = ½ Σ_j (y_j − t_j)²`, gradient `y − t`. Its mean over samples is the training
    /// loss; the mean squared error per output is `2L / outputs`.
    SquaredError,
    /// Softmax over the outputs followed by cross-entropy with a class label:
    /// `L = −ln softmax(z)_t`, gradient `softmax(z) − onehot(t)`.
    SoftmaxCrossEntropy,
}

impl Loss {
    /// Whether this build of the core includes the loss (softmax cross-entropy has the cargo
    /// feature `cross-entropy`, on by default); see [`LayerKind::is_built`].
    // Which arms are `true` depends on the features, so `matches!` would not read better.
    #[allow(clippy::match_like_matches_macro)]
    pub const fn is_built(self) -> bool {
        match self {
            Loss::SquaredError => true,
            Loss::SoftmaxCrossEntropy => cfg!(feature = "cross-entropy"),
        }
    }
}

/// The overflow-rate rule of dynamic fixed point (Courbariaux, Bengio, David 2014, section 4):
/// every `interval` weight updates, each tensor whose saturation rate over the interval exceeds
/// `max_rate_ppm` loses one fraction bit (its range doubles); one whose values would saturate
/// at no more than that rate with one more fraction bit (the values in the outer half of the
/// range) gains one. See `train::dynamic`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DynamicRule {
    /// Largest tolerated rate of saturated values, in parts per million (the paper used
    /// 0.01 %, i.e. 100 ppm).
    pub max_rate_ppm: u32,
    /// Weight updates between adjustments.
    pub interval: u16,
}

/// How training proceeds: SGD with mini-batches, momentum, weight decay and clipping, all in
/// fixed point.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct TrainDesc {
    /// Samples whose gradients are accumulated before one update (≥ 1).
    pub batch: u16,
    /// Learning rate (≥ 0).
    pub lr: QScalar,
    /// Momentum coefficient μ in `v ← μ v + g`; zero disables the momentum buffers.
    pub momentum: QScalar,
    /// L2 weight decay λ, added to the gradient as `λ w`; zero disables it.
    pub weight_decay: QScalar,
    /// Bound on each averaged gradient value, `|g| ≤ clip`; zero disables clipping.
    pub clip: QScalar,
    /// Rounding per tensor role.
    pub rounding: RoundingPlan,
    /// Dynamic fixed point, if wanted.
    pub dynamic: Option<DynamicRule>,
    /// Seed of the core's generator (stochastic rounding).
    pub seed: u64,
}

impl TrainDesc {
    /// Plain SGD: batch 1, the given learning rate, no momentum, decay or clipping, nearest
    /// rounding, no dynamic fixed point, seed 0.
    pub const fn sgd(lr: QScalar) -> TrainDesc {
        TrainDesc {
            batch: 1,
            lr,
            momentum: QScalar::ZERO,
            weight_decay: QScalar::ZERO,
            clip: QScalar::ZERO,
            rounding: RoundingPlan::NEAREST,
            dynamic: None,
            seed: 0,
        }
    }

    /// Checks the hyperparameters.
    ///
    /// # Errors
    /// [`Error::InvalidTraining`] for a zero batch, a negative learning rate, momentum,
    /// decay or clip, a momentum of one or more, a scalar with more than 31 fraction bits,
    /// or a dynamic rule with a zero interval; [`Error::NotBuilt`] for a rounding mode,
    /// momentum, weight decay, clipping or dynamic fixed point this core is built without
    /// (see [`crate::features`]).
    pub const fn check(&self) -> Result<(), Error> {
        let scalars = [self.lr, self.momentum, self.weight_decay, self.clip];
        let mut i = 0;
        while i < scalars.len() {
            if scalars[i].raw < 0 || scalars[i].frac > crate::num::MAX_FRAC {
                return Err(Error::InvalidTraining);
            }
            i += 1;
        }
        // μ < 1, or the momentum buffer grows without bound.
        if (self.momentum.raw as i64) >= (1i64 << self.momentum.frac) {
            return Err(Error::InvalidTraining);
        }
        if self.batch == 0 {
            return Err(Error::InvalidTraining);
        }
        if let Some(d) = self.dynamic {
            if d.interval == 0 {
                return Err(Error::InvalidTraining);
            }
        }
        self.check_built()
    }

    /// Refuses a setup that needs an optional part this core is built without.
    const fn check_built(&self) -> Result<(), Error> {
        let modes = [
            self.rounding.activations,
            self.rounding.gradients,
            self.rounding.updates,
        ];
        let mut i = 0;
        while i < modes.len() {
            let part = match modes[i] {
                Rounding::NearestEven => None,
                Rounding::TowardZero => Some(Feature::TowardZero),
                Rounding::Stochastic => Some(Feature::Stochastic),
            };
            if let Some(p) = part {
                if !p.is_built() {
                    return Err(Error::NotBuilt(p));
                }
            }
            i += 1;
        }
        if !self.momentum.is_zero() && !Feature::Momentum.is_built() {
            return Err(Error::NotBuilt(Feature::Momentum));
        }
        let decay_or_clip = !(self.weight_decay.is_zero() && self.clip.is_zero());
        if decay_or_clip && !Feature::DecayClip.is_built() {
            return Err(Error::NotBuilt(Feature::DecayClip));
        }
        if self.dynamic.is_some() && !Feature::Dynamic.is_built() {
            return Err(Error::NotBuilt(Feature::Dynamic));
        }
        Ok(())
    }
}

/// A complete model description.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct ModelDesc {
    /// Shape of one input sample.
    pub input: Shape,
    /// Format the device quantizes inputs into (after scaling). The trainer accepts any
    /// format for an input tensor; this is the one the model was planned and exported with.
    pub input_format: QFormat,
    /// Layers in order.
    pub layers: Vec<LayerDesc, MAX_LAYERS>,
    /// The loss.
    pub loss: Loss,
    /// The training setup.
    pub train: TrainDesc,
}

impl ModelDesc {
    /// A description from a slice of layers.
    ///
    /// # Errors
    /// [`Error::TooManyLayers`] past [`MAX_LAYERS`]; otherwise the errors of
    /// [`ModelDesc::check`].
    pub fn new(
        input: Shape,
        input_format: QFormat,
        layers: &[LayerDesc],
        loss: Loss,
        train: TrainDesc,
    ) -> Result<ModelDesc, Error> {
        let layers = Vec::from_slice(layers).map_err(|_| Error::TooManyLayers)?;
        let d = ModelDesc {
            input,
            input_format,
            layers,
            loss,
            train,
        };
        d.check()?;
        Ok(d)
    }

    /// A description whose `const` plan was made at compile time from the same parts
    /// ([`Plan::new`](crate::plan::Plan::new) in a `const` item, which runs every check of
    /// [`ModelDesc::check`] on the layers, the loss and the training setup, and fails the
    /// build when one fails). Only the input format and the plan's fingerprint of the parts are
    /// checked here, so a firmware with a compile-time model does not link the run-time
    /// checks of the layers. Pair it with
    /// [`Trainer::new_planned`](crate::train::Trainer::new_planned).
    ///
    /// # Errors
    /// [`Error::TooManyLayers`] past [`MAX_LAYERS`]; [`Error::InvalidFormat`] for an input
    /// format that is invalid or not built; [`Error::PlanMismatch`] when `plan` is a float
    /// twin's plan or was not made from these parts.
    pub fn new_planned(
        input: Shape,
        input_format: QFormat,
        layers: &[LayerDesc],
        loss: Loss,
        train: TrainDesc,
        plan: &crate::plan::Plan,
    ) -> Result<ModelDesc, Error> {
        Self::check_planned(input, input_format, layers, loss, &train, plan)?;
        let layers = Vec::from_slice(layers).map_err(|_| Error::TooManyLayers)?;
        Ok(ModelDesc {
            input,
            input_format,
            layers,
            loss,
            train,
        })
    }

    /// The checks of [`ModelDesc::new_planned`], as a `const fn` for a `static` description
    /// beside its `const` plan: a firmware then keeps the description in flash instead of
    /// building one on its stack. Pair it with [`ModelDesc::from_array`]:
    /// ```
    /// # use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape};
    /// # use hone_core::model::{TrainDesc, TrainMode};
    /// # use hone_core::num::{QFormat, QScalar, Word};
    /// # use hone_core::plan::Plan;
    /// # const Q: QFormat = QFormat::new_unchecked(Word::I16, 12);
    /// # const P: ParamFormats = ParamFormats::plain(Q, 20);
    /// const INPUT: Shape = Shape::vector(1);
    /// const LAYERS: [LayerDesc; 1] = [LayerDesc { kind: LayerKind::Dense { units: 1 },
    ///     mode: TrainMode::Full, weight: P, bias: P, out: Q, grad: Q }];
    /// const TRAIN: TrainDesc = TrainDesc::sgd(QScalar { raw: 1, frac: 4 });
    /// const PLAN: Plan = match Plan::new(INPUT, &LAYERS, Loss::SquaredError, &TRAIN) {
    ///     Ok(p) => p,
    ///     Err(_) => panic!("does not plan"),
    /// };
    /// static DESC: ModelDesc =
    ///     match ModelDesc::check_planned(INPUT, Q, &LAYERS, Loss::SquaredError, &TRAIN, &PLAN) {
    ///         Ok(()) => ModelDesc::from_array(INPUT, Q, LAYERS, Loss::SquaredError, TRAIN),
    ///         Err(_) => panic!("does not match its plan"),
    ///     };
    /// assert_eq!(DESC.layers.len(), 1);
    /// ```
    ///
    /// # Errors
    /// [`Error::TooManyLayers`] past [`MAX_LAYERS`]; [`Error::InvalidFormat`] for an input
    /// format that is invalid or not built; [`Error::PlanMismatch`] when `plan` is a float
    /// twin's plan or was not made from these parts.
    pub const fn check_planned(
        input: Shape,
        input_format: QFormat,
        layers: &[LayerDesc],
        loss: Loss,
        train: &TrainDesc,
        plan: &crate::plan::Plan,
    ) -> Result<(), Error> {
        if layers.len() > MAX_LAYERS {
            return Err(Error::TooManyLayers);
        }
        if !input_format.is_valid() || !input_format.word.is_built_for_values() {
            return Err(Error::InvalidFormat);
        }
        if plan.float_bytes != 0
            || plan.fingerprint != crate::plan::fingerprint(input, layers, loss, train)
        {
            return Err(Error::PlanMismatch);
        }
        Ok(())
    }

    /// A description from its parts, unchecked, as a `const fn`: for a `static` whose parts
    /// passed [`ModelDesc::check_planned`] (see there). `N` is at most [`MAX_LAYERS`] (the
    /// build fails otherwise).
    pub const fn from_array<const N: usize>(
        input: Shape,
        input_format: QFormat,
        layers: [LayerDesc; N],
        loss: Loss,
        train: TrainDesc,
    ) -> ModelDesc {
        ModelDesc {
            input,
            input_format,
            layers: Vec::from_array(layers),
            loss,
            train,
        }
    }

    /// Checks every layer's sizes and formats, the loss against the output, and the
    /// training hyperparameters.
    ///
    /// # Errors
    /// The first problem found, as an [`Error`].
    pub fn check(&self) -> Result<(), Error> {
        if !self.input_format.is_valid() || !self.input_format.word.is_built_for_values() {
            return Err(Error::InvalidFormat);
        }
        self.train.check()?;
        shapes(self.input, &self.layers, self.loss).map(|_| ())
    }

    /// Shape of the model's output.
    ///
    /// # Errors
    /// As [`ModelDesc::check`].
    pub fn output(&self) -> Result<Shape, Error> {
        let s = shapes(self.input, &self.layers, self.loss)?;
        Ok(s.output)
    }
}

/// Sizes of one layer, derived from the description.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LayerGeometry {
    /// Input shape.
    pub input: Shape,
    /// Output shape.
    pub output: Shape,
    /// Weight values (0 for layers without parameters).
    pub weights: u32,
    /// Bias values (0 for layers without parameters).
    pub biases: u32,
    /// Multiply-accumulates of one forward pass.
    pub macs: u32,
}

/// Shapes of a whole model.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Shapes {
    /// Per layer; entries past `count` are unused.
    pub layers: [LayerGeometry; MAX_LAYERS],
    /// Number of layers.
    pub count: usize,
    /// Output shape of the last layer.
    pub output: Shape,
}

const EMPTY_GEOMETRY: LayerGeometry = LayerGeometry {
    input: Shape {
        channels: 0,
        len: 0,
    },
    output: Shape {
        channels: 0,
        len: 0,
    },
    weights: 0,
    biases: 0,
    macs: 0,
};

const fn lf(index: usize, fault: LayerFault) -> Error {
    Error::Layer {
        layer: index as u8,
        fault,
    }
}

/// The geometry of one layer applied to `input`.
///
/// # Errors
/// [`Error::Layer`] with the fault found.
pub const fn layer_geometry(
    index: usize,
    input: Shape,
    layer: &LayerDesc,
) -> Result<LayerGeometry, Error> {
    if !layer.out.is_valid() || !layer.grad.is_valid() {
        return Err(lf(index, LayerFault::Format));
    }
    // The parameter formats of a layer without parameters are unused, but the trainer carries
    // their accumulator fraction bits in its checkpoint state, so they must be valid too.
    if !layer.weight.is_valid() || !layer.bias.is_valid() {
        return Err(lf(index, LayerFault::Format));
    }
    if !layer.kind.is_built()
        || !layer.out.word.is_built_for_values()
        || !layer.grad.word.is_built_for_values()
        || (layer.kind.has_params()
            && !(layer.weight.value.word.is_built_for_values()
                && layer.bias.value.word.is_built_for_values()))
        || (layer.kind.has_params()
            && (layer.weight.master.is_some() || layer.bias.master.is_some())
            && !Feature::MasterWeights.is_built())
    {
        return Err(lf(index, LayerFault::NotBuilt));
    }
    if !layer.kind.has_params() && !matches!(layer.mode, TrainMode::Frozen) {
        return Err(lf(index, LayerFault::ModeWithoutParams));
    }
    if input.channels == 0 || input.len == 0 {
        return Err(lf(index, LayerFault::ZeroSize));
    }
    let n_in = input.size();
    match layer.kind {
        LayerKind::Dense { units } => {
            if units == 0 {
                return Err(lf(index, LayerFault::ZeroSize));
            }
            let weights = match n_in.checked_mul(units as u32) {
                Some(w) => w,
                None => return Err(lf(index, LayerFault::TooLarge)),
            };
            if weights > u32::MAX / 8 {
                return Err(lf(index, LayerFault::TooLarge));
            }
            Ok(LayerGeometry {
                input,
                output: Shape::vector(units),
                weights,
                biases: units as u32,
                macs: weights,
            })
        }
        LayerKind::Conv1d {
            filters,
            kernel,
            stride,
        } => {
            if filters == 0 || kernel == 0 || stride == 0 {
                return Err(lf(index, LayerFault::ZeroSize));
            }
            if kernel > input.len {
                return Err(lf(index, LayerFault::WindowTooLong));
            }
            let out_len = (input.len - kernel) / stride + 1;
            // Three u16 factors can overflow u32 but not u64: bound the count before narrowing.
            let weights = filters as u64 * input.channels as u64 * kernel as u64;
            if weights > (u32::MAX / 8) as u64 {
                return Err(lf(index, LayerFault::TooLarge));
            }
            let weights = weights as u32;
            let macs = match (weights as u64 * out_len as u64) < (u32::MAX / 8) as u64 {
                true => weights * out_len as u32,
                false => return Err(lf(index, LayerFault::TooLarge)),
            };
            Ok(LayerGeometry {
                input,
                output: Shape {
                    channels: filters,
                    len: out_len,
                },
                weights,
                biases: filters as u32,
                macs,
            })
        }
        LayerKind::AvgPool1d { window, stride } | LayerKind::MaxPool1d { window, stride } => {
            if window == 0 || stride == 0 {
                return Err(lf(index, LayerFault::ZeroSize));
            }
            if window > input.len {
                return Err(lf(index, LayerFault::WindowTooLong));
            }
            let out_len = (input.len - window) / stride + 1;
            Ok(LayerGeometry {
                input,
                output: Shape {
                    channels: input.channels,
                    len: out_len,
                },
                weights: 0,
                biases: 0,
                macs: 0,
            })
        }
        LayerKind::LeakyRelu { shift } if shift == 0 || shift > 15 => {
            Err(lf(index, LayerFault::Parameter))
        }
        LayerKind::ClippedRelu { ceiling: 0 } => Err(lf(index, LayerFault::Parameter)),
        _ => Ok(LayerGeometry {
            input,
            output: input,
            weights: 0,
            biases: 0,
            macs: 0,
        }),
    }
}

/// Shapes of every layer, checked, and of the output; also checks the loss against the output.
///
/// # Errors
/// [`Error::EmptyModel`], [`Error::TooManyLayers`], or the first [`Error::Layer`] fault.
pub const fn shapes(input: Shape, layers: &[LayerDesc], loss: Loss) -> Result<Shapes, Error> {
    if layers.is_empty() {
        return Err(Error::EmptyModel);
    }
    if layers.len() > MAX_LAYERS {
        return Err(Error::TooManyLayers);
    }
    let mut out = Shapes {
        layers: [EMPTY_GEOMETRY; MAX_LAYERS],
        count: layers.len(),
        output: input,
    };
    let mut shape = input;
    let mut i = 0;
    while i < layers.len() {
        let g = match layer_geometry(i, shape, &layers[i]) {
            Ok(g) => g,
            Err(e) => return Err(e),
        };
        out.layers[i] = g;
        shape = g.output;
        i += 1;
    }
    out.output = shape;
    if !loss.is_built() {
        return Err(Error::Layer {
            layer: (layers.len() - 1) as u8,
            fault: LayerFault::NotBuilt,
        });
    }
    if matches!(loss, Loss::SoftmaxCrossEntropy) && shape.size() < 2 {
        return Err(Error::Layer {
            layer: (layers.len() - 1) as u8,
            fault: LayerFault::LossOutput,
        });
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn q(word: Word, frac: u8) -> QFormat {
        QFormat::new(word, frac).unwrap()
    }

    fn dense(units: u16) -> LayerDesc {
        let p = ParamFormats::plain(q(Word::I16, 12), 20);
        LayerDesc {
            kind: LayerKind::Dense { units },
            mode: TrainMode::Full,
            weight: p,
            bias: p,
            out: q(Word::I16, 10),
            grad: q(Word::I16, 12),
        }
    }

    /// A kind or loss is accepted exactly when its cargo feature is built, and otherwise
    /// rejected as `NotBuilt` at the layer that uses it. `cargo xtask test` runs the `built_`
    /// tests with the default features and again with none.
    #[test]
    fn built_kinds_follow_features() {
        let act = q(Word::I16, 10);
        let input = Shape {
            channels: 2,
            len: 8,
        };
        let conv = LayerDesc {
            kind: LayerKind::Conv1d {
                filters: 2,
                kernel: 3,
                stride: 1,
            },
            ..dense(1)
        };
        let simple = |kind| LayerDesc::simple(kind, act, act);
        let cases = [
            (conv, cfg!(feature = "conv1d")),
            (
                simple(LayerKind::AvgPool1d {
                    window: 2,
                    stride: 2,
                }),
                cfg!(feature = "pool1d"),
            ),
            (
                simple(LayerKind::MaxPool1d {
                    window: 2,
                    stride: 1,
                }),
                cfg!(feature = "pool1d"),
            ),
            (
                simple(LayerKind::Sigmoid),
                cfg!(feature = "table-activations"),
            ),
            (simple(LayerKind::Tanh), cfg!(feature = "table-activations")),
            (simple(LayerKind::Relu), true),
            (simple(LayerKind::LeakyRelu { shift: 3 }), true),
            (simple(LayerKind::HardTanh), true),
            (simple(LayerKind::ClippedRelu { ceiling: 6 }), true),
            (dense(4), true),
        ];
        for (layer, built) in cases {
            assert_eq!(layer.kind.is_built(), built, "{:?}", layer.kind);
            let layers = [layer, dense(1)];
            let r = shapes(input, &layers, Loss::SquaredError);
            if built {
                assert!(r.is_ok(), "{:?}: {r:?}", layer.kind);
            } else {
                assert_eq!(
                    r.err(),
                    Some(Error::Layer {
                        layer: 0,
                        fault: LayerFault::NotBuilt
                    }),
                    "{:?}",
                    layer.kind
                );
            }
        }
        let xent = cfg!(feature = "cross-entropy");
        assert!(Loss::SquaredError.is_built());
        assert_eq!(Loss::SoftmaxCrossEntropy.is_built(), xent);
        let r = shapes(input, &[dense(4), dense(3)], Loss::SoftmaxCrossEntropy);
        if xent {
            assert!(r.is_ok(), "{r:?}");
        } else {
            assert_eq!(
                r.err(),
                Some(Error::Layer {
                    layer: 1,
                    fault: LayerFault::NotBuilt
                })
            );
        }
    }

    /// A value word is accepted exactly when its kernels are built (`word-i8`, `word-i32`;
    /// `i16` always), in every role of a layer: output, gradient, weight and bias values.
    /// Accumulators are 32-bit in every build.
    #[test]
    fn built_words_follow_features() {
        let input = Shape::vector(4);
        for (word, built) in [
            (Word::I8, cfg!(feature = "word-i8")),
            (Word::I16, true),
            (Word::I32, cfg!(feature = "word-i32")),
        ] {
            assert_eq!(word.is_built_for_values(), built, "{word:?}");
            let f = q(word, 6);
            let roles: [fn(&mut LayerDesc, QFormat); 4] = [
                |l, f| l.out = f,
                |l, f| l.grad = f,
                |l, f| l.weight.value = f,
                |l, f| l.bias.value = f,
            ];
            for (k, set) in roles.iter().enumerate() {
                let mut l = dense(3);
                set(&mut l, f);
                let r = shapes(input, &[l, dense(1)], Loss::SquaredError);
                if built {
                    assert!(r.is_ok(), "{word:?} role {k}: {r:?}");
                } else {
                    assert_eq!(
                        r.err(),
                        Some(Error::Layer {
                            layer: 0,
                            fault: LayerFault::NotBuilt
                        }),
                        "{word:?} role {k}"
                    );
                }
            }
        }
    }

    /// Each optional training part is accepted exactly when its feature is on, and refused
    /// with `NotBuilt` naming it otherwise. `cargo xtask test` runs the `built_` tests with
    /// every feature and with none.
    #[test]
    fn built_training_parts_follow_features() {
        let half = QScalar { raw: 1, frac: 1 };
        type Set = fn(&mut TrainDesc);
        let sets: [(Feature, Set); 7] = [
            (Feature::Stochastic, |t| {
                t.rounding.gradients = Rounding::Stochastic
            }),
            (Feature::TowardZero, |t| {
                t.rounding.activations = Rounding::TowardZero
            }),
            (Feature::Momentum, |t| {
                t.momentum = QScalar { raw: 1, frac: 1 }
            }),
            (Feature::DecayClip, |t| {
                t.weight_decay = QScalar { raw: 1, frac: 8 }
            }),
            (Feature::DecayClip, |t| t.clip = QScalar { raw: 1, frac: 0 }),
            (Feature::Dynamic, |t| {
                t.dynamic = Some(DynamicRule {
                    max_rate_ppm: 100,
                    interval: 8,
                })
            }),
            (Feature::Stochastic, |t| {
                t.rounding.updates = Rounding::Stochastic
            }),
        ];
        for (part, set) in sets {
            let built = match part {
                Feature::Stochastic => cfg!(feature = "stochastic"),
                Feature::TowardZero => cfg!(feature = "toward-zero"),
                Feature::Momentum => cfg!(feature = "momentum"),
                Feature::DecayClip => cfg!(feature = "decay-clip"),
                Feature::Dynamic => cfg!(feature = "dynamic"),
                Feature::MasterWeights => cfg!(feature = "master-weights"),
            };
            assert_eq!(part.is_built(), built, "{part}");
            let mut t = TrainDesc::sgd(half);
            set(&mut t);
            let want = if built {
                Ok(())
            } else {
                Err(Error::NotBuilt(part))
            };
            assert_eq!(t.check(), want, "{part}");
        }
        assert_eq!(TrainDesc::sgd(half).check(), Ok(()));

        // A master copy is refused at its layer.
        let built = cfg!(feature = "master-weights");
        assert_eq!(Feature::MasterWeights.is_built(), built);
        let mut l = dense(3);
        l.weight.master = Some(q(Word::I32, 20));
        let r = shapes(Shape::vector(4), &[l, dense(1)], Loss::SquaredError);
        if built {
            assert!(r.is_ok(), "{r:?}");
        } else {
            assert_eq!(
                r.err(),
                Some(Error::Layer {
                    layer: 0,
                    fault: LayerFault::NotBuilt
                })
            );
        }
    }

    #[test]
    fn conv_pool_dense_shapes() {
        let conv = LayerDesc {
            kind: LayerKind::Conv1d {
                filters: 4,
                kernel: 5,
                stride: 2,
            },
            ..dense(1)
        };
        let act = q(Word::I16, 10);
        let layers = [
            conv,
            LayerDesc::simple(LayerKind::Relu, act, act),
            LayerDesc::simple(
                LayerKind::MaxPool1d {
                    window: 2,
                    stride: 2,
                },
                act,
                act,
            ),
            dense(3),
        ];
        let s = shapes(
            Shape {
                channels: 3,
                len: 64,
            },
            &layers,
            Loss::SoftmaxCrossEntropy,
        )
        .unwrap();
        // (64 − 5)/2 + 1 = 30 samples, then (30 − 2)/2 + 1 = 15.
        assert_eq!(
            s.layers[0].output,
            Shape {
                channels: 4,
                len: 30
            }
        );
        assert_eq!(s.layers[0].weights, 4 * 3 * 5);
        assert_eq!(s.layers[0].macs, 4 * 3 * 5 * 30);
        assert_eq!(
            s.layers[2].output,
            Shape {
                channels: 4,
                len: 15
            }
        );
        assert_eq!(s.layers[3].weights, 60 * 3);
        assert_eq!(s.output, Shape::vector(3));
    }

    #[test]
    fn faults_are_named() {
        let act = q(Word::I16, 10);
        let e = shapes(Shape::vector(4), &[], Loss::SquaredError);
        assert_eq!(e.err(), Some(Error::EmptyModel));
        let e = shapes(Shape::vector(4), &[dense(0)], Loss::SquaredError);
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::ZeroSize
            })
        );
        let pool = LayerDesc::simple(
            LayerKind::AvgPool1d {
                window: 5,
                stride: 1,
            },
            act,
            act,
        );
        let e = shapes(
            Shape {
                channels: 1,
                len: 4,
            },
            &[pool],
            Loss::SquaredError,
        );
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::WindowTooLong
            })
        );
        let relu = LayerDesc::simple(LayerKind::Relu, act, act).with_mode(TrainMode::Full);
        let e = shapes(Shape::vector(4), &[relu], Loss::SquaredError);
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::ModeWithoutParams
            })
        );
        let e = shapes(Shape::vector(4), &[dense(1)], Loss::SoftmaxCrossEntropy);
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::LossOutput
            })
        );
        let mut bad = dense(2);
        bad.out.frac = 40;
        let e = shapes(Shape::vector(4), &[bad], Loss::SquaredError);
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::Format
            })
        );
        let e = shapes(
            Shape::vector(u16::MAX),
            &[dense(u16::MAX)],
            Loss::SquaredError,
        );
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::TooLarge
            })
        );
    }

    /// Found by the `blob_body` fuzz target: filters × channels × kernel overflowed `u32`
    /// (a panic with overflow checks, a wrapped and wrong count without).
    #[test]
    fn conv_weight_count_overflowing_u32_is_too_large() {
        let conv = LayerDesc {
            kind: LayerKind::Conv1d {
                filters: 1 << 14,
                kernel: 1 << 9,
                stride: 1,
            },
            ..dense(1)
        };
        // 2^14 · 2^10 · 2^9 = 2^33 weights: wraps to 0 in u32.
        let input = Shape {
            channels: 1 << 10,
            len: 1 << 9,
        };
        assert_eq!(
            layer_geometry(0, input, &conv).err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::TooLarge
            })
        );
        let input = Shape {
            channels: u16::MAX,
            len: u16::MAX,
        };
        let conv = LayerDesc {
            kind: LayerKind::Conv1d {
                filters: u16::MAX,
                kernel: u16::MAX,
                stride: 1,
            },
            ..dense(1)
        };
        assert_eq!(
            layer_geometry(0, input, &conv).err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::TooLarge
            })
        );
    }

    /// Found by the `trainer_restore` fuzz target: an average-pooling layer whose unused
    /// weight accumulator format had 32 fraction bits passed the check; a trainer for the
    /// model then wrote checkpoints whose state carried that 32, and the blob decoder
    /// rejected them (`StateMismatch`): checkpoints it could write but never read back.
    #[test]
    fn unused_formats_of_layers_without_parameters_are_checked() {
        let act = q(Word::I16, 10);
        let mut pool = LayerDesc::simple(
            LayerKind::AvgPool1d {
                window: 1,
                stride: 1,
            },
            act,
            act,
        );
        pool.weight.accum = QFormat::new_unchecked(Word::I32, MAX_FRAC_PLUS_ONE);
        let e = shapes(Shape::vector(4), &[dense(2), pool], Loss::SquaredError);
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 1,
                fault: LayerFault::Format
            })
        );
        let mut relu = LayerDesc::simple(LayerKind::Relu, act, act);
        relu.bias.master = Some(QFormat::new_unchecked(Word::I16, MAX_FRAC_PLUS_ONE));
        let e = shapes(Shape::vector(4), &[relu, dense(2)], Loss::SquaredError);
        assert_eq!(
            e.err(),
            Some(Error::Layer {
                layer: 0,
                fault: LayerFault::Format
            })
        );
    }

    const MAX_FRAC_PLUS_ONE: u8 = crate::num::MAX_FRAC + 1;

    #[test]
    fn training_checks() {
        let lr = QScalar::from_f64(0.01, 16).unwrap();
        let mut t = TrainDesc::sgd(lr);
        assert!(t.check().is_ok());
        t.batch = 0;
        assert_eq!(t.check(), Err(Error::InvalidTraining));
        t.batch = 4;
        t.momentum = QScalar {
            raw: 1 << 15,
            frac: 15,
        };
        assert_eq!(t.check(), Err(Error::InvalidTraining));
        t.momentum = QScalar {
            raw: 29491,
            frac: 15,
        };
        assert!(t.check().is_ok());
        t.lr = QScalar { raw: -1, frac: 16 };
        assert_eq!(t.check(), Err(Error::InvalidTraining));
    }

    #[test]
    fn too_many_layers() {
        let act = q(Word::I16, 10);
        let l = LayerDesc::simple(LayerKind::Relu, act, act);
        let layers = [l; MAX_LAYERS + 1];
        let lr = QScalar::from_f64(0.01, 16).unwrap();
        let e = ModelDesc::new(
            Shape::vector(2),
            act,
            &layers,
            Loss::SquaredError,
            TrainDesc::sgd(lr),
        );
        assert_eq!(e.err(), Some(Error::TooManyLayers));
    }
}
