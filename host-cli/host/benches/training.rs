//! Host training speed: samples per second and multiply-accumulates per second of one
//! training step (forward, backward, update), fixed point beside the `f64` and `f32` float
//! twins, for the demo's soil-moisture model and a 784-32-3 dense model.
//!
//! Run with `cargo bench -p hone-host --bench training`. Each figure is the median of several
//! timed rounds after a warm-up; MACs per step come from the core's plan
//! (`Plan::training_macs`). Inputs are seeded pseudo-random vectors: speed does not depend on
//! their values, except through stochastic rounding, which these models do not use.

use std::hint::black_box;
use std::time::Instant;

use hone_core::float::{FloatParams, FloatTarget, Real, Twin};
use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::{
    LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
};
use hone_core::num::{QFormat, QScalar, Rng, Word};
use hone_core::plan::Plan;
use hone_core::train::Trainer;
use hone_host::sim::{OwnedRaw, QuantParams};

const ROUNDS: usize = 7;

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Times `f` (which runs `n` steps) over several rounds; returns the median steps per second.
fn rate(n: usize, mut f: impl FnMut()) -> f64 {
    f(); // warm-up
    let mut rates = Vec::new();
    for _ in 0..ROUNDS {
        let t = Instant::now();
        f();
        rates.push(n as f64 / t.elapsed().as_secs_f64());
    }
    median(rates)
}

struct Case {
    name: &'static str,
    desc: ModelDesc,
    params: Vec<(Vec<f64>, Vec<f64>)>,
    x: Vec<Vec<f64>>,
    y: Vec<Vec<f64>>,
    labels: Vec<u16>,
}

fn q(word: Word, frac: u8) -> QFormat {
    QFormat::new(word, frac).expect("valid format")
}

fn dense(units: u16, value: QFormat, out: QFormat) -> LayerDesc {
    let p = ParamFormats {
        value,
        master: None,
        accum: q(Word::I32, 24),
    };
    LayerDesc {
        kind: LayerKind::Dense { units },
        mode: TrainMode::Full,
        weight: p,
        bias: p,
        out,
        grad: q(Word::I16, 14),
    }
}

fn random(rng: &mut Rng, n: usize, scale: f64) -> Vec<f64> {
    (0..n)
        .map(|_| scale * (2.0 * (rng.next_u32() as f64 / 4294967296.0) - 1.0))
        .collect()
}

fn case(name: &'static str, layers: &[LayerDesc], input: u16, loss: Loss, samples: usize) -> Case {
    let mut train = TrainDesc::sgd(QScalar::from_f64(0.01, 24).expect("lr"));
    train.batch = 8;
    train.momentum = QScalar::from_f64(0.9, 24).expect("momentum");
    let desc = ModelDesc::new(Shape::vector(input), q(Word::I16, 12), layers, loss, train)
        .expect("valid model");
    let params = hone_host::train::glorot_init(&desc, 1).expect("init");
    let mut rng = Rng::new(7);
    let outputs = hone_core::model::shapes(desc.input, &desc.layers, desc.loss)
        .expect("shapes")
        .output
        .size() as usize;
    let x = (0..samples)
        .map(|_| random(&mut rng, input as usize, 1.0))
        .collect();
    let y = (0..samples)
        .map(|_| random(&mut rng, outputs, 0.5))
        .collect();
    let labels = (0..samples)
        .map(|_| (rng.next_u32() % outputs as u32) as u16)
        .collect();
    Case {
        name,
        desc,
        params,
        x,
        y,
        labels,
    }
}

fn fixed_rate(c: &Case) -> f64 {
    let plan = Plan::of(&c.desc).expect("plan");
    let mut arena = vec![0u32; plan.ram_words()];
    let (qp, _) = QuantParams::quantize(&c.desc, &c.params).expect("quantize");
    let views = qp.views();
    let mut t = Trainer::new(&c.desc, &plan, &mut arena, &views).expect("trainer");
    let fx = c.desc.input_format;
    let fo = c.desc.layers.last().expect("layers").out;
    let xq: Vec<OwnedRaw> =
        c.x.iter()
            .map(|x| OwnedRaw::quantize(x, fx).expect("finite").0)
            .collect();
    let yq: Vec<OwnedRaw> =
        c.y.iter()
            .map(|y| OwnedRaw::quantize(y, fo).expect("finite").0)
            .collect();
    rate(c.x.len(), || {
        for i in 0..c.x.len() {
            let target = match c.desc.loss {
                Loss::SquaredError => Target::Values(Tensor {
                    raw: yq[i].raw(),
                    fmt: fo,
                }),
                Loss::SoftmaxCrossEntropy => Target::Class(c.labels[i]),
            };
            black_box(
                t.step(
                    Tensor {
                        raw: xq[i].raw(),
                        fmt: fx,
                    },
                    target,
                )
                .expect("step"),
            );
        }
    })
}

fn float_rate<R: Real>(c: &Case) -> f64 {
    let plan = Plan::new_float(
        c.desc.input,
        &c.desc.layers,
        c.desc.loss,
        &c.desc.train,
        R::BYTES,
    )
    .expect("plan");
    let mut arena = vec![R::ZERO; (plan.ram_bytes / R::BYTES) as usize];
    let params: Vec<(Vec<R>, Vec<R>)> = c
        .params
        .iter()
        .map(|(w, b)| {
            (
                w.iter().map(|&v| R::from_f64(v)).collect(),
                b.iter().map(|&v| R::from_f64(v)).collect(),
            )
        })
        .collect();
    let views: Vec<FloatParams<'_, R>> = params
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut t = Twin::new(&c.desc, &plan, &mut arena, &views).expect("twin");
    let x: Vec<Vec<R>> =
        c.x.iter()
            .map(|v| v.iter().map(|&a| R::from_f64(a)).collect())
            .collect();
    let y: Vec<Vec<R>> =
        c.y.iter()
            .map(|v| v.iter().map(|&a| R::from_f64(a)).collect())
            .collect();
    rate(c.x.len(), || {
        for i in 0..c.x.len() {
            let target = match c.desc.loss {
                Loss::SquaredError => FloatTarget::Values(&y[i]),
                Loss::SoftmaxCrossEntropy => FloatTarget::Class(c.labels[i]),
            };
            black_box(t.step(&x[i], target).expect("step"));
        }
    })
}

fn main() {
    let act = q(Word::I16, 11);
    // The demo's soil-moisture model: 2 inputs, 8 tanh units, 1 output, all 16-bit.
    let soil = case(
        "soil-moisture 2-8-1 (demo)",
        &[
            dense(8, q(Word::I16, 14), act),
            LayerDesc::simple(LayerKind::Tanh, q(Word::I16, 14), q(Word::I16, 14)),
            dense(1, q(Word::I16, 14), act),
        ],
        2,
        Loss::SquaredError,
        4096,
    );
    // A 784-32-3 dense classifier (an MNIST-sized input), 16-bit.
    let big = case(
        "dense 784-32-3",
        &[
            dense(32, q(Word::I16, 14), act),
            LayerDesc::simple(LayerKind::Relu, act, q(Word::I16, 14)),
            dense(3, q(Word::I16, 14), act),
        ],
        784,
        Loss::SoftmaxCrossEntropy,
        256,
    );
    println!(
        "{:<28} {:<22} {:>14} {:>14} {:>12}",
        "model", "arithmetic", "samples/s", "MMAC/s", "MACs/sample"
    );
    for c in [&soil, &big] {
        let macs = Plan::of(&c.desc).expect("plan").training_macs() as f64;
        for (label, r) in [
            ("fixed point (i16)", fixed_rate(c)),
            ("float twin f64", float_rate::<f64>(c)),
            ("float twin f32", float_rate::<f32>(c)),
        ] {
            println!(
                "{:<28} {:<22} {:>14.0} {:>14.1} {:>12}",
                c.name,
                label,
                r,
                r * macs / 1e6,
                macs
            );
        }
    }
}
