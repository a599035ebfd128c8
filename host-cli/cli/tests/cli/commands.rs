//! The other commands' good paths: plan, train warnings, sweep, chips, checkpoint, the demo and a closed pipe.

use super::*;

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
pub(super) fn largest_measured() -> (u64, u64, u64) {
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

/// Outside a source tree, `hone device` says where it looked and how to name the tree, with
/// exit status 2, instead of building from the tree the binary was compiled in.
#[test]
fn device_outside_a_source_tree_names_the_tree_it_needs() {
    let tmp = tempfile::tempdir().unwrap();
    for args in [
        &["device", "verify", "--board", "lm3s6965evb"][..],
        &["device", "session", "--board", "microbit"][..],
    ] {
        let out = Command::new(HONE)
            .args(args)
            .current_dir(tmp.path())
            .env_remove("HONE_REPO")
            .stdin(Stdio::null())
            .output()
            .expect("the hone binary starts");
        let err = text(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{}", describe(args, &out));
        assert!(
            err.contains("no hone source tree") && err.contains("HONE_REPO"),
            "{err}"
        );
    }
    // Named by the variable, the tree is found from anywhere.
    let out = Command::new(HONE)
        .args(["device", "session", "--board", "pdp11", "--out"])
        .arg(tmp.path().join("s"))
        .current_dir(tmp.path())
        .env("HONE_REPO", repo())
        .stdin(Stdio::null())
        .output()
        .expect("the hone binary starts");
    let err = text(&out.stderr);
    assert!(
        !err.contains("no hone source tree") && err.contains("pdp11"),
        "{err}"
    );
}
