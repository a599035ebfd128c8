//! The session on the host: the payloads a board reports, where each tensor sits in them, and the
//! simulation of the guarded calibration whose results the board must match.

use super::*;

/// Where one trained tensor sits in a weights payload.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct TensorSpan {
    /// Layer index.
    pub layer: usize,
    /// `weight` or `bias`.
    pub tensor: &'static str,
    /// Storage word (`None` for the float twin's `f32`).
    pub word: Option<Word>,
    /// Number of values.
    pub elems: usize,
    /// Offset in the payload, bytes.
    pub offset: usize,
}

impl TensorSpan {
    /// Bytes per value.
    #[must_use]
    pub fn value_bytes(&self) -> usize {
        self.word.map_or(4, Word::bytes)
    }
}

/// The trained tensors of `plan` in payload order (per layer: weight, then bias), with their
/// offsets; `float` lays them out as `f32`.
#[must_use]
pub fn payload_layout(desc: &ModelDesc, plan: &Plan, float: bool) -> Vec<TensorSpan> {
    let mut out = Vec::new();
    let mut offset = 0;
    for (k, l) in desc.layers.iter().enumerate() {
        let s = plan.layers[k];
        for (tensor, slot, word) in [
            ("weight", s.weight, l.weight.value.word),
            ("bias", s.bias, l.bias.value.word),
        ] {
            if !slot.is_some() {
                continue;
            }
            let word = (!float).then_some(word);
            let span = TensorSpan {
                layer: k,
                tensor,
                word,
                elems: slot.elems as usize,
                offset,
            };
            offset += span.elems * span.value_bytes();
            out.push(span);
        }
    }
    out
}

/// One guarded set, simulated.
#[derive(Clone, Debug)]
pub struct GuardedOutcome {
    /// What the core's `guard::calibrate` reported.
    pub report: SessionReport,
    /// The trained tensors at the end, in payload order.
    pub weights: Vec<u8>,
    /// The checkpoint blob at the end.
    pub checkpoint: Vec<u8>,
    /// The trainer's step count at the end.
    pub steps: u32,
    /// The trainer's update count at the end.
    pub updates: u32,
}

/// The whole session, simulated on the host.
#[derive(Clone, Debug)]
pub struct HostOutcome {
    /// The calibration samples.
    pub calibration: GuardedOutcome,
    /// The mislabelled samples.
    pub faulty: GuardedOutcome,
    /// The float twin's trained tensors, `f32` little-endian, in payload order.
    pub float_weights: Vec<u8>,
    /// The fixed-point plan.
    pub plan: Plan,
    /// The float twin's plan.
    pub float_plan: Plan,
    /// The throughput phase, on boards that run it.
    pub throughput: Option<ThroughputOutcome>,
}

/// Runs the session on the host, as the firmware does, with the same core code: for each
/// guarded set a fresh trainer from the factory parameters and
/// [`hone_core::session::calibrate_set`] over the calibration (or mislabelled) samples,
/// [`PASSES`] times in stored order, judged on the hold-out samples, going back to the factory
/// parameters on rejection; then [`hone_core::session::train_twin`] in `f32` on the calibration
/// samples; then the throughput phase, where the board has one ([`throughput::simulate`]).
///
/// # Errors
/// A message for any error of the core.
pub fn simulate(s: &Session) -> Result<HostOutcome, SessionError> {
    let desc = &s.desc;
    let plan = Plan::of(desc)?;
    let calibration = guarded(s, &plan, &s.calibration)?;
    let faulty = guarded(s, &plan, &s.faulty)?;

    let float_plan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 4)?;
    let mut arena = vec![0f32; float_plan.ram_words()];
    let views: Vec<FloatParams<'_, f32>> = s
        .float_params
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut twin = Twin::new(desc, &float_plan, &mut arena, &views).map_err(SessionError::Twin)?;
    let float_y: FloatTargets<'_, f32> = match &s.calibration.target {
        PreparedTargets::Values { .. } => FloatTargets::Values(&s.float_y),
        PreparedTargets::Classes(l) => FloatTargets::Classes(l),
    };
    let set = FloatSet {
        count: set_count(&s.calibration)?,
        x: &s.float_x,
        y: float_y,
    };
    core_session::train_twin(&mut twin, &float_plan, &set, PASSES).map_err(SessionError::Twin)?;
    let float_weights = float_payload(desc, &float_plan, &twin);
    let throughput = match &s.throughput.spec {
        Some(spec) => Some(throughput::simulate(spec)?),
        None => None,
    };
    Ok(HostOutcome {
        calibration,
        faulty,
        float_weights,
        plan,
        float_plan,
        throughput,
    })
}

pub(super) fn guarded(
    s: &Session,
    plan: &Plan,
    set: &Prepared,
) -> Result<GuardedOutcome, SessionError> {
    let desc = &s.desc;
    let mut arena = vec![0u32; plan.ram_words()];
    let views = s.params.views();
    let mut t = Trainer::new(desc, plan, &mut arena, &views)?;
    let (train, holdout) = (FlatSet::of(set), FlatSet::of(&s.holdout));
    // The firmware's session: the same core procedure, going back to the factory parameters.
    let report = core_session::calibrate_set(
        &mut t,
        &train.view()?,
        PASSES,
        &holdout.view()?,
        &GUARD,
        LastGood::Params(&views),
        &mut (),
    )?;
    let weights = weights_payload(&t);
    let mut checkpoint = vec![0u8; s.checkpoint_capacity];
    let n = core_session::checkpoint(&t, &s.scaling, &mut checkpoint)?;
    checkpoint.truncate(n);
    Ok(GuardedOutcome {
        report,
        weights,
        checkpoint,
        steps: t.steps(),
        updates: t.updates(),
    })
}

/// Samples of a [`Prepared`] set flattened as the firmware stores them, for a [`SampleSet`].
pub(crate) struct FlatSet {
    count: usize,
    x: OwnedRaw,
    y: FlatTargets,
}

pub(super) enum FlatTargets {
    Values(OwnedRaw, QFormat),
    Classes(Vec<u16>),
}

impl FlatSet {
    /// Flattens `p`.
    pub(crate) fn of(p: &Prepared) -> FlatSet {
        let (word, x) = flat(&p.xq);
        let y = match &p.target {
            PreparedTargets::Values { yq, format, .. } => {
                let (word, y) = flat(yq);
                FlatTargets::Values(owned(word, &y), *format)
            }
            PreparedTargets::Classes(l) => FlatTargets::Classes(l.clone()),
        };
        FlatSet {
            count: p.len(),
            x: owned(word, &x),
            y,
        }
    }

    /// The core's view of the samples.
    pub(crate) fn view(&self) -> Result<SampleSet<'_>, SessionError> {
        Ok(SampleSet {
            count: u16::try_from(self.count)
                .map_err(|_| SessionError::TooManySamples(self.count))?,
            x: self.x.raw(),
            y: match &self.y {
                FlatTargets::Values(y, fmt) => Targets::Values(Tensor {
                    raw: y.raw(),
                    fmt: *fmt,
                }),
                FlatTargets::Classes(l) => Targets::Classes(l),
            },
        })
    }
}

pub(super) fn set_count(p: &Prepared) -> Result<u16, SessionError> {
    u16::try_from(p.len()).map_err(|_| SessionError::TooManySamples(p.len()))
}

/// `values` in storage words of `word` (each already in range: they came from that word).
pub(super) fn owned(word: Word, values: &[i32]) -> OwnedRaw {
    match word {
        Word::I8 => OwnedRaw::I8(values.iter().map(|&v| v as i8).collect()),
        Word::I16 => OwnedRaw::I16(values.iter().map(|&v| v as i16).collect()),
        Word::I32 => OwnedRaw::I32(values.to_vec()),
    }
}

/// The trained tensors of `t` as the firmware sends them: layer by layer, weight then bias
/// ([`hone_core::session::trained_tensors`]), every value little-endian in its storage word.
pub(crate) fn weights_payload(t: &Trainer<'_>) -> Vec<u8> {
    let mut weights = Vec::new();
    for k in 0..t.desc().layers.len() {
        for raw in core_session::trained_tensors(t, k) {
            let mut bytes = vec![0u8; raw.len() * raw.word().bytes()];
            raw.write_le(&mut bytes);
            weights.extend_from_slice(&bytes);
        }
    }
    weights
}

/// The trained tensors of the twin `twin` (planned by `float_plan`) as the firmware sends
/// them: layer by layer, weight then bias ([`hone_core::session::twin_trained`]), every value
/// a little-endian `f32`.
pub(crate) fn float_payload(desc: &ModelDesc, float_plan: &Plan, twin: &Twin<'_, f32>) -> Vec<u8> {
    let mut out = Vec::new();
    for k in 0..desc.layers.len() {
        for values in core_session::twin_trained(twin, float_plan, k) {
            for v in values {
                out.extend_from_slice(&v.to_le_bytes());
            }
        }
    }
    out
}
