//! The advice: changes to a model description that save memory, each planned again by the core,
//! their combinations, and what the lean build of the core would leave out.

use super::*;

/// The kind of a change the advice tries.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum ChangeKind {
    /// Freeze a layer: its parameters stay in flash and it trains nothing.
    Freeze,
    /// Train only a layer's bias.
    BiasOnly,
    /// Store a layer's weights one word narrower (i16 → i8, i32 → i16).
    NarrowWeights,
    /// Gradient accumulators (and momentum) of a layer in i16 instead of i32.
    NarrowAccumulators,
    /// No master copies of weights and biases.
    NoMaster,
    /// No momentum buffers (momentum zero).
    NoMomentum,
    /// Halve the units of a hidden dense layer.
    FewerUnits,
    /// Another mini-batch size.
    Batch,
}

/// One concrete change to a model description.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Change {
    /// Freeze layer `k`.
    Freeze(usize),
    /// Train only the bias of layer `k`.
    BiasOnly(usize),
    /// Weights of layer `k` one word narrower, keeping the integer bits where possible.
    NarrowWeights(usize),
    /// Accumulators of layer `k` in i16 instead of i32, keeping the integer bits where
    /// possible.
    NarrowAccumulators(usize),
    /// Drop every master copy.
    NoMaster,
    /// Set the momentum to zero.
    NoMomentum,
    /// Halve the units of hidden dense layer `k`.
    HalveUnits(usize),
    /// Use mini-batches of this many samples.
    Batch(u16),
}

/// A format one word narrower with the same integer bits where the fraction bits allow.
pub(super) fn narrower(q: QFormat, word: Word) -> QFormat {
    let drop = (q.word.bits() - word.bits()) as u8;
    QFormat::new_unchecked(word, q.frac.saturating_sub(drop))
}

pub(super) fn narrower_word(w: Word) -> Option<Word> {
    match w {
        Word::I32 => Some(Word::I16),
        Word::I16 => Some(Word::I8),
        Word::I8 => None,
    }
}

impl Change {
    /// The kind of the change.
    pub fn kind(&self) -> ChangeKind {
        match self {
            Change::Freeze(_) => ChangeKind::Freeze,
            Change::BiasOnly(_) => ChangeKind::BiasOnly,
            Change::NarrowWeights(_) => ChangeKind::NarrowWeights,
            Change::NarrowAccumulators(_) => ChangeKind::NarrowAccumulators,
            Change::NoMaster => ChangeKind::NoMaster,
            Change::NoMomentum => ChangeKind::NoMomentum,
            Change::HalveUnits(_) => ChangeKind::FewerUnits,
            Change::Batch(_) => ChangeKind::Batch,
        }
    }

    /// The layer the change touches, if it touches one.
    pub fn layer(&self) -> Option<usize> {
        match *self {
            Change::Freeze(k)
            | Change::BiasOnly(k)
            | Change::NarrowWeights(k)
            | Change::NarrowAccumulators(k)
            | Change::HalveUnits(k) => Some(k),
            Change::NoMaster | Change::NoMomentum | Change::Batch(_) => None,
        }
    }

    /// The description with the change made, and a sentence saying what changed; `None` if
    /// the change does not apply (the layer has no parameters, is already frozen, has no
    /// narrower word, the model has no master copies, ...).
    pub fn apply(&self, desc: &ModelDesc) -> Option<(ModelDesc, String)> {
        let mut d = desc.clone();
        let text = match *self {
            Change::Freeze(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() || l.mode == TrainMode::Frozen {
                    return None;
                }
                l.mode = TrainMode::Frozen;
                format!("freeze layer {k} ({})", kind_label(&l.kind))
            }
            Change::BiasOnly(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() || !l.mode.trains_weight() {
                    return None;
                }
                l.mode = TrainMode::BiasOnly;
                format!("train only the bias of layer {k} ({})", kind_label(&l.kind))
            }
            Change::NarrowWeights(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() {
                    return None;
                }
                let from = l.weight.value;
                let to = narrower(from, narrower_word(from.word)?);
                l.weight.value = to;
                format!("layer {k} weights {} → {}", from, to)
            }
            Change::NarrowAccumulators(k) => {
                let l = d.layers.get_mut(k)?;
                if !l.kind.has_params() {
                    return None;
                }
                let (w, b) = (l.weight.accum, l.bias.accum);
                if w.word != Word::I32 && b.word != Word::I32 {
                    return None;
                }
                if w.word == Word::I32 {
                    l.weight.accum = narrower(w, Word::I16);
                }
                if b.word == Word::I32 {
                    l.bias.accum = narrower(b, Word::I16);
                }
                format!(
                    "layer {k} accumulators i32 → i16 (weights {}, bias {})",
                    q_short(l.weight.accum),
                    q_short(l.bias.accum)
                )
            }
            Change::NoMaster => {
                let mut any = false;
                for l in d.layers.iter_mut().filter(|l| l.kind.has_params()) {
                    any |= l.weight.master.is_some() || l.bias.master.is_some();
                    l.weight.master = None;
                    l.bias.master = None;
                }
                if !any {
                    return None;
                }
                "no master copies (updates go straight into the weights)".to_owned()
            }
            Change::NoMomentum => {
                if d.train.momentum.is_zero() {
                    return None;
                }
                let was = d.train.momentum.to_f64();
                d.train.momentum = QScalar::ZERO;
                format!("no momentum (was {was:.4})")
            }
            Change::HalveUnits(k) => {
                let is_hidden = d
                    .layers
                    .iter()
                    .skip(k + 1)
                    .any(|l| matches!(l.kind, LayerKind::Dense { .. }));
                let l = d.layers.get_mut(k)?;
                let LayerKind::Dense { units } = l.kind else {
                    return None;
                };
                if !is_hidden || units < 2 {
                    return None;
                }
                let new = units / 2;
                l.kind = LayerKind::Dense { units: new };
                if d.output().ok()? != desc.output().ok()? {
                    return None;
                }
                format!("layer {k} dense: {units} → {new} units")
            }
            Change::Batch(b) => {
                if b == 0 || b == d.train.batch {
                    return None;
                }
                let was = d.train.batch;
                d.train.batch = b;
                format!("batch of {b} samples instead of {was}")
            }
        };
        Some((d, text))
    }
}

/// The changes the advice tries for a description.
pub(super) fn candidate_changes(desc: &ModelDesc, options: &AdviceOptions) -> Vec<Change> {
    let mut out = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        if !l.kind.has_params() {
            continue;
        }
        out.extend([
            Change::Freeze(k),
            Change::BiasOnly(k),
            Change::NarrowWeights(k),
            Change::NarrowAccumulators(k),
            Change::HalveUnits(k),
        ]);
    }
    out.extend([Change::NoMaster, Change::NoMomentum]);
    match options.batch {
        Some(b) => out.push(Change::Batch(b)),
        None if desc.train.batch > 1 => out.push(Change::Batch(1)),
        None => {}
    }
    out
}

/// Applies `changes` in order to `desc`, keeping each one that lowers the RAM or flash of the
/// plan without raising the other, until the model fits. Every step is planned by the core.
pub(super) fn combine(
    desc: &ModelDesc,
    plan: &Plan,
    budget: &Budget,
    reserve: Reserve,
    engine: Option<&EngineOverhead>,
    changes: &[Change],
    drift: Option<DriftFn<'_>>,
) -> Option<Combination> {
    let mut cur = desc.clone();
    let mut cur_plan = *plan;
    let mut kept = Vec::new();
    for change in changes {
        let Some((next, text)) = change.apply(&cur) else {
            continue;
        };
        let Ok(next_plan) = Plan::of(&next) else {
            continue;
        };
        let lower = next_plan.ram_bytes <= cur_plan.ram_bytes
            && next_plan.flash_bytes <= cur_plan.flash_bytes
            && (next_plan.ram_bytes, next_plan.flash_bytes)
                != (cur_plan.ram_bytes, cur_plan.flash_bytes);
        if !lower {
            continue;
        }
        cur = next;
        cur_plan = next_plan;
        kept.push(CombinedChange {
            kind: change.kind(),
            layer: change.layer(),
            change: text,
        });
        let (r, f) = uses(&cur_plan, budget, reserve, engine);
        if r.fits && f.fits {
            break;
        }
    }
    if kept.len() < 2 {
        return None;
    }
    let (r, f) = uses(&cur_plan, budget, reserve, engine);
    let (drift, drift_not_computed) = drift_of(drift, &cur);
    Some(Combination {
        changes: kept,
        ram_saved_bytes: plan.ram_bytes as i64 - cur_plan.ram_bytes as i64,
        flash_saved_bytes: plan.flash_bytes as i64 - cur_plan.flash_bytes as i64,
        ram_spare_bytes: r.spare_bytes,
        flash_spare_bytes: f.spare_bytes,
        fits: r.fits && f.fits,
        drift,
        drift_not_computed,
    })
}

/// The core's optional features (`core/Cargo.toml`) that `desc` needs: its layer kinds and
/// loss, its value words besides `i16`, and its training parts (rounding modes, momentum,
/// master weights, decay and clip, dynamic fixed point; see `hone_core::features`).
#[must_use]
pub fn core_features(desc: &ModelDesc) -> Vec<&'static str> {
    use hone_core::features::Feature;
    use hone_core::num::{Rounding, Word};
    let mut f = Vec::new();
    let mut add = |name| {
        if !f.contains(&name) {
            f.push(name);
        }
    };
    let mut word = |w: Word| match w {
        Word::I8 => add("word-i8"),
        Word::I32 => add("word-i32"),
        Word::I16 => {}
    };
    word(desc.input_format.word);
    for l in &desc.layers {
        word(l.out.word);
        word(l.grad.word);
        if l.kind.has_params() {
            word(l.weight.value.word);
            word(l.bias.value.word);
        }
    }
    for l in &desc.layers {
        match l.kind {
            LayerKind::Conv1d { .. } => add("conv1d"),
            LayerKind::AvgPool1d { .. } | LayerKind::MaxPool1d { .. } => add("pool1d"),
            LayerKind::Sigmoid | LayerKind::Tanh => add("table-activations"),
            _ => {}
        }
    }
    if desc.loss == hone_core::model::Loss::SoftmaxCrossEntropy {
        add("cross-entropy");
    }
    let t = &desc.train;
    for mode in [
        t.rounding.activations,
        t.rounding.gradients,
        t.rounding.updates,
    ] {
        match mode {
            Rounding::Stochastic => add(Feature::Stochastic.name()),
            Rounding::TowardZero => add(Feature::TowardZero.name()),
            Rounding::NearestEven => {}
        }
    }
    if !t.momentum.is_zero() {
        add(Feature::Momentum.name());
    }
    let master = |l: &hone_core::model::LayerDesc| {
        l.kind.has_params() && (l.weight.master.is_some() || l.bias.master.is_some())
    };
    if desc.layers.iter().any(master) {
        add(Feature::MasterWeights.name());
    }
    if !(t.weight_decay.is_zero() && t.clip.is_zero()) {
        add(Feature::DecayClip.name());
    }
    if t.dynamic.is_some() {
        add(Feature::Dynamic.name());
    }
    f
}

/// When the model does not fit but would without the engine's measured overhead (its trainer
/// object and stack in RAM, its code in flash), the advice to build the lean engine: the core
/// without default features plus exactly the ones the model needs (`boards/lean` shows how).
#[must_use]
pub fn lean_advice(desc: &ModelDesc, r: &PlanReport) -> Option<String> {
    let engine = r.engine.as_ref()?;
    if r.fits {
        return None;
    }
    let ram_without = r.ram.total_bytes.saturating_sub(
        u64::from(r.ram.engine_state_bytes.unwrap_or(0))
            + u64::from(r.ram.stack_bytes.unwrap_or(0)),
    );
    let flash_without = r
        .flash
        .total_bytes
        .saturating_sub(u64::from(engine.code_flash));
    if ram_without > u64::from(r.budget.ram_bytes)
        || flash_without > u64::from(r.budget.flash_bytes)
    {
        return None;
    }
    let features = core_features(desc);
    let wanted = if features.is_empty() {
        "no optional feature".to_owned()
    } else {
        format!(
            "features = [{}]",
            features
                .iter()
                .map(|f| format!("\"{f}\""))
                .collect::<Vec<_>>()
                .join(", ")
        )
    };
    Some(format!(
        "the engine's own overhead ({} B of code, {} B of trainer and stack) is what does not \
         fit: the model alone would. Build the lean engine as boards/lean does, hone-core with \
         default-features = false and {wanted} (what this model uses), which links only those \
         parts; its overhead is not in the measured table, so measure it with `hone device \
         verify --board microbit-lean`.",
        engine.code_flash,
        r.ram.engine_state_bytes.unwrap_or(0) + r.ram.stack_bytes.unwrap_or(0),
    ))
}
