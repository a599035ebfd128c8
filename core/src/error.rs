//! The core's error type: small, `Copy`, no strings inside.

use core::fmt;

/// What is wrong with one layer of a model description.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum LayerFault {
    /// A size (units, channels, kernel, stride or window) is zero.
    ZeroSize,
    /// The kernel or pooling window is longer than the input.
    WindowTooLong,
    /// The layer's sizes overflow the engine's 32-bit counts.
    TooLarge,
    /// A Q-format of the layer has more than `MAX_FRAC` fraction bits.
    Format,
    /// The loss needs a different output (softmax cross-entropy needs two or more classes).
    LossOutput,
    /// A train mode that needs parameters was set on a layer that has none.
    ModeWithoutParams,
    /// A setting of the layer is out of its range (leaky-ReLU shift 1 to 15, clipped-ReLU
    /// ceiling at least 1).
    Parameter,
    /// A part the layer needs is not built into this core: its cargo feature is off. The part
    /// is the layer kind or the loss (`conv1d`, `pool1d`, `table-activations`,
    /// `cross-entropy`), a value word (`word-i8`, `word-i32`) or a master copy
    /// (`master-weights`).
    NotBuilt,
}

/// Which parameter tensor of a layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ParamTensor {
    /// The weight matrix or kernel.
    Weight,
    /// The bias vector.
    Bias,
}

/// Every way a core operation can fail. No operation of the core panics on any input; it
/// returns one of these instead.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[non_exhaustive]
pub enum Error {
    /// A Q-format or fixed-point scalar is out of range (fraction bits above `MAX_FRAC`, or a
    /// value that does not fit the word at that scale).
    InvalidFormat,
    /// Two formats were required to match and do not.
    FormatMismatch,
    /// A floating-point input was NaN or infinite.
    NotFinite,
    /// The model has no layers.
    EmptyModel,
    /// The model has more layers than `MAX_LAYERS`.
    TooManyLayers,
    /// One layer of the description is invalid.
    Layer {
        /// Index of the layer, from 0.
        layer: u8,
        /// What is wrong.
        fault: LayerFault,
    },
    /// A training hyperparameter is invalid (batch size zero, negative learning rate, ...).
    InvalidTraining,
    /// An input sample has the wrong number of values.
    InputLength {
        /// Values the model takes.
        expected: u32,
        /// Values given.
        found: u32,
    },
    /// A regression target has the wrong number of values.
    TargetLength {
        /// Values the model produces.
        expected: u32,
        /// Values given.
        found: u32,
    },
    /// A class label is not below the number of classes.
    LabelOutOfRange {
        /// The label given.
        label: u32,
        /// The number of classes.
        classes: u32,
    },
    /// The target kind does not match the loss (a class label for squared error, or a vector
    /// for cross-entropy).
    TargetKind,
    /// The working memory given is smaller than the plan needs.
    ArenaTooSmall {
        /// Bytes the plan needs.
        needed: u32,
        /// Bytes given.
        found: u32,
    },
    /// The plan was made for another model description.
    PlanMismatch,
    /// Initial parameters have the wrong word or length.
    Params {
        /// Index of the layer.
        layer: u8,
        /// Which tensor.
        tensor: ParamTensor,
        /// Values expected.
        expected: u32,
        /// Values given (0 also when the word differs).
        found: u32,
    },
    /// A model or checkpoint blob is malformed. See [`crate::blob::BlobError`].
    Blob(crate::blob::BlobError),
    /// The checkpoint store failed. See [`crate::store::StoreError`].
    Store(crate::store::StoreError),
    /// The training setup needs an optional part this core is built without (see
    /// [`crate::features`]).
    NotBuilt(crate::features::Feature),
}

impl fmt::Display for LayerFault {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            LayerFault::ZeroSize => "a size is zero",
            LayerFault::Parameter => "a setting is out of its range (leaky-ReLU shift 1 to 15, clipped-ReLU ceiling at least 1)",
            LayerFault::WindowTooLong => "the kernel or window is longer than the input",
            LayerFault::TooLarge => "sizes overflow 32-bit counts",
            LayerFault::Format => "a Q-format has more than 31 fraction bits",
            LayerFault::LossOutput => "the loss needs a different output size",
            LayerFault::ModeWithoutParams => "a train mode is set on a layer without parameters",
            LayerFault::NotBuilt => "its kind, loss, value word or master copy is not built into this core (its cargo feature is off)",
        })
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match *self {
            Error::InvalidFormat => f.write_str("invalid Q-format or fixed-point scalar"),
            Error::FormatMismatch => f.write_str("formats do not match"),
            Error::NotFinite => f.write_str("value is NaN or infinite"),
            Error::EmptyModel => f.write_str("model has no layers"),
            Error::TooManyLayers => {
                write!(f, "model has more than {} layers", crate::model::MAX_LAYERS)
            }
            Error::Layer { layer, fault } => write!(f, "layer {layer}: {fault}"),
            Error::InvalidTraining => f.write_str("invalid training hyperparameter"),
            Error::InputLength { expected, found } => {
                write!(f, "input has {found} values, model takes {expected}")
            }
            Error::TargetLength { expected, found } => {
                write!(f, "target has {found} values, model produces {expected}")
            }
            Error::LabelOutOfRange { label, classes } => {
                write!(f, "class label {label} is not below the {classes} classes")
            }
            Error::TargetKind => f.write_str("target kind does not match the loss"),
            Error::ArenaTooSmall { needed, found } => {
                write!(
                    f,
                    "working memory is {found} bytes, the plan needs {needed}"
                )
            }
            Error::PlanMismatch => f.write_str("memory plan was made for another model"),
            Error::Params {
                layer,
                tensor,
                expected,
                found,
            } => write!(
                f,
                "layer {layer} {}: expected {expected} values of its word, found {found}",
                match tensor {
                    ParamTensor::Weight => "weights",
                    ParamTensor::Bias => "bias",
                }
            ),
            Error::Blob(e) => write!(f, "blob: {e}"),
            Error::Store(e) => write!(f, "checkpoint store: {e}"),
            Error::NotBuilt(part) => write!(
                f,
                "the training setup needs `{part}`, which this core is built without (turn on its cargo feature)"
            ),
        }
    }
}

#[cfg(feature = "std")]
#[cfg_attr(docsrs, doc(cfg(feature = "std")))]
impl std::error::Error for Error {}
