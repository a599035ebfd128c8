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

/// Rows of `f64` values, all of one width, stored one after another in a single vector: a
/// row costs `8 · width` bytes and nothing more, where a vector per row would add its own
/// header and allocation. Row `i` is `rows[i]` or [`Rows::row`].
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Rows {
    width: usize,
    len: usize,
    values: Vec<f64>,
}

impl Rows {
    /// No rows of `width` values.
    pub fn new(width: usize) -> Rows {
        Rows {
            width,
            len: 0,
            values: Vec::new(),
        }
    }

    /// No rows of `width` values, with room for `rows` of them.
    pub fn with_capacity(width: usize, rows: usize) -> Rows {
        Rows {
            width,
            len: 0,
            values: Vec::with_capacity(width.saturating_mul(rows)),
        }
    }

    /// The given rows, each of `width` values.
    ///
    /// # Panics
    /// If a row's length is not `width`: a mistake of the calling code, not of input data.
    pub fn from_rows<R: AsRef<[f64]>>(width: usize, rows: impl IntoIterator<Item = R>) -> Rows {
        let mut out = Rows::new(width);
        for r in rows {
            out.push(r.as_ref());
        }
        out
    }

    /// Appends a row.
    ///
    /// # Panics
    /// If `row.len()` is not the width: a mistake of the calling code, not of input data.
    pub fn push(&mut self, row: &[f64]) {
        assert_eq!(row.len(), self.width, "a row of {} values", self.width);
        self.values.extend_from_slice(row);
        self.len += 1;
    }

    /// Values per row.
    pub fn width(&self) -> usize {
        self.width
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.len
    }

    /// Whether there are no rows.
    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Row `i`.
    ///
    /// # Panics
    /// If `i` is past the end.
    pub fn row(&self, i: usize) -> &[f64] {
        &self[i]
    }

    /// The rows in order.
    pub fn iter(&self) -> RowsIter<'_> {
        RowsIter {
            rows: self,
            next: 0..self.len,
        }
    }

    /// Every value, row after row.
    pub fn values(&self) -> &[f64] {
        &self.values
    }

    /// The given rows, in that order.
    ///
    /// # Panics
    /// If an index is past the end.
    pub fn select(&self, rows: &[usize]) -> Rows {
        let mut out = Rows::with_capacity(self.width, rows.len());
        for &r in rows {
            out.push(&self[r]);
        }
        out
    }

    /// The first `n` rows (all of them if there are fewer).
    pub fn head(&self, n: usize) -> Rows {
        let n = n.min(self.len);
        Rows {
            width: self.width,
            len: n,
            values: self.values[..n * self.width].to_vec(),
        }
    }

    /// Gives back the room reserved beyond the rows held.
    pub fn shrink_to_fit(&mut self) {
        self.values.shrink_to_fit();
    }
}

impl std::ops::Index<usize> for Rows {
    type Output = [f64];

    fn index(&self, i: usize) -> &[f64] {
        assert!(i < self.len, "row {i} of {}", self.len);
        &self.values[i * self.width..(i + 1) * self.width]
    }
}

impl std::ops::IndexMut<usize> for Rows {
    fn index_mut(&mut self, i: usize) -> &mut [f64] {
        assert!(i < self.len, "row {i} of {}", self.len);
        &mut self.values[i * self.width..(i + 1) * self.width]
    }
}

impl<'a> IntoIterator for &'a Rows {
    type Item = &'a [f64];
    type IntoIter = RowsIter<'a>;

    fn into_iter(self) -> RowsIter<'a> {
        self.iter()
    }
}

/// The rows of a [`Rows`] table in order, from [`Rows::iter`].
#[derive(Clone, Debug)]
pub struct RowsIter<'a> {
    rows: &'a Rows,
    next: std::ops::Range<usize>,
}

impl<'a> Iterator for RowsIter<'a> {
    type Item = &'a [f64];

    fn next(&mut self) -> Option<&'a [f64]> {
        self.next.next().map(|i| &self.rows[i])
    }

    fn size_hint(&self) -> (usize, Option<usize>) {
        self.next.size_hint()
    }
}

impl DoubleEndedIterator for RowsIter<'_> {
    fn next_back(&mut self) -> Option<Self::Item> {
        self.next.next_back().map(|i| &self.rows[i])
    }
}

impl ExactSizeIterator for RowsIter<'_> {}

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

/// Everything that can be wrong with a data file, its column selection or its use.
///
/// Every message names the file, and the line (1-based, as an editor counts) and column where
/// there is one, and says what to do.
#[derive(Debug, thiserror::Error)]
pub enum DataError {
    /// The file could not be read.
    #[error("{}: cannot read the data file: {source}", path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// Operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The file has no content.
    #[error(
        "{}: the file is empty; a data file needs a header line naming the columns and at \
         least one data row",
        path.display()
    )]
    Empty {
        /// The file.
        path: PathBuf,
    },
    /// The first line holds only numbers, so it is data, not a header.
    #[error(
        "{}: line {line} is `{text}`, all numbers, but the first line must name the columns; \
         add a header line such as `{example}`",
        path.display()
    )]
    NoHeader {
        /// The file.
        path: PathBuf,
        /// Line of the first record.
        line: u64,
        /// The first record as read.
        text: String,
        /// A header the user could add.
        example: String,
    },
    /// A header field is empty.
    #[error(
        "{}: line {line}: column {column} of the header has no name; name every column",
        path.display()
    )]
    UnnamedColumn {
        /// The file.
        path: PathBuf,
        /// Line of the header.
        line: u64,
        /// 1-based column number.
        column: usize,
    },
    /// Two header fields have the same name.
    #[error(
        "{}: line {line}: the header names `{name}` twice (columns {first} and {second}); \
         rename one of them",
        path.display()
    )]
    DuplicateColumn {
        /// The file.
        path: PathBuf,
        /// Line of the header.
        line: u64,
        /// The repeated name.
        name: String,
        /// 1-based column of the first occurrence.
        first: usize,
        /// 1-based column of the second occurrence.
        second: usize,
    },
    /// A column named by the selection is not in the header.
    #[error(
        "{}: no column `{name}` (named as {role}); the header has: {}",
        path.display(), header.join(", ")
    )]
    MissingColumn {
        /// The file.
        path: PathBuf,
        /// The name looked for.
        name: String,
        /// Where the name came from: "a feature", "the target", "ignored".
        role: &'static str,
        /// The header's column names.
        header: Vec<String>,
    },
    /// The column selection itself is contradictory.
    #[error("{}: {message}", path.display())]
    Selection {
        /// The file.
        path: PathBuf,
        /// What is wrong and what to do.
        message: String,
    },
    /// A line has a different number of fields from the header.
    #[error(
        "{}: line {line}: {found} fields, header has {expected}; {}",
        path.display(),
        if *found < *expected {
            "the line may be cut short (a truncated last line?) or miss a value"
        } else {
            "the line may have a stray comma or an unquoted comma inside a value"
        }
    )]
    FieldCount {
        /// The file.
        path: PathBuf,
        /// Line of the record.
        line: u64,
        /// Fields found.
        found: usize,
        /// Fields in the header.
        expected: usize,
    },
    /// A field that must hold a number is empty.
    #[error(
        "{}: line {line}, column `{column}`: the field is empty; fill in a value or delete \
         the line",
        path.display()
    )]
    EmptyField {
        /// The file.
        path: PathBuf,
        /// Line of the record.
        line: u64,
        /// Column name.
        column: String,
    },
    /// A field that must hold a number does not.
    #[error(
        "{}: line {line}, column `{column}`: `{value}` is not a number; correct it, or list \
         the column under `ignore` if it is not an input",
        path.display()
    )]
    NotNumber {
        /// The file.
        path: PathBuf,
        /// Line of the record.
        line: u64,
        /// Column name.
        column: String,
        /// The text found.
        value: String,
    },
    /// A field holds NaN, an infinity, or a number beyond the `f64` range.
    #[error(
        "{}: line {line}, column `{column}`: `{value}` is not a finite number (NaN and \
         infinities are refused); replace it with a measured value or delete the line",
        path.display()
    )]
    NotFinite {
        /// The file.
        path: PathBuf,
        /// Line of the record.
        line: u64,
        /// Column name.
        column: String,
        /// The text found.
        value: String,
    },
    /// A field holds a number larger in magnitude than [`MAX_VALUE`].
    #[error(
        "{}: line {line}, column `{column}`: `{value}` is larger in magnitude than {MAX_VALUE:e}, \
         the most a data value may be; it is not a measurement: correct it or delete the line",
        path.display()
    )]
    TooLarge {
        /// The file.
        path: PathBuf,
        /// Line of the record.
        line: u64,
        /// Column name.
        column: String,
        /// The text found, cut to a readable length.
        value: String,
    },
    /// The CSV structure is broken (bad quoting, invalid UTF-8 in a used column).
    #[error("{}: line {line}: {message}", path.display())]
    Csv {
        /// The file.
        path: PathBuf,
        /// Line where the reader stopped.
        line: u64,
        /// What the reader found.
        message: String,
    },
    /// The header is there but no data row follows.
    #[error("{}: the file has a header but no data rows; add at least one sample", path.display())]
    NoRows {
        /// The file.
        path: PathBuf,
    },
    /// A class label is not one of the classes the model was trained on.
    #[error(
        "{}: line {line}, column `{column}`: class `{value}` is not one of the model's \
         classes ({}); correct the label or retrain with this class",
        path.display(), known.join(", ")
    )]
    UnknownClass {
        /// The file.
        path: PathBuf,
        /// Line of the record.
        line: u64,
        /// Target column.
        column: String,
        /// The label found.
        value: String,
        /// The classes the model knows.
        known: Vec<String>,
    },
    /// A classification target column holds only one class.
    #[error(
        "{}: column `{column}` holds only the class `{class}`; classification needs samples \
         of at least two classes",
        path.display()
    )]
    SingleClass {
        /// The file.
        path: PathBuf,
        /// Target column.
        column: String,
        /// The only class.
        class: String,
    },
    /// More distinct classes than a `u16` label can number.
    #[error(
        "{}: column `{column}` holds more than {max} distinct classes; is it really a class \
         label, or should the task be regression?",
        path.display(), max = MAX_CLASSES
    )]
    TooManyClasses {
        /// The file.
        path: PathBuf,
        /// Target column.
        column: String,
    },
    /// The dataset's features do not match what a model expects.
    #[error("{}: the features do not match the model: {detail}", path.display())]
    FeatureMismatch {
        /// The file.
        path: PathBuf,
        /// Which names differ and where.
        detail: String,
    },
    /// A scaling or split request does not fit the dataset.
    #[error("{}: {message}", path.display())]
    Request {
        /// The file the dataset came from.
        path: PathBuf,
        /// What is wrong and what to do.
        message: String,
    },
    /// A channel's statistics cannot be stored as the device's `f32` scaling.
    #[error(
        "{}: column `{columns}` (input channel {channel}): mean {mean:e}, standard deviation \
         {std:e}: {why}; check the column for wrong values or give it in another unit",
        path.display()
    )]
    Unscalable {
        /// The file the dataset came from.
        path: PathBuf,
        /// Channel index.
        channel: usize,
        /// The channel's columns: one name, or `first … last` for a window.
        columns: String,
        /// Mean of the channel's values.
        mean: f64,
        /// Population standard deviation of the channel's values.
        std: f64,
        /// Which of the two cannot be stored.
        why: String,
    },
}

/// The largest magnitude of a feature or regression-target value: 10^12. No sensor reading
/// or target is that large; a larger number is a corrupted field, and one such value would
/// make training diverge or swamp every statistic. Every command that reads data refuses it.
pub const MAX_VALUE: f64 = 1e12;

/// The most characters of a field's text echoed in a message; the rest is cut.
const ECHO_CHARS: usize = 64;

/// The most classes a classification target may have: labels are `u16`.
pub const MAX_CLASSES: usize = u16::MAX as usize + 1;

impl Dataset {
    /// Reads a CSV file with the columns chosen by `spec`. For classification the classes are
    /// found in the file (see the [module docs](self) for their order).
    ///
    /// # Errors
    /// A [`DataError`] naming the file, line and column: unreadable or empty file, no header,
    /// unnamed or duplicate columns, a selected column missing from the header, a line with
    /// the wrong number of fields, an empty, non-numeric or non-finite value, no data rows, a
    /// classification target with one class or more than [`MAX_CLASSES`].
    pub fn load(path: &Path, spec: &DataSpec) -> Result<Dataset, DataError> {
        let bytes = read(path)?;
        Dataset::from_bytes(path, &bytes, spec, None)
    }

    /// Like [`Dataset::load`] for classification with the class list of a trained model, so
    /// that label `i` means the same class as when the model was trained. The file may hold
    /// any subset of the classes, even a single one.
    ///
    /// # Errors
    /// As [`Dataset::load`], and [`DataError::UnknownClass`] for a label not in `classes`.
    /// A regression `spec` with a class list is a [`DataError::Selection`] error.
    pub fn load_with_classes(
        path: &Path,
        spec: &DataSpec,
        classes: &[String],
    ) -> Result<Dataset, DataError> {
        let bytes = read(path)?;
        Dataset::from_bytes(path, &bytes, spec, Some(classes))
    }

    /// Parses CSV text already in memory; `source` names it in errors. `classes` is the class
    /// list of a trained model, as in [`Dataset::load_with_classes`].
    ///
    /// # Errors
    /// As [`Dataset::load_with_classes`], without the I/O errors.
    pub fn from_bytes(
        source: &Path,
        bytes: &[u8],
        spec: &DataSpec,
        classes: Option<&[String]>,
    ) -> Result<Dataset, DataError> {
        Loader::new(source, spec, classes)?.run(bytes)
    }

    /// Number of samples.
    pub fn len(&self) -> usize {
        self.x.len()
    }

    /// Whether there are no samples.
    pub fn is_empty(&self) -> bool {
        self.x.is_empty()
    }

    /// The class names of a classification dataset, in label order.
    pub fn classes(&self) -> Option<&[String]> {
        match &self.target {
            Targets::Classes { names, .. } => Some(names),
            Targets::Values { .. } => None,
        }
    }

    /// Checks that the feature columns are exactly `expected`, by name and in order, as a
    /// model trained on other data requires.
    ///
    /// # Errors
    /// [`DataError::FeatureMismatch`] saying which names are missing, extra or out of place.
    pub fn check_features(&self, expected: &[String]) -> Result<(), DataError> {
        if self.features == expected {
            return Ok(());
        }
        let missing: Vec<&str> = expected
            .iter()
            .filter(|e| !self.features.contains(e))
            .map(String::as_str)
            .collect();
        let extra: Vec<&str> = self
            .features
            .iter()
            .filter(|f| !expected.contains(f))
            .map(String::as_str)
            .collect();
        let mut parts = vec![format!(
            "the model takes {} features, the file gives {}",
            expected.len(),
            self.features.len()
        )];
        if !missing.is_empty() {
            parts.push(format!("missing {}", quoted_list(&missing)));
        }
        if !extra.is_empty() {
            parts.push(format!(
                "not in the model {} (list them under `ignore`)",
                quoted_list(&extra)
            ));
        }
        if missing.is_empty() && extra.is_empty() {
            // Same names, another order: name the first position that differs.
            if let Some((i, (want, got))) = expected
                .iter()
                .zip(&self.features)
                .enumerate()
                .find(|(_, (a, b))| a != b)
            {
                parts.push(format!(
                    "feature {} should be `{want}` but is `{got}`; list the features in the \
                     model's order",
                    i + 1
                ));
            }
        }
        Err(DataError::FeatureMismatch {
            path: self.source.clone(),
            detail: parts.join("; "),
        })
    }

    fn select(&self, rows: &[usize]) -> Dataset {
        Dataset {
            source: self.source.clone(),
            features: self.features.clone(),
            x: self.x.select(rows),
            target: self.target.select(rows),
        }
    }
}

fn read(path: &Path) -> Result<Vec<u8>, DataError> {
    hone_report::fsutil::read_limited(path, hone_report::fsutil::limits::CSV_BYTES, "data file").map_err(
        |source| DataError::Io {
            path: path.to_path_buf(),
            source,
        },
    )
}

fn quoted_list(names: &[&str]) -> String {
    names
        .iter()
        .map(|n| format!("`{n}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Canonical text of a class label: integers lose signs and leading zeros (`+03` is `3`).
fn canonical_label(text: &str) -> String {
    match text.parse::<i64>() {
        Ok(v) => v.to_string(),
        Err(_) => text.to_string(),
    }
}

/// Parses a number, refusing NaN, infinities and overflow.
fn parse_number(path: &Path, line: u64, column: &str, text: &str) -> Result<f64, DataError> {
    if text.is_empty() {
        return Err(DataError::EmptyField {
            path: path.to_path_buf(),
            line,
            column: hone_report::fsutil::echo(column, ECHO_CHARS),
        });
    }
    match text.parse::<f64>() {
        Ok(v) if v.is_finite() && v.abs() <= MAX_VALUE => Ok(v),
        Ok(v) if v.is_finite() => Err(DataError::TooLarge {
            path: path.to_path_buf(),
            line,
            column: hone_report::fsutil::echo(column, ECHO_CHARS),
            value: hone_report::fsutil::echo(text, ECHO_CHARS),
        }),
        Ok(_) => Err(DataError::NotFinite {
            path: path.to_path_buf(),
            line,
            column: hone_report::fsutil::echo(column, ECHO_CHARS),
            value: hone_report::fsutil::echo(text, ECHO_CHARS),
        }),
        Err(_) => Err(DataError::NotNumber {
            path: path.to_path_buf(),
            line,
            column: hone_report::fsutil::echo(column, ECHO_CHARS),
            value: hone_report::fsutil::echo(text, ECHO_CHARS),
        }),
    }
}

/// The column plan of one load, and the rows read so far.
struct Loader<'a> {
    path: &'a Path,
    spec: &'a DataSpec,
    classes: Option<&'a [String]>,
}

/// Resolved column indices.
struct Columns {
    header: Vec<String>,
    features: Vec<usize>,
    targets: Vec<usize>,
}

impl<'a> Loader<'a> {
    fn new(
        path: &'a Path,
        spec: &'a DataSpec,
        classes: Option<&'a [String]>,
    ) -> Result<Loader<'a>, DataError> {
        let selection = |message: String| DataError::Selection {
            path: path.to_path_buf(),
            message,
        };
        if spec.target.is_empty() {
            return Err(selection(
                "no target column is named; name the column the model predicts".into(),
            ));
        }
        if spec.task == Task::Classification && spec.target.len() != 1 {
            return Err(selection(format!(
                "classification takes one target column of labels, {} are named ({})",
                spec.target.len(),
                spec.target.join(", ")
            )));
        }
        if classes.is_some() && spec.task == Task::Regression {
            return Err(selection(
                "a class list was given for a regression dataset; classes apply only to \
                 classification"
                    .into(),
            ));
        }
        if let Some(c) = classes {
            if c.len() < 2 || c.len() > MAX_CLASSES {
                return Err(selection(format!(
                    "the model's class list has {} entries; it needs 2 to {MAX_CLASSES}",
                    c.len()
                )));
            }
        }
        // Each name may have one role only.
        let mut roles: HashMap<&str, &'static str> = HashMap::new();
        let features: &[String] = match &spec.features {
            FeatureSelect::Named(f) => f,
            FeatureSelect::AllOther => &[],
        };
        for (names, role) in [
            (&spec.target[..], "the target"),
            (&spec.ignore[..], "ignored"),
            (features, "a feature"),
        ] {
            for n in names {
                if let Some(prev) = roles.insert(n.as_str(), role) {
                    return Err(selection(if prev == role {
                        format!("column `{n}` is named twice as {role}; name it once")
                    } else {
                        format!(
                            "column `{n}` is named both as {prev} and as {role}; give each \
                             column one role"
                        )
                    }));
                }
            }
        }
        Ok(Loader {
            path,
            spec,
            classes,
        })
    }

    fn err_path(&self) -> PathBuf {
        self.path.to_path_buf()
    }

    fn columns(&self, header: Vec<String>, line: u64) -> Result<Columns, DataError> {
        let mut seen: HashMap<&str, usize> = HashMap::new();
        for (i, name) in header.iter().enumerate() {
            if name.is_empty() {
                return Err(DataError::UnnamedColumn {
                    path: self.err_path(),
                    line,
                    column: i + 1,
                });
            }
            if let Some(first) = seen.insert(name, i) {
                return Err(DataError::DuplicateColumn {
                    path: self.err_path(),
                    line,
                    name: name.clone(),
                    first: first + 1,
                    second: i + 1,
                });
            }
        }
        let find = |name: &String, role: &'static str| -> Result<usize, DataError> {
            seen.get(name.as_str())
                .copied()
                .ok_or_else(|| DataError::MissingColumn {
                    path: self.err_path(),
                    name: name.clone(),
                    role,
                    header: header.clone(),
                })
        };
        let targets = self
            .spec
            .target
            .iter()
            .map(|n| find(n, "the target"))
            .collect::<Result<Vec<_>, _>>()?;
        for n in &self.spec.ignore {
            find(n, "ignored")?;
        }
        let features = match &self.spec.features {
            FeatureSelect::Named(names) => names
                .iter()
                .map(|n| find(n, "a feature"))
                .collect::<Result<Vec<_>, _>>()?,
            FeatureSelect::AllOther => (0..header.len())
                .filter(|i| {
                    !targets.contains(i) && !self.spec.ignore.iter().any(|n| *n == header[*i])
                })
                .collect(),
        };
        if features.is_empty() {
            return Err(DataError::Selection {
                path: self.err_path(),
                message: format!(
                    "no feature columns are left after the target and ignored columns; the \
                     header has: {}",
                    header.join(", ")
                ),
            });
        }
        Ok(Columns {
            header,
            features,
            targets,
        })
    }

    fn run(&self, bytes: &[u8]) -> Result<Dataset, DataError> {
        if bytes.iter().all(u8::is_ascii_whitespace) {
            return Err(DataError::Empty {
                path: self.err_path(),
            });
        }
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .trim(csv::Trim::All)
            .comment(Some(b'#'))
            .from_reader(bytes);
        let mut record = csv::ByteRecord::new();
        // The reader's own line count skips comment lines, so lines are counted here from the
        // byte offset of each record. Records come in file order, so the count goes on from
        // the last place asked for instead of keeping an index of every line.
        let counted = std::cell::Cell::new((0usize, 1u64));
        let line_at = |pos: Option<&csv::Position>| -> u64 {
            // A record's position is where the reader started looking for it, before the
            // blank and comment lines it skipped; step over those to the record's own line.
            let mut byte = pos.map_or(0, |p| p.byte() as usize);
            while let Some(&b) = bytes.get(byte) {
                if !matches!(b, b'\n' | b'\r' | b'#') {
                    break;
                }
                byte = match (b, bytes[byte..].iter().position(|&c| c == b'\n')) {
                    (b'#', Some(nl)) => byte + nl + 1,
                    (b'#', None) => bytes.len(),
                    _ => byte + 1,
                };
            }
            let byte = byte.min(bytes.len());
            let (from, mut line) = counted.get();
            if byte < from {
                // Not in file order (never for records): count from the start.
                line = 1 + bytes[..byte].iter().filter(|&&b| b == b'\n').count() as u64;
            } else {
                line += bytes[from..byte].iter().filter(|&&b| b == b'\n').count() as u64;
            }
            counted.set((byte, line));
            line
        };
        let csv_err = |e: csv::Error| DataError::Csv {
            path: self.err_path(),
            line: line_at(e.position()),
            message: e.to_string(),
        };
        let blank = |r: &csv::ByteRecord| r.len() == 1 && r[0].is_empty();
        loop {
            if !reader.read_byte_record(&mut record).map_err(csv_err)? {
                // Only comments and blank lines.
                return Err(DataError::Empty {
                    path: self.err_path(),
                });
            }
            if !blank(&record) {
                break;
            }
        }
        let header_line = line_at(record.position());
        let header = self.header(&record, header_line)?;
        let cols = self.columns(header, header_line)?;
        let width = cols.header.len();

        let mut x = Rows::new(cols.features.len());
        let mut values = Rows::new(cols.targets.len());
        let mut labels = Labels::new(self.classes);
        // One row's values, reused from line to line.
        let mut row: Vec<f64> = Vec::with_capacity(cols.features.len().max(cols.targets.len()));
        while reader.read_byte_record(&mut record).map_err(csv_err)? {
            let line = line_at(record.position());
            if blank(&record) {
                // A line of spaces only.
                continue;
            }
            if record.len() != width {
                return Err(DataError::FieldCount {
                    path: self.err_path(),
                    line,
                    found: record.len(),
                    expected: width,
                });
            }
            let field = |i: usize| self.text(&record, i, line, &cols.header[i]);
            row.clear();
            for &i in &cols.features {
                row.push(parse_number(self.path, line, &cols.header[i], field(i)?)?);
            }
            x.push(&row);
            match self.spec.task {
                Task::Regression => {
                    row.clear();
                    for &i in &cols.targets {
                        row.push(parse_number(self.path, line, &cols.header[i], field(i)?)?);
                    }
                    values.push(&row);
                }
                Task::Classification => {
                    let i = cols.targets[0];
                    let text = field(i)?;
                    if text.is_empty() {
                        return Err(DataError::EmptyField {
                            path: self.err_path(),
                            line,
                            column: cols.header[i].clone(),
                        });
                    }
                    labels.push(line, text);
                }
            }
        }
        x.shrink_to_fit();
        values.shrink_to_fit();
        if x.is_empty() {
            return Err(DataError::NoRows {
                path: self.err_path(),
            });
        }
        let target = match self.spec.task {
            Task::Regression => Targets::Values {
                names: cols
                    .targets
                    .iter()
                    .map(|&i| cols.header[i].clone())
                    .collect(),
                y: values,
            },
            Task::Classification => self.classes_of(&cols.header[cols.targets[0]], labels)?,
        };
        Ok(Dataset {
            source: self.err_path(),
            features: cols
                .features
                .iter()
                .map(|&i| cols.header[i].clone())
                .collect(),
            x,
            target,
        })
    }

    fn text<'r>(
        &self,
        record: &'r csv::ByteRecord,
        i: usize,
        line: u64,
        column: &str,
    ) -> Result<&'r str, DataError> {
        let bytes = record.get(i).unwrap_or_default();
        std::str::from_utf8(bytes).map_err(|_| DataError::Csv {
            path: self.err_path(),
            line,
            message: format!(
                "column `{column}` holds bytes that are not UTF-8 text; save the file as UTF-8"
            ),
        })
    }

    fn header(&self, record: &csv::ByteRecord, line: u64) -> Result<Vec<String>, DataError> {
        let mut header = Vec::with_capacity(record.len());
        for (i, bytes) in record.iter().enumerate() {
            let mut name = String::from_utf8(bytes.to_vec()).map_err(|_| DataError::Csv {
                path: self.err_path(),
                line,
                message: format!(
                    "header column {} is not UTF-8 text; save the file as UTF-8",
                    i + 1
                ),
            })?;
            if i == 0 {
                if let Some(rest) = name.strip_prefix('\u{feff}') {
                    name = rest.trim().to_string();
                }
            }
            header.push(name);
        }
        let numeric = header
            .iter()
            .all(|h| !h.is_empty() && h.parse::<f64>().is_ok());
        if numeric {
            let mut example: Vec<String> = Vec::new();
            let named: Vec<&String> = self
                .spec
                .target
                .iter()
                .chain(&self.spec.ignore)
                .chain(match &self.spec.features {
                    FeatureSelect::Named(f) => f.iter(),
                    FeatureSelect::AllOther => [].iter(),
                })
                .collect();
            for i in 0..header.len() {
                example.push(match named.get(i) {
                    Some(n) if header.len() == named.len() => (*n).clone(),
                    _ => format!("c{}", i + 1),
                });
            }
            return Err(DataError::NoHeader {
                path: self.err_path(),
                line,
                text: header.join(","),
                example: example.join(","),
            });
        }
        Ok(header)
    }

    fn classes_of(&self, column: &str, labels: Labels) -> Result<Targets, DataError> {
        let Labels {
            mut ids,
            known,
            found,
            too_many,
            unknown,
            ..
        } = labels;
        if let Some((line, value)) = unknown {
            return Err(DataError::UnknownClass {
                path: self.err_path(),
                line,
                column: column.to_string(),
                value,
                known: known.unwrap_or_default(),
            });
        }
        if let Some(names) = known {
            // The ids are already indices into the given list.
            return Ok(Targets::Classes { names, labels: ids });
        }
        if too_many {
            return Err(DataError::TooManyClasses {
                path: self.err_path(),
                column: column.to_string(),
            });
        }
        // `found` holds the canonical labels in order of first appearance, and `ids` index it.
        let mut names = found.clone();
        let ints: Option<Vec<i64>> = names.iter().map(|s| s.parse().ok()).collect();
        if let Some(mut ints) = ints {
            ints.sort_unstable();
            names = ints.iter().map(i64::to_string).collect();
        }
        if names.len() == 1 {
            return Err(DataError::SingleClass {
                path: self.err_path(),
                column: column.to_string(),
                class: names.swap_remove(0),
            });
        }
        let index: HashMap<&str, u16> = names
            .iter()
            .enumerate()
            // At most MAX_CLASSES names, checked above, so every index fits a u16.
            .map(|(i, n)| (n.as_str(), i as u16))
            .collect();
        // Both lists hold the same canonical labels, so every one is found.
        let to_final: Vec<u16> = found.iter().map(|n| index[n.as_str()]).collect();
        for id in &mut ids {
            *id = to_final[usize::from(*id)];
        }
        Ok(Targets::Classes { names, labels: ids })
    }
}

/// The class labels of a classification file while it is read: per row a `u16` id, not the
/// label's text. With the model's class list the id is the label's index in it; without, it
/// is the index in `found`, the canonical labels in order of first appearance, and
/// [`Loader::classes_of`] maps it to the final class order once the file is read. Errors that
/// only the whole file decides (an unknown class, too many classes) are kept for the end, so
/// that a malformed number on a later line is reported first, as for any file.
struct Labels {
    ids: Vec<u16>,
    /// The model's classes, when given.
    known: Option<Vec<String>>,
    /// Canonical label to id.
    index: HashMap<String, u16>,
    /// Without a class list: canonical labels in order of first appearance.
    found: Vec<String>,
    /// More than [`MAX_CLASSES`] distinct labels were seen.
    too_many: bool,
    /// The first label not in the model's classes: line and label, cut to a readable length.
    unknown: Option<(u64, String)>,
}

impl Labels {
    fn new(classes: Option<&[String]>) -> Labels {
        let index = classes
            .unwrap_or_default()
            .iter()
            .enumerate()
            // The loader checked that a given list has at most MAX_CLASSES entries.
            .map(|(i, n)| (canonical_label(n), i as u16))
            .collect();
        Labels {
            ids: Vec::new(),
            known: classes.map(<[String]>::to_vec),
            index,
            found: Vec::new(),
            too_many: false,
            unknown: None,
        }
    }

    fn push(&mut self, line: u64, text: &str) {
        let c = canonical_label(text);
        let id = match self.index.get(&c) {
            Some(&id) => id,
            None if self.known.is_some() => {
                if self.unknown.is_none() {
                    self.unknown = Some((line, hone_report::fsutil::echo(text, ECHO_CHARS)));
                }
                0
            }
            None if self.found.len() == MAX_CLASSES => {
                self.too_many = true;
                0
            }
            None => {
                // Fewer than MAX_CLASSES so far, so the new id fits a u16.
                let id = self.found.len() as u16;
                self.found.push(c.clone());
                self.index.insert(c, id);
                id
            }
        };
        self.ids.push(id);
    }
}

/// A channel whose values do not vary in the data, so its standard deviation is zero. It gets
/// gain 1 (the scaled values are then all zero); the model learns nothing from it.
#[derive(Clone, Debug, PartialEq)]
pub struct ConstantChannel {
    /// Channel index.
    pub channel: usize,
    /// The channel's columns: one name, or `first … last` for a window.
    pub columns: String,
    /// Its value (the mean; all values are within about 1e-9 of it, relative).
    pub value: f64,
}

impl fmt::Display for ConstantChannel {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "channel {} ({}) is constant at {}; it was given gain 1 and carries no information, \
             so check the sensor or drop the column",
            self.channel, self.columns, self.value
        )
    }
}

/// Input scaling fitted on a dataset: one [`ChannelScale`] per input channel, and the
/// channels that could not be standardized.
///
/// Standardizing means `offset = mean` and `gain = 1 / std` (population standard deviation,
/// dividing by the number of values), so the scaled training data of each channel have mean
/// 0 and standard deviation 1, and fit an input format such as Q3.12 (range ±8) with room
/// for outliers up to 8 standard deviations. Statistics are computed in `f64`; the stored
/// offset and gain are `f32`, as the device uses them.
#[derive(Clone, Debug, PartialEq)]
pub struct Scaling {
    /// One entry per channel.
    pub scales: Vec<ChannelScale>,
    /// Channels with zero spread (see [`ConstantChannel`]).
    pub constant: Vec<ConstantChannel>,
}

impl Scaling {
    /// Standardizes each feature column on its own: one channel per feature (tabular data,
    /// `channels = features, length = 1`).
    ///
    /// # Errors
    /// As [`Scaling::fit_per_channel`].
    pub fn fit_standardize(data: &Dataset) -> Result<Scaling, DataError> {
        fit(data, data.features.len().max(1))
    }

    /// Standardizes per channel for inputs with several samples per channel. The features are
    /// read channel-major (`[c][t]`): channel `c` is the contiguous run of
    /// `len = features / channels` columns starting at column `c · len`, and all of its values
    /// over all rows share one offset and one gain. For a single-channel window of 64 samples
    /// (`s0 … s63`), `channels = 1` gives one offset and gain for the whole window, which keeps
    /// the relative amplitude of the samples intact.
    ///
    /// # Errors
    /// [`DataError::Request`] if `channels` is zero or does not divide the feature count;
    /// [`DataError::Unscalable`] if a channel's mean or spread cannot be stored as the
    /// device's `f32` offset and gain (values near the ends of the `f64` range).
    pub fn fit_per_channel(data: &Dataset, channels: usize) -> Result<Scaling, DataError> {
        check_channels(data, channels)?;
        fit(data, channels)
    }

    /// Applies this scaling to `data` in place; see [`apply`].
    ///
    /// # Errors
    /// As [`apply`].
    pub fn apply(&self, data: &mut Dataset) -> Result<(), DataError> {
        apply(&self.scales, data)
    }
}

fn check_channels(data: &Dataset, channels: usize) -> Result<(), DataError> {
    let n = data.features.len();
    if channels == 0 || !n.is_multiple_of(channels) {
        return Err(DataError::Request {
            path: data.source.clone(),
            message: format!(
                "{n} feature columns cannot be split into {channels} channels of equal length; \
                 the model's input must have channels × length = {n}"
            ),
        });
    }
    Ok(())
}

/// Mean and population standard deviation of the values in columns `cols` of every row,
/// computed so that no intermediate overflows: the values are first multiplied by a power of
/// two that brings the largest magnitude below 1, which is exact, so the result equals the
/// direct computation (same order of summation) whenever that one does not overflow. `None`
/// for no values.
fn mean_std(rows: &Rows, cols: &std::ops::Range<usize>) -> Option<(f64, f64)> {
    let count = rows.len() * cols.len();
    if count == 0 {
        return None;
    }
    let max = rows
        .iter()
        .flat_map(|r| r[cols.clone()].iter())
        .fold(0f64, |m, v| m.max(v.abs()));
    // 2^exp > max, so sums of `count` scaled values, or of their squared deviations, stay far
    // from overflow. The exponent is bounded so the factor itself stays a normal number.
    let exp = if max > 0.0 {
        (max.log2().floor() as i32 + 1).clamp(-1000, 1000)
    } else {
        0
    };
    let down = 2f64.powi(-exp);
    let n = count as f64;
    let mean_s = rows
        .iter()
        .map(|r| r[cols.clone()].iter().map(|v| v * down).sum::<f64>())
        .sum::<f64>()
        / n;
    let var_s = rows
        .iter()
        .map(|r| {
            r[cols.clone()]
                .iter()
                .map(|v| (v * down - mean_s) * (v * down - mean_s))
                .sum::<f64>()
        })
        .sum::<f64>()
        / n;
    let up = 2f64.powi(exp);
    Some((mean_s * up, var_s.sqrt() * up))
}

/// The columns of channel `c` as one label: one name, or `first … last` for a window.
fn channel_columns(data: &Dataset, cols: &std::ops::Range<usize>) -> String {
    if cols.len() == 1 {
        data.features[cols.start].clone()
    } else {
        format!(
            "{} … {}",
            data.features[cols.start],
            data.features[cols.end - 1]
        )
    }
}

/// Fits `channels` channels; the caller has checked that `channels` divides the features.
fn fit(data: &Dataset, channels: usize) -> Result<Scaling, DataError> {
    let len = data.features.len() / channels;
    let mut scales = Vec::with_capacity(channels);
    let mut constant = Vec::new();
    for c in 0..channels {
        let cols = c * len..(c + 1) * len;
        let (mean, std) = mean_std(&data.x, &cols).unwrap_or((0.0, 0.0));
        let offset = mean as f32;
        let unscalable = |why: &str| DataError::Unscalable {
            path: data.source.clone(),
            channel: c,
            columns: channel_columns(data, &cols),
            mean,
            std,
            why: why.to_owned(),
        };
        if !offset.is_finite() {
            return Err(unscalable(
                "the mean is beyond the f32 range of the stored offset",
            ));
        }
        if std <= 1e-9 * mean.abs().max(1.0) {
            constant.push(ConstantChannel {
                channel: c,
                columns: channel_columns(data, &cols),
                value: mean,
            });
            scales.push(ChannelScale { offset, gain: 1.0 });
            continue;
        }
        let gain = (1.0 / std) as f32;
        if !gain.is_normal() {
            return Err(unscalable(
                "1 / standard deviation is beyond the f32 range of the stored gain",
            ));
        }
        scales.push(ChannelScale { offset, gain });
    }
    Ok(Scaling { scales, constant })
}

/// Applies per-channel scaling in place: each feature value `v` of channel `c` becomes
/// `(v − offset_c) · gain_c`, computed in `f64` from the `f32` offset and gain, exactly as
/// stored for the device. With `n` scales and `F` features, each channel is a contiguous run of
/// `F / n` columns (channel-major), as in [`Scaling::fit_per_channel`].
///
/// No scales leave the data as they are.
///
/// # Errors
/// [`DataError::Request`] if the number of scales does not divide the feature count.
pub fn apply(scales: &[ChannelScale], data: &mut Dataset) -> Result<(), DataError> {
    // No scales: the inputs are used as they are (`standardize = false`).
    if scales.is_empty() {
        return Ok(());
    }
    check_channels(data, scales.len())?;
    let len = data.features.len() / scales.len();
    for r in 0..data.x.len() {
        let row = &mut data.x[r];
        for (c, s) in scales.iter().enumerate() {
            let (offset, gain) = (f64::from(s.offset), f64::from(s.gain));
            for v in &mut row[c * len..(c + 1) * len] {
                *v = (*v - offset) * gain;
            }
        }
    }
    Ok(())
}

/// Splits a dataset into a training part and a hold-out part, deterministically for a seed.
///
/// Rows are grouped into strata: one per class for classification (so each class keeps its
/// share in both parts), a single one for regression. From each stratum of `n` rows,
/// `round(n · holdout_fraction)` rows go to the hold-out, but never all of them: every stratum
/// keeps at least one row for training. Which rows go is decided by a Fisher–Yates shuffle of
/// the stratum with the core's [`Rng`] seeded with `seed`. Both parts keep the file order of
/// their rows.
///
/// # Errors
/// [`DataError::Request`] if `holdout_fraction` is not in `[0, 1)`.
pub fn split(
    data: &Dataset,
    holdout_fraction: f64,
    seed: u64,
) -> Result<(Dataset, Dataset), DataError> {
    if !(0.0..1.0).contains(&holdout_fraction) {
        return Err(DataError::Request {
            path: data.source.clone(),
            message: format!(
                "hold-out fraction {holdout_fraction} is outside [0, 1); use for example 0.2 \
                 to keep a fifth of the rows for evaluation"
            ),
        });
    }
    let strata: Vec<Vec<usize>> = match &data.target {
        Targets::Values { .. } => vec![(0..data.len()).collect()],
        Targets::Classes { names, labels } => {
            let mut s = vec![Vec::new(); names.len()];
            for (row, &l) in labels.iter().enumerate() {
                s[l as usize].push(row);
            }
            s
        }
    };
    let mut rng = Rng::new(seed);
    let mut held = vec![false; data.len()];
    for mut rows in strata {
        let n = rows.len();
        if n == 0 {
            continue;
        }
        let k = ((n as f64 * holdout_fraction).round() as usize).min(n - 1);
        // Fisher–Yates from the back: after the loop, the last `k` positions hold a uniformly
        // chosen subset.
        for i in (n - k..n).rev() {
            let j = rng.below(i as u64 + 1) as usize;
            rows.swap(i, j);
        }
        for &r in &rows[n - k..] {
            held[r] = true;
        }
    }
    let train: Vec<usize> = (0..data.len()).filter(|&r| !held[r]).collect();
    let hold: Vec<usize> = (0..data.len()).filter(|&r| held[r]).collect();
    Ok((data.select(&train), data.select(&hold)))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn spec(target: &str, ignore: &[&str], task: Task) -> DataSpec {
        DataSpec {
            features: FeatureSelect::AllOther,
            target: vec![target.to_string()],
            ignore: ignore.iter().map(|s| s.to_string()).collect(),
            task,
        }
    }

    fn load(text: &str, spec: &DataSpec) -> Result<Dataset, DataError> {
        Dataset::from_bytes(Path::new("t.csv"), text.as_bytes(), spec, None)
    }

    #[test]
    fn reads_features_and_targets() {
        let d = load(
            "unit,raw,temp,vwc\n1,1647,7.16,0.3841\n# a comment\n\n2, 2316 ,32.64,0.14",
            &spec("vwc", &["unit"], Task::Regression),
        )
        .unwrap();
        assert_eq!(d.features, ["raw", "temp"]);
        assert_eq!(d.x, Rows::from_rows(2, [[1647.0, 7.16], [2316.0, 32.64]]));
        assert_eq!(d.x.values(), [1647.0, 7.16, 2316.0, 32.64]);
        assert_eq!(
            d.target,
            Targets::Values {
                names: vec!["vwc".into()],
                y: Rows::from_rows(1, [[0.3841], [0.14]])
            }
        );
    }

    #[test]
    fn rows_hold_their_values_row_after_row() {
        let mut r = Rows::with_capacity(3, 2);
        assert!(r.is_empty());
        r.push(&[1.0, 2.0, 3.0]);
        r.push(&[4.0, 5.0, 6.0]);
        r.push(&[7.0, 8.0, 9.0]);
        assert_eq!((r.width(), r.len()), (3, 3));
        assert_eq!(r.row(1), [4.0, 5.0, 6.0]);
        r[2][0] = -7.0;
        assert_eq!(r.values(), [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, -7.0, 8.0, 9.0]);
        let picked = r.select(&[2, 0, 2]);
        assert_eq!(
            picked,
            Rows::from_rows(3, [[-7.0, 8.0, 9.0], [1.0, 2.0, 3.0], [-7.0, 8.0, 9.0]])
        );
        assert_eq!(
            r.head(2),
            Rows::from_rows(3, [[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]])
        );
        assert_eq!(r.head(9), r);
        assert_eq!(r.iter().next_back(), Some(&[-7.0, 8.0, 9.0][..]));
        // Rows of no values still count.
        let empty = Rows::from_rows(0, [[0.0; 0]; 4]);
        assert_eq!((empty.len(), empty.iter().count()), (4, 4));
        assert!(empty.iter().all(<[f64]>::is_empty));
    }

    #[test]
    fn class_errors_come_after_a_bad_number_on_a_later_line() {
        // Labels are turned into ids while the file is read, but a class error, which only
        // the whole file decides, is still reported after any malformed number, as when the
        // labels were kept as text to the end.
        let classes: Vec<String> = ["0", "1"].iter().map(|s| s.to_string()).collect();
        let s = spec("zone", &[], Task::Classification);
        let text = b"a,zone\n1,7\n2,8\nx,1\n";
        let e = Dataset::from_bytes(Path::new("c.csv"), text, &s, Some(&classes)).unwrap_err();
        assert!(matches!(e, DataError::NotNumber { line: 4, .. }), "{e}");
        let e =
            Dataset::from_bytes(Path::new("c.csv"), &text[..15], &s, Some(&classes)).unwrap_err();
        assert!(
            matches!(&e, DataError::UnknownClass { line: 2, value, .. } if value == "7"),
            "{e}"
        );
    }

    #[test]
    fn more_classes_than_a_u16_numbers_are_refused() {
        let s = spec("k", &[], Task::Classification);
        let mut text = String::from("a,k\n");
        for i in 0..MAX_CLASSES {
            text.push_str(&format!("1,c{i}\n"));
        }
        let d = load(&text, &s).unwrap();
        let Targets::Classes { names, labels } = &d.target else {
            panic!("classification targets expected")
        };
        assert_eq!(
            (names.len(), labels[MAX_CLASSES - 1]),
            (MAX_CLASSES, u16::MAX)
        );
        assert_eq!(names[MAX_CLASSES - 1], format!("c{}", MAX_CLASSES - 1));
        text.push_str("1,one-more\n");
        let e = load(&text, &s).unwrap_err();
        assert!(matches!(e, DataError::TooManyClasses { .. }), "{e}");
    }

    #[test]
    fn lines_count_comments_and_blank_lines() {
        let text = "# probe 7\n\na,y\n# bench run 2\n1,2\n\n  \n# end\n3,x\n";
        let e = load(text, &spec("y", &[], Task::Regression)).unwrap_err();
        assert!(matches!(e, DataError::NotNumber { line: 9, .. }), "{e}");
        let e = load("# c\n  \na,a\n1,2\n", &spec("y", &[], Task::Regression)).unwrap_err();
        assert!(
            matches!(e, DataError::DuplicateColumn { line: 3, .. }),
            "{e}"
        );
    }

    #[test]
    fn named_features_keep_their_order() {
        let s = DataSpec {
            features: FeatureSelect::Named(vec!["b".into(), "a".into()]),
            target: vec!["y".into(), "z".into()],
            ignore: vec![],
            task: Task::Regression,
        };
        let d = load("a,b,c,y,z\n1,2,x,3,4\n", &s).unwrap();
        assert_eq!(d.features, ["b", "a"]);
        assert_eq!(d.x, Rows::from_rows(2, [[2.0, 1.0]]));
        assert_eq!(d.target.outputs(), 2);
    }

    #[test]
    fn every_spelling_of_nan_and_infinity_is_refused() {
        for bad in ["nan", "NaN", "inf", "-inf", "+Infinity", "INF", "1e999"] {
            let e = load(
                &format!("a,y\n1,2\n{bad},3\n"),
                &spec("y", &[], Task::Regression),
            )
            .unwrap_err();
            assert!(
                matches!(e, DataError::NotFinite { line: 3, .. }),
                "{bad}: {e}"
            );
            assert!(e.to_string().contains("line 3, column `a`"), "{e}");
        }
    }

    #[test]
    fn integer_classes_sort_by_value() {
        let d = load(
            "a,zone\n1,10\n2,2\n3,03\n4,2\n",
            &spec("zone", &[], Task::Classification),
        )
        .unwrap();
        assert_eq!(
            d.target,
            Targets::Classes {
                names: vec!["2".into(), "3".into(), "10".into()],
                labels: vec![2, 0, 1, 0]
            }
        );
    }

    #[test]
    fn text_classes_keep_first_appearance() {
        let d = load(
            "a,state\n1,wet\n2,dry\n3,wet\n4,moist\n",
            &spec("state", &[], Task::Classification),
        )
        .unwrap();
        assert_eq!(d.classes().unwrap(), ["wet", "dry", "moist"]);
        let Targets::Classes { labels, .. } = &d.target else {
            panic!("classification targets expected")
        };
        assert_eq!(labels, &[0, 1, 0, 2]);
    }

    #[test]
    fn given_classes_fix_the_mapping_and_allow_one_class() {
        let classes: Vec<String> = ["0", "1", "2", "3"].iter().map(|s| s.to_string()).collect();
        let s = spec("zone", &[], Task::Classification);
        let d = Dataset::from_bytes(
            Path::new("c.csv"),
            b"a,zone\n1,2\n2,2\n",
            &s,
            Some(&classes),
        )
        .unwrap();
        let Targets::Classes { names, labels } = &d.target else {
            panic!("classification targets expected")
        };
        assert_eq!(names, &classes);
        assert_eq!(labels, &[2, 2]);
        let e = Dataset::from_bytes(
            Path::new("c.csv"),
            b"a,zone\n1,2\n2,7\n",
            &s,
            Some(&classes),
        )
        .unwrap_err();
        assert!(matches!(e, DataError::UnknownClass { line: 3, .. }), "{e}");
    }

    #[test]
    fn check_features_names_the_difference() {
        let d = load("a,b,y\n1,2,3\n", &spec("y", &[], Task::Regression)).unwrap();
        assert!(d.check_features(&["a".into(), "b".into()]).is_ok());
        let e = d.check_features(&["b".into(), "a".into()]).unwrap_err();
        assert!(
            e.to_string().contains("feature 1 should be `b` but is `a`"),
            "{e}"
        );
        let e = d.check_features(&["a".into(), "c".into()]).unwrap_err();
        let text = e.to_string();
        assert!(
            text.contains("missing `c`") && text.contains("not in the model `b`"),
            "{text}"
        );
    }

    fn data(x: Vec<Vec<f64>>, features: &[&str]) -> Dataset {
        let n = x.len();
        Dataset {
            source: PathBuf::from("m.csv"),
            features: features.iter().map(|s| s.to_string()).collect(),
            x: Rows::from_rows(features.len(), x),
            target: Targets::Values {
                names: vec!["y".into()],
                y: Rows::from_rows(1, vec![[0.0]; n]),
            },
        }
    }

    #[test]
    fn standardize_gives_zero_mean_unit_std() {
        // Column a: 1, 2, 3, 6 has mean 3, population variance (4+1+0+9)/4 = 3.5.
        let mut d = data(
            vec![
                vec![1.0, 5.0],
                vec![2.0, 5.0],
                vec![3.0, 5.0],
                vec![6.0, 5.0],
            ],
            &["a", "b"],
        );
        let s = Scaling::fit_standardize(&d).unwrap();
        assert_eq!(s.scales[0].offset, 3.0);
        assert_eq!(s.scales[0].gain, (1.0 / 3.5f64.sqrt()) as f32);
        assert_eq!(
            s.scales[1],
            ChannelScale {
                offset: 5.0,
                gain: 1.0
            }
        );
        assert_eq!(s.constant.len(), 1);
        assert_eq!(s.constant[0].columns, "b");
        s.apply(&mut d).unwrap();
        let col: Vec<f64> = d.x.iter().map(|r| r[0]).collect();
        let mean = col.iter().sum::<f64>() / 4.0;
        let var = col.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / 4.0;
        assert!(mean.abs() < 1e-6, "{mean}");
        assert!((var - 1.0).abs() < 1e-6, "{var}");
        assert!(d.x.iter().all(|r| r[1] == 0.0));
    }

    #[test]
    fn statistics_of_huge_values_do_not_overflow() {
        // The direct sums of squares would reach 1e600: beyond f64, so the spread was taken
        // as infinite and the channel as constant. Scaled by a power of two they stay exact.
        let rows = Rows::from_rows(1, [[1e300], [-1e300], [3e300], [-3e300]]);
        let (mean, std) = mean_std(&rows, &(0..1)).unwrap();
        assert_eq!(mean, 0.0);
        // Population variance (1 + 1 + 9 + 9) / 4 = 5, times 1e600.
        let want = 5f64.sqrt() * 1e300;
        assert!((std - want).abs() <= 1e-15 * want, "{std} vs {want}");
        // For ordinary values the result is that of the direct computation, bit for bit.
        let rows = Rows::from_rows(1, [[1647.0], [2316.0], [1980.5], [2104.25]]);
        let direct_mean = (1647.0 + 2316.0 + 1980.5 + 2104.25) / 4.0;
        let direct_var = rows
            .iter()
            .map(|r| (r[0] - direct_mean) * (r[0] - direct_mean))
            .sum::<f64>()
            / 4.0;
        assert_eq!(
            mean_std(&rows, &(0..1)),
            Some((direct_mean, direct_var.sqrt()))
        );
        assert_eq!(mean_std(&Rows::new(1), &(0..1)), None);
    }

    #[test]
    fn unscalable_columns_are_errors_naming_file_and_column() {
        // A spread of 1e200 needs a gain of 1e-200: zero in f32. A mean of 1e300 is beyond the
        // f32 offset. Neither may pass as a "constant" channel with gain 1.
        for (values, why) in [
            ([1e200, -1e200, 0.0], "gain"),
            ([1e300, 1e300, 1e300], "offset"),
        ] {
            let d = data(
                values
                    .iter()
                    .map(|&v: &f64| vec![1.0 + v.signum(), v])
                    .collect(),
                &["raw_counts", "temp_c"],
            );
            let e = Scaling::fit_standardize(&d).unwrap_err();
            assert!(
                matches!(&e, DataError::Unscalable { channel: 1, columns, .. } if columns == "temp_c"),
                "{e:?}"
            );
            let text = e.to_string();
            assert!(
                text.starts_with(&format!("{}: column `temp_c`", d.source.display())),
                "{text}"
            );
            assert!(text.contains(why), "{text}");
        }
        // Large but storable values scale normally.
        let d = data(vec![vec![1e30], vec![3e30]], &["a"]);
        let s = Scaling::fit_standardize(&d).unwrap();
        let mean = (1e30f64 + 3e30) / 2.0;
        let std = (((1e30 - mean) * (1e30 - mean) + (3e30 - mean) * (3e30 - mean)) / 2.0).sqrt();
        assert_eq!(s.scales[0].offset, mean as f32);
        assert_eq!(s.scales[0].gain, (1.0 / std) as f32);
        assert!((s.scales[0].gain as f64 * 1e30 - 1.0).abs() < 1e-6);
        assert!(s.constant.is_empty());
    }

    #[test]
    fn per_channel_pools_each_run_of_columns() {
        // Two channels of two samples: channel 0 = columns 0-1, channel 1 = columns 2-3.
        let d = data(
            vec![vec![0.0, 2.0, 10.0, 10.0], vec![4.0, 6.0, 30.0, 30.0]],
            &["a0", "a1", "b0", "b1"],
        );
        let s = Scaling::fit_per_channel(&d, 2).unwrap();
        // Channel 0 values 0, 2, 4, 6: mean 3, variance (9+1+1+9)/4 = 5.
        assert_eq!(s.scales[0].offset, 3.0);
        assert_eq!(s.scales[0].gain, (1.0 / 5f64.sqrt()) as f32);
        // Channel 1 values 10, 10, 30, 30: mean 20, std 10.
        assert_eq!(
            s.scales[1],
            ChannelScale {
                offset: 20.0,
                gain: 0.1
            }
        );
        assert!(s.constant.is_empty());
        assert!(Scaling::fit_per_channel(&d, 3).is_err());
        assert!(Scaling::fit_per_channel(&d, 0).is_err());
        let mut d2 = d.clone();
        assert!(apply(&s.scales[..1], &mut d2).is_ok());
        assert!(apply(&s.scales[..1], &mut d2.clone()).is_ok());
        // Three scales do not divide four features.
        let three = [s.scales[0], s.scales[0], s.scales[0]];
        assert!(apply(&three, &mut d2.clone()).is_err());
        // No scales (`standardize = false`) leave the data unchanged.
        let before = d2.x.clone();
        assert!(apply(&[], &mut d2).is_ok());
        assert_eq!(d2.x, before);
    }

    fn classes(labels: &[u16], names: usize) -> Dataset {
        Dataset {
            source: PathBuf::from("k.csv"),
            features: vec!["a".into()],
            x: Rows::from_rows(1, (0..labels.len()).map(|i| [i as f64])),
            target: Targets::Classes {
                names: (0..names).map(|i| i.to_string()).collect(),
                labels: labels.to_vec(),
            },
        }
    }

    #[test]
    fn split_is_stratified_deterministic_and_complete() {
        let labels: Vec<u16> = (0..100).map(|i| if i < 80 { 0 } else { 1 }).collect();
        let d = classes(&labels, 2);
        let (train, hold) = split(&d, 0.25, 9).unwrap();
        let count = |ds: &Dataset, c: u16| match &ds.target {
            Targets::Classes { labels, .. } => labels.iter().filter(|&&l| l == c).count(),
            Targets::Values { .. } => 0,
        };
        assert_eq!((count(&hold, 0), count(&hold, 1)), (20, 5));
        assert_eq!((count(&train, 0), count(&train, 1)), (60, 15));
        // Every row lands in exactly one part, in file order.
        let mut all: Vec<f64> = train.x.iter().chain(&hold.x).map(|r| r[0]).collect();
        assert!(train.x.values().windows(2).all(|w| w[0] < w[1]));
        all.sort_by(f64::total_cmp);
        assert_eq!(all, (0..100).map(f64::from).collect::<Vec<_>>());
        assert_eq!(split(&d, 0.25, 9).unwrap(), (train.clone(), hold.clone()));
        let (_, other) = split(&d, 0.25, 10).unwrap();
        assert_ne!(other, hold);
        assert!(split(&d, 1.0, 0).is_err());
        assert!(split(&d, -0.1, 0).is_err());
        assert!(split(&d, f64::NAN, 0).is_err());
    }

    #[test]
    fn split_keeps_a_training_row_per_class() {
        let d = classes(&[0, 1, 1], 2);
        let (train, hold) = split(&d, 0.9, 1).unwrap();
        assert_eq!(train.len(), 2);
        assert_eq!(hold.len(), 1);
        let (train, hold) = split(&d, 0.0, 1).unwrap();
        assert_eq!((train.len(), hold.len()), (3, 0));
    }
}
