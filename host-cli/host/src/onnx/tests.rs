//! Import checked against the ONNX reference evaluator, export checked by round trips, and
//! every refusal checked to name its node.

use std::path::PathBuf;

use prost::Message;

use super::*;
use crate::model::FloatModel;

fn fixture_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("tests/onnx")
}

fn fixture(name: &str) -> FloatModel {
    import_file(
        &fixture_dir().join(format!("{name}.onnx")),
        &ImportOptions::default(),
    )
    .unwrap_or_else(|e| panic!("{name}: {e}"))
}

struct Expected {
    dtype: String,
    inputs: Vec<Vec<f64>>,
    outputs: Vec<Vec<f64>>,
}

fn expected(name: &str) -> Expected {
    let text = std::fs::read_to_string(fixture_dir().join(format!("{name}.expected.json")))
        .expect("fixture outputs");
    let v: serde_json::Value = serde_json::from_str(&text).expect("fixture JSON");
    let rows = |k: &str| -> Vec<Vec<f64>> { serde_json::from_value(v[k].clone()).expect(k) };
    Expected {
        dtype: v["dtype"].as_str().expect("dtype").to_string(),
        inputs: rows("inputs"),
        outputs: rows("outputs"),
    }
}

fn softmax(z: &[f64]) -> Vec<f64> {
    let m = z.iter().fold(f64::NEG_INFINITY, |a, &b| a.max(b));
    let e: Vec<f64> = z.iter().map(|v| (v - m).exp()).collect();
    let s: f64 = e.iter().sum();
    e.iter().map(|v| v / s).collect()
}

/// Checks hone's float forward pass of an imported fixture against the outputs of the ONNX
/// reference evaluator (`onnx.reference.ReferenceEvaluator`, onnx 1.23.2, run by
/// `tests/onnx/make_fixtures.py` on the committed inputs). Returns the largest error found,
/// as a fraction of its bound.
///
/// The tolerance is derived per output value by propagating bounds on the difference between
/// the reference, which computes in the fixture's element type (unit roundoff `u`: 2^-24 for
/// float32, 2^-53 for float64), and hone, which computes in f64 from the same stored values:
/// - the standardization: a few roundings of the scaled value, and hone's offset and gain
///   rounded to f32: `8u·(|z| + |offset·gain|)`;
/// - a dense or convolution output of `n` terms: the input errors through the weights,
///   `Σ|w|·e`, plus the classical bound on a sum of products, `γ·(Σ|w||x| + |b|)` with
///   `γ = (n + 1)·u / (1 − (n + 1)·u)` (Higham, Accuracy and Stability of Numerical
///   Algorithms, 2nd ed., section 3.1);
/// - ReLU, leaky ReLU and clipping pass errors unchanged (slope at most 1, no rounding);
///   tanh (slope ≤ 1) and sigmoid (slope ≤ 1/4) add `4u·|y|` for the library function;
/// - average pooling: the mean of the errors plus `γ·mean|x|`; max pooling: the largest error
///   in the window;
/// - softmax: `p_i·(2·max_j e_j + (n + 3)·u)` (its derivative is bounded by `p_i` times twice
///   the largest input change);
/// - and the final rounding of the reference, `u·|y|`.
fn check_fixture(name: &str, m: &FloatModel) -> Result<f64, String> {
    use hone_core::float::forward as layer;
    use hone_core::model::{LayerKind, Loss};
    let e = expected(name);
    let u = match e.dtype.as_str() {
        "float32" => (-24f64).exp2(),
        "float64" => (-53f64).exp2(),
        d => panic!("{name}: dtype {d}"),
    };
    let gamma = |n: u32| {
        let nu = f64::from(n + 1) * u;
        nu / (1.0 - nu)
    };
    let shapes = m.shapes().expect("shapes");
    let abs = |v: &[f64]| -> Vec<f64> { v.iter().map(|x| x.abs()).collect() };
    let mut worst = 0f64;
    assert_eq!(e.inputs.len(), e.outputs.len());
    assert!(!e.inputs.is_empty());
    for (raw, want) in e.inputs.iter().zip(&e.outputs) {
        let len = m.input.len as usize;
        let mut x = Vec::new();
        let mut err = Vec::new();
        for (i, &r) in raw.iter().enumerate() {
            let (o, g) = m
                .scaling
                .get(i / len)
                .map_or((0.0, 1.0), |s| (f64::from(s.offset), f64::from(s.gain)));
            let z = (r - o) * g;
            x.push(z);
            err.push(if m.scaling.is_empty() {
                0.0
            } else {
                8.0 * u * (z.abs() + (o * g).abs())
            });
        }
        for (k, l) in m.layers.iter().enumerate() {
            let g = shapes.layers[k];
            let n = g.output.size() as usize;
            let (mut y, mut ey, mut mag) = (vec![0.0; n], vec![0.0; n], vec![0.0; n]);
            layer(l.kind, &g, &l.weights, &l.bias, &x, &mut y);
            let (aw, ab) = (abs(&l.weights), abs(&l.bias));
            let zero = vec![0.0; l.bias.len()];
            match l.kind {
                LayerKind::Dense { .. } | LayerKind::Conv1d { .. } => {
                    let terms = (g.weights / g.biases.max(1)).max(1);
                    layer(l.kind, &g, &aw, &zero, &err, &mut ey);
                    layer(l.kind, &g, &aw, &ab, &abs(&x), &mut mag);
                    for (e, m) in ey.iter_mut().zip(&mag) {
                        *e += gamma(terms) * m;
                    }
                }
                LayerKind::AvgPool1d { window, .. } => {
                    layer(l.kind, &g, &[], &[], &err, &mut ey);
                    layer(l.kind, &g, &[], &[], &abs(&x), &mut mag);
                    for (e, m) in ey.iter_mut().zip(&mag) {
                        *e += gamma(u32::from(window)) * m;
                    }
                }
                LayerKind::MaxPool1d { .. } => layer(l.kind, &g, &[], &[], &err, &mut ey),
                LayerKind::Tanh | LayerKind::Sigmoid => {
                    let slope = if l.kind == LayerKind::Tanh { 1.0 } else { 0.25 };
                    for i in 0..n {
                        ey[i] = slope * err[i] + 4.0 * u * y[i].abs();
                    }
                }
                _ => ey.clone_from(&err),
            }
            x = y;
            err = ey;
        }
        if m.loss == Loss::SoftmaxCrossEntropy {
            let worst_in = err.iter().fold(0f64, |a, &b| a.max(b));
            x = softmax(&x);
            let n = x.len() as f64;
            err = x
                .iter()
                .map(|p| p * (2.0 * worst_in + (n + 3.0) * u))
                .collect();
        }
        assert_eq!(x.len(), want.len(), "{name}: output length");
        for ((a, b), e) in x.iter().zip(want).zip(&err) {
            let bound = e + u * b.abs();
            if (a - b).abs() > bound {
                return Err(format!(
                    "{name}: hone {a}, reference {b}, difference {} over the bound {bound}",
                    (a - b).abs()
                ));
            }
            worst = worst.max((a - b).abs() / bound);
        }
    }
    Ok(worst)
}

const FIXTURES: [&str; 4] = ["soil", "vibration", "signal", "wide"];

#[test]
fn imported_fixtures_compute_what_the_onnx_reference_computes() {
    for name in FIXTURES {
        let worst = check_fixture(name, &fixture(name)).unwrap();
        eprintln!("{name}: largest difference {worst:.3} of its bound");
    }
}

/// The check can fail: the last layer's weights off by a thousandth (float32 models) or a
/// millionth (the float64 one) are caught, and so are two swapped biases.
#[test]
fn the_reference_check_catches_a_changed_weight() {
    for (name, rel) in [
        ("soil", 1e-3),
        ("vibration", 1e-3),
        ("signal", 1e-3),
        ("wide", 1e-6),
    ] {
        let mut m = fixture(name);
        let l = m
            .layers
            .iter_mut()
            .rfind(|l| !l.weights.is_empty())
            .unwrap();
        for w in &mut l.weights {
            *w *= 1.0 + rel;
        }
        assert!(check_fixture(name, &m).is_err(), "{name}");
    }
    let mut m = fixture("signal");
    let last = m.layers.iter_mut().rfind(|l| !l.bias.is_empty()).unwrap();
    last.bias.swap(0, 1);
    assert!(check_fixture("signal", &m).is_err());
}

/// A model with every layer kind, train modes, scaling and a history: the export paths that
/// the fixtures do not reach (a convolution after a dense layer, clipping, max pooling).
fn every_kind() -> FloatModel {
    use crate::model::{EpochRecord, FloatLayer};
    use hone_core::blob::ChannelScale;
    use hone_core::model::{LayerKind as K, Loss, Shape, TrainMode};
    let p = |kind, mode, w: usize, b: usize, seed: f64| FloatLayer {
        kind,
        mode,
        weights: (0..w)
            .map(|i| ((i as f64 + seed) * 0.7).sin() / 3.0)
            .collect(),
        bias: (0..b)
            .map(|i| ((i as f64 + seed) * 1.3).cos() / 7.0)
            .collect(),
    };
    let s = |kind| p(kind, TrainMode::Frozen, 0, 0, 0.0);
    let conv = |filters, kernel, stride| K::Conv1d {
        filters,
        kernel,
        stride,
    };
    FloatModel {
        format: crate::model::FORMAT_NAME.into(),
        version: crate::model::FORMAT_VERSION,
        input: Shape {
            channels: 2,
            len: 12,
        },
        loss: Loss::SoftmaxCrossEntropy,
        layers: vec![
            p(conv(3, 3, 1), TrainMode::Frozen, 18, 3, 1.0),
            s(K::ClippedRelu { ceiling: 6 }),
            s(K::MaxPool1d {
                window: 2,
                stride: 2,
            }),
            s(K::Sigmoid),
            p(K::Dense { units: 6 }, TrainMode::BiasOnly, 90, 6, 2.0),
            s(K::HardTanh),
            p(conv(2, 1, 1), TrainMode::WeightsOnly, 12, 2, 3.0),
            s(K::LeakyRelu { shift: 3 }),
            s(K::AvgPool1d {
                window: 1,
                stride: 1,
            }),
            s(K::Tanh),
            p(K::Dense { units: 3 }, TrainMode::Full, 6, 3, 4.0),
            s(K::Relu),
        ],
        scaling: vec![
            ChannelScale {
                offset: 2000.5,
                gain: 0.003,
            },
            ChannelScale {
                offset: -1.25,
                gain: 0.1,
            },
        ],
        features: (0..24).map(|i| format!("f{i}")).collect(),
        outputs: vec!["a".into(), "b".into(), "c".into()],
        history: vec![EpochRecord {
            epoch: 1,
            loss: 0.5,
            metric: 75.0,
            eval_loss: Some(0.625),
            eval_metric: None,
            rmse: None,
            eval_rmse: None,
        }],
    }
}

fn round_trip(m: &FloatModel, p: Precision) -> FloatModel {
    let bytes = export(m, p, "model").expect("export");
    import("exported", &bytes, &ImportOptions::default()).expect("import")
}

#[test]
fn import_of_export_gives_the_same_model() {
    let every = every_kind();
    assert!(every.check().is_ok(), "{:?}", every.check());
    let mut models: Vec<FloatModel> = FIXTURES.iter().map(|n| fixture(n)).collect();
    models.push(every);
    for m in &models {
        assert_eq!(&round_trip(m, Precision::F64), m);
        // In float32, the weights round to f32 (scaling already is f32).
        let mut rounded = m.clone();
        for l in &mut rounded.layers {
            for v in l.weights.iter_mut().chain(l.bias.iter_mut()) {
                *v = f64::from(*v as f32);
            }
        }
        assert_eq!(round_trip(m, Precision::F32), rounded);
    }
    // The float32 export of a model with f64 weights does lose digits: the comparison above
    // is not vacuous.
    let every = every_kind();
    assert_ne!(round_trip(&every, Precision::F32), every);
}

#[test]
fn names_given_to_import_replace_the_metadata_and_are_needed_without_it() {
    let bytes = std::fs::read(fixture_dir().join("soil.onnx")).unwrap();
    let opts = ImportOptions {
        features: Some(vec!["a".into(), "b".into()]),
        outputs: Some(vec!["y".into()]),
    };
    let m = import("soil.onnx", &bytes, &opts).unwrap();
    assert_eq!(
        (m.features, m.outputs),
        (opts.features.unwrap(), opts.outputs.unwrap())
    );
    let mut proto = pb::ModelProto::decode(&bytes[..]).unwrap();
    proto.metadata_props.clear();
    let e = import(
        "soil.onnx",
        &proto.encode_to_vec(),
        &ImportOptions::default(),
    )
    .unwrap_err()
    .to_string();
    assert!(e.contains("give them with --features"), "{e}");
    let wrong = ImportOptions {
        features: Some(vec!["a".into()]),
        outputs: None,
    };
    let e = import("soil.onnx", &bytes, &wrong).unwrap_err().to_string();
    assert!(
        e.contains("1 feature names for an input of 2 values"),
        "{e}"
    );
}

fn node_named<'a>(g: &'a mut pb::GraphProto, name: &str) -> &'a mut pb::NodeProto {
    g.node
        .iter_mut()
        .find(|n| n.name.as_deref() == Some(name))
        .unwrap_or_else(|| panic!("no node {name}"))
}

fn set_attr(n: &mut pb::NodeProto, a: pb::AttributeProto) {
    n.attribute.retain(|x| x.name != a.name);
    n.attribute.push(a);
}

type Edit = fn(&mut pb::GraphProto);

/// Every refusal names the node (position and name), its operator and the reason. Each case:
/// fixture, an edit of its graph, and the expected start and a piece of the reason.
#[test]
fn unsupported_nodes_are_refused_naming_node_operator_and_reason() {
    let cases: &[(&str, Edit, &str, &str)] = &[
        (
            "soil",
            |g| node_named(g, "squash").op_type = Some("Erf".into()),
            "node 3 \"squash\" (Erf)",
            "operator not supported",
        ),
        (
            "soil",
            |g| set_attr(node_named(g, "hidden"), export::attr_float("alpha", 2.0)),
            "node 2 \"hidden\" (Gemm)",
            "alpha = 2",
        ),
        (
            "soil",
            |g| set_attr(node_named(g, "hidden"), export::attr_int("transA", 1)),
            "node 2 \"hidden\" (Gemm)",
            "transA = 1",
        ),
        (
            "soil",
            |g| set_attr(node_named(g, "squash"), export::attr_float("beta", 1.0)),
            "node 3 \"squash\" (Tanh)",
            "attribute `beta` is not supported",
        ),
        (
            "soil",
            |g| node_named(g, "hidden").input[1] = "z".into(),
            "node 2 \"hidden\" (Gemm)",
            "must be a constant",
        ),
        (
            "soil",
            |g| node_named(g, "out_bias").op_type = Some("Sub".into()),
            "node 5 \"out_bias\" (Sub)",
            "only a standardization",
        ),
        (
            "soil",
            |g| node_named(g, "squash").input[0] = "z".into(),
            "node 3 \"squash\" (Tanh)",
            "one chain",
        ),
        (
            "soil",
            |g| node_named(g, "squash").domain = Some("com.example".into()),
            "node 3 \"squash\" (Tanh)",
            "domain",
        ),
        (
            "vibration",
            |g| set_attr(node_named(g, "front"), export::attr_ints("pads", &[1, 1])),
            "node 1 \"front\" (Conv)",
            "unpadded",
        ),
        (
            "vibration",
            |g| set_attr(node_named(g, "front"), export::attr_int("group", 2)),
            "node 1 \"front\" (Conv)",
            "group = 2",
        ),
        (
            "vibration",
            |g| set_attr(node_named(g, "front"), export::attr_ints("dilations", &[2])),
            "node 1 \"front\" (Conv)",
            "dilated",
        ),
        (
            "vibration",
            |g| {
                set_attr(
                    node_named(g, "front"),
                    export::attr_ints("strides", &[2, 2]),
                )
            },
            "node 1 \"front\" (Conv)",
            "one spatial axis",
        ),
        (
            "vibration",
            |g| set_attr(node_named(g, "level"), export::attr_int("ceil_mode", 1)),
            "node 3 \"level\" (AveragePool)",
            "ceil_mode",
        ),
        (
            "vibration",
            |g| set_attr(node_named(g, "leaky"), export::attr_float("alpha", 0.01)),
            "node 6 \"leaky\" (LeakyRelu)",
            "power of two",
        ),
        (
            "vibration",
            |g| set_attr(node_named(g, "flat"), export::attr_int("axis", 2)),
            "node 4 \"flat\" (Flatten)",
            "axis = 2",
        ),
        (
            "vibration",
            |g| {
                g.node.retain(|n| n.name.as_deref() != Some("flat"));
                node_named(g, "hidden").input[0] = "p".into();
            },
            "node 4 \"hidden\" (Gemm)",
            "add a Flatten",
        ),
        (
            "vibration",
            |g| set_attr(node_named(g, "probabilities"), export::attr_int("axis", 0)),
            "node 8 \"probabilities\" (Softmax)",
            "axis 0",
        ),
        (
            "vibration",
            |g| {
                set_attr(
                    node_named(g, "standardize"),
                    export::attr_int("training_mode", 1),
                )
            },
            "node 0 \"standardize\" (BatchNormalization)",
            "training_mode",
        ),
        (
            "vibration",
            |g| {
                let n = node_named(g, "probabilities").clone();
                let mut r = n.clone();
                r.name = Some("after".into());
                r.op_type = Some("Relu".into());
                r.attribute.clear();
                r.input = n.output.clone();
                r.output = vec!["after".into()];
                g.node.push(r);
            },
            "node 9 \"after\" (Relu)",
            "after the final Softmax",
        ),
        (
            "signal",
            |g| {
                let n = node_named(g, "sigmoid");
                n.op_type = Some("Sub".into());
                n.input.push("off".into());
            },
            "node 3 \"sigmoid\" (Sub)",
            "only a standardization of the inputs",
        ),
        (
            "signal",
            |g| {
                for t in &mut g.initializer {
                    if t.name.as_deref() == Some("shape") {
                        t.int64_data = vec![0, 7, 3];
                        t.dims = vec![3];
                        t.raw_data = None;
                    }
                }
            },
            "node 5 \"flat\" (Reshape)",
            "only as a view",
        ),
        (
            "signal",
            |g| {
                for t in &mut g.initializer {
                    if t.name.as_deref() == Some("hi") {
                        t.float_data = vec![5.5];
                        t.raw_data = None;
                    }
                }
            },
            "node 7 \"clip6\" (Clip)",
            "whole number",
        ),
        (
            "signal",
            |g| {
                for t in &mut g.initializer {
                    if t.name.as_deref() == Some("off") {
                        t.dims = vec![1, 2];
                    }
                }
            },
            "node 0 \"centre\" (Sub)",
            "one per channel",
        ),
        (
            "wide",
            |g| set_attr(node_named(g, "hardtanh"), export::attr_float("min", -1.0)),
            "node 3 \"hardtanh\" (Clip)",
            "attribute `min`",
        ),
    ];
    for (k, (name, edit, head, reason)) in cases.iter().enumerate() {
        let bytes = std::fs::read(fixture_dir().join(format!("{name}.onnx"))).unwrap();
        let mut proto = pb::ModelProto::decode(&bytes[..]).unwrap();
        edit(proto.graph.as_mut().unwrap());
        let e = import(
            &format!("{name}.onnx"),
            &proto.encode_to_vec(),
            &ImportOptions::default(),
        )
        .map(|_| ())
        .unwrap_err();
        let text = e.to_string();
        assert!(matches!(e, OnnxError::Node { .. }), "case {k}: {text}");
        assert!(
            text.starts_with(&format!("{name}.onnx: {head}: ")),
            "case {k}: {text}"
        );
        assert!(text.contains(reason), "case {k}: {text}");
    }
}

#[test]
fn bad_files_and_graph_shapes_are_refused() {
    let bytes = std::fs::read(fixture_dir().join("soil.onnx")).unwrap();
    let e = import("x.onnx", b"\xff\xff\xff", &ImportOptions::default()).unwrap_err();
    assert!(
        e.to_string().starts_with("x.onnx: not an ONNX model"),
        "{e}"
    );
    type ModelEdit = fn(&mut pb::ModelProto);
    let edits: &[(ModelEdit, &str)] = &[
        (
            |m| m.graph.as_mut().unwrap().output[0].name = Some("p".into()),
            "hone reads one output",
        ),
        (
            |m| {
                let g = m.graph.as_mut().unwrap();
                let i = g.input[0].clone();
                g.input.push(pb::ValueInfoProto {
                    name: Some("second".into()),
                    ..i
                });
            },
            "2 graph inputs",
        ),
        (
            |m| {
                if let Some(pb::type_proto::Value::TensorType(t)) = m.graph.as_mut().unwrap().input
                    [0]
                .r#type
                .as_mut()
                .and_then(|t| t.value.as_mut())
                {
                    t.elem_type = Some(pb::tensor_proto::DataType::Int8 as i32);
                }
            },
            "element type int8",
        ),
        (
            |m| {
                if let Some(pb::type_proto::Value::TensorType(t)) = m.graph.as_mut().unwrap().input
                    [0]
                .r#type
                .as_mut()
                .and_then(|t| t.value.as_mut())
                {
                    t.shape.as_mut().unwrap().dim.push(Default::default());
                }
            },
            "known sizes",
        ),
        (|m| m.opset_import.clear(), "no operator set"),
        (
            |m| {
                m.graph.as_mut().unwrap().initializer[0]
                    .external_data
                    .push(Default::default())
            },
            "external file",
        ),
    ];
    for (k, (edit, want)) in edits.iter().enumerate() {
        let mut proto = pb::ModelProto::decode(&bytes[..]).unwrap();
        edit(&mut proto);
        let e = import(
            "soil.onnx",
            &proto.encode_to_vec(),
            &ImportOptions::default(),
        )
        .map(|_| ())
        .unwrap_err()
        .to_string();
        assert!(
            e.starts_with("soil.onnx: ") && e.contains(want),
            "case {k}: {e}"
        );
    }
}

/// The soil fixture quantized with the soil example config, as a model blob, and a unit's
/// checkpoint after a few training steps on its calibration data.
fn soil_blobs() -> (crate::pipeline::Base, Vec<u8>, Vec<u8>) {
    use hone_core::plan::Plan;
    use hone_core::train::Trainer;
    let repo = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../..");
    let config = crate::config::Config::load(&repo.join("configs/soil-moisture.toml")).unwrap();
    let base = crate::pipeline::Base::from_float(
        config,
        fixture("soil"),
        &repo.join("demo-data/soil_factory.csv"),
    )
    .unwrap();
    let desc = &base.quant.desc;
    let blob = crate::export::model_blob(desc, &base.quant.params, &base.float.scaling).unwrap();
    let cal = base
        .prepare(&repo.join("demo-data/soil_unit_calibration.csv"))
        .unwrap();
    let plan = Plan::of(desc).unwrap();
    let mut arena = vec![0u32; plan.ram_words()];
    let views = base.quant.params.views();
    let mut t = Trainer::new(desc, &plan, &mut arena, &views).unwrap();
    for i in 0..cal.len() {
        let (x, target) = cal.fixed(i, desc.input_format);
        t.step(x, target).unwrap();
    }
    t.flush();
    let mut ck = vec![0u8; 4096];
    let n = t
        .write_checkpoint(&base.float.scaling[..], &mut ck)
        .unwrap();
    ck.truncate(n);
    (base, blob, ck)
}

#[test]
fn blobs_export_dequantized() {
    let (base, blob, ck) = soil_blobs();
    let real = base.quant.params.real(&base.quant.desc);
    // The model blob alone: exactly the quantized values, within half a step of the float
    // model's (the quantizer rounds to nearest and nothing saturated here).
    let m = from_blobs(("soil.honb", &blob), None, None, None).unwrap();
    assert_eq!(m.features, ["input_0", "input_1"]);
    assert_eq!(m.outputs, ["output_0"]);
    assert_eq!(m.scaling, base.float.scaling);
    for (k, l) in m.layers.iter().enumerate() {
        assert_eq!((&l.weights, &l.bias), (&real[k].0, &real[k].1), "layer {k}");
        let d = base.quant.desc.layers[k];
        for (got, was, step) in [
            (
                &l.weights,
                &base.float.layers[k].weights,
                d.weight.value.step(),
            ),
            (&l.bias, &base.float.layers[k].bias, d.bias.value.step()),
        ] {
            for (a, b) in got.iter().zip(was) {
                assert!((a - b).abs() <= step / 2.0, "layer {k}: {a} {b}");
            }
        }
    }
    // With the unit's checkpoint: its trained values, which differ from the factory's.
    let names = (
        Some(vec!["raw_counts".into(), "temp_c".into()]),
        Some(vec!["vwc".into()]),
    );
    let unit = from_blobs(
        ("soil.honb", &blob),
        Some(("unit.honb", &ck)),
        names.0,
        names.1,
    )
    .unwrap();
    assert_eq!(unit.features, ["raw_counts", "temp_c"]);
    let c = hone_core::blob::decode(&ck).unwrap();
    let mut changed = 0;
    for (k, l) in unit.layers.iter().enumerate() {
        if let Some(t) = c.tensor(k, hone_core::blob::TensorRole::Weight) {
            let want: Vec<f64> = crate::inspect::raw_values(&t)
                .into_iter()
                .map(|r| t.format.to_f64(r))
                .collect();
            assert_eq!(l.weights, want, "layer {k}");
            changed += usize::from(l.weights != m.layers[k].weights);
        }
    }
    assert!(changed > 0, "training changed no weights");
    // Blobs swapped are refused naming the file.
    let e = from_blobs(("unit.honb", &ck), None, None, None)
        .unwrap_err()
        .to_string();
    assert!(
        e.starts_with("unit.honb: a checkpoint, not a model blob"),
        "{e}"
    );
    let e = from_blobs(("soil.honb", &blob), Some(("b.honb", &blob)), None, None)
        .unwrap_err()
        .to_string();
    assert!(
        e.starts_with("b.honb: a model blob, not a checkpoint"),
        "{e}"
    );
    // And the export of a unit imports back as the same model.
    assert_eq!(round_trip(&unit, Precision::F64), unit);
}
