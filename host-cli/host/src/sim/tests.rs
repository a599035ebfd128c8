use super::*;

const ONE_DENSE: &str = r#"
loss = "squared-error"
[input]
channels = 2
[[layer]]
kind = "dense"
units = 1
[train]
epochs = 1
learning-rate = 0.01
[data]
target = "y"
"#;

/// One step of a 2-1 dense model on `target`: the core's loss (against the target as
/// quantized into the output format) and the host's loss against the true target.
fn step_losses(target: f64) -> (f64, f64) {
    let cfg =
        crate::config::Config::parse(std::path::Path::new("t.toml"), ONE_DENSE).expect("config");
    // Every auto format Q3.12: outputs and targets up to ±8.
    let desc = cfg.model_desc_with(|_| 12).expect("description");
    let float = vec![(vec![0.5, -0.25], vec![0.1])];
    let (params, _) = QuantParams::quantize(&desc, &float).expect("quantizes");
    let plan = Plan::of(&desc).expect("plans");
    let mut arena = vec![0u32; plan.ram_words()];
    let views = params.views();
    let mut t = Trainer::new(&desc, &plan, &mut arena, &views).expect("trainer");
    let (x, _) = OwnedRaw::quantize(&[1.0, 2.0], desc.input_format).expect("input");
    let out = desc.layers[0].out;
    let (y, _) = OwnedRaw::quantize(&[target], out).expect("target");
    let o = t
        .step(
            Tensor {
                raw: x.raw(),
                fmt: desc.input_format,
            },
            Target::Values(Tensor {
                raw: y.raw(),
                fmt: out,
            }),
        )
        .expect("steps");
    (o.loss.to_f64(), squared_error_true(t.output(), &[target]))
}

#[test]
fn host_loss_matches_the_core_until_the_target_saturates() {
    // 0.5·1 − 0.25·2 + 0.1 = 0.1; against 0.375 (exact in Q3.12) the loss is ½·0.275²
    // on both sides, so the output read after a step is the step's own forward output.
    let (core, host) = step_losses(0.375);
    assert!((core - 0.5 * 0.275f64.powi(2)).abs() < 1e-3, "{core}");
    assert!((host - core).abs() < 1e-6, "{host} vs {core}");
    // A target of 100 saturates the Q3.12 output format at 8: the core sees ½·(8 − 0.1)²,
    // the host counts the true ½·(100 − 0.1)².
    let (core, host) = step_losses(100.0);
    assert!((core - 0.5 * 7.9f64.powi(2)).abs() < 1e-2, "{core}");
    assert!((host - 0.5 * 99.9f64.powi(2)).abs() < 1e-2, "{host}");
}
