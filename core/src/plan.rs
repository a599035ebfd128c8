//! The static memory plan: the exact bytes of every buffer training needs, from the model
//! description alone, in a `const fn`.
//!
//! A firmware sizes its working memory at compile time:
//!
//! ```
//! use hone_core::model::{LayerDesc, LayerKind, Loss, ParamFormats, Shape, TrainDesc, TrainMode};
//! use hone_core::num::{QFormat, QScalar, Word};
//! use hone_core::plan::Plan;
//!
//! const ACT: QFormat = QFormat::new_unchecked(Word::I16, 10);
//! const P: ParamFormats = ParamFormats::plain(QFormat::new_unchecked(Word::I16, 12), 20);
//! const LAYERS: [LayerDesc; 2] = [
//!     LayerDesc { kind: LayerKind::Dense { units: 8 }, mode: TrainMode::Full,
//!                 weight: P, bias: P, out: ACT, grad: ACT },
//!     LayerDesc::simple(LayerKind::Relu, ACT, ACT),
//! ];
//! const TRAIN: TrainDesc = TrainDesc::sgd(QScalar { raw: 655, frac: 16 });
//! const PLAN: Plan = match Plan::new(Shape::vector(4), &LAYERS, Loss::SquaredError, &TRAIN) {
//!     Ok(p) => p,
//!     Err(_) => panic!("model does not plan"),
//! };
//! static ARENA: [u32; PLAN.ram_words()] = [0; PLAN.ram_words()];
//! assert_eq!(ARENA.len() * 4, PLAN.ram_bytes as usize);
//! ```
//!
//! # What is planned
//! - **Trainable parameters** in RAM, in their value formats: the weights of layers whose mode
//!   trains weights, the bias of layers whose mode trains the bias. Everything else stays in
//!   flash.
//! - **Master copies**, where a parameter has a master format and is trained.
//! - **Gradient accumulators**, one per trained tensor.
//! - **Momentum buffers**, one per trained tensor when the momentum is not zero.
//! - **Kept activations**: a layer output is kept only when backward needs it: as the input of
//!   a layer that trains its weights (dense, conv), as the input of an activation or max-pool
//!   that must pass a gradient back, or as the output of sigmoid and tanh, whose derivatives
//!   are computed from the output. Nothing is kept before the first trainable layer, except the
//!   output that feeds it when it trains its weights.
//! - **Forward scratch**: two buffers; a layer output that is not kept goes to buffer
//!   `index % 2`, so a layer never reads and writes the same buffer.
//! - **Backward scratch**: two buffers for the loss gradient of each layer output, again by
//!   index parity.
//! - **Flash**: the factory copy of every parameter tensor, in its value format.
//!
//! The model input is read from the caller's slice during a step and is not copied.
//! Every buffer starts on a 4-byte boundary and is padded to a multiple of 4 bytes, so the
//! arena is a `[u32]` and each buffer can be viewed as `i8`, `i16` or `i32` without `unsafe`.

use crate::error::Error;
use crate::model::desc::{shapes, LayerDesc, LayerKind, Loss, Shapes, TrainDesc, MAX_LAYERS};
use crate::num::Word;

/// One buffer in the arena.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Slot {
    /// Offset in bytes from the start of the arena; a multiple of 4.
    pub offset: u32,
    /// Bytes reserved, a multiple of 4 (the values plus padding).
    pub bytes: u32,
    /// Number of values.
    pub elems: u32,
    /// Storage word of the values (for a float plan, the word of the same width).
    pub word: Word,
}

impl Slot {
    /// No buffer.
    pub const NONE: Slot = Slot {
        offset: 0,
        bytes: 0,
        elems: 0,
        word: Word::I8,
    };

    /// Whether this slot holds a buffer.
    ///
    /// Decided by the bytes reserved, so a copy of [`Slot::NONE`] with another element count
    /// is still no buffer.
    pub const fn is_some(&self) -> bool {
        self.bytes != 0
    }

    /// First word index in a `[u32]` arena.
    pub const fn first_word(&self) -> usize {
        (self.offset / 4) as usize
    }

    /// Number of `u32` words reserved.
    pub const fn words(&self) -> usize {
        (self.bytes / 4) as usize
    }
}

/// The buffers of one layer.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LayerSlots {
    /// Trainable weights (RAM).
    pub weight: Slot,
    /// Trainable bias (RAM).
    pub bias: Slot,
    /// Master weights.
    pub master_weight: Slot,
    /// Master bias.
    pub master_bias: Slot,
    /// Weight-gradient accumulator.
    pub accum_weight: Slot,
    /// Bias-gradient accumulator.
    pub accum_bias: Slot,
    /// Weight momentum.
    pub momentum_weight: Slot,
    /// Bias momentum.
    pub momentum_bias: Slot,
    /// The layer's output, kept for backward.
    pub kept: Slot,
    /// Bytes of the factory weights in flash.
    pub flash_weight: u32,
    /// Bytes of the factory bias in flash.
    pub flash_bias: u32,
}

impl LayerSlots {
    const EMPTY: LayerSlots = LayerSlots {
        weight: Slot::NONE,
        bias: Slot::NONE,
        master_weight: Slot::NONE,
        master_bias: Slot::NONE,
        accum_weight: Slot::NONE,
        accum_bias: Slot::NONE,
        momentum_weight: Slot::NONE,
        momentum_bias: Slot::NONE,
        kept: Slot::NONE,
        flash_weight: 0,
        flash_bias: 0,
    };
}

/// The memory plan of a model. See the [module docs](self).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Plan {
    /// Per layer; entries past `shapes.count` are empty.
    pub layers: [LayerSlots; MAX_LAYERS],
    /// Shapes of every layer.
    pub shapes: Shapes,
    /// Forward scratch buffers (outputs that are not kept), by layer-index parity.
    pub forward: [Slot; 2],
    /// Backward scratch buffers (loss gradients of layer outputs), by layer-index parity.
    pub backward: [Slot; 2],
    /// Index of the first layer that trains anything; equal to the layer count if none does.
    pub first_trainable: usize,
    /// The trainer's own state, last in the arena: per layer its live fraction bits and its
    /// statistics ([`STATE_WORDS_PER_LAYER`] words each), with dynamic fixed point the marks
    /// of the interval ([`MARK_WORDS_PER_LAYER`] more), and the saved training state a
    /// rejected session goes back to ([`SAVED_HEAD_WORDS`] and [`SAVED_WORDS_PER_LAYER`] per
    /// layer). Empty in a float-twin plan.
    pub state: Slot,
    /// Total RAM of the arena in bytes (a multiple of 4).
    pub ram_bytes: u32,
    /// Total flash for the factory parameters in bytes.
    pub flash_bytes: u32,
    /// For a float-twin plan, the bytes of one float (4 or 8); 0 for the fixed-point plan.
    pub float_bytes: u32,
    /// FNV-1a hash of every field of the description the plan was made from: lets a trainer
    /// check that a plan belongs to its description without building a second plan.
    pub fingerprint: u32,
}

/// Words of trainer state per layer in [`Plan::state`]: the live fraction bits (one word) and
/// the six tallies of [`crate::train::LayerStats`] (24), plus [`MARK_WORDS_PER_LAYER`] with
/// dynamic fixed point.
pub const STATE_WORDS_PER_LAYER: u32 = 1 + 6 * 4;

/// Words per layer of the dynamic-fixed-point interval marks (four tallies), planned only
/// for a description with dynamic fixed point.
pub const MARK_WORDS_PER_LAYER: u32 = 4 * 4;

/// Words of the saved training state ([`crate::train::Trainer::save_state`]) before its
/// layers: steps, updates and the generator's four words.
pub const SAVED_HEAD_WORDS: u32 = 6;

/// Words per layer of the saved training state: the live fraction bits (one word) and the
/// interval's values, saturations and outer-half counts of the four moving tensors (12).
pub const SAVED_WORDS_PER_LAYER: u32 = 1 + 12;

const fn pad4(bytes: u64) -> u64 {
    (bytes + 3) & !3
}

/// Bump allocator over the arena used by the const planner.
struct Bump {
    next: u64,
    overflow: bool,
}

impl Bump {
    const fn take(&mut self, elems: u32, word: Word, float_bytes: u32) -> Slot {
        if elems == 0 {
            return Slot::NONE;
        }
        let per = if float_bytes != 0 {
            float_bytes as u64
        } else {
            word.bytes() as u64
        };
        let bytes = pad4(elems as u64 * per);
        let offset = self.next;
        self.next += bytes;
        if self.next > u32::MAX as u64 {
            self.overflow = true;
            return Slot::NONE;
        }
        Slot {
            offset: offset as u32,
            bytes: bytes as u32,
            elems,
            word,
        }
    }
}

const fn needs_input(layers: &[LayerDesc], k: usize, first: usize) -> bool {
    if k < first || k >= layers.len() {
        return false;
    }
    let l = &layers[k];
    match l.kind {
        LayerKind::Dense { .. } | LayerKind::Conv1d { .. } => l.mode.trains_weight(),
        LayerKind::Relu
        | LayerKind::LeakyRelu { .. }
        | LayerKind::HardTanh
        | LayerKind::ClippedRelu { .. }
        | LayerKind::MaxPool1d { .. } => k > first,
        LayerKind::Sigmoid | LayerKind::Tanh | LayerKind::AvgPool1d { .. } => false,
    }
}

const fn needs_output(layers: &[LayerDesc], k: usize, first: usize) -> bool {
    k > first && k < layers.len() && matches!(layers[k].kind, LayerKind::Sigmoid | LayerKind::Tanh)
}

/// Whether the output of layer `k` is kept for backward.
pub const fn is_kept(layers: &[LayerDesc], k: usize, first: usize) -> bool {
    needs_output(layers, k, first) || needs_input(layers, k + 1, first)
}

/// Whether backward of layer `k` reads the layer's input.
pub const fn reads_input(layers: &[LayerDesc], k: usize, first: usize) -> bool {
    needs_input(layers, k, first)
}

impl Plan {
    /// The fixed-point plan of a model.
    ///
    /// # Errors
    /// The description's own errors (see [`shapes`] and [`TrainDesc::check`]), or
    /// [`Error::Layer`] with `TooLarge` if the arena would pass 4 GiB.
    pub const fn new(
        input: crate::model::Shape,
        layers: &[LayerDesc],
        loss: Loss,
        train: &TrainDesc,
    ) -> Result<Plan, Error> {
        Plan::build(input, layers, loss, train, 0)
    }

    /// The plan of the float twin of the same model: the same buffers with every value an
    /// `f32` (`float_bytes = 4`) or `f64` (8), and no master copies.
    ///
    /// # Errors
    /// As [`Plan::new`]; [`Error::InvalidFormat`] if `float_bytes` is not 4 or 8.
    pub const fn new_float(
        input: crate::model::Shape,
        layers: &[LayerDesc],
        loss: Loss,
        train: &TrainDesc,
        float_bytes: u32,
    ) -> Result<Plan, Error> {
        if float_bytes != 4 && float_bytes != 8 {
            return Err(Error::InvalidFormat);
        }
        Plan::build(input, layers, loss, train, float_bytes)
    }

    /// The plan of a [`crate::model::ModelDesc`].
    ///
    /// # Errors
    /// As [`Plan::new`].
    pub fn of(desc: &crate::model::ModelDesc) -> Result<Plan, Error> {
        Plan::new(desc.input, &desc.layers, desc.loss, &desc.train)
    }

    const fn build(
        input: crate::model::Shape,
        layers: &[LayerDesc],
        loss: Loss,
        train: &TrainDesc,
        fb: u32,
    ) -> Result<Plan, Error> {
        if let Err(e) = train.check() {
            return Err(e);
        }
        let shapes = match shapes(input, layers, loss) {
            Ok(s) => s,
            Err(e) => return Err(e),
        };
        let n = layers.len();
        let mut first = n;
        let mut k = 0;
        while k < n {
            if layers[k].kind.has_params()
                && !matches!(layers[k].mode, crate::model::TrainMode::Frozen)
            {
                first = k;
                break;
            }
            k += 1;
        }
        let mut plan = Plan {
            layers: [LayerSlots::EMPTY; MAX_LAYERS],
            shapes,
            forward: [Slot::NONE; 2],
            backward: [Slot::NONE; 2],
            first_trainable: first,
            state: Slot::NONE,
            ram_bytes: 0,
            flash_bytes: 0,
            float_bytes: fb,
            fingerprint: fingerprint(input, layers, loss, train),
        };
        let mut bump = Bump {
            next: 0,
            overflow: false,
        };
        let with_momentum = train.momentum.raw != 0;
        let mut flash: u64 = 0;

        // Trainable parameters, then masters, accumulators, momenta: one pass per group so
        // each group is contiguous.
        let mut group = 0;
        while group < 4 {
            let mut k = 0;
            while k < n {
                let l = &layers[k];
                let g = &shapes.layers[k];
                if l.kind.has_params() {
                    let (tw, tb) = (l.mode.trains_weight(), l.mode.trains_bias());
                    let s = &mut plan.layers[k];
                    match group {
                        0 => {
                            if tw {
                                s.weight = bump.take(g.weights, l.weight.value.word, fb);
                            }
                            if tb {
                                s.bias = bump.take(g.biases, l.bias.value.word, fb);
                            }
                            flash += pad4(g.weights as u64 * l.weight.value.word.bytes() as u64);
                            flash += pad4(g.biases as u64 * l.bias.value.word.bytes() as u64);
                            s.flash_weight =
                                (g.weights as usize * l.weight.value.word.bytes()) as u32;
                            s.flash_bias = (g.biases as usize * l.bias.value.word.bytes()) as u32;
                        }
                        1 => {
                            if fb == 0 {
                                if let (true, Some(m)) = (tw, l.weight.master) {
                                    s.master_weight = bump.take(g.weights, m.word, fb);
                                }
                                if let (true, Some(m)) = (tb, l.bias.master) {
                                    s.master_bias = bump.take(g.biases, m.word, fb);
                                }
                            }
                        }
                        2 => {
                            if tw {
                                s.accum_weight = bump.take(g.weights, l.weight.accum.word, fb);
                            }
                            if tb {
                                s.accum_bias = bump.take(g.biases, l.bias.accum.word, fb);
                            }
                        }
                        _ => {
                            if with_momentum && tw {
                                s.momentum_weight = bump.take(g.weights, l.weight.accum.word, fb);
                            }
                            if with_momentum && tb {
                                s.momentum_bias = bump.take(g.biases, l.bias.accum.word, fb);
                            }
                        }
                    }
                }
                k += 1;
            }
            group += 1;
        }

        // Kept activations, and the largest non-kept output of each parity.
        let mut fwd_max = [(0u32, Word::I8); 2];
        let mut bwd_max = [(0u32, Word::I8); 2];
        let mut k = 0;
        while k < n {
            let l = &layers[k];
            let size = shapes.layers[k].output.size();
            if is_kept(layers, k, first) {
                plan.layers[k].kept = bump.take(size, l.out.word, fb);
            } else {
                fwd_max[k % 2] = widest(fwd_max[k % 2], size, l.out.word, fb);
            }
            if k >= first {
                bwd_max[k % 2] = widest(bwd_max[k % 2], size, l.grad.word, fb);
            }
            k += 1;
        }
        plan.forward[0] = bump.take(fwd_max[0].0, fwd_max[0].1, fb);
        plan.forward[1] = bump.take(fwd_max[1].0, fwd_max[1].1, fb);
        plan.backward[0] = bump.take(bwd_max[0].0, bwd_max[0].1, fb);
        plan.backward[1] = bump.take(bwd_max[1].0, bwd_max[1].1, fb);
        if fb == 0 {
            let per_layer = STATE_WORDS_PER_LAYER
                + if train.dynamic.is_some() {
                    MARK_WORDS_PER_LAYER
                } else {
                    0
                };
            plan.state = bump.take(
                n as u32 * (per_layer + SAVED_WORDS_PER_LAYER) + SAVED_HEAD_WORDS,
                Word::I32,
                0,
            );
        }

        if bump.overflow || flash > u32::MAX as u64 {
            return Err(Error::Layer {
                layer: 0,
                fault: crate::error::LayerFault::TooLarge,
            });
        }
        plan.ram_bytes = bump.next as u32;
        plan.flash_bytes = if fb == 0 { flash as u32 } else { 0 };
        Ok(plan)
    }

    /// Number of `u32` words of the arena.
    pub const fn ram_words(&self) -> usize {
        (self.ram_bytes / 4) as usize
    }

    /// Number of layers.
    pub const fn count(&self) -> usize {
        self.shapes.count
    }

    /// Where the output of layer `k` lives: its kept buffer, or forward scratch `k % 2`.
    pub const fn output_slot(&self, k: usize) -> Slot {
        if k < MAX_LAYERS && self.layers[k].kept.is_some() {
            self.layers[k].kept
        } else {
            self.forward[k % 2]
        }
    }

    /// Where the loss gradient of the output of layer `k` lives.
    pub const fn grad_slot(&self, k: usize) -> Slot {
        self.backward[k % 2]
    }

    /// Whether any layer trains.
    pub const fn trains(&self) -> bool {
        self.first_trainable < self.shapes.count
    }

    /// Multiply-accumulates of one forward pass.
    pub const fn forward_macs(&self) -> u64 {
        let mut total = 0u64;
        let mut k = 0;
        while k < self.shapes.count {
            total += self.shapes.layers[k].macs as u64;
            k += 1;
        }
        total
    }

    /// Multiply-accumulates of one training step: the forward pass, plus for each layer from
    /// the first trainable one on, the weight-gradient products of a layer that trains its
    /// weights and the input-gradient products of a layer that passes a gradient back (each
    /// as many as the layer's forward products).
    pub const fn training_macs(&self) -> u64 {
        let mut total = self.forward_macs();
        let mut k = self.first_trainable;
        while k < self.shapes.count {
            let macs = self.shapes.layers[k].macs as u64;
            if self.layers[k].accum_weight.is_some() {
                total += macs;
            }
            if k > self.first_trainable {
                total += macs;
            }
            k += 1;
        }
        total
    }

    /// Bytes of the arena by category, for reports.
    pub fn ram_by_category(&self) -> RamBreakdown {
        let mut b = RamBreakdown::default();
        for s in self.layers.iter().take(self.count()) {
            b.parameters += s.weight.bytes + s.bias.bytes;
            b.master += s.master_weight.bytes + s.master_bias.bytes;
            b.accumulators += s.accum_weight.bytes + s.accum_bias.bytes;
            b.momentum += s.momentum_weight.bytes + s.momentum_bias.bytes;
            b.kept_activations += s.kept.bytes;
        }
        b.scratch = self.forward[0].bytes
            + self.forward[1].bytes
            + self.backward[0].bytes
            + self.backward[1].bytes;
        b
    }
}

/// The arena split by what the bytes are for.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct RamBreakdown {
    /// Trainable weights and biases.
    pub parameters: u32,
    /// Master copies.
    pub master: u32,
    /// Gradient accumulators.
    pub accumulators: u32,
    /// Momentum buffers.
    pub momentum: u32,
    /// Activations kept for backward.
    pub kept_activations: u32,
    /// Forward and backward scratch.
    pub scratch: u32,
}

const fn value_bytes(word: Word, float_bytes: u32) -> u64 {
    if float_bytes != 0 {
        float_bytes as u64
    } else {
        word.bytes() as u64
    }
}

const fn widest(cur: (u32, Word), elems: u32, word: Word, float_bytes: u32) -> (u32, Word) {
    // Bytes per value: the word's, or for a float plan the float's, whatever the word.
    let cur_bytes = cur.0 as u64 * value_bytes(cur.1, float_bytes);
    let new_bytes = elems as u64 * value_bytes(word, float_bytes);
    // Keep the largest byte count; every layer of that parity then fits in the buffer's bytes
    // (its own word, or the float, times its own count).
    if new_bytes > cur_bytes {
        (elems, word)
    } else {
        cur
    }
}

/// FNV-1a (Fowler, Noll, Vo) over 32-bit words.
struct Fnv(u32);

impl Fnv {
    const fn word(mut self, v: u32) -> Fnv {
        let b = v.to_le_bytes();
        let mut i = 0;
        while i < 4 {
            self.0 ^= b[i] as u32;
            self.0 = self.0.wrapping_mul(0x0100_0193);
            i += 1;
        }
        self
    }

    const fn format(self, f: crate::num::QFormat) -> Fnv {
        self.word(f.word.bits()).word(f.frac as u32)
    }

    const fn scalar(self, s: crate::num::QScalar) -> Fnv {
        self.word(s.raw as u32).word(s.frac as u32)
    }

    const fn params(self, p: &crate::model::ParamFormats) -> Fnv {
        let h = self.format(p.value).format(p.accum);
        match p.master {
            Some(m) => h.word(1).format(m),
            None => h.word(0),
        }
    }
}

const fn rounding_code(r: crate::num::Rounding) -> u32 {
    match r {
        crate::num::Rounding::NearestEven => 0,
        crate::num::Rounding::TowardZero => 1,
        crate::num::Rounding::Stochastic => 2,
    }
}

/// A hash of every field of a model description (see [`Plan::fingerprint`]).
pub const fn fingerprint(
    input: crate::model::Shape,
    layers: &[LayerDesc],
    loss: Loss,
    train: &TrainDesc,
) -> u32 {
    let mut h = Fnv(0x811C_9DC5)
        .word(input.channels as u32)
        .word(input.len as u32)
        .word(matches!(loss, Loss::SoftmaxCrossEntropy) as u32)
        .word(layers.len() as u32);
    let mut k = 0;
    while k < layers.len() {
        let l = &layers[k];
        let (code, a, b, c) = match l.kind {
            LayerKind::Dense { units } => (0, units as u32, 0, 0),
            LayerKind::Conv1d {
                filters,
                kernel,
                stride,
            } => (1, filters as u32, kernel as u32, stride as u32),
            LayerKind::Relu => (2, 0, 0, 0),
            LayerKind::LeakyRelu { shift } => (3, shift as u32, 0, 0),
            LayerKind::HardTanh => (4, 0, 0, 0),
            LayerKind::ClippedRelu { ceiling } => (5, ceiling as u32, 0, 0),
            LayerKind::Sigmoid => (6, 0, 0, 0),
            LayerKind::Tanh => (7, 0, 0, 0),
            LayerKind::AvgPool1d { window, stride } => (8, window as u32, stride as u32, 0),
            LayerKind::MaxPool1d { window, stride } => (9, window as u32, stride as u32, 0),
        };
        let mode = match l.mode {
            crate::model::TrainMode::Frozen => 0,
            crate::model::TrainMode::BiasOnly => 1,
            crate::model::TrainMode::WeightsOnly => 2,
            crate::model::TrainMode::Full => 3,
        };
        h = h
            .word(code)
            .word(a)
            .word(b)
            .word(c)
            .word(mode)
            .params(&l.weight)
            .params(&l.bias)
            .format(l.out)
            .format(l.grad);
        k += 1;
    }
    let r = &train.rounding;
    h = h
        .word(train.batch as u32)
        .scalar(train.lr)
        .scalar(train.momentum)
        .scalar(train.weight_decay)
        .scalar(train.clip);
    h = h
        .word(rounding_code(r.activations))
        .word(rounding_code(r.gradients))
        .word(rounding_code(r.updates));
    h = match train.dynamic {
        Some(d) => h.word(1).word(d.max_rate_ppm).word(d.interval as u32),
        None => h.word(0),
    };
    h.word(train.seed as u32).word((train.seed >> 32) as u32).0
}

/// Cuts disjoint mutable pieces out of `arena`, one per `(start, len)` range, in whatever
/// order the ranges come. Empty ranges, and ranges that overlap an earlier one or run past the
/// end, give clipped or empty pieces (a checked plan has none of those). Safe code only.
pub fn split_disjoint<T, const N: usize>(
    arena: &mut [T],
    ranges: [(usize, usize); N],
) -> [&mut [T]; N] {
    split_checked(arena, ranges)
}

/// [`split_disjoint`]: the ranges in address order, each clipped to the arena and to what the
/// ranges before it left, cut off one after the other with `split_at_mut`.
fn split_checked<T, const N: usize>(arena: &mut [T], ranges: [(usize, usize); N]) -> [&mut [T]; N] {
    // An insertion sort: the callers pass at most eight ranges, mostly in address order
    // already, where it does a comparison or two per range (a general sort costs hundreds of
    // instructions per call on a small core).
    let mut order: [usize; N] = core::array::from_fn(|i| i);
    let start = |i: usize| ranges.get(i).map_or(0, |r| r.0);
    for k in 1..N {
        let mut j = k;
        while j > 0 && start(order[j - 1]) > start(order[j]) {
            order.swap(j - 1, j);
            j -= 1;
        }
    }
    let mut out: [&mut [T]; N] = core::array::from_fn(|_| <&mut [T]>::default());
    let mut rest: &mut [T] = arena;
    let mut pos = 0usize;
    for &i in &order {
        let Some(&(start, len)) = ranges.get(i) else {
            continue;
        };
        if len == 0 || start < pos {
            continue;
        }
        let r = core::mem::take(&mut rest);
        if start - pos > r.len() {
            rest = r;
            continue;
        }
        let (_, r) = r.split_at_mut(start - pos);
        let len = len.min(r.len());
        let (piece, r) = r.split_at_mut(len);
        if let Some(o) = out.get_mut(i) {
            *o = piece;
        }
        rest = r;
        pos = start + len;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{LayerDesc, LayerKind, ParamFormats, Shape, TrainDesc, TrainMode};
    use crate::num::{QFormat, QScalar};

    const ACT: QFormat = QFormat::new_unchecked(Word::I16, 10);
    const W8: QFormat = QFormat::new_unchecked(Word::I8, 6);

    fn dense(units: u16, mode: TrainMode) -> LayerDesc {
        LayerDesc {
            kind: LayerKind::Dense { units },
            mode,
            weight: ParamFormats::plain(W8, 20),
            bias: ParamFormats::plain(QFormat::new_unchecked(Word::I32, 16), 20),
            out: ACT,
            grad: ACT,
        }
    }

    fn sgd() -> TrainDesc {
        TrainDesc::sgd(QScalar { raw: 655, frac: 16 })
    }

    #[test]
    fn interval_marks_only_with_dynamic_fixed_point() {
        let layers = [
            dense(5, TrainMode::Full),
            LayerDesc::simple(LayerKind::Relu, ACT, ACT),
        ];
        let fixed = Plan::new(Shape::vector(3), &layers, Loss::SquaredError, &sgd()).unwrap();
        let mut t = sgd();
        t.dynamic = Some(crate::model::DynamicRule {
            max_rate_ppm: 100,
            interval: 4,
        });
        let dynamic = Plan::new(Shape::vector(3), &layers, Loss::SquaredError, &t).unwrap();
        let saved = (SAVED_HEAD_WORDS + 2 * SAVED_WORDS_PER_LAYER) * 4;
        assert_eq!(fixed.state.bytes, 2 * STATE_WORDS_PER_LAYER * 4 + saved);
        assert_eq!(
            dynamic.state.bytes,
            2 * (STATE_WORDS_PER_LAYER + MARK_WORDS_PER_LAYER) * 4 + saved
        );
        assert_eq!(
            dynamic.ram_bytes - fixed.ram_bytes,
            2 * MARK_WORDS_PER_LAYER * 4
        );
    }

    #[test]
    fn dense_relu_dense_full() {
        let layers = [
            dense(5, TrainMode::Full),
            LayerDesc::simple(LayerKind::Relu, ACT, ACT),
            dense(3, TrainMode::Full),
        ];
        let p = Plan::new(Shape::vector(3), &layers, Loss::SquaredError, &sgd()).unwrap();
        assert_eq!(p.first_trainable, 0);
        // Layer 0: 15 i8 weights -> 16 bytes, 5 i32 biases -> 20.
        assert_eq!(p.layers[0].weight.bytes, 16);
        assert_eq!(p.layers[0].bias.bytes, 20);
        assert_eq!(p.layers[0].accum_weight.bytes, 60);
        assert_eq!(p.layers[0].momentum_weight, Slot::NONE);
        // The dense output is the relu's input (kept); the relu output is the next dense's
        // input (kept); the last output goes to scratch 0.
        assert_eq!(p.layers[0].kept.elems, 5);
        assert_eq!(p.layers[1].kept.elems, 5);
        assert_eq!(p.layers[2].kept, Slot::NONE);
        assert_eq!(p.forward[0].elems, 3);
        assert_eq!(p.forward[1], Slot::NONE);
        // Gradients: layers 0 and 2 in backward[0] (max 5 values), layer 1 in backward[1].
        assert_eq!(p.backward[0].elems, 5);
        assert_eq!(p.backward[1].elems, 5);
        // Sum of all slots equals the total, and slots do not overlap.
        let mut slots: std::vec::Vec<Slot> = std::vec::Vec::new();
        for s in &p.layers[..3] {
            slots.extend([
                s.weight,
                s.bias,
                s.master_weight,
                s.master_bias,
                s.accum_weight,
                s.accum_bias,
                s.momentum_weight,
                s.momentum_bias,
                s.kept,
            ]);
        }
        slots.extend(p.forward);
        slots.extend(p.backward);
        // The trainer's state comes last: 25 words for each of the 3 layers (no interval
        // marks without dynamic fixed point), then the saved state: 6 words and 13 per layer.
        assert_eq!(p.state.bytes, (3 * 25 + 6 + 3 * 13) * 4);
        slots.push(p.state);
        slots.retain(|s| s.is_some());
        slots.sort_by_key(|s| s.offset);
        let mut end = 0;
        for s in &slots {
            assert_eq!(s.offset, end, "{s:?}");
            assert_eq!(s.offset % 4, 0);
            end += s.bytes;
        }
        assert_eq!(end, p.ram_bytes);
        // Flash: 16 + 20 + (15 i8 -> 16) + (3 i32 -> 12).
        assert_eq!(p.flash_bytes, 16 + 20 + 16 + 12);
        // Forward 15 + 15 MACs; layer 0 adds its weight gradient (15); layer 2 adds its
        // weight gradient and its input gradient (15 + 15).
        assert_eq!(p.forward_macs(), 30);
        assert_eq!(p.training_macs(), 30 + 15 + 30);
    }

    #[test]
    fn fingerprint_sees_every_kind_of_field() {
        let layers = [
            dense(5, TrainMode::Full),
            LayerDesc::simple(LayerKind::Relu, ACT, ACT),
            dense(3, TrainMode::Full),
        ];
        let base = fingerprint(Shape::vector(3), &layers, Loss::SquaredError, &sgd());
        let mut t = sgd();
        t.seed = 1 << 40;
        assert_ne!(
            fingerprint(Shape::vector(3), &layers, Loss::SquaredError, &t),
            base
        );
        t = sgd();
        t.lr.raw += 1;
        assert_ne!(
            fingerprint(Shape::vector(3), &layers, Loss::SquaredError, &t),
            base
        );
        let mut l2 = layers;
        l2[0].out.frac += 1;
        assert_ne!(
            fingerprint(Shape::vector(3), &l2, Loss::SquaredError, &sgd()),
            base
        );
        l2 = layers;
        l2[2].mode = TrainMode::BiasOnly;
        assert_ne!(
            fingerprint(Shape::vector(3), &l2, Loss::SquaredError, &sgd()),
            base
        );
        l2 = layers;
        l2[0].weight.master = Some(QFormat::new_unchecked(Word::I16, 12));
        assert_ne!(
            fingerprint(Shape::vector(3), &l2, Loss::SquaredError, &sgd()),
            base
        );
        assert_ne!(
            fingerprint(Shape::vector(4), &layers, Loss::SquaredError, &sgd()),
            base
        );
        assert_eq!(
            fingerprint(Shape::vector(3), &layers, Loss::SquaredError, &sgd()),
            base
        );
        // A trainer refuses a plan made for another description.
        let desc =
            crate::model::ModelDesc::new(Shape::vector(3), ACT, &layers, Loss::SquaredError, sgd())
                .unwrap();
        let other = Plan::new(Shape::vector(3), &l2[..], Loss::SquaredError, &sgd())
            .unwrap_or_else(|_| {
                Plan::new(Shape::vector(4), &layers, Loss::SquaredError, &sgd()).unwrap()
            });
        let mut arena = std::vec![0u32; 4096];
        let init = [crate::train::LayerParams::NONE; 3];
        assert_eq!(
            crate::train::Trainer::new(&desc, &other, &mut arena, &init).err(),
            Some(Error::PlanMismatch)
        );
    }

    #[test]
    fn split_disjoint_any_order() {
        let mut a = [0u32; 10];
        let [x, y, z, w] = split_disjoint(&mut a, [(6, 2), (0, 3), (3, 0), (2, 2)]);
        assert_eq!((x.len(), y.len(), z.len(), w.len()), (2, 3, 0, 0)); // (2, 2) overlaps (0, 3)
        x[0] = 7;
        y[2] = 5;
        let [p, q] = split_disjoint(&mut a, [(8, 5), (20, 1)]);
        assert_eq!((p.len(), q.len()), (2, 0)); // clipped at the end; past the end is empty
        assert_eq!(a[6], 7);
        assert_eq!(a[2], 5);
    }

    #[test]
    fn frozen_prefix_keeps_nothing() {
        let layers = [
            dense(8, TrainMode::Frozen),
            LayerDesc::simple(LayerKind::Relu, ACT, ACT),
            dense(8, TrainMode::Frozen),
            LayerDesc::simple(LayerKind::Relu, ACT, ACT),
            dense(2, TrainMode::BiasOnly),
        ];
        let p = Plan::new(Shape::vector(4), &layers, Loss::SquaredError, &sgd()).unwrap();
        assert_eq!(p.first_trainable, 4);
        for k in 0..5 {
            assert_eq!(p.layers[k].kept, Slot::NONE, "layer {k}");
        }
        assert_eq!(p.layers[4].weight, Slot::NONE);
        assert_eq!(p.layers[4].bias.elems, 2);
        assert_eq!(p.layers[4].accum_weight, Slot::NONE);
        // Only the last layer's gradient is needed.
        assert_eq!(p.backward[0].elems, 2);
        assert_eq!(p.backward[1], Slot::NONE);
    }

    #[test]
    fn momentum_and_master_add_buffers() {
        let mut l0 = dense(4, TrainMode::Full);
        l0.weight.master = Some(QFormat::new_unchecked(Word::I16, 14));
        let layers = [l0];
        let mut t = sgd();
        t.momentum = QScalar {
            raw: 29491,
            frac: 15,
        };
        let p = Plan::new(Shape::vector(4), &layers, Loss::SquaredError, &t).unwrap();
        assert_eq!(p.layers[0].master_weight.bytes, 32);
        assert_eq!(p.layers[0].master_bias, Slot::NONE);
        assert_eq!(p.layers[0].momentum_weight.bytes, 64);
        assert_eq!(p.layers[0].momentum_bias.bytes, 16);
        let f = Plan::new_float(Shape::vector(4), &layers, Loss::SquaredError, &t, 8).unwrap();
        assert_eq!(f.layers[0].master_weight, Slot::NONE);
        assert_eq!(f.layers[0].weight.bytes, 16 * 8);
        assert!(Plan::new_float(Shape::vector(4), &layers, Loss::SquaredError, &t, 2).is_err());
    }
}
