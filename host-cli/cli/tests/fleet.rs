//! The fleet study (`hone fleet`): its statistics against a case with a closed-form answer,
//! its independence of the thread count, and its refusal of bad input.
//!
//! The unit of these tests is our own, as the issue asks: a one-input linear model `y = x`
//! (weight 1, bias 0) whose bias alone is calibrated, on a pool of rows with `y = x`. Each
//! simulated unit adds a Gaussian offset `o ~ N(0, σ²)` to its input and nothing else.

use std::fs;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

use hone_core::blob::ChannelScale;
use hone_core::model::{LayerKind, Loss, Shape, TrainMode};
use hone_host::config::Config;
use hone_host::data::{Dataset, Rows, Targets};
use hone_host::fleet::{self, FleetOptions, FleetReport};
use hone_host::model::{FloatLayer, FloatModel, FORMAT_NAME, FORMAT_VERSION};
use hone_host::pipeline::Base;

/// Standard deviation of the units' offset.
const SIGMA: f64 = 1.0;
/// Learning rate of the calibration.
const LR: f64 = 0.05;
/// Passes over the reference samples.
const EPOCHS: u32 = 2;

fn config_text(fleet: &str) -> String {
    format!(
        r#"
loss = "squared-error"
[input]
channels = 1
format = "Q3.12"
[formats]
weights = "Q3.12"
bias = "Q3.12"
activations = "Q3.12"
gradients = "Q3.12"
[[layer]]
kind = "dense"
units = 1
train = "bias-only"
[train]
epochs = {EPOCHS}
batch = 1
learning-rate = {LR}
seed = 3
[data]
target = "y"
features = ["x"]
standardize = false
{fleet}
"#
    )
}

fn fleet_section(spec: f64) -> String {
    format!("[fleet]\nspec = {spec}\n[fleet.feature.x]\noffset = {{ mean = 0.0, sd = {SIGMA} }}\n")
}

fn float_model() -> FloatModel {
    FloatModel {
        format: FORMAT_NAME.into(),
        version: FORMAT_VERSION,
        input: Shape::vector(1),
        loss: Loss::SquaredError,
        layers: vec![FloatLayer {
            kind: LayerKind::Dense { units: 1 },
            mode: TrainMode::BiasOnly,
            weights: vec![1.0],
            bias: vec![0.0],
        }],
        scaling: Vec::<ChannelScale>::new(),
        features: vec!["x".into()],
        outputs: vec!["y".into()],
        history: Vec::new(),
    }
}

/// x = k/64 for k = −64..=64 (exact in Q3.12), y = x.
fn pool() -> Dataset {
    let x: Vec<f64> = (-64..=64).map(|k| k as f64 / 64.0).collect();
    Dataset {
        source: PathBuf::from("pool.csv"),
        features: vec!["x".into()],
        x: Rows::from_rows(1, x.iter().map(|&v| [v])),
        target: Targets::Values {
            names: vec!["y".into()],
            y: Rows::from_rows(1, x.iter().map(|&v| [v])),
        },
    }
}

fn base(spec: f64) -> Base {
    let config =
        Config::parse(Path::new("unit.toml"), &config_text(&fleet_section(spec))).expect("config");
    let float = float_model();
    let quant = hone_host::quant::quantize(&config, &float, &pool()).expect("quantizes");
    Base {
        config,
        float,
        quant,
    }
}

fn study(units: usize, seed: u64, threads: usize, spec: f64) -> FleetReport {
    let opts = FleetOptions {
        samples: vec![3, 5, 10, 20],
        units,
        eval_samples: 4,
        guard_holdout: 2,
        epochs: EPOCHS,
        seed,
        spec: None,
        threads,
    };
    fleet::run(&base(spec), &pool(), &opts, &|_, _| {}).expect("the study runs")
}

/// The error function, from the `libm` crate (a port of FreeBSD's msun).
fn erf(x: f64) -> f64 {
    libm::erf(x)
}

/// The inverse of [`erf`] on [0, 1), by bisection.
fn erf_inv(p: f64) -> f64 {
    let (mut lo, mut hi) = (0.0f64, 10.0f64);
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if erf(mid) < p {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    0.5 * (lo + hi)
}

/// The closed form. With squared-error loss ½(y − t)², y = (x + o) + b and t = x, the bias's
/// gradient is y − t = o + b for every sample, so one SGD step (batch 1, no momentum) maps the
/// unit's error e = o + b to (1 − η)·e. After K = N · epochs steps from b = 0 the error on
/// every evaluation sample is (1 − η)^K · o, and the unit's RMSE is |(1 − η)^K · o|: a
/// half-normal variable of scale s = (1 − η)^K · σ. Its p-quantile is s·√2·erf⁻¹(p) and the
/// share at most L is erf(L / (s√2)) (the half-normal distribution's quantile and
/// distribution functions, as in Johnson, Kotz and Balakrishnan, "Continuous Univariate
/// Distributions", vol. 1, 2nd ed., 1994, from memory).
fn scale(n: usize) -> f64 {
    SIGMA * (1.0 - LR).powi((n as u32 * EPOCHS) as i32)
}

/// The half-normal density at q for scale s.
fn density(q: f64, s: f64) -> f64 {
    2.0 / (s * (2.0 * std::f64::consts::PI).sqrt()) * (-(q * q) / (2.0 * s * s)).exp()
}

/// Four standard errors of the p-quantile of `units` draws: the sample quantile's asymptotic
/// standard deviation √(p(1 − p)/n) / f(q_p) (van der Vaart, "Asymptotic Statistics", 1998,
/// corollary 21.5, from memory).
fn quantile_tolerance(p: f64, q: f64, s: f64, units: usize) -> f64 {
    4.0 * (p * (1.0 - p) / units as f64).sqrt() / density(q, s)
}

/// How far a fixed-point unit's error may lie from the float one's: every bias update rounds
/// to the nearest step of Q3.12 (2^-12), an error of at most half a step that the later
/// updates shrink by (1 − η) each, so the sum stays below (2^-13)/η; the input's rounding adds
/// half a step.
const FIXED_ALLOWANCE: f64 = (1.0 / 8192.0) / LR + 1.0 / 8192.0;

#[test]
fn fleet_statistics_match_the_half_normal_closed_form() {
    let units = 4000;
    let spec = 0.3;
    let r = study(units, 11, 2, spec);
    assert_eq!(r.rows.len(), 4);
    for row in &r.rows {
        let s = scale(row.samples);
        for (p, fixed, float) in [
            (0.5, row.fixed.median, row.float.median),
            (0.9, row.fixed.p90, row.float.p90),
            (0.99, row.fixed.p99, row.float.p99),
        ] {
            let q = s * std::f64::consts::SQRT_2 * erf_inv(p);
            let tol = quantile_tolerance(p, q, s, units);
            assert!(
                (float - q).abs() <= tol,
                "N {}: float p{p} {float} against {q} ± {tol}",
                row.samples
            );
            assert!(
                (fixed - q).abs() <= tol + FIXED_ALLOWANCE,
                "N {}: fixed p{p} {fixed} against {q} ± {tol} + {FIXED_ALLOWANCE}",
                row.samples
            );
        }
        let share = 100.0 * erf(spec / (s * std::f64::consts::SQRT_2));
        // Binomial standard error of a share of `units`, four times; fixed point may move a
        // unit's error by the allowance, so units within it of the limit may change sides.
        let tol = 400.0 * (share / 100.0 * (1.0 - share / 100.0) / units as f64).sqrt();
        let moved = 100.0 * density(spec, s) * FIXED_ALLOWANCE;
        assert!(
            (row.float_within_spec_pct - share).abs() <= tol,
            "N {}: float in spec {} % against {share} ± {tol}",
            row.samples,
            row.float_within_spec_pct
        );
        assert!(
            (row.fixed_within_spec_pct - share).abs() <= tol + moved,
            "N {}: fixed in spec {} % against {share} ± {tol} + {moved}",
            row.samples,
            row.fixed_within_spec_pct
        );
        assert!(
            row.fixed_minus_float.p99.abs() <= FIXED_ALLOWANCE,
            "N {}: fixed − float p99 {}",
            row.samples,
            row.fixed_minus_float.p99
        );
        // Every session lowers the held-back loss (the error shrinks by (1 − η)^K), so the
        // guard accepts every one.
        assert_eq!(row.guard_rejected_pct, 0.0, "N {}", row.samples);
    }
    // Before calibration the error is |o| itself: scale σ.
    let q = SIGMA * std::f64::consts::SQRT_2 * erf_inv(0.5);
    assert!((r.before_float.median - q).abs() <= quantile_tolerance(0.5, q, SIGMA, units));
}

#[test]
fn fleet_is_the_same_on_any_number_of_threads_and_follows_the_seed() {
    let one = serde_json::to_string(&study(200, 5, 1, 0.3)).expect("json");
    let three = serde_json::to_string(&study(200, 5, 3, 0.3)).expect("json");
    assert_eq!(one, three);
    let other = serde_json::to_string(&study(200, 6, 3, 0.3)).expect("json");
    assert_ne!(one, other);
}

#[test]
fn fleet_options_out_of_range_are_refused() {
    let good = FleetOptions {
        samples: vec![3, 5],
        units: 10,
        eval_samples: 4,
        guard_holdout: 1,
        epochs: 1,
        seed: 0,
        spec: None,
        threads: 1,
    };
    assert!(good.check().is_ok());
    let cases: Vec<(FleetOptions, &str)> = vec![
        (
            FleetOptions {
                samples: vec![],
                ..good.clone()
            },
            "--samples: no reference-sample counts",
        ),
        (
            FleetOptions {
                samples: vec![3, 0],
                ..good.clone()
            },
            "--samples: 0 is not",
        ),
        (
            FleetOptions {
                samples: vec![3, 3],
                ..good.clone()
            },
            "--samples: 3 is given twice",
        ),
        (
            FleetOptions {
                units: 0,
                ..good.clone()
            },
            "--units: 0",
        ),
        (
            FleetOptions {
                eval_samples: 0,
                ..good.clone()
            },
            "--eval-samples: 0",
        ),
        (
            FleetOptions {
                spec: Some(f64::NAN),
                ..good.clone()
            },
            "--spec: NaN",
        ),
    ];
    for (o, want) in cases {
        let e = o.check().expect_err(want).to_string();
        assert!(e.starts_with(want), "{e}");
    }
}

// ---------------------------------------------------------------------------------------------
// The command line

const HONE: &str = env!("CARGO_BIN_EXE_hone");

/// A fresh folder with the unit's config (`fleet` as its `[fleet]` section), model and pool.
fn workdir(name: &str, fleet: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("hone-fleet-{name}-{}", std::process::id()));
    let _ = fs::remove_dir_all(&dir);
    fs::create_dir_all(&dir).expect("temp dir");
    fs::write(dir.join("unit.toml"), config_text(fleet)).expect("config");
    float_model().save(&dir.join("unit.json")).expect("model");
    let mut csv = String::from("x,y\n");
    for k in -64..=64 {
        let v = k as f64 / 64.0;
        csv.push_str(&format!("{v},{v}\n"));
    }
    fs::write(dir.join("pool.csv"), csv).expect("pool");
    dir
}

fn hone(dir: &Path, extra: &[&str]) -> Output {
    Command::new(HONE)
        .args([
            "fleet",
            "--config",
            "unit.toml",
            "--model",
            "unit.json",
            "--data",
            "pool.csv",
        ])
        .args(extra)
        .current_dir(dir)
        .stdin(Stdio::null())
        .output()
        .expect("the hone binary starts")
}

#[test]
fn fleet_command_writes_its_report_set() {
    let dir = workdir("good", &fleet_section(0.3));
    let out = hone(
        &dir,
        &[
            "--units",
            "40",
            "--samples",
            "3,10",
            "--json",
            "--out",
            "study",
        ],
    );
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{stderr}");
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).expect("JSON on stdout");
    assert_eq!(v["setup"]["units"], 40);
    assert_eq!(v["rows"][1]["samples"], 10);
    let mut names: Vec<String> = fs::read_dir(dir.join("study"))
        .expect("report folder")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    assert_eq!(
        names,
        [
            "fleet-error.svg",
            "fleet-share.svg",
            "fleet.html",
            "fleet.json",
            "fleet.md",
            "fleet.txt"
        ]
    );
    let written: serde_json::Value =
        serde_json::from_slice(&fs::read(dir.join("study/fleet.json")).expect("json file"))
            .expect("JSON file");
    assert_eq!(written, v);
    fs::remove_dir_all(&dir).expect("clean up");
}

#[test]
fn fleet_command_refuses_bad_input_with_status_2() {
    let spec = fleet_section(0.3);
    // (name, [fleet] section, extra arguments, what the message must say)
    let cases: Vec<(&str, String, Vec<&str>, &str)> = vec![
        (
            "nosection",
            String::new(),
            vec![],
            "unit.toml: no `[fleet]` section",
        ),
        (
            "nospec",
            "[fleet]\n[fleet.feature.x]\nnoise = 1.0\n".into(),
            vec![],
            "`fleet.spec`: missing key `spec`",
        ),
        (
            "negsd",
            spec.replace("sd = 1", "sd = -1"),
            vec![],
            "unit.toml:27:29: `fleet.feature.x.offset.sd`: is -1",
        ),
        (
            "column",
            spec.replace("feature.x", "feature.z"),
            vec![],
            "`fleet.feature.z`: `z` is not an input column",
        ),
        (
            "unknownkey",
            format!("{spec}drift = 2\n"),
            vec![],
            "`fleet.feature.x.drift`: unknown key",
        ),
        (
            "zero",
            spec.clone(),
            vec!["--samples", "3,0"],
            "--samples: 0",
        ),
        (
            "twice",
            spec.clone(),
            vec!["--samples", "5,5"],
            "--samples: 5 is given twice",
        ),
        ("units", spec.clone(), vec!["--units", "0"], "--units: 0"),
        ("specneg", spec.clone(), vec!["--spec=-0.1"], "--spec: -0.1"),
        ("empty", spec.clone(), vec!["--samples", ""], "--samples"),
    ];
    for (name, section, extra, want) in cases {
        let dir = workdir(name, &section);
        let mut args = extra.clone();
        args.extend(["--out", "study"]);
        let out = hone(&dir, &args);
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert_eq!(out.status.code(), Some(2), "{name}: {stderr}");
        assert!(
            stderr.contains(want),
            "{name}: wanted `{want}` in\n{stderr}"
        );
        assert!(!stderr.contains("panicked"), "{name}: {stderr}");
        assert!(!dir.join("study").exists(), "{name}: output left behind");
        fs::remove_dir_all(&dir).expect("clean up");
    }
}
