//! The memory-plan report against the core's own plans.

use hone_core::model::{
    LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc, TrainMode,
};
use hone_core::num::{QFormat, QScalar, Rounding, Word};
use hone_core::plan::Plan;
use hone_host::chips;
use hone_host::memplan::{
    parse_size, plan_report, render_table, AdviceOptions, Alternative, Budget, ChangeKind,
    DriftCost, EngineOverhead, Memory, OverheadBasis, PlanReport, Reserve, SizeError,
};

const ACT: QFormat = QFormat::new_unchecked(Word::I16, 10);
const W16: QFormat = QFormat::new_unchecked(Word::I16, 12);
const B32: QFormat = QFormat::new_unchecked(Word::I32, 16);

fn dense(units: u16, mode: TrainMode, master: bool) -> LayerDesc {
    let mut weight = ParamFormats::plain(W16, 20);
    if master {
        weight.master = Some(QFormat::new_unchecked(Word::I32, 24));
    }
    LayerDesc {
        kind: LayerKind::Dense { units },
        mode,
        weight,
        bias: ParamFormats::plain(B32, 20),
        out: ACT,
        grad: ACT,
    }
}

fn model(inputs: u16, hidden: u16, master: bool, momentum: bool, batch: u16) -> ModelDesc {
    let mut train = TrainDesc::sgd(QScalar { raw: 655, frac: 16 });
    if momentum {
        train.momentum = QScalar {
            raw: 29491,
            frac: 15,
        };
    }
    train.batch = batch;
    ModelDesc::new(
        Shape::vector(inputs),
        W16,
        &[
            dense(hidden, TrainMode::Full, master),
            LayerDesc::simple(LayerKind::Relu, ACT, ACT),
            dense(4, TrainMode::Full, false),
        ],
        Loss::SquaredError,
        train,
    )
    .unwrap()
}

/// 32 inputs, 96 hidden units, master weights and momentum: tens of KB of arena.
fn medium() -> ModelDesc {
    model(32, 96, true, true, 4)
}

fn chip(id: &str) -> Budget {
    Budget::chip(chips::find(id).unwrap())
}

fn report(desc: &ModelDesc, budget: &Budget, reserve: Reserve) -> PlanReport {
    plan_report(desc, budget, reserve, None, &AdviceOptions::default(), None).unwrap()
}

/// The change an advice item names, made here independently of the module under test.
fn modified(desc: &ModelDesc, kind: ChangeKind, layer: Option<usize>, batch: u16) -> ModelDesc {
    let mut d = desc.clone();
    let narrower = |w: Word| match w {
        Word::I32 => Word::I16,
        _ => Word::I8,
    };
    match kind {
        ChangeKind::Freeze => d.layers[layer.unwrap()].mode = TrainMode::Frozen,
        ChangeKind::BiasOnly => d.layers[layer.unwrap()].mode = TrainMode::BiasOnly,
        ChangeKind::NarrowWeights => {
            let w = &mut d.layers[layer.unwrap()].weight.value;
            w.word = narrower(w.word);
        }
        ChangeKind::NarrowAccumulators => {
            let l = &mut d.layers[layer.unwrap()];
            l.weight.accum.word = Word::I16;
            l.bias.accum.word = Word::I16;
        }
        ChangeKind::NoMaster => {
            for l in d.layers.iter_mut() {
                l.weight.master = None;
                l.bias.master = None;
            }
        }
        ChangeKind::NoMomentum => d.train.momentum = QScalar::ZERO,
        ChangeKind::FewerUnits => {
            let l = &mut d.layers[layer.unwrap()];
            let LayerKind::Dense { units } = l.kind else {
                panic!("fewer units on a layer that is not dense");
            };
            l.kind = LayerKind::Dense { units: units / 2 };
        }
        ChangeKind::Batch => d.train.batch = batch,
    }
    d
}

fn check_savings(desc: &ModelDesc, advice: &[Alternative], batch: u16) {
    let base = Plan::of(desc).unwrap();
    for a in advice {
        let p = Plan::of(&modified(desc, a.kind, a.layer, batch)).unwrap();
        assert_eq!(
            a.ram_saved_bytes,
            base.ram_bytes as i64 - p.ram_bytes as i64,
            "RAM saved by {a:?}"
        );
        assert_eq!(
            a.flash_saved_bytes,
            base.flash_bytes as i64 - p.flash_bytes as i64,
            "flash saved by {a:?}"
        );
        assert_eq!(a.new_arena_bytes, p.ram_bytes);
    }
}

#[test]
fn totals_equal_the_buffers_and_the_core_plan() {
    for desc in [medium(), model(4, 8, false, false, 1)] {
        let plan = Plan::of(&desc).unwrap();
        let r = report(&desc, &chip("stm32f411ce"), Reserve::default());
        let sum = |m: Memory| -> u64 {
            r.buffers
                .iter()
                .filter(|b| b.memory == m)
                .map(|b| b.bytes as u64)
                .sum()
        };
        assert_eq!(sum(Memory::Ram), plan.ram_bytes as u64);
        assert_eq!(sum(Memory::Flash), plan.flash_bytes as u64);
        assert_eq!(r.ram.arena_bytes, plan.ram_bytes);
        assert_eq!(r.flash.parameters_bytes, plan.flash_bytes);
        assert_eq!(r.ram.total_bytes, plan.ram_bytes as u64);
        // RAM buffers tile the arena without gaps.
        let mut ram: Vec<_> = r
            .buffers
            .iter()
            .filter(|b| b.memory == Memory::Ram)
            .collect();
        ram.sort_by_key(|b| b.offset);
        let mut end = 0;
        for b in ram {
            assert_eq!(b.offset, Some(end), "{b:?}");
            assert!(b.data_bytes <= b.bytes && b.bytes - b.data_bytes < 4);
            end += b.bytes;
        }
        assert_eq!(end, plan.ram_bytes);
        let c = plan.ram_by_category();
        assert_eq!(r.ram_categories.parameters_bytes, c.parameters);
        assert_eq!(r.ram_categories.accumulators_bytes, c.accumulators);
        assert_eq!(r.ram_categories.momentum_bytes, c.momentum);
        assert_eq!(r.ram_categories.master_bytes, c.master);
    }
}

#[test]
fn fits_a_large_chip_and_not_the_nrf51822() {
    let desc = medium();
    let plan = Plan::of(&desc).unwrap();
    assert!(
        plan.ram_bytes > 16 * 1024,
        "the test model must exceed 16 KB"
    );
    let big = report(&desc, &chip("stm32f411ce"), Reserve::default());
    assert!(big.fits);
    assert_eq!(
        big.ram.spare_bytes,
        128 * 1024 - plan.ram_bytes as i64,
        "spare RAM"
    );
    assert!(big.verdict.starts_with("fits: "), "{}", big.verdict);
    let small = report(&desc, &chip("nrf51822"), Reserve::default());
    assert!(!small.fits);
    assert!(!small.ram.fits && small.flash.fits);
    let short = plan.ram_bytes as i64 - 16 * 1024;
    assert_eq!(small.ram.spare_bytes, -short);
    let expected = format!(
        "does not fit: RAM short by {} B",
        hone_host_group(short as u64)
    );
    assert_eq!(small.verdict, expected);
    // Something fits alone: freezing the big layer.
    let freeze0 = small
        .advice
        .iter()
        .find(|a| a.kind == ChangeKind::Freeze && a.layer == Some(0))
        .unwrap();
    assert!(freeze0.fits_alone);
    check_savings(&desc, &small.advice, desc.train.batch);
}

/// Digits grouped by three with spaces, written here independently of the module.
fn hone_host_group(n: u64) -> String {
    let s = n.to_string();
    let mut parts = Vec::new();
    let mut end = s.len();
    while end > 3 {
        parts.push(&s[end - 3..end]);
        end -= 3;
    }
    parts.push(&s[..end]);
    parts.reverse();
    parts.join(" ")
}

#[test]
fn every_saving_is_a_difference_of_two_core_plans() {
    let desc = medium();
    let all = vec![
        ChangeKind::Freeze,
        ChangeKind::BiasOnly,
        ChangeKind::NarrowWeights,
        ChangeKind::NarrowAccumulators,
        ChangeKind::NoMaster,
        ChangeKind::NoMomentum,
        ChangeKind::FewerUnits,
        ChangeKind::Batch,
    ];
    let options = AdviceOptions {
        always_show: all.clone(),
        batch: Some(16),
    };
    let r = plan_report(
        &desc,
        &chip("nrf51822"),
        Reserve::default(),
        None,
        &options,
        None,
    )
    .unwrap();
    for kind in &all {
        assert!(
            r.advice.iter().any(|a| a.kind == *kind),
            "{kind:?} missing from {:#?}",
            r.advice
        );
    }
    check_savings(&desc, &r.advice, 16);
    // Halving the hidden layer names the new unit count.
    let fewer = r
        .advice
        .iter()
        .find(|a| a.kind == ChangeKind::FewerUnits)
        .unwrap();
    assert_eq!(fewer.layer, Some(0));
    assert!(fewer.change.contains("96 → 48 units"), "{}", fewer.change);
    // The output layer is never halved.
    assert!(!r
        .advice
        .iter()
        .any(|a| a.kind == ChangeKind::FewerUnits && a.layer == Some(2)));
    // Sorted by RAM saved (RAM is the short resource).
    for w in r.advice.windows(2) {
        assert!(
            (w[0].ram_saved_bytes, w[0].flash_saved_bytes)
                >= (w[1].ram_saved_bytes, w[1].flash_saved_bytes),
            "{w:?}"
        );
    }
    // Narrower weights also shrink the factory copy in flash.
    let narrow = r
        .advice
        .iter()
        .find(|a| a.kind == ChangeKind::NarrowWeights && a.layer == Some(0))
        .unwrap();
    assert_eq!(narrow.flash_saved_bytes, 32 * 96);
}

#[test]
fn batch_size_saves_nothing_and_is_listed_only_when_asked() {
    let desc = medium();
    let budget = chip("nrf51822");
    let r = report(&desc, &budget, Reserve::default());
    assert!(!r.advice.iter().any(|a| a.kind == ChangeKind::Batch));
    assert!(r
        .advice
        .iter()
        .all(|a| a.ram_saved_bytes > 0 || a.flash_saved_bytes > 0));
    let options = AdviceOptions {
        always_show: vec![],
        batch: Some(32),
    };
    let r = plan_report(&desc, &budget, Reserve::default(), None, &options, None).unwrap();
    let b = r
        .advice
        .iter()
        .find(|a| a.kind == ChangeKind::Batch)
        .unwrap();
    let base = Plan::of(&desc).unwrap();
    let other = Plan::of(&modified(&desc, ChangeKind::Batch, None, 32)).unwrap();
    assert_eq!(
        b.ram_saved_bytes,
        base.ram_bytes as i64 - other.ram_bytes as i64
    );
    assert_eq!(b.ram_saved_bytes, 0);
    assert!(!b.fits_alone);
    assert!(b.change.contains("32"), "{}", b.change);
}

#[test]
fn reserve_is_added_and_can_tip_the_verdict() {
    let desc = model(4, 8, false, false, 1);
    let plan = Plan::of(&desc).unwrap();
    let budget = Budget::custom(plan.ram_bytes + 100, plan.flash_bytes + 100);
    let free = report(&desc, &budget, Reserve::default());
    assert!(free.fits);
    assert_eq!(free.ram.spare_bytes, 100);
    let reserve = Reserve {
        ram_bytes: 100,
        flash_bytes: 60,
    };
    let exact = report(&desc, &budget, reserve);
    assert!(exact.fits, "a total equal to the budget fits");
    assert_eq!(exact.ram.spare_bytes, 0);
    assert_eq!(exact.flash.spare_bytes, 40);
    assert_eq!(exact.ram.total_bytes, plan.ram_bytes as u64 + 100);
    assert_eq!(exact.ram.reserve_bytes, 100);
    let over = report(
        &desc,
        &budget,
        Reserve {
            ram_bytes: 101,
            flash_bytes: 160,
        },
    );
    assert!(!over.fits);
    assert_eq!(over.ram.spare_bytes, -1);
    assert_eq!(over.flash.spare_bytes, -60);
    assert_eq!(
        over.verdict,
        "does not fit: RAM short by 1 B, flash short by 60 B"
    );
    // An alternative "fits alone" only with the reserve counted.
    for a in &over.advice {
        let p = Plan::of(&modified(&desc, a.kind, a.layer, 1)).unwrap();
        let ram_ok = p.ram_bytes as u64 + 101 <= budget.ram_bytes as u64;
        let flash_ok = p.flash_bytes as u64 + 160 <= budget.flash_bytes as u64;
        assert_eq!(a.fits_alone, ram_ok && flash_ok, "{a:?}");
        assert_eq!(
            a.ram_spare_bytes,
            budget.ram_bytes as i64 - p.ram_bytes as i64 - 101
        );
    }
}

#[test]
fn engine_overhead_is_counted_and_its_source_shown() {
    let desc = model(4, 8, false, false, 1);
    let plan = Plan::of(&desc).unwrap();
    let engine = EngineOverhead {
        basis: OverheadBasis::Measured,
        code_flash: 9000,
        state_ram: 300,
        stack: 700,
        source: "section sizes of the test board build".to_owned(),
    };
    let r = plan_report(
        &desc,
        &Budget::custom(20 * 1024, 64 * 1024),
        Reserve {
            ram_bytes: 1000,
            flash_bytes: 2000,
        },
        Some(&engine),
        &AdviceOptions::default(),
        None,
    )
    .unwrap();
    assert_eq!(r.ram.total_bytes, plan.ram_bytes as u64 + 300 + 700 + 1000);
    assert_eq!(r.flash.total_bytes, plan.flash_bytes as u64 + 9000 + 2000);
    assert_eq!(r.ram.engine_state_bytes, Some(300));
    let text = render_table(&r);
    assert!(
        text.contains("section sizes of the test board build"),
        "{text}"
    );
    assert!(text.contains("9 000 B"), "{text}");
    // Without a measurement nothing is counted, and the text says so.
    let none = report(
        &desc,
        &Budget::custom(20 * 1024, 64 * 1024),
        Reserve::default(),
    );
    assert_eq!(none.ram.engine_state_bytes, None);
    assert!(render_table(&none).contains("not measured"));
}

#[test]
fn combination_when_no_single_change_fits() {
    let desc = medium();
    let base = report(&desc, &chip("stm32f411ce"), Reserve::default());
    // A RAM budget one byte below what the best single change needs.
    let best = base.advice.iter().map(|a| a.new_arena_bytes).min().unwrap();
    let budget = Budget::custom(best - 1, 1024 * 1024);
    let r = report(&desc, &budget, Reserve::default());
    assert!(!r.fits);
    assert!(r.advice.iter().all(|a| !a.fits_alone));
    let c = r.combination.as_ref().expect("a combination is tried");
    assert!(c.changes.len() >= 2);
    // Re-apply the listed changes here and compare with the core.
    let mut d = desc.clone();
    for ch in &c.changes {
        d = modified(&d, ch.kind, ch.layer, desc.train.batch);
    }
    let p = Plan::of(&d).unwrap();
    let b = Plan::of(&desc).unwrap();
    assert_eq!(c.ram_saved_bytes, b.ram_bytes as i64 - p.ram_bytes as i64);
    assert_eq!(
        c.ram_spare_bytes,
        budget.ram_bytes as i64 - p.ram_bytes as i64
    );
    assert_eq!(c.fits, p.ram_bytes < best);
    assert!(c.fits);
    let text = render_table(&r);
    assert!(text.contains("these together do"), "{text}");
}

#[test]
fn drift_cost_is_shown_when_given() {
    let desc = medium();
    // A stand-in cost computed from the changed description: its arena in KiB.
    let cost = |d: &ModelDesc| {
        let p = Plan::of(d).map_err(|e| e.to_string())?;
        Ok(DriftCost {
            what: "arena".to_owned(),
            value: p.ram_bytes as f64 / 1024.0,
            unit: "KiB".to_owned(),
        })
    };
    let r = plan_report(
        &desc,
        &chip("nrf51822"),
        Reserve::default(),
        None,
        &AdviceOptions::default(),
        Some(&cost),
    )
    .unwrap();
    for a in &r.advice {
        let d = a.drift.as_ref().unwrap();
        assert_eq!(d.value, a.new_arena_bytes as f64 / 1024.0);
        assert_eq!(a.drift_not_computed, None);
    }
    assert!(render_table(&r).contains("drift"));
}

#[test]
fn drift_cost_not_computed_is_said_with_its_reason() {
    let desc = medium();
    // A stand-in that cannot price changes of a layer's size, as the command's cannot.
    let cost = |d: &ModelDesc| {
        if d.layers
            .iter()
            .zip(&desc.layers)
            .any(|(a, b)| a.kind != b.kind)
        {
            return Err("the shape changed".into());
        }
        Ok(DriftCost {
            what: "gap".to_owned(),
            value: 1.0,
            unit: String::new(),
        })
    };
    let r = plan_report(
        &desc,
        &chip("nrf51822"),
        Reserve::default(),
        None,
        &AdviceOptions::default(),
        Some(&cost),
    )
    .unwrap();
    let fewer: Vec<_> = r
        .advice
        .iter()
        .filter(|a| a.kind == ChangeKind::FewerUnits)
        .collect();
    assert!(!fewer.is_empty(), "{:?}", r.advice);
    for a in &r.advice {
        if a.kind == ChangeKind::FewerUnits {
            assert_eq!(a.drift, None);
            assert_eq!(a.drift_not_computed.as_deref(), Some("the shape changed"));
        } else {
            assert!(a.drift.is_some() && a.drift_not_computed.is_none(), "{a:?}");
        }
    }
    assert!(render_table(&r).contains("not computed: the shape changed"));
}

#[test]
fn parse_size_units_and_errors() {
    assert_eq!(parse_size("20480"), Ok(20480));
    assert_eq!(parse_size("20k"), Ok(20 * 1024));
    assert_eq!(parse_size("20K"), Ok(20 * 1024));
    assert_eq!(parse_size("20KiB"), Ok(20 * 1024));
    assert_eq!(parse_size("20 kb"), Ok(20 * 1024));
    assert_eq!(parse_size("1M"), Ok(1024 * 1024));
    assert_eq!(parse_size("1MiB"), Ok(1024 * 1024));
    assert_eq!(parse_size("0.5k"), Ok(512));
    assert_eq!(parse_size("1.5M"), Ok(1536 * 1024));
    assert_eq!(parse_size("64_000"), Ok(64000));
    assert_eq!(parse_size("512B"), Ok(512));
    assert_eq!(parse_size("0"), Ok(0));
    assert_eq!(parse_size(" 4k "), Ok(4096));
    assert_eq!(parse_size("4294967295"), Ok(u32::MAX));
    assert_eq!(parse_size(""), Err(SizeError::Empty));
    assert_eq!(parse_size("   "), Err(SizeError::Empty));
    assert!(matches!(
        parse_size("4294967296"),
        Err(SizeError::TooLarge { .. })
    ));
    assert!(matches!(
        parse_size("4096M"),
        Err(SizeError::TooLarge { .. })
    ));
    assert!(matches!(
        parse_size("99999999999999999999999"),
        Err(SizeError::TooLarge { .. })
    ));
    // 20 integer digits, 18 fraction digits and a MiB multiplier pass u128 unless checked.
    assert!(matches!(
        parse_size("99999999999999999999.999999999999999999M"),
        Err(SizeError::TooLarge { .. })
    ));
    assert!(matches!(
        parse_size("1.3k"),
        Err(SizeError::Fractional { .. })
    ));
    assert!(matches!(
        parse_size("0.1"),
        Err(SizeError::Fractional { .. })
    ));
    assert!(matches!(
        parse_size("20x"),
        Err(SizeError::UnknownUnit { .. })
    ));
    assert!(matches!(
        parse_size("20 GB"),
        Err(SizeError::UnknownUnit { .. })
    ));
    assert!(matches!(parse_size("k"), Err(SizeError::NotANumber { .. })));
    assert!(matches!(
        parse_size("-5k"),
        Err(SizeError::NotANumber { .. })
    ));
    assert!(matches!(
        parse_size("1.2.3"),
        Err(SizeError::NotANumber { .. })
    ));
    assert!(matches!(parse_size("."), Err(SizeError::NotANumber { .. })));
    let e = parse_size("20x").unwrap_err().to_string();
    assert!(e.contains("`20x`") && e.contains("`x`"), "{e}");
}

#[test]
fn json_field_names_are_stable() {
    let desc = medium();
    let r = report(&desc, &chip("nrf51822"), Reserve::default());
    let v = serde_json::to_value(&r).unwrap();
    for key in [
        "model",
        "budget",
        "reserve",
        "engine",
        "buffers",
        "ram",
        "flash",
        "fits",
        "verdict",
        "advice",
        "combination",
    ] {
        assert!(v.get(key).is_some(), "missing {key}");
    }
    assert_eq!(v["fits"], false);
    assert_eq!(v["ram"]["budget_bytes"], 16 * 1024);
    assert!(v["ram"]["spare_bytes"].as_i64().unwrap() < 0);
    assert_eq!(v["buffers"][0]["role"], "trainable_weights");
    assert_eq!(v["buffers"][0]["memory"], "ram");
    assert_eq!(v["buffers"][0]["format"], "Q3.12 (i16)");
    assert_eq!(v["advice"][0]["kind"], "freeze");
    for key in [
        "ram_saved_bytes",
        "flash_saved_bytes",
        "fits_alone",
        "change",
        "layer",
    ] {
        assert!(v["advice"][0].get(key).is_some(), "advice item lacks {key}");
    }
    assert_eq!(v["reserve"]["ram_bytes"], 0);
}

#[test]
fn render_puts_units_on_figures_and_ends_with_the_advice() {
    let desc = medium();
    let plan = Plan::of(&desc).unwrap();
    let r = report(&desc, &chip("nrf51822"), Reserve::default());
    let text = render_table(&r);
    assert!(text.contains(&r.verdict), "{text}");
    assert!(text.contains("16 384 B (16.0 KiB)"), "{text}");
    assert!(
        text.contains(&format!("{} B", hone_host_group(plan.ram_bytes as u64))),
        "{text}"
    );
    assert!(text.contains("What to give up"), "{text}");
    for line in text.lines() {
        assert!(line.chars().count() <= 100, "line too wide: {line:?}");
    }
    let fits = render_table(&report(&desc, &chip("stm32f411ce"), Reserve::default()));
    let spare = 128 * 1024 - plan.ram_bytes as u64;
    let pct = (spare as f64 * 100.0 / (128.0 * 1024.0)).round();
    assert!(
        fits.contains(&format!(
            "fits: {} B of RAM to spare ({pct} %)",
            hone_host_group(spare)
        )),
        "{fits}"
    );
}

/// The session estimate is the measured instructions of the chip's core times the cycles per
/// instruction over the clock, and the energy that time at the run current and supply; the
/// arithmetic is checked here against the tables it reads.
#[test]
fn session_estimate_multiplies_the_measured_instructions_out() {
    let chip = chips::find("stm32l031k6").expect("chip in table");
    let e = hone_host::memplan::session_estimate(chip).expect("Cortex-M0+ row and power row");
    let row = hone_host::memplan::measured_row(chip).expect("measured row");
    let power = chips::power("stm32l031k6").expect("power row");
    let (cpi, _) = chips::cycles_per_instruction(chip.core);
    assert!(e.estimate);
    assert_eq!(e.measured_on, row.board);
    assert_eq!(
        e.instructions,
        u64::from(row.insn_per_sample) * u64::from(e.samples) * u64::from(e.passes)
    );
    let seconds = e.instructions as f64 * cpi / (power.clock_mhz * 1e6);
    assert!((e.seconds - seconds).abs() < 1e-12);
    let mj = seconds * power.run_ua_per_mhz * power.clock_mhz / 1e3 * power.supply_v;
    assert!((e.energy_mj.expect("energy") - mj).abs() < 1e-12);
    assert!(e.render().starts_with("estimate"), "{}", e.render());
    assert!(e.source.contains("from memory"), "{}", e.source);
    // No clock in the table, no estimate.
    assert!(hone_host::memplan::session_estimate(chips::find("fe310").expect("fe310")).is_none());
}

/// When only the engine's measured overhead keeps a small model off a chip, the plan names
/// the lean build and the features the model needs; when the model fits, it does not.
#[test]
fn lean_build_is_advised_when_the_engine_overhead_blocks_the_fit() {
    let desc = model(4, 8, false, false, 1);
    let small = chips::find("stm32l031k6").expect("chip in table");
    let overhead = hone_host::memplan::engine_overhead(small);
    let r = plan_report(
        &desc,
        &Budget::chip(small),
        Reserve::default(),
        Some(&overhead),
        &AdviceOptions::default(),
        None,
    )
    .expect("plans")
    .with_chip(small, &desc);
    assert!(!r.fits, "{}", render_table(&r));
    let lean = r.lean.as_deref().expect("lean advice");
    assert!(lean.contains("boards/lean") && lean.contains("default-features = false"));
    // The test model keeps its biases in `i32` words, so its lean build needs `word-i32`.
    assert!(lean.contains(r#"features = ["word-i32"]"#), "{lean}");
    assert!(render_table(&r).contains("boards/lean"));

    let big = chips::find("nrf52840").expect("chip in table");
    let r = plan_report(
        &desc,
        &Budget::chip(big),
        Reserve::default(),
        Some(&hone_host::memplan::engine_overhead(big)),
        &AdviceOptions::default(),
        None,
    )
    .expect("plans")
    .with_chip(big, &desc);
    assert!(r.fits && r.lean.is_none());
    assert!(r.session.is_some());

    let mut tanh = desc.clone();
    let layer = LayerDesc::simple(LayerKind::Tanh, ACT, ACT);
    tanh.layers.insert(1, layer).expect("room for a layer");
    assert_eq!(
        hone_host::memplan::core_features(&tanh),
        ["word-i32", "table-activations"]
    );
    // Value words and training parts count too, each named once, in a fixed order.
    let mut wide = tanh.clone();
    wide.layers[0].weight.value = QFormat::new(Word::I8, 6).expect("format");
    wide.layers[2].out = QFormat::new(Word::I32, 20).expect("format");
    wide.train.momentum = QScalar { raw: 1, frac: 1 };
    wide.train.rounding.gradients = Rounding::Stochastic;
    wide.train.rounding.updates = Rounding::Stochastic;
    wide.train.clip = QScalar { raw: 1, frac: 0 };
    wide.layers[0].weight.master = Some(QFormat::new(Word::I32, 24).expect("format"));
    assert_eq!(
        hone_host::memplan::core_features(&wide),
        [
            "word-i8",
            "word-i32",
            "table-activations",
            "stochastic",
            "momentum",
            "master-weights",
            "decay-clip"
        ]
    );
}
