//! Why a data file was refused, naming the file, line and column.

use super::*;

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
