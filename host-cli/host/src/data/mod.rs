//! CSV datasets: loading with checks that name the line and column, input scaling, and a
//! seeded hold-out split.
//!
//! # The file
//! A data file is CSV with a **header line** naming the columns, then one sample per line:
//!
//! ```text
//! unit,raw_counts,temp_c,vwc
//! 1,1647,7.16,0.3841
//! 1,2316,32.64,0.1400
//! ```
//!
//! - Fields are separated by commas and may be quoted; spaces around a field are dropped.
//!   Blank lines and lines starting with `#` are skipped.
//! - Every line has as many fields as the header. A last line cut short (a logger that lost
//!   power mid-write) has too few fields and is reported like any other short line.
//! - Feature and regression-target values are decimal numbers (`-0.25`, `1e-3`). NaN and
//!   infinities are refused in every spelling (`nan`, `NaN`, `inf`, `-Infinity`, ...), and so
//!   are numbers too large for `f64` and numbers beyond ±[`MAX_VALUE`] (10^12), because one of
//!   them would poison every statistic. Every command that reads data applies these checks.
//! - Ignored columns are not read at all: they may hold text, such as a timestamp or a unit id.
//!
//! # Which columns are what
//! A [`DataSpec`] names the target column(s) and the ignored ones, and either lists the feature
//! columns in order or takes every other column in file order ([`FeatureSelect::AllOther`]).
//!
//! # Targets
//! - Regression: one or more numeric columns ([`Targets::Values`]).
//! - Classification: one column of class names or integers ([`Targets::Classes`]). The class
//!   order, which fixes the meaning of each model output, is: ascending by value if every
//!   label is an integer (`0, 1, 2, 3`, with `03` read as `3`), else the order of first
//!   appearance in the file. A calibration file must use the classes of the trained model, so
//!   [`Dataset::load_with_classes`] takes that list; a label outside it is an error naming its
//!   line.
//!
//! # Storage
//! A dataset keeps its feature values, and its regression targets, as [`Rows`]: one `f64`
//! table each, row after row, so a row costs 8 bytes per value and nothing more. Class labels
//! are `u16` indices, found as the file is read; the text of a label is not kept.
//!
//! # Scaling
//! [`Scaling`] fits one offset and gain per input channel ([`ChannelScale`]:
//! `x = (raw − offset) · gain`), and [`apply`] applies them. [`split`] divides a dataset into
//! a training and a hold-out part with the core's seeded generator.

use std::collections::HashMap;
use std::fmt;
use std::path::{Path, PathBuf};

use hone_core::blob::ChannelScale;
use hone_core::num::Rng;

mod error;
mod load;
mod rows;
mod scaling;

pub use error::*;
pub use load::*;
pub use rows::*;
pub use scaling::*;

/// Which columns are the model's input features.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum FeatureSelect {
    /// These columns, in this order (the order of the model's inputs).
    Named(Vec<String>),
    /// Every column that is neither a target nor ignored, in file order.
    AllOther,
}

/// What the model learns to predict.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Task {
    /// Numeric target column(s).
    Regression,
    /// One target column of class labels.
    Classification,
}

impl fmt::Display for Task {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Task::Regression => "regression",
            Task::Classification => "classification",
        })
    }
}

/// How to read a data file: which columns are features, targets and ignored, and the task.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct DataSpec {
    /// The feature columns.
    pub features: FeatureSelect,
    /// The target column(s): one for classification, one or more for regression.
    pub target: Vec<String>,
    /// Columns that are not read (ids, timestamps, notes).
    pub ignore: Vec<String>,
    /// Regression or classification.
    pub task: Task,
}

/// The targets of a dataset, one entry per row.
#[derive(Clone, Debug, PartialEq)]
pub enum Targets {
    /// Regression targets.
    Values {
        /// Target column names, in the order of `y`'s entries.
        names: Vec<String>,
        /// Per row, one value per target column.
        y: Rows,
    },
    /// Class labels.
    Classes {
        /// Class names; label `i` means `names[i]`, and the model's output `i`.
        names: Vec<String>,
        /// Per row, the index of its class in `names`.
        labels: Vec<u16>,
    },
}

impl Targets {
    /// Number of rows.
    pub fn len(&self) -> usize {
        match self {
            Targets::Values { y, .. } => y.len(),
            Targets::Classes { labels, .. } => labels.len(),
        }
    }

    /// Whether there are no rows.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The task these targets belong to.
    pub fn task(&self) -> Task {
        match self {
            Targets::Values { .. } => Task::Regression,
            Targets::Classes { .. } => Task::Classification,
        }
    }

    /// The values the model must produce per sample: the number of target columns for
    /// regression, the number of classes for classification.
    pub fn outputs(&self) -> usize {
        match self {
            Targets::Values { names, .. } | Targets::Classes { names, .. } => names.len(),
        }
    }

    /// The targets of the given rows, in that order.
    pub fn select(&self, rows: &[usize]) -> Targets {
        match self {
            Targets::Values { names, y } => Targets::Values {
                names: names.clone(),
                y: y.select(rows),
            },
            Targets::Classes { names, labels } => Targets::Classes {
                names: names.clone(),
                labels: rows.iter().map(|&r| labels[r]).collect(),
            },
        }
    }
}

/// A loaded dataset: one row per sample.
#[derive(Clone, Debug, PartialEq)]
pub struct Dataset {
    /// The file it was read from (used in error messages).
    pub source: PathBuf,
    /// Feature column names, in the order of each row of `x`.
    pub features: Vec<String>,
    /// Per row, the feature values.
    pub x: Rows,
    /// The targets.
    pub target: Targets,
}

#[cfg(test)]
mod tests;
