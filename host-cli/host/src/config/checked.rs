//! The checked form of a config, and what the rest of the tool asks of it.

use super::*;

/// The data section, checked.
#[derive(Clone, Debug, PartialEq)]
pub struct DataConfig {
    /// Columns and task.
    pub spec: DataSpec,
    /// The class labels in output order, if the config names them.
    pub classes: Option<Vec<String>>,
    /// Whether to standardize each input channel (see [`crate::data::Scaling`]).
    pub standardize: bool,
    /// Fraction of rows held out of training.
    pub holdout: f64,
    /// The unit of the regression target, as reports print it (`m³/m³`, `°C`); empty when the
    /// config names none.
    pub unit: String,
}

/// A checked config. See the [module docs](self) for the file format.
#[derive(Clone, Debug, PartialEq)]
pub struct Config {
    pub(super) source: PathBuf,
    pub(super) input: Shape,
    pub(super) input_format: QFormat,
    pub(super) layers: Vec<LayerConfig>,
    /// 1-based line and column of each `[[layer]]` table, for later errors.
    pub(super) layer_at: Vec<(usize, usize)>,
    pub(super) loss: Loss,
    pub(super) epochs: u32,
    pub(super) train: TrainDesc,
    pub(super) data: DataConfig,
    pub(super) fleet: Option<crate::fleet::spread::FleetSpread>,
}

/// Turns byte offsets into lines and columns and builds errors for one file.
pub(super) struct Ctx<'a> {
    pub(super) path: &'a Path,
    pub(super) text: &'a str,
}

impl Ctx<'_> {
    pub(super) fn line_col(&self, offset: usize) -> (usize, usize) {
        let offset = offset.min(self.text.len());
        let before = self.text.get(..offset).unwrap_or(self.text);
        let line = before.matches('\n').count() + 1;
        let start = before.rfind('\n').map_or(0, |i| i + 1);
        let column = before[start..].chars().count() + 1;
        (line, column)
    }

    pub(super) fn err(
        &self,
        span: Option<Range<usize>>,
        field: &str,
        message: String,
    ) -> ConfigError {
        let (line, column) = match span {
            Some(s) => {
                let (l, c) = self.line_col(s.start);
                (Some(l), Some(c))
            }
            None => (None, None),
        };
        ConfigError::Invalid {
            path: self.path.to_path_buf(),
            line,
            column,
            field: field.to_string(),
            message,
        }
    }

    pub(super) fn at<T>(&self, v: &Spanned<T>, field: &str, message: String) -> ConfigError {
        self.err(Some(v.span()), field, message)
    }
}

/// Turns a serde error path into a field path: drops the wrappers of `Spanned` values.
pub(super) fn clean_path(path: &str) -> String {
    path.split('.')
        .filter(|seg| !seg.starts_with("$__serde_spanned"))
        .collect::<Vec<_>>()
        .join(".")
}

/// Rewrites serde's wording into the config's: keys, not fields.
pub(super) fn serde_message(message: &str, field: &str) -> String {
    let m = message
        .replace("unknown field", "unknown key")
        .replace("missing field", "missing key");
    if message.starts_with("unknown field") {
        let table = match field.rsplit_once('.') {
            Some((t, _)) => format!("`{t}`"),
            None => "the top level".to_string(),
        };
        format!("{m}; check the spelling (keys are kebab-case) or remove it from {table}")
    } else if message.starts_with("missing field") {
        format!("{m}; add it")
    } else if message.starts_with("unknown variant") {
        m.replace("unknown variant", "unknown value")
    } else {
        // Rust type names mean little in a config file.
        m.replace("expected u8", "expected a whole number from 0 to 255")
            .replace("expected u16", "expected a whole number from 0 to 65535")
            .replace(
                "expected u32",
                "expected a whole number from 0 to 4294967295",
            )
            .replace("expected u64", "expected a whole number of 0 or more")
            .replace("expected f64", "expected a decimal number")
    }
}

impl Config {
    /// Reads and checks a config file.
    ///
    /// # Errors
    /// [`ConfigError::Io`] if the file cannot be read, [`ConfigError::Syntax`] for invalid
    /// TOML, [`ConfigError::Invalid`] for everything the checks find.
    pub fn load(path: &Path) -> Result<Config, ConfigError> {
        let text =
            hone_report::fsutil::read_text_limited(path, crate::limits::CONFIG_BYTES, "config")
                .map_err(|source| ConfigError::Io {
                    path: path.to_path_buf(),
                    source,
                })?;
        Config::parse(path, &text)
    }

    /// Parses and checks config text; `source` names it in errors.
    ///
    /// ```
    /// use std::path::Path;
    /// use hone_host::config::Config;
    ///
    /// let text = r#"
    /// loss = "squared-error"
    /// [input]
    /// channels = 2
    /// [[layer]]
    /// kind = "dense"
    /// units = 1
    /// weights = "Q3.12"
    /// [train]
    /// epochs = 10
    /// learning-rate = 0.05
    /// [data]
    /// target = "vwc"
    /// ignore = ["unit"]
    /// "#;
    /// let config = Config::parse(Path::new("probe.toml"), text)?;
    /// // Bias and activations default to "auto16": the quantizer picks their fraction bits.
    /// let desc = config.model_desc_with(|_auto| 11)?;
    /// assert_eq!(desc.layers[0].weight.value.to_string(), "Q3.12 (i16)");
    /// assert_eq!(desc.layers[0].out.to_string(), "Q4.11 (i16)");
    ///
    /// let e = Config::parse(Path::new("probe.toml"), &text.replace("units = 1", "units = 0"));
    /// assert_eq!(
    ///     e.unwrap_err().to_string(),
    ///     "probe.toml:7:9: `layer[0].units`: is 0; a dense layer needs an output count of at least 1"
    /// );
    /// # Ok::<(), hone_host::config::ConfigError>(())
    /// ```
    ///
    /// # Errors
    /// As [`Config::load`], without the I/O error.
    pub fn parse(source: &Path, text: &str) -> Result<Config, ConfigError> {
        let ctx = Ctx { path: source, text };
        let de = toml::Deserializer::parse(text).map_err(|e| {
            let (line, column) = ctx.line_col(e.span().map_or(0, |s| s.start));
            ConfigError::Syntax {
                path: source.to_path_buf(),
                line,
                column,
                message: e.message().trim().to_string(),
            }
        })?;
        let raw: RawConfig = serde_path_to_error::deserialize(de).map_err(|e| {
            let field = clean_path(&e.path().to_string());
            let inner = e.into_inner();
            let field = if field == "." || field.is_empty() {
                "(top level)".to_string()
            } else {
                field
            };
            ctx.err(inner.span(), &field, serde_message(inner.message(), &field))
        })?;
        Checker { ctx: &ctx }.check(raw)
    }

    /// The file the config was read from.
    pub fn source(&self) -> &Path {
        &self.source
    }

    /// Shape of one input sample.
    pub fn input(&self) -> Shape {
        self.input
    }

    /// Format of the scaled input.
    pub fn input_format(&self) -> QFormat {
        self.input_format
    }

    /// The layers, in order.
    pub fn layers(&self) -> &[LayerConfig] {
        &self.layers
    }

    /// The loss.
    pub fn loss(&self) -> Loss {
        self.loss
    }

    /// Passes over the training data.
    pub fn epochs(&self) -> u32 {
        self.epochs
    }

    /// The training setup as the core takes it (batch, scalars, rounding, dynamic rule, seed).
    pub fn train(&self) -> &TrainDesc {
        &self.train
    }

    /// The data section.
    pub fn data(&self) -> &DataConfig {
        &self.data
    }

    /// The `[fleet]` section, if the config has one (see [`crate::fleet::spread`]).
    pub fn fleet(&self) -> Option<&crate::fleet::spread::FleetSpread> {
        self.fleet.as_ref()
    }

    /// The columns and task, as [`Dataset::load`] takes them.
    pub fn data_spec(&self) -> &DataSpec {
        &self.data.spec
    }

    /// Loads a data file with this config's column selection. The class list, for
    /// classification, is `model_classes` (those of a trained model, for calibration files)
    /// if given, else `data.classes` if the config has it, else the classes found in the file.
    ///
    /// # Errors
    /// As [`Dataset::load_with_classes`] and [`Dataset::load`].
    pub fn load_data(
        &self,
        path: &Path,
        model_classes: Option<&[String]>,
    ) -> Result<Dataset, DataError> {
        match model_classes.or(self.data.classes.as_deref()) {
            Some(c) if self.data.spec.task == Task::Classification => {
                Dataset::load_with_classes(path, &self.data.spec, c)
            }
            _ => Dataset::load(path, &self.data.spec),
        }
    }

    /// Every format left to the quantizer, in layer order.
    pub fn auto_formats(&self) -> Vec<AutoFormat> {
        let mut out = Vec::new();
        for (i, l) in self.layers.iter().enumerate() {
            let f = &l.formats;
            let roles: &[(FormatRole, FormatChoice)] = if l.kind.has_params() {
                &[
                    (FormatRole::Weights, f.weights),
                    (FormatRole::Bias, f.bias),
                    (FormatRole::Activations, f.activations),
                    (FormatRole::Gradients, f.gradients),
                    (FormatRole::Accumulators, f.accumulators),
                ]
            } else {
                &[
                    (FormatRole::Activations, f.activations),
                    (FormatRole::Gradients, f.gradients),
                ]
            };
            for &(role, choice) in roles {
                if let FormatChoice::Auto { word } = choice {
                    out.push(AutoFormat {
                        layer: i,
                        role,
                        word,
                    });
                }
            }
        }
        out
    }

    /// The model description, for a config without `auto` formats.
    ///
    /// # Errors
    /// [`ConfigError::Invalid`] naming the first `auto` format (use
    /// [`Config::model_desc_with`] then), or the core's objection to the description.
    pub fn model_desc(&self) -> Result<ModelDesc, ConfigError> {
        if let Some(a) = self.auto_formats().first() {
            return Err(self.layer_err(
                a.layer,
                &format!("layer[{}].{}", a.layer, a.role),
                format!(
                    "is auto{}, so the quantizer must choose its fraction bits from data \
                     before a model description exists; give a fixed format to build without \
                     data",
                    a.word.bits()
                ),
            ));
        }
        self.model_desc_with(|_| 0)
    }

    /// The model description, with the fraction bits of every `auto` format chosen by
    /// `resolve`, called once per entry of [`Config::auto_formats`]. Within a layer the
    /// activations and gradients are resolved first, then weights, bias and accumulators, so
    /// `resolve` must look at the [`AutoFormat`] it is given rather than count calls.
    ///
    /// # Errors
    /// [`ConfigError::Invalid`] if `resolve` returns more than 31 fraction bits, if a chosen
    /// format is finer than the master copy configured for it, or if the core rejects the
    /// description.
    pub fn model_desc_with<F>(&self, resolve: F) -> Result<ModelDesc, ConfigError>
    where
        F: FnMut(AutoFormat) -> u8,
    {
        self.build_desc(resolve, true)
    }

    /// [`Config::model_desc_with`]; without `final_choice`, the fraction bits of `auto`
    /// formats are placeholders, so the check that a master copy spans its values' range is
    /// left to the real choice.
    pub(super) fn build_desc<F>(
        &self,
        mut resolve: F,
        final_choice: bool,
    ) -> Result<ModelDesc, ConfigError>
    where
        F: FnMut(AutoFormat) -> u8,
    {
        let mut layers = Vec::with_capacity(self.layers.len());
        for (i, l) in self.layers.iter().enumerate() {
            let mut fix =
                |role: FormatRole, choice: FormatChoice| -> Result<QFormat, ConfigError> {
                    match choice {
                        FormatChoice::Fixed(q) => Ok(q),
                        FormatChoice::Auto { word } => {
                            let frac = resolve(AutoFormat {
                                layer: i,
                                role,
                                word,
                            });
                            QFormat::new(word, frac).map_err(|_| {
                                self.layer_err(
                                    i,
                                    &format!("layer[{i}].{role}"),
                                    format!(
                                        "the quantizer chose {frac} fraction bits; at most \
                                     {MAX_FRAC} are possible"
                                    ),
                                )
                            })
                        }
                    }
                };
            let f = &l.formats;
            let out = fix(FormatRole::Activations, f.activations)?;
            let grad = fix(FormatRole::Gradients, f.gradients)?;
            let desc = if l.kind.has_params() {
                let w = fix(FormatRole::Weights, f.weights)?;
                let b = fix(FormatRole::Bias, f.bias)?;
                let accum = fix(FormatRole::Accumulators, f.accumulators)?;
                let chosen = |c: FormatChoice| final_choice || matches!(c, FormatChoice::Fixed(_));
                for (role, value, master, known) in [
                    (
                        FormatRole::WeightsMaster,
                        w,
                        f.weights_master,
                        chosen(f.weights),
                    ),
                    (FormatRole::BiasMaster, b, f.bias_master, chosen(f.bias)),
                ] {
                    if let Some(m) = master {
                        if m.frac < value.frac {
                            return Err(self.layer_err(
                                i,
                                &format!("layer[{i}].{role}"),
                                format!(
                                    "the master copy {m} is coarser than the values {value} \
                                     it feeds; give it at least {} fraction bits",
                                    value.frac
                                ),
                            ));
                        }
                        if known && m.max_value() < value.max_value() {
                            // The first copy into the master would clamp every value beyond
                            // its range, and each update would pull the values back to it.
                            let int_bits = |q: QFormat| q.word.bits() as i32 - 1 - q.frac as i32;
                            return Err(self.layer_err(
                                i,
                                &format!("layer[{i}].{role}"),
                                format!(
                                    "the master copy {m} holds values in [{}, {}), narrower \
                                     than the values {value} it feeds, [{}, {}); give it at \
                                     least {} integer bits, or leave the master out",
                                    m.min_value(),
                                    m.max_value() + m.step(),
                                    value.min_value(),
                                    value.max_value() + value.step(),
                                    int_bits(value)
                                ),
                            ));
                        }
                    }
                }
                LayerDesc {
                    kind: l.kind,
                    mode: l.mode,
                    weight: ParamFormats {
                        value: w,
                        master: f.weights_master,
                        accum,
                    },
                    bias: ParamFormats {
                        value: b,
                        master: f.bias_master,
                        accum,
                    },
                    out,
                    grad,
                }
            } else {
                LayerDesc::simple(l.kind, out, grad)
            };
            layers.push(desc);
        }
        ModelDesc::new(
            self.input,
            self.input_format,
            &layers,
            self.loss,
            self.train,
        )
        .map_err(|e| self.core_err(e, &layers))
    }

    /// Checks that a dataset fits the model: as many features as the input takes, as many
    /// target columns (regression) or classes (classification) as the model has outputs.
    ///
    /// # Errors
    /// [`ConfigError::Data`] saying what differs.
    pub fn check_dataset(&self, data: &Dataset) -> Result<(), ConfigError> {
        let err = |message: String| ConfigError::Data {
            config: self.source.clone(),
            data: data.source.clone(),
            message,
        };
        let inputs = self.input.size() as usize;
        if data.features.len() != inputs {
            return Err(err(format!(
                "the input takes channels × length = {} × {} = {inputs} values, the data has {} \
                 feature columns ({}); change `input` or the `data` column selection",
                self.input.channels,
                self.input.len,
                data.features.len(),
                abbreviate(&data.features)
            )));
        }
        let task = self.data.spec.task;
        if data.target.task() != task {
            return Err(err(format!(
                "the config is for {task}, the data were loaded for {}",
                data.target.task()
            )));
        }
        let outputs = self.outputs() as usize;
        let last = self.layers.len() - 1;
        match &data.target {
            Targets::Values { names, .. } if names.len() != outputs => Err(err(format!(
                "the model has {outputs} outputs, the data {} target columns; the last layer \
                 (layer[{last}]) must give one output per target",
                names.len()
            ))),
            Targets::Classes { names, .. } if names.len() != outputs => Err(err(format!(
                "the data have {} classes ({}), the model has {outputs} outputs; set the last \
                 layer (layer[{last}]) to {} outputs, or list the classes under `data.classes`",
                names.len(),
                abbreviate(names),
                names.len()
            ))),
            _ => Ok(()),
        }
    }

    /// Values the model produces per sample.
    pub fn outputs(&self) -> u32 {
        // Checked at load time, with provisional formats that do not change shapes.
        let layers: Vec<LayerDesc> = self
            .layers
            .iter()
            .map(|l| LayerDesc::simple(l.kind, QFormat::Q0_7, QFormat::Q0_7).with_mode(l.mode))
            .collect();
        let mut shape = self.input;
        for (i, l) in layers.iter().enumerate() {
            match hone_core::model::layer_geometry(i, shape, l) {
                Ok(g) => shape = g.output,
                Err(_) => return 0,
            }
        }
        shape.size()
    }

    pub(super) fn layer_err(&self, layer: usize, field: &str, message: String) -> ConfigError {
        let (line, column) = self
            .layer_at
            .get(layer)
            .map_or((None, None), |&(l, c)| (Some(l), Some(c)));
        ConfigError::Invalid {
            path: self.source.clone(),
            line,
            column,
            field: field.to_string(),
            message,
        }
    }

    pub(super) fn core_err(&self, e: CoreError, layers: &[LayerDesc]) -> ConfigError {
        match e {
            CoreError::Layer { layer, .. } => {
                let i = layer as usize;
                let message = describe_fault(self.input, layers, e, self.loss);
                self.layer_err(
                    i,
                    &format!("layer[{i}]"),
                    format!("({}) {message}", kind_name(layers[i].kind)),
                )
            }
            other => ConfigError::Invalid {
                path: self.source.clone(),
                line: None,
                column: None,
                field: "(model)".into(),
                message: format!("the engine rejects the description: {other}"),
            },
        }
    }
}

/// `a, b, c` for short lists, `a, b, … z (n names)` for long ones.
pub(super) fn abbreviate(names: &[String]) -> String {
    if names.len() <= 6 {
        names.join(", ")
    } else {
        format!(
            "{}, {}, {}, … {} ({} names)",
            names[0],
            names[1],
            names[2],
            names[names.len() - 1],
            names.len()
        )
    }
}

/// The input shape of layer `i`, computed from the layers before it (all valid).
pub(super) fn input_of(input: Shape, layers: &[LayerDesc], i: usize) -> Shape {
    let mut shape = input;
    for (j, l) in layers[..i].iter().enumerate() {
        if let Ok(g) = hone_core::model::layer_geometry(j, shape, l) {
            shape = g.output;
        }
    }
    shape
}

/// How to give layer `i` a longer input.
pub(super) fn longer_input(i: usize) -> &'static str {
    if i == 0 {
        "give the input more samples per channel (`input.length`)"
    } else {
        "make the layers before it keep more samples"
    }
}

/// Explains a core layer fault with the sizes involved and what to change.
pub(super) fn describe_fault(
    input: Shape,
    layers: &[LayerDesc],
    e: CoreError,
    loss: Loss,
) -> String {
    use hone_core::error::LayerFault;
    let CoreError::Layer { layer, fault } = e else {
        return e.to_string();
    };
    let i = layer as usize;
    let inp = input_of(input, layers, i);
    let shape = format!(
        "{} channel{} × {} sample{}",
        inp.channels,
        if inp.channels == 1 { "" } else { "s" },
        inp.len,
        if inp.len == 1 { "" } else { "s" }
    );
    match (fault, layers[i].kind) {
        (LayerFault::WindowTooLong, LayerKind::Conv1d { kernel, .. }) => format!(
            "the kernel of {kernel} samples is longer than the layer's input of {shape}; use a \
             kernel of at most {} or {}",
            inp.len,
            longer_input(i)
        ),
        (
            LayerFault::WindowTooLong,
            LayerKind::AvgPool1d { window, .. } | LayerKind::MaxPool1d { window, .. },
        ) => format!(
            "the window of {window} samples is longer than the layer's input of {shape}; use a \
             window of at most {} or {}",
            inp.len,
            longer_input(i)
        ),
        (LayerFault::TooLarge, _) => format!(
            "its input of {shape} makes more weights or multiply-accumulates than the engine's \
             32-bit counts hold; make the layer smaller"
        ),
        (LayerFault::LossOutput, _) => format!(
            "the last layer gives {} output(s), but {} needs one output per class and at least \
             two classes",
            layers
                .get(i)
                .and_then(|l| hone_core::model::layer_geometry(i, inp, l).ok())
                .map_or(0, |g| g.output.size()),
            match loss {
                Loss::SoftmaxCrossEntropy => "softmax-cross-entropy",
                Loss::SquaredError => "the loss",
            }
        ),
        (LayerFault::ZeroSize, _) if inp.size() == 0 => {
            format!("its input is empty ({shape}); an earlier layer leaves nothing")
        }
        (fault, _) => format!("{fault}; input {shape}"),
    }
}
