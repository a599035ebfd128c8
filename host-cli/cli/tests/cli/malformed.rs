//! Malformed inputs: one table of cases, each refused with exit status 2 and a message naming its place.

use super::*;

/// One malformed input: files written into `in/`, the command run in the case's folder with
/// an empty `out/` beside it.
pub(super) struct Case {
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

pub(super) fn case(name: &'static str) -> Case {
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
pub(super) fn with_first_value(text: &str, key: &str, value: &str) -> String {
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
pub(super) fn edit(text: &str, from: &str, to: &str) -> String {
    assert_eq!(text.matches(from).count(), 1, "`{from}` once in:\n{text}");
    text.replacen(from, to, 1)
}

/// A small regression config; the config cases change one thing in it, so the line numbers
/// below are those of this text.
pub(super) const SOIL_TOML: &str = r#"# Soil moisture, small.
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

pub(super) const SOIL_HEAD: &str = "unit,raw_counts,temp_c,vwc\n";

pub(super) fn soil_csv(rows: &str) -> String {
    format!("{SOIL_HEAD}{rows}")
}

/// Outputs of the commands, made once for the cases that need a real model, blob or image.
pub(super) struct Fixtures {
    soil_model: Vec<u8>,
    soil_blob: Vec<u8>,
    image: Vec<u8>,
    vibration_config: Vec<u8>,
    vibration_model: Vec<u8>,
}

pub(super) fn fixtures(dir: &Path) -> Fixtures {
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
pub(super) fn vibration_63_columns() -> String {
    let full = fs::read_to_string(demo_data("vibration_unit_calibration.csv")).unwrap();
    full.lines()
        .map(|l| l.split_once(',').expect("a comma").1)
        .collect::<Vec<_>>()
        .join("\n")
}

/// A blob with its CRC trailer recomputed after a patch.
pub(super) fn with_crc(mut bytes: Vec<u8>) -> Vec<u8> {
    let n = bytes.len() - 4;
    let crc = crc32(&bytes[..n]);
    bytes[n..].copy_from_slice(&crc.to_le_bytes());
    bytes
}

pub(super) fn malformed_cases(fx: &Fixtures) -> Vec<Case> {
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
pub(super) fn onnx_fixture_with(
    name: &str,
    from: impl AsRef<[u8]>,
    to: impl AsRef<[u8]>,
) -> Vec<u8> {
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
pub(super) fn check_case(root: &Path, c: &Case) -> Option<String> {
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
