//! ONNX file → hone float model. See the [module docs](super) for what is accepted.

use std::collections::HashMap;
use std::path::Path;

use hone_core::blob::ChannelScale;
use hone_core::model::{LayerKind, Loss, Shape, TrainMode};
use prost::Message;

use super::pb;
use super::{OnnxError, META_FEATURES, META_HISTORY, META_MODES, META_OUTPUTS};
use crate::model::{EpochRecord, FloatLayer, FloatModel, FORMAT_NAME, FORMAT_VERSION};

mod graph;

use graph::*;

/// Names the ONNX file may not carry, given by the caller. `None` takes them from the file's
/// hone metadata.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct ImportOptions {
    /// Input feature names, in input order (`channels × length` of them).
    pub features: Option<Vec<String>>,
    /// Output names: regression targets or class names, in output order.
    pub outputs: Option<Vec<String>>,
}

/// Reads an ONNX model file into a float model.
///
/// # Errors
/// [`OnnxError`] naming the file, and for an unsupported node its position, name, operator
/// and the reason.
pub fn import_file(path: &Path, opts: &ImportOptions) -> Result<FloatModel, OnnxError> {
    let shown = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|source| OnnxError::Io {
        path: shown.clone(),
        source,
    })?;
    import(&shown, &bytes, opts)
}

/// Converts the bytes of an ONNX model into a float model; `path` names it in errors.
///
/// # Errors
/// As [`import_file`], without the I/O errors.
pub fn import(path: &str, bytes: &[u8], opts: &ImportOptions) -> Result<FloatModel, OnnxError> {
    let invalid = |message: String| OnnxError::Invalid {
        path: path.to_string(),
        message,
    };
    let model = pb::ModelProto::decode(bytes).map_err(|e| OnnxError::Decode {
        path: path.to_string(),
        message: e.to_string(),
    })?;
    let opset = model
        .opset_import
        .iter()
        .find(|o| matches!(o.domain.as_deref(), None | Some("") | Some("ai.onnx")))
        .and_then(|o| o.version)
        .ok_or_else(|| invalid("no operator set version for the standard ONNX domain".into()))?;
    let graph = model
        .graph
        .as_ref()
        .ok_or_else(|| invalid("the model has no graph".into()))?;
    if !graph.sparse_initializer.is_empty() {
        return Err(invalid(
            "sparse initializers are not supported; store the tensors dense".into(),
        ));
    }
    let mut consts: HashMap<String, Const> = HashMap::new();
    for t in &graph.initializer {
        let c = read_const(t).map_err(invalid)?;
        consts.insert(t.name.clone().unwrap_or_default(), c);
    }
    let inputs: Vec<&pb::ValueInfoProto> = graph
        .input
        .iter()
        .filter(|i| !consts.contains_key(i.name.as_deref().unwrap_or("")))
        .collect();
    let [input] = inputs[..] else {
        return Err(invalid(format!(
            "{} graph inputs besides the initializers; hone reads a model of one input tensor",
            inputs.len()
        )));
    };
    let in_name = input.name.clone().unwrap_or_default();
    let tensor_type = match input.r#type.as_ref().and_then(|t| t.value.as_ref()) {
        Some(pb::type_proto::Value::TensorType(t)) => t,
        _ => return Err(invalid(format!("input {in_name:?} is not a tensor"))),
    };
    let elem = tensor_type.elem_type.unwrap_or(0);
    if elem != FLOAT && elem != DOUBLE {
        return Err(invalid(format!(
            "input {in_name:?} has element type {}; hone imports float and double models",
            type_name(elem)
        )));
    }
    let dims: Vec<Option<i64>> = tensor_type
        .shape
        .as_ref()
        .map(|s| {
            s.dim
                .iter()
                .map(|d| match d.value {
                    Some(pb::tensor_shape_proto::dimension::Value::DimValue(v)) => Some(v),
                    _ => None,
                })
                .collect()
        })
        .unwrap_or_default();
    let shape_err = || {
        invalid(format!(
            "input {in_name:?} has shape {dims:?}; hone reads [batch, features] or \
             [batch, channels, length] with known sizes other than the batch"
        ))
    };
    let sizes: Vec<u16> = dims
        .iter()
        .skip(1)
        .map(|d| d.and_then(u16_dim))
        .collect::<Option<_>>()
        .ok_or_else(shape_err)?;
    let mut view = match sizes[..] {
        [f] => View {
            shape: Shape::vector(f),
            flat: true,
        },
        [c, l] => View {
            shape: Shape {
                channels: c,
                len: l,
            },
            flat: false,
        },
        _ => return Err(shape_err()),
    };
    let batch_one = dims.first() == Some(&Some(1));
    let input_shape = view.shape;

    let mut affine = Affine {
        offset: vec![0.0; view.shape.channels as usize],
        gain: vec![1.0; view.shape.channels as usize],
        used: false,
    };
    let mut layers: Vec<FloatLayer> = Vec::new();
    let mut loss = Loss::SquaredError;
    let mut ended = false;
    let mut cur = in_name.clone();
    let mut skip_next = false;
    for (index, n) in graph.node.iter().enumerate() {
        if skip_next {
            skip_next = false;
            continue;
        }
        let node = Node { n, index, path };
        let op = node.op();
        if !matches!(n.domain.as_deref(), None | Some("") | Some("ai.onnx")) {
            return Err(node.err(format!(
                "operator domain {:?} is not the standard ONNX domain",
                n.domain.as_deref().unwrap_or("")
            )));
        }
        if op == "Constant" {
            node.only_attributes(&["value"])?;
            let t = node
                .attr("value")
                .and_then(|a| a.t.as_ref())
                .ok_or_else(|| node.err("hone reads Constant nodes with a `value` tensor"))?;
            let c = read_const(t).map_err(|e| node.err(e))?;
            let [out] = &n.output[..] else {
                return Err(node.err("a Constant has one output"));
            };
            consts.insert(out.clone(), c);
            continue;
        }
        if ended {
            return Err(node.err("a node after the final Softmax; Softmax must be the last node"));
        }
        if n.input.first() != Some(&cur) {
            return Err(node.err(format!(
                "the graph must be one chain: this node's first input is {:?}, the chain from \
                 the graph input ends at {cur:?}",
                n.input.first().map(String::as_str).unwrap_or("")
            )));
        }
        let out = match &n.output[..] {
            [o] => o.clone(),
            [o, rest @ ..] if rest.iter().all(String::is_empty) => o.clone(),
            _ => return Err(node.err("hone reads nodes with a single output")),
        };
        let need_rank3 = |what: &str| -> Result<(), OnnxError> {
            if view.flat {
                Err(node.err(format!(
                    "{what} needs a [batch, channels, length] input; the input here is {}",
                    view.describe()
                )))
            } else {
                Ok(())
            }
        };
        let need_flat = |what: &str| -> Result<(), OnnxError> {
            if view.flat {
                Ok(())
            } else {
                Err(node.err(format!(
                    "{what} needs a [batch, values] input; the input here is {}: add a Flatten \
                     before it",
                    view.describe()
                )))
            }
        };
        let simple = |kind: LayerKind| FloatLayer {
            kind,
            mode: TrainMode::Frozen,
            weights: Vec::new(),
            bias: Vec::new(),
        };
        match op {
            "Sub" | "Add" | "Mul" | "Div" | "BatchNormalization" if layers.is_empty() => {
                let channels = view.shape.channels as usize;
                if op == "BatchNormalization" {
                    node.only_attributes(&["epsilon", "momentum", "training_mode"])?;
                    if node.int("training_mode", 0) != 0 {
                        return Err(node.err("training_mode 1: hone imports inference graphs"));
                    }
                    let eps = f64::from(node.float("epsilon").unwrap_or(1e-5));
                    let mut v = Vec::new();
                    for (i, what) in [(1, "scale"), (2, "bias"), (3, "mean"), (4, "variance")] {
                        let c = node.required_const(i, what, &consts)?;
                        v.push(
                            per_unit(c, channels)
                                .filter(|_| c.dims.len() <= 1)
                                .ok_or_else(|| {
                                    node.err(format!(
                                        "the {what} has dimensions {:?}, expected [{channels}]",
                                        c.dims
                                    ))
                                })?,
                        );
                    }
                    let pairs = affine.offset.iter_mut().zip(affine.gain.iter_mut());
                    for (ch, (o, g)) in pairs.enumerate() {
                        let s = v[0][ch] / (v[3][ch] + eps).sqrt();
                        let b = v[1][ch] - v[2][ch] * s;
                        *g *= s;
                        *o -= b / *g;
                    }
                } else {
                    node.only_attributes(&[])?;
                    node.max_inputs(2)?;
                    let c = node.required_const(1, "constant", &consts)?;
                    let v = per_channel(c, view).ok_or_else(|| {
                        node.err(format!(
                            "the constant has dimensions {:?}; a standardization of the inputs \
                             {} takes one value, or one per channel ({channels})",
                            c.dims,
                            view.describe()
                        ))
                    })?;
                    let pairs = affine.offset.iter_mut().zip(affine.gain.iter_mut());
                    for ((o, g), c) in pairs.zip(&v) {
                        match op {
                            "Sub" => *o += c / *g,
                            "Add" => *o -= c / *g,
                            "Mul" => *g *= c,
                            _ => *g /= c,
                        }
                    }
                }
                if let Some(ch) = (0..channels)
                    .find(|&ch| !(affine.gain[ch].is_finite() && affine.gain[ch] != 0.0))
                {
                    return Err(node.err(format!(
                        "channel {ch} gets the gain {}: a standardization needs a finite gain \
                         other than 0",
                        affine.gain[ch]
                    )));
                }
                affine.used = true;
            }
            "Sub" | "Add" | "Mul" | "Div" | "BatchNormalization" => {
                return Err(node.err(
                    "hone folds only a standardization of the inputs, before the first layer, \
                     into its input scaling; elsewhere this operator has no hone layer",
                ));
            }
            "Gemm" | "MatMul" => {
                need_flat(op)?;
                let n_in = view.shape.size() as usize;
                let (w, trans_b, mut bias) = if op == "Gemm" {
                    node.only_attributes(&["alpha", "beta", "transA", "transB"])?;
                    node.max_inputs(3)?;
                    for a in ["alpha", "beta"] {
                        if node.float(a).unwrap_or(1.0) != 1.0 {
                            return Err(node.err(format!(
                                "{a} = {}: hone reads Gemm with alpha = beta = 1; fold the \
                                 factor into the weights",
                                node.float(a).unwrap_or(1.0)
                            )));
                        }
                    }
                    if node.int("transA", 0) != 0 {
                        return Err(node.err("transA = 1: the data must be [batch, inputs]"));
                    }
                    let b = node.const_input(2, &consts)?;
                    (
                        node.required_const(1, "weight matrix", &consts)?,
                        node.int("transB", 0) != 0,
                        b.map(|b| (b, index)),
                    )
                } else {
                    node.only_attributes(&[])?;
                    (
                        node.required_const(1, "weight matrix", &consts)?,
                        false,
                        None,
                    )
                };
                let units = match (&w.dims[..], trans_b) {
                    ([u, i], true) | ([i, u], false) if *i == n_in as i64 => u16_dim(*u),
                    _ => None,
                }
                .ok_or_else(|| {
                    node.err(format!(
                        "the weight matrix has dimensions {:?}; for {n_in} inputs hone expects \
                         [{n_in}, units]{}",
                        w.dims,
                        if op == "Gemm" {
                            format!(", or [units, {n_in}] with transB = 1")
                        } else {
                            String::new()
                        }
                    ))
                })?;
                let u = units as usize;
                let weights: Vec<f64> = if trans_b {
                    w.values.clone()
                } else {
                    (0..u)
                        .flat_map(|j| (0..n_in).map(move |i| (i, j)))
                        .map(|(i, j)| w.values[i * u + j])
                        .collect()
                };
                let mut out_name = out.clone();
                if op == "MatMul" {
                    if let Some(next) = graph.node.get(index + 1) {
                        let is_add = next.op_type.as_deref() == Some("Add")
                            && next.input.len() == 2
                            && next.input.contains(&out);
                        if is_add {
                            let nn = Node {
                                n: next,
                                index: index + 1,
                                path,
                            };
                            nn.only_attributes(&[])?;
                            let other = if next.input[0] == out { 1 } else { 0 };
                            let b = nn.required_const(other, "bias", &consts)?;
                            bias = Some((b, index + 1));
                            out_name = match &next.output[..] {
                                [o] => o.clone(),
                                _ => return Err(nn.err("hone reads nodes with a single output")),
                            };
                            skip_next = true;
                        }
                    }
                }
                let bias = match bias {
                    None => vec![0.0; u],
                    Some((b, at)) => per_unit(b, u).ok_or_else(|| {
                        let bn = Node {
                            n: &graph.node[at],
                            index: at,
                            path,
                        };
                        bn.err(format!(
                            "the bias has dimensions {:?}, expected [{u}] or [1, {u}]",
                            b.dims
                        ))
                    })?,
                };
                layers.push(FloatLayer {
                    kind: LayerKind::Dense { units },
                    mode: TrainMode::Full,
                    weights,
                    bias,
                });
                view = View {
                    shape: Shape::vector(units),
                    flat: true,
                };
                cur = out_name;
                continue;
            }
            "Conv" => {
                need_rank3("Conv")?;
                node.only_attributes(&[
                    "auto_pad",
                    "dilations",
                    "group",
                    "kernel_shape",
                    "pads",
                    "strides",
                ])?;
                node.max_inputs(3)?;
                node.no_padding()?;
                if node.int("group", 1) != 1 {
                    return Err(node.err(format!(
                        "group = {}: hone's convolution connects every input channel",
                        node.int("group", 1)
                    )));
                }
                let w = node.required_const(1, "kernel", &consts)?;
                let c = view.shape.channels as i64;
                let (filters, kernel) = match w.dims[..] {
                    [f, ch, k] if ch == c => (u16_dim(f), u16_dim(k)),
                    _ => (None, None),
                };
                let (Some(filters), Some(kernel)) = (filters, kernel) else {
                    return Err(node.err(format!(
                        "the kernel has dimensions {:?}; hone expects [filters, {c}, kernel]",
                        w.dims
                    )));
                };
                if node.one_axis("kernel_shape", Some(kernel))? != kernel {
                    return Err(node.err("kernel_shape differs from the kernel tensor"));
                }
                let stride = node.one_axis("strides", Some(1))?;
                if kernel > view.shape.len {
                    return Err(node.err(format!(
                        "kernel {kernel} is longer than the input's {} samples",
                        view.shape.len
                    )));
                }
                let bias = match node.const_input(2, &consts)? {
                    None => vec![0.0; filters as usize],
                    Some(b) => per_unit(b, filters as usize)
                        .filter(|_| b.dims.len() == 1)
                        .ok_or_else(|| {
                            node.err(format!(
                                "the bias has dimensions {:?}, expected [{filters}]",
                                b.dims
                            ))
                        })?,
                };
                layers.push(FloatLayer {
                    kind: LayerKind::Conv1d {
                        filters,
                        kernel,
                        stride,
                    },
                    mode: TrainMode::Full,
                    weights: w.values.clone(),
                    bias,
                });
                view.shape = Shape {
                    channels: filters,
                    len: (view.shape.len - kernel) / stride + 1,
                };
            }
            "AveragePool" | "MaxPool" => {
                need_rank3(op)?;
                let mut known = vec!["auto_pad", "ceil_mode", "dilations", "kernel_shape", "pads"];
                known.push("strides");
                known.push(if op == "MaxPool" {
                    "storage_order"
                } else {
                    "count_include_pad"
                });
                node.only_attributes(&known)?;
                node.max_inputs(1)?;
                node.no_padding()?;
                if node.int("ceil_mode", 0) != 0 {
                    return Err(node.err("ceil_mode = 1: hone drops a last partial window"));
                }
                let window = node.one_axis("kernel_shape", None)?;
                let stride = node.one_axis("strides", Some(1))?;
                if window > view.shape.len {
                    return Err(node.err(format!(
                        "window {window} is longer than the input's {} samples",
                        view.shape.len
                    )));
                }
                layers.push(simple(if op == "MaxPool" {
                    LayerKind::MaxPool1d { window, stride }
                } else {
                    LayerKind::AvgPool1d { window, stride }
                }));
                view.shape.len = (view.shape.len - window) / stride + 1;
            }
            "GlobalAveragePool" | "GlobalMaxPool" => {
                need_rank3(op)?;
                node.only_attributes(&[])?;
                let (window, stride) = (view.shape.len, view.shape.len);
                layers.push(simple(if op == "GlobalMaxPool" {
                    LayerKind::MaxPool1d { window, stride }
                } else {
                    LayerKind::AvgPool1d { window, stride }
                }));
                view.shape.len = 1;
            }
            "Relu" | "Tanh" | "Sigmoid" => {
                node.only_attributes(&[])?;
                layers.push(simple(match op {
                    "Relu" => LayerKind::Relu,
                    "Tanh" => LayerKind::Tanh,
                    _ => LayerKind::Sigmoid,
                }));
            }
            "LeakyRelu" => {
                node.only_attributes(&["alpha"])?;
                // The ONNX default slope, from the operator's definition.
                let alpha = f64::from(node.float("alpha").unwrap_or(0.01));
                let shift = (1..=15u8).find(|&s| alpha == (-(s as f64)).exp2());
                let Some(shift) = shift else {
                    return Err(node.err(format!(
                        "alpha = {alpha}: hone's leaky slope is a power of two, 2^-1 to 2^-15 \
                         (0.5, 0.25, 0.125, …)"
                    )));
                };
                layers.push(simple(LayerKind::LeakyRelu { shift }));
            }
            "Clip" => {
                let (lo, hi) = if opset >= 11 {
                    node.only_attributes(&[])?;
                    node.max_inputs(3)?;
                    let one = |i| -> Result<Option<f64>, OnnxError> {
                        match node.const_input(i, &consts)? {
                            None => Ok(None),
                            Some(c) if c.values.len() == 1 => Ok(Some(c.values[0])),
                            Some(c) => Err(node.err(format!(
                                "bound {i} has dimensions {:?}, expected one value",
                                c.dims
                            ))),
                        }
                    };
                    (one(1)?, one(2)?)
                } else {
                    node.only_attributes(&["min", "max"])?;
                    (
                        node.float("min").map(f64::from),
                        node.float("max").map(f64::from),
                    )
                };
                let kind = match (lo, hi) {
                    (Some(lo), Some(hi)) if lo == -1.0 && hi == 1.0 => LayerKind::HardTanh,
                    (Some(lo), Some(hi))
                        if lo == 0.0 && (1.0..=255.0).contains(&hi) && hi.fract() == 0.0 =>
                    {
                        LayerKind::ClippedRelu { ceiling: hi as u8 }
                    }
                    _ => {
                        return Err(node.err(format!(
                            "bounds {lo:?} … {hi:?}: hone clips to [-1, 1] (hard tanh) or to \
                             [0, c] with c a whole number 1 to 255 (clipped ReLU)"
                        )))
                    }
                };
                layers.push(simple(kind));
            }
            "Identity" => node.only_attributes(&[])?,
            "Flatten" => {
                node.only_attributes(&["axis"])?;
                let axis = node.int("axis", 1);
                if axis != 1 && !(view.flat && axis == -1) {
                    return Err(node.err(format!(
                        "axis = {axis}: only Flatten at axis 1 (keeping the batch) is a view \
                         of hone's layout"
                    )));
                }
                view.flat = true;
            }
            "Reshape" => {
                node.only_attributes(&["allowzero"])?;
                node.max_inputs(2)?;
                let allow_zero = node.int("allowzero", 0) != 0;
                let target = node.required_const(1, "shape", &consts)?;
                let t: Vec<i64> = target.values.iter().map(|&v| v as i64).collect();
                let size = i64::from(view.shape.size());
                let first_ok = match t.first() {
                    Some(0) => !allow_zero,
                    Some(-1) => true,
                    Some(1) => batch_one,
                    _ => false,
                };
                let as_is = [i64::from(view.shape.channels), i64::from(view.shape.len)];
                let in_dims: Vec<i64> = if view.flat {
                    vec![size]
                } else {
                    as_is.to_vec()
                };
                // Zeros copy the input's size at that position (unless allowzero); one -1
                // takes what is left, unless the batch is already the unknown.
                let mut rest: Vec<i64> = t.get(1..).unwrap_or(&[]).to_vec();
                for (i, v) in rest.iter_mut().enumerate() {
                    if *v == 0 && !allow_zero {
                        *v = in_dims.get(i).copied().unwrap_or(0);
                    }
                }
                let known: i64 = rest.iter().filter(|&&v| v > 0).product();
                let unknowns = rest.iter().filter(|&&v| v == -1).count();
                if unknowns == 1 && t.first() != Some(&-1) && known > 0 {
                    for v in rest.iter_mut().filter(|v| **v == -1) {
                        *v = size / known;
                    }
                }
                let new_flat = match rest[..] {
                    [v] if v == size => Some(true),
                    [c, l] if [c, l] == as_is => Some(false),
                    _ => None,
                };
                let Some(new_flat) = new_flat.filter(|_| first_ok) else {
                    return Err(node.err(format!(
                        "shape {t:?} on an input {}: hone reads a Reshape only as a view that \
                         keeps the batch and the order of values, to [batch, {size}] or \
                         [batch, {}, {}]",
                        view.describe(),
                        as_is[0],
                        as_is[1]
                    )));
                };
                view.flat = new_flat;
            }
            "Softmax" => {
                node.only_attributes(&["axis"])?;
                let axis = node.int("axis", if opset >= 13 { -1 } else { 1 });
                if !view.flat || !(axis == 1 || axis == -1) {
                    return Err(node.err(format!(
                        "softmax over axis {axis} of {}: hone's softmax covers all outputs of a \
                         [batch, outputs] tensor (flatten first)",
                        view.describe()
                    )));
                }
                loss = Loss::SoftmaxCrossEntropy;
                ended = true;
            }
            _ => {
                return Err(node.err(
                    "operator not supported by hone (it imports Gemm, MatMul with Add, Conv, \
                     AveragePool, MaxPool, GlobalAveragePool, GlobalMaxPool, Relu, LeakyRelu, \
                     Tanh, Sigmoid, Clip, Flatten, Reshape, Identity, a final Softmax, and a \
                     leading standardization)",
                ))
            }
        }
        cur = out;
    }
    let outs: Vec<&str> = graph
        .output
        .iter()
        .map(|o| o.name.as_deref().unwrap_or(""))
        .collect();
    if outs != [cur.as_str()] {
        return Err(invalid(format!(
            "the graph's outputs are {outs:?}; hone reads one output, the end of the chain \
             ({cur:?})"
        )));
    }
    if layers.is_empty() {
        return Err(invalid("the graph has no layer".into()));
    }
    let meta = |key: &str| {
        model
            .metadata_props
            .iter()
            .find(|p| p.key.as_deref() == Some(key))
            .and_then(|p| p.value.clone())
    };
    let names = |key: &str, given: &Option<Vec<String>>, what: &str, option: &str| {
        if let Some(g) = given {
            return Ok(g.clone());
        }
        match meta(key) {
            Some(text) => serde_json::from_str::<Vec<String>>(&text)
                .map_err(|e| invalid(format!("metadata `{key}`: {e}"))),
            None => Err(invalid(format!(
                "the file does not name its {what} (no `{key}` metadata); give them with {option}"
            ))),
        }
    };
    let features = names(
        META_FEATURES,
        &opts.features,
        "input features",
        "--features",
    )?;
    let outputs = names(META_OUTPUTS, &opts.outputs, "outputs", "--outputs")?;
    if let Some(text) = meta(META_MODES) {
        let modes: Vec<TrainMode> = serde_json::from_str(&text)
            .map_err(|e| invalid(format!("metadata `{META_MODES}`: {e}")))?;
        if modes.len() != layers.len() {
            return Err(invalid(format!(
                "metadata `{META_MODES}` has {} entries for {} layers",
                modes.len(),
                layers.len()
            )));
        }
        for (l, m) in layers.iter_mut().zip(modes) {
            l.mode = m;
        }
    }
    let history: Vec<EpochRecord> = match meta(META_HISTORY) {
        Some(text) => serde_json::from_str(&text)
            .map_err(|e| invalid(format!("metadata `{META_HISTORY}`: {e}")))?,
        None => Vec::new(),
    };
    let scaling = if affine.used {
        affine
            .offset
            .iter()
            .zip(&affine.gain)
            .map(|(&o, &g)| ChannelScale {
                offset: o as f32,
                gain: g as f32,
            })
            .collect()
    } else {
        Vec::new()
    };
    let m = FloatModel {
        format: FORMAT_NAME.into(),
        version: FORMAT_VERSION,
        input: input_shape,
        loss,
        layers,
        scaling,
        features,
        outputs,
        history,
    };
    m.check()
        .map_err(|e| invalid(format!("the imported model: {e}")))?;
    if m.outputs.len() != view.shape.size() as usize {
        return Err(invalid(format!(
            "{} output names for a model of {} outputs",
            m.outputs.len(),
            view.shape.size()
        )));
    }
    Ok(m)
}
