//! Shared helpers for the cross-checks in `tests/tests/`: owned tensors, quick model
//! builders, and a small interval arithmetic used to derive fixed-point tolerances from the
//! formats instead of picking them by hand.

use hone_core::model::{LayerDesc, LayerKind, ParamFormats, TrainMode};
use hone_core::num::{QFormat, Raw, Word};

/// Owned raw values of one word size.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Owned {
    /// `i8` values.
    I8(Vec<i8>),
    /// `i16` values.
    I16(Vec<i16>),
    /// `i32` values.
    I32(Vec<i32>),
}

impl Owned {
    /// Quantizes `values` into `fmt` (nearest, ties to even, saturating). Panics on NaN: test
    /// data are finite by construction.
    pub fn quantize(values: &[f64], fmt: QFormat) -> Owned {
        let raw: Vec<i32> = values
            .iter()
            .map(|&v| fmt.from_f64_saturating(v).expect("finite test data").0)
            .collect();
        match fmt.word {
            Word::I8 => Owned::I8(raw.iter().map(|&v| v as i8).collect()),
            Word::I16 => Owned::I16(raw.iter().map(|&v| v as i16).collect()),
            Word::I32 => Owned::I32(raw),
        }
    }

    /// A borrowed view.
    pub fn raw(&self) -> Raw<'_> {
        match self {
            Owned::I8(v) => Raw::I8(v),
            Owned::I16(v) => Raw::I16(v),
            Owned::I32(v) => Raw::I32(v),
        }
    }

    /// Real values of a borrowed tensor in `fmt`.
    pub fn real(raw: Raw<'_>, fmt: QFormat) -> Vec<f64> {
        (0..raw.len()).map(|i| fmt.to_f64(raw.at(i))).collect()
    }
}

/// A Q-format by word bits and fraction bits.
pub fn q(bits: u32, frac: u8) -> QFormat {
    QFormat::new(Word::from_bits(bits).expect("8, 16 or 32 bits"), frac).expect("valid test format")
}

/// A dense layer with the same value format for weights and bias.
pub fn dense(
    units: u16,
    mode: TrainMode,
    value: QFormat,
    accum: QFormat,
    out: QFormat,
    grad: QFormat,
) -> LayerDesc {
    let p = ParamFormats {
        value,
        master: None,
        accum,
    };
    LayerDesc {
        kind: LayerKind::Dense { units },
        mode,
        weight: p,
        bias: p,
        out,
        grad,
    }
}

/// A closed interval of reals, for worst-case error propagation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Interval {
    /// Lower end.
    pub lo: f64,
    /// Upper end.
    pub hi: f64,
}

impl Interval {
    /// `[x − e, x + e]`.
    pub fn around(x: f64, e: f64) -> Interval {
        Interval {
            lo: x - e,
            hi: x + e,
        }
    }

    /// A single point.
    pub fn point(x: f64) -> Interval {
        Interval { lo: x, hi: x }
    }

    /// The interval widened by `e` on both sides (one rounding of at most `e`).
    pub fn widen(self, e: f64) -> Interval {
        Interval {
            lo: self.lo - e,
            hi: self.hi + e,
        }
    }

    /// Rounding into `fmt` to nearest: widened by half a step.
    pub fn round(self, fmt: QFormat) -> Interval {
        self.widen(fmt.step() / 2.0)
    }

    /// Sum.
    pub fn plus(self, o: Interval) -> Interval {
        Interval {
            lo: self.lo + o.lo,
            hi: self.hi + o.hi,
        }
    }

    /// Difference.
    pub fn minus(self, o: Interval) -> Interval {
        Interval {
            lo: self.lo - o.hi,
            hi: self.hi - o.lo,
        }
    }

    /// Product.
    pub fn times(self, o: Interval) -> Interval {
        let c = [
            self.lo * o.lo,
            self.lo * o.hi,
            self.hi * o.lo,
            self.hi * o.hi,
        ];
        Interval {
            lo: c.iter().cloned().fold(f64::INFINITY, f64::min),
            hi: c.iter().cloned().fold(f64::NEG_INFINITY, f64::max),
        }
    }

    /// Image under a non-decreasing function.
    pub fn monotone(self, f: impl Fn(f64) -> f64) -> Interval {
        Interval {
            lo: f(self.lo),
            hi: f(self.hi),
        }
    }

    /// Whether `x` lies inside.
    pub fn contains(self, x: f64) -> bool {
        self.lo <= x && x <= self.hi
    }

    /// Half the width: the tolerance around the midpoint.
    pub fn radius(self) -> f64 {
        (self.hi - self.lo) / 2.0
    }
}

/// Logistic sigmoid in f64.
pub fn sigmoid(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

/// A labelled or regression sample set in `f64`.
#[derive(Clone, Debug, Default)]
pub struct Samples {
    /// Inputs, one row per sample.
    pub x: Vec<Vec<f64>>,
    /// Regression targets, one row per sample (empty for classification).
    pub y: Vec<Vec<f64>>,
    /// Class labels (empty for regression).
    pub label: Vec<u16>,
}

/// The order of samples in every epoch: a seeded Fisher–Yates shuffle per epoch, shared by
/// the fixed-point run and its float twin.
pub fn epoch_order(n: usize, epoch: u32, seed: u64) -> Vec<usize> {
    let mut rng = hone_core::num::Rng::new(seed ^ ((epoch as u64) << 32));
    let mut order: Vec<usize> = (0..n).collect();
    for i in (1..n).rev() {
        let j = rng.below(i as u64 + 1) as usize;
        order.swap(i, j);
    }
    order
}

/// Uniform initial weights in ±1/√fan_in (a common-practice scale), seeded.
pub fn init_params(desc: &hone_core::model::ModelDesc, seed: u64) -> Vec<(Vec<f64>, Vec<f64>)> {
    let shapes =
        hone_core::model::shapes(desc.input, &desc.layers, desc.loss).expect("valid description");
    let mut rng = hone_core::num::Rng::new(seed);
    (0..desc.layers.len())
        .map(|k| {
            let g = shapes.layers[k];
            let s = 1.0 / (g.input.size() as f64).sqrt();
            let w = (0..g.weights)
                .map(|_| s * (2.0 * (rng.next_u32() as f64 / 4294967296.0) - 1.0))
                .collect();
            (w, vec![0.0; g.biases as usize])
        })
        .collect()
}

/// What [`run_pair`] measured.
#[derive(Clone, Debug, Default)]
pub struct PairResult {
    /// Mean training loss of each epoch, fixed point.
    pub fixed_loss: Vec<f64>,
    /// Mean training loss of each epoch, float twin.
    pub float_loss: Vec<f64>,
    /// Correct predictions on the evaluation set, fixed point.
    pub fixed_correct: usize,
    /// Correct predictions on the evaluation set, float twin.
    pub float_correct: usize,
    /// Mean evaluation loss, fixed point.
    pub fixed_eval_loss: f64,
    /// Mean evaluation loss, float twin.
    pub float_eval_loss: f64,
    /// Lost updates summed over all parameter tensors.
    pub lost_updates: u64,
    /// Weight and bias update writes summed over all parameter tensors.
    pub update_writes: u64,
    /// Final fixed-point parameters as reals, per layer.
    pub fixed_params: Vec<(Vec<f64>, Vec<f64>)>,
}

/// Trains a fixed-point model and its f64 twin from the same float start (the fixed one
/// quantized to its formats), on the same samples in the same order, then evaluates both.
pub fn run_pair(
    desc: &hone_core::model::ModelDesc,
    params: &[(Vec<f64>, Vec<f64>)],
    train: &Samples,
    eval: &Samples,
    epochs: u32,
    seed: u64,
) -> PairResult {
    use hone_core::float::{FloatParams, FloatTarget, Twin};
    use hone_core::layer::loss::Target;
    use hone_core::layer::Tensor;
    use hone_core::plan::Plan;
    use hone_core::train::{LayerParams, Trainer};

    let plan = Plan::of(desc).expect("plan");
    let fplan =
        Plan::new_float(desc.input, &desc.layers, desc.loss, &desc.train, 8).expect("float plan");
    let mut arena = vec![0u32; plan.ram_words()];
    let mut farena = vec![0f64; fplan.ram_bytes as usize / 8];
    let owned: Vec<(Owned, Owned)> = desc
        .layers
        .iter()
        .zip(params)
        .map(|(l, (w, b))| {
            (
                Owned::quantize(w, l.weight.value),
                Owned::quantize(b, l.bias.value),
            )
        })
        .collect();
    let init: Vec<LayerParams<'_>> = owned
        .iter()
        .map(|(w, b)| LayerParams {
            weight: w.raw(),
            bias: b.raw(),
        })
        .collect();
    let finit: Vec<FloatParams<'_, f64>> = params
        .iter()
        .map(|(w, b)| FloatParams { weight: w, bias: b })
        .collect();
    let mut fixed = Trainer::new(desc, &plan, &mut arena, &init).expect("trainer");
    let mut float = Twin::new(desc, &fplan, &mut farena, &finit).expect("twin");
    let in_fmt = desc.input_format;
    let out_fmt = desc.layers.last().expect("layers").out;
    let quant = |s: &Samples| -> (Vec<Owned>, Vec<Owned>) {
        (
            s.x.iter().map(|x| Owned::quantize(x, in_fmt)).collect(),
            s.y.iter().map(|y| Owned::quantize(y, out_fmt)).collect(),
        )
    };
    let (tx, ty) = quant(train);
    let (ex, ey) = quant(eval);
    let mut r = PairResult::default();
    let n = train.x.len();
    for epoch in 0..epochs {
        let (mut lf, mut lq) = (0.0, 0.0);
        for i in epoch_order(n, epoch, seed) {
            let (tq, tf) = if train.label.is_empty() {
                (
                    Target::Values(Tensor {
                        raw: ty[i].raw(),
                        fmt: out_fmt,
                    }),
                    FloatTarget::Values(&train.y[i][..]),
                )
            } else {
                (
                    Target::Class(train.label[i]),
                    FloatTarget::Class(train.label[i]),
                )
            };
            lq += fixed
                .step(
                    Tensor {
                        raw: tx[i].raw(),
                        fmt: in_fmt,
                    },
                    tq,
                )
                .expect("fixed step")
                .loss
                .to_f64();
            lf += float.step(&train.x[i], tf).expect("float step").loss;
        }
        fixed.flush();
        float.flush();
        r.fixed_loss.push(lq / n as f64);
        r.float_loss.push(lf / n as f64);
    }
    for i in 0..eval.x.len() {
        let (tq, tf) = if eval.label.is_empty() {
            (
                Target::Values(Tensor {
                    raw: ey[i].raw(),
                    fmt: out_fmt,
                }),
                FloatTarget::Values(&eval.y[i][..]),
            )
        } else {
            (
                Target::Class(eval.label[i]),
                FloatTarget::Class(eval.label[i]),
            )
        };
        let q = fixed
            .evaluate(
                Tensor {
                    raw: ex[i].raw(),
                    fmt: in_fmt,
                },
                tq,
            )
            .expect("fixed eval");
        let f = float.evaluate(&eval.x[i], tf).expect("float eval");
        r.fixed_eval_loss += q.loss.to_f64() / eval.x.len() as f64;
        r.float_eval_loss += f.loss / eval.x.len() as f64;
        if let Some(&label) = eval.label.get(i) {
            r.fixed_correct += (q.predicted == Some(label)) as usize;
            r.float_correct += (f.predicted == Some(label)) as usize;
        }
    }
    for (k, l) in desc.layers.iter().enumerate() {
        let st = fixed.stats(k).expect("stats");
        r.lost_updates += (st.weight.lost_updates + st.bias.lost_updates) as u64;
        r.update_writes += (st.weight.values + st.bias.values) as u64;
        r.fixed_params.push(match fixed.params(k) {
            Some(p) => (
                Owned::real(p.weight, l.weight.value),
                Owned::real(p.bias, l.bias.value),
            ),
            None => (Vec::new(), Vec::new()),
        });
    }
    r
}

/// The UCI iris table (Fisher 1936, UCI Machine Learning Repository) as shipped inside the
/// `linfa-datasets` crate (feature `iris`).
///
/// Split 70/30 per class by a seeded shuffle, features standardized with the training
/// split's mean and standard deviation.
pub fn iris_split(seed: u64) -> (Samples, Samples) {
    let ds = linfa_datasets::iris();
    let records = ds.records();
    let targets = ds.targets();
    assert_eq!(records.nrows(), 150, "the iris table has 150 rows");
    let mut by_class: Vec<Vec<usize>> = vec![Vec::new(); 3];
    for (i, &t) in targets.iter().enumerate() {
        by_class[t].push(i);
    }
    let (mut train_idx, mut test_idx) = (Vec::new(), Vec::new());
    for (c, idx) in by_class.iter().enumerate() {
        assert_eq!(idx.len(), 50, "50 rows per class");
        let order = epoch_order(idx.len(), c as u32, seed);
        for (j, &o) in order.iter().enumerate() {
            if j < 35 {
                train_idx.push(idx[o])
            } else {
                test_idx.push(idx[o])
            }
        }
    }
    let mean: Vec<f64> = (0..4)
        .map(|f| train_idx.iter().map(|&i| records[[i, f]]).sum::<f64>() / train_idx.len() as f64)
        .collect();
    let std: Vec<f64> = (0..4)
        .map(|f| {
            (train_idx
                .iter()
                .map(|&i| (records[[i, f]] - mean[f]).powi(2))
                .sum::<f64>()
                / train_idx.len() as f64)
                .sqrt()
        })
        .collect();
    let make = |idx: &[usize]| Samples {
        x: idx
            .iter()
            .map(|&i| {
                (0..4)
                    .map(|f| (records[[i, f]] - mean[f]) / std[f])
                    .collect()
            })
            .collect(),
        y: Vec::new(),
        label: idx.iter().map(|&i| targets[i] as u16).collect(),
    };
    (make(&train_idx), make(&test_idx))
}

impl Owned {
    /// An owned copy of a borrowed tensor.
    pub fn copy_of(raw: Raw<'_>) -> Owned {
        match raw {
            Raw::I8(s) => Owned::I8(s.to_vec()),
            Raw::I16(s) => Owned::I16(s.to_vec()),
            Raw::I32(s) => Owned::I32(s.to_vec()),
        }
    }
}

/// Float parameters (as from [`init_params`]) quantized into each layer's value formats.
pub fn quantize_params(
    desc: &hone_core::model::ModelDesc,
    params: &[(Vec<f64>, Vec<f64>)],
) -> Vec<(Owned, Owned)> {
    desc.layers
        .iter()
        .zip(params)
        .map(|(l, (w, b))| {
            (
                Owned::quantize(w, l.weight.value),
                Owned::quantize(b, l.bias.value),
            )
        })
        .collect()
}

/// Borrowed initial parameters for [`hone_core::train::Trainer::new`].
pub fn layer_params(owned: &[(Owned, Owned)]) -> Vec<hone_core::train::LayerParams<'_>> {
    owned
        .iter()
        .map(|(w, b)| hone_core::train::LayerParams {
            weight: w.raw(),
            bias: b.raw(),
        })
        .collect()
}

/// A copy of every layer's current parameters (`None` for layers without any), for
/// bit-exact comparisons.
pub fn params_snapshot(t: &hone_core::train::Trainer<'_>) -> Vec<Option<(Owned, Owned)>> {
    (0..t.desc().layers.len())
        .map(|k| {
            t.params(k)
                .map(|p| (Owned::copy_of(p.weight), Owned::copy_of(p.bias)))
        })
        .collect()
}

/// The trainer's current parameters as an encoded factory-model blob: kind `Model`, no
/// training state, the weight and bias values of every layer with parameters.
pub fn model_blob(
    t: &hone_core::train::Trainer<'_>,
    scaling: &[hone_core::blob::ChannelScale],
) -> Vec<u8> {
    use hone_core::blob::{self, BlobBody, BlobKind, TensorBlob, TensorRole};
    let desc = t.desc();
    let mut bytes: Vec<(u8, TensorRole, QFormat, u32, Vec<u8>)> = Vec::new();
    for (k, l) in desc.layers.iter().enumerate() {
        let Some(p) = t.params(k) else { continue };
        for (role, raw, fmt) in [
            (TensorRole::Weight, p.weight, l.weight.value),
            (TensorRole::Bias, p.bias, l.bias.value),
        ] {
            let mut b = vec![0u8; raw.len() * fmt.word.bytes()];
            raw.write_le(&mut b).expect("buffer sized to the tensor");
            bytes.push((k as u8, role, fmt, raw.len() as u32, b));
        }
    }
    let body = BlobBody {
        kind: BlobKind::Model,
        desc: desc.clone(),
        scaling: scaling.iter().copied().collect(),
        state: None,
        tensors: bytes
            .iter()
            .map(|(layer, role, format, elems, data)| TensorBlob {
                layer: *layer,
                role: *role,
                format: *format,
                elems: *elems,
                data,
            })
            .collect(),
    };
    let mut out = vec![0u8; blob::encoded_len(&body).expect("model body length")];
    blob::encode(&body, &mut out).expect("model body encodes");
    out
}
