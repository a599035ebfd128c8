//! One description type for every reader: the model description of each example config goes
//! through TOML (serde, the host's form), through postcard (the device's form), and into the
//! memory plan from its slice of layers (the const planner's form), and comes back unchanged.

use std::path::Path;

use hone_core::model::ModelDesc;
use hone_core::plan::Plan;
use hone_host::config::Config;

fn examples() -> Vec<std::path::PathBuf> {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../configs");
    let mut v: Vec<_> = std::fs::read_dir(&dir)
        .expect("configs folder")
        .map(|e| e.expect("entry").path())
        .filter(|p| p.extension().is_some_and(|e| e == "toml"))
        .collect();
    v.sort();
    assert!(v.len() >= 3, "the configs folder has {} configs", v.len());
    v
}

#[test]
fn model_description_round_trips_through_toml_and_postcard() {
    for path in examples() {
        let config = Config::load(&path).expect("example config loads");
        let desc = config
            .model_desc_with(hone_host::train::provisional_frac)
            .expect("description");
        let text = toml::to_string(&desc).expect("serializes to TOML");
        let back: ModelDesc = toml::from_str(&text).expect("reads back from TOML");
        assert_eq!(back, desc, "{}: TOML round trip\n{text}", path.display());
        let mut buf = [0u8; 2048];
        let bytes = postcard::to_slice(&desc, &mut buf).expect("serializes to postcard");
        let back: ModelDesc = postcard::from_bytes(bytes).expect("reads back from postcard");
        assert_eq!(back, desc, "{}: postcard round trip", path.display());
        let from_slice =
            Plan::new(desc.input, &desc.layers, desc.loss, &desc.train).expect("plans");
        assert_eq!(
            from_slice,
            Plan::of(&back).expect("plans"),
            "{}",
            path.display()
        );
    }
}
