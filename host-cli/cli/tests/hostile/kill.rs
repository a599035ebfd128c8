//! Kill test: writers killed mid-run leave the old or the new outputs and no temporary file.

use super::*;

/// Every file under `dir`, relative, with its bytes.
pub(super) fn tree(dir: &Path) -> Vec<(String, Vec<u8>)> {
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
pub(super) struct Kind {
    name: &'static str,
    old: Vec<String>,
    new: Vec<String>,
    outputs: &'static [&'static str],
}

pub(super) fn strings(args: &[&str]) -> Vec<String> {
    args.iter().map(|s| s.to_string()).collect()
}

pub(super) fn kinds() -> Vec<Kind> {
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
pub(super) fn old_model(dir: &Path) {
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

pub(super) fn run_args(dir: &Path, args: &[String]) -> std::time::Duration {
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
pub(super) fn outputs_of(dir: &Path, k: &Kind) -> Vec<(String, Vec<u8>)> {
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
