//! A compile-fail check of the crate docs' claim (core/README.md, "Cargo features"): a
//! description that uses a layer kind or a training part the build leaves out is rejected
//! "at compile time for a `const` plan", with `LayerFault::NotBuilt` for the layer kind and
//! `Error::NotBuilt` for the training part.
//!
//! The test writes a small firmware-like crate with two `const` memory plans, one over a
//! convolution layer and one over a dense layer trained with momentum, and runs `cargo check`
//! on it against this core three times: with default features off (no `conv1d`), which must
//! fail on the convolution plan's `NotBuilt`; with `conv1d` only, which must fail on the
//! momentum plan's `NotBuilt(Momentum)`; and with `conv1d` and `momentum`, the same source
//! otherwise, which must compile. So each failure is a missing feature's and nothing else's.
//! The crate is built offline in the test's own scratch folder, pinned to the workspace's
//! lock file.

use std::path::{Path, PathBuf};
use std::process::Command;

/// The crate's source: a const plan over one 1-D convolution and one over a dense layer with
/// momentum, each used to size an arena.
const MAIN_RS: &str = r#"
use hone_core::error::{Error, LayerFault};
use hone_core::features::Feature;
use hone_core::model::{LayerDesc, LayerKind, Loss, ParamFormats, Shape, TrainDesc, TrainMode};
use hone_core::num::{QFormat, QScalar, Word};
use hone_core::plan::Plan;

const Q: QFormat = QFormat::new_unchecked(Word::I16, 12);
const P: ParamFormats = ParamFormats::plain(Q, 24);
const LAYERS: [LayerDesc; 1] = [LayerDesc {
    kind: LayerKind::Conv1d { filters: 2, kernel: 3, stride: 1 },
    mode: TrainMode::Full,
    weight: P,
    bias: P,
    out: Q,
    grad: Q,
}];
const MOMENTUM: TrainDesc = {
    let mut t = TrainDesc::sgd(QScalar { raw: 1, frac: 4 });
    t.momentum = QScalar { raw: 1, frac: 1 };
    t
};
const DENSE: [LayerDesc; 1] = [LayerDesc {
    kind: LayerKind::Dense { units: 2 },
    mode: TrainMode::Full,
    weight: P,
    bias: P,
    out: Q,
    grad: Q,
}];
const PLAN2: Plan = match Plan::new(Shape::vector(3), &DENSE, Loss::SquaredError, &MOMENTUM) {
    Ok(p) => p,
    Err(Error::NotBuilt(Feature::Momentum)) => panic!("cfail: momentum not built"),
    Err(_) => panic!("cfail: the dense model does not plan"),
};
const PLAN: Plan = match Plan::new(
    Shape { channels: 1, len: 8 },
    &LAYERS,
    Loss::SquaredError,
    &TrainDesc::sgd(QScalar { raw: 1, frac: 4 }),
) {
    Ok(p) => p,
    Err(Error::Layer { fault: LayerFault::NotBuilt, .. }) => panic!("cfail: layer kind not built"),
    Err(_) => panic!("cfail: the model does not plan"),
};

fn main() {
    let arena = [0u32; PLAN.ram_words()];
    let arena2 = [0u32; PLAN2.ram_words()];
    std::process::exit((arena.len() + arena2.len()) as i32 & 1);
}
"#;

fn manifest(core: &Path, features: &str) -> String {
    format!(
        "[package]\nname = \"const-plan-check\"\nversion = \"0.0.0\"\nedition = \"2021\"\npublish = false\n\n\
         [dependencies]\nhone-core = {{ path = {core:?}, default-features = false, features = [{features}] }}\n\n\
         # Not part of any workspace around the scratch folder.\n[workspace]\n"
    )
}

/// Writes the crate into `dir` and runs `cargo check` on it with its target folder in
/// `target` (shared by the cases, which differ only in the core's features); returns whether
/// it compiled and what the compiler said.
fn check(dir: &Path, target: &Path, features: &str) -> (bool, String) {
    let core = Path::new(env!("CARGO_MANIFEST_DIR"));
    std::fs::create_dir_all(dir.join("src")).expect("scratch folder");
    std::fs::write(dir.join("Cargo.toml"), manifest(core, features)).expect("manifest");
    std::fs::write(dir.join("src/main.rs"), MAIN_RS).expect("source");
    // The workspace's lock file pins the same dependency versions as the core's own build,
    // so the check needs nothing beyond what that build fetched.
    std::fs::copy(core.join("../Cargo.lock"), dir.join("Cargo.lock")).expect("lock file");
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let out = Command::new(cargo)
        .args(["check", "--offline", "--quiet", "--color", "never"])
        .arg("--manifest-path")
        .arg(dir.join("Cargo.toml"))
        .env("CARGO_TARGET_DIR", target)
        .env_remove("RUSTFLAGS")
        .output()
        .expect("cargo runs");
    (
        out.status.success(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn a_const_plan_with_a_part_that_is_not_built_does_not_compile() {
    let scratch = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("const-plan-not-built");
    let target = scratch.join("target");

    let (ok, stderr) = check(&scratch.join("without-conv1d"), &target, "");
    assert!(!ok, "compiled without the conv1d feature:\n{stderr}");
    assert!(
        stderr.contains("cfail: layer kind not built"),
        "failed, but not on the plan's NotBuilt:\n{stderr}"
    );

    let (ok, stderr) = check(&scratch.join("without-momentum"), &target, "\"conv1d\"");
    assert!(!ok, "compiled without the momentum feature:\n{stderr}");
    assert!(
        stderr.contains("cfail: momentum not built"),
        "failed, but not on the plan's NotBuilt(Momentum):\n{stderr}"
    );
    assert!(
        !stderr.contains("cfail: layer kind not built"),
        "conv1d is built, yet its plan failed:\n{stderr}"
    );

    let (ok, stderr) = check(
        &scratch.join("with-both"),
        &target,
        "\"conv1d\", \"momentum\"",
    );
    assert!(
        ok,
        "the same crate with conv1d and momentum built did not compile:\n{stderr}"
    );
}
