//! Checkpoints of a [`Trainer`]: what training changed, written as a [`crate::blob`] and read
//! back.
//!
//! A checkpoint carries the description, the trained tensors (values, master copies,
//! momentum) and the training state (steps, updates, generator state, current fraction bits).
//! Frozen tensors are not in it: they are the factory model's and stay in flash. Tensors are
//! written straight from the arena as little-endian bytes, without a copy, which is why the
//! crate refuses to build for big-endian targets.

use heapless::Vec;

use super::{LiveFracs, Trainer};
use crate::blob::{
    self, BlobBody, BlobError, BlobKind, CheckedBlob, Scaling, TensorBlob, TensorRole, TrainState,
};
use crate::error::Error;
use crate::model::MAX_LAYERS;
use crate::num::{QFormat, Rng};
use crate::plan::Slot;

#[cfg(target_endian = "big")]
compile_error!("hone-core writes tensors as little-endian bytes straight from memory");

/// `src` into `dst`, word for word (the lengths are the caller's to match).
fn copy_words(dst: &mut [u32], src: &[u32]) {
    for (d, s) in dst.iter_mut().zip(src) {
        *d = *s;
    }
}

fn slot_bytes(arena: &[u32], slot: Slot, fmt: QFormat) -> &[u8] {
    let words = arena
        .get(slot.first_word()..slot.first_word() + slot.words())
        .unwrap_or(&[]);
    let bytes: &[u8] = bytemuck::cast_slice(words);
    bytes
        .get(..slot.elems as usize * fmt.word.bytes())
        .unwrap_or(&[])
}

impl Trainer<'_> {
    /// The training state as carried by a checkpoint.
    pub fn train_state(&self) -> TrainState {
        let mut fracs = [[0u8; 4]; MAX_LAYERS];
        for (f, l) in fracs.iter_mut().zip(self.live.iter()) {
            *f = l.bytes();
        }
        let mut window = [[0u32; 12]; MAX_LAYERS];
        for (k, w) in window.iter_mut().enumerate().take(self.stats.len()) {
            *w = self.window(k);
        }
        TrainState {
            steps: self.steps,
            updates: self.updates,
            rng: self.rng.state(),
            fracs,
            window,
        }
    }

    /// The counts of layer `k`'s current interval: values, saturations and outer-half counts
    /// of its four moving tensors since the last mark. Without dynamic fixed point there are
    /// no interval marks: the interval is the whole run, as if its marks were zero.
    fn window(&self, k: usize) -> [u32; 12] {
        let no_marks = [crate::kernel::Tally::default(); 4];
        let mark = self.marks.get(k).unwrap_or(&no_marks);
        let mut w = [0u32; 12];
        if let Some(now) = self.stats.get(k) {
            for (i, (n, m)) in now.moving().iter().zip(mark.iter()).enumerate() {
                w[i] = n.values.saturating_sub(m.values);
                w[4 + i] = n.saturations.saturating_sub(m.saturations);
                w[8 + i] = n.high.saturating_sub(m.high);
            }
        }
        w
    }

    /// Keeps the training state ([`Trainer::train_state`]: steps, updates, the generator,
    /// the live fraction bits and the interval counts) in the arena ([`Plan::state`](crate::plan::Plan::state)),
    /// for [`Trainer::revert_state`]. The guarded session saves it before training, so a
    /// rejected session goes back to it without a copy of the state on the stack.
    pub fn save_state(&mut self) {
        let head = crate::plan::SAVED_HEAD_WORDS as usize;
        let per = crate::plan::SAVED_WORDS_PER_LAYER as usize;
        let rng = self.rng.state();
        let mut words = [self.steps, self.updates, rng[0], rng[1], rng[2], rng[3]];
        copy_words(&mut self.saved[..head], &words);
        for k in 0..self.live.len() {
            let w = self.window(k);
            let at = head + k * per;
            words[0] = u32::from_le_bytes(self.live[k].bytes());
            copy_words(&mut self.saved[at..at + 1], &words[..1]);
            copy_words(&mut self.saved[at + 1..at + per], &w);
        }
    }

    /// Puts back the training state [`Trainer::save_state`] kept, as
    /// [`Trainer::set_train_state`] does with a checkpoint's: statistics restart from the saved
    /// interval counts, and the interval marks from zero. Before any `save_state` it does
    /// nothing. The weights, accumulators and a partial batch stay as they are.
    pub fn revert_state(&mut self) {
        let head = crate::plan::SAVED_HEAD_WORDS as usize;
        let per = crate::plan::SAVED_WORDS_PER_LAYER as usize;
        let s = &*self.saved;
        // A saved generator state came from a generator, so it is not the all-zero state that
        // a new trainer's empty save holds.
        let Some(rng) = Rng::from_state([s[2], s[3], s[4], s[5]]) else {
            return;
        };
        self.rng = rng;
        self.steps = s[0];
        self.updates = s[1];
        for k in 0..self.live.len() {
            let at = head + k * per;
            let mut w = [0u32; 12];
            w.copy_from_slice(&self.saved[at + 1..at + per]);
            self.live[k] = LiveFracs::from_bytes(self.saved[at].to_le_bytes());
            self.restart_stats(k, &w);
        }
    }

    /// Layer `k`'s statistics restart from an interval's counts (`window`), and its interval
    /// marks (with dynamic fixed point) from zero.
    fn restart_stats(&mut self, k: usize, w: &[u32; 12]) {
        let mut s = super::LayerStats::default();
        for (i, t) in [
            &mut s.out,
            &mut s.grad,
            &mut s.accum_weight,
            &mut s.accum_bias,
        ]
        .into_iter()
        .enumerate()
        {
            t.values = w[i];
            t.saturations = w[4 + i];
            t.high = w[8 + i];
        }
        if let Some(st) = self.stats.get_mut(k) {
            *st = s;
        }
        // Interval marks exist only with dynamic fixed point.
        if let Some(mark) = self.marks.get_mut(k) {
            *mark = [crate::kernel::Tally::default(); 4];
        }
    }

    /// The checkpoint body: description, scaling, state and every trained tensor, borrowing
    /// the tensors from the arena.
    ///
    /// # Errors
    /// [`Error::InvalidTraining`] while samples of a batch are pending;
    /// [`BlobError::Scaling`] if `scaling` is too long.
    pub fn checkpoint_body<'s>(
        &self,
        scaling: impl Into<Scaling<'s>>,
    ) -> Result<BlobBody<'_>, Error> {
        if self.in_batch != 0 {
            return Err(Error::InvalidTraining);
        }
        let mut tensors: Vec<TensorBlob<'_>, { blob::MAX_TENSORS }> = Vec::new();
        for t in self.checkpoint_tensors() {
            tensors.push(t).map_err(|_| BlobError::TooManyTensors)?;
        }
        let mut entries = Vec::new();
        for e in scaling.into().iter() {
            entries.push(e).map_err(|_| BlobError::Scaling)?;
        }
        Ok(BlobBody {
            kind: BlobKind::Checkpoint,
            desc: self.desc.clone(),
            scaling: entries,
            state: Some(self.train_state()),
            tensors,
        })
    }

    /// The trained tensors a checkpoint carries, in blob order, borrowed from the arena.
    fn checkpoint_tensors(&self) -> impl Iterator<Item = TensorBlob<'_>> + Clone + '_ {
        self.desc.layers.iter().enumerate().flat_map(move |(k, l)| {
            let s = &self.plan.layers[k];
            let live = self.live[k];
            let acc_w = QFormat {
                word: l.weight.accum.word,
                frac: live.accum_weight,
            };
            let acc_b = QFormat {
                word: l.bias.accum.word,
                frac: live.accum_bias,
            };
            [
                (TensorRole::Weight, s.weight, Some(l.weight.value)),
                (TensorRole::Bias, s.bias, Some(l.bias.value)),
                (TensorRole::MasterWeight, s.master_weight, l.weight.master),
                (TensorRole::MasterBias, s.master_bias, l.bias.master),
                (TensorRole::MomentumWeight, s.momentum_weight, Some(acc_w)),
                (TensorRole::MomentumBias, s.momentum_bias, Some(acc_b)),
            ]
            .into_iter()
            .filter_map(move |(role, slot, fmt)| {
                let fmt = fmt?;
                slot.is_some().then(|| TensorBlob {
                    layer: k as u8,
                    role,
                    format: fmt,
                    elems: slot.elems,
                    data: slot_bytes(self.arena, slot, fmt),
                })
            })
        })
    }

    /// Writes a checkpoint blob into `out`; returns its length.
    ///
    /// # Errors
    /// [`Error::InvalidTraining`] while samples of a batch are pending ([`Trainer::flush`]
    /// first: a checkpoint carries no gradient accumulators); [`BlobError::BufferTooSmall`];
    /// [`BlobError::Scaling`] if `scaling` is too long.
    pub fn write_checkpoint<'s>(
        &self,
        scaling: impl Into<Scaling<'s>>,
        out: &mut [u8],
    ) -> Result<usize, Error> {
        // A checkpoint carries no gradient accumulators: samples of a partial batch would be
        // lost on restore, so refuse rather than write a checkpoint that does not resume.
        if self.in_batch != 0 {
            return Err(Error::InvalidTraining);
        }
        // Streamed: no list of tensors is built, which keeps a device's stack small.
        let tensors = self.checkpoint_tensors();
        let count = tensors.clone().count();
        let state = self.train_state();
        blob::encode_parts(
            BlobKind::Checkpoint,
            self.desc,
            scaling,
            Some(&state),
            count,
            tensors,
            out,
        )
    }

    /// Restores the trainer from a validated blob of the same model description.
    ///
    /// A checkpoint restores the trained tensors and the training state. A factory model
    /// restores the trainable values (the frozen ones stay those given at construction),
    /// recomputes master copies from them, clears momentum and keeps the state.
    ///
    /// # Errors
    /// [`Error::PlanMismatch`] if the blob describes another model; [`BlobError::TensorShape`]
    /// if a tensor does not fit its buffer. On error the trainer may hold a partial restore:
    /// reload the last good blob.
    pub fn restore(&mut self, blob: &CheckedBlob<'_>) -> Result<(), Error> {
        if blob.desc() != self.desc {
            return Err(Error::PlanMismatch);
        }
        if blob.kind() == BlobKind::Model {
            return self.load_model_blob(blob);
        }
        let state = blob.state().ok_or(BlobError::StateMismatch)?;
        for t in blob.tensors() {
            let k = t.layer as usize;
            let s = self.plan.layers[k];
            let slot = match t.role {
                TensorRole::Weight => s.weight,
                TensorRole::Bias => s.bias,
                TensorRole::MasterWeight => s.master_weight,
                TensorRole::MasterBias => s.master_bias,
                TensorRole::MomentumWeight => s.momentum_weight,
                TensorRole::MomentumBias => s.momentum_bias,
            };
            self.copy_into(slot, &t)?;
        }
        self.set_train_state(&state)?;
        self.clear_accumulators();
        Ok(())
    }

    /// Puts back a training state (as [`Trainer::train_state`] gave it): steps, updates, the
    /// generator, the current fraction bits, and the counts of the current dynamic fixed-point
    /// interval. Statistics restart from those counts; the history before them is not kept.
    ///
    /// # Errors
    /// [`BlobError::StateMismatch`] for the all-zero generator state, or fraction bits the
    /// description rules out (other than its own where they cannot move: every tensor without
    /// dynamic fixed point, and the unused layer slots; above [`crate::num::MAX_FRAC`]);
    /// nothing is changed then.
    pub fn set_train_state(&mut self, state: &TrainState) -> Result<(), Error> {
        let rng = Rng::from_state(state.rng).ok_or(BlobError::StateMismatch)?;
        if !crate::blob::state_fracs_fit(self.desc, &state.fracs) {
            return Err(BlobError::StateMismatch.into());
        }
        self.steps = state.steps;
        self.updates = state.updates;
        self.rng = rng;
        for (k, f) in state.fracs.iter().enumerate().take(self.live.len()) {
            self.live[k] = LiveFracs::from_bytes(*f);
            self.restart_stats(k, &state.window[k]);
        }
        Ok(())
    }

    fn load_model_blob(&mut self, blob: &CheckedBlob<'_>) -> Result<(), Error> {
        // Values first (trainable ones only), then masters re-derived and momentum cleared
        // through `load`, which reads the values back from the arena.
        for t in blob.tensors() {
            let s = self.plan.layers[t.layer as usize];
            let slot = match t.role {
                TensorRole::Weight => s.weight,
                TensorRole::Bias => s.bias,
                _ => continue,
            };
            if slot.is_some() {
                self.copy_into(slot, &t)?;
            }
        }
        self.reinit_from_values();
        // A new interval of dynamic fixed point starts from the factory weights.
        self.mark_interval();
        Ok(())
    }

    fn copy_into(&mut self, slot: Slot, t: &TensorBlob<'_>) -> Result<(), Error> {
        if !slot.is_some() || slot.elems != t.elems {
            return Err(BlobError::TensorShape {
                layer: t.layer,
                role: t.role,
            }
            .into());
        }
        let words = self
            .arena
            .get_mut(slot.first_word()..slot.first_word() + slot.words())
            .unwrap_or(&mut []);
        let mut raw = crate::num::RawMut::from_words(words, t.format.word, slot.elems as usize)
            .ok_or(BlobError::TensorShape {
                layer: t.layer,
                role: t.role,
            })?;
        blob::copy_tensor(t, &mut raw)
    }
}

#[cfg(test)]
mod tests {
    use crate::blob::{self, BlobKind};
    use crate::layer::loss::Target;
    use crate::layer::Tensor;
    use crate::model::{
        DynamicRule, LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc,
        TrainMode,
    };
    use crate::num::{QFormat, QScalar, Raw, Rounding, Word};
    use crate::plan::Plan;
    use crate::train::{LayerParams, Trainer};

    fn desc() -> ModelDesc {
        let act = QFormat::new(Word::I16, 11).unwrap();
        let grad = QFormat::new(Word::I16, 13).unwrap();
        let mut p = ParamFormats::plain(QFormat::new(Word::I8, 6).unwrap(), 24);
        p.master = Some(QFormat::new(Word::I16, 13).unwrap());
        let dense = |units, mode| LayerDesc {
            kind: LayerKind::Dense { units },
            mode,
            weight: p,
            bias: p,
            out: act,
            grad,
        };
        let layers = [
            dense(6, TrainMode::Frozen),
            LayerDesc::simple(LayerKind::Relu, act, grad),
            dense(2, TrainMode::Full),
        ];
        let mut t = TrainDesc::sgd(QScalar::from_f64(0.05, 16).unwrap());
        t.momentum = QScalar::from_f64(0.5, 15).unwrap();
        t.batch = 2;
        t.rounding.updates = Rounding::Stochastic;
        t.dynamic = Some(DynamicRule {
            max_rate_ppm: 100,
            interval: 2,
        });
        ModelDesc::new(Shape::vector(3), act, &layers, Loss::SquaredError, t).unwrap()
    }

    fn sample(i: i32) -> ([i16; 3], [i16; 2]) {
        (
            [
                (i * 97 % 2048) as i16 - 1024,
                (i * 31 % 2048) as i16 - 1024,
                512,
            ],
            [(i * 13 % 1024) as i16, -300],
        )
    }

    /// A state cannot move a format the description fixes: without dynamic fixed point every
    /// fraction bit must be the description's, an accumulator format of a layer without that
    /// accumulator never moves, and unused layer slots must be zero, both for
    /// `set_train_state` and for a decoded checkpoint.
    #[test]
    fn state_fracs_must_fit_the_description() {
        let dynamic = desc();
        let mut fixed = desc();
        fixed.train.dynamic = None;
        let w0 = [1i8; 18];
        let (b0, w2, b2) = ([0i8; 6], [2i8; 12], [0i8; 2]);
        let init = [
            LayerParams {
                weight: Raw::I8(&w0),
                bias: Raw::I8(&b0),
            },
            LayerParams::NONE,
            LayerParams {
                weight: Raw::I8(&w2),
                bias: Raw::I8(&b2),
            },
        ];
        for (d, moves) in [(&dynamic, true), (&fixed, false)] {
            let plan = Plan::of(d).unwrap();
            let mut arena = vec![0u32; plan.ram_words()];
            let mut t = Trainer::new(d, &plan, &mut arena, &init).unwrap();
            let good = t.train_state();
            assert_eq!(good.fracs[2], [11, 13, 24, 24]);
            let mut moved = good;
            moved.fracs[2][0] += 1;
            let mut stray = good;
            stray.fracs[5] = [1, 0, 0, 0];
            // Layer 0 is frozen and keeps no accumulator: its format cannot move either way.
            let mut frozen = good;
            frozen.fracs[0][2] += 1;
            let mismatch = Err(crate::Error::Blob(blob::BlobError::StateMismatch));
            for (state, ok) in [
                (good, true),
                (moved, moves),
                (stray, false),
                (frozen, false),
            ] {
                let want = if ok { Ok(()) } else { mismatch };
                assert_eq!(
                    t.set_train_state(&state),
                    want,
                    "dynamic {moves}: {state:?}"
                );
                let mut body = t.checkpoint_body(&[]).unwrap();
                body.state = Some(state);
                let mut buf = [0u8; 2048];
                let n = blob::encode(&body, &mut buf).unwrap();
                assert_eq!(
                    blob::decode(&buf[..n]).map(|_| ()),
                    want,
                    "decode, dynamic {moves}"
                );
            }
        }
    }

    /// Without dynamic fixed point the plan has no interval marks: the state's window is the
    /// whole run's counts, and restoring it gives a trainer the same statistics back.
    #[test]
    fn window_without_dynamic_fixed_point_is_the_whole_run() {
        let mut d = desc();
        d.train.dynamic = None;
        let plan = Plan::of(&d).unwrap();
        let w: [i8; 18] = core::array::from_fn(|i| (i as i8 * 7) - 60);
        let w2: [i8; 12] = core::array::from_fn(|i| 40 - (i as i8 * 5));
        let (b0, b2) = ([3i8; 6], [-2i8; 2]);
        let init = [
            LayerParams {
                weight: Raw::I8(&w),
                bias: Raw::I8(&b0),
            },
            LayerParams::NONE,
            LayerParams {
                weight: Raw::I8(&w2),
                bias: Raw::I8(&b2),
            },
        ];
        let mut a1 = vec![0u32; plan.ram_words()];
        let mut a = Trainer::new(&d, &plan, &mut a1, &init).unwrap();
        for i in 0..6 {
            let (x, y) = sample(i);
            a.step(
                Tensor {
                    raw: Raw::I16(&x),
                    fmt: d.input_format,
                },
                Target::Values(Tensor {
                    raw: Raw::I16(&y),
                    fmt: d.layers[2].out,
                }),
            )
            .unwrap();
        }
        let state = a.train_state();
        for k in 0..3 {
            let now = a.stats(k).unwrap().moving();
            for (i, t) in now.iter().enumerate() {
                assert_eq!(state.window[k][i], t.values, "layer {k} tensor {i}");
                assert_eq!(state.window[k][4 + i], t.saturations);
                assert_eq!(state.window[k][8 + i], t.high);
            }
        }
        assert!(state.window[0][0] > 0, "the run wrote outputs");
        let mut a2 = vec![0u32; plan.ram_words()];
        let mut b = Trainer::new(&d, &plan, &mut a2, &init).unwrap();
        b.set_train_state(&state).unwrap();
        for k in 0..3 {
            assert_eq!(b.stats(k).unwrap().moving(), a.stats(k).unwrap().moving());
        }
        assert_eq!(b.train_state(), state);
    }

    /// `revert_state` gives back what `save_state` kept, with dynamic fixed point and
    /// stochastic rounding: the same state as `set_train_state` with the saved
    /// `train_state`, and from there the same training, bit for bit.
    #[test]
    fn reverting_the_saved_state_equals_setting_it() {
        let d = desc();
        let plan = Plan::of(&d).unwrap();
        let w: [i8; 18] = core::array::from_fn(|i| (i as i8 * 7) - 60);
        let w2: [i8; 12] = core::array::from_fn(|i| 40 - (i as i8 * 5));
        let (b0, b2) = ([3i8; 6], [-2i8; 2]);
        let init = [
            LayerParams {
                weight: Raw::I8(&w),
                bias: Raw::I8(&b0),
            },
            LayerParams::NONE,
            LayerParams {
                weight: Raw::I8(&w2),
                bias: Raw::I8(&b2),
            },
        ];
        let step = |t: &mut Trainer<'_>, i: i32| {
            let (x, y) = sample(i);
            t.step(
                Tensor {
                    raw: Raw::I16(&x),
                    fmt: d.input_format,
                },
                Target::Values(Tensor {
                    raw: Raw::I16(&y),
                    fmt: d.layers[2].out,
                }),
            )
            .unwrap();
        };
        // Before any save, reverting changes nothing (the arena's old contents are not read as
        // a saved state).
        let mut c1 = vec![u32::MAX; plan.ram_words()];
        let mut c = Trainer::new(&d, &plan, &mut c1, &init).unwrap();
        let start = c.train_state();
        step(&mut c, 0);
        let stepped = c.train_state();
        assert_ne!(stepped, start);
        c.revert_state();
        assert_eq!(c.train_state(), stepped);
        let mut a1 = vec![0u32; plan.ram_words()];
        let mut a = Trainer::new(&d, &plan, &mut a1, &init).unwrap();
        for i in 0..5 {
            step(&mut a, i);
        }
        a.save_state();
        let saved = a.train_state();
        // Formats moved and an interval is under way: a state worth saving.
        assert_eq!(saved.steps, 5);
        assert_ne!(saved.fracs, start.fracs);
        assert!(saved.window.iter().flatten().any(|&c| c > 0), "{saved:?}");
        for i in 5..12 {
            step(&mut a, i);
        }
        a.flush();
        assert_ne!(a.train_state(), saved);
        a.revert_state();
        assert_eq!(a.train_state(), saved);
        // The same as setting the state on a trainer with the same weights, for the rest of
        // a run.
        let mut b1 = vec![0u32; plan.ram_words()];
        let mut b = Trainer::new(&d, &plan, &mut b1, &init).unwrap();
        for i in 0..12 {
            step(&mut b, i);
            if i == 4 {
                b.save_state();
            }
        }
        b.flush();
        b.set_train_state(&saved).unwrap();
        for i in 12..20 {
            step(&mut a, i);
            step(&mut b, i);
        }
        assert_eq!(a.train_state(), b.train_state());
        for k in 0..3 {
            assert_eq!(a.stats(k), b.stats(k), "layer {k}");
        }
    }

    #[test]
    fn checkpoint_round_trip_continues_bit_exact() {
        let d = desc();
        let plan = Plan::of(&d).unwrap();
        let w0: [i8; 18] = core::array::from_fn(|i| (i as i8 * 7) - 60);
        let b0 = [3i8; 6];
        let w2: [i8; 12] = core::array::from_fn(|i| 40 - (i as i8 * 5));
        let b2 = [-2i8; 2];
        let init = [
            LayerParams {
                weight: Raw::I8(&w0),
                bias: Raw::I8(&b0),
            },
            LayerParams::NONE,
            LayerParams {
                weight: Raw::I8(&w2),
                bias: Raw::I8(&b2),
            },
        ];
        let (fx, fo) = (d.input_format, d.layers[2].out);
        let step = |t: &mut Trainer<'_>, i: i32| {
            let (x, y) = sample(i);
            t.step(
                Tensor {
                    raw: Raw::I16(&x),
                    fmt: fx,
                },
                Target::Values(Tensor {
                    raw: Raw::I16(&y),
                    fmt: fo,
                }),
            )
            .unwrap();
        };
        let mut a1 = vec![0u32; plan.ram_words()];
        let mut a = Trainer::new(&d, &plan, &mut a1, &init).unwrap();
        // Six samples with batch 2 are three updates: no sample pending, and with a dynamic
        // rule every two updates, half way through an interval.
        for i in 0..6 {
            step(&mut a, i);
        }
        assert_eq!((a.pending(), a.updates() % 2), (0, 1));
        let mut buf = [0u8; 2048];
        let n = a.write_checkpoint(&[], &mut buf).unwrap();
        let checked = blob::decode(&buf[..n]).unwrap();
        assert_eq!(checked.kind(), BlobKind::Checkpoint);
        // The streamed checkpoint is byte for byte the encoding of the gathered body.
        let mut gathered = [0u8; 2048];
        let m = blob::encode(&a.checkpoint_body(&[]).unwrap(), &mut gathered).unwrap();
        assert_eq!(&buf[..n], &gathered[..m]);
        assert_eq!(
            a.write_checkpoint(&[], &mut gathered[..n - 1]),
            Err(crate::Error::Blob(blob::BlobError::BufferTooSmall))
        );
        let body = a.checkpoint_body(&[]).unwrap();
        let short = blob::encode_parts(
            body.kind,
            &body.desc,
            &[],
            body.state.as_ref(),
            body.tensors.len() + 1,
            body.tensors.iter().copied(),
            &mut gathered,
        );
        assert_eq!(
            short,
            Err(crate::Error::Blob(blob::BlobError::TooManyTensors))
        );
        drop(body);
        // Frozen layer 0 is not carried; layer 2 carries values, masters and momentum.
        assert!(checked.tensors().all(|t| t.layer == 2));
        assert_eq!(checked.tensor_count(), 6);
        let mut a2 = vec![0u32; plan.ram_words()];
        let mut b = Trainer::new(&d, &plan, &mut a2, &init).unwrap();
        b.restore(&checked).unwrap();
        // The writer goes on as if nothing happened; the restored trainer must follow it bit
        // for bit, through the next dynamic-fixed-point adjustment.
        for i in 6..40 {
            step(&mut a, i);
            step(&mut b, i);
            assert_eq!(a.params(2), b.params(2), "after step {i}");
        }
        assert_eq!(a.live_fracs(2), b.live_fracs(2));
        assert_eq!(a.rng(), b.rng());
        // Corrupting one byte is caught by the CRC.
        let mut bad = buf;
        bad[n / 2] ^= 0x10;
        assert_eq!(
            blob::decode(&bad[..n]).err(),
            Some(crate::Error::Blob(blob::BlobError::CrcMismatch))
        );
    }
}
