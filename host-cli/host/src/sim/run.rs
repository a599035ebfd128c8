//! The side-by-side run itself: the fixed-point trainer and its float twin stepped together, and
//! their evaluation.

use super::*;

pub(super) fn stats_totals(s: &LayerStats) -> (u64, u64, u64, u64) {
    let all = [
        s.out,
        s.grad,
        s.weight,
        s.bias,
        s.accum_weight,
        s.accum_bias,
    ];
    let sat = all.iter().map(|t| t.saturations as u64).sum();
    let val = all.iter().map(|t| t.values as u64).sum();
    (
        sat,
        val,
        (s.weight.lost_updates + s.bias.lost_updates) as u64,
        (s.weight.values + s.bias.values) as u64,
    )
}

/// Divergence of the trained values from float.
#[derive(Clone, Debug, Default)]
pub(super) struct Divergence {
    /// RMS of |fixed − float| in steps of each value's format, over every trained value.
    pub(super) rms_steps: f64,
    /// Largest |fixed − float| in steps of its format.
    pub(super) max_steps: f64,
    /// Per trained tensor: layer, `weight` or `bias`, and `100 · RMS(fixed − float) /
    /// max(RMS(float), step)`.
    pub(super) relative: Vec<(usize, &'static str, f64)>,
}

impl Divergence {
    /// The largest relative divergence of any trained tensor, %.
    pub(super) fn worst_pct(&self) -> f64 {
        self.relative.iter().map(|r| r.2).fold(0.0, f64::max)
    }
}

/// Divergence of the trained values: in steps of each value's format, and per tensor relative
/// to the tensor's own magnitude. Frozen tensors are equal on both sides by construction and
/// are left out.
pub(super) fn divergence(
    desc: &ModelDesc,
    plan: &Plan,
    fixed: &Trainer<'_>,
    float: &Twin<'_, f64>,
) -> Divergence {
    let (mut sum, mut n, mut max) = (0f64, 0usize, 0f64);
    let mut relative = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        let (Some(q), Some(f)) = (fixed.params(k), float.params(k)) else {
            continue;
        };
        let s = plan.layers[k];
        for (name, raw, fv, fmt, trained) in [
            (
                "weight",
                q.weight,
                f.weight,
                l.weight.value,
                s.weight.is_some(),
            ),
            ("bias", q.bias, f.bias, l.bias.value, s.bias.is_some()),
        ] {
            if !trained || fv.is_empty() {
                continue;
            }
            let step = fmt.step();
            let (mut d2, mut f2) = (0f64, 0f64);
            for (i, &x) in fv.iter().enumerate() {
                let e = fmt.to_f64(raw.at(i)) - x;
                let d = (e / step).abs();
                sum += d * d;
                n += 1;
                max = max.max(d);
                d2 += e * e;
                f2 += x * x;
            }
            let m = fv.len() as f64;
            let scale = (f2 / m).sqrt().max(step);
            relative.push((k, name, 100.0 * (d2 / m).sqrt() / scale));
        }
    }
    Divergence {
        rms_steps: if n == 0 { 0.0 } else { (sum / n as f64).sqrt() },
        max_steps: max,
        relative,
    }
}

/// Loss and metrics of the fixed-point model and its float twin on one data set, every one
/// computed against the true targets (a target the output format cannot hold still counts
/// at its real value).
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct PairFigures {
    /// Mean loss, fixed point.
    pub fixed_loss: f64,
    /// Mean loss, float twin.
    pub float_loss: f64,
    /// Accuracy in % or RMSE in target units, fixed point.
    pub fixed_metric: f64,
    /// The same for the float twin.
    pub float_metric: f64,
    /// Mean absolute error in target units, fixed point (NaN for classification).
    pub fixed_mae: f64,
    /// The same for the float twin.
    pub float_mae: f64,
}

/// `½ Σ (y − t)²` of a fixed-point output against real targets: the core's squared-error
/// loss, but against the true targets rather than their quantized form.
pub(super) fn squared_error_true(y: Tensor<'_>, t: &[f64]) -> f64 {
    t.iter()
        .enumerate()
        .map(|(j, &t)| 0.5 * (y.fmt.to_f64(y.raw.at(j)) - t).powi(2))
        .sum()
}

/// Mean loss and metrics of both sides on `data` (no training, generators untouched).
pub(super) fn evaluate_both(
    fixed: &mut Trainer<'_>,
    float: &mut Twin<'_, f64>,
    data: &Prepared,
    in_fmt: QFormat,
) -> Result<PairFigures, SimError> {
    if data.is_empty() {
        return Ok(PairFigures {
            fixed_loss: f64::NAN,
            float_loss: f64::NAN,
            fixed_metric: f64::NAN,
            float_metric: f64::NAN,
            fixed_mae: f64::NAN,
            float_mae: f64::NAN,
        });
    }
    let (mut lq, mut lf, mut mq, mut mf, mut aq, mut af) = (0f64, 0f64, 0f64, 0f64, 0f64, 0f64);
    for i in 0..data.len() {
        let (x, t) = data.fixed(i, in_fmt);
        let oq = fixed.evaluate(x, t).map_err(|source| SimError::Sample {
            what: "sample",
            sample: i + 1,
            source,
        })?;
        let (xf, tf) = data.float(i);
        let of = float.evaluate(xf, tf).map_err(|source| SimError::Sample {
            what: "sample",
            sample: i + 1,
            source,
        })?;
        lf += of.loss;
        match &data.target {
            PreparedTargets::Classes(labels) => {
                lq += oq.loss.to_f64();
                mq += (oq.predicted == Some(labels[i])) as u8 as f64;
                mf += (of.predicted == Some(labels[i])) as u8 as f64;
            }
            PreparedTargets::Values { y, .. } => {
                let yq = fixed.output();
                lq += squared_error_true(yq, &y[i]);
                let m = y[i].len() as f64;
                for (j, &t) in y[i].iter().enumerate() {
                    let e = yq.fmt.to_f64(yq.raw.at(j)) - t;
                    mq += e * e / m;
                    aq += e.abs() / m;
                }
                let out = float.output();
                for (j, &t) in y[i].iter().enumerate() {
                    let e = out[j] - t;
                    mf += e * e / m;
                    af += e.abs() / m;
                }
            }
        }
    }
    let n = data.len() as f64;
    Ok(if data.is_classification() {
        PairFigures {
            fixed_loss: lq / n,
            float_loss: lf / n,
            fixed_metric: 100.0 * mq / n,
            float_metric: 100.0 * mf / n,
            fixed_mae: f64::NAN,
            float_mae: f64::NAN,
        }
    } else {
        PairFigures {
            fixed_loss: lq / n,
            float_loss: lf / n,
            fixed_metric: (mq / n).sqrt(),
            float_metric: (mf / n).sqrt(),
            fixed_mae: aq / n,
            float_mae: af / n,
        }
    })
}

/// Gradient SQNR on the first `probe` training samples, each probed on its own, in dB.
pub(super) fn grad_sqnr(
    desc: &ModelDesc,
    fixed: &mut Trainer<'_>,
    float: &mut Twin<'_, f64>,
    data: &Prepared,
    probe: usize,
) -> Result<Option<f64>, SimError> {
    let n = probe.min(data.len());
    if n == 0 {
        return Ok(None);
    }
    let in_fmt = desc.input_format;
    let (mut sig, mut noise) = (0f64, 0f64);
    for i in 0..n {
        fixed.probe_gradients(std::iter::once(data.fixed(i, in_fmt)))?;
        float.probe_gradients(std::iter::once(data.float(i)))?;
        for (k, l) in desc.layers.iter().enumerate() {
            let (Some(q), Some(f)) = (fixed.accumulators(k), float.accumulators(k)) else {
                continue;
            };
            let live = fixed.live_fracs(k).unwrap_or_default();
            let fw = QFormat {
                word: l.weight.accum.word,
                frac: live.accum_weight,
            };
            let fb = QFormat {
                word: l.bias.accum.word,
                frac: live.accum_bias,
            };
            for (raw, fv, fmt) in [(q.weight, f.weight, fw), (q.bias, f.bias, fb)] {
                for (i, &g) in fv.iter().enumerate() {
                    let e = fmt.to_f64(raw.at(i)) - g;
                    sig += g * g;
                    noise += e * e;
                }
            }
        }
        fixed.clear_probe();
        float.clear_probe();
    }
    Ok(match (sig > 0.0, noise > 0.0) {
        (false, _) => None,
        (true, false) => Some(f64::INFINITY),
        (true, true) => Some(10.0 * (sig / noise).log10()),
    })
}

/// Trains the fixed-point model and its float twin side by side. See the [module docs](self).
///
/// # Errors
/// A message for a model that does not plan, parameters that do not fit it, or a sample
/// that does not fit the model.
pub fn run_side_by_side(
    desc: &ModelDesc,
    init_fixed: &QuantParams,
    init_float: &[(Vec<f64>, Vec<f64>)],
    train: &Prepared,
    eval: &Prepared,
    opts: &RunOptions,
    progress: &mut dyn FnMut(Progress),
) -> Result<DriftRun, SimError> {
    let plan = Plan::of(desc).map_err(SimError::Plan)?;
    let fplan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 8)?;
    let mut arena = vec![0u32; plan.ram_words()];
    let mut farena = vec![0f64; fplan.ram_bytes as usize / 8];
    let views = init_fixed.views();
    let fviews: Vec<FloatParams<'_, f64>> = init_float
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut fixed =
        Trainer::new(desc, &plan, &mut arena, &views).map_err(SimError::start("fixed-point"))?;
    let mut float =
        Twin::new(desc, &fplan, &mut farena, &fviews).map_err(SimError::start("float"))?;
    let in_fmt = desc.input_format;
    let total = opts.epochs as u64 * train.len() as u64;
    let mut done = 0u64;
    let mut epochs = Vec::new();
    let mut steps = Vec::new();

    let e0 = evaluate_both(&mut fixed, &mut float, eval, in_fmt)?;
    let g0 = grad_sqnr(desc, &mut fixed, &mut float, train, opts.probe)?;
    // Before any step the weights differ by the quantization error alone.
    let d0 = divergence(desc, &plan, &fixed, &float);
    epochs.push(EpochDrift {
        epoch: 0,
        fixed_eval_loss: e0.fixed_loss,
        float_eval_loss: e0.float_loss,
        fixed_metric: e0.fixed_metric,
        float_metric: e0.float_metric,
        fixed_mae: e0.fixed_mae,
        float_mae: e0.float_mae,
        weight_rel_pct: d0.worst_pct(),
        weight_rms_steps: d0.rms_steps,
        weight_max_steps: d0.max_steps,
        grad_sqnr_db: g0,
        ..Default::default()
    });
    let mut prev = vec![(0u64, 0u64, 0u64, 0u64); desc.layers.len()];
    for epoch in 1..=opts.epochs {
        let order: Vec<usize> = if opts.shuffle {
            epoch_order(train.len(), epoch, opts.order_seed)
        } else {
            (0..train.len()).collect()
        };
        let (mut lq, mut lf) = (0f64, 0f64);
        for &i in &order {
            let (x, t) = train.fixed(i, in_fmt);
            let oq = fixed.step(x, t).map_err(|source| SimError::Sample {
                what: "training sample",
                sample: i + 1,
                source,
            })?;
            let (xf, tf) = train.float(i);
            // Regression losses count against the true targets, not their quantized form.
            let fixed_loss = match &train.target {
                PreparedTargets::Values { y, .. } => squared_error_true(fixed.output(), &y[i]),
                PreparedTargets::Classes(_) => oq.loss.to_f64(),
            };
            let of = float.step(xf, tf).map_err(|source| SimError::Sample {
                what: "training sample",
                sample: i + 1,
                source,
            })?;
            lq += fixed_loss;
            lf += of.loss;
            done += 1;
            if opts.per_step {
                let d = divergence(desc, &plan, &fixed, &float);
                steps.push(StepDrift {
                    step: done as u32,
                    fixed_loss,
                    float_loss: of.loss,
                    weight_rms_steps: d.rms_steps,
                    weight_max_steps: d.max_steps,
                });
            }
            if done.is_multiple_of(64) {
                progress(Progress { done, total });
            }
        }
        fixed.flush();
        float.flush();
        let n = train.len().max(1) as f64;
        let ev = evaluate_both(&mut fixed, &mut float, eval, in_fmt)?;
        let d = divergence(desc, &plan, &fixed, &float);
        let g = grad_sqnr(desc, &mut fixed, &mut float, train, opts.probe)?;
        let mut e = EpochDrift {
            epoch,
            fixed_train_loss: lq / n,
            float_train_loss: lf / n,
            fixed_eval_loss: ev.fixed_loss,
            float_eval_loss: ev.float_loss,
            fixed_metric: ev.fixed_metric,
            float_metric: ev.float_metric,
            fixed_mae: ev.fixed_mae,
            float_mae: ev.float_mae,
            weight_rel_pct: d.worst_pct(),
            weight_rms_steps: d.rms_steps,
            weight_max_steps: d.max_steps,
            grad_sqnr_db: g,
            ..Default::default()
        };
        for (k, p) in prev.iter_mut().enumerate() {
            let now = fixed.stats(k).map(stats_totals).unwrap_or_default();
            e.saturations += now.0 - p.0;
            e.values += now.1 - p.1;
            e.lost_updates += now.2 - p.2;
            e.updates += now.3 - p.3;
            *p = now;
        }
        epochs.push(e);
        progress(Progress { done, total });
    }
    let last = divergence(desc, &plan, &fixed, &float);
    let mut tensors = Vec::new();
    for k in 0..desc.layers.len() {
        let Some(s) = fixed.stats(k) else { continue };
        for (name, t) in [
            ("out", s.out),
            ("grad", s.grad),
            ("weight", s.weight),
            ("bias", s.bias),
            ("accum_weight", s.accum_weight),
            ("accum_bias", s.accum_bias),
        ] {
            // The core counts the first copy into a master among the tensor's saturations
            // (before any write is counted), so a tensor may have saturations without values.
            if t.values > 0 || t.saturations > 0 {
                tensors.push(TensorTotals {
                    layer: k,
                    tensor: name,
                    values: t.values as u64,
                    saturations: t.saturations as u64,
                    lost_updates: t.lost_updates as u64,
                    divergence_pct: last
                        .relative
                        .iter()
                        .find(|r| r.0 == k && r.1 == name)
                        .map(|r| r.2),
                });
            }
        }
    }
    let fixed_params = QuantParams {
        layers: (0..desc.layers.len())
            .map(|k| match fixed.params(k) {
                Some(p) => (OwnedRaw::from_raw(p.weight), OwnedRaw::from_raw(p.bias)),
                None => (OwnedRaw::I8(Vec::new()), OwnedRaw::I8(Vec::new())),
            })
            .collect(),
    };
    let float_params = (0..desc.layers.len())
        .map(|k| match float.params(k) {
            Some(p) => (p.weight.to_vec(), p.bias.to_vec()),
            None => (Vec::new(), Vec::new()),
        })
        .collect();
    let mut predictions = Vec::new();
    if let PreparedTargets::Values { y, .. } = &eval.target {
        for (i, t) in y.iter().enumerate() {
            let (x, _) = eval.fixed(i, in_fmt);
            let out = fixed.predict(x).map_err(|source| SimError::Sample {
                what: "evaluation sample",
                sample: i + 1,
                source,
            })?;
            let fx = out.fmt.to_f64(out.raw.at(0));
            let fl = float
                .predict(&eval.x[i])
                .map_err(|source| SimError::Sample {
                    what: "evaluation sample",
                    sample: i + 1,
                    source,
                })?
                .first()
                .copied()
                .unwrap_or(f64::NAN);
            predictions.push(Prediction {
                reference: t.first().copied().unwrap_or(f64::NAN),
                fixed: fx,
                float: fl,
            });
        }
    }
    let rng_state = fixed.rng().state();
    Ok(DriftRun {
        epochs,
        steps,
        fixed_params,
        float_params,
        tensors,
        rng_state,
        predictions,
    })
}

/// Mean loss and metrics of the quantized model and its float original on `data`, without
/// training, against the true targets.
///
/// # Errors
/// As [`run_side_by_side`].
pub fn evaluate_pair(
    desc: &ModelDesc,
    fixed: &QuantParams,
    float: &[(Vec<f64>, Vec<f64>)],
    data: &Prepared,
) -> Result<PairFigures, SimError> {
    let plan = Plan::of(desc).map_err(SimError::Plan)?;
    let fplan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 8)?;
    let mut arena = vec![0u32; plan.ram_words()];
    let mut farena = vec![0f64; fplan.ram_bytes as usize / 8];
    let views = fixed.views();
    let fviews: Vec<FloatParams<'_, f64>> = float
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut tq =
        Trainer::new(desc, &plan, &mut arena, &views).map_err(SimError::start("fixed-point"))?;
    let mut tf = Twin::new(desc, &fplan, &mut farena, &fviews).map_err(SimError::start("float"))?;
    evaluate_both(&mut tq, &mut tf, data, desc.input_format)
}
