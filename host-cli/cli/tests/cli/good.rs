//! The good paths: train, quantize, inspect, drift and ONNX on the bundled examples.

use super::*;

#[test]
fn soil_train_quantize_inspect() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    fs::create_dir(dir.join("out")).unwrap();
    let config = example("soil-moisture.toml");

    let said = run_ok(
        dir,
        &[
            "train",
            "--config",
            &config,
            "--data",
            &demo_data("soil_factory.csv"),
            "--out",
            "out/m.json",
        ],
    );
    // The example holds a fifth of the factory rows out of training (`holdout = 0.2`).
    let rows = fs::read_to_string(demo_data("soil_factory.csv"))
        .unwrap()
        .lines()
        .count()
        - 1;
    let held = (rows as f64 * 0.2).round() as usize;
    assert!(
        said.contains(&format!(
            "trained 60 epochs on {} rows ({held} held out of {rows} by data.holdout)",
            rows - held
        )),
        "{said}"
    );
    let model = read_json(&dir.join("out/m.json"));
    assert_eq!(model["format"], "hone-float-model");
    assert_eq!(model["version"], 1);
    assert_eq!(
        model["features"],
        serde_json::json!(["raw_counts", "temp_c"])
    );
    assert_eq!(model["outputs"], serde_json::json!(["vwc"]));
    assert_eq!(model["history"].as_array().map(Vec::len), Some(60));

    let said = run_ok(
        dir,
        &[
            "quantize",
            "--config",
            &config,
            "--model",
            "out/m.json",
            "--data",
            &demo_data("soil_unit_calibration.csv"),
            "--blob",
            "out/m.honb",
            "--rust",
            "out/m.rs",
            "--json",
        ],
    );
    let q = json(&said);
    assert_eq!(q["metric"], "rmse");
    // Scored on the rows data.holdout (0.2) keeps out of the file, as `hone train` does.
    assert_eq!(
        (q["samples"].as_u64(), q["held_out"].as_bool()),
        (Some(2), Some(true))
    );
    assert!(q["chosen"].as_array().is_some_and(|a| !a.is_empty()), "{q}");
    let tensors = q["tensors"].as_array().expect("tensors");
    assert_eq!(tensors.len(), 4, "weights and bias of two dense layers");
    for t in tensors {
        assert!(t["sqnr_db"].as_f64().is_some_and(|db| db > 40.0), "{t}");
    }
    let (float, fixed) = (q["float_loss"].as_f64(), q["fixed_loss"].as_f64());
    assert!(
        matches!((float, fixed), (Some(a), Some(b)) if (a - b).abs() <= 0.05 * a),
        "float {float:?}, fixed {fixed:?}"
    );
    assert_files(&dir.join("out"), &["m.honb", "m.json", "m.rs"]);
    let blob = fs::read(dir.join("out/m.honb")).unwrap();
    assert_blob_frame(&blob);
    let rust = fs::read_to_string(dir.join("out/m.rs")).unwrap();
    assert!(rust.contains("pub const LAYERS"), "{rust}");
    assert!(rust.contains("pub static W0"), "{rust}");

    // The text form names what it wrote.
    let said = run_ok(
        dir,
        &[
            "quantize",
            "--config",
            &config,
            "--model",
            "out/m.json",
            "--data",
            &demo_data("soil_unit_calibration.csv"),
            "--blob",
            "out/again.honb",
        ],
    );
    assert!(said.contains("written: out/again.honb"), "{said}");
    assert_eq!(fs::read(dir.join("out/again.honb")).unwrap(), blob);

    let said = run_ok(dir, &["inspect", "out/m.honb"]);
    let head = format!(
        "out/m.honb: hone model, blob format version {}",
        hone_core::blob::FORMAT_VERSION
    );
    for want in [
        head.as_str(),
        "ok",
        "dense 8",
        "tanh",
        "dense 1",
        "Input scaling",
    ] {
        assert!(said.contains(want), "`{want}` missing from:\n{said}");
    }
    let r = json(&run_ok(dir, &["inspect", "out/m.honb", "--json"]));
    assert_eq!(r["file"], "out/m.honb");
    assert_eq!(r["kind"], "model");
    assert_eq!(r["format_version"], hone_core::blob::FORMAT_VERSION);
    assert_eq!(r["crc_ok"], true);
    assert_eq!(r["bytes"], blob.len());
    assert_eq!(r["model"]["input"]["channels"], 2);
    assert_eq!(r["model"]["output"]["values"], 1);
    let layers = r["model"]["layers"].as_array().expect("layers");
    assert_eq!(layers.len(), 3);
    assert_eq!(layers[0]["kind"], "dense 8");
    assert_eq!(layers[0]["weights"], 16);
    assert_eq!(r["scaling"].as_array().map(Vec::len), Some(2));
}

#[test]
fn soil_drift_passes_reports_and_fails_an_impossible_threshold() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (model, _) = soil_model(dir);

    let d = json(&run_ok(dir, &soil_drift_args(model, &["--json"])));
    assert_eq!(d["verdict"]["pass"], true, "{}", d["verdict"]);
    let checks = d["verdict"]["checks"].as_array().expect("checks");
    assert_eq!(checks.len(), 6);
    assert!(checks.iter().all(|c| c["pass"] == true), "{checks:?}");
    assert_eq!(d["metric"], "rmse");
    let epochs = d["epochs"].as_array().expect("per-epoch entries");
    assert_eq!(epochs.len(), 11, "epoch 0 (before training) and 10 epochs");
    for (i, e) in epochs.iter().enumerate() {
        assert_eq!(e["epoch"], i);
        assert!(e["fixed_eval_loss"].as_f64().is_some(), "{e}");
        assert!(e["float_eval_loss"].as_f64().is_some(), "{e}");
    }
    // Training lowers the evaluation loss of the new unit.
    let loss = |e: &Value| e["float_eval_loss"].as_f64().unwrap();
    assert!(loss(&epochs[10]) < loss(&epochs[0]));

    let said = run_ok(dir, &soil_drift_args(model, &["--report", "report"]));
    assert!(said.contains("verdict: within every threshold"), "{said}");
    assert_files(
        &dir.join("report"),
        &[
            "drift-divergence.svg",
            "drift-gap.svg",
            "drift-loss.svg",
            "drift-predicted.svg",
            "drift.html",
            "drift.json",
            "drift.md",
        ],
    );
    let html = fs::read_to_string(dir.join("report/drift.html")).unwrap();
    assert!(html.contains("<html"), "drift.html is not HTML");
    assert!(html.contains("<svg"), "drift.html carries no plot");
    for svg in [
        "drift-divergence.svg",
        "drift-gap.svg",
        "drift-loss.svg",
        "drift-predicted.svg",
    ] {
        let s = fs::read_to_string(dir.join("report").join(svg)).unwrap();
        assert!(
            s.contains("<svg") && s.trim_end().ends_with("</svg>"),
            "{svg}"
        );
    }
    let md = fs::read_to_string(dir.join("report/drift.md")).unwrap();
    assert!(md.starts_with('#'), "drift.md has no heading");
    assert_eq!(
        read_json(&dir.join("report/drift.json"))["verdict"],
        d["verdict"]
    );

    // 200 dB of gradient SQNR is beyond any 16-bit gradient.
    let d = json(&run_expect(
        dir,
        &soil_drift_args(model, &["--min-grad-sqnr", "200", "--json"]),
        CHECK_FAILED,
    ));
    assert_eq!(d["verdict"]["pass"], false);
    let failed: Vec<&str> = d["verdict"]["checks"]
        .as_array()
        .expect("checks")
        .iter()
        .filter(|c| c["pass"] == false)
        .filter_map(|c| c["name"].as_str())
        .collect();
    assert_eq!(failed, ["grad_sqnr_db"]);
    let said = run_expect(
        dir,
        &soil_drift_args(model, &["--min-grad-sqnr", "200"]),
        CHECK_FAILED,
    );
    assert!(
        said.contains("FAIL gradient SQNR at the start, per probe sample, dB"),
        "{said}"
    );
    assert!(said.contains("verdict: thresholds exceeded"), "{said}");
}

/// The ONNX file of the demo's soil model shape (made by `tests/onnx/make_fixtures.py`)
/// imports, quantizes and drifts through the usual commands; its export imports back as the
/// same model; the blob exports dequantized.
#[test]
fn onnx_import_quantize_drift_export() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let said = run_ok(
        dir,
        &[
            "onnx",
            "import",
            &onnx_fixture("soil"),
            "--out",
            "soil.json",
        ],
    );
    assert!(
        said.contains("layers dense → tanh → dense, loss SquaredError, 2 scaled channels"),
        "{said}"
    );
    let m = read_json(&dir.join("soil.json"));
    assert_eq!(m["features"], serde_json::json!(["raw_counts", "temp_c"]));
    let q = json(&run_ok(
        dir,
        &[
            "quantize",
            "--config",
            &example("soil-moisture.toml"),
            "--model",
            "soil.json",
            "--data",
            &demo_data("soil_factory.csv"),
            "--blob",
            "soil.honb",
            "--json",
        ],
    ));
    assert!(q.is_object(), "{q}");
    assert_blob_frame(&fs::read(dir.join("soil.honb")).unwrap());
    let d = json(&run_ok(dir, &soil_drift_args("soil.json", &["--json"])));
    assert_eq!(d["verdict"]["pass"], true, "{}", d["verdict"]);

    // Export and import again: the same float model, byte for byte.
    let said = run_ok(
        dir,
        &[
            "onnx",
            "export",
            "--model",
            "soil.json",
            "--out",
            "back.onnx",
        ],
    );
    assert!(
        said.contains("wrote back.onnx (ONNX opset 17, double tensors)"),
        "{said}"
    );
    run_ok(dir, &["onnx", "import", "back.onnx", "--out", "back.json"]);
    assert_eq!(
        fs::read(dir.join("back.json")).unwrap(),
        fs::read(dir.join("soil.json")).unwrap()
    );

    // The blob, dequantized, in float32: every weight within a 16-bit step of the float one.
    run_ok(
        dir,
        &[
            "onnx",
            "export",
            "--blob",
            "soil.honb",
            "--features",
            "raw_counts,temp_c",
            "--outputs",
            "vwc",
            "--float32",
            "--out",
            "unit.onnx",
        ],
    );
    run_ok(dir, &["onnx", "import", "unit.onnx", "--out", "unit.json"]);
    let u = read_json(&dir.join("unit.json"));
    let mut worst = 0f64;
    for (a, b) in u["layers"]
        .as_array()
        .unwrap()
        .iter()
        .zip(m["layers"].as_array().unwrap())
    {
        for key in ["weights", "bias"] {
            for (x, y) in a[key]
                .as_array()
                .unwrap()
                .iter()
                .zip(b[key].as_array().unwrap())
            {
                worst = worst.max((x.as_f64().unwrap() - y.as_f64().unwrap()).abs());
            }
        }
    }
    // The quantize report above puts every tensor in a 16-bit format with at least 14
    // fraction bits: rounding moves a value by at most 2^-15.
    assert!(worst > 0.0 && worst <= (-15f64).exp2(), "{worst}");
}

#[test]
fn vibration_train_quantize_inspect() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let config = example("vibration-zones.toml");
    run_ok(
        dir,
        &[
            "train",
            "--config",
            &config,
            "--data",
            &demo_data("vibration_factory.csv"),
            "--out",
            "v.json",
        ],
    );
    let m = read_json(&dir.join("v.json"));
    assert_eq!(m["outputs"], serde_json::json!(["0", "1", "2", "3"]));
    assert_eq!(m["features"].as_array().map(Vec::len), Some(64));
    let q = json(&run_ok(
        dir,
        &[
            "quantize",
            "--config",
            &config,
            "--model",
            "v.json",
            "--data",
            &demo_data("vibration_unit_calibration.csv"),
            "--blob",
            "v.honb",
            "--json",
        ],
    ));
    assert_eq!(q["metric"], "accuracy_pct");
    assert_eq!(
        (q["samples"].as_u64(), q["held_out"].as_bool()),
        (Some(3), Some(true))
    );
    assert_blob_frame(&fs::read(dir.join("v.honb")).unwrap());
    let said = run_ok(dir, &["inspect", "v.honb"]);
    assert!(said.contains("conv1d 8×8/2"), "{said}");
    assert!(said.contains("frozen"), "{said}");
    assert!(said.contains("softmax cross-entropy"), "{said}");
    let r = json(&run_ok(dir, &["inspect", "v.honb", "--json"]));
    let layers = r["model"]["layers"].as_array().expect("layers");
    assert_eq!(layers.len(), 6);
    assert_eq!(layers[0]["train_mode"], "frozen");
    assert_eq!(r["model"]["output"]["values"], 4);
}
