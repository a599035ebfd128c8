//! `hone quantize` scores the rows `hone train` held out, so the two report the same figures.

use std::path::Path;

use hone_host::config::Config;

fn repo() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .ancestors()
        .nth(2)
        .expect("host-cli/host sits inside the workspace")
}

#[test]
fn quantize_scores_the_rows_train_held_out() {
    let path = repo().join("configs/soil-moisture.toml");
    let text = std::fs::read_to_string(&path).expect("config");
    // Two passes are enough: the check is which rows are scored, not how well.
    let cfg = Config::parse(&path, &text.replace("epochs = 60", "epochs = 2")).expect("config");
    let data = cfg
        .load_data(&repo().join("demo-data/soil_factory.csv"), None)
        .expect("data");
    let trained = hone_host::train::train_float(&cfg, &data, &mut |_, _, _| {}).expect("trains");
    let q = hone_host::quant::quantize(&cfg, &trained.model, &data).expect("quantizes");
    assert!(q.report.held_out);
    assert_eq!(q.report.samples, trained.held_out_rows);
    assert!(q.report.samples < data.len());
    let last = trained.model.history.last().expect("history");
    let eval_rmse = last.eval_rmse.expect("held-out RMSE");
    assert!(
        (q.report.float_metric - eval_rmse).abs() <= 1e-9 * eval_rmse,
        "quantize's float RMSE {} against train's held-out RMSE {eval_rmse}",
        q.report.float_metric
    );
    // Without a hold-out every row counts.
    let all =
        Config::parse(&path, &text.replace("holdout = 0.2", "holdout = 0.0")).expect("config");
    let q = hone_host::quant::quantize(&all, &trained.model, &data).expect("quantizes");
    assert!(!q.report.held_out);
    assert_eq!(q.report.samples, data.len());
}
