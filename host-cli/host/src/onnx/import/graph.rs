//! Reading the graph's parts: constant tensors, the shape of the value a node reads, and the
//! nodes with their attributes.

use super::*;

/// A constant tensor, its values widened to `f64` (integers exactly, up to 2^53).
#[derive(Clone, Debug)]
pub(super) struct Const {
    pub(super) dims: Vec<i64>,
    pub(super) values: Vec<f64>,
}

pub(super) const FLOAT: i32 = pb::tensor_proto::DataType::Float as i32;
pub(super) const DOUBLE: i32 = pb::tensor_proto::DataType::Double as i32;
pub(super) const INT64: i32 = pb::tensor_proto::DataType::Int64 as i32;
pub(super) const INT32: i32 = pb::tensor_proto::DataType::Int32 as i32;

pub(super) fn le_chunks<const N: usize>(raw: &[u8]) -> impl Iterator<Item = [u8; N]> + '_ {
    raw.chunks_exact(N)
        .map(|c| <[u8; N]>::try_from(c).unwrap_or([0; N]))
}

pub(super) fn read_const(t: &pb::TensorProto) -> Result<Const, String> {
    let name = t.name.as_deref().unwrap_or("");
    if t.data_location == Some(pb::tensor_proto::DataLocation::External as i32)
        || !t.external_data.is_empty()
    {
        return Err(format!(
            "tensor {name:?} is stored in an external file; save the model with its data inside"
        ));
    }
    let dt = t.data_type.unwrap_or(0);
    let count = t.dims.iter().try_fold(1usize, |n, &d| {
        usize::try_from(d).ok().and_then(|d| n.checked_mul(d))
    });
    let Some(count) = count else {
        return Err(format!(
            "tensor {name:?} has a negative or too large dimension"
        ));
    };
    let values: Vec<f64> = match (dt, &t.raw_data) {
        (FLOAT, Some(raw)) => le_chunks::<4>(raw)
            .map(|b| f64::from(f32::from_le_bytes(b)))
            .collect(),
        (DOUBLE, Some(raw)) => le_chunks::<8>(raw).map(f64::from_le_bytes).collect(),
        (INT64, Some(raw)) => le_chunks::<8>(raw)
            .map(|b| i64::from_le_bytes(b) as f64)
            .collect(),
        (INT32, Some(raw)) => le_chunks::<4>(raw)
            .map(|b| f64::from(i32::from_le_bytes(b)))
            .collect(),
        (FLOAT, None) => t.float_data.iter().map(|&v| f64::from(v)).collect(),
        (DOUBLE, None) => t.double_data.clone(),
        (INT64, None) => t.int64_data.iter().map(|&v| v as f64).collect(),
        (INT32, None) => t.int32_data.iter().map(|&v| f64::from(v)).collect(),
        _ => {
            return Err(format!(
                "tensor {name:?} has element type {}; hone reads float, double, int32 and int64",
                type_name(dt)
            ))
        }
    };
    if values.len() != count {
        return Err(format!(
            "tensor {name:?} holds {} values for dimensions {:?}",
            values.len(),
            t.dims
        ));
    }
    Ok(Const {
        dims: t.dims.clone(),
        values,
    })
}

pub(super) fn type_name(dt: i32) -> String {
    pb::tensor_proto::DataType::try_from(dt)
        .map(|d| d.as_str_name().to_ascii_lowercase())
        .unwrap_or_else(|_| format!("#{dt}"))
}

/// The view of the tensor at the end of the chain: hone's shape, and whether ONNX sees it as
/// `[batch, values]` (flat) or `[batch, channels, length]`.
#[derive(Clone, Copy, Debug)]
pub(super) struct View {
    pub(super) shape: Shape,
    pub(super) flat: bool,
}

impl View {
    pub(super) fn describe(self) -> String {
        if self.flat {
            format!("[batch, {}]", self.shape.size())
        } else {
            format!("[batch, {}, {}]", self.shape.channels, self.shape.len)
        }
    }
}

/// The per-channel affine map the leading standardization folds into: `(x − o)·g`.
pub(super) struct Affine {
    pub(super) offset: Vec<f64>,
    pub(super) gain: Vec<f64>,
    pub(super) used: bool,
}

/// One node, with helpers that turn its problems into errors naming it.
pub(super) struct Node<'a> {
    pub(super) n: &'a pb::NodeProto,
    pub(super) index: usize,
    pub(super) path: &'a str,
}

impl Node<'_> {
    pub(super) fn op(&self) -> &str {
        self.n.op_type.as_deref().unwrap_or("")
    }

    pub(super) fn err(&self, reason: impl Into<String>) -> OnnxError {
        OnnxError::Node {
            path: self.path.to_string(),
            index: self.index,
            name: self.n.name.clone().unwrap_or_default(),
            op: self.op().to_string(),
            reason: reason.into(),
        }
    }

    /// Refuses any attribute not in `known`.
    pub(super) fn only_attributes(&self, known: &[&str]) -> Result<(), OnnxError> {
        for a in &self.n.attribute {
            let name = a.name.as_deref().unwrap_or("");
            if !known.contains(&name) {
                return Err(self.err(format!(
                    "attribute `{name}` is not supported{}",
                    if known.is_empty() {
                        String::new()
                    } else {
                        format!(" (hone reads {})", known.join(", "))
                    }
                )));
            }
        }
        Ok(())
    }

    pub(super) fn attr(&self, name: &str) -> Option<&pb::AttributeProto> {
        self.n
            .attribute
            .iter()
            .find(|a| a.name.as_deref() == Some(name))
    }

    pub(super) fn int(&self, name: &str, default: i64) -> i64 {
        self.attr(name).and_then(|a| a.i).unwrap_or(default)
    }

    pub(super) fn float(&self, name: &str) -> Option<f32> {
        self.attr(name).and_then(|a| a.f)
    }

    pub(super) fn ints(&self, name: &str) -> Option<&[i64]> {
        self.attr(name).map(|a| &a.ints[..])
    }

    pub(super) fn string(&self, name: &str) -> Option<String> {
        self.attr(name)
            .and_then(|a| a.s.as_ref())
            .map(|s| String::from_utf8_lossy(s).into_owned())
    }

    /// Input `i` as a constant (`None` when absent or given as an empty name).
    pub(super) fn const_input<'c>(
        &self,
        i: usize,
        consts: &'c HashMap<String, Const>,
    ) -> Result<Option<&'c Const>, OnnxError> {
        match self.n.input.get(i).map(String::as_str) {
            None | Some("") => Ok(None),
            Some(name) => consts.get(name).map(Some).ok_or_else(|| {
                self.err(format!(
                    "input {i} ({name:?}) must be a constant (an initializer or a Constant node)"
                ))
            }),
        }
    }

    pub(super) fn required_const<'c>(
        &self,
        i: usize,
        what: &str,
        consts: &'c HashMap<String, Const>,
    ) -> Result<&'c Const, OnnxError> {
        self.const_input(i, consts)?
            .ok_or_else(|| self.err(format!("the {what} (input {i}) is missing")))
    }

    pub(super) fn max_inputs(&self, n: usize) -> Result<(), OnnxError> {
        if self.n.input.len() > n {
            return Err(self.err(format!(
                "{} inputs, hone reads at most {n}",
                self.n.input.len()
            )));
        }
        Ok(())
    }

    /// A one-axis window attribute (`kernel_shape`, `strides`): one positive value that fits
    /// a `u16`, or `default` when absent.
    pub(super) fn one_axis(&self, name: &str, default: Option<u16>) -> Result<u16, OnnxError> {
        match self.ints(name) {
            None => default.ok_or_else(|| self.err(format!("attribute `{name}` is missing"))),
            Some([v]) if *v >= 1 && *v <= i64::from(u16::MAX) => Ok(*v as u16),
            Some(v) => Err(self.err(format!(
                "`{name}` is {v:?}; hone's layers have one spatial axis with a value of 1 to {}",
                u16::MAX
            ))),
        }
    }

    /// No padding, no dilation, no automatic padding other than none or "VALID".
    pub(super) fn no_padding(&self) -> Result<(), OnnxError> {
        if let Some(p) = self.string("auto_pad") {
            if p != "NOTSET" && p != "VALID" {
                return Err(self.err(format!(
                    "auto_pad {p:?}: hone's windows are unpadded (\"valid\")"
                )));
            }
        }
        if let Some(p) = self.ints("pads") {
            if p.iter().any(|&v| v != 0) {
                return Err(self.err(format!(
                    "pads {p:?}: hone's windows are unpadded; pad the data instead"
                )));
            }
        }
        if let Some(d) = self.ints("dilations") {
            if d.iter().any(|&v| v != 1) {
                return Err(self.err(format!("dilations {d:?}: hone has no dilated windows")));
            }
        }
        Ok(())
    }
}

/// The length of a constant that is one value per `n` (or a single value, broadcast),
/// with dimensions `[n]` or `[1, n]` (or all ones).
pub(super) fn per_unit(c: &Const, n: usize) -> Option<Vec<f64>> {
    let ones_then = c.dims.iter().rev().skip(1).all(|&d| d == 1);
    if c.values.len() == 1 {
        Some(vec![c.values[0]; n])
    } else if c.values.len() == n && ones_then && c.dims.last() == Some(&(n as i64)) {
        Some(c.values.clone())
    } else {
        None
    }
}

/// A constant broadcast against the input `[batch, channels]` or `[batch, channels, length]`
/// as one value per channel (or one value for all).
pub(super) fn per_channel(c: &Const, view: View) -> Option<Vec<f64>> {
    let channels = view.shape.channels as usize;
    let rank = if view.flat { 2 } else { 3 };
    if c.dims.len() > rank {
        return None;
    }
    if c.values.len() == 1 {
        return Some(vec![c.values[0]; channels]);
    }
    let mut d = vec![1i64; rank - c.dims.len()];
    d.extend(&c.dims);
    let channel_axis_only =
        d[0] == 1 && d[1] == channels as i64 && d.get(2).is_none_or(|&l| l == 1);
    channel_axis_only.then(|| c.values.clone())
}

pub(super) fn u16_dim(v: i64) -> Option<u16> {
    u16::try_from(v).ok().filter(|&v| v > 0)
}
