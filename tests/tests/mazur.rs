//! Outside reference: Matt Mazur, "A Step by Step Backpropagation Example" (2015).
//!
//! A 2-2-2 network with sigmoid hidden and output units; inputs 0.05 and 0.10, targets 0.01
//! and 0.99; weights w1..w8 = 0.15, 0.20, 0.25, 0.30, 0.40, 0.45, 0.50, 0.55; biases 0.35 and
//! 0.60, which the example does not update; loss Σ ½ (target − output)²; learning rate 0.5.
//! The published figures: total error 0.298371109 before the step, w5 = 0.35891648 and
//! w1 = 0.149780716 after it, and total error 0.291027924 after the first round.
//!
//! That last figure is not consistent with the rest of the post: running the network forward
//! with the post's own updated weights (listed below) gives 0.2910277737, 1.5e-7 below the
//! published 0.291027924 (checked here and, independently, by hand in f64). The tests hold
//! the twin to 1e-8 on everything else, to 1e-8 on the error recomputed from the post's
//! updated weights, and to 2e-7 on the published after-step error, with this note as the
//! reason.

use hone_core::approx;
use hone_core::float::{FloatParams, FloatTarget, Twin};
use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, Shape, TrainDesc, TrainMode};
use hone_core::num::{QFormat, QScalar};
use hone_core::plan::Plan;
use hone_core::train::{LayerParams, Trainer};
use hone_tests::{dense, q, sigmoid, Interval, Owned};

// The published figures of Matt Mazur, "A Step by Step Backpropagation Example" (2015), as
// quoted from the post in the project's issue: the total error before the step, w5 and w1
// after it, and the total error after the first round.
const E_BEFORE: f64 = 0.298371109;
const W5_AFTER: f64 = 0.35891648;
const W1_AFTER: f64 = 0.149780716;
const E_AFTER: f64 = 0.291027924;
// The post's full list of updated weights w1..w8 (w1 and w5 quoted as above; the other six
// are from memory of the post, and agree with an independent f64 recomputation to 1e-9).
const W_AFTER: [f64; 8] = [
    0.149780716,
    0.19956143,
    0.24975114,
    0.29950229,
    0.35891648,
    0.408666186,
    0.511301270,
    0.561370121,
];
/// Distance between the published after-step error and the error of the published weights.
const E_AFTER_INCONSISTENCY: f64 = 2e-7;

const X: [f64; 2] = [0.05, 0.10];
const T: [f64; 2] = [0.01, 0.99];
// Dense weights are [unit][input]: hidden h1 = w1·i1 + w2·i2, h2 = w3·i1 + w4·i2;
// outputs o1 = w5·h1 + w6·h2, o2 = w7·h1 + w8·h2.
const W0: [f64; 4] = [0.15, 0.20, 0.25, 0.30];
const B0: [f64; 2] = [0.35, 0.35];
const W2: [f64; 4] = [0.40, 0.45, 0.50, 0.55];
const B2: [f64; 2] = [0.60, 0.60];

/// The formats of one fixed-point configuration.
#[derive(Clone, Copy)]
struct Formats {
    input: QFormat,
    weight: QFormat,
    accum: QFormat,
    z: QFormat,
    act: QFormat,
    grad_out: QFormat,
    grad_z: QFormat,
    grad_h: QFormat,
}

fn desc(f: &Formats) -> ModelDesc {
    let lr = QScalar::from_f64(0.5, 16).unwrap();
    let layers = [
        dense(2, TrainMode::WeightsOnly, f.weight, f.accum, f.z, f.grad_z),
        LayerDesc::simple(LayerKind::Sigmoid, f.act, f.grad_h),
        dense(2, TrainMode::WeightsOnly, f.weight, f.accum, f.z, f.grad_z),
        LayerDesc::simple(LayerKind::Sigmoid, f.act, f.grad_out),
    ];
    ModelDesc::new(
        Shape::vector(2),
        f.input,
        &layers,
        Loss::SquaredError,
        TrainDesc::sgd(lr),
    )
    .unwrap()
}

#[test]
fn float_twin_reproduces_the_published_step() {
    let f = Formats {
        input: q(16, 14),
        weight: q(16, 14),
        accum: q(32, 28),
        z: q(16, 13),
        act: q(16, 15),
        grad_out: q(16, 15),
        grad_z: q(16, 15),
        grad_h: q(16, 15),
    };
    let d = desc(&f);
    let plan = Plan::new_float(d.input, &d.layers, d.loss, &d.train, 8).unwrap();
    let mut arena = vec![0f64; plan.ram_bytes as usize / 8];
    let none = FloatParams::NONE;
    let init = [
        FloatParams {
            weight: &W0[..],
            bias: &B0[..],
        },
        none,
        FloatParams {
            weight: &W2[..],
            bias: &B2[..],
        },
        none,
    ];
    let mut twin = Twin::new(&d, &plan, &mut arena, &init).unwrap();
    let out = twin.step(&X, FloatTarget::Values(&T)).unwrap();
    assert!(out.updated);
    assert!((out.loss - E_BEFORE).abs() < 1e-8, "E before {}", out.loss);
    let w2 = twin.params(2).unwrap();
    let w0 = twin.params(0).unwrap();
    assert!(
        (w2.weight[0] - W5_AFTER).abs() < 1e-8,
        "w5 {}",
        w2.weight[0]
    );
    assert!(
        (w0.weight[0] - W1_AFTER).abs() < 1e-8,
        "w1 {}",
        w0.weight[0]
    );
    // Biases are not updated in the example.
    assert_eq!(w2.bias, &B2[..]);
    for (i, w) in w0.weight.iter().chain(w2.weight.iter()).enumerate() {
        assert!(
            (w - W_AFTER[i]).abs() < 1e-8,
            "w{} = {w}, published {}",
            i + 1,
            W_AFTER[i]
        );
    }
    let after = twin.evaluate(&X, FloatTarget::Values(&T)).unwrap().loss;
    assert!(
        (after - E_AFTER).abs() < E_AFTER_INCONSISTENCY,
        "E after {after}"
    );
    // The error of the post's own updated weights, run through a second twin.
    let (pw0, pw2): (Vec<f64>, Vec<f64>) = (W_AFTER[..4].to_vec(), W_AFTER[4..].to_vec());
    let init2 = [
        FloatParams {
            weight: &pw0[..],
            bias: &B0[..],
        },
        none,
        FloatParams {
            weight: &pw2[..],
            bias: &B2[..],
        },
        none,
    ];
    let mut arena2 = vec![0f64; plan.ram_bytes as usize / 8];
    let mut twin2 = Twin::new(&d, &plan, &mut arena2, &init2).unwrap();
    let e_pub_weights = twin2.evaluate(&X, FloatTarget::Values(&T)).unwrap().loss;
    assert!(
        (after - e_pub_weights).abs() < 1e-8,
        "{after} vs {e_pub_weights}"
    );
}

/// Worst-case intervals of every quantity the fixed-point path computes, following its
/// rounding points one by one (see `core/src/layer` and `core/src/train/sgd.rs`): inputs and
/// parameters quantized to nearest (half a step each), each layer output rounded once, the
/// sigmoid table off by at most 2^-16 (the bound `core/src/approx` enforces), derivatives
/// formed with 30 fraction bits, the update `lr·g` rounded once into the weight format.
struct Bounds {
    e_before: Interval,
    w5: Interval,
    w1: Interval,
    e_after: Interval,
}

fn bounds(f: &Formats) -> Bounds {
    let table = approx_bound();
    let d30 = 2f64.powi(-31);
    let loss_round = 2f64.powi(-25);
    let xq = X.map(|v| Interval::point(v).round(f.input));
    let tq = T.map(|v| Interval::point(v).round(f.act));
    let wq = |w: &[f64; 4]| w.map(|v| Interval::point(v).round(f.weight));
    let bq = |b: &[f64; 2]| b.map(|v| Interval::point(v).round(f.weight));
    let forward = |w0: &[Interval; 4], w2: &[Interval; 4]| {
        let (b0, b2) = (bq(&B0), bq(&B2));
        let z1: [Interval; 2] = std::array::from_fn(|j| {
            w0[2 * j]
                .times(xq[0])
                .plus(w0[2 * j + 1].times(xq[1]))
                .plus(b0[j])
                .round(f.z)
        });
        let h = z1.map(|z| z.monotone(sigmoid).widen(table).round(f.act));
        let z2: [Interval; 2] = std::array::from_fn(|j| {
            w2[2 * j]
                .times(h[0])
                .plus(w2[2 * j + 1].times(h[1]))
                .plus(b2[j])
                .round(f.z)
        });
        let o = z2.map(|z| z.monotone(sigmoid).widen(table).round(f.act));
        let e = (0..2).fold(Interval::point(0.0), |acc, j| {
            let diff = o[j].minus(tq[j]);
            let sq = if diff.lo <= 0.0 && diff.hi >= 0.0 {
                Interval {
                    lo: 0.0,
                    hi: diff.lo.abs().max(diff.hi.abs()).powi(2),
                }
            } else {
                diff.times(diff)
            };
            acc.plus(sq.times(Interval::point(0.5)))
        });
        (h, o, e.widen(loss_round))
    };
    let (w0, w2) = (wq(&W0), wq(&W2));
    let (h, o, e_before) = forward(&w0, &w2);
    // Backward.
    let g_out: [Interval; 2] = std::array::from_fn(|j| o[j].minus(tq[j]).round(f.grad_out));
    let sig_deriv = |y: Interval| {
        // y(1 − y) is increasing below 1/2 and decreasing above; take the image of the interval.
        let g = |v: f64| v * (1.0 - v);
        let (a, b) = (g(y.lo), g(y.hi));
        let lo = a.min(b);
        let hi = if y.lo <= 0.5 && y.hi >= 0.5 {
            0.25
        } else {
            a.max(b)
        };
        Interval { lo, hi }.widen(d30)
    };
    let g_z2: [Interval; 2] =
        std::array::from_fn(|j| sig_deriv(o[j]).times(g_out[j]).round(f.grad_z));
    let acc_w2: [Interval; 4] = std::array::from_fn(|k| g_z2[k / 2].times(h[k % 2]).round(f.accum));
    let g_h: [Interval; 2] = std::array::from_fn(|i| {
        w2[i]
            .times(g_z2[0])
            .plus(w2[2 + i].times(g_z2[1]))
            .round(f.grad_h)
    });
    let g_z1: [Interval; 2] =
        std::array::from_fn(|j| sig_deriv(h[j]).times(g_h[j]).round(f.grad_z));
    let acc_w0: [Interval; 4] =
        std::array::from_fn(|k| g_z1[k / 2].times(xq[k % 2]).round(f.accum));
    let lr = Interval::point(0.5);
    let w2_new: [Interval; 4] =
        std::array::from_fn(|k| w2[k].minus(lr.times(acc_w2[k]).round(f.weight)));
    let w0_new: [Interval; 4] =
        std::array::from_fn(|k| w0[k].minus(lr.times(acc_w0[k]).round(f.weight)));
    let (_, _, e_after) = forward(&w0_new, &w2_new);
    Bounds {
        e_before,
        w5: w2_new[0],
        w1: w0_new[0],
        e_after,
    }
}

/// Bound on the sigmoid table's error: 2^-16, enforced by the tests in `core/src/approx`.
fn approx_bound() -> f64 {
    let _ = approx::OUT_FRAC; // the tables' result scale; their error bound is 2^-16
    2f64.powi(-16)
}

fn run_fixed(f: &Formats) {
    let d = desc(f);
    let plan = Plan::of(&d).unwrap();
    let mut arena = vec![0u32; plan.ram_words()];
    let (w0, b0, w2, b2) = (
        Owned::quantize(&W0, f.weight),
        Owned::quantize(&B0, f.weight),
        Owned::quantize(&W2, f.weight),
        Owned::quantize(&B2, f.weight),
    );
    let none = LayerParams::NONE;
    let init = [
        LayerParams {
            weight: w0.raw(),
            bias: b0.raw(),
        },
        none,
        LayerParams {
            weight: w2.raw(),
            bias: b2.raw(),
        },
        none,
    ];
    let mut tr = Trainer::new(&d, &plan, &mut arena, &init).unwrap();
    let x = Owned::quantize(&X, f.input);
    let t = Owned::quantize(&T, f.act);
    let xt = Tensor {
        raw: x.raw(),
        fmt: f.input,
    };
    let tt = Target::Values(Tensor {
        raw: t.raw(),
        fmt: f.act,
    });
    let b = bounds(f);
    let out = tr.step(xt, tt).unwrap();
    assert!(out.updated);
    let e = out.loss.to_f64();
    let w5 = f.weight.to_f64(tr.params(2).unwrap().weight.at(0));
    let w1 = f.weight.to_f64(tr.params(0).unwrap().weight.at(0));
    assert_eq!(
        tr.params(2).unwrap().bias,
        b2.raw(),
        "the biases stay where they were"
    );
    let e_after = tr.evaluate(xt, tt).unwrap().loss.to_f64();
    // The fixed-point results lie inside their derived intervals...
    assert!(
        b.e_before.contains(e),
        "E before {e} not in {:?}",
        b.e_before
    );
    assert!(b.w5.contains(w5), "w5 {w5} not in {:?}", b.w5);
    assert!(b.w1.contains(w1), "w1 {w1} not in {:?}", b.w1);
    assert!(
        b.e_after.contains(e_after),
        "E after {e_after} not in {:?}",
        b.e_after
    );
    // ...and so do the published values, so the fixed path matches the reference within the
    // derived tolerance (the interval's width).
    for (name, got, published, iv) in [
        ("E before", e, E_BEFORE, b.e_before),
        ("w5", w5, W5_AFTER, b.w5),
        ("w1", w1, W1_AFTER, b.w1),
        ("E after", e_after, E_AFTER, b.e_after),
    ] {
        let tol = iv.hi - iv.lo;
        assert!(
            iv.contains(published),
            "{name}: published {published} outside the derived interval {iv:?}"
        );
        assert!(
            (got - published).abs() <= tol,
            "{name}: {got} vs published {published}, tolerance {tol}"
        );
        eprintln!("{name}: fixed {got:.9}, published {published:.9}, |diff| {:.2e}, derived tolerance {tol:.2e}", (got - published).abs());
    }
}

#[test]
fn fixed_point_16_bit_matches_within_derived_tolerance() {
    // Everything in 16 bits: weights Q1.14, pre-activations Q2.13, activations and
    // gradients Q0.15, accumulators Q3.28.
    run_fixed(&Formats {
        input: q(16, 14),
        weight: q(16, 14),
        accum: q(32, 28),
        z: q(16, 13),
        act: q(16, 15),
        grad_out: q(16, 15),
        grad_z: q(16, 15),
        grad_h: q(16, 15),
    });
}

#[test]
fn fixed_point_wide_weights_match_within_derived_tolerance() {
    // 32-bit weights (Q7.24) with 16-bit activations: the weight updates of the example
    // (3.6 steps of Q1.14 for w1) are resolved much more finely.
    run_fixed(&Formats {
        input: q(16, 15),
        weight: q(32, 24),
        accum: q(32, 30),
        z: q(16, 13),
        act: q(16, 15),
        grad_out: q(16, 15),
        grad_z: q(16, 15),
        grad_h: q(16, 15),
    });
}
