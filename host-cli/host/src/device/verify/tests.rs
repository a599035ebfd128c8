use super::summary::within;
use super::*;

/// The keys `hone device verify --json` promises (README, "On the devices").
#[test]
fn the_summary_has_the_documented_keys() {
    let lean = super::super::lean::LeanCheck {
        exit_code: 0,
        device: "x".into(),
        host: "x".into(),
        loss_before: 2,
        loss_after: 1,
        flash: FlashFigures::default(),
    };
    let v = serde_json::to_value(lean.summary("z")).expect("serialises");
    let keys: Vec<&str> = v
        .as_object()
        .expect("object")
        .keys()
        .map(String::as_str)
        .collect();
    for key in [
        "board",
        "bit_exact",
        "fixed_insn_per_mac",
        "float_insn_per_mac",
        "fixed_insn_per_sample",
        "float_insn_per_sample",
        "engine_code_bytes",
        "trainer_bytes",
        "engine_stack_bytes",
        "ram_measured_bytes",
        "ram_predicted_bytes",
        "profile",
    ] {
        assert!(keys.contains(&key), "missing {key} in {keys:?}");
    }
    assert_eq!(v["bit_exact"], true);
    assert_eq!(v["profile"], "z");
    assert!(v["fixed_insn_per_mac"].is_null());
}

#[test]
fn the_opt_level_is_read_from_the_manifest() {
    let dir = tempfile::tempdir().expect("temp dir");
    let manifest = dir.path().join("Cargo.toml");
    let lean = "[profile.lean]\ninherits = \"release\"\nopt-level = \"z\"\n";
    let bare = "[profile.lean]\ninherits = \"release\"\n";
    for (text, profile, want) in [
        ("[profile.release]\nopt-level = 3\n", "release", "3"),
        ("[profile.release]\nopt-level = \"z\"\n", "release", "z"),
        // Cargo's default for release builds.
        ("[workspace]\n", "release", "3"),
        (lean, "lean", "z"),
        (lean, "release", "3"),
        // A custom profile without its own opt-level takes its parent's.
        (bare, "lean", "3"),
    ] {
        std::fs::write(&manifest, text).expect("write");
        assert_eq!(
            profile_opt_level(dir.path(), profile).expect("parses"),
            want,
            "{text} {profile}"
        );
    }
    for (text, profile) in [
        ("[profile.release\n", "release"),
        ("[workspace]\n", "lean"),
        (
            "[profile.a]\ninherits = \"b\"\n[profile.b]\ninherits = \"a\"\n",
            "a",
        ),
    ] {
        std::fs::write(&manifest, text).expect("write");
        assert!(
            profile_opt_level(dir.path(), profile).is_err(),
            "{text} {profile}"
        );
    }
}

#[test]
fn symbols_are_sorted_into_parts() {
    assert_eq!(
        code_part("_ZN9hone_core5train7Trainer4step17h0123456789abcdefE"),
        CodePart::Engine
    );
    assert_eq!(
        code_part("_ZN65_$LT$f32$u20$as$u20$hone_core..float..real..Real$GT$3exp17h0123E"),
        CodePart::Float
    );
    assert_eq!(
        code_part("_ZN9hone_core5float4Twin$LT$R$GT$4step17h0123E"),
        CodePart::Float
    );
    assert_eq!(
        code_part("_ZN7hone_fw5train6engine5train17h0123E"),
        CodePart::Engine
    );
    assert_eq!(
        code_part("_ZN7hone_fw5train6engine10train_twin17h0123E"),
        CodePart::Float
    );
    assert_eq!(
        code_part("_ZN9hone_core7session10train_twin17h0123E"),
        CodePart::Float
    );
    assert_eq!(
        code_part("_ZN9hone_core7session13calibrate_set17h0123E"),
        CodePart::Engine
    );
    assert_eq!(
        code_part("_ZN17hone_lean_session6engine4step17h0123E"),
        CodePart::Engine
    );
    assert_eq!(
        code_part("_ZN17hone_lean_session3run17h0123E"),
        CodePart::Other
    );
    assert_eq!(code_part("_ZN8postcard2de5take17h0E"), CodePart::Engine);
    assert_eq!(code_part("__aeabi_fmul"), CodePart::Runtime);
    assert_eq!(code_part("memcpy"), CodePart::Runtime);
    assert_eq!(
        code_part("_ZN7hone_fw7session3run17h5e54153ef723123cE"),
        CodePart::Other
    );
    assert_eq!(code_part("_ZN7hone_fw5train3run17h0E"), CodePart::Other);
}

#[test]
fn chips_take_the_row_of_their_core() {
    let row = |id: &str| {
        let chip = crate::chips::find(id).expect("chip in the table");
        memplan::measured_row(chip).map(|m| m.board)
    };
    assert_eq!(row("nrf51822"), Some("microbit"));
    assert_eq!(row("rp2040"), Some("microbit")); // Cortex-M0+ runs the same thumbv6m code
    assert_eq!(row("stm32f103c8"), Some("lm3s6965evb"));
    assert_eq!(row("stm32f411ce"), Some("mps2-an386"));
    assert_eq!(row("fe310"), Some("sifive-e"));
    assert_eq!(row("stm32h743zi"), None); // Cortex-M7: not measured
    let chip = crate::chips::find("nrf51822").expect("chip in the table");
    let o = memplan::measured_overhead(chip).expect("a row");
    assert!(o.source.contains("microbit") && o.stack > 0 && o.state_ram > 0);
    let r = memplan::measured_firmware_reserve(chip).expect("a row");
    assert!(r.ram_bytes > 0 && r.flash_bytes == 0);
}

#[test]
fn prediction_window() {
    assert!(within(1000, 1000));
    assert!(within(1000, 1050));
    assert!(!within(1000, 1051));
    assert!(!within(1000, 999));
}

#[test]
fn payload_differences_are_named() {
    let layout = [
        TensorSpan {
            layer: 0,
            tensor: "weight",
            word: Some(hone_core::num::Word::I16),
            elems: 2,
            offset: 0,
        },
        TensorSpan {
            layer: 2,
            tensor: "bias",
            word: None,
            elems: 1,
            offset: 4,
        },
    ];
    let host = [1, 0, 0xFF, 0xFF, 0, 0, 0x80, 0x3F];
    let same = compare("w", &host, &host, Some(&layout));
    assert!(same.equal() && same.diffs.is_empty());
    let mut device = host;
    device[2] = 0xFE;
    device[7] = 0x40;
    let c = compare("w", &device, &host, Some(&layout));
    assert!(!c.equal());
    assert_eq!(c.diffs[0], "layer 0 weight[1]: device -2, host -1");
    assert!(
        c.diffs[1].starts_with("layer 2 bias[0]: device 4e0 (0x40800000)"),
        "{}",
        c.diffs[1]
    );
    assert!(
        c.diffs[1].ends_with("host 1e0 (0x3f800000)"),
        "{}",
        c.diffs[1]
    );
    let short = compare("c", &host[..3], &host, None);
    assert!(!short.equal());
    assert!(short.diffs[0].starts_with("length"));
}
