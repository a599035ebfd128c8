//! Reading a data file: columns, numbers, labels and the checks on each.

use super::*;

/// The largest magnitude of a feature or regression-target value: 10^12. No sensor reading
/// or target is that large; a larger number is a corrupted field, and one such value would
/// make training diverge or swamp every statistic. Every command that reads data refuses it.
pub const MAX_VALUE: f64 = 1e12;

/// The most characters of a field's text echoed in a message; the rest is cut.
pub(super) const ECHO_CHARS: usize = 64;

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

    pub(super) fn select(&self, rows: &[usize]) -> Dataset {
        Dataset {
            source: self.source.clone(),
            features: self.features.clone(),
            x: self.x.select(rows),
            target: self.target.select(rows),
        }
    }
}

pub(super) fn read(path: &Path) -> Result<Vec<u8>, DataError> {
    hone_report::fsutil::read_limited(path, crate::limits::CSV_BYTES, "data file").map_err(
        |source| DataError::Io {
            path: path.to_path_buf(),
            source,
        },
    )
}

pub(super) fn quoted_list(names: &[&str]) -> String {
    names
        .iter()
        .map(|n| format!("`{n}`"))
        .collect::<Vec<_>>()
        .join(", ")
}

/// Canonical text of a class label: integers lose signs and leading zeros (`+03` is `3`).
pub(super) fn canonical_label(text: &str) -> String {
    match text.parse::<i64>() {
        Ok(v) => v.to_string(),
        Err(_) => text.to_string(),
    }
}

/// Parses a number, refusing NaN, infinities and overflow.
pub(super) fn parse_number(
    path: &Path,
    line: u64,
    column: &str,
    text: &str,
) -> Result<f64, DataError> {
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
pub(super) struct Loader<'a> {
    pub(super) path: &'a Path,
    pub(super) spec: &'a DataSpec,
    pub(super) classes: Option<&'a [String]>,
}

/// Resolved column indices.
pub(super) struct Columns {
    pub(super) header: Vec<String>,
    pub(super) features: Vec<usize>,
    pub(super) targets: Vec<usize>,
}

impl<'a> Loader<'a> {
    pub(super) fn new(
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

    pub(super) fn err_path(&self) -> PathBuf {
        self.path.to_path_buf()
    }

    pub(super) fn columns(&self, header: Vec<String>, line: u64) -> Result<Columns, DataError> {
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

    pub(super) fn run(&self, bytes: &[u8]) -> Result<Dataset, DataError> {
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

    pub(super) fn text<'r>(
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

    pub(super) fn header(
        &self,
        record: &csv::ByteRecord,
        line: u64,
    ) -> Result<Vec<String>, DataError> {
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

    pub(super) fn classes_of(&self, column: &str, labels: Labels) -> Result<Targets, DataError> {
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
pub(super) struct Labels {
    pub(super) ids: Vec<u16>,
    /// The model's classes, when given.
    pub(super) known: Option<Vec<String>>,
    /// Canonical label to id.
    pub(super) index: HashMap<String, u16>,
    /// Without a class list: canonical labels in order of first appearance.
    pub(super) found: Vec<String>,
    /// More than [`MAX_CLASSES`] distinct labels were seen.
    pub(super) too_many: bool,
    /// The first label not in the model's classes: line and label, cut to a readable length.
    pub(super) unknown: Option<(u64, String)>,
}

impl Labels {
    pub(super) fn new(classes: Option<&[String]>) -> Labels {
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

    pub(super) fn push(&mut self, line: u64, text: &str) {
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
