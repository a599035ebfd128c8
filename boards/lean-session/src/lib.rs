//! The lean build's session: a 2-8-1 dense model with ReLU, trained with plain SGD on squared
//! error, the smallest useful training build of the core (see the lean firmware's crate docs,
//! `boards/lean/src/main.rs`).
//!
//! This crate is compiled twice: into the firmware, and into the host (`hone device verify
//! --board microbit-lean`), which runs [`run`] with the core compiled for the host and compares
//! every printed line, so the device's weights are checked bit for bit against the host's.
//!
//! Everything is drawn from the core's seeded generator in one fixed order: the initial
//! weights, then the samples. The task is a two-input linear calibration, t = 0.6·x0 − 0.3·x1
//! + 0.1, computed in integers so that both sides get the same targets.

#![no_std]
#![forbid(unsafe_code)]
#![deny(missing_docs)]

use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::{
    LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
};
use hone_core::num::{QFormat, QScalar, Raw, Rng, Word};
use hone_core::plan::Plan;
use hone_core::train::{LayerParams, Trainer};
use hone_core::Error;

/// Inputs, activations, gradients and targets: Q3.12 (step 2^-12, range [−8, 8)).
pub const ACT: QFormat = QFormat::new_unchecked(Word::I16, 12);
/// Weights and biases: Q3.12, accumulated with 24 fraction bits.
pub const PARAM: ParamFormats = ParamFormats::plain(QFormat::new_unchecked(Word::I16, 12), 24);
/// Hidden units.
pub const HIDDEN: u16 = 8;
/// The model's input.
pub const INPUT: Shape = Shape::vector(2);
/// The layers: dense, ReLU, dense.
pub const LAYERS: [LayerDesc; 3] = [
    dense(HIDDEN),
    LayerDesc::simple(LayerKind::Relu, ACT, ACT),
    dense(1),
];
/// Plain SGD, learning rate 26/256 ≈ 0.10, batch 4.
pub const TRAIN: TrainDesc = {
    let mut t = TrainDesc::sgd(QScalar { raw: 26, frac: 8 });
    t.batch = 4;
    t.seed = 7;
    t
};
/// The memory plan, checked at compile time: a kind this build leaves out would fail here.
pub const PLAN: Plan = match Plan::new(INPUT, &LAYERS, Loss::SquaredError, &TRAIN) {
    Ok(p) => p,
    Err(_) => panic!("the lean model does not plan"),
};
/// Words of the training arena.
pub const ARENA_WORDS: usize = PLAN.ram_words();
/// Reference samples.
pub const SAMPLES: usize = 32;
/// Passes over the samples.
pub const PASSES: u32 = 40;
/// Seed of the generator that draws weights and samples.
pub const SEED: u64 = 2026;

const fn dense(units: u16) -> LayerDesc {
    LayerDesc {
        kind: LayerKind::Dense { units },
        mode: TrainMode::Full,
        weight: PARAM,
        bias: PARAM,
        out: ACT,
        grad: ACT,
    }
}

/// A value uniform over [−half, half) steps.
fn draw(rng: &mut Rng, half: u32) -> i16 {
    (rng.below(2 * u64::from(half)) as i32 - half as i32) as i16
}

/// Loss of the model before and after training, as the core's raw sums of the per-sample loss
/// (24 fraction bits).
pub struct Summary {
    /// Sum of the samples' losses before training.
    pub before: i64,
    /// Sum after training.
    pub after: i64,
}

/// Every call into the core, each kept out of line so that the size figures can attribute the
/// engine's code: the host's symbol sizing counts this module as engine code, as it counts the
/// full firmware's `hone_fw::train::engine` wrappers.
pub mod engine {
    use super::{Error, LayerParams, ModelDesc, Target, Tensor, Trainer, INPUT, LAYERS, PLAN};
    use super::{ACT, TRAIN};
    use hone_core::model::Loss;

    /// The checked description.
    #[inline(never)]
    pub fn desc() -> Result<ModelDesc, Error> {
        // `PLAN` was made at compile time from these parts, which checked them.
        ModelDesc::new_planned(INPUT, ACT, &LAYERS, Loss::SquaredError, TRAIN, &PLAN)
    }

    /// A trainer over `arena`.
    #[inline(never)]
    pub fn trainer<'a>(
        desc: &'a ModelDesc,
        arena: &'a mut [u32],
        init: &'a [LayerParams<'a>],
    ) -> Result<Trainer<'a>, Error> {
        Trainer::new_planned(desc, &PLAN, arena, init)
    }

    /// One training step; returns the sample's raw loss.
    #[inline(never)]
    pub fn step(tr: &mut Trainer<'_>, x: Tensor<'_>, t: Target<'_>) -> Result<i64, Error> {
        Ok(tr.step(x, t)?.loss.0)
    }

    /// The loss of one sample without training.
    #[inline(never)]
    pub fn evaluate(tr: &mut Trainer<'_>, x: Tensor<'_>, t: Target<'_>) -> Result<i64, Error> {
        Ok(tr.evaluate(x, t)?.loss.0)
    }

    /// Applies a pending partial batch.
    #[inline(never)]
    pub fn flush(tr: &mut Trainer<'_>) -> bool {
        tr.flush()
    }

    /// The trained parameters of layer `k`.
    #[inline(never)]
    pub fn params<'t>(tr: &'t Trainer<'_>, k: usize) -> Option<LayerParams<'t>> {
        tr.params(k)
    }
}

/// Draws the model and samples, trains, and hands every trained tensor to `emit` (its name and
/// values) in layer order.
///
/// # Errors
/// The core's errors (none are expected for this fixed model).
pub fn run(arena: &mut [u32], mut emit: impl FnMut(&str, &[i16])) -> Result<Summary, Error> {
    let desc = engine::desc()?;
    let mut rng = Rng::new(SEED);
    // Initial weights uniform over [−0.5, 0.5), biases zero.
    let mut w0 = [0i16; 2 * HIDDEN as usize];
    let mut w2 = [0i16; HIDDEN as usize];
    for w in w0.iter_mut().chain(w2.iter_mut()) {
        *w = draw(&mut rng, 2048);
    }
    let (b0, b2) = ([0i16; HIDDEN as usize], [0i16; 1]);
    let init = [
        LayerParams {
            weight: Raw::I16(&w0),
            bias: Raw::I16(&b0),
        },
        LayerParams::NONE,
        LayerParams {
            weight: Raw::I16(&w2),
            bias: Raw::I16(&b2),
        },
    ];
    // Inputs uniform over [−1, 1); targets 0.6·x0 − 0.3·x1 + 0.1, rounded toward zero.
    let mut xs = [[0i16; 2]; SAMPLES];
    let mut ts = [[0i16; 1]; SAMPLES];
    for (x, t) in xs.iter_mut().zip(ts.iter_mut()) {
        *x = [draw(&mut rng, 4096), draw(&mut rng, 4096)];
        let (x0, x1) = (i32::from(x[0]), i32::from(x[1]));
        t[0] = ((6 * x0 - 3 * x1) / 10 + 410) as i16;
    }
    let mut tr = engine::trainer(&desc, arena, &init)?;
    let sample = |i: usize| {
        (
            Tensor {
                raw: Raw::I16(&xs[i]),
                fmt: ACT,
            },
            Target::Values(Tensor {
                raw: Raw::I16(&ts[i]),
                fmt: ACT,
            }),
        )
    };
    let loss = |tr: &mut Trainer<'_>| -> Result<i64, Error> {
        let mut sum = 0i64;
        for i in 0..SAMPLES {
            let (x, t) = sample(i);
            sum += engine::evaluate(tr, x, t)?;
        }
        Ok(sum)
    };
    let before = loss(&mut tr)?;
    for _ in 0..PASSES {
        for i in 0..SAMPLES {
            let (x, t) = sample(i);
            engine::step(&mut tr, x, t)?;
        }
    }
    engine::flush(&mut tr);
    let after = loss(&mut tr)?;
    for (k, name) in [(0, ["w0", "b0"]), (2, ["w2", "b2"])] {
        let Some(p) = engine::params(&tr, k) else {
            continue;
        };
        for (raw, name) in [(p.weight, name[0]), (p.bias, name[1])] {
            if let Raw::I16(v) = raw {
                emit(name, v);
            }
        }
    }
    Ok(Summary { before, after })
}
