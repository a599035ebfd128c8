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

mod bounded;
mod kill;
mod locks;
mod outputs;
mod validation;
