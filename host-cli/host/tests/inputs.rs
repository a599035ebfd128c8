//! The input side of hone: data files and config files, malformed and well-formed.
//!
//! The malformed cases are one table: each writes a file into a fresh temporary directory,
//! loads it, and checks that the error names the file, the place (line, column or field) and
//! what is wrong. The configs in `configs/` must parse and build a model description that
//! fits their demo data.

use std::path::{Path, PathBuf};

use hone_host::config::{Config, ConfigError, FormatRole};
use hone_host::data::{split, DataError, DataSpec, Dataset, FeatureSelect, Scaling, Task};

/// What a malformed case loads its file as.
enum As {
    /// A data file read with this spec (and, if given, a trained model's class list).
    Data(fn() -> DataSpec, Option<&'static [&'static str]>),
    /// A config file.
    Config,
}

struct Case {
    /// What the case is about; also the file's stem.
    name: &'static str,
    /// File extension.
    ext: &'static str,
    /// File content.
    content: &'static str,
    /// How to load it.
    load: As,
    /// Texts the error message must contain, besides the file name.
    expect: &'static [&'static str],
}

fn regression() -> DataSpec {
    DataSpec {
        features: FeatureSelect::AllOther,
        target: vec!["vwc".into()],
        ignore: vec!["unit".into()],
        task: Task::Regression,
    }
}

fn classification() -> DataSpec {
    DataSpec {
        features: FeatureSelect::AllOther,
        target: vec!["zone".into()],
        ignore: vec![],
        task: Task::Classification,
    }
}

fn named_features() -> DataSpec {
    DataSpec {
        features: FeatureSelect::Named(vec!["raw_counts".into(), "temp".into()]),
        ..regression()
    }
}

const SOIL_HEAD: &str = "unit,raw_counts,temp_c,vwc\n";

/// A valid config; the config cases change one thing in it.
const MODEL: &str = r#"loss = "squared-error"

[input]
channels = 2
format = "Q3.12"

[[layer]]
kind = "dense"
units = 4

[[layer]]
kind = "relu"

[[layer]]
kind = "dense"
units = 1

[train]
epochs = 5
learning-rate = 0.01

[data]
target = "vwc"
ignore = ["unit"]
"#;

fn cases() -> Vec<Case> {
    use As::{Config as Cfg, Data};
    let r = || Data(regression, None);
    let c = || Data(classification, None);
    vec![
        // ---- data files ----
        Case {
            name: "truncated-last-line",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,7.16,0.3841\n1,2316,32",
            load: r(),
            expect: &["line 3: 3 fields, header has 4", "truncated"],
        },
        Case {
            name: "non-numeric",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,7.16,0.38\n1,2316,abc,0.14\n",
            load: r(),
            expect: &["line 3, column `temp_c`: `abc` is not a number"],
        },
        Case {
            name: "nan",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,nan,0.38\n",
            load: r(),
            expect: &["line 2, column `temp_c`: `nan` is not a finite number"],
        },
        Case {
            name: "nan-mixed-case",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,7.1,0.38\n2,1650,7.2,NaN\n",
            load: r(),
            expect: &["line 3, column `vwc`: `NaN` is not a finite number"],
        },
        Case {
            name: "inf",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,inf,7.16,0.38\n",
            load: r(),
            expect: &["line 2, column `raw_counts`: `inf` is not a finite number"],
        },
        Case {
            name: "minus-inf",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,7.16,0.38\n# note\n1,-Inf,7.16,0.38\n",
            load: r(),
            expect: &["line 4, column `raw_counts`: `-Inf` is not a finite number"],
        },
        Case {
            name: "overflow",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1e400,7.16,0.38\n",
            load: r(),
            expect: &["line 2, column `raw_counts`: `1e400` is not a finite number"],
        },
        Case {
            name: "empty-field",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,,0.38\n",
            load: r(),
            expect: &["line 2, column `temp_c`: the field is empty"],
        },
        Case {
            name: "too-many-fields",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,7.16,0.38\n1,1647,7.16,0.38,9\n",
            load: r(),
            expect: &["line 3: 5 fields, header has 4", "stray comma"],
        },
        Case {
            name: "too-few-fields",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,1647,0.38\n",
            load: r(),
            expect: &["line 2: 3 fields, header has 4"],
        },
        Case {
            name: "duplicate-header",
            ext: "csv",
            content: "unit,raw_counts,temp_c,raw_counts,vwc\n1,2,3,4,5\n",
            load: r(),
            expect: &["line 1", "names `raw_counts` twice (columns 2 and 4)"],
        },
        Case {
            name: "unnamed-column",
            ext: "csv",
            content: "unit,raw_counts,,vwc\n1,2,3,4\n",
            load: r(),
            expect: &["column 3 of the header has no name"],
        },
        Case {
            name: "missing-target-column",
            ext: "csv",
            content: "unit,raw_counts,temp_c,theta\n1,2,3,4\n",
            load: r(),
            expect: &[
                "no column `vwc` (named as the target)",
                "unit, raw_counts, temp_c, theta",
            ],
        },
        Case {
            name: "missing-feature-column",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,2,3,4\n",
            load: Data(named_features, None),
            expect: &["no column `temp` (named as a feature)"],
        },
        Case {
            name: "unknown-class",
            ext: "csv",
            content: "s0,s1,zone\n0.1,0.2,1\n0.3,0.1,5\n",
            load: Data(classification, Some(&["0", "1", "2", "3"])),
            expect: &[
                "line 3, column `zone`: class `5` is not one of the model's classes (0, 1, 2, 3)",
            ],
        },
        Case {
            name: "single-class",
            ext: "csv",
            content: "s0,s1,zone\n0.1,0.2,2\n0.3,0.1,2\n",
            load: c(),
            expect: &[
                "column `zone` holds only the class `2`",
                "at least two classes",
            ],
        },
        Case {
            name: "empty-label",
            ext: "csv",
            content: "s0,s1,zone\n0.1,0.2,2\n0.3,0.1,\n",
            load: c(),
            expect: &["line 3, column `zone`: the field is empty"],
        },
        Case {
            name: "empty-file",
            ext: "csv",
            content: "",
            load: r(),
            expect: &["the file is empty"],
        },
        Case {
            name: "blank-file",
            ext: "csv",
            content: "\n  \n\n",
            load: r(),
            expect: &["the file is empty"],
        },
        Case {
            name: "header-only",
            ext: "csv",
            content: SOIL_HEAD,
            load: r(),
            expect: &["has a header but no data rows"],
        },
        Case {
            name: "no-header",
            ext: "csv",
            content: "1,1647,7.16,0.3841\n1,2316,32.64,0.1400\n",
            load: r(),
            expect: &["line 1 is `1,1647,7.16,0.3841`", "must name the columns"],
        },
        Case {
            name: "unclosed-quote",
            ext: "csv",
            content: "unit,raw_counts,temp_c,vwc\n1,\"1647,7.16,0.38\n",
            load: r(),
            expect: &["line 2: 2 fields, header has 4"],
        },
        // ---- config files ----
        Case {
            name: "unknown-key-top",
            ext: "toml",
            content: "colour = \"red\"\nloss = \"squared-error\"\n",
            load: Cfg,
            expect: &[":1:1:", "`colour`", "unknown key `colour`", "the top level"],
        },
        Case {
            name: "unknown-key-layer",
            ext: "toml",
            content:
                "[[layer]]\nkind = \"dense\"\nunits = 4\n[[layer]]\nkind = \"relu\"\nunit = 3\n",
            load: Cfg,
            expect: &[
                ":6:1:",
                "`layer[1].unit`",
                "unknown key `unit`",
                "from `layer[1]`",
            ],
        },
        Case {
            name: "unknown-key-rounding",
            ext: "toml",
            content: "[train.rounding]\nupdate = \"stochastic\"\n",
            load: Cfg,
            expect: &[":2:1:", "`train.rounding.update`", "unknown key `update`"],
        },
        Case {
            name: "q-format-17-bits",
            ext: "toml",
            content: "[formats]\nweights = \"Q3.13\"\n",
            load: Cfg,
            expect: &[
                ":2:11:",
                "`formats.weights`",
                "3 + 13 + 1 = 17 bits",
                "Q3.12 (i16)",
            ],
        },
        Case {
            name: "q-format-negative-3-bits",
            ext: "toml",
            content: "[input]\nchannels = 2\nformat = \"Q-1.3\"\n",
            load: Cfg,
            expect: &[":3:10:", "`input.format`", "-1 + 3 + 1 = 3 bits"],
        },
        Case {
            name: "q-format-garbage",
            ext: "toml",
            content: "[formats]\ngradients = \"x\"\n",
            load: Cfg,
            expect: &[
                ":2:13:",
                "`formats.gradients`",
                "`x` is not a Q-format",
                "\"Q3.12\"",
            ],
        },
        Case {
            name: "bad-kind",
            ext: "toml",
            content: "[[layer]]\nkind = \"dens\"\nunits = 3\n",
            load: Cfg,
            expect: &[
                ":2:8:",
                "`layer[0].kind`",
                "unknown value `dens`",
                "`dense`",
            ],
        },
        Case {
            name: "syntax",
            ext: "toml",
            content: "loss = \"squared-error\"\n[input\nchannels = 2\n",
            load: Cfg,
            expect: &[":2:7:", "not valid TOML"],
        },
        Case {
            name: "units-too-large",
            ext: "toml",
            content: "[[layer]]\nkind = \"dense\"\nunits = 70000\n",
            load: Cfg,
            expect: &[
                ":3:9:",
                "`layer[0].units`",
                "`70000`, expected a whole number from 0 to 65535",
            ],
        },
    ]
}

/// Config cases that change one line of [`MODEL`]: (name, old text, new text, expectations).
const MODEL_EDITS: &[(&str, &str, &str, &[&str])] = &[
    (
        "zero-units",
        "units = 4",
        "units = 0",
        &[":9:9:", "`layer[0].units`", "is 0", "at least 1"],
    ),
    (
        "kernel-longer-than-input",
        "[[layer]]\nkind = \"dense\"\nunits = 4",
        "[[layer]]\nkind = \"conv1d\"\nfilters = 2\nkernel = 5",
        &[
            ":7:1:",
            "`layer[0]`",
            "(conv1d) the kernel of 5 samples is longer than the layer's input of 2 channels × 1 sample",
            "(`input.length`)",
        ],
    ),
    (
        "pool-window-too-long",
        "kind = \"relu\"",
        "kind = \"max-pool\"\nwindow = 3",
        &[":11:1:", "`layer[1]`", "(max-pool) the window of 3 samples is longer"],
    ),
    (
        "epochs-zero",
        "epochs = 5",
        "epochs = 0",
        &[":19:10:", "`train.epochs`", "is 0"],
    ),
    (
        "negative-learning-rate",
        "learning-rate = 0.01",
        "learning-rate = -0.01",
        &[":20:17:", "`train.learning-rate`", "must not be negative"],
    ),
    (
        "learning-rate-not-representable",
        "learning-rate = 0.01",
        "learning-rate = 1e-7",
        &[":20:17:", "`train.learning-rate`", "within 1 %", "24 fraction bits"],
    ),
    (
        "learning-rate-rounds-to-zero",
        "learning-rate = 0.01",
        "learning-rate = 1e-9",
        &[":20:17:", "`train.learning-rate`", "would become 0"],
    ),
    (
        "momentum-one",
        "learning-rate = 0.01",
        "learning-rate = 0.01\nmomentum = 1.0",
        &[":21:12:", "`train.momentum`", "below 1"],
    ),
    (
        "missing-train",
        "[train]\nepochs = 5\nlearning-rate = 0.01\n",
        "",
        &["`(top level)`", "missing key `train`"],
    ),
    (
        "master-auto",
        "units = 4",
        "units = 4\nweights-master = \"auto32\"",
        &[":10:18:", "`layer[0].weights-master`", "not for master copies"],
    ),
    (
        "features-do-not-fit-input",
        "ignore = [\"unit\"]",
        "ignore = [\"unit\"]\nfeatures = [\"raw_counts\"]",
        &[":25:12:", "`data.features`", "lists 1 columns", "2 × 1 = 2"],
    ),
    (
        "regression-outputs",
        "units = 1",
        "units = 3",
        &[":14:1:", "`layer[2]`", "gives 3 outputs", "names 1 column(s) (vwc)"],
    ),
];

fn check_message(name: &str, file: &Path, msg: &str, expect: &[&str]) {
    let file_name = file.file_name().unwrap().to_string_lossy();
    assert!(
        msg.contains(&*file_name),
        "case {name}: the message does not name the file {file_name}: {msg}"
    );
    for e in expect {
        assert!(msg.contains(e), "case {name}: expected `{e}` in: {msg}");
    }
}

fn load_err(load: &As, path: &Path) -> String {
    match load {
        As::Data(spec, classes) => {
            let spec = spec();
            let r: Result<Dataset, DataError> = match classes {
                Some(c) => {
                    let c: Vec<String> = c.iter().map(|s| s.to_string()).collect();
                    Dataset::load_with_classes(path, &spec, &c)
                }
                None => Dataset::load(path, &spec),
            };
            match r {
                Ok(d) => panic!(
                    "{} loaded {} rows, expected an error",
                    path.display(),
                    d.len()
                ),
                Err(e) => e.to_string(),
            }
        }
        As::Config => match Config::load(path) {
            Ok(_) => panic!("{} parsed, expected an error", path.display()),
            Err(e) => e.to_string(),
        },
    }
}

#[test]
fn malformed_inputs_are_reported_with_their_place() {
    let dir = tempfile::tempdir().unwrap();
    let mut count = 0;
    for case in cases() {
        let path = dir.path().join(format!("{}.{}", case.name, case.ext));
        std::fs::write(&path, case.content).unwrap();
        let msg = load_err(&case.load, &path);
        check_message(case.name, &path, &msg, case.expect);
        count += 1;
    }
    for (name, old, new, expect) in MODEL_EDITS {
        assert!(
            MODEL.contains(old),
            "case {name}: `{old}` is not in the model text"
        );
        let path = dir.path().join(format!("{name}.toml"));
        std::fs::write(&path, MODEL.replacen(old, new, 1)).unwrap();
        let msg = load_err(&As::Config, &path);
        check_message(name, &path, &msg, expect);
        count += 1;
    }
    assert!(count >= 20, "only {count} malformed cases");
}

#[test]
fn the_model_text_of_the_edits_is_valid() {
    // The edit cases fail because of their edit, not because the base is wrong.
    let c = Config::parse(Path::new("model.toml"), MODEL).unwrap();
    assert!(c.model_desc_with(|_| 10).is_ok());
}

#[test]
fn missing_files_name_the_path() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("absent.csv");
    let e = Dataset::load(&p, &regression()).unwrap_err();
    assert!(matches!(e, DataError::Io { .. }));
    assert!(e.to_string().contains("absent.csv"), "{e}");
    let p = dir.path().join("absent.toml");
    let e = Config::load(&p).unwrap_err();
    assert!(matches!(e, ConfigError::Io { .. }));
    assert!(e.to_string().contains("absent.toml"), "{e}");
}

#[test]
fn a_calibration_file_must_have_the_model_features() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("cal.csv");
    std::fs::write(&p, "unit,temp_c,raw_counts,vwc\n101,20.5,1800,0.21\n").unwrap();
    let d = Dataset::load(&p, &regression()).unwrap();
    let e = d
        .check_features(&["raw_counts".into(), "temp_c".into()])
        .unwrap_err()
        .to_string();
    assert!(e.contains("cal.csv"), "{e}");
    assert!(
        e.contains("feature 1 should be `raw_counts` but is `temp_c`"),
        "{e}"
    );
}

fn repo() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// The demo data of an example: its factory table and its calibration file.
fn demo_data_of(example: &Path) -> (PathBuf, PathBuf) {
    let stem = example.file_stem().unwrap().to_string_lossy();
    let scenario = ["soil", "vibration"]
        .into_iter()
        .find(|s| stem.starts_with(s))
        .unwrap_or_else(|| {
            panic!("example {stem}: name it after its demo data (soil-…, vibration-…)")
        });
    let data = repo().join("demo-data");
    (
        data.join(format!("{scenario}_factory.csv")),
        data.join(format!("{scenario}_unit_calibration.csv")),
    )
}

#[test]
fn every_example_parses_and_fits_its_demo_data() {
    let mut examples: Vec<PathBuf> = std::fs::read_dir(repo().join("configs"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    examples.sort();
    assert!(
        examples.len() >= 3,
        "configs/ should hold the soil and vibration configs: {examples:?}"
    );
    for path in &examples {
        let config = Config::load(path).unwrap_or_else(|e| panic!("{e}"));
        let (factory, calibration) = demo_data_of(path);
        let data = config
            .load_data(&factory, None)
            .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        config
            .check_dataset(&data)
            .unwrap_or_else(|e| panic!("{e}"));

        // The calibration file maps its classes through the factory model's list.
        let cal = config
            .load_data(&calibration, data.classes())
            .unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        cal.check_features(&data.features)
            .unwrap_or_else(|e| panic!("{e}"));
        config.check_dataset(&cal).unwrap_or_else(|e| panic!("{e}"));

        // Scaling per input channel, then a split.
        let channels = config.input().channels as usize;
        let scaling = Scaling::fit_per_channel(&data, channels).unwrap();
        assert_eq!(scaling.scales.len(), channels);
        assert!(scaling.constant.is_empty(), "{:?}", scaling.constant);
        let (train, hold) = split(&data, config.data().holdout, config.train().seed).unwrap();
        assert_eq!(train.len() + hold.len(), data.len());

        // A model description, with the auto formats resolved to a plausible guess.
        let desc = config
            .model_desc_with(|a| {
                let bits = a.word.bits() as u8;
                match a.role {
                    FormatRole::Activations => bits - 5,
                    _ => bits - 2,
                }
            })
            .unwrap_or_else(|e| panic!("{e}"));
        desc.check().unwrap();
        assert_eq!(desc.input.size() as usize, data.features.len());
        assert_eq!(
            desc.output().unwrap().size() as usize,
            data.target.outputs()
        );
        assert_eq!(desc.train.seed, config.train().seed);
    }
}
