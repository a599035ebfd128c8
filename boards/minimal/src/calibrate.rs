//! The whole use of the core, shared by the firmware (`main.rs`) and the host test that runs
//! the same code (host-cli/host/tests/minimal_qemu.rs): only `hone_core`'s public API.
//!
//! 1. the exported model (`crate::model`, hone's Rust export) and a training memory sized by
//!    its plan at compile time (`ARENA_WORDS`);
//! 2. raw readings quantized by the core's integer path (`reading::ReadingScale`);
//! 3. a few `Trainer::step` and `Trainer::evaluate` calls;
//! 4. one guarded session, `guard::calibrate`, against the factory blob;
//! 5. the checkpoint committed to the A/B `store::Store` (here on the core's simulated flash;
//!    a product passes its own `embedded-storage` NOR flash driver).
//!
//! Every result goes to `out` as a named byte string, so device and host can be compared.

use hone_core::blob::{self, ChannelScale};
use hone_core::guard::{self, GuardConfig, Verdict};
use hone_core::layer::loss::Target;
use hone_core::layer::Tensor;
use hone_core::model::ModelDesc;
use hone_core::num::Raw;
use hone_core::reading::ReadingScale;
use hone_core::store::{sim::SimFlash, Store};
use hone_core::train::Trainer;
use hone_core::Error;

use crate::model::{
    ARENA_WORDS, INPUT, INPUT_FORMAT, LAYERS, LOSS, MODEL_BLOB, PARAMS, PLAN, SCALING, TRAIN,
};

/// Samples: raw probe counts and soil temperature in whole °C. Synthetic values (a sweep of
/// the probe's range), not measurements: this is a demonstration of the calls.
const SAMPLES: usize = 10;
/// Samples trained on; the rest are held back for the guard.
const TRAIN_SAMPLES: usize = 8;

fn reading(i: usize) -> (i32, i32) {
    let i = i as i32;
    (1700 + 90 * i, 12 + (i * 7) % 13)
}

/// Runs the example; `out(name, bytes)` receives each result.
///
/// # Errors
/// Any error of the core.
pub fn run(out: &mut dyn FnMut(&str, &[u8])) -> Result<(), Error> {
    // 1. The model and its training memory.
    let desc = ModelDesc::new(INPUT, INPUT_FORMAT, &LAYERS, LOSS, TRAIN)?;
    let mut arena = [0u32; ARENA_WORDS];
    let mut t = Trainer::new(&desc, &PLAN, &mut arena, &PARAMS)?;

    // 2. Readings to inputs, in integers. The target is a synthetic linear function of the
    // counts, quantized into the last layer's output format by the same integer path.
    let probe = ReadingScale::new(SCALING[0], INPUT_FORMAT)?;
    let temp = ReadingScale::new(SCALING[1], INPUT_FORMAT)?;
    let out_fmt = LAYERS[LAYERS.len() - 1].out;
    let truth = ReadingScale::new(
        ChannelScale {
            offset: 2100.0,
            gain: -0.0025,
        },
        out_fmt,
    )?;
    let mut x = [0i16; 2 * SAMPLES];
    let mut y = [0i16; SAMPLES];
    for i in 0..SAMPLES {
        let (counts, celsius) = reading(i);
        // Saturated to the input word (i16 for this model) by `quantize`.
        x[2 * i] = probe.quantize(counts).0 as i16;
        x[2 * i + 1] = temp.quantize(celsius).0 as i16;
        y[i] = truth.quantize(counts).0 as i16;
    }
    let mut bytes = [0u8; 4 * SAMPLES];
    for (b, v) in bytes.chunks_exact_mut(2).zip(x.iter()) {
        b.copy_from_slice(&v.to_le_bytes());
    }
    out("inputs", &bytes);
    let sample = |i: usize| {
        (
            Tensor {
                raw: Raw::I16(&x[2 * i..2 * i + 2]),
                fmt: INPUT_FORMAT,
            },
            Target::Values(Tensor {
                raw: Raw::I16(&y[i..i + 1]),
                fmt: out_fmt,
            }),
        )
    };

    // 3. Plain calls: evaluate one held-back sample, train on one sample.
    let (hx, hy) = sample(SAMPLES - 1);
    out("evaluate_loss", &t.evaluate(hx, hy)?.loss.0.to_le_bytes());
    let (sx, sy) = sample(0);
    out("step_loss", &t.step(sx, sy)?.loss.0.to_le_bytes());

    // 4. One guarded session: three passes over the training samples.
    let factory = blob::decode(&MODEL_BLOB)?;
    let train = (0..3).flat_map(|_| (0..TRAIN_SAMPLES).map(sample));
    let holdout = (TRAIN_SAMPLES..SAMPLES).map(sample);
    let r = guard::calibrate(&mut t, train, holdout, &GuardConfig::DEFAULT, &factory)?;
    out("verdict", &[u8::from(r.verdict == Verdict::Accept)]);
    out("loss_before", &r.before.mean_loss.0.to_le_bytes());
    out("loss_after", &r.after.mean_loss.0.to_le_bytes());
    let mut weights = [0u8; 256];
    let mut n = 0;
    for k in 0..LAYERS.len() {
        if let Some(p) = t.params(k) {
            for raw in [p.weight, p.bias] {
                n += raw
                    .write_le(weights.get_mut(n..).unwrap_or(&mut []))
                    .unwrap_or(0);
            }
        }
    }
    out("weights", weights.get(..n).unwrap_or(&[]));

    // 5. Commit the result (accepted or rolled back) to the checkpoint store.
    let mut ckpt = [0u8; 2048];
    let len = t.write_checkpoint(&SCALING, &mut ckpt)?;
    let payload = ckpt.get(..len).unwrap_or(&[]);
    let mut store = Store::open(SimFlash::<8192, 1024, 4>::new(), 0, 8192).map_err(Error::Store)?;
    let committed = store.commit(payload).map_err(Error::Store)?;
    out("checkpoint", payload);
    out("checkpoint_seq", &committed.seq.to_le_bytes());
    Ok(())
}
