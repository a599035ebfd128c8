//! `hone drift`: fixed point beside float on the same data, judged against the thresholds.

use crate::*;

pub(crate) fn drift(a: DriftArgs) -> Result<Option<CheckFailed>> {
    let base = load_base(&a.model, a.calib.as_ref().unwrap_or(&a.train))?;
    let train = prepare(&base, &a.train)?;
    let eval = prepare(&base, &a.eval)?;
    let epochs = a.epochs.unwrap_or(base.config.epochs());
    let opts = RunOptions {
        epochs,
        order_seed: base.config.train().seed,
        per_step: a.per_step,
        probe: a.probe as usize,
        shuffle: !a.no_shuffle,
    };
    let q = &base.quant;
    let b = bar(epochs as u64 * train.len() as u64, "steps");
    let run = run_side_by_side(
        &q.desc,
        &q.params,
        &q.float_params,
        &train,
        &eval,
        &opts,
        &mut |p| b.set_position(p.done),
    )?;
    b.finish_and_clear();
    let setup = vec![
        (
            "config".to_string(),
            a.model.cfg.config.display().to_string(),
        ),
        ("model".into(), a.model.model.display().to_string()),
        (
            "train".into(),
            format!(
                "{} ({} samples, {epochs} epochs)",
                a.train.display(),
                train.len()
            ),
        ),
        (
            "eval".into(),
            format!("{} ({} samples)", a.eval.display(), eval.len()),
        ),
        ("seed".into(), base.config.train().seed.to_string()),
    ];
    let t = Thresholds {
        max_loss_gap_pct: a.limits.max_loss_gap,
        max_metric_gap: a.limits.max_metric_gap,
        max_weight_divergence_pct: a.limits.max_weight_divergence,
        min_grad_sqnr_db: a.limits.min_grad_sqnr,
        max_saturation_ppm: a.limits.max_saturation_ppm,
        max_lost_updates_pct: a.limits.max_lost_updates,
        two_sided: a.limits.two_sided,
    };
    let mut report = DriftReport::from_run(&run, train.is_classification(), setup, t);
    report.unit = base.config.data().unit.clone();
    report.advise_saturation(&q.desc, &run, &train, &q.float_params)?;
    if a.json {
        print_json(&report)?;
    } else {
        out!("{}", report.render_text());
    }
    if let Some(dir) = &a.report {
        // The report, its figures and the JSON are one set: all written or none.
        let mut files = report.document("hone drift report").files("drift")?;
        files.push((
            "drift.json".into(),
            serde_json::to_string_pretty(&report)?.into_bytes(),
        ));
        for f in hone_report::fsutil::write_all_in(dir, &files)? {
            eprintln!("written: {}", f.display());
        }
    }
    Ok((!report.verdict.pass).then_some(CheckFailed))
}
