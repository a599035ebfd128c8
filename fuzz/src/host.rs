//! Checks of the workstation tool's readers of outside text: the data reader (CSV), the
//! config reader (TOML) and the float-model reader (JSON), for the targets `host_csv`,
//! `host_toml` and `host_float_model`.
//!
//! Every reader must return a value or an error, never panic; an error must name the source
//! it was given; and what a reader accepts must hold what its documentation promises.

use std::path::Path;

use hone_host::config::Config;
use hone_host::data::{DataSpec, Dataset, FeatureSelect, Targets, Task, MAX_VALUE};
use hone_host::model::FloatModel;

/// The name the fuzzed text is read under; every error must begin with it.
pub const CSV_SOURCE: &str = "fuzz.csv";
/// As [`CSV_SOURCE`] for a config.
pub const TOML_SOURCE: &str = "fuzz.toml";
/// As [`CSV_SOURCE`] for a float model.
pub const MODEL_SOURCE: &str = "fuzz.json";

/// The column selection a CSV input is read with, picked by its first byte: regression on
/// `y` with every other column, regression with two named features, or classification on
/// `y` (with or without a given class list).
fn csv_spec(ctl: u8) -> (DataSpec, Option<Vec<String>>) {
    let target = vec!["y".to_owned()];
    match ctl % 4 {
        0 => (
            DataSpec {
                features: FeatureSelect::AllOther,
                target,
                ignore: vec!["id".into()],
                task: Task::Regression,
            },
            None,
        ),
        1 => (
            DataSpec {
                features: FeatureSelect::Named(vec!["a".into(), "b".into()]),
                target,
                ignore: vec![],
                task: Task::Regression,
            },
            None,
        ),
        c => (
            DataSpec {
                features: FeatureSelect::AllOther,
                target,
                ignore: vec![],
                task: Task::Classification,
            },
            (c == 3).then(|| vec!["0".into(), "1".into(), "2".into()]),
        ),
    }
}

/// Reads `data` (first byte: the column selection, see [`csv_spec`]; the rest: the file) as
/// a data file. An accepted file has at least one row, as many target rows as feature rows,
/// rows as wide as the feature list, and every value finite and within ±[`MAX_VALUE`]; class
/// labels index the class list. A refused one names the file.
pub fn check_csv(data: &[u8]) {
    let Some((&ctl, bytes)) = data.split_first() else {
        return;
    };
    let (spec, classes) = csv_spec(ctl);
    match Dataset::from_bytes(Path::new(CSV_SOURCE), bytes, &spec, classes.as_deref()) {
        Ok(d) => {
            assert!(!d.x.is_empty(), "an accepted file has rows");
            assert!(!d.features.is_empty(), "an accepted file has features");
            assert_eq!(d.target.len(), d.x.len(), "one target per row");
            for row in &d.x {
                assert_eq!(row.len(), d.features.len(), "rows as wide as the features");
                for v in row {
                    assert!(v.is_finite() && v.abs() <= MAX_VALUE, "feature value {v}");
                }
            }
            match &d.target {
                Targets::Values { names, y } => {
                    assert_eq!(names, &spec.target);
                    for v in y.iter().flatten() {
                        assert!(v.is_finite() && v.abs() <= MAX_VALUE, "target value {v}");
                    }
                }
                Targets::Classes { names, labels } => {
                    assert!(names.len() >= 2 || classes.is_some(), "classes {names:?}");
                    assert!(labels.iter().all(|&l| usize::from(l) < names.len()));
                }
            }
        }
        Err(e) => {
            let m = e.to_string();
            assert!(m.starts_with(CSV_SOURCE), "error without the file: {m}");
        }
    }
}

/// Reads `data` as config text. An accepted config gives a model description (or a refusal
/// naming the config) with provisional formats; a refused one names the file. Text that is
/// not UTF-8 is left out: the file reader refuses it before parsing (with its line).
pub fn check_toml(data: &[u8]) {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match Config::parse(Path::new(TOML_SOURCE), text) {
        Ok(c) => {
            if let Err(e) = c.model_desc_with(hone_host::train::provisional_frac) {
                let m = e.to_string();
                assert!(m.contains(TOML_SOURCE), "error without the file: {m}");
            }
        }
        Err(e) => {
            let m = e.to_string();
            assert!(m.starts_with(TOML_SOURCE), "error without the file: {m}");
        }
    }
}

/// Reads `data` as a float model. An accepted model has only finite parameters, writes out
/// as JSON and reads back equal; a refused one names the file.
pub fn check_float_model(data: &[u8]) {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match FloatModel::parse(MODEL_SOURCE, text) {
        Ok(m) => {
            for l in &m.layers {
                assert!(l.weights.iter().chain(&l.bias).all(|v| v.is_finite()));
            }
            let again = serde_json::to_string(&m).expect("an accepted model writes out");
            let back = FloatModel::parse(MODEL_SOURCE, &again).expect("and reads back");
            assert_eq!(back, m, "the round trip changed the model");
        }
        Err(e) => {
            let m = e.to_string();
            assert!(m.starts_with(MODEL_SOURCE), "error without the file: {m}");
        }
    }
}

/// A small regression config (invented for the seeds): two inputs, one hidden layer.
pub const SEED_TOML: &str = r#"loss = "squared-error"

[input]
channels = 2
format = "Q3.12"

[[layer]]
kind = "dense"
units = 3

[[layer]]
kind = "tanh"

[[layer]]
kind = "dense"
units = 1

[train]
epochs = 2
batch = 4
learning-rate = 0.05

[data]
target = "y"
features = ["a", "b"]
"#;

/// Invented data for [`SEED_TOML`], with a comment, a quoted field and a blank line.
pub const SEED_CSV: &str =
    "# invented\nid,a,b,y\n1,0.5,2,0.25\n2,\"1.5\",-3,0.75\n\n3,2.5,1e-3,-0.5\n4,-1,0,1\n";

/// Invented classification data with the class labels 0, 1 and 2 (one written `02`).
pub const SEED_CLASSES_CSV: &str = "id,a,b,y\n1,0.5,2,0\n2,1.5,-3,1\n3,2.5,0,02\n4,-1,0,1\n";

/// Seeds of the three host targets: `(target, name, bytes)`. The float model is trained on
/// [`SEED_CSV`] with [`SEED_TOML`], so it is a real model file.
pub fn host_seeds() -> Vec<(&'static str, &'static str, Vec<u8>)> {
    let config = Config::parse(Path::new(TOML_SOURCE), SEED_TOML).expect("the seed config parses");
    let data = Dataset::from_bytes(
        Path::new(CSV_SOURCE),
        SEED_CSV.as_bytes(),
        &config.data().spec,
        None,
    )
    .expect("the seed data reads");
    let trained = hone_host::train::train_float(&config, &data, &mut |_, _, _| {})
        .expect("the seed model trains");
    let model = serde_json::to_string_pretty(&trained.model).expect("the model writes out");
    let mut v = Vec::new();
    for ctl in 0..4u8 {
        let mut csv = vec![ctl];
        csv.extend_from_slice(if ctl < 2 { SEED_CSV } else { SEED_CLASSES_CSV }.as_bytes());
        v.push((
            "host_csv",
            ["regression", "named", "classes", "given-classes"][ctl as usize],
            csv,
        ));
    }
    let mut labels = vec![2u8];
    labels.extend_from_slice(b"a,b,y\n1,2,zero\n3,4,one\n5,6,\"zero\"\n");
    v.push(("host_csv", "text-labels", labels));
    v.push(("host_toml", "soil", SEED_TOML.as_bytes().to_vec()));
    v.push(("host_float_model", "trained", model.into_bytes()));
    v
}

/// Deterministic mutations of `seed` for the helper tests: every single-byte truncation
/// point, and `count` byte flips, insertions and deletions from a fixed generator.
pub fn mutations(seed: &[u8], count: usize) -> Vec<Vec<u8>> {
    let mut out: Vec<Vec<u8>> = (0..seed.len()).map(|n| seed[..n].to_vec()).collect();
    let mut s: u64 = 0x9E37_79B9_7F4A_7C15 ^ seed.len() as u64;
    let mut next = || {
        // xorshift64*
        s ^= s >> 12;
        s ^= s << 25;
        s ^= s >> 27;
        s.wrapping_mul(0x2545_F491_4F6C_DD1D)
    };
    const BYTES: &[u8] = b",\n\"#.-e0123456789\r\0\xff ;=[]{}:";
    for _ in 0..count {
        let mut m = seed.to_vec();
        for _ in 0..1 + next() % 3 {
            if m.is_empty() {
                break;
            }
            let at = (next() % m.len() as u64) as usize;
            let b = BYTES[(next() % BYTES.len() as u64) as usize];
            match next() % 3 {
                0 => m[at] = b,
                1 => m.insert(at, b),
                _ => {
                    m.remove(at);
                }
            }
        }
        out.push(m);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn check(target: &str, bytes: &[u8]) {
        match target {
            "host_csv" => check_csv(bytes),
            "host_toml" => check_toml(bytes),
            _ => check_float_model(bytes),
        }
    }

    /// The seeds are accepted by their readers, not merely survived.
    #[test]
    fn host_seeds_are_accepted() {
        let seeds = host_seeds();
        assert_eq!(seeds.len(), 7);
        for (target, name, bytes) in &seeds {
            check(target, bytes);
            let ok = match *target {
                "host_csv" => {
                    let (spec, classes) = csv_spec(bytes[0]);
                    Dataset::from_bytes(
                        Path::new(CSV_SOURCE),
                        &bytes[1..],
                        &spec,
                        classes.as_deref(),
                    )
                    .map_err(|e| e.to_string())
                    .map(|_| ())
                }
                "host_toml" => Config::parse(Path::new(TOML_SOURCE), SEED_TOML)
                    .map_err(|e| e.to_string())
                    .map(|_| ()),
                _ => FloatModel::parse(MODEL_SOURCE, std::str::from_utf8(bytes).unwrap())
                    .map_err(|e| e.to_string())
                    .map(|_| ()),
            };
            assert!(ok.is_ok(), "{target}/{name}: {ok:?}");
        }
    }

    /// Every target over a few thousand mutations of each seed: no panic, every invariant
    /// holds. (A stand-in for fuzzing where cargo-fuzz cannot run; fuzz/README.md.)
    #[test]
    fn host_targets_hold_over_mutated_seeds() {
        let mut runs = 0;
        for (target, _, bytes) in host_seeds() {
            let count = if target == "host_float_model" {
                300
            } else {
                2000
            };
            for m in mutations(&bytes, count) {
                check(target, &m);
                runs += 1;
            }
        }
        assert!(runs > 10_000, "{runs} runs");
    }

    /// The readers refuse what they must, naming the source: a value beyond the data limit,
    /// a float model with a parameter beyond any format.
    #[test]
    fn refusals_name_the_source() {
        let (spec, _) = csv_spec(0);
        let e = Dataset::from_bytes(Path::new(CSV_SOURCE), b"id,a,y\n1,1e308,1\n", &spec, None)
            .unwrap_err()
            .to_string();
        assert!(e.starts_with("fuzz.csv: line 2, column `a`"), "{e}");
        let model = host_seeds().pop().unwrap().2;
        let mut v: serde_json::Value = serde_json::from_slice(&model).unwrap();
        v["layers"][0]["weights"][0] = serde_json::json!(1e300);
        let e = FloatModel::parse(MODEL_SOURCE, &v.to_string())
            .unwrap_err()
            .to_string();
        assert!(e.starts_with(MODEL_SOURCE) && e.contains("2^31"), "{e}");
    }
}
