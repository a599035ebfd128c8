//! hone float model → ONNX file, and a unit's blobs → float model (dequantized). See the
//! [module docs](super).

use std::path::Path;

use hone_core::blob::{BlobKind, TensorBlob, TensorRole};
use hone_core::model::{LayerKind, Loss};
use prost::Message;

use super::pb;
use super::{OnnxError, META_FEATURES, META_HISTORY, META_MODES, META_OUTPUTS};
use crate::model::{FloatLayer, FloatModel, FORMAT_NAME, FORMAT_VERSION};

/// The operator set the export uses.
pub const OPSET: i64 = 17;
/// The IR version of files written with [`OPSET`] (ONNX's versioning table: opset 17 came
/// with IR version 8).
const IR_VERSION: i64 = 8;

/// Element type of the exported tensors.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Precision {
    /// `float` (32 bits): what most tools expect; weights are rounded to `f32`.
    F32,
    /// `double` (64 bits): the float model's weights exactly.
    F64,
}

impl Precision {
    fn data_type(self) -> i32 {
        match self {
            Precision::F32 => pb::tensor_proto::DataType::Float as i32,
            Precision::F64 => pb::tensor_proto::DataType::Double as i32,
        }
    }
}

/// The graph under construction.
struct Builder {
    precision: Precision,
    nodes: Vec<pb::NodeProto>,
    inits: Vec<pb::TensorProto>,
    cur: String,
    flat: bool,
    count: usize,
}

pub(super) fn attr_int(name: &str, v: i64) -> pb::AttributeProto {
    pb::AttributeProto {
        name: Some(name.into()),
        r#type: Some(pb::attribute_proto::AttributeType::Int as i32),
        i: Some(v),
        ..Default::default()
    }
}

pub(super) fn attr_float(name: &str, v: f32) -> pb::AttributeProto {
    pb::AttributeProto {
        name: Some(name.into()),
        r#type: Some(pb::attribute_proto::AttributeType::Float as i32),
        f: Some(v),
        ..Default::default()
    }
}

pub(super) fn attr_ints(name: &str, v: &[i64]) -> pb::AttributeProto {
    pb::AttributeProto {
        name: Some(name.into()),
        r#type: Some(pb::attribute_proto::AttributeType::Ints as i32),
        ints: v.to_vec(),
        ..Default::default()
    }
}

fn value_info(name: &str, elem: i32, dims: &[Option<i64>]) -> pb::ValueInfoProto {
    use pb::tensor_shape_proto::dimension::Value;
    let dim = dims
        .iter()
        .map(|d| pb::tensor_shape_proto::Dimension {
            value: Some(match d {
                Some(v) => Value::DimValue(*v),
                None => Value::DimParam("batch".into()),
            }),
            denotation: None,
        })
        .collect();
    pb::ValueInfoProto {
        name: Some(name.into()),
        r#type: Some(pb::TypeProto {
            value: Some(pb::type_proto::Value::TensorType(pb::type_proto::Tensor {
                elem_type: Some(elem),
                shape: Some(pb::TensorShapeProto { dim }),
            })),
            denotation: None,
        }),
        ..Default::default()
    }
}

impl Builder {
    /// Adds a constant tensor of the model's element type; returns its name.
    fn constant(&mut self, what: &str, dims: &[i64], values: &[f64]) -> String {
        let name = format!("{what}_{}", self.inits.len());
        let mut t = pb::TensorProto {
            name: Some(name.clone()),
            dims: dims.to_vec(),
            data_type: Some(self.precision.data_type()),
            ..Default::default()
        };
        match self.precision {
            Precision::F32 => t.float_data = values.iter().map(|&v| v as f32).collect(),
            Precision::F64 => t.double_data = values.to_vec(),
        }
        self.inits.push(t);
        name
    }

    /// Adds a node taking the current tensor and `more` inputs; it becomes the current one.
    fn node(&mut self, op: &str, more: &[String], attrs: Vec<pb::AttributeProto>) {
        self.count += 1;
        let out = format!("t{}", self.count);
        let mut input = vec![self.cur.clone()];
        input.extend(more.iter().cloned());
        self.nodes.push(pb::NodeProto {
            name: Some(format!("{op}_{}", self.count)),
            op_type: Some(op.into()),
            input,
            output: vec![out.clone()],
            attribute: attrs,
            ..Default::default()
        });
        self.cur = out;
    }

    fn flatten(&mut self) {
        if !self.flat {
            self.node("Flatten", &[], vec![attr_int("axis", 1)]);
            self.flat = true;
        }
    }

    /// Back to `[batch, channels, length]` before a layer that needs it.
    fn unflatten(&mut self, channels: u16, len: u16) {
        if self.flat {
            let name = format!("shape_{}", self.inits.len());
            self.inits.push(pb::TensorProto {
                name: Some(name.clone()),
                dims: vec![3],
                data_type: Some(pb::tensor_proto::DataType::Int64 as i32),
                int64_data: vec![0, i64::from(channels), i64::from(len)],
                ..Default::default()
            });
            self.node("Reshape", &[name], Vec::new());
            self.flat = false;
        }
    }
}

/// Writes a float model as ONNX bytes; `source` names it in errors.
///
/// # Errors
/// [`OnnxError::Invalid`] when the model does not pass its own checks.
pub fn export(m: &FloatModel, precision: Precision, source: &str) -> Result<Vec<u8>, OnnxError> {
    let invalid = |message: String| OnnxError::Invalid {
        path: source.to_string(),
        message,
    };
    m.check().map_err(|e| invalid(e.to_string()))?;
    let shapes = m
        .shapes()
        .map_err(|e| invalid(format!("architecture: {e}")))?;
    let flat_in = m.input.len == 1;
    let dims = |c: u16, l: u16, flat: bool| -> Vec<Option<i64>> {
        if flat {
            vec![None, Some(i64::from(c) * i64::from(l))]
        } else {
            vec![None, Some(i64::from(c)), Some(i64::from(l))]
        }
    };
    let mut b = Builder {
        precision,
        nodes: Vec::new(),
        inits: Vec::new(),
        cur: "input".into(),
        flat: flat_in,
        count: 0,
    };
    if !m.scaling.is_empty() {
        let c = i64::from(m.input.channels);
        let cdims: Vec<i64> = if flat_in { vec![c] } else { vec![c, 1] };
        let offsets: Vec<f64> = m.scaling.iter().map(|s| f64::from(s.offset)).collect();
        let gains: Vec<f64> = m.scaling.iter().map(|s| f64::from(s.gain)).collect();
        let o = b.constant("offset", &cdims, &offsets);
        b.node("Sub", &[o], Vec::new());
        let g = b.constant("gain", &cdims, &gains);
        b.node("Mul", &[g], Vec::new());
    }
    for (k, l) in m.layers.iter().enumerate() {
        let g = shapes.layers[k];
        match l.kind {
            LayerKind::Dense { units } => {
                b.flatten();
                let w = b.constant(
                    "weight",
                    &[i64::from(units), i64::from(g.input.size())],
                    &l.weights,
                );
                let bias = b.constant("bias", &[i64::from(units)], &l.bias);
                b.node("Gemm", &[w, bias], vec![attr_int("transB", 1)]);
            }
            LayerKind::Conv1d {
                filters,
                kernel,
                stride,
            } => {
                b.unflatten(g.input.channels, g.input.len);
                let w = b.constant(
                    "kernel",
                    &[
                        i64::from(filters),
                        i64::from(g.input.channels),
                        i64::from(kernel),
                    ],
                    &l.weights,
                );
                let bias = b.constant("bias", &[i64::from(filters)], &l.bias);
                b.node(
                    "Conv",
                    &[w, bias],
                    vec![
                        attr_ints("kernel_shape", &[i64::from(kernel)]),
                        attr_ints("strides", &[i64::from(stride)]),
                    ],
                );
            }
            LayerKind::AvgPool1d { window, stride } | LayerKind::MaxPool1d { window, stride } => {
                b.unflatten(g.input.channels, g.input.len);
                let op = if matches!(l.kind, LayerKind::AvgPool1d { .. }) {
                    "AveragePool"
                } else {
                    "MaxPool"
                };
                b.node(
                    op,
                    &[],
                    vec![
                        attr_ints("kernel_shape", &[i64::from(window)]),
                        attr_ints("strides", &[i64::from(stride)]),
                    ],
                );
            }
            LayerKind::Relu => b.node("Relu", &[], Vec::new()),
            LayerKind::Tanh => b.node("Tanh", &[], Vec::new()),
            LayerKind::Sigmoid => b.node("Sigmoid", &[], Vec::new()),
            LayerKind::LeakyRelu { shift } => b.node(
                "LeakyRelu",
                &[],
                vec![attr_float("alpha", (-f32::from(shift)).exp2())],
            ),
            LayerKind::HardTanh | LayerKind::ClippedRelu { .. } => {
                let (lo, hi) = match l.kind {
                    LayerKind::ClippedRelu { ceiling } => (0.0, f64::from(ceiling)),
                    _ => (-1.0, 1.0),
                };
                let lo = b.constant("min", &[], &[lo]);
                let hi = b.constant("max", &[], &[hi]);
                b.node("Clip", &[lo, hi], Vec::new());
            }
        }
    }
    if m.loss == Loss::SoftmaxCrossEntropy {
        b.flatten();
        b.node("Softmax", &[], vec![attr_int("axis", -1)]);
    }
    // The last tensor is the graph's output, under a plain name.
    let last = std::mem::replace(&mut b.cur, "output".into());
    if let Some(n) = b
        .nodes
        .iter_mut()
        .rev()
        .find(|n| n.output == [last.clone()])
    {
        n.output = vec!["output".into()];
    }
    let out = shapes.output;
    let elem = precision.data_type();
    let json = |v: Result<String, serde_json::Error>| v.map_err(|e| invalid(e.to_string()));
    let modes: Vec<_> = m.layers.iter().map(|l| l.mode).collect();
    let meta = [
        (META_FEATURES, json(serde_json::to_string(&m.features))?),
        (META_OUTPUTS, json(serde_json::to_string(&m.outputs))?),
        (META_MODES, json(serde_json::to_string(&modes))?),
        (META_HISTORY, json(serde_json::to_string(&m.history))?),
    ];
    let model = pb::ModelProto {
        ir_version: Some(IR_VERSION),
        opset_import: vec![pb::OperatorSetIdProto {
            domain: Some(String::new()),
            version: Some(OPSET),
        }],
        producer_name: Some("hone".into()),
        producer_version: Some(env!("CARGO_PKG_VERSION").into()),
        graph: Some(pb::GraphProto {
            name: Some("hone".into()),
            node: b.nodes,
            initializer: b.inits,
            input: vec![value_info(
                "input",
                elem,
                &dims(m.input.channels, m.input.len, flat_in),
            )],
            output: vec![value_info(
                "output",
                elem,
                &dims(out.channels, out.len, b.flat),
            )],
            ..Default::default()
        }),
        metadata_props: meta
            .into_iter()
            .map(|(k, v)| pb::StringStringEntryProto {
                key: Some(k.into()),
                value: Some(v),
            })
            .collect(),
        ..Default::default()
    };
    Ok(model.encode_to_vec())
}

/// Writes a float model as an ONNX file, atomically.
///
/// # Errors
/// As [`export`], and [`OnnxError::Io`].
pub fn export_file(m: &FloatModel, precision: Precision, out: &Path) -> Result<(), OnnxError> {
    let shown = out.display().to_string();
    let bytes = export(m, precision, &shown)?;
    hone_report::fsutil::write_atomic(out, &bytes).map_err(|source| OnnxError::Io {
        path: shown,
        source,
    })
}

/// The values of a blob tensor in `f64` (exact: every raw value times its step).
fn dequantize(t: &TensorBlob<'_>) -> Vec<f64> {
    crate::inspect::raw_values(t)
        .into_iter()
        .map(|r| t.format.to_f64(r))
        .collect()
}

/// A model blob, optionally with a unit's checkpoint over it, as a float model: every
/// parameter dequantized (the checkpoint's values where it carries them, the model blob's
/// otherwise), the scaling and train modes of the blobs, no training history.
/// `features` and `outputs` name inputs and outputs (blobs carry no names); `None` gives
/// `input_0 …` and `output_0 …`.
///
/// # Errors
/// [`OnnxError::Invalid`] naming the file for a blob that does not decode, a model blob that
/// is a checkpoint (or the reverse), or a checkpoint of another architecture.
pub fn from_blobs(
    model: (&str, &[u8]),
    checkpoint: Option<(&str, &[u8])>,
    features: Option<Vec<String>>,
    outputs: Option<Vec<String>>,
) -> Result<FloatModel, OnnxError> {
    let invalid = |path: &str, message: String| OnnxError::Invalid {
        path: path.to_string(),
        message,
    };
    let base = hone_core::blob::decode(model.1)
        .map_err(|e| invalid(model.0, crate::inspect::explain(&e, model.1)))?;
    if base.kind() != BlobKind::Model {
        return Err(invalid(
            model.0,
            "a checkpoint, not a model blob; give the model blob, and the checkpoint with \
             --checkpoint"
                .into(),
        ));
    }
    let unit = match checkpoint {
        Some((path, bytes)) => {
            let c = hone_core::blob::decode(bytes)
                .map_err(|e| invalid(path, crate::inspect::explain(&e, bytes)))?;
            let (d, b) = (c.desc(), base.desc());
            if c.kind() != BlobKind::Checkpoint {
                return Err(invalid(path, "a model blob, not a checkpoint".into()));
            }
            let same = d.input == b.input
                && d.loss == b.loss
                && d.layers.len() == b.layers.len()
                && d.layers
                    .iter()
                    .zip(&b.layers)
                    .all(|(x, y)| x.kind == y.kind);
            if !same {
                return Err(invalid(
                    path,
                    format!("the checkpoint is of another model than {}", model.0),
                ));
            }
            Some(c)
        }
        None => None,
    };
    let desc = base.desc();
    let pick = |k: usize, role: TensorRole| {
        unit.as_ref()
            .and_then(|u| u.tensor(k, role))
            .or_else(|| base.tensor(k, role))
            .map(|t| dequantize(&t))
            .unwrap_or_default()
    };
    let layers = desc
        .layers
        .iter()
        .enumerate()
        .map(|(k, l)| FloatLayer {
            kind: l.kind,
            mode: l.mode,
            weights: if l.kind.has_params() {
                pick(k, TensorRole::Weight)
            } else {
                Vec::new()
            },
            bias: if l.kind.has_params() {
                pick(k, TensorRole::Bias)
            } else {
                Vec::new()
            },
        })
        .collect();
    let out_size = desc
        .output()
        .map_err(|e| invalid(model.0, e.to_string()))?
        .size();
    let scaling = unit
        .as_ref()
        .map_or(base.scaling(), |u| u.scaling())
        .iter()
        .collect::<std::vec::Vec<_>>();
    let m = FloatModel {
        format: FORMAT_NAME.into(),
        version: FORMAT_VERSION,
        input: desc.input,
        loss: desc.loss,
        layers,
        scaling,
        features: features.unwrap_or_else(|| {
            (0..desc.input.size())
                .map(|i| format!("input_{i}"))
                .collect()
        }),
        outputs: outputs.unwrap_or_else(|| (0..out_size).map(|i| format!("output_{i}")).collect()),
        history: Vec::new(),
    };
    m.check().map_err(|e| invalid(model.0, e.to_string()))?;
    if m.outputs.len() != out_size as usize {
        return Err(invalid(
            model.0,
            format!(
                "{} output names for a model of {out_size} outputs",
                m.outputs.len()
            ),
        ));
    }
    Ok(m)
}
