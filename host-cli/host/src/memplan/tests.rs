use super::*;

#[test]
fn groups_digits() {
    assert_eq!(group(0), "0");
    assert_eq!(group(999), "999");
    assert_eq!(group(1000), "1 000");
    assert_eq!(group(3412), "3 412");
    assert_eq!(group(1_048_576), "1 048 576");
    assert_eq!(bytes_kib(20480), "20 480 B (20.0 KiB)");
    assert_eq!(bytes_kib(512), "512 B");
    assert_eq!(signed_bytes(-2048), "-2 048 B");
}

#[test]
fn table_aligns_columns() {
    let t = table(
        &["a", "bb"],
        &[Align::Left, Align::Right],
        &[
            vec!["xyz".into(), "1".into()],
            vec!["q".into(), "1 000".into()],
        ],
    );
    let lines: Vec<&str> = t.lines().collect();
    assert_eq!(lines.len(), 3);
    assert_eq!(lines[1], "  xyz      1");
    assert_eq!(lines[2], "  q    1 000");
}

#[test]
fn measured_cores_match_their_labels_and_rows() {
    use crate::chips::core_label;
    for c in MEASURED_CORES {
        assert_eq!(c.name, core_label(c.core, c.fpu).to_lowercase());
        let m = measured_core_overhead(&c);
        assert_eq!(m.basis, OverheadBasis::Measured, "{}", c.name);
        assert_eq!(measured_core(&c.name.to_uppercase()), Ok(&c));
    }
    // Every measured row serves at least one named core, and every core/FPU pair with a
    // row is named.
    for m in &MEASURED_OVERHEADS {
        assert!(
            MEASURED_CORES
                .iter()
                .any(|c| measured_target_of(c.core, c.fpu) == Some(m.target)),
            "{}",
            m.board
        );
    }
    // Every chip of the built-in table whose core has a row can be named by --core.
    for chip in crate::chips::all() {
        let named = MEASURED_CORES
            .iter()
            .any(|c| (c.core, c.fpu) == (chip.core, chip.fpu));
        assert_eq!(named, measured_row(chip).is_some(), "{}", chip.id);
    }
    let e = measured_core("cortex-m7").unwrap_err().to_string();
    assert!(e.contains("`cortex-m7` is not a measured core"), "{e}");
    assert!(e.contains("cortex-m0+"), "{e}");
}

#[test]
fn estimate_is_the_largest_measured_figure_of_each_kind() {
    let e = estimated_overhead();
    assert_eq!(e.basis, OverheadBasis::Estimated);
    for m in &MEASURED_OVERHEADS {
        assert!(e.code_flash >= m.engine_code_bytes);
        assert!(e.state_ram >= m.trainer_bytes);
        assert!(e.stack >= m.engine_stack_bytes);
        assert!(e.source.contains(m.board), "{}", e.source);
    }
    assert!(MEASURED_OVERHEADS
        .iter()
        .any(|m| m.engine_code_bytes == e.code_flash));
    assert!(MEASURED_OVERHEADS
        .iter()
        .any(|m| m.trainer_bytes == e.state_ram));
    assert!(MEASURED_OVERHEADS
        .iter()
        .any(|m| m.engine_stack_bytes == e.stack));
    assert!(e.source.starts_with("estimate"), "{}", e.source);
    assert!(e.source.contains("Cortex-M4F"), "{}", e.source);
    // A chip whose core was measured gets its row; one whose core was not, the estimate.
    let nrf = crate::chips::find("nrf51822").unwrap();
    assert_eq!(engine_overhead(nrf).basis, OverheadBasis::Measured);
    for id in ["ch32v003f4", "stm32h743zi"] {
        let chip = crate::chips::find(id).unwrap();
        assert!(measured_row(chip).is_none(), "{id}");
        assert_eq!(engine_overhead(chip), e, "{id}");
    }
}

#[test]
fn placeholders_are_the_auto_formats() {
    let text = "loss = \"squared-error\"\n[input]\nchannels = 2\n[formats]\n\
                weights = \"Q3.12\"\n[[layer]]\nkind = \"dense\"\nunits = 4\n\
                bias = \"Q3.12\"\n[[layer]]\nkind = \"dense\"\nunits = 1\n\
                [train]\nepochs = 1\nlearning-rate = 0.01\n[data]\ntarget = \"y\"\n";
    let c = crate::config::Config::parse(std::path::Path::new("t.toml"), text).unwrap();
    let note = placeholder_note(&c).expect("auto activations and a bias");
    let flat = note.split_whitespace().collect::<Vec<_>>().join(" ");
    assert!(
        flat.ends_with("layer 0 activations; layer 1 bias, activations"),
        "{flat}"
    );
    let fixed = text.replace(
        "weights = \"Q3.12\"",
        "weights = \"Q3.12\"\nbias = \"Q3.12\"\nactivations = \"Q3.12\"",
    );
    let c = crate::config::Config::parse(std::path::Path::new("t.toml"), &fixed).unwrap();
    assert_eq!(placeholder_note(&c), None);
}

#[test]
fn wrap_keeps_width() {
    let w = wrap("one two three four five six seven eight nine ten", 20, 4);
    for l in w.lines() {
        assert!(l.chars().count() <= 20, "{l:?}");
    }
    assert!(w.lines().skip(1).all(|l| l.starts_with("    ")));
}
