//! Outside reference: the UCI iris table (Fisher 1936; UCI Machine Learning Repository), as
//! shipped inside the `linfa-datasets` crate (feature `iris`, 150 rows, 4 features, 3
//! classes).
//!
//! A 4-8-3 MLP trained entirely in 16-bit fixed point reaches a held-out accuracy within 2
//! percentage points of its f64 twin, trained from the same start on the same samples in the
//! same order, and both reach at least 90 %.

use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, Shape, TrainDesc, TrainMode};
use hone_core::num::{QScalar, RoundingPlan};
use hone_tests::{dense, init_params, iris_split, q, run_pair};

#[test]
fn sixteen_bit_mlp_tracks_its_float_twin() {
    let (train, test) = iris_split(2024);
    // 16-bit everywhere the network propagates: inputs Q3.12, weights Q3.12, activations
    // Q4.11, gradients Q1.14; 32-bit gradient accumulators (Q3.28).
    let (w, acc, act, grad) = (q(16, 12), q(32, 28), q(16, 11), q(16, 14));
    let layers = [
        dense(8, TrainMode::Full, w, acc, act, grad),
        LayerDesc::simple(LayerKind::Relu, act, grad),
        dense(3, TrainMode::Full, w, acc, act, grad),
    ];
    let mut t = TrainDesc::sgd(QScalar::from_f64(0.05, 16).unwrap());
    t.rounding = RoundingPlan::NEAREST;
    t.seed = 7;
    let desc = ModelDesc::new(
        Shape::vector(4),
        q(16, 12),
        &layers,
        Loss::SoftmaxCrossEntropy,
        t,
    )
    .unwrap();
    let params = init_params(&desc, 99);
    let r = run_pair(&desc, &params, &train, &test, 60, 5);
    let n = test.x.len() as f64;
    let (fixed_acc, float_acc) = (
        100.0 * r.fixed_correct as f64 / n,
        100.0 * r.float_correct as f64 / n,
    );
    eprintln!("iris held-out accuracy: fixed {fixed_acc:.1} %, float {float_acc:.1} %, gap {:.1} pp; final train loss fixed {:.4}, float {:.4}", (fixed_acc - float_acc).abs(), r.fixed_loss.last().unwrap(), r.float_loss.last().unwrap());
    assert!(float_acc >= 90.0, "float twin {float_acc} %");
    assert!(fixed_acc >= 90.0, "fixed point {fixed_acc} %");
    assert!(
        (fixed_acc - float_acc).abs() <= 2.0,
        "gap {} pp",
        (fixed_acc - float_acc).abs()
    );
    // Training really happened: the loss fell well below its first epoch.
    assert!(r.fixed_loss.last().unwrap() < &(0.5 * r.fixed_loss[0]));
}
