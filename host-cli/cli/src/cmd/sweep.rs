//! `hone sweep`: a grid of formats, rounding, learning rates and train modes, and its Pareto front.

use crate::*;

/// A train mode for the sweep's grid: one that trains something.
pub(crate) fn sweep_mode(m: ModeName) -> Result<TrainMode> {
    if m.0 == TrainMode::Frozen {
        bail!("--mode: {m} trains nothing; use full, bias-only or weights-only");
    }
    Ok(m.0)
}
/// A sweep learning rate must be positive and survive the description's learning-rate
/// format without saturating or rounding to zero.
pub(crate) fn check_sweep_lr(lr: f64, frac: u8) -> Result<f64> {
    if !lr.is_finite() || lr <= 0.0 {
        bail!("--lr: {lr} is not a positive learning rate");
    }
    match QScalar::from_f64(lr, frac) {
        Ok(q) if q.raw != 0 => Ok(lr),
        Ok(_) => bail!(
            "--lr: {lr} rounds to zero with {frac} fraction bits (the model's train.lr format); \
             the smallest step is {}",
            (-(frac as f64)).exp2()
        ),
        Err(_) => bail!("--lr: {lr} does not fit an i32 with {frac} fraction bits"),
    }
}
pub(crate) fn parse_word(bits: u32, what: &str) -> Result<Word> {
    Word::from_bits(bits)
        .ok_or_else(|| anyhow!("--{what}: {bits} bits is not a word size; use 8, 16 or 32"))
}
/// Refuses a grid list that repeats a value: the repeated rows would be marked on the front
/// twice.
pub(crate) fn no_repeats<T: PartialEq + std::fmt::Display>(
    option: &str,
    values: &[T],
) -> Result<()> {
    for (i, v) in values.iter().enumerate() {
        if values[..i].contains(v) {
            bail!("--{option}: {v} is given twice; give each value once");
        }
    }
    Ok(())
}
pub(crate) fn sweep(a: SweepArgs) -> Result<Option<CheckFailed>> {
    use hone_host::sweep::{plot, run, table, Grid};
    no_repeats("weights", &a.weights)?;
    no_repeats("activations", &a.activations)?;
    no_repeats("frac-delta", &a.frac_delta)?;
    no_repeats("rounding", &a.rounding)?;
    no_repeats("lr", &a.lr)?;
    no_repeats("mode", &a.mode)?;
    // The settings first, so a mistake costs no data loading.
    let modes = a
        .mode
        .iter()
        .map(|&m| sweep_mode(m))
        .collect::<Result<_>>()?;
    let base = load_base(&a.model, a.calib.as_ref().unwrap_or(&a.train))?;
    let train = prepare(&base, &a.train)?;
    let eval = prepare(&base, &a.eval)?;
    let grid = Grid {
        weight_words: a
            .weights
            .iter()
            .map(|&b| parse_word(b, "weights"))
            .collect::<Result<_>>()?,
        activation_words: a
            .activations
            .iter()
            .map(|&b| parse_word(b, "activations"))
            .collect::<Result<_>>()?,
        frac_deltas: a.frac_delta.clone(),
        roundings: a.rounding.iter().map(|r| r.0).collect(),
        learning_rates: a
            .lr
            .iter()
            .map(|&lr| check_sweep_lr(lr, base.quant.desc.train.lr.frac))
            .collect::<Result<_>>()?,
        modes,
    };
    let opts = RunOptions {
        epochs: a.epochs.unwrap_or(base.config.epochs()),
        order_seed: base.config.train().seed,
        per_step: false,
        probe: 0,
        shuffle: true,
    };
    let threads = a.jobs.map(|j| j as usize).unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    });
    let b = bar(0, "grid points");
    let points = run(
        &base.quant.desc,
        &base.quant.float_params,
        &grid,
        &train,
        &eval,
        &opts,
        threads,
        &|done, total| {
            b.set_length(total as u64);
            b.set_position(done as u64);
        },
    );
    b.finish_and_clear();
    let classification = train.is_classification();
    let t = table(&points, classification);
    if a.json {
        print_json(&points)?;
    } else {
        out!("{}", hone_report::report::render_text_table(&t));
        outln!("● on the Pareto front of training RAM against drift (|fixed − float| evaluation loss, % of float)");
        outln!("RAM B: the training memory alone, without the trainer object, stack and reserve that `hone plan` adds");
        outln!("base: the setting as the config and the quantizer chose it");
    }
    if let Some(dir) = &a.out {
        let files = vec![
            (
                "sweep.json".to_owned(),
                serde_json::to_string_pretty(&points)?.into_bytes(),
            ),
            ("sweep.svg".to_owned(), plot(&points).into_bytes()),
            (
                "sweep.txt".to_owned(),
                hone_report::report::render_text_table(&t).into_bytes(),
            ),
        ];
        for p in hone_report::fsutil::write_all_in(dir, &files)? {
            eprintln!("written: {}", p.display());
        }
    }
    if points.iter().all(|p| p.error.is_some()) {
        eprintln!(
            "check failed: none of the {} grid points ran, so there is nothing to compare; each \
             point's error says why",
            points.len()
        );
        return Ok(Some(CheckFailed));
    }
    Ok(None)
}
