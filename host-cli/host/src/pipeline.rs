//! The steps every workflow shares, in one place: load a config, train or load the float base
//! model, quantize it, and prepare samples for it.

use std::path::{Path, PathBuf};

use crate::config::Config;
use crate::data::Dataset;
use crate::model::FloatModel;
use crate::quant::{quantize, Quantized};
use crate::sim::Prepared;

/// Why a shared step of a workflow failed.
#[derive(Debug, thiserror::Error)]
pub enum PipelineError {
    /// The float model and the config describe different models.
    #[error(
        "{}: the float model {what}; train a model with this config, or use the config it was \
         trained with",
        config.display()
    )]
    Mismatch {
        /// The config file.
        config: PathBuf,
        /// The first difference.
        what: String,
    },
    /// The data cannot be read or do not suit the model.
    #[error(transparent)]
    Data(#[from] crate::data::DataError),
    /// Training the float model failed.
    #[error(transparent)]
    Train(#[from] crate::train::TrainError),
    /// Quantizing the model failed.
    #[error(transparent)]
    Quant(#[from] crate::quant::QuantError),
    /// Preparing samples or running the simulation failed.
    #[error(transparent)]
    Sim(#[from] crate::sim::SimError),
    /// A drift cost was asked for a description with other layer shapes.
    #[error("a changed layer size needs a float model retrained with that shape (hone train)")]
    ShapeChanged,
    /// The simulated run recorded no epoch.
    #[error("the run recorded no epoch")]
    NoEpoch,
}

/// Checks that a float model has the architecture the config describes: input, loss, the
/// layer kinds in order, and (for regression) the target names.
///
/// # Errors
/// [`PipelineError::Mismatch`] naming the config and the first difference.
pub fn check_model_matches(config: &Config, float: &FloatModel) -> Result<(), PipelineError> {
    let differs = |what: String| PipelineError::Mismatch {
        config: config.source().to_path_buf(),
        what,
    };
    if float.input != config.input() {
        return Err(differs(format!(
            "takes {} × {} inputs, the config {} × {}",
            float.input.channels,
            float.input.len,
            config.input().channels,
            config.input().len
        )));
    }
    if float.loss != config.loss() {
        return Err(differs(format!(
            "was trained with {:?}, the config says {:?}",
            float.loss,
            config.loss()
        )));
    }
    let layers = config.layers();
    if float.layers.len() != layers.len() {
        return Err(differs(format!(
            "has {} layers, the config {}",
            float.layers.len(),
            layers.len()
        )));
    }
    for (k, (f, c)) in float.layers.iter().zip(layers).enumerate() {
        if f.kind != c.kind {
            return Err(differs(format!(
                "has {} as layer {k}, the config {}",
                crate::config::kind_name(f.kind),
                crate::config::kind_name(c.kind)
            )));
        }
    }
    if config.data().spec.task == crate::data::Task::Regression
        && float.outputs != config.data().spec.target
    {
        return Err(differs(format!(
            "predicts {:?}, the config's targets are {:?}",
            float.outputs,
            config.data().spec.target
        )));
    }
    if config.data().standardize && float.scaling.is_empty() {
        return Err(differs(
            "has no input scaling (`scaling` is empty), but the config standardizes the inputs \
             (data.standardize), so the blob would get unscaled inputs"
                .into(),
        ));
    }
    Ok(())
}

/// A float base model with its quantized form, as one config describes them.
#[derive(Clone, Debug)]
pub struct Base {
    /// The config.
    pub config: Config,
    /// The float model.
    pub float: FloatModel,
    /// Its quantized form.
    pub quant: Quantized,
}

impl Base {
    /// Trains a float base model on `factory` data, then quantizes it with activation ranges
    /// from the same data.
    ///
    /// # Errors
    /// Config, data, training or quantization errors, naming the file.
    pub fn train(
        config: Config,
        factory: &Path,
        progress: &mut dyn FnMut(u32, u32, f64),
    ) -> Result<Base, PipelineError> {
        let data = config.load_data(factory, None)?;
        let float = crate::train::train_float(&config, &data, progress)?.model;
        let quant = quantize(&config, &float, &data)?;
        Ok(Base {
            config,
            float,
            quant,
        })
    }

    /// Quantizes an already trained float model, calibrating activation ranges on `calib`.
    ///
    /// # Errors
    /// As [`Base::train`]; also when the model's inputs or outputs do not match the config.
    pub fn from_float(
        config: Config,
        float: FloatModel,
        calib: &Path,
    ) -> Result<Base, PipelineError> {
        // The model and config are checked against each other first, so a mismatch is blamed
        // on them and not reported as a problem of the data read with the wrong columns.
        check_model_matches(&config, &float)?;
        let classes = if config.data().spec.task == crate::data::Task::Classification {
            Some(&float.outputs[..])
        } else {
            None
        };
        let data = config.load_data(calib, classes)?;
        data.check_features(&float.features)?;
        let quant = quantize(&config, &float, &data)?;
        Ok(Base {
            config,
            float,
            quant,
        })
    }

    /// Loads `csv` with the config's columns (and the model's class order), applies the
    /// model's input scaling, and quantizes the samples for the model.
    ///
    /// # Errors
    /// Data errors naming the file, line and column.
    pub fn prepare(&self, csv: &Path) -> Result<Prepared, PipelineError> {
        let data = self.load(csv)?;
        Ok(Prepared::new(&data, &self.quant.desc)?)
    }

    /// Loads `csv` scaled, without quantizing.
    ///
    /// # Errors
    /// As [`Base::prepare`].
    pub fn load(&self, csv: &Path) -> Result<Dataset, PipelineError> {
        let classes = if self.config.data().spec.task == crate::data::Task::Classification {
            Some(&self.float.outputs[..])
        } else {
            None
        };
        let mut data = self.config.load_data(csv, classes)?;
        data.check_features(&self.float.features)?;
        crate::data::apply(&self.float.scaling, &mut data)?;
        Ok(data)
    }
}

/// Calibration passes of each drift cost in the plan's advice, unless the user gives another
/// number (`hone plan --epochs`).
pub const PLAN_DRIFT_EPOCHS: u32 = 10;

/// The drift cost of a changed description for the plan's advice: the float base model's
/// weights quantized into `desc`'s formats, calibrated for `epochs` passes over `train` in
/// fixed point beside the float twin, and the gap of the evaluation losses on `eval` at the
/// end, in % of the float loss.
///
/// # Errors
/// Why the cost is not computed: a change of a layer's shape (its weights would need a float
/// model trained with that shape), or a quantization or run that fails.
pub fn drift_cost(
    base: &Base,
    train: &Prepared,
    eval: &Prepared,
    epochs: u32,
    desc: &hone_core::model::ModelDesc,
) -> Result<crate::memplan::DriftCost, PipelineError> {
    let same_shape = desc.input == base.quant.desc.input
        && desc.layers.len() == base.quant.desc.layers.len()
        && desc
            .layers
            .iter()
            .zip(&base.quant.desc.layers)
            .all(|(a, b)| a.kind == b.kind);
    if !same_shape {
        return Err(PipelineError::ShapeChanged);
    }
    let (q, _) = crate::sim::QuantParams::quantize(desc, &base.quant.float_params)?;
    let opts = crate::sim::RunOptions {
        epochs,
        order_seed: base.config.train().seed,
        per_step: false,
        probe: 0,
        shuffle: true,
    };
    let run = crate::sim::run_side_by_side(
        desc,
        &q,
        &base.quant.float_params,
        train,
        eval,
        &opts,
        &mut |_| {},
    )?;
    let last = run.epochs.last().ok_or(PipelineError::NoEpoch)?;
    Ok(crate::memplan::DriftCost {
        what: format!("eval loss gap after {epochs} calibration passes"),
        value: crate::drift::gap_pct(last.fixed_eval_loss, last.float_eval_loss),
        unit: "% of float".into(),
    })
}
