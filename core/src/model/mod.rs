//! The model description and its derived geometry.

pub mod desc;

pub use desc::{
    layer_geometry, shapes, DynamicRule, LayerDesc, LayerGeometry, LayerKind, Loss, ModelDesc,
    ParamFormats, Shape, Shapes, TrainDesc, TrainMode, MAX_LAYERS,
};
