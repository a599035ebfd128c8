//! Outputs that must not destroy data: outputs named twice or equal to an input, links and special files, stale temporary files.

use super::*;

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
