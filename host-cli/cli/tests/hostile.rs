//! The `hone` command under hostile input and concurrent use: oversized and endless files,
//! outputs that would destroy an input or each other, special files, stale temporary files,
//! concurrent commits into one image and concurrent reports into one folder, out-of-range
//! sweep settings, and messages that echo what they were given.
//!
//! Every refused case must end with exit status 2, an `error: …` line naming the file (or the
//! option) at fault, no panic, every input unchanged, and no output or temporary file left.

use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

const BAD_INPUT: i32 = 2;
const HONE: &str = env!("CARGO_BIN_EXE_hone");

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .ancestors()
        .nth(2)
        .expect("host-cli/cli sits inside the workspace")
        .to_path_buf()
}

fn example(name: &str) -> String {
    repo().join("configs").join(name).display().to_string()
}

fn demo_data(name: &str) -> String {
    repo().join("demo-data").join(name).display().to_string()
}

fn hone(dir: &Path, args: &[&str]) -> Output {
    Command::new(HONE)
        .args(args)
        .current_dir(dir)
        .env_remove("RUST_BACKTRACE")
        .stdin(Stdio::null())
        .output()
        .expect("the hone binary starts")
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn describe(args: &[&str], out: &Output) -> String {
    format!(
        "hone {}\nstatus: {:?}\nstdout:\n{}\nstderr:\n{}",
        args.join(" "),
        out.status.code(),
        text(&out.stdout),
        text(&out.stderr)
    )
}

fn run_ok(dir: &Path, args: &[&str]) -> String {
    let out = hone(dir, args);
    assert_eq!(out.status.code(), Some(0), "{}", describe(args, &out));
    text(&out.stdout)
}

/// Every file under `dir` (names relative to it, sorted) with its bytes.
fn snapshot(dir: &Path) -> Vec<(String, Vec<u8>)> {
    let mut v: Vec<(String, Vec<u8>)> = fs::read_dir(dir)
        .unwrap()
        .flatten()
        .map(|e| {
            let p = e.path();
            let bytes = if p.is_file() {
                fs::read(&p).unwrap()
            } else {
                Vec::new()
            };
            (e.file_name().to_string_lossy().into_owned(), bytes)
        })
        .collect();
    v.sort();
    v
}

fn names(dir: &Path) -> Vec<String> {
    snapshot(dir).into_iter().map(|(n, _)| n).collect()
}

/// Runs a command that must be refused: exit status 2, stderr holding every text of `want`,
/// no panic, and the folder `dir` exactly as before (no output, no temporary file, inputs
/// unchanged).
fn refused(dir: &Path, args: &[&str], want: &[&str]) -> String {
    let before = snapshot(dir);
    let out = hone(dir, args);
    let stderr = text(&out.stderr);
    let what = describe(args, &out);
    assert_eq!(out.status.code(), Some(BAD_INPUT), "{what}");
    assert!(stderr.lines().any(|l| l.starts_with("error: ")), "{what}");
    for w in want {
        assert!(stderr.contains(w), "stderr lacks `{w}`:\n{what}");
    }
    assert!(!stderr.contains("panicked"), "{what}");
    assert!(
        before == snapshot(dir),
        "the folder changed:\n{what}\nnow: {:?}",
        names(dir)
    );
    stderr
}

/// Trains and quantizes the soil example in `dir`: `soil.json` and `soil.honb`.
fn soil_model(dir: &Path) {
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
}

/// A sparse file of `len` bytes: large to the file system, nothing on the disk.
fn sparse(path: &Path, len: u64) {
    fs::File::create(path).unwrap().set_len(len).unwrap();
}

// ---------------------------------------------------------------------------------------------
// Bounded reads

#[test]
fn files_larger_than_their_format_allows_are_refused_before_reading() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let flash = hone_host::limits::FLASH_BYTES;
    sparse(&dir.join("big.honb"), flash + 1);
    sparse(&dir.join("big.img"), 2 * flash);
    sparse(
        &dir.join("big.toml"),
        hone_host::limits::CONFIG_BYTES + 1,
    );
    sparse(
        &dir.join("big.json"),
        hone_host::limits::MODEL_BYTES + 1,
    );
    sparse(
        &dir.join("big.csv"),
        hone_host::limits::CSV_BYTES + 1,
    );
    let said = refused(dir, &["inspect", "big.honb"], &["big.honb", "larger than"]);
    assert!(said.contains(&flash.to_string()), "{said}");
    refused(
        dir,
        &["checkpoint", "read", "big.img", "--out", "x.honb"],
        &["big.img", "larger than"],
    );
    refused(
        dir,
        &["checkpoint", "write", "big.honb", "--out", "x.img"],
        &["big.honb", "larger than"],
    );
    let soil = example("soil-moisture.toml");
    refused(
        dir,
        &[
            "train", "--config", "big.toml", "--data", "big.csv", "--out", "m.json",
        ],
        &["big.toml", "larger than"],
    );
    refused(
        dir,
        &[
            "train", "--config", &soil, "--data", "big.csv", "--out", "m.json",
        ],
        &["big.csv", "larger than"],
    );
    refused(
        dir,
        &[
            "quantize",
            "--config",
            &soil,
            "--model",
            "big.json",
            "--data",
            &demo_data("soil_unit_calibration.csv"),
            "--blob",
            "m.honb",
        ],
        &["big.json", "larger than"],
    );
}

/// A file without an end (a device that never stops giving bytes) is cut at the limit.
#[cfg(unix)]
#[test]
fn an_endless_stream_is_cut_at_the_limit() {
    let tmp = tempfile::tempdir().unwrap();
    refused(
        tmp.path(),
        &["inspect", "/dev/zero"],
        &["/dev/zero", "larger than"],
    );
}

#[test]
fn a_fresh_region_is_bounded_by_the_largest_flash() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    refused(
        dir,
        &[
            "checkpoint",
            "write",
            "soil.honb",
            "--region",
            "32M",
            "--out",
            "a.img",
        ],
        &["--region", "largest flash"],
    );
    // The largest flash itself is accepted.
    run_ok(
        dir,
        &[
            "checkpoint",
            "write",
            "soil.honb",
            "--region",
            "16M",
            "--out",
            "a.img",
        ],
    );
    assert_eq!(fs::metadata(dir.join("a.img")).unwrap().len(), 16 << 20);
}

// ---------------------------------------------------------------------------------------------
// Outputs that must not destroy data

#[test]
fn an_output_named_twice_or_equal_to_an_input_is_refused() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    run_ok(dir, &["checkpoint", "write", "soil.honb", "--out", "a.img"]);
    fs::copy(demo_data("soil_factory.csv"), dir.join("d.csv")).unwrap();
    let soil = example("soil-moisture.toml");
    let cal = demo_data("soil_unit_calibration.csv");
    refused(
        dir,
        &[
            "quantize",
            "--config",
            &soil,
            "--model",
            "soil.json",
            "--data",
            &cal,
            "--blob",
            "p",
            "--rust",
            "./p",
        ],
        &["--blob and --rust", "same file"],
    );
    refused(
        dir,
        &[
            "train", "--config", &soil, "--data", "d.csv", "--out", "d.csv",
        ],
        &["--out d.csv", "the input --data"],
    );
    refused(
        dir,
        &[
            "quantize",
            "--config",
            &soil,
            "--model",
            "soil.json",
            "--data",
            &cal,
            "--blob",
            "soil.json",
        ],
        &["--blob soil.json", "the input --model"],
    );
    refused(
        dir,
        &["checkpoint", "read", "a.img", "--out", "a.img"],
        &["--out a.img", "the image"],
    );
    refused(
        dir,
        &["checkpoint", "write", "soil.honb", "--out", "soil.honb"],
        &["--out soil.honb", "the blob"],
    );
    // `--into` the image it writes is the documented update in place.
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
}

#[cfg(unix)]
#[test]
fn links_and_special_files_are_not_replaced() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    fs::write(dir.join("real.img"), b"keep me").unwrap();
    std::os::unix::fs::symlink("real.img", dir.join("link.img")).unwrap();
    refused(
        dir,
        &["checkpoint", "write", "soil.honb", "--out", "link.img"],
        &["link.img", "symbolic link"],
    );
    assert!(fs::symlink_metadata(dir.join("link.img"))
        .unwrap()
        .file_type()
        .is_symlink());
    let made = Command::new("mkfifo")
        .arg(dir.join("pipe.img"))
        .status()
        .expect("mkfifo runs");
    assert!(made.success());
    let out = hone(
        dir,
        &["checkpoint", "write", "soil.honb", "--out", "pipe.img"],
    );
    let what = describe(
        &["checkpoint", "write", "soil.honb", "--out", "pipe.img"],
        &out,
    );
    assert_eq!(out.status.code(), Some(BAD_INPUT), "{what}");
    assert!(
        text(&out.stderr).contains("pipe.img: is not a regular file"),
        "{what}"
    );
    use std::os::unix::fs::FileTypeExt;
    assert!(fs::symlink_metadata(dir.join("pipe.img"))
        .unwrap()
        .file_type()
        .is_fifo());
}

#[test]
fn temporary_files_of_killed_runs_are_removed_by_the_next_run() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    // What a run killed between creating and renaming its temporary file leaves: no process
    // holds its lock any more.
    fs::write(dir.join(".a.img.Zq81Xw.tmp"), vec![0u8; 4096]).unwrap();
    run_ok(dir, &["checkpoint", "write", "soil.honb", "--out", "a.img"]);
    assert_eq!(names(dir), ["a.img", "soil.honb", "soil.json"]);
}

// ---------------------------------------------------------------------------------------------
// Locks

/// Commits from many processes into one image at once: every commit that reports success
/// is in the image, so the sequence number advances by exactly the number of successes.
#[test]
fn concurrent_commits_into_one_image_lose_none() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    run_ok(dir, &["checkpoint", "write", "soil.honb", "--out", "a.img"]);
    const WRITERS: usize = 12;
    let children: Vec<_> = (0..WRITERS)
        .map(|_| {
            Command::new(HONE)
                .args([
                    "checkpoint",
                    "write",
                    "soil.honb",
                    "--into",
                    "a.img",
                    "--out",
                    "a.img",
                ])
                .current_dir(dir)
                .stdin(Stdio::null())
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .spawn()
                .expect("hone starts")
        })
        .collect();
    let mut ok = 0;
    for c in children {
        let out = c.wait_with_output().unwrap();
        assert!(
            !text(&out.stderr).contains("panicked"),
            "{}",
            text(&out.stderr)
        );
        if out.status.success() {
            ok += 1;
        }
    }
    assert_eq!(ok, WRITERS, "every writer waits for the lock and succeeds");
    let said = run_ok(dir, &["checkpoint", "read", "a.img", "--json"]);
    let v: serde_json::Value = serde_json::from_str(&said).unwrap();
    assert_eq!(v["checkpoint"]["seq"], 1 + ok as u64);
    assert_eq!(names(dir), ["a.img", "soil.honb", "soil.json"]);
}

/// Reports of runs with different settings written into one folder at once: the folder ends
/// up holding one run's set, its Markdown and JSON from the same run.
#[test]
fn concurrent_reports_into_one_folder_do_not_mix() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    let soil = example("soil-moisture.toml");
    let cal = demo_data("soil_unit_calibration.csv");
    let hold = demo_data("soil_unit_holdout.csv");
    let epochs = ["1", "2", "3", "4"];
    let children: Vec<_> = epochs
        .iter()
        .map(|e| {
            Command::new(HONE)
                .args([
                    "drift",
                    "--config",
                    &soil,
                    "--model",
                    "soil.json",
                    "--train",
                    &cal,
                    "--eval",
                    &hold,
                    "--epochs",
                    e,
                    "--json",
                    "--report",
                    "rep",
                ])
                .current_dir(dir)
                .stdin(Stdio::null())
                .stdout(Stdio::null())
                .stderr(Stdio::piped())
                .spawn()
                .expect("hone starts")
        })
        .collect();
    for c in children {
        let out = c.wait_with_output().unwrap();
        assert!(
            matches!(out.status.code(), Some(0 | 1)),
            "{}",
            text(&out.stderr)
        );
    }
    let json: serde_json::Value =
        serde_json::from_str(&fs::read_to_string(dir.join("rep/drift.json")).unwrap()).unwrap();
    let md = fs::read_to_string(dir.join("rep/drift.md")).unwrap();
    let setup = json["setup"].to_string();
    let n = epochs
        .iter()
        .find(|e| setup.contains(&format!("{e} epochs")))
        .unwrap_or_else(|| panic!("epochs in {setup}"));
    assert!(
        md.contains(&format!("{n} epochs")),
        "JSON of {n} epochs, Markdown:\n{md}"
    );
    assert!(
        names(&dir.join("rep")).iter().all(|n| !n.ends_with(".tmp")),
        "{:?}",
        names(&dir.join("rep"))
    );
}

// ---------------------------------------------------------------------------------------------
// One validation everywhere

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
fn calibration_with(dir: &Path, column: usize, value: &str) {
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

// ---------------------------------------------------------------------------------------------
// Kill test

/// Every file under `dir`, relative, with its bytes.
fn tree(dir: &Path) -> Vec<(String, Vec<u8>)> {
    fn walk(base: &Path, dir: &Path, found: &mut Vec<(String, Vec<u8>)>) {
        let Ok(rd) = fs::read_dir(dir) else { return };
        for e in rd.flatten() {
            let p = e.path();
            if p.is_dir() {
                walk(base, &p, found);
            } else {
                let rel = p.strip_prefix(base).unwrap().display().to_string();
                found.push((rel, fs::read(&p).unwrap_or_default()));
            }
        }
    }
    let mut v = Vec::new();
    walk(dir, dir, &mut v);
    v.sort();
    v
}

/// One kind of output: the command that writes it from an old state, and the one that writes
/// it anew (killed in the test), with the files they write.
struct Kind {
    name: &'static str,
    old: Vec<String>,
    new: Vec<String>,
    outputs: &'static [&'static str],
}

fn strings(args: &[&str]) -> Vec<String> {
    args.iter().map(|s| s.to_string()).collect()
}

fn kinds() -> Vec<Kind> {
    let soil = example("soil-moisture.toml");
    let factory = demo_data("soil_factory.csv");
    let cal = demo_data("soil_unit_calibration.csv");
    let hold = demo_data("soil_unit_holdout.csv");
    let drift = |epochs: &str| {
        strings(&[
            "drift",
            "--config",
            &soil,
            "--model",
            "soil.json",
            "--train",
            &cal,
            "--eval",
            &hold,
            "--epochs",
            epochs,
            "--json",
            "--report",
            "rep",
        ])
    };
    vec![
        Kind {
            name: "float model",
            old: strings(&[
                "train", "--config", &soil, "--data", &hold, "--out", "m.json",
            ]),
            new: strings(&[
                "train", "--config", &soil, "--data", &factory, "--out", "m.json",
            ]),
            outputs: &["m.json"],
        },
        Kind {
            name: "blob and Rust source",
            old: strings(&[
                "quantize", "--config", &soil, "--model", "old.json", "--data", &cal, "--blob",
                "q.honb", "--rust", "q.rs",
            ]),
            new: strings(&[
                "quantize",
                "--config",
                &soil,
                "--model",
                "soil.json",
                "--data",
                &cal,
                "--blob",
                "q.honb",
                "--rust",
                "q.rs",
            ]),
            outputs: &["q.honb", "q.rs"],
        },
        Kind {
            name: "checkpoint image",
            old: strings(&["checkpoint", "write", "soil.honb", "--out", "a.img"]),
            new: strings(&[
                "checkpoint",
                "write",
                "soil.honb",
                "--into",
                "a.img",
                "--out",
                "a.img",
            ]),
            outputs: &["a.img"],
        },
        Kind {
            name: "report folder",
            old: drift("1"),
            new: drift("2"),
            outputs: &["rep"],
        },
    ]
}

/// `old.json`: the soil model trained on other data, so its exports differ from `soil.json`'s.
fn old_model(dir: &Path) {
    run_ok(
        dir,
        &[
            "train",
            "--config",
            &example("soil-moisture.toml"),
            "--data",
            &demo_data("soil_unit_holdout.csv"),
            "--out",
            "old.json",
        ],
    );
}

fn run_args(dir: &Path, args: &[String]) -> std::time::Duration {
    let a: Vec<&str> = args.iter().map(String::as_str).collect();
    let t = std::time::Instant::now();
    let out = hone(dir, &a);
    assert!(
        matches!(out.status.code(), Some(0 | 1)),
        "{}",
        describe(&a, &out)
    );
    t.elapsed()
}

/// The outputs of a kind as they are in `dir`: `(relative path, bytes)`.
fn outputs_of(dir: &Path, k: &Kind) -> Vec<(String, Vec<u8>)> {
    let mut v = Vec::new();
    for o in k.outputs {
        let p = dir.join(o);
        if p.is_dir() {
            for (n, b) in tree(&p) {
                v.push((format!("{o}/{n}"), b));
            }
        } else if let Ok(b) = fs::read(&p) {
            v.push((o.to_string(), b));
        }
    }
    v
}

/// Kills each kind of writer at spread-out moments of its run. Afterwards every output file
/// is exactly its old or its new version (nothing half-written), and the next run leaves no
/// temporary file behind.
#[cfg(unix)]
#[test]
fn killed_writers_leave_old_or_new_outputs_and_no_temporaries() {
    const KILLS: u32 = 6;
    let tmp = tempfile::tempdir().unwrap();
    let mut killed_mid_run = 0;
    for k in kinds() {
        // The old and the new outputs, from a run to the end.
        let reference = tmp.path().join(format!("ref-{}", k.name.replace(' ', "-")));
        fs::create_dir(&reference).unwrap();
        soil_model(&reference);
        old_model(&reference);
        run_args(&reference, &k.old);
        let old = outputs_of(&reference, &k);
        let took = run_args(&reference, &k.new);
        let new = outputs_of(&reference, &k);
        assert!(
            old != new,
            "{}: the old and new outputs are the same",
            k.name
        );
        let work = tmp
            .path()
            .join(format!("work-{}", k.name.replace(' ', "-")));
        fs::create_dir(&work).unwrap();
        soil_model(&work);
        old_model(&work);
        for i in 1..=KILLS {
            if work.join("rep").exists() {
                fs::remove_dir_all(work.join("rep")).unwrap();
            }
            run_args(&work, &k.old);
            let delay = took * i / (KILLS + 1);
            let mut child = Command::new(HONE)
                .args(&k.new)
                .current_dir(&work)
                .stdin(Stdio::null())
                .stdout(Stdio::null())
                .stderr(Stdio::null())
                .spawn()
                .unwrap();
            std::thread::sleep(delay);
            if child.try_wait().unwrap().is_none() {
                killed_mid_run += 1;
            }
            // SIGKILL on Unix.
            let _ = child.kill();
            child.wait().unwrap();
            // A temporary file of the killed run may stay until the next run (checked below).
            for (name, bytes) in outputs_of(&work, &k)
                .into_iter()
                .filter(|(n, _)| !n.ends_with(".tmp"))
            {
                let is =
                    |set: &[(String, Vec<u8>)]| set.iter().any(|(n, b)| *n == name && *b == bytes);
                assert!(
                    is(&old) || is(&new),
                    "{}: killed after {delay:?}, {name} is neither the old nor the new file",
                    k.name
                );
            }
            // The next run completes and leaves no temporary file, its own or the killed one's.
            run_args(&work, &k.new);
            let left: Vec<String> = tree(&work)
                .into_iter()
                .map(|(n, _)| n)
                .filter(|n| n.ends_with(".tmp"))
                .collect();
            assert!(left.is_empty(), "{}: left {left:?}", k.name);
        }
    }
    assert!(
        killed_mid_run >= 4,
        "only {killed_mid_run} kills hit a running writer"
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
