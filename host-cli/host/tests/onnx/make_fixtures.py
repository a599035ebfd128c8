#!/usr/bin/env python3
"""Writes the ONNX test fixtures of `hone onnx import` (a maintainer tool; the tests only read
the committed files).

    pip install onnx numpy
    python3 host-cli/host/tests/onnx/make_fixtures.py

For each model NAME it writes, beside this script:
  NAME.onnx           the model, built with onnx.helper
  NAME.expected.json  committed inputs (raw, before any standardization) and the outputs
                      onnx.reference.ReferenceEvaluator computes for them, one row per sample,
                      values in the row-major order of one sample

Weights are drawn from a seeded generator, except for `soil`, the demo's soil-moisture model
shape (2 inputs, dense 8, tanh, dense 1), which is fitted by plain gradient descent to the
invented demo data (demo-data/soil_factory.csv) so that it quantizes and calibrates like a
trained model.
"""

import json
import pathlib

import numpy as np
import onnx
from onnx import TensorProto, helper, numpy_helper
from onnx.reference import ReferenceEvaluator

HERE = pathlib.Path(__file__).resolve().parent
REPO = HERE.parent.parent.parent
OPSET = 17


def init(name, array, dtype):
    return numpy_helper.from_array(np.asarray(array, dtype=dtype), name)


def save(name, nodes, inits, in_shape, out_shape, dtype, inputs, meta=None):
    elem = TensorProto.FLOAT if dtype == np.float32 else TensorProto.DOUBLE
    graph = helper.make_graph(
        nodes,
        name,
        [helper.make_tensor_value_info("input", elem, ["batch", *in_shape])],
        [helper.make_tensor_value_info("output", elem, ["batch", *out_shape])],
        initializer=inits,
    )
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", OPSET)])
    model.ir_version = 8
    for k, v in (meta or {}).items():
        entry = model.metadata_props.add()
        entry.key, entry.value = k, json.dumps(v)
    onnx.checker.check_model(model, full_check=True)
    onnx.save(model, HERE / f"{name}.onnx")
    x = np.asarray(inputs, dtype=dtype)
    (y,) = ReferenceEvaluator(model).run(None, {"input": x})
    expected = {
        "source": f"onnx.reference.ReferenceEvaluator, onnx {onnx.__version__}",
        "dtype": "float32" if dtype == np.float32 else "float64",
        "inputs": x.reshape(len(x), -1).astype(float).tolist(),
        "outputs": np.asarray(y).reshape(len(x), -1).astype(float).tolist(),
    }
    (HERE / f"{name}.expected.json").write_text(json.dumps(expected, indent=1) + "\n")


def soil():
    """The demo's soil model shape, fitted to demo-data/soil_factory.csv."""
    data = np.genfromtxt(REPO / "demo-data" / "soil_factory.csv", delimiter=",", names=True)
    x = np.stack([data["raw_counts"], data["temp_c"]], axis=1)
    t = data["vwc"][:, None]
    mean, std = x.mean(axis=0), x.std(axis=0)
    z = (x - mean) / std
    rng = np.random.default_rng(11)
    w1 = rng.normal(0, 0.7, (8, 2))
    b1 = rng.normal(0, 0.5, 8)
    w2 = rng.normal(0, 0.35, (8, 1))
    b2 = np.full(1, t.mean())
    lr = 0.3
    for _ in range(3000):
        h = np.tanh(z @ w1.T + b1)
        y = h @ w2 + b2
        e = (y - t) / len(z)
        gw2, gb2 = h.T @ e, e.sum(axis=0)
        gh = (e @ w2.T) * (1 - h * h)
        gw1, gb1 = gh.T @ z, gh.sum(axis=0)
        w1, b1, w2, b2 = w1 - lr * gw1, b1 - lr * gb1, w2 - lr * gw2, b2 - lr * gb2
    f = np.float32
    nodes = [
        helper.make_node("Sub", ["input", "mean"], ["centred"], name="centre"),
        helper.make_node("Div", ["centred", "std"], ["z"], name="standardize"),
        helper.make_node("Gemm", ["z", "w1", "b1"], ["h"], name="hidden", transB=1),
        helper.make_node("Tanh", ["h"], ["a"], name="squash"),
        helper.make_node("MatMul", ["a", "w2"], ["p"], name="out_matmul"),
        helper.make_node("Add", ["p", "b2"], ["output"], name="out_bias"),
    ]
    inits = [
        init("mean", mean, f),
        init("std", std, f),
        init("w1", w1, f),
        init("b1", b1, f),
        init("w2", w2, f),
        init("b2", b2, f),
    ]
    inputs = np.stack([rng.uniform(1500, 2600, 6), rng.uniform(2, 38, 6)], axis=1)
    save("soil", nodes, inits, [2], [1], f, inputs,
         {"hone.features": ["raw_counts", "temp_c"], "hone.outputs": ["vwc"]})


def vibration():
    """The demo's vibration model shape with a BatchNormalization standardization, a
    LeakyRelu, a Gemm without transB and a final Softmax; seeded random weights."""
    rng = np.random.default_rng(12)
    f = np.float32
    nodes = [
        helper.make_node("BatchNormalization", ["input", "bn_s", "bn_b", "bn_m", "bn_v"],
                         ["z"], name="standardize", epsilon=1e-5),
        helper.make_node("Conv", ["z", "k", "kb"], ["c"], name="front", kernel_shape=[8],
                         strides=[2]),
        helper.make_node("Relu", ["c"], ["r"], name="rectify"),
        helper.make_node("AveragePool", ["r"], ["p"], name="level", kernel_shape=[7],
                         strides=[7]),
        helper.make_node("Flatten", ["p"], ["fl"], name="flat", axis=1),
        helper.make_node("Gemm", ["fl", "w1", "b1"], ["h"], name="hidden"),
        helper.make_node("LeakyRelu", ["h"], ["a"], name="leaky", alpha=0.125),
        helper.make_node("Gemm", ["a", "w2", "b2"], ["logits"], name="zones", transB=1),
        helper.make_node("Softmax", ["logits"], ["output"], name="probabilities", axis=-1),
    ]
    inits = [
        init("bn_s", [1.5], f),
        init("bn_b", [0.25], f),
        init("bn_m", [0.1], f),
        init("bn_v", [0.8], f),
        init("k", rng.normal(0, 0.35, (8, 1, 8)), f),
        init("kb", rng.normal(0, 0.1, 8), f),
        init("w1", rng.normal(0, 0.18, (32, 16)), f),
        init("b1", rng.normal(0, 0.1, 16), f),
        init("w2", rng.normal(0, 0.25, (4, 16)), f),
        init("b2", rng.normal(0, 0.1, 4), f),
    ]
    inputs = rng.normal(0, 1, (5, 1, 64))
    save("vibration", nodes, inits, [1, 64], [4], f, inputs,
         {"hone.features": [f"s{i}" for i in range(64)], "hone.outputs": ["0", "1", "2", "3"]})


def signal():
    """Two channels of 16 samples: per-channel Sub/Mul standardization, a Conv without bias,
    sigmoid, max pooling, a Reshape to [batch, -1], a dense layer and a Clip to [0, 6]; seeded
    random weights."""
    rng = np.random.default_rng(13)
    f = np.float32
    nodes = [
        helper.make_node("Sub", ["input", "off"], ["c0"], name="centre"),
        helper.make_node("Mul", ["c0", "gain"], ["z"], name="scale"),
        helper.make_node("Conv", ["z", "k"], ["c"], name="conv"),
        helper.make_node("Sigmoid", ["c"], ["s"], name="sigmoid"),
        helper.make_node("MaxPool", ["s"], ["m"], name="pool", kernel_shape=[2], strides=[2]),
        helper.make_node("Reshape", ["m", "shape"], ["fl"], name="flat"),
        helper.make_node("Gemm", ["fl", "w", "b"], ["d"], name="dense", transB=1),
        helper.make_node("Clip", ["d", "lo", "hi"], ["output"], name="clip6"),
    ]
    inits = [
        init("off", [[0.5], [-2.0]], f),
        init("gain", [[2.0], [0.25]], f),
        init("k", rng.normal(0, 0.6, (3, 2, 3)), f),
        init("shape", [0, -1], np.int64),
        init("w", rng.normal(0, 1.2, (3, 21)), f),
        init("b", rng.normal(0, 0.5, 3), f),
        init("lo", 0.0, f),
        init("hi", 6.0, f),
    ]
    inputs = rng.normal(0, 3, (4, 2, 16))
    save("signal", nodes, inits, [2, 16], [3], f, inputs,
         {"hone.features": [f"{c}{t}" for c in "ab" for t in range(16)],
          "hone.outputs": ["p", "q", "r"]})


def wide():
    """A double-precision model: Gemm, hard tanh (Clip to [-1, 1]), Gemm, ReLU, with a
    global average pool over a [batch, 3, 4] input; seeded random weights."""
    rng = np.random.default_rng(14)
    d = np.float64
    nodes = [
        helper.make_node("GlobalAveragePool", ["input"], ["g"], name="mean_over_time"),
        helper.make_node("Flatten", ["g"], ["fl"], name="flat"),
        helper.make_node("Gemm", ["fl", "w1", "b1"], ["h"], name="hidden", transB=1),
        helper.make_node("Clip", ["h", "lo", "hi"], ["a"], name="hardtanh"),
        helper.make_node("Gemm", ["a", "w2", "b2"], ["y"], name="out", transB=1),
        helper.make_node("Relu", ["y"], ["output"], name="relu"),
    ]
    inits = [
        init("w1", rng.normal(0, 0.8, (5, 3)), d),
        init("b1", rng.normal(0, 0.3, 5), d),
        init("lo", -1.0, d),
        init("hi", 1.0, d),
        init("w2", rng.normal(0, 0.8, (2, 5)), d),
        init("b2", rng.normal(0, 0.3, 2), d),
    ]
    inputs = rng.normal(0, 1, (5, 3, 4))
    save("wide", nodes, inits, [3, 4], [2], d, inputs,
         {"hone.features": [f"x{i}" for i in range(12)], "hone.outputs": ["u", "v"]})


if __name__ == "__main__":
    soil()
    vibration()
    signal()
    wide()
