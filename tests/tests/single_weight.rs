//! The textbook single-weight case: a one-weight linear model `y = w·x`, trained by gradient
//! descent on squared loss, converges to the true slope.
//!
//! Outside reference: the closed form of gradient descent on a quadratic (any numerical
//! optimization text, e.g. Nocedal and Wright, "Numerical Optimization", ch. 3): with loss
//! `½·mean((w·x − a·x)²)` the gradient is `E[x²]·(w − a)`, so one step with learning rate
//! `1/E[x²]` lands on `a`. In fixed point the landing is off by the rounding of the update and
//! the gradient, which must stay within one step of the weight's Q-format. The data are our
//! own: inputs −1, −½, ½, 1 and the slope 0.7312.

use hone_core::model::{Loss, ModelDesc, Shape, TrainDesc, TrainMode};
use hone_core::num::{QScalar, Rounding};
use hone_tests::{dense, q, run_pair, Samples};

#[test]
fn one_weight_converges_within_one_step_of_its_format() {
    let slope = 0.7312;
    let xs = [-1.0, -0.5, 0.5, 1.0];
    let ex2: f64 = xs.iter().map(|x| x * x).sum::<f64>() / xs.len() as f64; // 0.625
    let w_fmt = q(16, 14); // Q1.14, step 2^-14
    let out = q(32, 28);
    let layers = [dense(1, TrainMode::WeightsOnly, w_fmt, q(32, 28), out, out)];
    for mode in [Rounding::NearestEven, Rounding::Stochastic] {
        let mut t = TrainDesc::sgd(QScalar::from_f64(1.0 / ex2, 16).unwrap());
        t.batch = xs.len() as u16; // full-batch gradient descent
        t.rounding.updates = mode;
        t.rounding.gradients = mode;
        let desc =
            ModelDesc::new(Shape::vector(1), q(16, 14), &layers, Loss::SquaredError, t).unwrap();
        let data = Samples {
            x: xs.iter().map(|&x| vec![x]).collect(),
            y: xs.iter().map(|&x| vec![slope * x]).collect(),
            label: Vec::new(),
        };
        for start in [-1.5, 0.0, 1.9] {
            let params = vec![(vec![start], vec![0.0])];
            let r = run_pair(&desc, &params, &data, &data, 12, 1);
            let w = r.fixed_params[0].0[0];
            let step = w_fmt.step();
            assert!(
                (w - slope).abs() <= step,
                "{mode:?} from {start}: w = {w}, slope {slope}, |diff| {} > one step {step}",
                (w - slope).abs()
            );
            // The float twin lands on the slope to rounding error of f64.
            assert!(
                r.float_loss.last().unwrap() < &1e-12,
                "{mode:?}: float loss {:?}",
                r.float_loss.last()
            );
        }
    }
}
