//! The float twin: the same model description and training procedure as [`crate::train`],
//! in `f32` (device) or `f64` (host), with no rounding and no saturation.
//!
//! Fed the same initial weights and the same samples in the same order, the twin shows what
//! fixed-point training would have done with exact arithmetic. Hyperparameters are read from
//! the same [`crate::num::QScalar`] values, so both sides use exactly the same learning rate,
//! momentum, decay and clip bound. Its arena is laid out by [`Plan::new_float`].
//!
//! Conventions shared with the fixed-point layers: piecewise-linear activations take their
//! derivative from the input (1 strictly inside the linear part, 0 at and beyond the corners);
//! max pooling sends the gradient to the first maximum of each window.

pub mod real;

use crate::error::{Error, ParamTensor};
use crate::model::{LayerDesc, LayerGeometry, LayerKind, Loss, ModelDesc, MAX_LAYERS};
use crate::plan::{reads_input, split_disjoint, Plan, Slot};
pub use real::Real;

/// Initial parameters of one layer in float.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FloatParams<'a, R> {
    /// Weights.
    pub weight: &'a [R],
    /// Bias.
    pub bias: &'a [R],
}

impl<'a, R> FloatParams<'a, R> {
    /// No parameters.
    pub const NONE: FloatParams<'a, R> = FloatParams {
        weight: &[],
        bias: &[],
    };
}

/// What a sample should produce.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum FloatTarget<'t, R> {
    /// Regression targets.
    Values(&'t [R]),
    /// A class label.
    Class(u16),
}

/// The result of one twin step.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FloatOutcome<R> {
    /// Loss of the sample before the update.
    pub loss: R,
    /// Predicted class, for classification.
    pub predicted: Option<u16>,
    /// Whether the weights changed.
    pub updated: bool,
}

/// The float trainer. See the [module docs](self).
pub struct Twin<'a, R: Real> {
    desc: &'a ModelDesc,
    plan: &'a Plan,
    arena: &'a mut [R],
    flash: [FloatParams<'a, R>; MAX_LAYERS],
    in_batch: u16,
    steps: u32,
    updates: u32,
}

fn range<R: Real>(s: Slot) -> (usize, usize) {
    if s.is_some() {
        ((s.offset / R::BYTES) as usize, s.elems as usize)
    } else {
        (0, 0)
    }
}

fn carve<R: Real, const N: usize>(arena: &mut [R], slots: [Slot; N]) -> [&mut [R]; N] {
    split_disjoint(arena, slots.map(range::<R>))
}

fn pick<'x, R>(arena_piece: &'x [R], slot: Slot, init: &'x [R]) -> &'x [R] {
    if slot.is_some() {
        arena_piece
    } else {
        init
    }
}

impl<'a, R: Real> Twin<'a, R> {
    /// A twin of `desc` working in `arena` as laid out by `plan` (a float plan with
    /// `float_bytes = R::BYTES`), starting from `init` (one entry per layer).
    ///
    /// # Errors
    /// [`Error::PlanMismatch`], [`Error::ArenaTooSmall`], [`Error::Params`],
    /// [`Error::NotFinite`] for a NaN or infinite initial value, or the description's errors.
    pub fn new(
        desc: &'a ModelDesc,
        plan: &'a Plan,
        arena: &'a mut [R],
        init: &[FloatParams<'a, R>],
    ) -> Result<Twin<'a, R>, Error> {
        desc.check()?;
        if plan.float_bytes != R::BYTES
            || plan.fingerprint
                != crate::plan::fingerprint(desc.input, &desc.layers, desc.loss, &desc.train)
        {
            return Err(Error::PlanMismatch);
        }
        let needed = plan.ram_bytes / R::BYTES;
        if (arena.len() as u64) < needed as u64 {
            return Err(Error::ArenaTooSmall {
                needed: plan.ram_bytes,
                found: (arena.len() as u64 * R::BYTES as u64).min(u32::MAX as u64) as u32,
            });
        }
        let mut flash = [FloatParams::NONE; MAX_LAYERS];
        if init.len() != desc.layers.len() {
            return Err(Error::Params {
                layer: 0,
                tensor: ParamTensor::Weight,
                expected: desc.layers.len() as u32,
                found: init.len() as u32,
            });
        }
        for (k, (l, p)) in desc.layers.iter().zip(init.iter()).enumerate() {
            if l.kind.has_params() {
                let g = &plan.shapes.layers[k];
                check_len(k, ParamTensor::Weight, p.weight, g.weights)?;
                check_len(k, ParamTensor::Bias, p.bias, g.biases)?;
                flash[k] = *p;
            }
        }
        let mut t = Twin {
            desc,
            plan,
            arena,
            flash,
            in_batch: 0,
            steps: 0,
            updates: 0,
        };
        t.load(init)?;
        Ok(t)
    }

    /// Replaces the trainable parameters and clears accumulators, momentum and the batch.
    ///
    /// # Errors
    /// [`Error::Params`] or [`Error::NotFinite`].
    pub fn load(&mut self, params: &[FloatParams<'_, R>]) -> Result<(), Error> {
        if params.len() != self.desc.layers.len() {
            return Err(Error::Params {
                layer: 0,
                tensor: ParamTensor::Weight,
                expected: self.desc.layers.len() as u32,
                found: params.len() as u32,
            });
        }
        for (k, (l, p)) in self.desc.layers.iter().zip(params.iter()).enumerate() {
            if !l.kind.has_params() {
                continue;
            }
            let g = &self.plan.shapes.layers[k];
            check_len(k, ParamTensor::Weight, p.weight, g.weights)?;
            check_len(k, ParamTensor::Bias, p.bias, g.biases)?;
            let s = self.plan.layers[k];
            let [w, b, aw, ab, vw, vb] = carve(
                self.arena,
                [
                    s.weight,
                    s.bias,
                    s.accum_weight,
                    s.accum_bias,
                    s.momentum_weight,
                    s.momentum_bias,
                ],
            );
            if s.weight.is_some() {
                w.copy_from_slice(p.weight);
            }
            if s.bias.is_some() {
                b.copy_from_slice(p.bias);
            }
            for buf in [aw, ab, vw, vb] {
                buf.fill(R::ZERO);
            }
        }
        self.in_batch = 0;
        Ok(())
    }

    /// Samples stepped.
    pub fn steps(&self) -> u32 {
        self.steps
    }

    /// Updates applied.
    pub fn updates(&self) -> u32 {
        self.updates
    }

    /// Current parameters of layer `k` (`None` without parameters).
    pub fn params(&self, k: usize) -> Option<FloatParams<'_, R>> {
        let l = self.desc.layers.get(k)?;
        if !l.kind.has_params() {
            return None;
        }
        let s = self.plan.layers[k];
        let f = self.flash[k];
        let w = self.slice(s.weight);
        let b = self.slice(s.bias);
        Some(FloatParams {
            weight: pick(w, s.weight, f.weight),
            bias: pick(b, s.bias, f.bias),
        })
    }

    /// The gradient accumulators of layer `k` (sums over the samples of the current batch):
    /// weights and bias, each empty where that tensor does not train.
    pub fn accumulators(&self, k: usize) -> Option<FloatParams<'_, R>> {
        let s = self
            .plan
            .layers
            .get(k)
            .filter(|_| k < self.desc.layers.len())?;
        Some(FloatParams {
            weight: self.slice(s.accum_weight),
            bias: self.slice(s.accum_bias),
        })
    }

    /// The output of the last forward pass.
    pub fn output(&self) -> &[R] {
        let last = self.desc.layers.len() - 1;
        let slot = Slot {
            elems: self.plan.shapes.output.size(),
            ..self.plan.output_slot(last)
        };
        self.slice(slot)
    }

    fn slice(&self, s: Slot) -> &[R] {
        let (a, n) = range::<R>(s);
        self.arena.get(a..a + n).unwrap_or(&[])
    }

    /// One training step: forward, loss, backward, accumulate; update at the end of a batch.
    ///
    /// # Errors
    /// [`Error::InputLength`], [`Error::TargetLength`], [`Error::TargetKind`],
    /// [`Error::LabelOutOfRange`], or [`Error::NotFinite`] for a NaN or infinite input.
    pub fn step(&mut self, x: &[R], target: FloatTarget<'_, R>) -> Result<FloatOutcome<R>, Error> {
        self.check(x, target)?;
        self.forward(x);
        let trains = self.plan.trains();
        let (loss, predicted) = self.loss(target, trains);
        if trains {
            for k in (self.plan.first_trainable..self.desc.layers.len()).rev() {
                self.backward(k, x);
            }
        }
        self.steps = self.steps.saturating_add(1);
        let mut updated = false;
        if trains {
            self.in_batch += 1;
            if self.in_batch >= self.desc.train.batch {
                self.apply_update();
                updated = true;
            }
        }
        Ok(FloatOutcome {
            loss,
            predicted,
            updated,
        })
    }

    /// Measures the gradients of `samples` without training (see
    /// [`crate::train::Trainer::probe_gradients`]); read them with [`Twin::accumulators`],
    /// then call [`Twin::clear_probe`].
    ///
    /// # Errors
    /// [`Error::InvalidTraining`] while a batch is pending; sample errors as in [`Twin::step`].
    pub fn probe_gradients<'s, I>(&mut self, samples: I) -> Result<u32, Error>
    where
        R: 's,
        I: IntoIterator<Item = (&'s [R], FloatTarget<'s, R>)>,
    {
        if self.in_batch != 0 {
            return Err(Error::InvalidTraining);
        }
        let mut n = 0;
        for (x, t) in samples {
            self.check(x, t)?;
            self.forward(x);
            self.loss(t, true);
            for k in (self.plan.first_trainable..self.desc.layers.len()).rev() {
                self.backward(k, x);
            }
            n += 1;
        }
        Ok(n)
    }

    /// Clears the accumulators after a probe.
    pub fn clear_probe(&mut self) {
        for s in self.plan.layers.iter().take(self.desc.layers.len()) {
            let [aw, ab] = carve(self.arena, [s.accum_weight, s.accum_bias]);
            aw.fill(R::ZERO);
            ab.fill(R::ZERO);
        }
    }

    /// Applies a partial batch now. Returns whether it updated.
    pub fn flush(&mut self) -> bool {
        if self.in_batch == 0 || !self.plan.trains() {
            return false;
        }
        self.apply_update();
        true
    }

    /// Loss of one sample without training.
    ///
    /// # Errors
    /// As [`Twin::step`].
    pub fn evaluate(
        &mut self,
        x: &[R],
        target: FloatTarget<'_, R>,
    ) -> Result<FloatOutcome<R>, Error> {
        self.check(x, target)?;
        self.forward(x);
        let (loss, predicted) = self.loss(target, false);
        Ok(FloatOutcome {
            loss,
            predicted,
            updated: false,
        })
    }

    /// Forward only; returns the output.
    ///
    /// # Errors
    /// [`Error::InputLength`] or [`Error::NotFinite`].
    pub fn predict(&mut self, x: &[R]) -> Result<&[R], Error> {
        self.check_input(x)?;
        self.forward(x);
        Ok(self.output())
    }

    fn check_input(&self, x: &[R]) -> Result<(), Error> {
        let expected = self.desc.input.size();
        if x.len() != expected as usize {
            return Err(Error::InputLength {
                expected,
                found: x.len() as u32,
            });
        }
        if x.iter().any(|v| !v.is_finite()) {
            return Err(Error::NotFinite);
        }
        Ok(())
    }

    fn check(&self, x: &[R], target: FloatTarget<'_, R>) -> Result<(), Error> {
        self.check_input(x)?;
        let outputs = self.plan.shapes.output.size();
        match (self.desc.loss, target) {
            (Loss::SquaredError, FloatTarget::Values(t)) => {
                if t.len() != outputs as usize {
                    return Err(Error::TargetLength {
                        expected: outputs,
                        found: t.len() as u32,
                    });
                }
                if t.iter().any(|v| !v.is_finite()) {
                    return Err(Error::NotFinite);
                }
            }
            (Loss::SoftmaxCrossEntropy, FloatTarget::Class(c)) => {
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

    fn layer(&self, k: usize) -> LayerDesc {
        self.desc.layers[k]
    }

    fn forward(&mut self, x: &[R]) {
        for k in 0..self.desc.layers.len() {
            let l = self.layer(k);
            let g = self.plan.shapes.layers[k];
            let s = self.plan.layers[k];
            let in_slot = if k == 0 {
                Slot::NONE
            } else {
                self.plan.output_slot(k - 1)
            };
            let f = self.flash[k];
            let [w, b, xin, y] = carve(
                self.arena,
                [
                    s.weight,
                    s.bias,
                    Slot {
                        elems: g.input.size(),
                        ..in_slot
                    },
                    Slot {
                        elems: g.output.size(),
                        ..self.plan.output_slot(k)
                    },
                ],
            );
            let w = pick(w, s.weight, f.weight);
            let b = pick(b, s.bias, f.bias);
            let xin: &[R] = if k == 0 { x } else { xin };
            forward(l.kind, &g, w, b, xin, y);
        }
    }

    fn loss(&mut self, target: FloatTarget<'_, R>, grad: bool) -> (R, Option<u16>) {
        let last = self.desc.layers.len() - 1;
        let n = self.plan.shapes.output.size();
        let gslot = if grad {
            Slot {
                elems: n,
                ..self.plan.grad_slot(last)
            }
        } else {
            Slot::NONE
        };
        let [y, gy] = carve(
            self.arena,
            [
                Slot {
                    elems: n,
                    ..self.plan.output_slot(last)
                },
                gslot,
            ],
        );
        match target {
            FloatTarget::Values(t) => {
                let mut loss = R::ZERO;
                for (j, (&yv, &tv)) in y.iter().zip(t.iter()).enumerate() {
                    let e = yv - tv;
                    loss += R::from_f64(0.5) * e * e;
                    if let Some(g) = gy.get_mut(j) {
                        *g = e;
                    }
                }
                (loss, None)
            }
            // Not built: the plan rejects the loss, so never reached.
            FloatTarget::Class(_) if !cfg!(feature = "cross-entropy") => (R::ZERO, None),
            FloatTarget::Class(c) => {
                let best = argmax(y);
                let zmax = y.get(best).copied().unwrap_or(R::ZERO);
                let mut sum = R::ZERO;
                for &v in y.iter() {
                    sum += (v - zmax).exp();
                }
                for (j, g) in gy.iter_mut().enumerate() {
                    let p = (y.get(j).copied().unwrap_or(zmax) - zmax).exp() / sum;
                    *g = if j == c as usize { p - R::ONE } else { p };
                }
                let zc = y.get(c as usize).copied().unwrap_or(R::ZERO);
                (sum.ln() + (zmax - zc), Some(best as u16))
            }
        }
    }

    fn backward(&mut self, k: usize, x: &[R]) {
        let l = self.layer(k);
        let g = self.plan.shapes.layers[k];
        let s = self.plan.layers[k];
        let first = self.plan.first_trainable;
        let f = self.flash[k];
        let in_slot = if k == 0 || !reads_input(&self.desc.layers, k, first) {
            Slot::NONE
        } else {
            Slot {
                elems: g.input.size(),
                ..self.plan.output_slot(k - 1)
            }
        };
        let gx_slot = if k > first {
            Slot {
                elems: g.input.size(),
                ..self.plan.grad_slot(k - 1)
            }
        } else {
            Slot::NONE
        };
        let gy_slot = Slot {
            elems: g.output.size(),
            ..self.plan.grad_slot(k)
        };
        let [w, xin, y, gy, gx, aw, ab] = carve(
            self.arena,
            [
                s.weight,
                in_slot,
                s.kept,
                gy_slot,
                gx_slot,
                s.accum_weight,
                s.accum_bias,
            ],
        );
        let w = pick(w, s.weight, f.weight);
        let xin: &[R] = if k == 0 { x } else { xin };
        backward(l.kind, &g, w, xin, y, gy, gx, aw, ab);
    }

    fn apply_update(&mut self) {
        let t = self.desc.train;
        let n = R::from_f64(self.in_batch.max(1) as f64);
        let lr = R::from_f64(t.lr.to_f64());
        let mu = R::from_f64(t.momentum.to_f64());
        let decay = R::from_f64(t.weight_decay.to_f64());
        let clip = R::from_f64(t.clip.to_f64());
        let (with_mu, with_decay, with_clip) = (
            !t.momentum.is_zero(),
            !t.weight_decay.is_zero(),
            !t.clip.is_zero(),
        );
        for k in 0..self.desc.layers.len() {
            let s = self.plan.layers[k];
            let [w, b, aw, ab, vw, vb] = carve(
                self.arena,
                [
                    s.weight,
                    s.bias,
                    s.accum_weight,
                    s.accum_bias,
                    s.momentum_weight,
                    s.momentum_bias,
                ],
            );
            for (value, acc, mom) in [(w, aw, vw), (b, ab, vb)] {
                for (i, (wv, a)) in value.iter_mut().zip(acc.iter_mut()).enumerate() {
                    let mut g = *a / n;
                    *a = R::ZERO;
                    if with_clip {
                        g = if g > clip {
                            clip
                        } else if g < -clip {
                            -clip
                        } else {
                            g
                        };
                    }
                    if with_decay {
                        g += decay * *wv;
                    }
                    if with_mu {
                        if let Some(v) = mom.get_mut(i) {
                            *v = mu * *v + g;
                            g = *v;
                        }
                    }
                    *wv = *wv - lr * g;
                }
            }
        }
        self.in_batch = 0;
        self.updates = self.updates.saturating_add(1);
    }
}

fn check_len<R>(k: usize, tensor: ParamTensor, v: &[R], elems: u32) -> Result<(), Error> {
    if v.len() != elems as usize {
        return Err(Error::Params {
            layer: k as u8,
            tensor,
            expected: elems,
            found: v.len() as u32,
        });
    }
    Ok(())
}

fn argmax<R: Real>(y: &[R]) -> usize {
    let mut best = 0;
    for (j, v) in y.iter().enumerate() {
        if let Some(b) = y.get(best) {
            if *v > *b {
                best = j;
            }
        }
    }
    best
}

fn at<R: Real>(v: &[R], i: usize) -> R {
    v.get(i).copied().unwrap_or(R::ZERO)
}

fn first_max<R: Real>(x: &[R], base: usize, start: usize, w: usize) -> usize {
    let mut best = start;
    for i in start + 1..start + w {
        if at(x, base + i) > at(x, base + best) {
            best = i;
        }
    }
    best
}

/// Forward pass of one layer in float.
pub fn forward<R: Real>(
    kind: LayerKind,
    g: &LayerGeometry,
    w: &[R],
    b: &[R],
    x: &[R],
    y: &mut [R],
) {
    let (c_in, l_in) = (g.input.channels as usize, g.input.len as usize);
    let (c_out, l_out) = (g.output.channels as usize, g.output.len as usize);
    match kind {
        LayerKind::Dense { .. } => {
            let n_in = g.input.size() as usize;
            for (j, yj) in y.iter_mut().enumerate() {
                let mut s = at(b, j);
                for i in 0..n_in {
                    s += at(w, j * n_in + i) * at(x, i);
                }
                *yj = s;
            }
        }
        LayerKind::Conv1d { kernel, stride, .. } if cfg!(feature = "conv1d") => {
            let (k, st) = (kernel as usize, stride as usize);
            for o in 0..c_out {
                for t in 0..l_out {
                    let mut s = at(b, o);
                    for c in 0..c_in {
                        for kk in 0..k {
                            s += at(w, (o * c_in + c) * k + kk) * at(x, c * l_in + t * st + kk);
                        }
                    }
                    if let Some(v) = y.get_mut(o * l_out + t) {
                        *v = s;
                    }
                }
            }
        }
        LayerKind::AvgPool1d { window, stride } | LayerKind::MaxPool1d { window, stride }
            if cfg!(feature = "pool1d") =>
        {
            let (wn, st) = (window as usize, stride as usize);
            let avg = matches!(kind, LayerKind::AvgPool1d { .. });
            for c in 0..c_in {
                for t in 0..l_out {
                    let v = if avg {
                        let mut s = R::ZERO;
                        for kk in 0..wn {
                            s += at(x, c * l_in + t * st + kk);
                        }
                        s / R::from_f64(wn as f64)
                    } else {
                        at(x, c * l_in + first_max(x, c * l_in, t * st, wn))
                    };
                    if let Some(o) = y.get_mut(c * l_out + t) {
                        *o = v;
                    }
                }
            }
        }
        // Not built: the plan rejects these kinds, so never reached.
        LayerKind::Conv1d { .. } | LayerKind::AvgPool1d { .. } | LayerKind::MaxPool1d { .. } => {}
        _ => {
            for (i, yi) in y.iter_mut().enumerate() {
                let v = at(x, i);
                *yi = match kind {
                    LayerKind::Relu => {
                        if v > R::ZERO {
                            v
                        } else {
                            R::ZERO
                        }
                    }
                    LayerKind::LeakyRelu { shift } => {
                        if v > R::ZERO {
                            v
                        } else {
                            v * R::from_f64(crate::num::format::pow2(-(shift as i32)))
                        }
                    }
                    LayerKind::HardTanh => clamp(v, -R::ONE, R::ONE),
                    LayerKind::ClippedRelu { ceiling } => {
                        clamp(v, R::ZERO, R::from_f64(ceiling as f64))
                    }
                    LayerKind::Sigmoid if cfg!(feature = "table-activations") => v.sigmoid(),
                    LayerKind::Tanh if cfg!(feature = "table-activations") => v.tanh(),
                    _ => v,
                };
            }
        }
    }
}

fn clamp<R: Real>(v: R, lo: R, hi: R) -> R {
    if v < lo {
        lo
    } else if v > hi {
        hi
    } else {
        v
    }
}

/// Backward pass of one layer in float: input gradient into `gx` (if not empty), weight and
/// bias gradients added into `aw` and `ab` (if not empty).
#[allow(clippy::too_many_arguments)]
pub fn backward<R: Real>(
    kind: LayerKind,
    g: &LayerGeometry,
    w: &[R],
    x: &[R],
    y: &[R],
    gy: &[R],
    gx: &mut [R],
    aw: &mut [R],
    ab: &mut [R],
) {
    let (c_in, l_in) = (g.input.channels as usize, g.input.len as usize);
    let (c_out, l_out) = (g.output.channels as usize, g.output.len as usize);
    match kind {
        LayerKind::Dense { .. } => {
            let (n_in, n_out) = (g.input.size() as usize, g.output.size() as usize);
            for (i, v) in gx.iter_mut().enumerate() {
                let mut s = R::ZERO;
                for j in 0..n_out {
                    s += at(w, j * n_in + i) * at(gy, j);
                }
                *v = s;
            }
            if !aw.is_empty() {
                for j in 0..n_out {
                    for i in 0..n_in {
                        if let Some(a) = aw.get_mut(j * n_in + i) {
                            *a += at(gy, j) * at(x, i);
                        }
                    }
                }
            }
            for (j, a) in ab.iter_mut().enumerate() {
                *a += at(gy, j);
            }
        }
        LayerKind::Conv1d { kernel, stride, .. } if cfg!(feature = "conv1d") => {
            let (k, st) = (kernel as usize, stride as usize);
            for c in 0..c_in {
                for i in 0..l_in {
                    let Some(v) = gx.get_mut(c * l_in + i) else {
                        continue;
                    };
                    let mut s = R::ZERO;
                    for o in 0..c_out {
                        for t in crate::layer::conv::covering(i, k, st, l_out) {
                            s += at(w, (o * c_in + c) * k + (i - t * st)) * at(gy, o * l_out + t);
                        }
                    }
                    *v = s;
                }
            }
            if !aw.is_empty() {
                for o in 0..c_out {
                    for c in 0..c_in {
                        for kk in 0..k {
                            let mut s = R::ZERO;
                            for t in 0..l_out {
                                s += at(gy, o * l_out + t) * at(x, c * l_in + t * st + kk);
                            }
                            if let Some(a) = aw.get_mut((o * c_in + c) * k + kk) {
                                *a += s;
                            }
                        }
                    }
                }
            }
            for (o, a) in ab.iter_mut().enumerate() {
                let mut s = R::ZERO;
                for t in 0..l_out {
                    s += at(gy, o * l_out + t);
                }
                *a += s;
            }
        }
        LayerKind::AvgPool1d { window, stride } | LayerKind::MaxPool1d { window, stride }
            if cfg!(feature = "pool1d") =>
        {
            let (wn, st) = (window as usize, stride as usize);
            let avg = matches!(kind, LayerKind::AvgPool1d { .. });
            for c in 0..c_in {
                for i in 0..l_in {
                    let Some(v) = gx.get_mut(c * l_in + i) else {
                        continue;
                    };
                    let mut s = R::ZERO;
                    for t in crate::layer::conv::covering(i, wn, st, l_out) {
                        if avg || first_max(x, c * l_in, t * st, wn) == i {
                            s += at(gy, c * l_out + t);
                        }
                    }
                    *v = if avg { s / R::from_f64(wn as f64) } else { s };
                }
            }
        }
        // Not built: the plan rejects these kinds, so never reached.
        LayerKind::Conv1d { .. } | LayerKind::AvgPool1d { .. } | LayerKind::MaxPool1d { .. } => {}
        _ => {
            for (i, v) in gx.iter_mut().enumerate() {
                let (xv, yv, gv) = (at(x, i), at(y, i), at(gy, i));
                *v = match kind {
                    LayerKind::Relu => {
                        if xv > R::ZERO {
                            gv
                        } else {
                            R::ZERO
                        }
                    }
                    LayerKind::LeakyRelu { shift } => {
                        if xv > R::ZERO {
                            gv
                        } else {
                            gv * R::from_f64(crate::num::format::pow2(-(shift as i32)))
                        }
                    }
                    LayerKind::HardTanh => {
                        if xv > -R::ONE && xv < R::ONE {
                            gv
                        } else {
                            R::ZERO
                        }
                    }
                    LayerKind::ClippedRelu { ceiling } => {
                        if xv > R::ZERO && xv < R::from_f64(ceiling as f64) {
                            gv
                        } else {
                            R::ZERO
                        }
                    }
                    LayerKind::Sigmoid if cfg!(feature = "table-activations") => {
                        yv * (R::ONE - yv) * gv
                    }
                    LayerKind::Tanh if cfg!(feature = "table-activations") => {
                        (R::ONE - yv * yv) * gv
                    }
                    _ => gv,
                };
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::{ParamFormats, Shape, TrainDesc, TrainMode};
    use crate::num::{QFormat, QScalar, Word};

    fn predict(
        layers: &[LayerDesc],
        params: &[(std::vec::Vec<f64>, std::vec::Vec<f64>)],
        x: &[f64],
    ) -> std::vec::Vec<f64> {
        let desc = ModelDesc::new(
            Shape::vector(x.len() as u16),
            QFormat::Q7_8,
            layers,
            Loss::SquaredError,
            TrainDesc::sgd(QScalar { raw: 1, frac: 8 }),
        )
        .unwrap();
        let plan = Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 8).unwrap();
        let mut arena = std::vec![0f64; plan.ram_bytes as usize / 8];
        let init: std::vec::Vec<FloatParams<'_, f64>> = params
            .iter()
            .map(|(w, b)| FloatParams { weight: w, bias: b })
            .collect();
        let mut twin = Twin::new(&desc, &plan, &mut arena, &init).unwrap();
        twin.predict(x).unwrap().to_vec()
    }

    fn dense(units: u16, mode: TrainMode, out: Word) -> LayerDesc {
        let p = ParamFormats::plain(QFormat::new_unchecked(Word::I16, 12), 24);
        LayerDesc {
            kind: LayerKind::Dense { units },
            mode,
            weight: p,
            bias: p,
            out: QFormat::new_unchecked(out, 4),
            grad: QFormat::Q7_8,
        }
    }

    #[test]
    fn float_scratch_fits_layers_of_any_word() {
        // A narrow-word layer with more values shares a scratch parity with a wide-word one:
        // in a float plan every value is a float, so the larger count must decide the size.
        let mixed = |a: Word, b: Word| {
            std::vec![
                dense(10, TrainMode::Frozen, a),
                LayerDesc::simple(LayerKind::Relu, QFormat::new_unchecked(a, 4), QFormat::Q7_8),
                dense(30, TrainMode::Frozen, b),
                LayerDesc::simple(LayerKind::Relu, QFormat::new_unchecked(b, 4), QFormat::Q7_8),
                dense(2, TrainMode::BiasOnly, Word::I16),
            ]
        };
        let params = std::vec![
            (std::vec![0.1; 40], std::vec![0.0; 10]),
            (std::vec::Vec::new(), std::vec::Vec::new()),
            (std::vec![0.05; 300], std::vec![0.0; 30]),
            (std::vec::Vec::new(), std::vec::Vec::new()),
            (std::vec![0.2; 60], std::vec![0.0; 2]),
        ];
        let x = [1.0, 2.0, 3.0, 4.0];
        let wide = predict(&mixed(Word::I32, Word::I32), &params, &x);
        let narrow = predict(&mixed(Word::I32, Word::I8), &params, &x);
        // Formats do not matter to the float twin: both must compute the same network.
        assert_eq!(wide, narrow);
        // 0.1·(1+2+3+4) = 1 per hidden unit; 30 units of 0.05·10·1 = 0.5; 0.2·30·0.5 = 3.
        assert!((wide[0] - 3.0).abs() < 1e-12, "{wide:?}");
    }

    #[test]
    fn frozen_model_predicts() {
        let layers = [
            dense(3, TrainMode::Frozen, Word::I16),
            LayerDesc::simple(LayerKind::Relu, QFormat::Q7_8, QFormat::Q7_8),
        ];
        let params = std::vec![
            (
                std::vec![1.0, 1.5, 2.0, 3.0, 4.0, 5.5],
                std::vec![1.0, 3.0, 1.0]
            ),
            (std::vec::Vec::new(), std::vec::Vec::new())
        ];
        // Rows [1, 1.5], [2, 3], [4, 5.5] times [1, 1] plus the bias.
        assert_eq!(
            predict(&layers, &params, &[1.0, 1.0]),
            std::vec![3.5, 8.0, 10.5]
        );
    }
}
