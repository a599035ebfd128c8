//! Measurements of a run: span rates, RAM and stack, the throughput phase, and the flash an ELF
//! image's code takes, part by part.

use super::*;

pub(super) fn span_rate(run: &DeviceRun, name: &str, samples: u64) -> Result<Rate, DeviceError> {
    let s = run
        .report
        .span(name)
        .ok_or_else(|| protocol(run.lines.len(), format!("no `{name}` span")))?;
    Ok(Rate {
        instructions: s.units,
        samples,
        macs: s.work,
    })
}

pub(super) fn measure(
    session: &Session,
    host: &HostOutcome,
    run: &DeviceRun,
    engine: &EngineRecord,
    stacks: &[StackRecord],
    overhead: Option<&MeasuredOverhead>,
) -> Result<Measures, DeviceError> {
    let end = run.lines.len();
    let (forward, backward) = training_macs(&host.plan);
    if (forward, backward) != (engine.forward_macs, engine.backward_macs) {
        return Err(protocol(
            end,
            format!(
                "the firmware counts {}+{} multiply-accumulates per sample, the host {forward}+{backward}",
                engine.forward_macs, engine.backward_macs
            ),
        ));
    }
    let steps = u64::from(session::PASSES) * session.calibration.len() as u64;
    let fixed = span_rate(run, "calib_train", steps)?;
    let float = span_rate(run, "f32_train", steps)?;
    let eval = span_rate(run, "calib_eval_before", session.holdout.len() as u64)?;
    for r in [&fixed, &float] {
        if r.macs != steps * (forward + backward) {
            return Err(protocol(
                end,
                format!(
                    "a training span counts {} multiply-accumulates, expected {}",
                    r.macs,
                    steps * (forward + backward)
                ),
            ));
        }
    }
    let dot = |name: &str| -> Result<Rate, DeviceError> {
        let d = run
            .report
            .dots
            .iter()
            .find(|d| d.name == name)
            .ok_or_else(|| protocol(end, format!("no `{name}` dot record")))?;
        span_rate(run, name, d.reps)
    };
    let dot_i8 = dot("dot_i8")?;
    let dot_i16 = dot("dot_i16")?;

    let stack = |phase: &str| -> Result<&StackRecord, DeviceError> {
        stacks
            .iter()
            .find(|s| s.phase == phase)
            .ok_or_else(|| protocol(end, format!("no `stack` record for `{phase}`")))
    };
    let (calib, faulty, twin) = (stack("calib")?, stack("faulty")?, stack("f32")?);
    let mem = run
        .report
        .memory
        .ok_or_else(|| protocol(end, "no `mem` record"))?;
    let fixed_peak = calib.peak.max(faulty.peak);
    let entry = calib.entry;
    let arena = u64::from(host.plan.ram_bytes);
    if engine.arena != arena || engine.float_arena != u64::from(host.float_plan.ram_bytes) {
        return Err(protocol(
            end,
            format!(
                "arenas: firmware {} and {} bytes, host plans {} and {}",
                engine.arena, engine.float_arena, arena, host.float_plan.ram_bytes
            ),
        ));
    }
    let engine_stack = fixed_peak
        .saturating_sub(entry)
        .saturating_sub(arena)
        .saturating_sub(engine.trainer);
    let predicted = overhead.map(|o| {
        u64::from(o.firmware_static_bytes)
            + u64::from(o.firmware_stack_bytes)
            + arena
            + u64::from(o.trainer_bytes)
            + u64::from(o.engine_stack_bytes)
    });
    let ram = RamFigures {
        static_ram: mem.static_ram,
        entry,
        fixed_peak,
        float_peak: twin.peak,
        arena,
        float_arena: engine.float_arena,
        trainer: engine.trainer,
        twin: engine.twin,
        engine_stack,
        measured: mem.static_ram + fixed_peak,
        measured_float: mem.static_ram + twin.peak,
        predicted,
        run_peak: mem.stack_peak,
        stack_size: mem.stack_size,
    };
    let bytes = std::fs::read(&run.elf).map_err(|source| DeviceError::Io {
        path: run.elf.clone(),
        source,
    })?;
    let flash = flash_figures(&bytes, &run.elf)?;
    Ok(Measures {
        macs_per_sample: forward + backward,
        fixed,
        eval,
        float,
        dot_i8,
        dot_i16,
        ram,
        flash,
        throughput: None,
    })
}

/// The throughput phase's figures, after checking its record against the host's spec.
pub(super) fn measure_throughput(
    session: &Session,
    run: &DeviceRun,
    record: &ThroughputRecord,
    stacks: &[StackRecord],
) -> Result<ThroughputFigures, DeviceError> {
    let end = run.lines.len();
    let spec = session
        .throughput
        .spec
        .as_ref()
        .ok_or_else(|| protocol(end, "no throughput phase in the session"))?;
    let (inputs, outputs) = spec.sample_values();
    let (forward, backward) = training_macs(&spec.plan);
    let macs = spec.plan.training_macs();
    let want = ThroughputRecord {
        inputs: inputs as u64,
        outputs: outputs as u64,
        params: spec.param_values() as u64,
        pool: u64::from(spec.pool),
        samples: spec.samples(),
        macs,
        arena: u64::from(spec.plan.ram_bytes),
        float_arena: u64::from(spec.float_plan.ram_bytes),
    };
    if *record != want || forward + backward != macs {
        return Err(protocol(
            end,
            format!(
                "the `tput` record is {record:?}, the host's spec gives {want:?} \
                 ({forward}+{backward} multiply-accumulates per sample)"
            ),
        ));
    }
    let fixed = span_rate(run, "tput_train", spec.samples())?;
    let float = span_rate(run, "tput_f32_train", spec.samples())?;
    for r in [&fixed, &float] {
        if r.macs != spec.samples() * macs {
            return Err(protocol(
                end,
                format!(
                    "a throughput span counts {} multiply-accumulates, expected {}",
                    r.macs,
                    spec.samples() * macs
                ),
            ));
        }
    }
    let peak = |phase: &str| -> Result<u64, DeviceError> {
        stacks
            .iter()
            .find(|s| s.phase == phase)
            .map(|s| s.peak)
            .ok_or_else(|| protocol(end, format!("no `stack` record for `{phase}`")))
    };
    let mem = run
        .report
        .memory
        .ok_or_else(|| protocol(end, "no `mem` record"))?;
    Ok(ThroughputFigures {
        model: spec.name(),
        macs_per_sample: macs,
        fixed,
        float,
        arena: want.arena,
        float_arena: want.float_arena,
        fixed_ram: mem.static_ram + peak("tput")?,
        float_ram: mem.static_ram + peak("tput_f32")?,
        predicted: spec.predicted,
        board_ram: mem.static_ram + mem.stack_size,
    })
}

/// Which part of the firmware a symbol belongs to, from its mangled name.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum CodePart {
    /// The fixed-point engine.
    Engine,
    /// The float twin.
    Float,
    /// Compiler runtime helpers.
    Runtime,
    /// Everything else.
    Other,
}

/// Classifies a (legacy- or v0-mangled) symbol name. Crate names appear in both manglings
/// with their length in front (`9hone_core`) or, inside trait-impl paths, followed by `..`.
#[must_use]
pub fn code_part(name: &str) -> CodePart {
    let has = |krate: &str| {
        name.contains(&format!("{}{krate}", krate.len())) || name.contains(&format!("{krate}.."))
    };
    let fw_engine = "7hone_fw5train6engine";
    if name.contains("9hone_core5float")
        || name.contains("hone_core..float")
        || has("micromath")
        || name.contains(&format!("{fw_engine}8new_twin"))
        || name.contains(&format!("{fw_engine}10train_twin"))
        || name.contains("9hone_core7session10train_twin")
        || name.contains("9hone_core7session12twin_trained")
    {
        return CodePart::Float;
    }
    // The lean build's calls into the core (boards/lean-session), out of line as the
    // full firmware's are.
    let lean_engine = "17hone_lean_session6engine";
    if has("hone_core")
        || name.contains(fw_engine)
        || name.contains(lean_engine)
        || ["postcard", "serde", "heapless", "crc", "fixed", "bytemuck"]
            .iter()
            .any(|k| has(k))
    {
        return CodePart::Engine;
    }
    if name.starts_with("__")
        || has("compiler_builtins")
        || matches!(name, "memcpy" | "memmove" | "memset" | "memcmp" | "bcmp")
    {
        return CodePart::Runtime;
    }
    CodePart::Other
}

/// Sizes the firmware's code by symbol (see [`code_part`]).
///
/// # Errors
/// [`DeviceError::Elf`] when the image cannot be parsed.
pub fn flash_figures(elf: &[u8], path: &Path) -> Result<FlashFigures, DeviceError> {
    let file = object::File::parse(elf).map_err(|e| DeviceError::Elf {
        path: path.to_owned(),
        detail: e.to_string(),
    })?;
    let mut f = FlashFigures::default();
    for section in file.sections() {
        if section.name() == Ok(".text") {
            f.text_section = section.size();
        }
    }
    for sym in file.symbols() {
        let (Ok(name), Some(index)) = (sym.name(), sym.section_index()) else {
            continue;
        };
        if sym.size() == 0 {
            continue;
        }
        let Ok(section) = file.section_by_index(index) else {
            continue;
        };
        let (Ok(sname), kind) = (section.name(), section.kind()) else {
            continue;
        };
        let part = code_part(name);
        let size = sym.size();
        match (sname, kind) {
            (".text", _) | (_, SectionKind::Text) => match part {
                CodePart::Engine => f.engine_text += size,
                CodePart::Float => f.float_text += size,
                CodePart::Runtime => f.runtime_text += size,
                CodePart::Other => f.other_text += size,
            },
            (".rodata", _) if part == CodePart::Engine => f.engine_rodata += size,
            _ => {}
        }
    }
    Ok(f)
}
