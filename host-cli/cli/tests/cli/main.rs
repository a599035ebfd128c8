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

mod commands;
mod good;
mod malformed;

use malformed::{soil_csv, SOIL_HEAD};
