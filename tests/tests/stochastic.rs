//! Stochastic rounding as defined by Gupta, Agrawal, Gopalakrishnan and Narayanan, "Deep
//! Learning with Limited Numerical Precision", ICML 2015, eq. 3: round up with probability
//! equal to the discarded fraction of a step.
//!
//! 1. Unbiased: E[round(x)] = x. Checked statistically with a stated bound.
//! 2. The paper's central finding, in small: with few fraction bits and a small learning
//!    rate, round-to-nearest stalls because updates smaller than half a step are lost, while
//!    stochastic rounding keeps reducing the loss (their figure 2 shows this for MNIST with
//!    14 and fewer fraction bits). Reproduced here on the UCI iris table from the
//!    `linfa-datasets` crate.

use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, Shape, TrainDesc, TrainMode};
use hone_core::num::round::{div_round, shift_right};
use hone_core::num::{QScalar, Rng, Rounding, RoundingPlan};
use hone_tests::{dense, init_params, iris_split, q, run_pair};

/// Draws of the stochastic rounding of `n / d`.
const N: i64 = 200_000;

/// Checks that the mean of [`N`] draws of `round` lies within `bound` of `n / d`, and first that
/// the bound would catch a rounder that always rounds down or always up on this value.
fn check_unbiased(name: &str, n: i128, d: i128, bound: f64, mut round: impl FnMut() -> i64) {
    let exact = n as f64 / d as f64;
    // The biased rounders' means, exactly: ⌊x⌋ (always down) and ⌊x⌋ + 1 (always up).
    let floor = n.div_euclid(d);
    let (down, up) = (floor as f64, (floor + 1) as f64);
    assert!(
        (down - exact).abs() > bound && (up - exact).abs() > bound,
        "{name}: the fraction of {exact} is too close to 0 or 1 for the bound to see a bias"
    );
    let sum: i128 = (0..N).map(|_| round() as i128).sum();
    let mean = sum as f64 / N as f64;
    assert!(
        (mean - exact).abs() <= bound,
        "{name}: mean {mean}, exact {exact}"
    );
}

#[test]
fn stochastic_rounding_is_unbiased() {
    // Each rounding of x is ⌊x⌋ plus a Bernoulli draw with p = x − ⌊x⌋, so one draw has
    // variance p(1 − p) ≤ 1/4 and the mean of N independent draws has standard deviation at
    // most 0.5/√N. With N = 200 000 that is 1.12e-3; the test allows 6 standard deviations
    // (6.7e-3), which a correct rounder exceeds with probability below 2e-9 per case (normal
    // tail). A rounder that always rounds down has mean ⌊x⌋, off by the fraction x − ⌊x⌋; one
    // that always rounds up is off by 1 − (x − ⌊x⌋). Every case keeps both above the bound
    // (`check_unbiased` checks that first), so either biased rounder fails every case.
    let bound = 6.0 * 0.5 / (N as f64).sqrt();
    let mut rng = Rng::new(2015);
    // v / 2^s, fractions 0.25, 0.75, 0.375, 0.565, 0.367, 0.437, 0.333 and 0.667; the last two
    // reach the largest shift the engine makes (62).
    for (v, s) in [
        (1i64, 2u32),
        (3, 2),
        (-5, 3),
        (1_000_003, 10),
        (-77_777, 7),
        (12_345_678_901, 33),
        (0x5555_5555_5555_5555, 62),
        (-0x5555_5555_5555_5555, 62),
    ] {
        check_unbiased(&format!("{v} >> {s}"), v as i128, 1i128 << s, bound, || {
            shift_right(v, s, Rounding::Stochastic, &mut rng)
        });
    }
    // The same for division by a batch size that is not a power of two: fractions 0.333,
    // 0.667, 0.286 and 0.833.
    for (n, d) in [(10i64, 3i64), (-10, 3), (1_000_001, 7), (5, 6)] {
        check_unbiased(&format!("{n} / {d}"), n as i128, d as i128, bound, || {
            div_round(n, d, Rounding::Stochastic, &mut rng)
        });
    }
    // Nearest rounding is biased on the same values (a check that the test can fail).
    let biased: i128 = (0..1000)
        .map(|_| shift_right(1, 2, Rounding::NearestEven, &mut rng) as i128)
        .sum();
    assert_eq!(biased, 0, "1/4 rounds to 0 every time under nearest");
}

#[test]
fn nearest_stalls_where_stochastic_keeps_learning() {
    let (train, test) = iris_split(2015);
    // Weights Q7.8 (8 fraction bits, step 1/256) and a small learning rate: most updates
    // lr·g are below half a step.
    let (w, acc, act, grad) = (q(16, 8), q(32, 24), q(16, 11), q(16, 14));
    let layers = [
        dense(8, TrainMode::Full, w, acc, act, grad),
        LayerDesc::simple(LayerKind::Relu, act, grad),
        dense(3, TrainMode::Full, w, acc, act, grad),
    ];
    let init = |desc: &ModelDesc| init_params(desc, 42);
    let run = |updates: Rounding| {
        let mut t = TrainDesc::sgd(QScalar::from_f64(0.001, 20).unwrap());
        t.rounding = RoundingPlan {
            activations: Rounding::NearestEven,
            gradients: Rounding::NearestEven,
            updates,
        };
        t.seed = 3;
        let desc = ModelDesc::new(
            Shape::vector(4),
            q(16, 12),
            &layers,
            Loss::SoftmaxCrossEntropy,
            t,
        )
        .unwrap();
        let r = run_pair(&desc, &init(&desc), &train, &test, 60, 8);
        (desc, r)
    };
    let (desc, nearest) = run(Rounding::NearestEven);
    let (_, stochastic) = run(Rounding::Stochastic);
    let lost_share = |r: &hone_tests::PairResult| r.lost_updates as f64 / r.update_writes as f64;
    let (n0, n1) = (nearest.fixed_loss[0], *nearest.fixed_loss.last().unwrap());
    let (s0, s1) = (
        stochastic.fixed_loss[0],
        *stochastic.fixed_loss.last().unwrap(),
    );
    eprintln!(
        "nearest: loss {n0:.4} -> {n1:.4}, {:.1} % of updates lost; stochastic: loss {s0:.4} -> {s1:.4}, {:.1} % lost; float twin {:.4} -> {:.4}",
        100.0 * lost_share(&nearest),
        100.0 * lost_share(&stochastic),
        nearest.float_loss[0],
        nearest.float_loss.last().unwrap()
    );
    // Nearest: every update is below half a step, so not one weight moves in 6 300 steps and
    // the loss stays where it started. (About half the exact updates are zero anyway —
    // inactive ReLU units — which is why the lost share is near one half, not one.)
    for (k, (w, b)) in init(&desc).iter().enumerate() {
        let l = desc.layers[k];
        let quantized = |v: &Vec<f64>, f: hone_core::num::QFormat| {
            v.iter()
                .map(|&x| f.to_f64(f.from_f64_saturating(x).unwrap().0))
                .collect::<Vec<_>>()
        };
        assert_eq!(
            nearest.fixed_params[k].0,
            quantized(w, l.weight.value),
            "layer {k} weights moved under nearest rounding"
        );
        assert_eq!(
            nearest.fixed_params[k].1,
            quantized(b, l.bias.value),
            "layer {k} bias moved under nearest rounding"
        );
    }
    assert!(
        lost_share(&nearest) > 0.4,
        "nearest lost {}",
        lost_share(&nearest)
    );
    assert!((n1 - n0).abs() < 1e-9, "nearest should stall: {n0} -> {n1}");
    // Stochastic: the loss keeps falling, close to the float twin's.
    assert!(
        s1 < 0.5 * s0,
        "stochastic should keep learning: {s0} -> {s1}"
    );
    assert!(
        (s1 - stochastic.float_loss.last().unwrap()).abs() < 0.1,
        "stochastic {s1} vs float {:?}",
        stochastic.float_loss.last()
    );
}
