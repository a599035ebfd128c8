//! One validation everywhere: corrupt images, out-of-range settings, absurd values, invalid UTF-8, mismatched model and config.

use super::*;

#[test]
fn an_image_with_both_slots_corrupt_needs_start_over() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    run_ok(dir, &["checkpoint", "write", "soil.honb", "--out", "a.img"]);
    run_ok(
        dir,
        &[
            "checkpoint",
            "write",
            "soil.honb",
            "--into",
            "a.img",
            "--out",
            "a.img",
        ],
    );
    // Flip a payload byte in each slot (two halves of the 16 KiB region).
    let mut img = fs::read(dir.join("a.img")).unwrap();
    img[100] ^= 0x55;
    img[8192 + 100] ^= 0x55;
    fs::write(dir.join("a.img"), &img).unwrap();
    refused(
        dir,
        &[
            "checkpoint",
            "write",
            "soil.honb",
            "--into",
            "a.img",
            "--out",
            "a.img",
        ],
        &["a.img", "--start-over"],
    );
    let said = run_ok(
        dir,
        &[
            "checkpoint",
            "write",
            "soil.honb",
            "--into",
            "a.img",
            "--out",
            "a.img",
            "--start-over",
        ],
    );
    assert!(said.contains("written: a.img"), "{said}");
    let v: serde_json::Value =
        serde_json::from_str(&run_ok(dir, &["checkpoint", "read", "a.img", "--json"])).unwrap();
    assert_eq!(v["checkpoint"]["seq"], 1);
}

#[test]
fn sweep_settings_out_of_range_or_repeated_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    let soil = example("soil-moisture.toml");
    let cal = demo_data("soil_unit_calibration.csv");
    let hold = demo_data("soil_unit_holdout.csv");
    let base = [
        "sweep",
        "--config",
        &soil,
        "--model",
        "soil.json",
        "--train",
        &cal,
        "--eval",
        &hold,
        "--epochs",
        "1",
        "--out",
        "sw",
    ];
    let with = |extra: &[&'static str]| -> Vec<&str> {
        let mut v: Vec<&str> = base.to_vec();
        v.extend_from_slice(extra);
        v
    };
    refused(dir, &with(&["--jobs", "0"]), &["--jobs"]);
    refused(dir, &with(&["--frac-delta=-100,100"]), &["--frac-delta"]);
    refused(dir, &with(&["--lr", "0.01,0.01"]), &["--lr", "twice"]);
    refused(
        dir,
        &with(&["--weights", "8,16,8"]),
        &["--weights", "twice"],
    );
}

/// Writes `soil.csv`: the calibration data with one field replaced in its first data row.
pub(super) fn calibration_with(dir: &Path, column: usize, value: &str) {
    let full = fs::read_to_string(demo_data("soil_unit_calibration.csv")).unwrap();
    let mut lines: Vec<String> = full.lines().map(str::to_owned).collect();
    let first = lines
        .iter()
        .position(|l| !l.starts_with('#') && !l.is_empty())
        .unwrap()
        + 1;
    let mut fields: Vec<&str> = lines[first].split(',').collect();
    fields[column] = value;
    lines[first] = fields.join(",");
    fs::write(dir.join("soil.csv"), lines.join("\n")).unwrap();
}

#[test]
fn absurd_values_are_refused_by_every_command_naming_the_line() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    let soil = example("soil-moisture.toml");
    let header = fs::read_to_string(demo_data("soil_unit_calibration.csv")).unwrap();
    let header: Vec<&str> = header
        .lines()
        .find(|l| !l.starts_with('#') && !l.is_empty())
        .unwrap()
        .split(',')
        .collect();
    let target = header
        .iter()
        .position(|&h| h == "vwc")
        .expect("a vwc column");
    let feature = header
        .iter()
        .position(|&h| h == "temp_c")
        .expect("a temp_c column");
    calibration_with(dir, feature, "1e308");
    let blob_args = [
        "quantize",
        "--config",
        &soil,
        "--model",
        "soil.json",
        "--data",
        "soil.csv",
        "--blob",
        "q.honb",
    ];
    refused(
        dir,
        &blob_args,
        &["soil.csv: line ", "column `temp_c`", "1e308"],
    );
    refused(
        dir,
        &[
            "train", "--config", &soil, "--data", "soil.csv", "--out", "m.json",
        ],
        &["soil.csv: line ", "column `temp_c`", "1e308"],
    );
    // A target: blamed on the data file, not on the learning rate.
    calibration_with(dir, target, "1e308");
    let said = refused(
        dir,
        &[
            "train", "--config", &soil, "--data", "soil.csv", "--out", "m.json",
        ],
        &["soil.csv: line ", "column `vwc`"],
    );
    assert!(!said.contains("learning-rate"), "{said}");
    // A long field with a control character is cut and escaped.
    let long = format!("x\u{0}{}", "9".repeat(5_000_000));
    calibration_with(dir, feature, &long);
    let said = refused(
        dir,
        &blob_args,
        &["soil.csv: line ", "\\u{0}", "more characters"],
    );
    assert!(said.len() < 2000, "{} bytes of message", said.len());
    assert!(!said.contains('\u{0}'));
}

#[test]
fn float_models_with_absurd_weights_or_missing_scaling_are_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    let soil = example("soil-moisture.toml");
    let cal = demo_data("soil_unit_calibration.csv");
    let mut m: serde_json::Value =
        serde_json::from_str(&fs::read_to_string(dir.join("soil.json")).unwrap()).unwrap();
    let mut huge = m.clone();
    huge["layers"][0]["weights"][0] = serde_json::json!(1e300);
    fs::write(dir.join("huge.json"), huge.to_string()).unwrap();
    refused(
        dir,
        &[
            "quantize",
            "--config",
            &soil,
            "--model",
            "huge.json",
            "--data",
            &cal,
            "--blob",
            "q",
        ],
        &["huge.json", "layer 0: parameter 0", "2^31"],
    );
    m["scaling"] = serde_json::json!([]);
    fs::write(dir.join("unscaled.json"), m.to_string()).unwrap();
    refused(
        dir,
        &[
            "quantize",
            "--config",
            &soil,
            "--model",
            "unscaled.json",
            "--data",
            &cal,
            "--blob",
            "q",
        ],
        &["unscaled.json", "no input scaling"],
    );
}

#[test]
fn invalid_utf8_in_a_config_or_model_is_reported_with_its_line() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let mut cfg = fs::read(example("soil-moisture.toml")).unwrap();
    let nl = cfg.iter().position(|&b| b == b'\n').unwrap();
    cfg.insert(nl + 1, 0xFF);
    fs::write(dir.join("bad.toml"), &cfg).unwrap();
    refused(
        dir,
        &[
            "train",
            "--config",
            "bad.toml",
            "--data",
            &demo_data("soil_factory.csv"),
            "--out",
            "m.json",
        ],
        &["bad.toml", "line 2, column 1", "UTF-8"],
    );
    fs::write(dir.join("bad.json"), b"{\n  \"format\": \"\xfe\"\n}").unwrap();
    refused(
        dir,
        &[
            "quantize",
            "--config",
            &example("soil-moisture.toml"),
            "--model",
            "bad.json",
            "--data",
            &demo_data("soil_unit_calibration.csv"),
            "--blob",
            "q",
        ],
        &["bad.json", "line 2, column 14", "UTF-8"],
    );
}

/// A model used with a config of another task is blamed on the pair, before the data is read
/// with the wrong columns (which used to report a class list of one entry).
#[test]
fn a_model_with_a_config_of_another_task_is_blamed_on_the_pair() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    let said = refused(
        dir,
        &[
            "quantize",
            "--config",
            &example("vibration-zones.toml"),
            "--model",
            "soil.json",
            "--data",
            &demo_data("vibration_unit_calibration.csv"),
            "--blob",
            "q.honb",
        ],
        &["vibration-zones.toml: the float model", "soil.json"],
    );
    assert!(!said.contains("class list"), "{said}");
}
