//! The `[fleet]` section of a config: how units of one product differ from each other.
//!
//! ```toml
//! [fleet]
//! spec = 0.03                       # a unit meets the spec when its error is at most this
//!
//! [fleet.feature.raw_counts]        # one table per input column that differs between units
//! gain = { mean = 1.0, sd = 0.05 }  # per unit: x ← gain · x + offset + noise
//! offset = { mean = 0.0, sd = 60.0 }
//! noise = 4.0                       # per sample: standard deviation, in the column's unit
//! ```
//!
//! | key | type | default | meaning |
//! |---|---|---|---|
//! | `spec` | decimal > 0 | required | largest error of a unit that meets the spec: RMSE in the target's unit (regression), or error rate in % (classification) |
//! | `feature.NAME.gain` | `{ mean, sd }` | `{ mean = 1, sd = 0 }` | the unit's gain on column `NAME`, drawn once per unit from a normal distribution |
//! | `feature.NAME.offset` | `{ mean, sd }` | `{ mean = 0, sd = 0 }` | the unit's offset on `NAME`, in the column's unit, drawn once per unit |
//! | `feature.NAME.noise` | decimal ≥ 0 | 0 | standard deviation of the noise added to each reading of `NAME`, drawn per sample |
//!
//! The distortion applies to the column as the data file has it, before the model's input
//! scaling: a unit whose ADC reads 60 counts high has `offset` 60 on that column. Columns
//! without a table are read as they are.

use std::ops::Range;

use serde::Deserialize;
use toml::Spanned;

use crate::config::ConfigError;
use crate::data::FeatureSelect;

/// A normal distribution as the config writes it.
#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub struct RawNormal {
    mean: Spanned<f64>,
    #[serde(default)]
    sd: Option<Spanned<f64>>,
}

/// One column's spread as written.
#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub struct RawFeature {
    gain: Option<Spanned<RawNormal>>,
    offset: Option<Spanned<RawNormal>>,
    noise: Option<Spanned<f64>>,
}

/// The `[fleet]` section as written.
#[derive(Deserialize, Debug)]
#[serde(deny_unknown_fields)]
pub struct RawFleet {
    spec: Option<Spanned<f64>>,
    #[serde(default)]
    feature: std::collections::BTreeMap<String, Spanned<RawFeature>>,
}

/// A normal distribution: mean and standard deviation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Normal {
    /// Mean.
    pub mean: f64,
    /// Standard deviation, 0 or more (0: every unit gets the mean).
    pub sd: f64,
}

/// How one input column differs between units.
#[derive(Clone, Debug, PartialEq)]
pub struct FeatureSpread {
    /// The column's name.
    pub name: String,
    /// Per-unit gain.
    pub gain: Normal,
    /// Per-unit offset, in the column's unit.
    pub offset: Normal,
    /// Standard deviation of the per-sample noise, in the column's unit.
    pub noise: f64,
}

/// The checked `[fleet]` section.
#[derive(Clone, Debug, PartialEq)]
pub struct FleetSpread {
    /// Largest error of a unit that meets the spec.
    pub spec: f64,
    /// The columns that differ between units, in name order.
    pub features: Vec<FeatureSpread>,
}

/// Builds a [`ConfigError::Invalid`] for a span of the config text and a field path.
pub type ErrAt<'a> = dyn Fn(Option<Range<usize>>, &str, String) -> ConfigError + 'a;

fn finite(v: &Spanned<f64>, field: &str, err: &ErrAt<'_>) -> Result<f64, ConfigError> {
    let x = *v.get_ref();
    if x.is_finite() {
        Ok(x)
    } else {
        Err(err(
            Some(v.span()),
            field,
            format!("is {x}; give a finite number"),
        ))
    }
}

fn normal(
    raw: Option<&Spanned<RawNormal>>,
    default_mean: f64,
    field: &str,
    err: &ErrAt<'_>,
) -> Result<Normal, ConfigError> {
    let Some(r) = raw else {
        return Ok(Normal {
            mean: default_mean,
            sd: 0.0,
        });
    };
    let r = r.get_ref();
    let mean = finite(&r.mean, &format!("{field}.mean"), err)?;
    let sd = match &r.sd {
        Some(s) => {
            let v = finite(s, &format!("{field}.sd"), err)?;
            if v < 0.0 {
                return Err(err(
                    Some(s.span()),
                    &format!("{field}.sd"),
                    format!("is {v}; a standard deviation is 0 or more"),
                ));
            }
            v
        }
        None => 0.0,
    };
    Ok(Normal { mean, sd })
}

/// Checks the section. `features` is the config's `data.features`: a named column that is not
/// among them is refused here (with every other column as features, the data file decides,
/// and [`crate::fleet`] refuses an unknown name when it reads the file).
///
/// # Errors
/// [`ConfigError::Invalid`] naming the field: a missing or non-positive `spec`, a negative
/// standard deviation or noise, a value that is not finite, an unknown column.
pub fn check(
    raw: &Spanned<RawFleet>,
    features: &FeatureSelect,
    err: &ErrAt<'_>,
) -> Result<FleetSpread, ConfigError> {
    let r = raw.get_ref();
    let Some(spec_raw) = &r.spec else {
        return Err(err(
            Some(raw.span()),
            "fleet.spec",
            "missing key `spec`; add the largest error a unit may have and still meet the \
             spec (RMSE in the target's unit, or error rate in % for classification)"
                .into(),
        ));
    };
    let spec = finite(spec_raw, "fleet.spec", err)?;
    if spec <= 0.0 {
        return Err(err(
            Some(spec_raw.span()),
            "fleet.spec",
            format!("is {spec}; the spec limit must be greater than 0"),
        ));
    }
    let mut out = Vec::new();
    for (name, f) in &r.feature {
        let field = format!("fleet.feature.{name}");
        if let FeatureSelect::Named(names) = features {
            if !names.contains(name) {
                return Err(err(
                    Some(f.span()),
                    &field,
                    format!(
                        "`{name}` is not an input column; `data.features` lists {}",
                        names.join(", ")
                    ),
                ));
            }
        }
        let v = f.get_ref();
        let gain = normal(v.gain.as_ref(), 1.0, &format!("{field}.gain"), err)?;
        let offset = normal(v.offset.as_ref(), 0.0, &format!("{field}.offset"), err)?;
        let noise = match &v.noise {
            Some(n) => {
                let x = finite(n, &format!("{field}.noise"), err)?;
                if x < 0.0 {
                    return Err(err(
                        Some(n.span()),
                        &format!("{field}.noise"),
                        format!("is {x}; a standard deviation is 0 or more"),
                    ));
                }
                x
            }
            None => 0.0,
        };
        out.push(FeatureSpread {
            name: name.clone(),
            gain,
            offset,
            noise,
        });
    }
    Ok(FleetSpread {
        spec,
        features: out,
    })
}
