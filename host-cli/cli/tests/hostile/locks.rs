//! Locks: concurrent commits into one image and concurrent reports into one folder.

use super::*;

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
