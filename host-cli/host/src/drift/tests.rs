use super::*;
use crate::sim::{DriftRun, EpochDrift, QuantParams, TensorTotals};

fn run_with_sqnr(sqnr: &[Option<f64>]) -> DriftRun {
    DriftRun {
        epochs: sqnr
            .iter()
            .enumerate()
            .map(|(i, &g)| EpochDrift {
                epoch: i as u32,
                fixed_eval_loss: 1.0,
                float_eval_loss: 1.0,
                grad_sqnr_db: g,
                ..EpochDrift::default()
            })
            .collect(),
        steps: Vec::new(),
        fixed_params: QuantParams { layers: Vec::new() },
        float_params: Vec::new(),
        tensors: Vec::new(),
        rng_state: [0; 4],
        predictions: Vec::new(),
    }
}

#[test]
fn limits_must_be_finite_and_not_negative() {
    assert_eq!(parse_limit("10"), Ok(10.0));
    assert_eq!(parse_limit("0"), Ok(0.0));
    assert_eq!(parse_limit(" 2.5 "), Ok(2.5));
    for bad in ["NaN", "nan", "inf", "-inf"] {
        assert_eq!(parse_limit(bad), Err(LimitError::NotFinite(bad.into())));
    }
    assert_eq!(parse_limit("-1"), Err(LimitError::Negative("-1".into())));
    assert_eq!(
        parse_limit("ten"),
        Err(LimitError::NotANumber("ten".into()))
    );
}

#[test]
fn unmeasured_sqnr_is_reported_as_not_checked() {
    let r = DriftReport::from_run(
        &run_with_sqnr(&[None, None]),
        false,
        Vec::new(),
        Thresholds::default(),
    );
    assert!(r.verdict.pass);
    assert!(r.verdict.checks.iter().all(|c| c.name != "grad_sqnr_db"));
    assert_eq!(r.verdict.not_run.len(), 1);
    assert_eq!(r.verdict.not_run[0].name, "grad_sqnr_db");
    let text = r.verdict_text();
    assert!(
        text.contains("verdict: within every threshold; not checked: grad_sqnr_db"),
        "{text}"
    );
    assert!(
        text.contains("not run gradient SQNR at the start"),
        "{text}"
    );
}

#[test]
fn sqnr_check_uses_the_start_and_passes_exact_gradients() {
    let t = Thresholds::default();
    // Exact gradients (no noise) measure as infinite SQNR: a pass, not a skipped check.
    let r = DriftReport::from_run(&run_with_sqnr(&[Some(f64::INFINITY)]), false, vec![], t);
    let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
    assert!(c.is_some_and(|c| c.pass), "{:?}", r.verdict);
    assert!(r.verdict.not_run.is_empty());
    // The start decides: a low figure near the end (gradients near zero) is not judged,
    // a low figure at the start fails the verdict.
    let low = t.min_grad_sqnr_db - 1.0;
    let r = DriftReport::from_run(
        &run_with_sqnr(&[Some(40.0), None, Some(low)]),
        false,
        vec![],
        t,
    );
    let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
    assert_eq!(c.map(|c| (c.value, c.pass)), Some((40.0, true)));
    let r = DriftReport::from_run(&run_with_sqnr(&[Some(low), Some(40.0)]), false, vec![], t);
    let c = r.verdict.checks.iter().find(|c| c.name == "grad_sqnr_db");
    assert_eq!(c.map(|c| (c.value, c.pass)), Some((low, false)));
    assert!(!r.verdict.pass);
}

fn tensor(layer: usize, name: &'static str, values: u64, sat: u64) -> TensorTotals {
    TensorTotals {
        layer,
        tensor: name,
        values,
        saturations: sat,
        lost_updates: 0,
        divergence_pct: None,
    }
}

fn check<'r>(r: &'r DriftReport, name: &str) -> &'r Check {
    r.verdict
        .checks
        .iter()
        .find(|c| c.name == name)
        .expect("check present")
}

#[test]
fn saturation_is_judged_per_tensor_and_names_the_worst() {
    // A bias tensor saturating 1.5 % of its writes beside a large tensor that never
    // saturates: 103 ppm overall, but 15 000 ppm in the bias.
    let mut run = run_with_sqnr(&[None]);
    run.tensors = vec![
        tensor(0, "out", 144_000, 0),
        tensor(2, "bias", 1_000, 15),
        tensor(2, "weight", 960, 0),
    ];
    let r = DriftReport::from_run(&run, false, vec![], Thresholds::default());
    let c = check(&r, "saturation_ppm");
    assert!(!c.pass);
    assert_eq!(c.value, 15_000.0);
    assert_eq!(c.tensor.as_deref(), Some("layer 2 bias"));
    // The same run with the saturation spread evenly passes.
    run.tensors[1].saturations = 0;
    run.tensors[0].saturations = 15;
    let r = DriftReport::from_run(&run, false, vec![], Thresholds::default());
    assert!(check(&r, "saturation_ppm").pass);
}

#[test]
fn headline_states_before_and_after_in_the_unit() {
    let mut run = run_with_sqnr(&[None, None]);
    (run.epochs[0].fixed_metric, run.epochs[0].float_metric) = (0.094, 0.094);
    (run.epochs[1].fixed_metric, run.epochs[1].float_metric) = (0.013, 0.0129);
    (run.epochs[1].fixed_mae, run.epochs[1].float_mae) = (0.01, 0.0099);
    let mut r = DriftReport::from_run(&run, false, vec![], Thresholds::default());
    r.unit = "m³/m³".into();
    let h = r.headline();
    assert!(
        h.contains("before 0.09400 m³/m³ → after 0.01300 m³/m³ in fixed point"),
        "{h}"
    );
    assert!(h.contains("MAE after 0.01000 m³/m³"), "{h}");
    assert!(h.ends_with("pass"), "{h}");
    assert!(r.render_text().contains(&h));
}

#[test]
fn gaps_are_one_sided_unless_asked() {
    let mut run = run_with_sqnr(&[None]);
    // Fixed point 5 % better than float in RMSE and loss.
    run.epochs[0].fixed_metric = 0.95;
    run.epochs[0].float_metric = 1.0;
    run.epochs[0].fixed_eval_loss = 0.8;
    let t = Thresholds::default();
    let r = DriftReport::from_run(&run, false, vec![], t);
    assert!(check(&r, "metric_gap").pass);
    assert!(check(&r, "loss_gap_pct").pass);
    assert!((check(&r, "metric_gap").value + 5.0).abs() < 1e-9);
    let two = Thresholds {
        two_sided: true,
        ..t
    };
    let r = DriftReport::from_run(&run, false, vec![], two);
    assert!(!check(&r, "metric_gap").pass);
    assert!(!check(&r, "loss_gap_pct").pass);
    // Fixed point 5 % worse fails either way.
    run.epochs[0].fixed_metric = 1.05;
    let r = DriftReport::from_run(&run, false, vec![], t);
    assert!(!check(&r, "metric_gap").pass);
    // Classification: accuracy above float passes one-sided, fails two-sided at 3 points.
    run.epochs[0].fixed_metric = 93.0;
    run.epochs[0].float_metric = 90.0;
    let r = DriftReport::from_run(&run, true, vec![], t);
    assert!(check(&r, "metric_gap").pass);
    let r = DriftReport::from_run(&run, true, vec![], two);
    assert!(!check(&r, "metric_gap").pass);
}
