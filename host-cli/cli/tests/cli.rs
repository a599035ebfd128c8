//! The `hone` command as a user runs it: the real binary, in a fresh temporary directory per
//! test, on the bundled configs and demo data.
//!
//! The good paths check exit statuses, the files written and a few stable fields of the JSON
//! outputs. The malformed inputs are one table ([`malformed_cases`]): every case must end with
//! exit status 2, an `error: …` message naming the file and the place (line, column, field or
//! option), no panic, and no output or temporary file left behind.

use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

use serde_json::Value;

/// Exit status of a failed check.
const CHECK_FAILED: i32 = 1;
/// Exit status of bad usage or bad input.
const BAD_INPUT: i32 = 2;

const HONE: &str = env!("CARGO_BIN_EXE_hone");

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .ancestors()
        .nth(2)
        .expect("host-cli/cli sits inside the workspace")
        .to_path_buf()
}

/// A file of `configs/`, as an argument.
fn example(name: &str) -> String {
    repo().join("configs").join(name).display().to_string()
}

/// An ONNX fixture of `host-cli/host/tests/onnx/`, as an argument.
fn onnx_fixture(name: &str) -> String {
    repo()
        .join("host-cli/host/tests/onnx")
        .join(format!("{name}.onnx"))
        .display()
        .to_string()
}

/// A file of `demo-data/`, as an argument.
fn demo_data(name: &str) -> String {
    repo().join("demo-data").join(name).display().to_string()
}

/// Runs `hone` in `dir` without a backtrace setting, so a panic would show its usual note.
fn hone<S: AsRef<str>>(dir: &Path, args: &[S]) -> Output {
    Command::new(HONE)
        .args(args.iter().map(AsRef::as_ref))
        .current_dir(dir)
        .env_remove("RUST_BACKTRACE")
        .stdin(Stdio::null())
        .output()
        .expect("the hone binary starts")
}

fn text(bytes: &[u8]) -> String {
    String::from_utf8_lossy(bytes).into_owned()
}

fn describe<S: AsRef<str>>(args: &[S], out: &Output) -> String {
    let args: Vec<&str> = args.iter().map(AsRef::as_ref).collect();
    format!(
        "hone {}\nstatus: {:?}\nstdout:\n{}\nstderr:\n{}",
        args.join(" "),
        out.status.code(),
        text(&out.stdout),
        text(&out.stderr)
    )
}

/// Runs `hone` and checks its exit status; returns stdout.
fn run_expect<S: AsRef<str>>(dir: &Path, args: &[S], status: i32) -> String {
    let out = hone(dir, args);
    assert_eq!(out.status.code(), Some(status), "{}", describe(args, &out));
    let stderr = text(&out.stderr);
    assert!(
        !stderr.contains("panicked"),
        "panic: {}",
        describe(args, &out)
    );
    text(&out.stdout)
}

fn run_ok<S: AsRef<str>>(dir: &Path, args: &[S]) -> String {
    run_expect(dir, args, 0)
}

fn owned<S: AsRef<str>>(args: &[S]) -> Vec<String> {
    args.iter().map(|s| s.as_ref().to_owned()).collect()
}

fn json(s: &str) -> Value {
    serde_json::from_str(s).unwrap_or_else(|e| panic!("not JSON ({e}):\n{s}"))
}

fn read_json(p: &Path) -> Value {
    json(&fs::read_to_string(p).unwrap_or_else(|e| panic!("{}: {e}", p.display())))
}

/// Every entry under `dir`, relative and sorted, directories with a trailing `/`.
fn entries(dir: &Path) -> Vec<String> {
    fn walk(base: &Path, dir: &Path, found: &mut Vec<String>) {
        let Ok(rd) = fs::read_dir(dir) else { return };
        for e in rd.flatten() {
            let p = e.path();
            let rel = p
                .strip_prefix(base)
                .expect("below the base")
                .display()
                .to_string();
            if p.is_dir() {
                found.push(format!("{rel}/"));
                walk(base, &p, found);
            } else {
                found.push(rel);
            }
        }
    }
    let mut found = Vec::new();
    walk(dir, dir, &mut found);
    found.sort();
    found
}

/// `dir` holds exactly `names` (files), nothing else: no temporary files.
fn assert_files(dir: &Path, names: &[&str]) {
    let mut want: Vec<String> = names.iter().map(|s| s.to_string()).collect();
    want.sort();
    assert_eq!(entries(dir), want, "contents of {}", dir.display());
}

fn crc32(bytes: &[u8]) -> u32 {
    crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC).checksum(bytes)
}

/// Checks the frame of a blob: magic, version and CRC trailer.
fn assert_blob_frame(bytes: &[u8]) {
    assert!(bytes.len() > 10, "blob of {} bytes", bytes.len());
    assert_eq!(&bytes[..4], &hone_core::blob::MAGIC);
    assert_eq!(
        u16::from_le_bytes([bytes[4], bytes[5]]),
        hone_core::blob::FORMAT_VERSION
    );
    let n = bytes.len() - 4;
    let stored = u32::from_le_bytes(bytes[n..].try_into().expect("four bytes"));
    assert_eq!(stored, crc32(&bytes[..n]), "CRC trailer");
}

/// Trains the soil-moisture example on its factory data and quantizes it on the calibration
/// data, in `dir`: returns the float model and the blob (relative to `dir`).
fn soil_model(dir: &Path) -> (&'static str, &'static str) {
    run_ok(
        dir,
        &[
            "train",
            "--config",
            &example("soil-moisture.toml"),
            "--data",
            &demo_data("soil_factory.csv"),
            "--out",
            "soil.json",
        ],
    );
    run_ok(
        dir,
        &[
            "quantize",
            "--config",
            &example("soil-moisture.toml"),
            "--model",
            "soil.json",
            "--data",
            &demo_data("soil_unit_calibration.csv"),
            "--blob",
            "soil.honb",
        ],
    );
    ("soil.json", "soil.honb")
}

fn soil_drift_args(model: &str, extra: &[&str]) -> Vec<String> {
    let mut v = owned(&[
        "drift",
        "--config",
        &example("soil-moisture.toml"),
        "--model",
        model,
        "--train",
        &demo_data("soil_unit_calibration.csv"),
        "--eval",
        &demo_data("soil_unit_holdout.csv"),
        "--epochs",
        "10",
    ]);
    v.extend(owned(extra));
    v
}

// ---------------------------------------------------------------------------------------------
// Good paths

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

#[test]
fn plan_fits_a_chip_and_not_one_kilobyte() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let soil = example("soil-moisture.toml");
    let vibration = example("vibration-zones.toml");

    let said = run_ok(dir, &["plan", "--config", &soil, "--chip", "nrf51822"]);
    assert!(said.contains("nRF51822"), "{said}");
    assert!(said.contains("\nfits: "), "{said}");
    let p = json(&run_ok(
        dir,
        &["plan", "--config", &soil, "--chip", "nrf51822", "--json"],
    ));
    assert_eq!(p["fits"], true);
    assert!(p["ram"].is_object() && p["flash"].is_object(), "{p}");

    // The vibration model's training arena is about 7 KB.
    let args = [
        "plan", "--config", &vibration, "--ram", "1k", "--flash", "64k",
    ];
    let said = run_expect(dir, &args, CHECK_FAILED);
    assert!(said.contains("does not fit: RAM short by"), "{said}");
    let p = json(&run_expect(
        dir,
        &[&args[..], &["--json"]].concat(),
        CHECK_FAILED,
    ));
    assert_eq!(p["fits"], false);
    assert!(p["advice"].as_array().is_some_and(|a| !a.is_empty()), "{p}");
    assert_eq!(entries(dir), Vec::<String>::new(), "plan writes no file");
}

/// The engine's own RAM and code, from the measured table, or the largest measured figures.
fn largest_measured() -> (u64, u64, u64) {
    let rows = hone_host::memplan::MEASURED_OVERHEADS;
    let max = |f: fn(&hone_host::memplan::MeasuredOverhead) -> u32| {
        rows.iter().map(f).max().expect("measured rows") as u64
    };
    (
        max(|m| m.trainer_bytes),
        max(|m| m.engine_stack_bytes),
        max(|m| m.engine_code_bytes),
    )
}

#[test]
fn plan_counts_the_engine_on_cores_without_measurements() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let soil = example("soil-moisture.toml");
    let (state, stack, code) = largest_measured();
    let totals_add_up = |p: &Value| {
        let ram = &p["ram"];
        let sum = [
            "arena_bytes",
            "engine_state_bytes",
            "stack_bytes",
            "reserve_bytes",
        ]
        .iter()
        .map(|k| ram[k].as_u64().unwrap_or_else(|| panic!("{k}: {ram}")))
        .sum::<u64>();
        assert_eq!(ram["total_bytes"].as_u64(), Some(sum), "{ram}");
        let flash = &p["flash"];
        let sum = ["parameters_bytes", "engine_code_bytes", "reserve_bytes"]
            .iter()
            .map(|k| flash[k].as_u64().unwrap_or_else(|| panic!("{k}: {flash}")))
            .sum::<u64>();
        assert_eq!(flash["total_bytes"].as_u64(), Some(sum), "{flash}");
    };

    // An RV32EC part with 2 KiB of RAM: no board with its core was measured, and the largest
    // measured engine stack alone is more than its RAM.
    let args = ["plan", "--config", &soil, "--chip", "ch32v003f4"];
    let said = run_expect(dir, &args, CHECK_FAILED);
    assert!(said.contains("Engine (estimate"), "{said}");
    assert!(said.contains("estimate: largest measured"), "{said}");
    assert!(said.contains("does not fit: RAM short by"), "{said}");
    let p = json(&run_expect(
        dir,
        &[&args[..], &["--json"]].concat(),
        CHECK_FAILED,
    ));
    assert_eq!(p["engine"]["basis"], "estimated");
    assert_eq!(p["ram"]["engine_state_bytes"].as_u64(), Some(state));
    assert_eq!(p["ram"]["stack_bytes"].as_u64(), Some(stack));
    assert_eq!(p["flash"]["engine_code_bytes"].as_u64(), Some(code));
    let source = p["engine"]["source"].as_str().unwrap_or_default();
    for m in hone_host::memplan::MEASURED_OVERHEADS {
        assert!(source.contains(m.board), "{source}");
    }
    totals_add_up(&p);
    assert!(p["ram"]["budget_bytes"].as_u64().is_some_and(|b| b < stack));

    // A custom budget without a core counts the same estimate: 64 KiB of flash cannot hold
    // the largest measured engine code.
    let custom = ["plan", "--config", &soil, "--ram", "3k", "--flash", "64k"];
    let said = run_expect(dir, &custom, CHECK_FAILED);
    assert!(said.contains("flash short by"), "{said}");
    let p = json(&run_expect(
        dir,
        &[&custom[..], &["--json"]].concat(),
        CHECK_FAILED,
    ));
    assert_eq!(p["engine"]["basis"], "estimated");
    assert_eq!(p["flash"]["engine_code_bytes"].as_u64(), Some(code));
    totals_add_up(&p);

    // Naming a measured core counts its own row.
    let m3 = hone_host::memplan::MEASURED_OVERHEADS
        .iter()
        .find(|m| m.target == "thumbv7m-none-eabi")
        .expect("a Cortex-M3 row");
    let p = json(&run_ok(
        dir,
        &[
            "plan",
            "--config",
            &soil,
            "--ram",
            "64k",
            "--flash",
            "256k",
            "--core",
            "cortex-m3",
            "--json",
        ],
    ));
    assert_eq!(p["fits"], true, "{p}");
    assert_eq!(p["engine"]["basis"], "measured");
    assert_eq!(
        p["ram"]["engine_state_bytes"].as_u64(),
        Some(m3.trainer_bytes as u64)
    );
    assert_eq!(
        p["flash"]["engine_code_bytes"].as_u64(),
        Some(m3.engine_code_bytes as u64)
    );
    assert!(
        p["engine"]["source"]
            .as_str()
            .is_some_and(|s| s.contains(m3.board)),
        "{p}"
    );
    totals_add_up(&p);
}

#[test]
fn plan_advice_says_which_drift_costs_were_not_computed() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (model, _) = soil_model(dir);
    let args = [
        "plan",
        "--config",
        &example("soil-moisture.toml"),
        "--chip",
        "nrf51822",
        "--model",
        model,
        "--train",
        &demo_data("soil_unit_calibration.csv"),
        "--eval",
        &demo_data("soil_unit_holdout.csv"),
        "--epochs",
        "2",
    ];
    let p = json(&run_ok(dir, &[&args[..], &["--json"]].concat()));
    let advice = p["advice"].as_array().expect("advice");
    let (fewer, others): (Vec<&Value>, Vec<&Value>) =
        advice.iter().partition(|a| a["kind"] == "fewer_units");
    assert!(
        !fewer.is_empty(),
        "the 2-8-1 model can halve its hidden layer: {p}"
    );
    assert!(!others.is_empty(), "{p}");
    for a in fewer {
        assert!(a["drift"].is_null(), "{a}");
        let why = a["drift_not_computed"].as_str().unwrap_or_default();
        assert!(why.contains("retrained"), "{a}");
    }
    for a in others {
        assert!(a["drift"]["value"].as_f64().is_some(), "{a}");
        assert!(a["drift_not_computed"].is_null(), "{a}");
    }
    let said = run_ok(dir, &args);
    assert!(
        said.contains("not computed: a changed layer size needs a float model retrained"),
        "{said}"
    );
}

#[test]
fn train_warns_of_a_constant_column() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    // The factory data with the temperature column held at one value.
    let factory = fs::read_to_string(demo_data("soil_factory.csv")).unwrap();
    let mut lines = factory.lines();
    let header = lines.next().expect("a header");
    assert_eq!(header, SOIL_HEAD.trim_end());
    let flat: String = lines
        .map(|l| {
            let f: Vec<&str> = l.split(',').collect();
            format!("{},{},21.5,{}\n", f[0], f[1], f[3])
        })
        .collect();
    fs::write(dir.join("flat.csv"), soil_csv(&flat)).unwrap();
    let args = [
        "train",
        "--config",
        &example("soil-moisture.toml"),
        "--data",
        "flat.csv",
        "--out",
        "m.json",
    ];
    let out = hone(dir, &args);
    assert_eq!(out.status.code(), Some(0), "{}", describe(&args, &out));
    let stderr = text(&out.stderr);
    assert!(
        stderr.contains("warning: flat.csv: channel 1 (temp_c) is constant at 21.5"),
        "{}",
        describe(&args, &out)
    );
    // The varying column is not reported.
    assert!(!stderr.contains("raw_counts"), "{stderr}");
}

#[test]
fn sweep_where_no_point_runs_fails_the_check() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (model, _) = soil_model(dir);
    // Learning rates this large make the float twin diverge: no point can be judged.
    let args = [
        "sweep",
        "--config",
        &example("soil-moisture.toml"),
        "--model",
        model,
        "--train",
        &demo_data("soil_unit_calibration.csv"),
        "--eval",
        &demo_data("soil_unit_holdout.csv"),
        "--lr",
        "100,120",
        "--epochs",
        "200",
        "--jobs",
        "1",
        "--json",
    ];
    let out = hone(dir, &args);
    assert_eq!(
        out.status.code(),
        Some(CHECK_FAILED),
        "{}",
        describe(&args, &out)
    );
    let points = json(&text(&out.stdout));
    let points = points.as_array().expect("an array of points");
    assert_eq!(points.len(), 2);
    assert!(points.iter().all(|p| p["error"].is_string()), "{points:?}");
    assert!(
        text(&out.stderr).contains("check failed: none of the 2 grid points ran"),
        "{}",
        describe(&args, &out)
    );
}

#[test]
fn chips_lists_the_table() {
    let tmp = tempfile::tempdir().unwrap();
    let said = run_ok(tmp.path(), &["chips"]);
    assert!(said.starts_with("id "), "{said}");
    assert!(said.contains("nrf51822"), "{said}");
    let rows = json(&run_ok(tmp.path(), &["chips", "--json"]));
    let rows = rows.as_array().expect("an array of chips");
    assert!(rows.len() >= 10, "at least ten microcontrollers: {rows:?}");
    let mut ids: Vec<&str> = rows.iter().filter_map(|r| r["id"].as_str()).collect();
    assert_eq!(ids.len(), rows.len(), "every chip has an id");
    for r in rows {
        assert!(r["ram_bytes"].as_u64().is_some_and(|b| b > 0), "{r}");
        assert!(r["flash_bytes"].as_u64().is_some_and(|b| b > 0), "{r}");
        let id = r["id"].as_str().unwrap_or_default();
        // Every row names where its figures come from: a document, or "from memory".
        let source = r["source"].as_str().unwrap_or_default();
        assert!(!source.trim().is_empty(), "{id} has no source: {r}");
        // The row, then its source on the indented lines below it.
        let lines: Vec<&str> = said.lines().collect();
        let at = lines
            .iter()
            .position(|l| l.split_whitespace().next() == Some(id))
            .unwrap_or_else(|| panic!("`{id}` missing from the text table"));
        let below: Vec<&str> = lines[at + 1..]
            .iter()
            .take_while(|l| l.starts_with(' '))
            .flat_map(|l| l.split_whitespace())
            .collect();
        let words: Vec<&str> = source.split_whitespace().collect();
        assert_eq!(
            below[1..],
            words[..],
            "the row of {id} does not show its source `{source}`"
        );
    }
    let nrf = rows
        .iter()
        .find(|r| r["id"] == "nrf51822")
        .expect("nrf51822 listed");
    assert_eq!(nrf["ram_bytes"], 16384);
    assert_eq!(nrf["flash_bytes"], 262144);
    ids.sort_unstable();
    ids.dedup();
    assert_eq!(ids.len(), rows.len(), "ids are unique");
}

#[test]
fn sweep_of_four_points_writes_its_folder() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (model, _) = soil_model(dir);
    let args = [
        "sweep",
        "--config",
        &example("soil-moisture.toml"),
        "--model",
        model,
        "--train",
        &demo_data("soil_unit_calibration.csv"),
        "--eval",
        &demo_data("soil_unit_holdout.csv"),
        "--weights",
        "8,16",
        "--lr",
        "0.05,0.02",
        "--epochs",
        "2",
        "--jobs",
        "1",
        "--out",
        "sweep",
    ];
    let said = run_ok(dir, &args);
    assert!(said.contains("Pareto front"), "{said}");
    assert_files(
        &dir.join("sweep"),
        &["sweep.json", "sweep.svg", "sweep.txt"],
    );
    let points = read_json(&dir.join("sweep/sweep.json"));
    let points = points.as_array().expect("an array of points");
    assert_eq!(points.len(), 4);
    for p in points {
        assert!(p["error"].is_null(), "{p}");
        assert!(p["ram_bytes"].as_u64().is_some_and(|b| b > 0), "{p}");
        assert!(p["drift_pct"].as_f64().is_some(), "{p}");
    }
    let words: Vec<&str> = points
        .iter()
        .filter_map(|p| p["settings"]["weights"].as_str())
        .collect();
    assert_eq!(words.iter().filter(|w| **w == "i8").count(), 2, "{words:?}");
    assert_eq!(
        words.iter().filter(|w| **w == "i16").count(),
        2,
        "{words:?}"
    );
    assert!(points.iter().any(|p| p["pareto"] == true));
    // 8-bit weights take less RAM than 16-bit ones.
    let ram = |w: &str| {
        points
            .iter()
            .find(|p| p["settings"]["weights"] == w)
            .and_then(|p| p["ram_bytes"].as_u64())
            .expect("a point")
    };
    assert!(ram("i8") < ram("i16"));
    let svg = fs::read_to_string(dir.join("sweep/sweep.svg")).unwrap();
    assert!(svg.contains("<svg"), "sweep.svg");
    let table = fs::read_to_string(dir.join("sweep/sweep.txt")).unwrap();
    assert!(table.contains("weights"), "{table}");
}

#[test]
fn checkpoint_write_then_read_round_trips() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let (_, blob) = soil_model(dir);
    let blob_bytes = fs::read(dir.join(blob)).unwrap();

    let said = run_ok(dir, &["checkpoint", "write", blob, "--out", "a.img"]);
    assert!(said.contains("written: a.img (16384 bytes)"), "{said}");
    assert_eq!(fs::metadata(dir.join("a.img")).unwrap().len(), 16384);
    let said = run_ok(dir, &["checkpoint", "read", "a.img", "--out", "back.honb"]);
    assert!(said.contains("checkpoint seq 1 in slot A"), "{said}");
    assert!(said.contains("other slot B: blank"), "{said}");
    assert_eq!(fs::read(dir.join("back.honb")).unwrap(), blob_bytes);
    let r = json(&run_ok(dir, &["checkpoint", "read", "a.img", "--json"]));
    assert_eq!(r["checkpoint"]["seq"], 1);
    assert_eq!(r["checkpoint"]["slot"], "A");
    assert_eq!(r["checkpoint"]["len"], blob_bytes.len());
    assert_eq!(r["checkpoint"]["blob_kind"], "model");
    assert_eq!(r["blob"]["crc_ok"], true);

    // A second commit goes into the other slot with the next sequence number.
    run_ok(
        dir,
        &[
            "checkpoint",
            "write",
            blob,
            "--into",
            "a.img",
            "--out",
            "b.img",
        ],
    );
    let r = json(&run_ok(dir, &["checkpoint", "read", "b.img", "--json"]));
    assert_eq!(r["checkpoint"]["seq"], 2);
    assert_eq!(r["checkpoint"]["slot"], "B");
    assert_eq!(r["checkpoint"]["other_slot"]["state"], "older");

    // Another geometry.
    run_ok(
        dir,
        &[
            "checkpoint",
            "write",
            blob,
            "--erase",
            "1024",
            "--region",
            "8k",
            "--out",
            "c.img",
        ],
    );
    assert_eq!(fs::metadata(dir.join("c.img")).unwrap().len(), 8192);
    run_ok(
        dir,
        &[
            "checkpoint",
            "read",
            "c.img",
            "--erase",
            "1024",
            "--out",
            "c.honb",
        ],
    );
    assert_eq!(fs::read(dir.join("c.honb")).unwrap(), blob_bytes);
    assert_files(
        dir,
        &[
            "a.img",
            "b.img",
            "back.honb",
            "c.honb",
            "c.img",
            "soil.honb",
            "soil.json",
        ],
    );
}

/// The demo, twice: with no arguments into `hone-demo/`, and with `demo --out`.
#[test]
fn demo_runs_by_default_and_with_out() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let no_args: [&str; 0] = [];
    let said = run_ok(dir, &no_args);
    assert!(said.contains("Written to hone-demo"), "{said}");
    let out = run_ok(dir, &["demo", "--out", "elsewhere", "--chip", "nrf51822"]);
    assert!(out.contains("Written to elsewhere"), "{out}");
    let mut top: Vec<String> = fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    top.sort();
    assert_eq!(top, ["elsewhere", "hone-demo"]);
    for folder in ["hone-demo", "elsewhere"] {
        let f = dir.join(folder);
        for name in [
            "report.html",
            "report.md",
            "drift.json",
            "base-model.honb",
            "base_model.rs",
            "base-model.json",
            "plan.json",
        ] {
            assert!(f.join(name).is_file(), "{folder}/{name} missing");
        }
        assert!(
            entries(&f)
                .iter()
                .all(|e| !e.contains("/.") && !e.starts_with('.')),
            "temporary files left in {folder}: {:?}",
            entries(&f)
        );
        let drift = read_json(&f.join("drift.json"));
        assert_eq!(drift["verdict"]["pass"], true, "{}", drift["verdict"]);
        assert_eq!(read_json(&f.join("plan.json"))["fits"], true);
        assert_blob_frame(&fs::read(f.join("base-model.honb")).unwrap());
        let html = fs::read_to_string(f.join("report.html")).unwrap();
        assert!(html.contains("<svg"), "{folder}/report.html has no plot");
        // Quantization, plan and guard are tables, not preformatted terminal text.
        assert!(
            !html.contains("<pre"),
            "{folder}/report.html has a <pre> dump"
        );
        assert!(html.matches("<table").count() >= 8, "{folder}/report.html");
        let inspected = run_ok(dir, &["inspect", &format!("{folder}/base-model.honb")]);
        assert!(inspected.contains("hone model"), "{inspected}");
    }
    // The demo is seeded: both runs agree byte for byte.
    for name in [
        "drift.json",
        "base-model.honb",
        "base_model.rs",
        "report.md",
    ] {
        assert_eq!(
            fs::read(dir.join("hone-demo").join(name)).unwrap(),
            fs::read(dir.join("elsewhere").join(name)).unwrap(),
            "{name} differs between two runs"
        );
    }
}

#[test]
fn demo_data_regenerates_the_committed_files() {
    let tmp = tempfile::tempdir().unwrap();
    let said = run_ok(tmp.path(), &["demo-data", "--out", "data"]);
    let names = [
        "soil_factory.csv",
        "soil_unit_calibration.csv",
        "soil_unit_holdout.csv",
        "vibration_factory.csv",
        "vibration_unit_calibration.csv",
        "vibration_unit_holdout.csv",
    ];
    assert_files(&tmp.path().join("data"), &names);
    for name in names {
        assert!(said.contains(name), "{said}");
        assert!(
            fs::read(tmp.path().join("data").join(name)).unwrap()
                == fs::read(repo().join("demo-data").join(name)).unwrap(),
            "{name} differs from the committed demo data"
        );
    }
}

/// `hone chips --json | head -1` closes the pipe early; that is not a crash.
#[test]
fn closed_stdout_is_not_a_panic() {
    let tmp = tempfile::tempdir().unwrap();
    let (reader, writer) = std::io::pipe().expect("a pipe");
    drop(reader);
    let out = Command::new(HONE)
        .args(["chips", "--json"])
        .current_dir(tmp.path())
        .env_remove("RUST_BACKTRACE")
        .stdin(Stdio::null())
        .stdout(writer)
        .stderr(Stdio::piped())
        .output()
        .expect("the hone binary starts");
    let stderr = text(&out.stderr);
    assert!(
        !stderr.contains("panicked") && !stderr.contains("RUST_BACKTRACE"),
        "hone chips --json into a closed pipe panics:\n{stderr}"
    );
    assert!(
        matches!(out.status.code(), Some(0) | Some(BAD_INPUT)),
        "status {:?}, stderr:\n{stderr}",
        out.status.code()
    );
}

// ---------------------------------------------------------------------------------------------
// Malformed inputs

/// One malformed input: files written into `in/`, the command run in the case's folder with
/// an empty `out/` beside it.
struct Case {
    /// What is wrong; also the case's folder.
    name: &'static str,
    /// Files to create in `in/`.
    files: Vec<(&'static str, Vec<u8>)>,
    /// Arguments; `in/…` and `out/…` are relative to the case's folder.
    args: Vec<String>,
    /// Texts stderr must contain: the file, the place, what is wrong.
    stderr: Vec<&'static str>,
    /// Outputs the command was asked for, under `out/`, that must not exist afterwards.
    absent: Vec<&'static str>,
}

fn case(name: &'static str) -> Case {
    Case {
        name,
        files: Vec::new(),
        args: Vec::new(),
        stderr: Vec::new(),
        absent: Vec::new(),
    }
}

impl Case {
    fn file(mut self, name: &'static str, bytes: impl Into<Vec<u8>>) -> Case {
        self.files.push((name, bytes.into()));
        self
    }

    fn args<S: AsRef<str>>(mut self, args: &[S]) -> Case {
        self.args = owned(args);
        self
    }

    fn stderr(mut self, texts: &[&'static str]) -> Case {
        self.stderr = texts.to_vec();
        self
    }

    fn absent(mut self, paths: &[&'static str]) -> Case {
        self.absent = paths.to_vec();
        self
    }
}

/// Replaces the value after the first `key` in `text` (up to the next `,` or line end) with
/// `value`.
fn with_first_value(text: &str, key: &str, value: &str) -> String {
    let at = text
        .find(key)
        .unwrap_or_else(|| panic!("`{key}` in:\n{text}"))
        + key.len();
    let end = at
        + text[at..]
            .find([',', '\n'])
            .unwrap_or_else(|| panic!("a value after `{key}`"));
    format!("{}{value}{}", &text[..at], &text[end..])
}

/// Replaces the one occurrence of `from` in `text`.
fn edit(text: &str, from: &str, to: &str) -> String {
    assert_eq!(text.matches(from).count(), 1, "`{from}` once in:\n{text}");
    text.replacen(from, to, 1)
}

/// A small regression config; the config cases change one thing in it, so the line numbers
/// below are those of this text.
const SOIL_TOML: &str = r#"# Soil moisture, small.
loss = "squared-error"

[input]
channels = 2
format = "Q3.12"

[formats]
gradients = "Q1.14"

[[layer]]
kind = "dense"
units = 4

[[layer]]
kind = "tanh"

[[layer]]
kind = "dense"
units = 1

[train]
epochs = 2
batch = 8
learning-rate = 0.05

[data]
target = "vwc"
features = ["raw_counts", "temp_c"]
ignore = ["unit"]
"#;

const SOIL_HEAD: &str = "unit,raw_counts,temp_c,vwc\n";

fn soil_csv(rows: &str) -> String {
    format!("{SOIL_HEAD}{rows}")
}

/// Outputs of the commands, made once for the cases that need a real model, blob or image.
struct Fixtures {
    soil_model: Vec<u8>,
    soil_blob: Vec<u8>,
    image: Vec<u8>,
    vibration_config: Vec<u8>,
    vibration_model: Vec<u8>,
}

fn fixtures(dir: &Path) -> Fixtures {
    let (model, blob) = soil_model(dir);
    run_ok(dir, &["checkpoint", "write", blob, "--out", "soil.img"]);
    let vib = edit(
        &fs::read_to_string(example("vibration-zones.toml")).unwrap(),
        "epochs = 40",
        "epochs = 2",
    );
    fs::write(dir.join("vibration.toml"), &vib).unwrap();
    run_ok(
        dir,
        &[
            "train",
            "--config",
            "vibration.toml",
            "--data",
            &demo_data("vibration_factory.csv"),
            "--out",
            "vibration.json",
        ],
    );
    let read = |name: &str| fs::read(dir.join(name)).unwrap();
    Fixtures {
        soil_model: read(model),
        soil_blob: read(blob),
        image: read("soil.img"),
        vibration_config: vib.into_bytes(),
        vibration_model: read("vibration.json"),
    }
}

/// The vibration calibration file without its first sample column: 63 inputs for a model of
/// 64.
fn vibration_63_columns() -> String {
    let full = fs::read_to_string(demo_data("vibration_unit_calibration.csv")).unwrap();
    full.lines()
        .map(|l| l.split_once(',').expect("a comma").1)
        .collect::<Vec<_>>()
        .join("\n")
}

/// A blob with its CRC trailer recomputed after a patch.
fn with_crc(mut bytes: Vec<u8>) -> Vec<u8> {
    let n = bytes.len() - 4;
    let crc = crc32(&bytes[..n]);
    bytes[n..].copy_from_slice(&crc.to_le_bytes());
    bytes
}

fn malformed_cases(fx: &Fixtures) -> Vec<Case> {
    let soil = example("soil-moisture.toml");
    let factory = demo_data("soil_factory.csv");
    let cal = demo_data("soil_unit_calibration.csv");
    let hold = demo_data("soil_unit_holdout.csv");
    let train = |data: &str| {
        owned(&[
            "train",
            "--config",
            &soil,
            "--data",
            data,
            "--out",
            "out/m.json",
        ])
    };
    let train_config = |config: &str| {
        owned(&[
            "train",
            "--config",
            config,
            "--data",
            &factory,
            "--out",
            "out/m.json",
        ])
    };
    let quantize = |config: &str, model: &str, data: &str| {
        owned(&[
            "quantize",
            "--config",
            config,
            "--model",
            model,
            "--data",
            data,
            "--blob",
            "out/m.honb",
            "--rust",
            "out/m.rs",
        ])
    };
    let blob = &fx.soil_blob;
    let mut crc_broken = blob.clone();
    crc_broken[blob.len() / 2] ^= 0x01;
    let mut other_version = blob.clone();
    // A later format version; only the version differs, the CRC is right.
    other_version[4..6].copy_from_slice(&9u16.to_le_bytes());
    let other_version = with_crc(other_version);
    let mut wrong_magic = blob.clone();
    wrong_magic[..4].copy_from_slice(b"HONX");
    let truncated = blob[..blob.len() / 2].to_vec();
    let model_text = String::from_utf8(fx.soil_model.clone()).unwrap();
    let future_model = edit(&model_text, "\"version\": 1,", "\"version\": 7,");
    let narrower = edit(
        &fs::read_to_string(&soil).unwrap(),
        "units = 8",
        "units = 4",
    );
    let commented_model = edit(
        &model_text,
        "\"version\": 1,",
        "\"version\": 1,\n  \"comment\": \"factory model\",",
    );
    let zero_gain_model = with_first_value(&model_text, "\"gain\": ", "0.0");
    let drift = |extra: &[&str]| {
        let mut v = owned(&[
            "drift",
            "--config",
            &soil,
            "--model",
            "in/model.json",
            "--train",
            &cal,
            "--eval",
            &hold,
            "--epochs",
            "1",
            "--report",
            "out/report",
        ]);
        v.extend(owned(extra));
        v
    };

    vec![
        // ---- data files ----
        case("csv-truncated-last-row")
            .file("cut.csv", soil_csv("1,1647,7.16,0.3841\n1,2316,32"))
            .args(&train("in/cut.csv"))
            .stderr(&["in/cut.csv: line 3: 3 fields, header has 4", "truncated"])
            .absent(&["m.json"]),
        case("csv-non-numeric")
            .file("abc.csv", soil_csv("1,1647,7.16,0.38\n1,2316,abc,0.14\n"))
            .args(&train("in/abc.csv"))
            .stderr(&["in/abc.csv: line 3, column `temp_c`: `abc` is not a number"])
            .absent(&["m.json"]),
        case("csv-nan")
            .file("nan.csv", soil_csv("1,1647,7.16,0.38\n1,2316,NaN,0.14\n"))
            .args(&train("in/nan.csv"))
            .stderr(&["in/nan.csv: line 3, column `temp_c`: `NaN` is not a finite number"])
            .absent(&["m.json"]),
        case("csv-inf")
            .file("inf.csv", soil_csv("1,1647,7.16,0.38\n1,inf,7.1,0.14\n"))
            .args(&train("in/inf.csv"))
            .stderr(&["in/inf.csv: line 3, column `raw_counts`: `inf` is not a finite number"])
            .absent(&["m.json"]),
        case("csv-minus-inf")
            .file("minf.csv", soil_csv("1,1647,7.16,0.38\n1,2000,7.1,-Inf\n"))
            .args(&train("in/minf.csv"))
            .stderr(&["in/minf.csv: line 3, column `vwc`: `-Inf` is not a finite number"])
            .absent(&["m.json"]),
        case("csv-empty-field")
            .file("hole.csv", soil_csv("1,1647,,0.38\n1,2000,7.1,0.2\n"))
            .args(&train("in/hole.csv"))
            .stderr(&["in/hole.csv: line 2, column `temp_c`: the field is empty"])
            .absent(&["m.json"]),
        case("csv-wrong-column-count")
            .file("extra.csv", soil_csv("1,1647,7.16,0.38\n1,2000,7.1,0.2,9\n"))
            .args(&train("in/extra.csv"))
            .stderr(&["in/extra.csv: line 3: 5 fields, header has 4"])
            .absent(&["m.json"]),
        case("csv-missing-target")
            .file("notarget.csv", "unit,raw_counts,temp_c\n1,1647,7.16\n")
            .args(&train("in/notarget.csv"))
            .stderr(&["in/notarget.csv: no column `vwc` (named as the target)"])
            .absent(&["m.json"]),
        case("csv-bad-eval-file-in-drift")
            .file("model.json", fx.soil_model.clone())
            .file("eval.csv", soil_csv("1,1647,7.16,0.38\n1,2316,wet,0.14\n"))
            .args(&[
                "drift",
                "--config",
                &soil,
                "--model",
                "in/model.json",
                "--train",
                &cal,
                "--eval",
                "in/eval.csv",
                "--epochs",
                "1",
                "--report",
                "out/report",
            ])
            .stderr(&["in/eval.csv: line 3, column `temp_c`: `wet` is not a number"])
            .absent(&["report"]),
        case("csv-overflowing-column")
            .file(
                "huge.csv",
                soil_csv("1,1647,1e300,0.38\n1,2316,-1e300,0.14\n1,2000,7.1,0.2\n"),
            )
            .args(&train("in/huge.csv"))
            .stderr(&[
                "in/huge.csv: line 2, column `temp_c`: `1e300` is larger in magnitude than 1e12",
            ])
            .absent(&["m.json"]),
        // ---- dimensions ----
        case("csv-fewer-features-than-the-config-input")
            .file("vibration.toml", fx.vibration_config.clone())
            .file("w63.csv", vibration_63_columns())
            .args(&[
                "train",
                "--config",
                "in/vibration.toml",
                "--data",
                "in/w63.csv",
                "--out",
                "out/m.json",
            ])
            .stderr(&[
                "in/vibration.toml does not fit the data in in/w63.csv",
                "1 × 64 = 64 values",
                "63 feature columns",
            ])
            .absent(&["m.json"]),
        case("csv-fewer-features-than-the-model")
            .file("vibration.toml", fx.vibration_config.clone())
            .file("vibration.json", fx.vibration_model.clone())
            .file("w63.csv", vibration_63_columns())
            .args(&quantize(
                "in/vibration.toml",
                "in/vibration.json",
                "in/w63.csv",
            ))
            .stderr(&[
                "in/w63.csv: the features do not match the model",
                "the model takes 64 features, the file gives 63",
                "missing `s0`",
            ])
            .absent(&["m.honb", "m.rs"]),
        case("model-weights-do-not-match-the-config")
            .file("narrow.toml", narrower)
            .file("model.json", fx.soil_model.clone())
            .args(&quantize("in/narrow.toml", "in/model.json", &cal))
            .stderr(&["in/model.json", "layer 0"])
            .absent(&["m.honb", "m.rs"]),
        // ---- outputs ----
        case("quantize-second-output-cannot-be-written")
            .file("model.json", fx.soil_model.clone())
            .args(&[
                "quantize",
                "--config",
                &soil,
                "--model",
                "in/model.json",
                "--data",
                &cal,
                "--blob",
                "out/m.honb",
                "--rust",
                "out/no-such-dir/m.rs",
            ])
            .stderr(&["out/no-such-dir/m.rs"])
            .absent(&["m.honb", "no-such-dir"]),
        // ---- config files ----
        case("toml-unknown-top-level-key")
            .file(
                "top.toml",
                edit(
                    SOIL_TOML,
                    "loss = \"squared-error\"\n",
                    "loss = \"squared-error\"\nepochz = 3\n",
                ),
            )
            .args(&train_config("in/top.toml"))
            .stderr(&["in/top.toml:3:1: `epochz`: unknown key"])
            .absent(&["m.json"]),
        case("toml-unknown-layer-key")
            .file(
                "layer.toml",
                edit(SOIL_TOML, "units = 4\n", "units = 4\nunitz = 4\n"),
            )
            .args(&train_config("in/layer.toml"))
            .stderr(&["in/layer.toml:14:1: `layer[0].unitz`: unknown key"])
            .absent(&["m.json"]),
        case("toml-bad-q-format")
            .file(
                "q.toml",
                edit(SOIL_TOML, "gradients = \"Q1.14\"", "gradients = \"Q2.14\""),
            )
            .args(&train_config("in/q.toml"))
            .stderr(&["in/q.toml:9:13: `formats.gradients`: `Q2.14`", "17 bits"])
            .absent(&["m.json"]),
        case("toml-zero-units")
            .file("zero.toml", edit(SOIL_TOML, "units = 4", "units = 0"))
            .args(&train_config("in/zero.toml"))
            .stderr(&["in/zero.toml:13:9: `layer[0].units`: is 0"])
            .absent(&["m.json"]),
        // ---- float model files ----
        case("model-invalid-json")
            .file(
                "broken.json",
                "{\n  \"format\": \"hone-float-model\",\n  \"version\": 1,\n  \"input\": { \"channels\": 2 \"len\": 1 }\n}\n",
            )
            .args(&quantize(&soil, "in/broken.json", &cal))
            .stderr(&["in/broken.json:4:28: not a hone float model"])
            .absent(&["m.honb", "m.rs"]),
        case("model-unsupported-version")
            .file("future.json", future_model)
            .args(&quantize(&soil, "in/future.json", &cal))
            .stderr(&["in/future.json: `version` is 7, this build reads version 1"])
            .absent(&["m.honb", "m.rs"]),
        case("model-unknown-key")
            .file("commented.json", commented_model)
            .args(&quantize(&soil, "in/commented.json", &cal))
            .stderr(&[
                "in/commented.json:",
                "not a hone float model",
                "unknown field `comment`",
            ])
            .absent(&["m.honb", "m.rs"]),
        case("model-zero-scaling-gain")
            .file("gain.json", zero_gain_model)
            .args(&quantize(&soil, "in/gain.json", &cal))
            .stderr(&["in/gain.json: `scaling[0].gain` is 0"])
            .absent(&["m.honb", "m.rs"]),
        // ---- blobs ----
        case("blob-broken-crc")
            .file("crc.honb", crc_broken.clone())
            .args(&["inspect", "in/crc.honb"])
            .stderr(&["in/crc.honb: CRC mismatch"]),
        case("blob-broken-crc-into-an-image")
            .file("crc.honb", crc_broken)
            .args(&["checkpoint", "write", "in/crc.honb", "--out", "out/a.img"])
            .stderr(&["in/crc.honb: the blob to write is not valid: CRC mismatch"])
            .absent(&["a.img"]),
        case("blob-other-format-version")
            .file("v9.honb", other_version)
            .args(&["inspect", "in/v9.honb"])
            .stderr(&["in/v9.honb: blob format version 9, but this build of hone reads"]),
        case("blob-wrong-magic")
            .file("magic.honb", wrong_magic)
            .args(&["inspect", "in/magic.honb"])
            .stderr(&["in/magic.honb: not a hone blob", "HONB"]),
        case("blob-truncated")
            .file("half.honb", truncated)
            .args(&["inspect", "in/half.honb"])
            .stderr(&["in/half.honb: CRC mismatch", "truncated"]),
        // ---- targets and options ----
        case("plan-unknown-chip")
            .args(&["plan", "--config", &soil, "--chip", "nrf99999"])
            .stderr(&["--chip: unknown chip `nrf99999`", "hone chips"]),
        case("plan-unparsable-size")
            .args(&["plan", "--config", &soil, "--ram", "12q", "--flash", "64k"])
            .stderr(&["--ram: size `12q`: unknown unit `q`"]),
        case("plan-chip-and-ram-together")
            .args(&[
                "plan", "--config", &soil, "--chip", "nrf51822", "--ram", "1k", "--flash", "64k",
            ])
            .stderr(&["--chip", "--ram"]),
        case("plan-core-not-measured")
            .args(&[
                "plan", "--config", &soil, "--ram", "64k", "--flash", "256k", "--core",
                "cortex-m7",
            ])
            .stderr(&["--core: `cortex-m7` is not a measured core", "cortex-m4f"]),
        case("drift-nan-threshold")
            .file("model.json", fx.soil_model.clone())
            .args(&drift(&["--max-loss-gap", "NaN"]))
            .stderr(&["--max-loss-gap", "`NaN` is not a finite number"])
            .absent(&["report"]),
        case("drift-negative-threshold")
            .file("model.json", fx.soil_model.clone())
            .args(&drift(&["--min-grad-sqnr=-3"]))
            .stderr(&["--min-grad-sqnr", "`-3` is negative"])
            .absent(&["report"]),
        case("drift-zero-probe")
            .file("model.json", fx.soil_model.clone())
            .args(&drift(&["--probe", "0"]))
            .stderr(&["--probe", "0"])
            .absent(&["report"]),
        case("demo-unknown-chip")
            .args(&["demo", "--out", "out/demo", "--chip", "nrf99999"])
            .stderr(&["unknown chip `nrf99999`"])
            .absent(&["demo"]),
        case("sweep-12-bit-word")
            .file("model.json", fx.soil_model.clone())
            .args(&[
                "sweep",
                "--config",
                &soil,
                "--model",
                "in/model.json",
                "--train",
                &cal,
                "--eval",
                &hold,
                "--weights",
                "16,12",
                "--epochs",
                "1",
                "--out",
                "out/sweep",
            ])
            .stderr(&["--weights: 12 bits is not a word size"])
            .absent(&["sweep"]),
        case("sweep-zero-learning-rate")
            .file("model.json", fx.soil_model.clone())
            .args(&[
                "sweep", "--config", &soil, "--model", "in/model.json", "--train", &cal,
                "--eval", &hold, "--lr", "0.01,0", "--epochs", "1", "--out", "out/sweep",
            ])
            .stderr(&["--lr: 0 is not a positive learning rate"])
            .absent(&["sweep"]),
        case("sweep-learning-rate-below-one-step")
            .file("model.json", fx.soil_model.clone())
            .args(&[
                "sweep", "--config", &soil, "--model", "in/model.json", "--train", &cal,
                "--eval", &hold, "--lr", "1e-12", "--epochs", "1", "--out", "out/sweep",
            ])
            .stderr(&["--lr: 0.000000000001 rounds to zero"])
            .absent(&["sweep"]),
        case("sweep-frozen-mode")
            .file("model.json", fx.soil_model.clone())
            .args(&[
                "sweep", "--config", &soil, "--model", "in/model.json", "--train", &cal,
                "--eval", &hold, "--mode", "full,frozen", "--epochs", "1", "--out", "out/sweep",
            ])
            .stderr(&["--mode: frozen trains nothing; use full, bias-only or weights-only"])
            .absent(&["sweep"]),
        // The spelling `hone inspect` once printed is not a rounding name; the message lists
        // the names the config and the sweep share.
        case("sweep-rounding-underscore")
            .file("model.json", fx.soil_model.clone())
            .args(&[
                "sweep", "--config", &soil, "--model", "in/model.json", "--train", &cal,
                "--eval", &hold, "--rounding", "nearest_even", "--out", "out/sweep",
            ])
            .stderr(&["`nearest_even` is not a rounding; use nearest-even, toward-zero or stochastic"])
            .absent(&["sweep"]),
        case("drift-zero-epochs")
            .file("model.json", fx.soil_model.clone())
            .args(&[
                "drift", "--config", &soil, "--model", "in/model.json", "--train", &cal,
                "--eval", &hold, "--epochs", "0", "--report", "out/report",
            ])
            .stderr(&["--epochs", "0"])
            .absent(&["report"]),
        // ---- checkpoint images ----
        case("checkpoint-image-not-whole-sectors")
            .file("odd.img", fx.image[..5000].to_vec())
            .args(&["checkpoint", "read", "in/odd.img", "--out", "out/b.honb"])
            .stderr(&["in/odd.img: image of 5000 B is not a whole number of 4096 B erase sectors"])
            .absent(&["b.honb"]),
        case("checkpoint-image-not-whole-sectors-into")
            .file("odd.img", fx.image[..5000].to_vec())
            .file("m.honb", fx.soil_blob.clone())
            .args(&[
                "checkpoint",
                "write",
                "in/m.honb",
                "--into",
                "in/odd.img",
                "--out",
                "out/a.img",
            ])
            .stderr(&["in/odd.img: image of 5000 B"])
            .absent(&["a.img"]),
        case("checkpoint-region-not-whole-sectors")
            .file("m.honb", fx.soil_blob.clone())
            .args(&[
                "checkpoint",
                "write",
                "in/m.honb",
                "--region",
                "5000",
                "--out",
                "out/a.img",
            ])
            .stderr(&["--region", "5000 B"])
            .absent(&["a.img"]),
        case("checkpoint-write-unit-zero")
            .file("m.honb", fx.soil_blob.clone())
            .args(&[
                "checkpoint",
                "write",
                "in/m.honb",
                "--write",
                "0",
                "--out",
                "out/a.img",
            ])
            .stderr(&["error: --write: flash geometry", "powers of two"])
            .absent(&["a.img"]),
        case("checkpoint-region-of-one-sector")
            .file("m.honb", fx.soil_blob.clone())
            .args(&[
                "checkpoint",
                "write",
                "in/m.honb",
                "--erase",
                "1024",
                "--region",
                "1k",
                "--out",
                "out/a.img",
            ])
            .stderr(&["error: --region: ", "two slots"])
            .absent(&["a.img"]),
        case("checkpoint-blank-image")
            .file("blank.img", vec![0xFF; 16384])
            .args(&["checkpoint", "read", "in/blank.img", "--out", "out/b.honb"])
            .stderr(&["in/blank.img: no valid checkpoint"])
            .absent(&["b.honb"]),
        case("onnx-not-a-model")
            .file("m.onnx", b"\xff\xff\xff not protobuf".to_vec())
            .args(&["onnx", "import", "in/m.onnx", "--out", "out/m.json"])
            .stderr(&["in/m.onnx: not an ONNX model"])
            .absent(&["m.json"]),
        case("onnx-unsupported-operator")
            .file("m.onnx", onnx_fixture_with("soil", "Tanh", "Tanx"))
            .args(&["onnx", "import", "in/m.onnx", "--out", "out/m.json"])
            .stderr(&[
                "in/m.onnx: node 3 \"squash\" (Tanx): operator not supported",
            ])
            .absent(&["m.json"]),
        case("onnx-leaky-slope-not-a-shift")
            .file(
                "m.onnx",
                onnx_fixture_with("vibration", 0.125f32.to_le_bytes(), 0.1f32.to_le_bytes()),
            )
            .args(&["onnx", "import", "in/m.onnx", "--out", "out/m.json"])
            .stderr(&[
                "in/m.onnx: node 6 \"leaky\" (LeakyRelu): alpha = 0.1",
                "power of two",
            ])
            .absent(&["m.json"]),
        case("onnx-export-checkpoint-as-model")
            .file("m.honb", fx.soil_blob.clone())
            .args(&[
                "onnx",
                "export",
                "--blob",
                "in/m.honb",
                "--checkpoint",
                "in/m.honb",
                "--out",
                "out/m.onnx",
            ])
            .stderr(&["in/m.honb: a model blob, not a checkpoint"])
            .absent(&["m.onnx"]),
    ]
}

/// A committed ONNX fixture (`host-cli/host/tests/onnx/`) with the one occurrence of `from` in
/// its bytes replaced by `to` (of the same length).
fn onnx_fixture_with(name: &str, from: impl AsRef<[u8]>, to: impl AsRef<[u8]>) -> Vec<u8> {
    let (from, to) = (from.as_ref(), to.as_ref());
    assert_eq!(from.len(), to.len());
    let mut bytes = fs::read(onnx_fixture(name)).unwrap();
    let at: Vec<usize> = (0..bytes.len() - from.len())
        .filter(|&i| &bytes[i..i + from.len()] == from)
        .collect();
    assert_eq!(at.len(), 1, "{name}: {from:?} once");
    bytes[at[0]..at[0] + to.len()].copy_from_slice(to);
    bytes
}

/// Runs one case in `root/<name>`; returns what went wrong, if anything.
fn check_case(root: &Path, c: &Case) -> Option<String> {
    let dir = root.join(c.name);
    let input = dir.join("in");
    fs::create_dir_all(&input).unwrap();
    fs::create_dir(dir.join("out")).unwrap();
    for (name, bytes) in &c.files {
        fs::write(input.join(name), bytes).unwrap();
    }
    let out = hone(&dir, &c.args);
    let stderr = text(&out.stderr);
    let mut wrong = Vec::new();
    if out.status.code() != Some(BAD_INPUT) {
        wrong.push(format!(
            "exit status {:?}, expected {BAD_INPUT}",
            out.status.code()
        ));
    }
    if !stderr.lines().any(|l| l.starts_with("error: ")) {
        wrong.push("no line of stderr starts with `error: `".into());
    }
    for want in &c.stderr {
        if !stderr.contains(want) {
            wrong.push(format!("stderr lacks `{want}`"));
        }
    }
    for bad in ["panicked", "RUST_BACKTRACE", "stack backtrace"] {
        if stderr.contains(bad) {
            wrong.push(format!("stderr contains `{bad}`"));
        }
    }
    for p in &c.absent {
        if dir.join("out").join(p).exists() {
            wrong.push(format!("out/{p} exists"));
        }
    }
    let left = entries(&dir.join("out"));
    if !left.is_empty() {
        wrong.push(format!("left in out/: {left:?}"));
    }
    let mut inputs: Vec<String> = c.files.iter().map(|(n, _)| n.to_string()).collect();
    inputs.sort();
    if entries(&input) != inputs {
        wrong.push(format!("in/ now holds {:?}", entries(&input)));
    }
    if entries(&dir)
        .iter()
        .any(|e| !e.starts_with("in/") && !e.starts_with("out/"))
    {
        wrong.push(format!("the working folder now holds {:?}", entries(&dir)));
    }
    (!wrong.is_empty()).then(|| {
        format!(
            "case `{}`:\n  - {}\n  {}",
            c.name,
            wrong.join("\n  - "),
            describe(&c.args, &out).replace('\n', "\n  ")
        )
    })
}

#[test]
fn malformed_inputs_exit_2_with_a_precise_message_and_no_output() {
    let tmp = tempfile::tempdir().unwrap();
    let fixture_dir = tmp.path().join("fixtures");
    fs::create_dir(&fixture_dir).unwrap();
    let fx = fixtures(&fixture_dir);
    let cases = malformed_cases(&fx);
    assert!(cases.len() >= 20, "{} cases", cases.len());
    let mut names: Vec<&str> = cases.iter().map(|c| c.name).collect();
    names.sort_unstable();
    names.dedup();
    assert_eq!(names.len(), cases.len(), "case names are unique");
    let root = tmp.path().join("cases");
    let failures: Vec<String> = cases.iter().filter_map(|c| check_case(&root, c)).collect();
    assert!(
        failures.is_empty(),
        "{} of {} malformed cases failed:\n\n{}",
        failures.len(),
        cases.len(),
        failures.join("\n\n")
    );
}
