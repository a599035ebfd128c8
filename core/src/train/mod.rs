//! Fixed-point training: the [`Trainer`] runs forward, loss, backward and SGD updates over a
//! caller-owned arena laid out by the [`Plan`].
//!
//! One call to [`Trainer::step`] takes one sample: forward through every layer, the loss and
//! its gradient, backward down to the first trainable layer, and gradient accumulation. Every
//! `batch` samples the accumulated gradients are applied ([`sgd`]) and, with dynamic fixed
//! point on, the fraction bits of activations, gradients and accumulators are adjusted
//! ([`dynamic`]).

pub mod checkpoint;
pub mod dynamic;
pub mod sgd;

use crate::error::{Error, ParamTensor};
use crate::features::{DYNAMIC, MASTER_WEIGHTS, MOMENTUM};
use crate::kernel::Tally;
use crate::layer::loss::{self, LossValue, Target};
use crate::layer::{self, BackOut, BackTally, Params, Rounder, Tensor, TensorMut};
use crate::model::{LayerDesc, Loss, ModelDesc};
use crate::num::round::{rescale, Rounding};
use crate::num::{QFormat, Raw, RawMut, Rng};
use crate::plan::{reads_input, split_disjoint, Plan, Slot};

/// Initial parameters of one layer, borrowed. Frozen tensors are used in place for the whole
/// life of the trainer (on a device: `&'static` data in flash); trainable ones are copied into
/// the arena. Layers without parameters take [`LayerParams::NONE`].
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct LayerParams<'a> {
    /// Weights, in the layer's weight value format.
    pub weight: Raw<'a>,
    /// Bias, in the layer's bias value format.
    pub bias: Raw<'a>,
}

impl LayerParams<'static> {
    /// No parameters.
    pub const NONE: LayerParams<'static> = LayerParams {
        weight: Raw::EMPTY,
        bias: Raw::EMPTY,
    };
}

/// The fraction bits that can move during training (dynamic fixed point).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, bytemuck::Pod, bytemuck::Zeroable)]
#[repr(C)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LiveFracs {
    /// Output activations.
    pub out: u8,
    /// Loss gradient of the output.
    pub grad: u8,
    /// Weight-gradient accumulator (and weight momentum).
    pub accum_weight: u8,
    /// Bias-gradient accumulator (and bias momentum).
    pub accum_bias: u8,
}

impl LiveFracs {
    /// As a checkpoint carries them: output, gradient, weight accumulator, bias accumulator.
    pub const fn bytes(self) -> [u8; 4] {
        [self.out, self.grad, self.accum_weight, self.accum_bias]
    }

    /// From [`LiveFracs::bytes`].
    pub const fn from_bytes(b: [u8; 4]) -> LiveFracs {
        LiveFracs {
            out: b[0],
            grad: b[1],
            accum_weight: b[2],
            accum_bias: b[3],
        }
    }
}

/// What happened to each tensor of one layer.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, bytemuck::Pod, bytemuck::Zeroable)]
#[repr(C)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LayerStats {
    /// Writes of output activations.
    pub out: Tally,
    /// Writes of the loss gradient of the output.
    pub grad: Tally,
    /// Updates of the weights (or master weights): saturations and lost updates.
    pub weight: Tally,
    /// Updates of the bias.
    pub bias: Tally,
    /// Adds into the weight-gradient accumulator and writes of the weight momentum.
    pub accum_weight: Tally,
    /// Adds into the bias-gradient accumulator and writes of the bias momentum.
    pub accum_bias: Tally,
}

impl LayerStats {
    /// The tallies of the tensors dynamic fixed point moves: output, gradient, weight
    /// accumulator, bias accumulator.
    pub fn moving(&self) -> [Tally; 4] {
        [self.out, self.grad, self.accum_weight, self.accum_bias]
    }
}

/// The result of one training step.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StepOutcome {
    /// Loss of the sample, before the update.
    pub loss: LossValue,
    /// For classification, the predicted class.
    pub predicted: Option<u16>,
    /// Whether this step completed a batch and the weights changed.
    pub updated: bool,
    /// Activations that saturated in this sample's forward pass.
    pub saturations: u32,
}

/// Fixed-point trainer over a caller-owned arena. See the [module docs](self).
///
/// The trainer itself is a small handle: every buffer it works in, its per-layer statistics
/// and live formats included, lives in the arena ([`Plan::state`]), and the frozen tensors
/// are read in place from the initial parameters it borrows.
pub struct Trainer<'a> {
    desc: &'a ModelDesc,
    plan: &'a Plan,
    /// The tensors' part of the arena (everything before [`Plan::state`]).
    arena: &'a mut [u32],
    /// The initial parameters, one entry per layer: frozen tensors are read from here.
    flash: &'a [LayerParams<'a>],
    /// Live fraction bits, one entry per layer.
    live: &'a mut [LiveFracs],
    /// Cumulative statistics, one entry per layer.
    stats: &'a mut [LayerStats],
    /// The moving tensors' tallies at the start of the current dynamic-fixed-point interval:
    /// output, gradient, weight accumulator, bias accumulator ([`LayerStats::moving`]), one
    /// entry per layer.
    marks: &'a mut [[Tally; 4]],
    /// The training state [`Trainer::save_state`] kept, in words
    /// ([`crate::plan::SAVED_HEAD_WORDS`], then [`crate::plan::SAVED_WORDS_PER_LAYER`] per
    /// layer).
    saved: &'a mut [u32],
    rng: Rng,
    in_batch: u16,
    steps: u32,
    updates: u32,
}

// The trainer is a handle of pointers and counters: at most 32 machine words (128 bytes on a
// 32-bit microcontroller), whatever the model.
const _: () =
    assert!(core::mem::size_of::<Trainer<'static>>() <= 32 * core::mem::size_of::<usize>());

/// Cuts disjoint mutable pieces out of the arena, one per slot (see [`split_disjoint`]).
fn carve<const N: usize>(arena: &mut [u32], slots: [Slot; N]) -> [&mut [u32]; N] {
    split_disjoint(
        arena,
        slots.map(|s| {
            if s.is_some() {
                (s.first_word(), s.words())
            } else {
                (0, 0)
            }
        }),
    )
}

/// Cuts the state part ([`Plan::state`]) off the end of the arena and views it as the live
/// fraction bits, statistics, (with dynamic fixed point) interval marks and saved training
/// state of `n` layers; returns those and the tensors' part.
#[allow(clippy::type_complexity)]
fn split_state(
    arena: &mut [u32],
    state: Slot,
    n: usize,
    dynamic: bool,
) -> Result<
    (
        &mut [LiveFracs],
        &mut [LayerStats],
        &mut [[Tally; 4]],
        &mut [u32],
        &mut [u32],
    ),
    Error,
> {
    let words = |t: usize| t / 4;
    let need = [
        n * words(core::mem::size_of::<LiveFracs>()),
        n * words(core::mem::size_of::<LayerStats>()),
        // The interval marks exist only with dynamic fixed point.
        if dynamic {
            n * words(core::mem::size_of::<[Tally; 4]>())
        } else {
            0
        },
        crate::plan::SAVED_HEAD_WORDS as usize + n * crate::plan::SAVED_WORDS_PER_LAYER as usize,
    ];
    if state.words() < need.iter().sum::<usize>()
        || arena.len() < state.first_word() + state.words()
    {
        return Err(Error::PlanMismatch);
    }
    let (tensors, rest) = arena.split_at_mut(state.first_word());
    let (live, rest) = rest.split_at_mut(need[0]);
    let (stats, rest) = rest.split_at_mut(need[1]);
    let (marks, rest) = rest.split_at_mut(need[2]);
    let saved = &mut rest[..need[3]];
    Ok((
        bytemuck::cast_slice_mut(live),
        bytemuck::cast_slice_mut(stats),
        bytemuck::cast_slice_mut(marks),
        saved,
        tensors,
    ))
}

fn view_mut(words: &mut [u32], fmt: QFormat, elems: u32) -> TensorMut<'_> {
    let raw = RawMut::from_words(words, fmt.word, elems as usize).unwrap_or(RawMut::I8(&mut []));
    TensorMut { raw, fmt }
}

fn fmt_frac(f: QFormat, frac: u8) -> QFormat {
    QFormat { word: f.word, frac }
}

impl<'a> Trainer<'a> {
    /// A trainer for `desc`, working in `arena` as laid out by `plan`, starting from `init`
    /// (one entry per layer).
    ///
    /// # Errors
    /// [`Error::PlanMismatch`] if `plan` was not made for `desc` (the fingerprint of the
    /// description it carries differs; a plan is made by [`Plan::of`] or [`Plan::new`], and its
    /// layout is trusted, not re-derived); [`Error::ArenaTooSmall`];
    /// [`Error::Params`] if an initial tensor has the wrong word or length; the description's
    /// own errors.
    pub fn new(
        desc: &'a ModelDesc,
        plan: &'a Plan,
        arena: &'a mut [u32],
        init: &'a [LayerParams<'a>],
    ) -> Result<Trainer<'a>, Error> {
        desc.check()?;
        Trainer::new_planned(desc, plan, arena, init)
    }

    /// [`Trainer::new`] for a description and plan checked at compile time: `plan` made by
    /// [`Plan::new`] in a `const` item (which runs [`ModelDesc::check`]'s checks and fails the
    /// build when one fails), `desc` made from the same parts, for example by
    /// [`ModelDesc::new_planned`]. The description is not checked again, so a firmware with a
    /// compile-time model does not link the run-time checks; everything else is checked as in
    /// [`Trainer::new`], the plan's fingerprint of the description included.
    ///
    /// # Errors
    /// As [`Trainer::new`], except the description's own errors.
    pub fn new_planned(
        desc: &'a ModelDesc,
        plan: &'a Plan,
        arena: &'a mut [u32],
        init: &'a [LayerParams<'a>],
    ) -> Result<Trainer<'a>, Error> {
        // The fingerprint stands for the whole description: no second plan is built (it would
        // take several kilobytes of stack on a small device).
        if plan.float_bytes != 0
            || plan.fingerprint
                != crate::plan::fingerprint(desc.input, &desc.layers, desc.loss, &desc.train)
        {
            return Err(Error::PlanMismatch);
        }
        if arena.len() < plan.ram_words() {
            return Err(Error::ArenaTooSmall {
                needed: plan.ram_bytes,
                found: (arena.len() * 4) as u32,
            });
        }
        let n = desc.layers.len();
        if init.len() != n {
            return Err(Error::Params {
                layer: init.len().min(n) as u8,
                tensor: ParamTensor::Weight,
                expected: n as u32,
                found: init.len() as u32,
            });
        }
        for (k, (l, p)) in desc.layers.iter().zip(init.iter()).enumerate() {
            if l.kind.has_params() {
                let g = &plan.shapes.layers[k];
                check_param(k, ParamTensor::Weight, p.weight, l.weight.value, g.weights)?;
                check_param(k, ParamTensor::Bias, p.bias, l.bias.value, g.biases)?;
            }
        }
        let (live, stats, marks, saved, arena) =
            split_state(arena, plan.state, n, desc.train.dynamic.is_some())?;
        for (f, l) in live.iter_mut().zip(desc.layers.iter()) {
            *f = LiveFracs {
                out: l.out.frac,
                grad: l.grad.frac,
                accum_weight: l.weight.accum.frac,
                accum_bias: l.bias.accum.frac,
            };
        }
        stats.fill(LayerStats::default());
        marks.fill([Tally::default(); 4]);
        let mut t = Trainer {
            desc,
            plan,
            arena,
            flash: init,
            live,
            stats,
            marks,
            saved,
            rng: Rng::new(desc.train.seed),
            in_batch: 0,
            steps: 0,
            updates: 0,
        };
        // Nothing saved yet: `revert_state` does nothing until a `save_state`.
        t.saved.fill(0);
        t.load(init)?;
        Ok(t)
    }

    /// Replaces the trainable parameters with `params` (one entry per layer), and clears the
    /// accumulators, momentum and the partial batch. Frozen tensors stay as they were given
    /// at construction. Used to roll back to a last good model.
    ///
    /// # Errors
    /// [`Error::Params`] if a tensor has the wrong word or length.
    pub fn load(&mut self, params: &[LayerParams<'_>]) -> Result<(), Error> {
        let n = self.desc.layers.len();
        if params.len() != n {
            return Err(Error::Params {
                layer: 0,
                tensor: ParamTensor::Weight,
                expected: n as u32,
                found: params.len() as u32,
            });
        }
        for (k, (l, p)) in self.desc.layers.iter().zip(params.iter()).enumerate() {
            if !l.kind.has_params() {
                continue;
            }
            let g = &self.plan.shapes.layers[k];
            check_param(k, ParamTensor::Weight, p.weight, l.weight.value, g.weights)?;
            check_param(k, ParamTensor::Bias, p.bias, l.bias.value, g.biases)?;
            let s = self.plan.layers[k];
            let [w, b] = carve(self.arena, [s.weight, s.bias]);
            if s.weight.is_some() {
                view_mut(w, l.weight.value, s.weight.elems)
                    .raw
                    .copy_from(p.weight);
            }
            if s.bias.is_some() {
                view_mut(b, l.bias.value, s.bias.elems)
                    .raw
                    .copy_from(p.bias);
            }
        }
        self.reinit_from_values();
        Ok(())
    }

    /// Derives the master copies from the trainable values and clears accumulators, momentum
    /// and the partial batch.
    fn reinit_from_values(&mut self) {
        for (k, l) in self.desc.layers.iter().enumerate() {
            let s = self.plan.layers[k];
            let [w, b, mw, mb, aw, ab, vw, vb] = carve(
                self.arena,
                [
                    s.weight,
                    s.bias,
                    s.master_weight,
                    s.master_bias,
                    s.accum_weight,
                    s.accum_bias,
                    s.momentum_weight,
                    s.momentum_bias,
                ],
            );
            let w = view_mut(w, l.weight.value, s.weight.elems);
            let b = view_mut(b, l.bias.value, s.bias.elems);
            let mut copied = [0u32; 2];
            for (j, (m, src, f)) in [(mw, &w, l.weight.master), (mb, &b, l.bias.master)]
                .into_iter()
                .enumerate()
            {
                let Some(f) = f.filter(|_| MASTER_WEIGHTS) else {
                    continue;
                };
                let len = src.raw.len() as u32;
                let mut m = view_mut(m, f, len);
                for i in 0..len as usize {
                    // Widening into the master: exact when the master has at least the
                    // value's fraction bits (the usual case), else rounded to nearest; a
                    // value beyond the master's range saturates and is counted.
                    let (v, sat) = crate::num::round::requantize(
                        src.raw.at(i) as i64,
                        src.frac(),
                        f,
                        Rounding::NearestEven,
                        &mut self.rng,
                    );
                    copied[j] = copied[j].saturating_add(sat as u32);
                    m.raw.put(i, v);
                }
            }
            if let Some(st) = self.stats.get_mut(k) {
                st.weight.saturations = st.weight.saturations.saturating_add(copied[0]);
                st.bias.saturations = st.bias.saturations.saturating_add(copied[1]);
            }
            for buf in [aw, ab, vw, vb] {
                buf.fill(0);
            }
        }
        self.in_batch = 0;
    }

    /// Clears the gradient accumulators and the partial batch.
    fn clear_accumulators(&mut self) {
        for s in self.plan.layers.iter().take(self.desc.layers.len()) {
            let [aw, ab] = carve(self.arena, [s.accum_weight, s.accum_bias]);
            aw.fill(0);
            ab.fill(0);
        }
        self.in_batch = 0;
    }

    /// The model description.
    pub fn desc(&self) -> &ModelDesc {
        self.desc
    }

    /// The memory plan.
    pub fn plan(&self) -> &Plan {
        self.plan
    }

    /// Samples stepped so far.
    pub fn steps(&self) -> u32 {
        self.steps
    }

    /// Weight updates applied so far.
    pub fn updates(&self) -> u32 {
        self.updates
    }

    /// Samples accumulated toward the next update.
    pub fn pending(&self) -> u16 {
        self.in_batch
    }

    /// The generator's state (for checkpoints and for host/device comparisons).
    pub fn rng(&self) -> Rng {
        self.rng
    }

    /// Cumulative statistics of layer `k`.
    pub fn stats(&self, k: usize) -> Option<&LayerStats> {
        self.stats.get(k).filter(|_| k < self.desc.layers.len())
    }

    /// The current fraction bits of layer `k`'s moving tensors.
    pub fn live_fracs(&self, k: usize) -> Option<LiveFracs> {
        self.live
            .get(k)
            .copied()
            .filter(|_| k < self.desc.layers.len())
    }

    /// The current parameters of layer `k`: from the arena where they train, else the
    /// initial ones. `None` for layers without parameters or past the end.
    pub fn params(&self, k: usize) -> Option<LayerParams<'_>> {
        let l = self.desc.layers.get(k)?;
        if !l.kind.has_params() {
            return None;
        }
        let s = &self.plan.layers[k];
        let pick = |slot: Slot, word, init: Raw<'a>| -> Raw<'_> {
            if slot.is_some() {
                raw_view(self.arena, slot, word)
            } else {
                init
            }
        };
        let f = self.flash[k];
        Some(LayerParams {
            weight: pick(s.weight, l.weight.value.word, f.weight),
            bias: pick(s.bias, l.bias.value.word, f.bias),
        })
    }

    /// The gradient accumulators of layer `k` (sums over the samples of the current batch,
    /// in the accumulator formats of [`Trainer::live_fracs`]): weights and bias, each empty
    /// where that tensor does not train.
    pub fn accumulators(&self, k: usize) -> Option<LayerParams<'_>> {
        let l = self.desc.layers.get(k)?;
        let s = &self.plan.layers[k];
        Some(LayerParams {
            weight: raw_view(self.arena, s.accum_weight, l.weight.accum.word),
            bias: raw_view(self.arena, s.accum_bias, l.bias.accum.word),
        })
    }

    /// One training step on one sample: forward, loss, backward, accumulate; applies the
    /// update when the batch is complete.
    ///
    /// # Example
    /// ```
    /// # use hone_core::layer::{loss::Target, Tensor};
    /// # use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape};
    /// # use hone_core::model::{TrainDesc, TrainMode};
    /// # use hone_core::num::{QFormat, QScalar, Raw, Word};
    /// # use hone_core::plan::Plan;
    /// # use hone_core::train::{LayerParams, Trainer};
    /// // y = w·x + b in Q3.12 (step 2^-12), w = 0.5, b = 0, learning rate 0.5.
    /// let q = QFormat::new_unchecked(Word::I16, 12);
    /// let p = ParamFormats::plain(q, 20);
    /// let dense = LayerDesc { kind: LayerKind::Dense { units: 1 }, mode: TrainMode::Full,
    ///                         weight: p, bias: p, out: q, grad: q };
    /// let train = TrainDesc::sgd(QScalar { raw: 1, frac: 1 });
    /// let desc = ModelDesc::new(Shape::vector(1), q, &[dense], Loss::SquaredError, train)?;
    /// let plan = Plan::of(&desc)?;
    /// let mut arena = vec![0u32; plan.ram_words()];
    /// let init = [LayerParams { weight: Raw::I16(&[2048]), bias: Raw::I16(&[0]) }];
    /// let mut t = Trainer::new(&desc, &plan, &mut arena, &init)?;
    /// // x = 1, target 1.
    /// let x = Tensor { raw: Raw::I16(&[4096]), fmt: q };
    /// let target = Target::Values(Tensor { raw: Raw::I16(&[4096]), fmt: q });
    /// let out = t.step(x, target)?;
    /// // y = 0.5: loss ½(0.5 − 1)² = 0.125; the gradient −0.5 moves w and b by +0.25.
    /// assert_eq!(out.loss.to_f64(), 0.125);
    /// assert!(out.updated);
    /// let after = t.params(0).unwrap();
    /// assert_eq!((after.weight.get(0), after.bias.get(0)), (Some(3072), Some(1024)));
    /// # Ok::<(), hone_core::Error>(())
    /// ```
    ///
    /// # Errors
    /// [`Error::InputLength`], [`Error::TargetLength`], [`Error::TargetKind`] or
    /// [`Error::LabelOutOfRange`] for a sample that does not fit the model;
    /// [`Error::InvalidFormat`] for an input or target whose format has more than
    /// [`crate::num::MAX_FRAC`] fraction bits or does not match its storage word.
    pub fn step(&mut self, x: Tensor<'_>, target: Target<'_>) -> Result<StepOutcome, Error> {
        self.check_sample(x, target)?;
        let n = self.desc.layers.len();
        let mut rng = self.rng;
        let saturations = self.forward(x, &mut rng, true);
        let (loss, predicted) = self.loss(target, &mut rng, self.plan.trains(), true);
        if self.plan.trains() {
            for k in (self.plan.first_trainable..n).rev() {
                self.backward(k, x, &mut rng, true);
            }
        }
        self.rng = rng;
        self.steps = self.steps.saturating_add(1);
        let mut updated = false;
        if self.plan.trains() {
            self.in_batch += 1;
            if self.in_batch >= self.desc.train.batch {
                self.apply_update();
                updated = true;
            }
        }
        Ok(StepOutcome {
            loss,
            predicted,
            updated,
            saturations,
        })
    }

    /// Measures the gradients of `samples` under the current weights without training: the
    /// sums land in the accumulators (read them with [`Trainer::accumulators`]) and nothing
    /// else changes — not the weights, the statistics, the generator or the step count — so
    /// a run that probes stays bit-identical to one that does not. Call
    /// [`Trainer::clear_probe`] afterwards. Returns the number of samples probed.
    ///
    /// # Errors
    /// [`Error::InvalidTraining`] while a batch is pending (flush first); sample errors as in
    /// [`Trainer::step`].
    pub fn probe_gradients<'s, I>(&mut self, samples: I) -> Result<u32, Error>
    where
        I: IntoIterator<Item = (Tensor<'s>, Target<'s>)>,
    {
        if self.in_batch != 0 {
            return Err(Error::InvalidTraining);
        }
        let rng = self.rng;
        let mut n = 0u32;
        let mut result = Ok(());
        for (x, t) in samples {
            if let Err(e) = self.check_sample(x, t) {
                result = Err(e);
                break;
            }
            let mut r = self.rng;
            self.forward(x, &mut r, false);
            self.loss(t, &mut r, true, false);
            for k in (self.plan.first_trainable..self.desc.layers.len()).rev() {
                self.backward(k, x, &mut r, false);
            }
            self.rng = r;
            n += 1;
        }
        self.rng = rng;
        result.map(|_| n)
    }

    /// Clears what [`Trainer::probe_gradients`] left in the accumulators.
    pub fn clear_probe(&mut self) {
        self.clear_accumulators();
    }

    /// Applies a partial batch now (dividing by the samples it holds), for example at the end
    /// of an epoch. Does nothing if no sample is pending. Returns whether it updated.
    pub fn flush(&mut self) -> bool {
        if self.in_batch == 0 || !self.plan.trains() {
            return false;
        }
        self.apply_update();
        true
    }

    /// Loss of one sample under the current weights, without training. Uses a copy of the
    /// generator, so evaluating does not change the training's random stream.
    ///
    /// # Example
    /// ```
    /// # use hone_core::layer::{loss::Target, Tensor};
    /// # use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape};
    /// # use hone_core::model::{TrainDesc, TrainMode};
    /// # use hone_core::num::{QFormat, QScalar, Raw, Word};
    /// # use hone_core::plan::Plan;
    /// # use hone_core::train::{LayerParams, Trainer};
    /// // y = w·x + b in Q3.12 (step 2^-12), w = 0.5, b = 0, learning rate 0.5.
    /// let q = QFormat::new_unchecked(Word::I16, 12);
    /// let p = ParamFormats::plain(q, 20);
    /// let dense = LayerDesc { kind: LayerKind::Dense { units: 1 }, mode: TrainMode::Full,
    ///                         weight: p, bias: p, out: q, grad: q };
    /// let train = TrainDesc::sgd(QScalar { raw: 1, frac: 1 });
    /// let desc = ModelDesc::new(Shape::vector(1), q, &[dense], Loss::SquaredError, train)?;
    /// let plan = Plan::of(&desc)?;
    /// let mut arena = vec![0u32; plan.ram_words()];
    /// let init = [LayerParams { weight: Raw::I16(&[2048]), bias: Raw::I16(&[0]) }];
    /// let mut t = Trainer::new(&desc, &plan, &mut arena, &init)?;
    /// // x = 1, target 1.
    /// let x = Tensor { raw: Raw::I16(&[4096]), fmt: q };
    /// let target = Target::Values(Tensor { raw: Raw::I16(&[4096]), fmt: q });
    /// assert_eq!(t.evaluate(x, target)?.loss.to_f64(), 0.125); // ½(0.5 − 1)²
    /// t.step(x, target)?; // w = 0.75, b = 0.25
    /// let out = t.evaluate(x, target)?;
    /// assert_eq!(out.loss.to_f64(), 0.0);
    /// assert!(!out.updated);
    /// assert_eq!(t.updates(), 1);
    /// # Ok::<(), hone_core::Error>(())
    /// ```
    ///
    /// # Errors
    /// As [`Trainer::step`].
    pub fn evaluate(&mut self, x: Tensor<'_>, target: Target<'_>) -> Result<StepOutcome, Error> {
        self.check_sample(x, target)?;
        let mut rng = self.rng;
        let saturations = self.forward(x, &mut rng, false);
        let (loss, predicted) = self.loss(target, &mut rng, false, false);
        Ok(StepOutcome {
            loss,
            predicted,
            updated: false,
            saturations,
        })
    }

    /// Runs forward only and returns the output. Like [`Trainer::evaluate`], it uses a copy
    /// of the generator.
    ///
    /// # Errors
    /// [`Error::InputLength`] or [`Error::InvalidFormat`].
    pub fn predict(&mut self, x: Tensor<'_>) -> Result<Tensor<'_>, Error> {
        self.check_input(x)?;
        let mut rng = self.rng;
        self.forward(x, &mut rng, false);
        Ok(self.output())
    }

    /// The output of the last forward pass.
    pub fn output(&self) -> Tensor<'_> {
        let last = self.desc.layers.len() - 1;
        self.act_view(last)
    }

    fn check_input(&self, x: Tensor<'_>) -> Result<(), Error> {
        // A sample's format comes from outside: its fraction bits bound every shift below.
        if !x.fmt.is_valid() || x.raw.word() != x.fmt.word || !x.fmt.word.is_built_for_values() {
            return Err(Error::InvalidFormat);
        }
        let expected = self.desc.input.size();
        if x.raw.len() != expected as usize {
            return Err(Error::InputLength {
                expected,
                found: x.raw.len() as u32,
            });
        }
        Ok(())
    }

    fn check_sample(&self, x: Tensor<'_>, target: Target<'_>) -> Result<(), Error> {
        self.check_input(x)?;
        let outputs = self.plan.shapes.output.size();
        match (self.desc.loss, target) {
            (Loss::SquaredError, Target::Values(t)) => {
                if !t.fmt.is_valid() || t.raw.word() != t.fmt.word {
                    return Err(Error::InvalidFormat);
                }
                if t.raw.len() != outputs as usize {
                    return Err(Error::TargetLength {
                        expected: outputs,
                        found: t.raw.len() as u32,
                    });
                }
            }
            (Loss::SoftmaxCrossEntropy, Target::Class(c)) => {
                if c as u32 >= outputs {
                    return Err(Error::LabelOutOfRange {
                        label: c as u32,
                        classes: outputs,
                    });
                }
            }
            _ => return Err(Error::TargetKind),
        }
        Ok(())
    }

    fn layer(&self, k: usize) -> &LayerDesc {
        &self.desc.layers[k]
    }

    fn out_fmt(&self, k: usize) -> QFormat {
        fmt_frac(self.layer(k).out, self.live[k].out)
    }

    fn grad_fmt(&self, k: usize) -> QFormat {
        fmt_frac(self.layer(k).grad, self.live[k].grad)
    }

    fn act_view(&self, k: usize) -> Tensor<'_> {
        let fmt = self.out_fmt(k);
        let slot = self.plan.output_slot(k);
        let elems = self.plan.shapes.layers[k].output.size();
        Tensor {
            raw: raw_view(
                self.arena,
                Slot {
                    elems,
                    word: fmt.word,
                    ..slot
                },
                fmt.word,
            ),
            fmt,
        }
    }

    /// Forward through every layer; with `count`, the writes are counted in the statistics.
    /// Returns the number of saturated activations.
    fn forward(&mut self, x: Tensor<'_>, rng: &mut Rng, count: bool) -> u32 {
        let mut saturations = 0u32;
        let n = self.desc.layers.len();
        let mode = self.desc.train.rounding.activations;
        for k in 0..n {
            let l = *self.layer(k);
            let g = self.plan.shapes.layers[k];
            let s = self.plan.layers[k];
            let in_slot = if k == 0 {
                Slot::NONE
            } else {
                self.plan.output_slot(k - 1)
            };
            let in_fmt = if k == 0 { x.fmt } else { self.out_fmt(k - 1) };
            let out_fmt = self.out_fmt(k);
            let out_slot = self.plan.output_slot(k);
            let f = self.flash[k];
            let [w, b, xin, y] = carve(self.arena, [s.weight, s.bias, in_slot, out_slot]);
            let w = param_view(w, s.weight, l.weight.value, f.weight);
            let b = param_view(b, s.bias, l.bias.value, f.bias);
            let xin = if k == 0 {
                x
            } else {
                view_mut_ro(xin, in_fmt, g.input.size())
            };
            let mut y = view_mut(y, out_fmt, g.output.size());
            let mut tally = Tally::default();
            layer::forward(
                l.kind,
                &g,
                Params { w, b },
                xin,
                &mut y,
                &mut Rounder { mode, rng },
                &mut tally,
            );
            saturations = saturations.saturating_add(tally.saturations);
            if count {
                self.stats[k].out.merge(&tally);
            }
        }
        saturations
    }

    /// Loss of the last output against `target`; with `grad`, writes the loss gradient, and
    /// with `count` too, counts it in the statistics.
    fn loss(
        &mut self,
        target: Target<'_>,
        rng: &mut Rng,
        grad: bool,
        count: bool,
    ) -> (LossValue, Option<u16>) {
        let last = self.desc.layers.len() - 1;
        let n = self.plan.shapes.output.size() as usize;
        let out_fmt = self.out_fmt(last);
        let g_fmt = self.grad_fmt(last);
        let mode = self.desc.train.rounding.gradients;
        let [y, gy] = carve(
            self.arena,
            [
                self.plan.output_slot(last),
                if grad {
                    self.plan.grad_slot(last)
                } else {
                    Slot::NONE
                },
            ],
        );
        let y = view_mut_ro(y, out_fmt, n as u32);
        let mut gy = view_mut(gy, g_fmt, n as u32);
        let gy = if grad { Some(&mut gy) } else { None };
        let mut tally = Tally::default();
        let mut r = Rounder { mode, rng };
        let out = match target {
            Target::Values(t) => (loss::squared_error(y, t, n, gy, &mut r, &mut tally), None),
            // Without the `cross-entropy` feature the plan rejects the loss, so a class target
            // never gets here (`check_sample` pairs it with that loss).
            Target::Class(_) if !cfg!(feature = "cross-entropy") => (LossValue::default(), None),
            Target::Class(c) => {
                let p = loss::argmax(y, n) as u16;
                (
                    loss::softmax_cross_entropy(y, c as usize, n, gy, &mut r, &mut tally),
                    Some(p),
                )
            }
        };
        if grad && count {
            self.stats[last].grad.merge(&tally);
        }
        out
    }

    /// Backward through layer `k`; with `count`, the writes are counted in the statistics.
    /// Out of line: inlined, its locals would sit in the step's frame under the forward pass
    /// and the update as well (measured on the M3: 688 B of frame for the step).
    #[inline(never)]
    fn backward(&mut self, k: usize, x: Tensor<'_>, rng: &mut Rng, count: bool) {
        let l = *self.layer(k);
        let g = self.plan.shapes.layers[k];
        let s = self.plan.layers[k];
        let first = self.plan.first_trainable;
        let f = self.flash[k];
        let reads_x = reads_input(&self.desc.layers, k, first);
        let in_slot = if k == 0 || !reads_x {
            Slot::NONE
        } else {
            self.plan.output_slot(k - 1)
        };
        let in_fmt = if k == 0 { x.fmt } else { self.out_fmt(k - 1) };
        let out_fmt = self.out_fmt(k);
        let gy_fmt = self.grad_fmt(k);
        let gx_fmt = if k > 0 { self.grad_fmt(k - 1) } else { gy_fmt };
        let gx_slot = if k > first {
            self.plan.grad_slot(k - 1)
        } else {
            Slot::NONE
        };
        let acc_w_fmt = fmt_frac(l.weight.accum, self.live[k].accum_weight);
        let acc_b_fmt = fmt_frac(l.bias.accum, self.live[k].accum_bias);
        let [w, b, xin, y, gy, gx, aw, ab] = carve(
            self.arena,
            [
                s.weight,
                s.bias,
                in_slot,
                s.kept,
                self.plan.grad_slot(k),
                gx_slot,
                s.accum_weight,
                s.accum_bias,
            ],
        );
        let w = param_view(w, s.weight, l.weight.value, f.weight);
        let b = param_view(b, s.bias, l.bias.value, f.bias);
        let xin = if k == 0 {
            x
        } else {
            view_mut_ro(xin, in_fmt, g.input.size())
        };
        let y = view_mut_ro(y, out_fmt, s.kept.elems);
        let gy = view_mut_ro(gy, gy_fmt, g.output.size());
        let mut gx = view_mut(gx, gx_fmt, g.input.size());
        let mut aw = view_mut(aw, acc_w_fmt, s.accum_weight.elems);
        let mut ab = view_mut(ab, acc_b_fmt, s.accum_bias.elems);
        let out = BackOut {
            gx: if gx_slot.is_some() {
                Some(&mut gx)
            } else {
                None
            },
            acc_w: if s.accum_weight.is_some() {
                Some(&mut aw)
            } else {
                None
            },
            acc_b: if s.accum_bias.is_some() {
                Some(&mut ab)
            } else {
                None
            },
        };
        let mut t = BackTally::default();
        let mode = self.desc.train.rounding.gradients;
        layer::backward(
            l.kind,
            &g,
            Params { w, b },
            xin,
            y,
            gy,
            out,
            &mut Rounder { mode, rng },
            &mut t,
        );
        if !count {
            return;
        }
        if k > 0 {
            self.stats[k - 1].grad.merge(&t.gx);
        }
        self.stats[k].accum_weight.merge(&t.acc_w);
        self.stats[k].accum_bias.merge(&t.acc_b);
    }

    fn apply_update(&mut self) {
        let train = self.desc.train;
        let mut cfg = sgd::UpdateConfig {
            lr: train.lr,
            momentum: train.momentum,
            decay: train.weight_decay,
            clip: train.clip,
            samples: self.in_batch.max(1) as u32,
            mode: train.rounding.updates,
        };
        let with_momentum = MOMENTUM && !train.momentum.is_zero();
        for k in 0..self.desc.layers.len() {
            let l = *self.layer(k);
            let s = self.plan.layers[k];
            let [w, b, mw, mb, aw, ab, vw, vb] = carve(
                self.arena,
                [
                    s.weight,
                    s.bias,
                    s.master_weight,
                    s.master_bias,
                    s.accum_weight,
                    s.accum_bias,
                    s.momentum_weight,
                    s.momentum_bias,
                ],
            );
            let parts = [
                (
                    w,
                    mw,
                    aw,
                    vw,
                    s.weight,
                    l.weight,
                    self.live[k].accum_weight,
                    true,
                ),
                (
                    b,
                    mb,
                    ab,
                    vb,
                    s.bias,
                    l.bias,
                    self.live[k].accum_bias,
                    false,
                ),
            ];
            for (value, master, accum, mom, slot, pf, acc_frac, is_weight) in parts {
                if !slot.is_some() {
                    continue;
                }
                let acc_fmt = fmt_frac(pf.accum, acc_frac);
                let mut value = view_mut(value, pf.value, slot.elems);
                let mut master = pf
                    .master
                    .filter(|_| MASTER_WEIGHTS)
                    .map(|m| view_mut(master, m, slot.elems));
                let mut accum = view_mut(accum, acc_fmt, slot.elems);
                let mut mom = view_mut(mom, acc_fmt, slot.elems);
                cfg.samples = self.in_batch.max(1) as u32;
                let st = &mut self.stats[k];
                let (tally, acc_tally) = if is_weight {
                    (&mut st.weight, &mut st.accum_weight)
                } else {
                    (&mut st.bias, &mut st.accum_bias)
                };
                sgd::update(
                    sgd::UpdateTensors {
                        value: &mut value,
                        master: master.as_mut(),
                        accum: &mut accum,
                        momentum: if with_momentum { Some(&mut mom) } else { None },
                    },
                    &cfg,
                    &mut self.rng,
                    tally,
                    acc_tally,
                );
            }
        }
        self.in_batch = 0;
        self.updates = self.updates.saturating_add(1);
        if let Some(rule) = train.dynamic.filter(|_| DYNAMIC) {
            if self.updates.is_multiple_of(rule.interval as u32) {
                self.adjust_fracs(rule);
            }
        }
    }

    /// Applies the overflow-rate rule to every moving tensor, then restarts the interval.
    fn adjust_fracs(&mut self, rule: crate::model::DynamicRule) {
        for k in 0..self.desc.layers.len() {
            let now = self.stats[k];
            let [m_out, m_grad, m_acc_w, m_acc_b] = self.marks[k];
            let l = *self.layer(k);
            let live = &mut self.live[k];
            live.out = dynamic::adjust(live.out, &now.out, &m_out, rule);
            live.grad = dynamic::adjust(live.grad, &now.grad, &m_grad, rule);
            let s = self.plan.layers[k];
            let old = (live.accum_weight, live.accum_bias);
            if s.accum_weight.is_some() {
                live.accum_weight = dynamic::adjust(old.0, &now.accum_weight, &m_acc_w, rule);
            }
            if s.accum_bias.is_some() {
                live.accum_bias = dynamic::adjust(old.1, &now.accum_bias, &m_acc_b, rule);
            }
            let new = (live.accum_weight, live.accum_bias);
            // Momentum lives in the accumulator format: rescale it with the accumulator.
            let [vw, vb] = carve(self.arena, [s.momentum_weight, s.momentum_bias]);
            let mut sats = [0u32; 2];
            for (j, (buf, slot, word, from, to)) in [
                (vw, s.momentum_weight, l.weight.accum, old.0, new.0),
                (vb, s.momentum_bias, l.bias.accum, old.1, new.1),
            ]
            .into_iter()
            .enumerate()
            {
                if from == to || !slot.is_some() {
                    continue;
                }
                let mut m = view_mut(buf, fmt_frac(word, to), slot.elems);
                for i in 0..slot.elems as usize {
                    let (v, s1) = rescale(
                        m.raw.at(i) as i64,
                        from as u32,
                        to as u32,
                        self.desc.train.rounding.updates,
                        &mut self.rng,
                    );
                    let (v, s2) = word.word.saturate(v);
                    m.raw.put(i, v);
                    sats[j] += (s1 || s2) as u32;
                }
            }
            // Momentum clipped by a finer format is counted with its accumulator.
            let st = &mut self.stats[k];
            for (t, n) in [
                (&mut st.accum_weight, sats[0]),
                (&mut st.accum_bias, sats[1]),
            ] {
                t.saturations = t.saturations.saturating_add(n);
                t.high = t.high.saturating_add(n);
            }
        }
        self.mark_interval();
    }

    /// Starts a new dynamic-fixed-point interval from the current tallies.
    fn mark_interval(&mut self) {
        for (m, s) in self.marks.iter_mut().zip(self.stats.iter()) {
            *m = s.moving();
        }
    }
}

fn check_param(
    k: usize,
    tensor: ParamTensor,
    raw: Raw<'_>,
    fmt: QFormat,
    elems: u32,
) -> Result<(), Error> {
    if raw.word() != fmt.word || raw.len() != elems as usize {
        let found = if raw.word() == fmt.word {
            raw.len() as u32
        } else {
            0
        };
        return Err(Error::Params {
            layer: k as u8,
            tensor,
            expected: elems,
            found,
        });
    }
    Ok(())
}

fn raw_view(arena: &[u32], slot: Slot, word: crate::num::Word) -> Raw<'_> {
    let words = arena
        .get(slot.first_word()..slot.first_word() + slot.words())
        .unwrap_or(&[]);
    let bytes: &[u8] = bytemuck::cast_slice(words);
    let bytes = bytes
        .get(..slot.elems as usize * word.bytes())
        .unwrap_or(&[]);
    match word {
        crate::num::Word::I8 => Raw::I8(bytemuck::cast_slice(bytes)),
        crate::num::Word::I16 => Raw::I16(bytemuck::try_cast_slice(bytes).unwrap_or(&[])),
        crate::num::Word::I32 => Raw::I32(bytemuck::try_cast_slice(bytes).unwrap_or(&[])),
    }
}

/// A read-only tensor over a carved piece.
fn view_mut_ro(words: &mut [u32], fmt: QFormat, elems: u32) -> Tensor<'_> {
    let words: &[u32] = words;
    raw_tensor(words, fmt, elems)
}

fn raw_tensor(words: &[u32], fmt: QFormat, elems: u32) -> Tensor<'_> {
    let slot = Slot {
        offset: 0,
        bytes: (words.len() * 4) as u32,
        elems,
        word: fmt.word,
    };
    Tensor {
        raw: raw_view(words, slot, fmt.word),
        fmt,
    }
}

/// The parameters a layer reads: its arena copy if it trains, else the initial tensor.
fn param_view<'x>(words: &'x mut [u32], slot: Slot, fmt: QFormat, init: Raw<'x>) -> Tensor<'x> {
    if slot.is_some() {
        view_mut_ro(words, fmt, slot.elems)
    } else {
        Tensor { raw: init, fmt }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{LayerKind, ParamFormats, Shape, TrainDesc, TrainMode};
    use crate::num::{QScalar, Word};

    /// The first copy of the weights into a master too narrow for them saturates, and is
    /// counted in the weight tensor's statistics (values from the test itself: 20.0 in Q6.9
    /// against a Q3.28 master that holds at most 8).
    #[test]
    fn first_copy_into_a_narrow_master_is_counted() {
        let value = QFormat::new_unchecked(Word::I16, 9);
        let master = QFormat::new_unchecked(Word::I32, 28);
        let p = ParamFormats {
            master: Some(master),
            ..ParamFormats::plain(value, 24)
        };
        let dense = LayerDesc {
            kind: LayerKind::Dense { units: 2 },
            mode: TrainMode::Full,
            weight: p,
            bias: p,
            out: value,
            grad: value,
        };
        let t = TrainDesc::sgd(QScalar { raw: 1, frac: 8 });
        let desc =
            ModelDesc::new(Shape::vector(1), value, &[dense], Loss::SquaredError, t).unwrap();
        let plan = Plan::of(&desc).unwrap();
        let mut arena = std::vec![0u32; plan.ram_words()];
        let init = [LayerParams {
            weight: Raw::I16(&[20 * 512, 512]),
            bias: Raw::I16(&[0, 256]),
        }];
        let tr = Trainer::new(&desc, &plan, &mut arena, &init).unwrap();
        let s = tr.stats(0).unwrap();
        assert_eq!((s.weight.saturations, s.bias.saturations), (1, 0));
    }

    /// The smallest build (no optional layer kinds) trains: a 2-8-1 dense, ReLU, squared-error
    /// model fits y = x0 − x1 on four samples with SGD. `cargo xtask test` also runs this with
    /// `--no-default-features`, the configuration of the lean firmware (boards/lean) whose
    /// code size the README reports.
    #[test]
    fn built_dense_relu_squared_error_trains() {
        let act = QFormat::new_unchecked(Word::I16, 10);
        let p = ParamFormats::plain(QFormat::new_unchecked(Word::I16, 12), 24);
        let dense = |units| LayerDesc {
            kind: LayerKind::Dense { units },
            mode: TrainMode::Full,
            weight: p,
            bias: p,
            out: act,
            grad: act,
        };
        let layers = [
            dense(8),
            LayerDesc::simple(LayerKind::Relu, act, act),
            dense(1),
        ];
        let t = TrainDesc::sgd(QScalar { raw: 13, frac: 8 });
        let desc = ModelDesc::new(Shape::vector(2), act, &layers, Loss::SquaredError, t).unwrap();
        let plan = Plan::of(&desc).unwrap();
        let mut arena = std::vec![0u32; plan.ram_words()];
        // Fixed, varied starting weights (Q3.12): positive and negative so that some hidden
        // units are active for every sample.
        let w1: std::vec::Vec<i16> = (0..16).map(|i| ((i * 997) % 3001 - 1500) as i16).collect();
        let b1 = [400i16; 8];
        let w2: std::vec::Vec<i16> = (0..8).map(|i| ((i * 613) % 2001 - 1000) as i16).collect();
        let b2 = [0i16];
        let init = [
            LayerParams {
                weight: Raw::I16(&w1),
                bias: Raw::I16(&b1),
            },
            LayerParams::NONE,
            LayerParams {
                weight: Raw::I16(&w2),
                bias: Raw::I16(&b2),
            },
        ];
        let mut tr = Trainer::new(&desc, &plan, &mut arena, &init).unwrap();
        // Inputs in Q5.10 (1024 = 1.0); targets x0 − x1.
        let samples: [([i16; 2], i16); 4] = [
            ([1024, 0], 1024),
            ([0, 1024], -1024),
            ([512, 512], 0),
            ([1024, 512], 512),
        ];
        let epoch_loss = |tr: &mut Trainer<'_>, train: bool| {
            let mut sum = 0i64;
            for (x, y) in &samples {
                let x = Tensor {
                    raw: Raw::I16(x),
                    fmt: act,
                };
                let y = [*y];
                let target = Target::Values(Tensor {
                    raw: Raw::I16(&y),
                    fmt: act,
                });
                let out = if train {
                    tr.step(x, target)
                } else {
                    tr.evaluate(x, target)
                };
                sum += out.unwrap().loss.0;
            }
            sum
        };
        let before = epoch_loss(&mut tr, false);
        for _ in 0..200 {
            epoch_loss(&mut tr, true);
        }
        let after = epoch_loss(&mut tr, false);
        assert!(before > 0, "the start must be off the target");
        assert!(
            after * 20 < before,
            "loss only fell from {before} to {after}"
        );

        // The compile-time path (a checked plan, the description's run-time checks skipped)
        // trains to the same bits.
        let planned =
            ModelDesc::new_planned(Shape::vector(2), act, &layers, Loss::SquaredError, t, &plan)
                .unwrap();
        assert_eq!(planned, desc);
        let mut arena2 = std::vec![0u32; plan.ram_words()];
        let mut tr2 = Trainer::new_planned(&planned, &plan, &mut arena2, &init).unwrap();
        for _ in 0..200 {
            epoch_loss(&mut tr2, true);
        }
        assert_eq!(epoch_loss(&mut tr2, false), after);
        for k in [0, 2] {
            let (a, b) = (tr.params(k).unwrap(), tr2.params(k).unwrap());
            assert_eq!(a.weight, b.weight);
            assert_eq!(a.bias, b.bias);
        }
        // A description that is not the plan's is refused.
        let mut other = t;
        other.lr = QScalar { raw: 14, frac: 8 };
        let r = ModelDesc::new_planned(
            Shape::vector(2),
            act,
            &layers,
            Loss::SquaredError,
            other,
            &plan,
        );
        assert_eq!(r.err(), Some(Error::PlanMismatch));
        let wrong =
            ModelDesc::new(Shape::vector(2), act, &layers, Loss::SquaredError, other).unwrap();
        let mut arena3 = std::vec![0u32; plan.ram_words()];
        assert_eq!(
            Trainer::new_planned(&wrong, &plan, &mut arena3, &init).err(),
            Some(Error::PlanMismatch)
        );
        let bad_input = QFormat::new_unchecked(Word::I16, 40);
        let r = ModelDesc::new_planned(
            Shape::vector(2),
            bad_input,
            &layers,
            Loss::SquaredError,
            t,
            &plan,
        );
        assert_eq!(r.err(), Some(Error::InvalidFormat));
    }

    /// Dynamic fixed point settles instead of swinging: an output that fills more than half
    /// its range keeps its format, and a small one gains bits only while doubling it would
    /// not saturate. A rule on the saturation rate alone would move the first between 12 and
    /// 13 fraction bits on every interval.
    #[test]
    fn dynamic_formats_settle() {
        let settle = |bias: i16| -> std::vec::Vec<u8> {
            let input = QFormat::new_unchecked(Word::I16, 10);
            let p = ParamFormats::plain(QFormat::new_unchecked(Word::I16, 12), 24);
            let layers = [LayerDesc {
                kind: LayerKind::Dense { units: 1 },
                mode: TrainMode::Full,
                weight: p,
                bias: p,
                out: QFormat::new_unchecked(Word::I16, 12),
                grad: QFormat::new_unchecked(Word::I16, 12),
            }];
            // Learning rate zero: the output stays `bias` while the formats move.
            let mut t = TrainDesc::sgd(QScalar::ZERO);
            t.dynamic = Some(crate::model::DynamicRule {
                max_rate_ppm: 100,
                interval: 1,
            });
            let desc =
                ModelDesc::new(Shape::vector(1), input, &layers, Loss::SquaredError, t).unwrap();
            let plan = Plan::of(&desc).unwrap();
            let mut arena = std::vec![0u32; plan.ram_words()];
            let (w, b) = ([0i16], [bias]);
            let init = [LayerParams {
                weight: Raw::I16(&w),
                bias: Raw::I16(&b),
            }];
            let mut tr = Trainer::new(&desc, &plan, &mut arena, &init).unwrap();
            let (x, y) = ([1024i16], [0i16]);
            let mut fracs = std::vec::Vec::new();
            for _ in 0..30 {
                tr.step(
                    Tensor {
                        raw: Raw::I16(&x),
                        fmt: input,
                    },
                    Target::Values(Tensor {
                        raw: Raw::I16(&y),
                        fmt: input,
                    }),
                )
                .unwrap();
                fracs.push(tr.live_fracs(0).unwrap().out);
            }
            fracs
        };
        // 5.0 in Q3.12 is 20 480, in the outer half of i16 (≥ 2^14): 13 bits would saturate.
        let big = settle(5 << 12);
        assert!(big.iter().all(|&f| f == 12), "{big:?}");
        // 0.3 (1 229 in Q3.12): 0.3 · 2^16 = 19 661 < 2^15 fits, 0.3 · 2^17 does not, and
        // from 16 bits on the value is in the outer half, so the format stops at 16.
        let small = settle(1229);
        assert_eq!(small[..4], [13, 14, 15, 16], "{small:?}");
        assert!(small[4..].iter().all(|&f| f == 16), "{small:?}");
    }

    #[test]
    fn outside_formats_are_checked_not_trusted() {
        let act = QFormat::new_unchecked(Word::I16, 8);
        let p = ParamFormats::plain(QFormat::new_unchecked(Word::I16, 12), 24);
        let layers = [
            LayerDesc::simple(LayerKind::ClippedRelu { ceiling: 6 }, act, act),
            LayerDesc {
                kind: LayerKind::Dense { units: 1 },
                mode: TrainMode::Full,
                weight: p,
                bias: p,
                out: act,
                grad: act,
            },
        ];
        let mut t = TrainDesc::sgd(QScalar { raw: 1, frac: 8 });
        t.batch = 2;
        let desc = ModelDesc::new(Shape::vector(2), act, &layers, Loss::SquaredError, t).unwrap();
        let plan = Plan::of(&desc).unwrap();
        let mut arena = std::vec![0u32; plan.ram_words()];
        let (w, b) = ([100i16, 200], [0i16]);
        let init = [
            LayerParams::NONE,
            LayerParams {
                weight: Raw::I16(&w),
                bias: Raw::I16(&b),
            },
        ];
        let mut tr = Trainer::new(&desc, &plan, &mut arena, &init).unwrap();
        let x = [256i16, 512];
        let y = [100i16];
        let target = Target::Values(Tensor {
            raw: Raw::I16(&y),
            fmt: act,
        });
        // 64 fraction bits would shift past 63; a word that is not the storage's is a lie.
        for bad in [
            QFormat {
                word: Word::I16,
                frac: 64,
            },
            QFormat {
                word: Word::I8,
                frac: 4,
            },
        ] {
            assert_eq!(
                tr.step(
                    Tensor {
                        raw: Raw::I16(&x),
                        fmt: bad
                    },
                    target
                )
                .err(),
                Some(Error::InvalidFormat)
            );
            assert_eq!(
                tr.step(
                    Tensor {
                        raw: Raw::I16(&x),
                        fmt: act
                    },
                    Target::Values(Tensor {
                        raw: Raw::I16(&y),
                        fmt: bad
                    })
                )
                .err(),
                Some(Error::InvalidFormat)
            );
        }
        // One sample of a batch of two is pending: no checkpoint until it is flushed.
        tr.step(
            Tensor {
                raw: Raw::I16(&x),
                fmt: act,
            },
            target,
        )
        .unwrap();
        let mut buf = [0u8; 1024];
        assert_eq!(
            tr.write_checkpoint(&[], &mut buf).err(),
            Some(Error::InvalidTraining)
        );
        assert!(tr.flush());
        assert!(tr.write_checkpoint(&[], &mut buf).is_ok());
    }
}
