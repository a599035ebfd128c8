use super::*;

fn parse(text: &str) -> Result<Config, ConfigError> {
    Config::parse(Path::new("m.toml"), text)
}

const BASE: &str = r#"
loss = "squared-error"
[input]
channels = 2
[[layer]]
kind = "dense"
units = 4
[[layer]]
kind = "relu"
[[layer]]
kind = "dense"
units = 1
[train]
epochs = 3
learning-rate = 0.01
[data]
target = "y"
"#;

#[test]
fn q_notation() {
    let q = |s: &str| parse_qformat(s).unwrap();
    assert_eq!(q("Q3.12"), QFormat::new(Word::I16, 12).unwrap());
    assert_eq!(q("Q15"), QFormat::Q0_15);
    assert_eq!(q("Q7"), QFormat::Q0_7);
    assert_eq!(q("q15.16"), QFormat::Q15_16);
    assert_eq!(q("Q-2.17"), QFormat::new(Word::I16, 17).unwrap());
    assert_eq!(q("Q31"), QFormat::new(Word::I32, 31).unwrap());
    let e = parse_qformat("Q3.13").unwrap_err().to_string();
    assert!(e.contains("17 bits") && e.contains("Q3.12 (i16)"), "{e}");
    assert!(parse_qformat("Q-1.3")
        .unwrap_err()
        .to_string()
        .contains("3 bits"));
    assert!(parse_qformat("Q-8.39")
        .unwrap_err()
        .to_string()
        .contains("at most 31"));
    for bad in ["x", "Q", "Q3.", "Q.3", "Q3.x", "3.12", "Q+3.12", "Q3.-12"] {
        assert!(parse_qformat(bad).is_err(), "{bad}");
    }
    assert_eq!(
        "auto8".parse::<FormatChoice>().unwrap(),
        FormatChoice::Auto { word: Word::I8 }
    );
    assert!("auto".parse::<FormatChoice>().is_err());
    assert!("auto12".parse::<FormatChoice>().is_err());
    assert_eq!(FormatChoice::Fixed(QFormat::Q7_8).to_string(), "Q7.8 (i16)");
}

#[test]
fn base_builds_with_defaults() {
    let c = parse(BASE).unwrap();
    assert_eq!(c.input(), Shape::vector(2));
    assert_eq!(c.input_format(), QFormat::new(Word::I16, 12).unwrap());
    assert_eq!(c.epochs(), 3);
    assert_eq!(c.train().batch, 1);
    assert_eq!(c.train().lr.frac, SCALAR_FRAC);
    assert_eq!(c.train().lr.raw, 167_772); // 0.01 · 2^24 = 167 772.16
    assert_eq!(c.layers()[0].mode, TrainMode::Full);
    assert_eq!(c.layers()[1].mode, TrainMode::Frozen);
    assert_eq!(c.data_spec().task, Task::Regression);
    assert_eq!(c.data_spec().features, FeatureSelect::AllOther);
    assert_eq!(c.outputs(), 1);
    // Weights, bias, activations of both dense layers and the relu's activations.
    assert_eq!(c.auto_formats().len(), 7);
    assert!(c.model_desc().is_err());
    let d = c
        .model_desc_with(|a| match a.role {
            FormatRole::Weights => 13,
            _ => 10,
        })
        .unwrap();
    assert_eq!(
        d.layers[0].weight.value,
        QFormat::new(Word::I16, 13).unwrap()
    );
    assert_eq!(d.layers[0].out, QFormat::new(Word::I16, 10).unwrap());
    assert_eq!(d.layers[0].grad, QFormat::new(Word::I16, 14).unwrap());
    assert_eq!(
        d.layers[0].weight.accum,
        QFormat::new(Word::I32, 24).unwrap()
    );
    let e = c.model_desc_with(|_| 32).unwrap_err();
    assert_eq!(e.field(), Some("layer[0].activations"));
}

#[test]
fn doc_example_parses() {
    let src = include_str!("mod.rs");
    let start = src.find("//! ```toml\n").unwrap() + "//! ```toml\n".len();
    let end = start + src[start..].find("//! ```\n").unwrap();
    let toml: String = src[start..end]
        .lines()
        .map(|l| {
            l.strip_prefix("//! ")
                .unwrap_or(l.trim_start_matches("//!"))
        })
        .collect::<Vec<_>>()
        .join("\n");
    let c = parse(&toml).unwrap();
    assert_eq!(c.layers().len(), 3);
    assert_eq!(c.layers()[0].mode, TrainMode::BiasOnly);
    assert_eq!(
        c.layers()[0].formats.weights,
        FormatChoice::Fixed(QFormat::Q0_7)
    );
    assert_eq!(
        c.layers()[0].formats.weights_master,
        Some(QFormat::new(Word::I32, 28).unwrap())
    );
    assert_eq!(c.train().rounding.updates, Rounding::Stochastic);
    assert_eq!(c.train().rounding.gradients, Rounding::NearestEven);
    assert_eq!(
        c.train().dynamic,
        Some(DynamicRule {
            max_rate_ppm: 100,
            interval: 50
        })
    );
    assert_eq!(c.data().holdout, 0.2);
    // Q5.10 weights would outgrow the inherited Q3.28 master; Q3.12 fits under it.
    assert!(c.model_desc_with(|_| 10).is_err());
    let d = c.model_desc_with(|_| 12).unwrap();
    assert_eq!(
        d.layers[2].weight.value,
        QFormat::new(Word::I16, 12).unwrap()
    );
    assert_eq!(d.layers[0].weight.value, QFormat::Q0_7);
}

fn expect_err(text: &str, field: &str, needle: &str) -> ConfigError {
    let e = parse(text).unwrap_err();
    let msg = e.to_string();
    assert!(msg.contains(needle), "{msg}");
    assert_eq!(e.field(), Some(field), "{msg}");
    assert!(msg.starts_with("m.toml:"), "{msg}");
    e
}

#[test]
fn layer_errors_point_at_the_layer() {
    let t = BASE.replace("kind = \"relu\"", "kind = \"max-pool\"\nwindow = 8");
    let e = expect_err(&t, "layer[1]", "window of 8 samples is longer");
    assert_eq!(e.line(), Some(8));
    let t = BASE.replace("kind = \"relu\"", "kind = \"relu\"\nunits = 3");
    expect_err(&t, "layer[1].units", "does not apply to a relu layer");
    let t = BASE.replace("kind = \"relu\"", "kind = \"relu\"\ntrain = \"full\"");
    expect_err(&t, "layer[1].train", "no parameters");
    let t = BASE.replace("kind = \"relu\"", "kind = \"relu\"\nweights = \"Q3.12\"");
    expect_err(&t, "layer[1].weights", "no parameters");
    let t = BASE.replace("units = 1", "units = 2");
    expect_err(&t, "layer[2]", "gives 2 outputs");
    let t = BASE.replace("kind = \"relu\"", "kind = \"leaky-relu\"\nshift = 16");
    expect_err(&t, "layer[1].shift", "1 to 15");
    let t = BASE.replace("kind = \"relu\"", "kind = \"conv1d\"\nfilters = 2");
    expect_err(&t, "layer[1].kernel", "is missing");
}

#[test]
fn train_scalars() {
    let t = BASE.replace(
        "learning-rate = 0.01",
        "learning-rate = 0.01\nmomentum = 1.0",
    );
    expect_err(&t, "train.momentum", "below 1");
    let t = BASE.replace("learning-rate = 0.01", "learning-rate = 1e-7");
    expect_err(&t, "train.learning-rate", "within 1 %");
    let t = BASE.replace("learning-rate = 0.01", "learning-rate = 1e-9");
    expect_err(&t, "train.learning-rate", "would become 0");
    let t = BASE.replace("learning-rate = 0.01", "learning-rate = 200.0");
    expect_err(&t, "train.learning-rate", "beyond the largest");
    let t = BASE.replace("learning-rate = 0.01", "learning-rate = nan");
    expect_err(&t, "train.learning-rate", "finite");
    let t = BASE.replace("learning-rate = 0.01", "learning-rate = 0.01\nclip = 0");
    assert!(parse(&t).unwrap().train().clip.is_zero());
}

#[test]
fn formats_and_roles() {
    let t = BASE.replacen(
        "[[layer]]",
        "[formats]\nweights-master = \"auto32\"\n[[layer]]",
        1,
    );
    expect_err(&t, "formats.weights-master", "not for master copies");
    // Gradients and accumulators may be left to the quantizer.
    let t = BASE.replacen(
        "[[layer]]",
        "[formats]\ngradients = \"auto16\"\naccumulators = \"auto32\"\n[[layer]]",
        1,
    );
    let c = parse(&t).expect("auto gradients and accumulators");
    let roles: Vec<(usize, FormatRole)> =
        c.auto_formats().iter().map(|a| (a.layer, a.role)).collect();
    assert!(roles.contains(&(1, FormatRole::Gradients)), "{roles:?}");
    assert!(roles.contains(&(2, FormatRole::Accumulators)), "{roles:?}");
    assert!(!roles.contains(&(1, FormatRole::Accumulators)), "{roles:?}");
    let t = BASE.replace(
        "units = 4",
        "units = 4\nweights = \"Q3.12\"\nweights-master = \"Q1.6\"",
    );
    expect_err(&t, "layer[0].weights-master", "coarser");
    // Finer but narrower: Q6.1 values reach ±64, a Q3.28 master holds ±8.
    let t = BASE.replace(
        "units = 4",
        "units = 4\nweights = \"Q6.1\"\nweights-master = \"Q3.28\"",
    );
    expect_err(&t, "layer[0].weights-master", "at least 6 integer bits");
    // The same master for auto8 weights the quantizer puts in Q6.1.
    let t = BASE.replace(
        "units = 4",
        "units = 4\nweights = \"auto8\"\nweights-master = \"Q3.28\"",
    );
    let c = parse(&t).expect("parses");
    let e = c
        .model_desc_with(|_| 1)
        .expect_err("a Q6.1 value under a Q3.28 master");
    assert!(e.to_string().contains("layer[0].weights-master"), "{e}");
    assert!(c.model_desc_with(|_| 4).is_ok(), "Q3.4 fits a Q3.28 master");
    let t = BASE.replace("units = 4", "units = 4\nbias = { word = 16, frac = 40 }");
    expect_err(&t, "layer[0].bias", "at most 31");
    let t = BASE.replace("units = 4", "units = 4\nbias = { word = 12, frac = 4 }");
    expect_err(&t, "layer[0].bias", "8, 16 or 32");
    let t = BASE.replace("units = 4", "units = 4\nbias = { word = 16, fract = 4 }");
    expect_err(&t, "layer[0].bias", "unknown key `fract`");
}

#[test]
fn input_and_data() {
    let t = BASE.replace("target = \"y\"", "target = \"y\"\nstandardize = false");
    expect_err(&t, "input.format", "explicitly");
    let t = BASE.replace("channels = 2", "channels = 65");
    expect_err(&t, "input.channels", "at most 64 channels");
    let t = t.replace("target = \"y\"", "target = \"y\"\nstandardize = false");
    let t = t.replace("channels = 65", "channels = 65\nformat = \"Q12.19\"");
    assert_eq!(parse(&t).unwrap().input(), Shape::vector(65));
    let t = BASE.replace("channels = 2", "channels = 2\nformat = \"auto16\"");
    expect_err(&t, "input.format", "must be fixed");
    let t = BASE.replace("target = \"y\"", "target = \"y\"\nfeatures = [\"a\"]");
    expect_err(&t, "data.features", "lists 1 columns");
    let t = BASE.replace("target = \"y\"", "target = \"y\"\nignore = [\"y\"]");
    expect_err(&t, "data.ignore", "names `y`");
    let t = BASE.replace(
        "target = \"y\"",
        "target = \"y\"\ntask = \"classification\"",
    );
    expect_err(&t, "data.task", "softmax-cross-entropy");
    let t = BASE.replace("target = \"y\"", "target = \"y\"\nholdout = 1.0");
    expect_err(&t, "data.holdout", "[0, 1)");
    let t = BASE.replace("target = \"y\"", "target = [\"y\", \"z\"]");
    expect_err(&t, "layer[2]", "2 column(s)");
    let t = BASE
        .replace("squared-error", "softmax-cross-entropy")
        .replace("units = 1", "units = 3")
        .replace(
            "target = \"y\"",
            "target = \"zone\"\nclasses = [0, 1, \"x\"]",
        );
    let c = parse(&t).unwrap();
    assert_eq!(
        c.data().classes.as_deref(),
        Some(&["0".to_string(), "1".into(), "x".into()][..])
    );
    assert_eq!(c.data_spec().task, Task::Classification);
}

#[test]
fn names_read_back_and_unknown_names_list_the_known_ones() {
    for &r in RoundingName::ALL {
        assert_eq!(RoundingName(r).to_string().parse(), Ok(RoundingName(r)));
    }
    for &m in ModeName::ALL {
        assert_eq!(ModeName(m).to_string().parse(), Ok(ModeName(m)));
    }
    assert_eq!(
        RoundingName(Rounding::NearestEven).to_string(),
        "nearest-even"
    );
    assert_eq!(ModeName(TrainMode::BiasOnly).to_string(), "bias-only");
    let e = "nearest_even".parse::<RoundingName>().unwrap_err();
    assert_eq!(
        e.to_string(),
        "`nearest_even` is not a rounding; use nearest-even, toward-zero or stochastic"
    );
    let e = "all".parse::<ModeName>().unwrap_err();
    assert_eq!(
        e.to_string(),
        "`all` is not a train mode; use frozen, bias-only, weights-only or full"
    );
}
