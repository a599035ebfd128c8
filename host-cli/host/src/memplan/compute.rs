//! Planning a model against a budget: the buffers of the core's plan, the uses of RAM and flash,
//! and the report with its alternatives.

use super::*;

/// What the caller may pass to estimate the drift cost of a changed model: the cost, or why
/// it cannot be computed for this change (shown in its place).
pub type DriftFn<'a> =
    &'a dyn Fn(&ModelDesc) -> Result<DriftCost, Box<dyn std::error::Error + Send + Sync>>;

/// Calls the caller's drift function, if any: the cost, and the reason when there is none.
pub(super) fn drift_of(
    drift: Option<DriftFn<'_>>,
    d: &ModelDesc,
) -> (Option<DriftCost>, Option<String>) {
    match drift.map(|f| f(d)) {
        None => (None, None),
        Some(Ok(c)) => (Some(c), None),
        Some(Err(why)) => (None, Some(why.to_string())),
    }
}

/// A layer kind in a few characters: "dense 8", "conv1d 4×5/2", "max pool 2/2".
pub fn kind_label(kind: &LayerKind) -> String {
    match *kind {
        LayerKind::Dense { units } => format!("dense {units}"),
        LayerKind::Conv1d {
            filters,
            kernel,
            stride,
        } => format!("conv1d {filters}×{kernel}/{stride}"),
        LayerKind::Relu => "relu".to_owned(),
        LayerKind::LeakyRelu { shift } => format!("leaky relu 2^-{shift}"),
        LayerKind::HardTanh => "hard tanh".to_owned(),
        LayerKind::ClippedRelu { ceiling } => format!("clipped relu {ceiling}"),
        LayerKind::Sigmoid => "sigmoid".to_owned(),
        LayerKind::Tanh => "tanh".to_owned(),
        LayerKind::AvgPool1d { window, stride } => format!("avg pool {window}/{stride}"),
        LayerKind::MaxPool1d { window, stride } => format!("max pool {window}/{stride}"),
    }
}

/// "Q3.12" without the word.
pub(super) fn q_short(q: QFormat) -> String {
    format!("Q{}.{}", q.int_bits(), q.frac)
}

pub(super) fn pad4(n: u64) -> u64 {
    (n + 3) & !3
}

pub(super) fn ram_buffer(
    layer: Option<(usize, &LayerDesc)>,
    role: BufferRole,
    slot: Slot,
    format: Option<QFormat>,
) -> Buffer {
    Buffer {
        layer: layer.map(|(k, _)| k),
        layer_kind: layer.map(|(_, l)| kind_label(&l.kind)),
        role,
        elems: slot.elems,
        word: slot.word.to_string(),
        format: format.map(|f| f.to_string()),
        bytes: slot.bytes,
        data_bytes: (slot.elems as u64 * slot.word.bytes() as u64) as u32,
        memory: Memory::Ram,
        offset: Some(slot.offset),
        serves_layers: Vec::new(),
    }
}

/// Every buffer of a plan, RAM first (by layer, then scratch), then flash.
pub fn buffers(desc: &ModelDesc, plan: &Plan) -> Vec<Buffer> {
    let mut out = Vec::new();
    let n = plan.count();
    for (k, (l, s)) in desc.layers.iter().zip(plan.layers.iter()).enumerate() {
        let at = Some((k, l));
        let entries = [
            (BufferRole::TrainableWeights, s.weight, Some(l.weight.value)),
            (BufferRole::TrainableBias, s.bias, Some(l.bias.value)),
            (BufferRole::MasterWeights, s.master_weight, l.weight.master),
            (BufferRole::MasterBias, s.master_bias, l.bias.master),
            (
                BufferRole::WeightAccumulator,
                s.accum_weight,
                Some(l.weight.accum),
            ),
            (
                BufferRole::BiasAccumulator,
                s.accum_bias,
                Some(l.bias.accum),
            ),
            (
                BufferRole::WeightMomentum,
                s.momentum_weight,
                Some(l.weight.accum),
            ),
            (
                BufferRole::BiasMomentum,
                s.momentum_bias,
                Some(l.bias.accum),
            ),
            (BufferRole::KeptActivation, s.kept, Some(l.out)),
        ];
        for (role, slot, format) in entries {
            if slot.is_some() {
                out.push(ram_buffer(at, role, slot, format));
            }
        }
    }
    let scratch = [
        (BufferRole::ForwardScratchEven, plan.forward[0], 0, true),
        (BufferRole::ForwardScratchOdd, plan.forward[1], 1, true),
        (BufferRole::BackwardScratchEven, plan.backward[0], 0, false),
        (BufferRole::BackwardScratchOdd, plan.backward[1], 1, false),
    ];
    for (role, slot, parity, forward) in scratch {
        if !slot.is_some() {
            continue;
        }
        let mut b = ram_buffer(None, role, slot, None);
        b.serves_layers = (0..n)
            .filter(|&k| k % 2 == parity)
            .filter(|&k| {
                if forward {
                    !plan.layers[k].kept.is_some()
                } else {
                    k >= plan.first_trainable
                }
            })
            .collect();
        out.push(b);
    }
    if plan.state.is_some() {
        let mut b = ram_buffer(None, BufferRole::TrainerState, plan.state, None);
        b.serves_layers = (0..n).collect();
        out.push(b);
    }
    for (k, (l, s)) in desc.layers.iter().zip(plan.layers.iter()).enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        let g = &plan.shapes.layers[k];
        let flash = [
            (
                BufferRole::FactoryWeights,
                g.weights,
                s.flash_weight,
                l.weight.value,
            ),
            (
                BufferRole::FactoryBias,
                g.biases,
                s.flash_bias,
                l.bias.value,
            ),
        ];
        for (role, elems, data, format) in flash {
            out.push(Buffer {
                layer: Some(k),
                layer_kind: Some(kind_label(&l.kind)),
                role,
                elems,
                word: format.word.to_string(),
                format: Some(format.to_string()),
                bytes: pad4(data as u64) as u32,
                data_bytes: data,
                memory: Memory::Flash,
                offset: None,
                serves_layers: Vec::new(),
            });
        }
    }
    out
}

/// Budget minus use, and the percentage of the budget.
pub(super) fn spare(budget: u32, total: u64) -> (i64, Option<f64>) {
    let s = budget as i64 - total as i64;
    let pct = (budget != 0).then(|| s as f64 * 100.0 / budget as f64);
    (s, pct)
}

/// RAM and flash use of a plan with the fixed parts (overhead and reserve) added.
pub(super) fn uses(
    plan: &Plan,
    budget: &Budget,
    reserve: Reserve,
    engine: Option<&EngineOverhead>,
) -> (RamUse, FlashUse) {
    let state = engine.map(|e| e.state_ram);
    let stack = engine.map(|e| e.stack);
    let code = engine.map(|e| e.code_flash);
    let ram_total = plan.ram_bytes as u64
        + state.unwrap_or(0) as u64
        + stack.unwrap_or(0) as u64
        + reserve.ram_bytes as u64;
    let (ram_spare, ram_pct) = spare(budget.ram_bytes, ram_total);
    let flash_total =
        plan.flash_bytes as u64 + code.unwrap_or(0) as u64 + reserve.flash_bytes as u64;
    let (flash_spare, flash_pct) = spare(budget.flash_bytes, flash_total);
    (
        RamUse {
            arena_bytes: plan.ram_bytes,
            engine_state_bytes: state,
            stack_bytes: stack,
            reserve_bytes: reserve.ram_bytes,
            total_bytes: ram_total,
            budget_bytes: budget.ram_bytes,
            spare_bytes: ram_spare,
            spare_percent: ram_pct,
            fits: ram_spare >= 0,
        },
        FlashUse {
            parameters_bytes: plan.flash_bytes,
            engine_code_bytes: code,
            reserve_bytes: reserve.flash_bytes,
            total_bytes: flash_total,
            budget_bytes: budget.flash_bytes,
            spare_bytes: flash_spare,
            spare_percent: flash_pct,
            fits: flash_spare >= 0,
        },
    )
}

pub(super) fn percent_text(p: Option<f64>) -> String {
    match p {
        Some(p) => format!("{:.0} %", p.abs()),
        None => "of a zero budget".to_owned(),
    }
}

pub(super) fn verdict_line(ram: &RamUse, flash: &FlashUse) -> String {
    if ram.fits && flash.fits {
        format!(
            "fits: {} of RAM to spare ({}), {} of flash ({})",
            bytes(ram.spare_bytes.unsigned_abs()),
            percent_text(ram.spare_percent),
            bytes(flash.spare_bytes.unsigned_abs()),
            percent_text(flash.spare_percent)
        )
    } else {
        let mut parts = Vec::new();
        if !ram.fits {
            parts.push(format!(
                "RAM short by {}",
                bytes(ram.spare_bytes.unsigned_abs())
            ));
        }
        if !flash.fits {
            parts.push(format!(
                "flash short by {}",
                bytes(flash.spare_bytes.unsigned_abs())
            ));
        }
        format!("does not fit: {}", parts.join(", "))
    }
}

/// Makes the report: the plan of `desc`, its buffers, totals against `budget` with `reserve`
/// and `engine` added, a verdict, and the advice.
///
/// Advice items are sorted by the bytes they save in the resource that is short (RAM when
/// RAM is short or nothing is, flash when only flash is), then by the other resource. Only
/// items that save something are listed, plus those whose kind is in
/// [`AdviceOptions::always_show`] and the batch size given in [`AdviceOptions::batch`].
///
/// # Errors
/// [`MemplanError::Plan`] if the core does not plan `desc`.
pub fn plan_report(
    desc: &ModelDesc,
    budget: &Budget,
    reserve: Reserve,
    engine: Option<&EngineOverhead>,
    options: &AdviceOptions,
    drift: Option<DriftFn<'_>>,
) -> Result<PlanReport, MemplanError> {
    let plan = Plan::of(desc).map_err(MemplanError::Plan)?;
    let (ram, flash) = uses(&plan, budget, reserve, engine);
    let fits = ram.fits && flash.fits;
    let verdict = verdict_line(&ram, &flash);
    let cat = plan.ram_by_category();
    let output_values = plan.shapes.output.size();

    let mut advice = Vec::new();
    let mut applied = Vec::new();
    for change in candidate_changes(desc, options) {
        let Some((changed, text)) = change.apply(desc) else {
            continue;
        };
        let Ok(new_plan) = Plan::of(&changed) else {
            continue;
        };
        let ram_saved = plan.ram_bytes as i64 - new_plan.ram_bytes as i64;
        let flash_saved = plan.flash_bytes as i64 - new_plan.flash_bytes as i64;
        let asked = options.always_show.contains(&change.kind())
            || (options.batch.is_some() && change.kind() == ChangeKind::Batch);
        if ram_saved <= 0 && flash_saved <= 0 && !asked {
            continue;
        }
        let (r, f) = uses(&new_plan, budget, reserve, engine);
        let (drift_cost, drift_not_computed) = drift_of(drift, &changed);
        advice.push(Alternative {
            kind: change.kind(),
            layer: change.layer(),
            change: text,
            ram_saved_bytes: ram_saved,
            flash_saved_bytes: flash_saved,
            new_arena_bytes: new_plan.ram_bytes,
            new_flash_parameters_bytes: new_plan.flash_bytes,
            ram_spare_bytes: r.spare_bytes,
            flash_spare_bytes: f.spare_bytes,
            fits_alone: r.fits && f.fits,
            drift: drift_cost,
            drift_not_computed,
        });
        applied.push(change);
    }
    let flash_first = ram.fits && !flash.fits;
    let key = |a: &Alternative| {
        if flash_first {
            (a.flash_saved_bytes, a.ram_saved_bytes)
        } else {
            (a.ram_saved_bytes, a.flash_saved_bytes)
        }
    };
    let mut order: Vec<usize> = (0..advice.len()).collect();
    order.sort_by(|&a, &b| key(&advice[b]).cmp(&key(&advice[a])));
    let advice: Vec<Alternative> = order.iter().map(|&i| advice[i].clone()).collect();
    let applied: Vec<Change> = order.iter().map(|&i| applied[i]).collect();

    let combination = if !fits && !advice.iter().any(|a| a.fits_alone) {
        combine(desc, &plan, budget, reserve, engine, &applied, drift)
    } else {
        None
    };

    Ok(PlanReport {
        model: ModelSummary {
            layers: plan.count(),
            input_values: desc.input.size(),
            input_format: desc.input_format.to_string(),
            output_values,
            first_trainable: plan.first_trainable,
            batch: desc.train.batch,
            forward_macs: plan.forward_macs(),
        },
        budget: budget.clone(),
        reserve,
        engine: engine.cloned(),
        buffers: buffers(desc, &plan),
        ram_categories: RamCategories {
            parameters_bytes: cat.parameters,
            master_bytes: cat.master,
            accumulators_bytes: cat.accumulators,
            momentum_bytes: cat.momentum,
            kept_activations_bytes: cat.kept_activations,
            scratch_bytes: cat.scratch,
        },
        ram,
        flash,
        fits,
        verdict,
        advice,
        combination,
        session: None,
        lean: None,
    })
}
