//! The checks that turn the file as written into the checked form, each naming the field at fault.

use super::*;

pub(super) struct Checker<'a> {
    pub(super) ctx: &'a Ctx<'a>,
}

/// Default of `formats.weights`, `formats.bias` and `formats.activations`.
pub(super) const DEFAULT_AUTO: FormatChoice = FormatChoice::Auto { word: Word::I16 };
/// Default of `input.format` for standardized inputs: Q3.12.
pub(super) const DEFAULT_INPUT: QFormat = QFormat::new_unchecked(Word::I16, 12);
/// Default of `formats.gradients`: Q1.14.
pub(super) const DEFAULT_GRADIENTS: QFormat = QFormat::new_unchecked(Word::I16, 14);
/// Default of `formats.accumulators`: Q7.24.
pub(super) const DEFAULT_ACCUMULATORS: QFormat = QFormat::new_unchecked(Word::I32, 24);

/// Defaults of `[formats]`.
pub(super) fn default_format(role: FormatRole) -> Option<FormatChoice> {
    match role {
        FormatRole::Weights | FormatRole::Bias | FormatRole::Activations => Some(DEFAULT_AUTO),
        FormatRole::Gradients => Some(FormatChoice::Fixed(DEFAULT_GRADIENTS)),
        FormatRole::Accumulators => Some(FormatChoice::Fixed(DEFAULT_ACCUMULATORS)),
        FormatRole::WeightsMaster | FormatRole::BiasMaster => None,
    }
}

impl Checker<'_> {
    pub(super) fn err<T>(&self, v: &Spanned<T>, field: &str, message: String) -> ConfigError {
        self.ctx.at(v, field, message)
    }

    pub(super) fn check(&self, raw: RawConfig) -> Result<Config, ConfigError> {
        let loss = match raw.loss.get_ref() {
            LossName::SquaredError => Loss::SquaredError,
            LossName::SoftmaxCrossEntropy => Loss::SoftmaxCrossEntropy,
        };
        let data = self.data(raw.data.get_ref(), &raw.loss)?;
        let (input, input_format) = self.input(&raw.input, data.standardize)?;
        check_feature_count(self.ctx, &raw, input)?;
        let defaults = self.defaults(&raw.formats)?;
        if raw.layer.is_empty() {
            return Err(self.ctx.err(
                None,
                "layer",
                "the model has no layers; add `[[layer]]` tables, for example \
                 `[[layer]]` with `kind = \"dense\"` and `units = 1`"
                    .into(),
            ));
        }
        if raw.layer.len() > MAX_LAYERS {
            return Err(self.err(
                &raw.layer[MAX_LAYERS],
                &format!("layer[{MAX_LAYERS}]"),
                format!(
                    "the model has {} layers, hone takes at most {MAX_LAYERS} (activations \
                     and pooling count as layers); merge or remove some",
                    raw.layer.len()
                ),
            ));
        }
        let mut layers = Vec::with_capacity(raw.layer.len());
        let mut layer_at = Vec::with_capacity(raw.layer.len());
        for (i, l) in raw.layer.iter().enumerate() {
            layers.push(self.layer(i, l, &defaults)?);
            layer_at.push(self.ctx.line_col(l.span().start));
        }
        let (epochs, train) = self.train(raw.train.get_ref())?;
        let fleet = match &raw.fleet {
            Some(f) => Some(crate::fleet::spread::check(
                f,
                &data.spec.features,
                &|span, field, message| self.ctx.err(span, field, message),
            )?),
            None => None,
        };
        let config = Config {
            source: self.ctx.path.to_path_buf(),
            input,
            input_format,
            layers,
            layer_at,
            loss,
            epochs,
            train,
            data,
            fleet,
        };
        // Shapes, loss and training through the core, with provisional fraction bits for the
        // auto formats (fraction bits never change shapes).
        config.build_desc(|a| (a.word.bits() / 2) as u8, false)?;
        self.outputs_match(&config, &raw)?;
        Ok(config)
    }

    pub(super) fn outputs_match(
        &self,
        config: &Config,
        raw: &RawConfig,
    ) -> Result<(), ConfigError> {
        let outputs = config.outputs() as usize;
        let last = config.layers.len() - 1;
        let at = &raw.layer[last];
        let field = format!("layer[{last}]");
        let spec = &config.data.spec;
        match spec.task {
            Task::Regression if outputs != spec.target.len() => Err(self.err(
                at,
                &field,
                format!(
                    "the model gives {outputs} outputs, but `data.target` names {} column(s) \
                     ({}); the last layer must give one output per target column",
                    spec.target.len(),
                    spec.target.join(", ")
                ),
            )),
            Task::Classification => match &config.data.classes {
                Some(c) if c.len() != outputs => Err(self.err(
                    at,
                    &field,
                    format!(
                        "the model gives {outputs} outputs, but `data.classes` lists {} classes; \
                         the last layer must give one output per class",
                        c.len()
                    ),
                )),
                _ => Ok(()),
            },
            Task::Regression => Ok(()),
        }
    }

    pub(super) fn input(
        &self,
        raw: &Spanned<RawInput>,
        standardize: bool,
    ) -> Result<(Shape, QFormat), ConfigError> {
        let r = raw.get_ref();
        let channels = *r.channels.get_ref();
        if channels == 0 {
            return Err(self.err(
                &r.channels,
                "input.channels",
                "must be at least 1; give the number of input channels (for tabular data, \
                 the number of feature columns)"
                    .into(),
            ));
        }
        if standardize && usize::from(channels) > MAX_SCALED_CHANNELS {
            return Err(self.err(
                &r.channels,
                "input.channels",
                format!(
                    "is {channels}, but a model blob stores the scaling of at most \
                     {MAX_SCALED_CHANNELS} channels; set `data.standardize = false` and scale \
                     the inputs before they reach the model, or use fewer channels"
                ),
            ));
        }
        let len = match &r.length {
            Some(l) if *l.get_ref() == 0 => {
                return Err(self.err(
                    l,
                    "input.length",
                    "must be at least 1 sample per channel (1 for tabular data)".into(),
                ))
            }
            Some(l) => *l.get_ref(),
            None => 1,
        };
        let format = match &r.format {
            Some(f) => match f.get_ref() {
                FormatChoice::Fixed(q) => *q,
                FormatChoice::Auto { .. } => {
                    return Err(self.err(
                        f,
                        "input.format",
                        "the input format must be fixed (the device quantizes its readings \
                         into it); write for example \"Q3.12\""
                            .into(),
                    ))
                }
            },
            None if standardize => DEFAULT_INPUT,
            None => {
                return Err(self.err(
                    raw,
                    "input.format",
                    "with `data.standardize = false` the inputs keep their raw range, so give \
                     `format` explicitly, wide enough for the largest reading (4095 ADC counts \
                     need \"Q12.19\", for example)"
                        .into(),
                ))
            }
        };
        Ok((Shape { channels, len }, format))
    }

    pub(super) fn check_role(
        &self,
        role: FormatRole,
        v: &Spanned<FormatChoice>,
        field: &str,
    ) -> Result<(), ConfigError> {
        if let FormatChoice::Auto { word } = v.get_ref() {
            if !role.may_be_auto() {
                return Err(self.err(
                    v,
                    field,
                    format!(
                        "auto{} is not for master copies: a master's range is that of the \
                         values it feeds and its fraction bits are the precision you ask \
                         for; give {role} a fixed format such as \"Q3.28\"",
                        word.bits(),
                    ),
                ));
            }
        }
        Ok(())
    }

    pub(super) fn defaults(
        &self,
        raw: &RawFormats,
    ) -> Result<[Option<FormatChoice>; 7], ConfigError> {
        let mut out = [None; 7];
        for (k, role) in FormatRole::ALL.into_iter().enumerate() {
            out[k] = match raw.get(role) {
                Some(v) => {
                    self.check_role(role, v, &format!("formats.{role}"))?;
                    Some(*v.get_ref())
                }
                None => default_format(role),
            };
        }
        Ok(out)
    }

    pub(super) fn size<T: Copy + Into<u32>>(
        &self,
        v: &Option<Spanned<T>>,
        i: usize,
        key: &str,
        kind: &str,
        what: &str,
        default: Option<T>,
    ) -> Result<T, ConfigError> {
        let field = format!("layer[{i}].{key}");
        match v {
            Some(s) if (*s.get_ref()).into() == 0 => Err(self.err(
                s,
                &field,
                format!("is 0; a {kind} layer needs {what} of at least 1"),
            )),
            Some(s) => Ok(*s.get_ref()),
            None => default.ok_or_else(|| {
                self.ctx.err(
                    None,
                    &field,
                    format!("is missing; a {kind} layer needs `{key}` ({what})"),
                )
            }),
        }
    }

    pub(super) fn layer(
        &self,
        i: usize,
        spanned: &Spanned<RawLayer>,
        defaults: &[Option<FormatChoice>; 7],
    ) -> Result<LayerConfig, ConfigError> {
        let l = spanned.get_ref();
        let kind_name_str = match l.kind.get_ref() {
            KindName::Dense => "dense",
            KindName::Conv1d => "conv1d",
            KindName::Relu => "relu",
            KindName::LeakyRelu => "leaky-relu",
            KindName::HardTanh => "hard-tanh",
            KindName::ClippedRelu => "clipped-relu",
            KindName::Sigmoid => "sigmoid",
            KindName::Tanh => "tanh",
            KindName::AvgPool => "avg-pool",
            KindName::MaxPool => "max-pool",
        };
        let allowed: &[&str] = match l.kind.get_ref() {
            KindName::Dense => &["units"],
            KindName::Conv1d => &["filters", "kernel", "stride"],
            KindName::AvgPool | KindName::MaxPool => &["window", "stride"],
            KindName::LeakyRelu => &["shift"],
            KindName::ClippedRelu => &["ceiling"],
            _ => &[],
        };
        for (key, span) in l.sizes() {
            if let Some(span) = span {
                if !allowed.contains(&key) {
                    let takes = if allowed.is_empty() {
                        "takes no size keys".to_string()
                    } else {
                        format!(
                            "takes {}",
                            allowed
                                .iter()
                                .map(|k| format!("`{k}`"))
                                .collect::<Vec<_>>()
                                .join(", ")
                        )
                    };
                    return Err(self.ctx.err(
                        Some(span),
                        &format!("layer[{i}].{key}"),
                        format!(
                            "does not apply to a {kind_name_str} layer, which {takes}; remove it"
                        ),
                    ));
                }
            }
        }
        let k = kind_name_str;
        let kind = match l.kind.get_ref() {
            KindName::Dense => LayerKind::Dense {
                units: self.size(&l.units, i, "units", k, "an output count", None)?,
            },
            KindName::Conv1d => LayerKind::Conv1d {
                filters: self.size(&l.filters, i, "filters", k, "an output-channel count", None)?,
                kernel: self.size(&l.kernel, i, "kernel", k, "a kernel length", None)?,
                stride: self.size(&l.stride, i, "stride", k, "a stride", Some(1))?,
            },
            KindName::AvgPool | KindName::MaxPool => {
                let window = self.size(&l.window, i, "window", k, "a window length", None)?;
                let stride = self.size(&l.stride, i, "stride", k, "a stride", Some(window))?;
                if *l.kind.get_ref() == KindName::AvgPool {
                    LayerKind::AvgPool1d { window, stride }
                } else {
                    LayerKind::MaxPool1d { window, stride }
                }
            }
            KindName::LeakyRelu => {
                let shift = self.size(&l.shift, i, "shift", k, "a slope shift", None)?;
                if shift > 15 {
                    let s = l.shift.as_ref().map(Spanned::span);
                    return Err(self.ctx.err(
                        s,
                        &format!("layer[{i}].shift"),
                        format!(
                            "is {shift}; the negative slope 2^-shift takes a shift of 1 to 15 \
                             (3 gives 1/8)"
                        ),
                    ));
                }
                LayerKind::LeakyRelu { shift }
            }
            KindName::ClippedRelu => LayerKind::ClippedRelu {
                ceiling: self.size(&l.ceiling, i, "ceiling", k, "a ceiling", None)?,
            },
            KindName::Relu => LayerKind::Relu,
            KindName::HardTanh => LayerKind::HardTanh,
            KindName::Sigmoid => LayerKind::Sigmoid,
            KindName::Tanh => LayerKind::Tanh,
        };
        let params = kind.has_params();
        let mode = match (&l.train, params) {
            (None, true) => TrainMode::Full,
            (None, false) => TrainMode::Frozen,
            (Some(m), true) => m.get_ref().0,
            (Some(m), false) => {
                return Err(self.err(
                    m,
                    &format!("layer[{i}].train"),
                    format!("a {k} layer has no parameters to train; remove `train`"),
                ))
            }
        };
        let mut chosen = *defaults;
        for (slot, role) in FormatRole::ALL.into_iter().enumerate() {
            if let Some(v) = l.format(role) {
                let field = format!("layer[{i}].{role}");
                if role.needs_params() && !params {
                    return Err(self.err(
                        v,
                        &field,
                        format!(
                            "a {k} layer has no parameters, so no {role}; remove it (such \
                             layers take only `activations` and `gradients`)"
                        ),
                    ));
                }
                self.check_role(role, v, &field)?;
                chosen[slot] = Some(*v.get_ref());
            }
        }
        let get = |role: FormatRole| -> Option<FormatChoice> {
            FormatRole::ALL
                .iter()
                .position(|r| *r == role)
                .and_then(|p| chosen[p])
        };
        let fixed = |role: FormatRole| -> Option<QFormat> {
            match get(role) {
                Some(FormatChoice::Fixed(q)) => Some(q),
                _ => None,
            }
        };
        // Every role with a default is Some, so the fallbacks below are those same defaults;
        // masters may be None; the role checks keep masters fixed.
        let formats = LayerFormats {
            weights: get(FormatRole::Weights).unwrap_or(DEFAULT_AUTO),
            bias: get(FormatRole::Bias).unwrap_or(DEFAULT_AUTO),
            weights_master: if params {
                fixed(FormatRole::WeightsMaster)
            } else {
                None
            },
            bias_master: if params {
                fixed(FormatRole::BiasMaster)
            } else {
                None
            },
            activations: get(FormatRole::Activations).unwrap_or(DEFAULT_AUTO),
            gradients: get(FormatRole::Gradients).unwrap_or(FormatChoice::Fixed(DEFAULT_GRADIENTS)),
            accumulators: get(FormatRole::Accumulators)
                .unwrap_or(FormatChoice::Fixed(DEFAULT_ACCUMULATORS)),
        };
        Ok(LayerConfig {
            kind,
            mode,
            formats,
        })
    }

    pub(super) fn scalar(
        &self,
        v: &Spanned<f64>,
        field: &str,
        allow_zero: bool,
    ) -> Result<QScalar, ConfigError> {
        let x = *v.get_ref();
        let step = 2f64.powi(-i32::from(SCALAR_FRAC));
        let max = (f64::from(i32::MAX)) * step;
        if !x.is_finite() {
            return Err(self.err(v, field, format!("is {x}; give a finite decimal")));
        }
        if x < 0.0 {
            return Err(self.err(v, field, format!("is {x}; it must not be negative")));
        }
        if x == 0.0 {
            if allow_zero {
                return Ok(QScalar::ZERO);
            }
            return Err(self.err(
                v,
                field,
                "is 0, so nothing would be learned; give a positive value such as 0.01".into(),
            ));
        }
        let q = match QScalar::from_f64(x, SCALAR_FRAC) {
            Ok(q) if q.raw != 0 => q,
            Ok(_) => {
                return Err(self.err(
                    v,
                    field,
                    format!(
                        "{x} is below the fixed-point step 2^-{SCALAR_FRAC} ≈ {step:.2e} of \
                         training scalars and would become 0; use at least {:.2e}",
                        step / SCALAR_TOLERANCE
                    ),
                ))
            }
            Err(_) => {
                return Err(self.err(
                    v,
                    field,
                    format!(
                        "{x} is beyond the largest training scalar, {max:.8} (i32 with \
                         {SCALAR_FRAC} fraction bits); use a smaller value"
                    ),
                ))
            }
        };
        let rel = (q.to_f64() - x).abs() / x;
        if rel > SCALAR_TOLERANCE {
            return Err(self.err(
                v,
                field,
                format!(
                    "{x} cannot be held within 1 % by a scalar with {SCALAR_FRAC} fraction bits \
                     (step {step:.2e}): it would become {:.3e}, off by {:.1} %; use {:.2e} or \
                     more",
                    q.to_f64(),
                    rel * 100.0,
                    step / SCALAR_TOLERANCE
                ),
            ));
        }
        Ok(q)
    }

    pub(super) fn train(&self, r: &RawTrain) -> Result<(u32, TrainDesc), ConfigError> {
        if *r.epochs.get_ref() == 0 {
            return Err(self.err(
                &r.epochs,
                "train.epochs",
                "is 0; give at least 1 pass over the data".into(),
            ));
        }
        let batch = match &r.batch {
            Some(b) if *b.get_ref() == 0 => {
                return Err(self.err(
                    b,
                    "train.batch",
                    "is 0; a batch holds at least 1 sample".into(),
                ))
            }
            Some(b) => *b.get_ref(),
            None => 1,
        };
        let lr = self.scalar(&r.learning_rate, "train.learning-rate", false)?;
        let opt = |v: &Option<Spanned<f64>>, field: &str| -> Result<QScalar, ConfigError> {
            v.as_ref()
                .map_or(Ok(QScalar::ZERO), |s| self.scalar(s, field, true))
        };
        let momentum = opt(&r.momentum, "train.momentum")?;
        if let Some(m) = &r.momentum {
            if *m.get_ref() >= 1.0 || momentum.to_f64() >= 1.0 {
                return Err(self.err(
                    m,
                    "train.momentum",
                    format!(
                        "is {}; momentum must be below 1 or the updates grow without bound \
                         (0.9 is common)",
                        m.get_ref()
                    ),
                ));
            }
        }
        let weight_decay = opt(&r.weight_decay, "train.weight-decay")?;
        let clip = opt(&r.clip, "train.clip")?;
        let round = |r: Option<RoundingName>| r.map_or(Rounding::NearestEven, |r| r.0);
        let rounding = match &r.rounding {
            Some(p) => RoundingPlan {
                activations: round(p.activations),
                gradients: round(p.gradients),
                updates: round(p.updates),
            },
            None => RoundingPlan::NEAREST,
        };
        let dynamic = match &r.dynamic {
            Some(d) => {
                if *d.interval.get_ref() == 0 {
                    return Err(self.err(
                        &d.interval,
                        "train.dynamic.interval",
                        "is 0; give the number of updates between adjustments, 1 or more".into(),
                    ));
                }
                if *d.max_rate_ppm.get_ref() > 1_000_000 {
                    return Err(self.err(
                        &d.max_rate_ppm,
                        "train.dynamic.max-rate-ppm",
                        "is more than 1 000 000 parts per million (100 %); 100 (0.01 %) is a \
                         common choice"
                            .into(),
                    ));
                }
                Some(DynamicRule {
                    max_rate_ppm: *d.max_rate_ppm.get_ref(),
                    interval: *d.interval.get_ref(),
                })
            }
            None => None,
        };
        let desc = TrainDesc {
            batch,
            lr,
            momentum,
            weight_decay,
            clip,
            rounding,
            dynamic,
            seed: r.seed.unwrap_or(0),
        };
        Ok((*r.epochs.get_ref(), desc))
    }

    pub(super) fn data(
        &self,
        r: &RawData,
        loss: &Spanned<LossName>,
    ) -> Result<DataConfig, ConfigError> {
        let implied = match loss.get_ref() {
            LossName::SquaredError => Task::Regression,
            LossName::SoftmaxCrossEntropy => Task::Classification,
        };
        let task = match &r.task {
            Some(t) => {
                let given = match t.get_ref() {
                    TaskName::Regression => Task::Regression,
                    TaskName::Classification => Task::Classification,
                };
                if given != implied {
                    return Err(self.err(
                        t,
                        "data.task",
                        format!(
                            "is {given}, but the loss is for {implied}; use `loss = \"{}\"` for \
                             {given}, or remove `task`",
                            match given {
                                Task::Regression => "squared-error",
                                Task::Classification => "softmax-cross-entropy",
                            }
                        ),
                    ));
                }
                given
            }
            None => implied,
        };
        let target = r.target.get_ref().0.clone();
        if target.is_empty() {
            return Err(self.err(
                &r.target,
                "data.target",
                "names no column; name the column the model predicts".into(),
            ));
        }
        if task == Task::Classification && target.len() != 1 {
            return Err(self.err(
                &r.target,
                "data.target",
                format!(
                    "names {} columns; classification takes one column of class labels",
                    target.len()
                ),
            ));
        }
        // Each column one role.
        let mut seen: Vec<(&str, &str)> = Vec::new();
        let features: &[String] = r.features.as_ref().map_or(&[], |f| f.get_ref());
        for (names, role) in [
            (&target[..], "data.target"),
            (&r.ignore[..], "data.ignore"),
            (features, "data.features"),
        ] {
            for n in names {
                if let Some((_, prev)) = seen.iter().find(|(s, _)| *s == n) {
                    let span = match role {
                        "data.features" => r.features.as_ref().map(Spanned::span),
                        _ => Some(r.target.span()),
                    };
                    return Err(self.ctx.err(
                        span,
                        role,
                        if *prev == role {
                            format!("names `{n}` twice; name each column once")
                        } else {
                            format!(
                                "names `{n}`, which `{prev}` names too; give each column one \
                                 role"
                            )
                        },
                    ));
                }
                seen.push((n, role));
            }
        }
        let classes = match &r.classes {
            Some(c) if task == Task::Regression => {
                return Err(self.err(
                    c,
                    "data.classes",
                    "applies only to classification; remove it".into(),
                ))
            }
            Some(c) => {
                let names: Vec<String> = c.get_ref().iter().map(|l| l.0.clone()).collect();
                if names.len() < 2 {
                    return Err(self.err(
                        c,
                        "data.classes",
                        "lists fewer than 2 classes; classification needs at least two".into(),
                    ));
                }
                for (j, n) in names.iter().enumerate() {
                    if names[..j].contains(n) {
                        return Err(self.err(
                            c,
                            "data.classes",
                            format!("lists `{n}` twice; list each class once"),
                        ));
                    }
                }
                Some(names)
            }
            None => None,
        };
        let holdout = match &r.holdout {
            Some(h) if !(0.0..1.0).contains(h.get_ref()) => {
                return Err(self.err(
                    h,
                    "data.holdout",
                    format!(
                        "is {}; give a fraction in [0, 1), such as 0.2 to keep a fifth of the \
                         rows for evaluation",
                        h.get_ref()
                    ),
                ))
            }
            Some(h) => *h.get_ref(),
            None => 0.0,
        };
        let features = match &r.features {
            Some(f) if f.get_ref().is_empty() => {
                return Err(self.err(
                    f,
                    "data.features",
                    "is empty; list the input columns, or remove `features` to use every \
                     column that is not a target or ignored"
                        .into(),
                ))
            }
            Some(f) => FeatureSelect::Named(f.get_ref().clone()),
            None => FeatureSelect::AllOther,
        };
        Ok(DataConfig {
            spec: DataSpec {
                features,
                target,
                ignore: r.ignore.clone(),
                task,
            },
            classes,
            standardize: r.standardize.unwrap_or(true),
            holdout,
            unit: r.unit.clone().unwrap_or_default(),
        })
    }
}

/// Checks that named features agree with the input shape; called after both are read.
pub(super) fn check_feature_count(
    ctx: &Ctx<'_>,
    raw: &RawConfig,
    input: Shape,
) -> Result<(), ConfigError> {
    if let Some(f) = &raw.data.get_ref().features {
        let n = f.get_ref().len();
        if n != input.size() as usize {
            return Err(ctx.at(
                f,
                "data.features",
                format!(
                    "lists {n} columns, but the input takes channels × length = {} × {} = {} \
                     values; list exactly that many, or change `input`",
                    input.channels,
                    input.len,
                    input.size()
                ),
            ));
        }
    }
    Ok(())
}
