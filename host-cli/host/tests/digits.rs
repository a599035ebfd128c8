//! Outside reference: the UCI optical recognition of handwritten digits data (Alpaydin and
//! Kaynak 1998), digits 0 to 2, 8×8 images, as the copy scikit-learn ships; the fixture and
//! the script that extracted it are in `tests/data/` (see its README for source and license).
//!
//! A 64-16-3 image classifier trained from scratch in 16-bit fixed point reaches a held-out
//! accuracy within 1 percentage point of its f64 twin, trained from the same start on the same
//! samples in the same order, and both reach at least 95 %.

use std::path::{Path, PathBuf};

use hone_core::num::Rng;
use hone_host::config::Config;
use hone_host::sim::{run_side_by_side, Prepared, QuantParams, RunOptions};

/// 16 bits wherever the network propagates: inputs and weights Q3.12, activations Q4.11,
/// gradients Q1.14; 32-bit gradient sums (Q7.24).
const CONFIG: &str = r#"
loss = "softmax-cross-entropy"
[input]
channels = 64
format = "Q3.12"
[formats]
weights = "Q3.12"
bias = "Q3.12"
activations = "Q4.11"
gradients = "Q1.14"
accumulators = "Q7.24"
[[layer]]
kind = "dense"
units = 16
[[layer]]
kind = "relu"
[[layer]]
kind = "dense"
units = 3
[train]
epochs = 30
learning-rate = 0.05
seed = 5
[data]
target = "digit"
classes = [0, 1, 2]
standardize = false
"#;

fn fixture() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/uci-digits-0-2.csv")
}

/// Uniform in ±sqrt(6 / (fan-in + fan-out)) (Glorot and Bengio 2010), biases zero, from the
/// core's seeded generator.
fn init(desc: &hone_core::model::ModelDesc, seed: u64) -> Vec<(Vec<f64>, Vec<f64>)> {
    let shapes = hone_core::model::shapes(desc.input, &desc.layers, desc.loss).expect("shapes");
    let mut rng = Rng::new(seed);
    desc.layers
        .iter()
        .enumerate()
        .map(|(k, _)| {
            let g = shapes.layers[k];
            let (n_in, n_out) = (g.input.size() as f64, g.output.size() as f64);
            let a = (6.0 / (n_in + n_out)).sqrt();
            let w = (0..g.weights)
                .map(|_| a * (2.0 * (rng.below(1 << 24) as f64 / (1u64 << 24) as f64) - 1.0))
                .collect();
            (w, vec![0.0; g.biases as usize])
        })
        .collect()
}

#[test]
fn sixteen_bit_image_classifier_tracks_its_float_twin() {
    let config = Config::parse(Path::new("digits.toml"), CONFIG).expect("config");
    let desc = config.model_desc().expect("description");
    let mut data = config.load_data(&fixture(), None).expect("fixture");
    assert_eq!(data.x.len(), 537, "digits 0 to 2: 178 + 182 + 177 images");
    // Pixels count on-bits of a 4×4 block, 0 to 16: scaled to [0, 1].
    for r in 0..data.x.len() {
        for v in data.x[r].iter_mut() {
            *v /= 16.0;
        }
    }
    let (train, test) = hone_host::data::split(&data, 0.3, 11).expect("split");
    let (train, test) = (
        Prepared::new(&train, &desc).expect("training samples"),
        Prepared::new(&test, &desc).expect("test samples"),
    );
    let float = init(&desc, 3);
    let (fixed, sat) = QuantParams::quantize(&desc, &float).expect("quantizes");
    assert!(sat.iter().all(|&s| s == 0), "initial weights fit Q3.12");
    let opts = RunOptions {
        epochs: 30,
        order_seed: 5,
        per_step: false,
        probe: 0,
        shuffle: true,
    };
    let run =
        run_side_by_side(&desc, &fixed, &float, &train, &test, &opts, &mut |_| {}).expect("trains");
    let first = run.epochs[0];
    let last = *run.epochs.last().expect("epochs");
    eprintln!(
        "digits 0-2 held-out accuracy ({} images): fixed {:.2} %, float {:.2} % (start {:.2} / {:.2} %)",
        test.len(),
        last.fixed_metric,
        last.float_metric,
        first.fixed_metric,
        first.float_metric
    );
    assert!(
        last.float_metric >= 95.0,
        "float twin {} %",
        last.float_metric
    );
    assert!(
        last.fixed_metric >= 95.0,
        "fixed point {} %",
        last.fixed_metric
    );
    let gap = (last.fixed_metric - last.float_metric).abs();
    assert!(gap <= 1.0, "gap {gap} percentage points");
    // Training really happened: the evaluation loss fell well below its start.
    assert!(last.fixed_eval_loss < 0.5 * first.fixed_eval_loss);
}
