//! Seeded generators for the bundled demo data. **Every number they produce is invented.**
//!
//! Two scenarios, each split the way a firmware engineer meets it: a large "factory" table from
//! many units to train the base model, then a few reference measurements of one new unit to
//! calibrate on the device, and a larger hold-out from that same unit to judge the calibration.
//!
//! - [`soil`]: a capacitive soil-moisture probe (regression). Features `raw_counts` and
//!   `temp_c`, target `vwc` (volumetric water content, m³/m³), through the Topp et al. (1980)
//!   relation between water content and soil permittivity and an invented probe model.
//! - [`vibration`]: accelerometer windows from a pump (classification). Features `s0..s63`,
//!   label `zone` 0..=3, decided from RMS velocity against the ISO 10816-3 zone limits.
//!
//! Both are deterministic: the same seed gives byte-identical CSV text on every platform.
//! [`prng`] provides the random streams and platform-independent `ln`/`sin`/`cos`; numbers are
//! written with a fixed number of decimals per column ([`Table::to_csv`]).
//!
//! The CSVs committed in the repository's `demo-data/` folder are
//! `write_all(Path::new("demo-data"), DEMO_SEED)`; a test checks they still match byte for
//! byte. To regenerate them after changing a generator, call [`write_all`] with [`DEMO_SEED`]
//! and the `demo-data` folder.

pub mod prng;
pub mod soil;
pub mod vibration;

use std::fs;
use std::io;
use std::path::{Path, PathBuf};

/// Seed of the committed demo data: the ASCII bytes of "hone" read as a big-endian integer.
pub const DEMO_SEED: u64 = 0x686F_6E65;

/// File name of the soil-probe factory table.
pub const SOIL_FACTORY_FILE: &str = "soil_factory.csv";
/// File name of the new soil probe's reference (calibration) samples.
pub const SOIL_CALIBRATION_FILE: &str = "soil_unit_calibration.csv";
/// File name of the new soil probe's hold-out samples.
pub const SOIL_HOLDOUT_FILE: &str = "soil_unit_holdout.csv";
/// File name of the pump-vibration factory table.
pub const VIBRATION_FACTORY_FILE: &str = "vibration_factory.csv";
/// File name of the new vibration sensor's calibration windows.
pub const VIBRATION_CALIBRATION_FILE: &str = "vibration_unit_calibration.csv";
/// File name of the new vibration sensor's hold-out windows.
pub const VIBRATION_HOLDOUT_FILE: &str = "vibration_unit_holdout.csv";

/// A table of numbers with named columns, as written to a demo CSV.
///
/// `header`, `decimals` and every row have one entry per column; [`Table::push`] keeps rows
/// that way.
#[derive(Clone, Debug, PartialEq)]
pub struct Table {
    /// Column names, written as the CSV's first line.
    pub header: Vec<String>,
    /// Digits after the decimal point for each column in [`Table::to_csv`].
    pub decimals: Vec<usize>,
    /// The rows, one value per column.
    pub rows: Vec<Vec<f64>>,
}

impl Table {
    /// An empty table with the given `(name, decimals)` columns.
    pub fn new(columns: &[(&str, usize)]) -> Table {
        Table {
            header: columns.iter().map(|(n, _)| (*n).to_string()).collect(),
            decimals: columns.iter().map(|(_, d)| *d).collect(),
            rows: Vec::new(),
        }
    }

    /// Appends a row.
    ///
    /// # Panics
    /// If the row's length differs from the number of columns or a value is not finite; the
    /// generators never do either, so this is a programming error.
    pub fn push(&mut self, row: Vec<f64>) {
        assert_eq!(
            row.len(),
            self.header.len(),
            "row length differs from header"
        );
        assert!(row.iter().all(|v| v.is_finite()), "non-finite value in row");
        self.rows.push(row);
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        self.rows.len()
    }

    /// Whether the table has no rows.
    pub fn is_empty(&self) -> bool {
        self.rows.is_empty()
    }

    /// Index of the column called `name`.
    pub fn column_index(&self, name: &str) -> Option<usize> {
        self.header.iter().position(|h| h == name)
    }

    /// All values of the column called `name`, top to bottom.
    pub fn column(&self, name: &str) -> Option<Vec<f64>> {
        let i = self.column_index(name)?;
        Some(self.rows.iter().map(|r| r[i]).collect())
    }

    /// The table as CSV text: a header line, then one line per row, `\n` line ends, values
    /// separated by `,` and written with the column's fixed number of decimals (Rust's
    /// `format!("{:.N}")`, which rounds the exact binary value half to even). A value that
    /// rounds to zero is written without a minus sign.
    ///
    /// # Panics
    /// If a row's length differs from the number of columns (see [`Table::push`]).
    pub fn to_csv(&self) -> String {
        let mut out = self.header.join(",");
        out.push('\n');
        for row in &self.rows {
            assert_eq!(
                row.len(),
                self.decimals.len(),
                "row length differs from header"
            );
            for (i, (v, d)) in row.iter().zip(&self.decimals).enumerate() {
                if i > 0 {
                    out.push(',');
                }
                out.push_str(&fixed(*v, *d));
            }
            out.push('\n');
        }
        out
    }
}

/// `v` with exactly `decimals` digits after the point, never as "-0.00".
fn fixed(v: f64, decimals: usize) -> String {
    let s = format!("{v:.decimals$}");
    match s.strip_prefix('-') {
        Some(rest) if rest.bytes().all(|b| b == b'0' || b == b'.') => rest.to_string(),
        _ => s,
    }
}

/// Every demo table for `seed`, paired with its file name, in a fixed order.
pub fn demo_tables(seed: u64) -> Vec<(&'static str, Table)> {
    let (soil_cal, soil_hold) = soil::soil_unit(seed);
    let (vib_cal, vib_hold) = vibration::vibration_unit(seed);
    vec![
        (SOIL_FACTORY_FILE, soil::soil_factory(seed)),
        (SOIL_CALIBRATION_FILE, soil_cal),
        (SOIL_HOLDOUT_FILE, soil_hold),
        (VIBRATION_FACTORY_FILE, vibration::vibration_factory(seed)),
        (VIBRATION_CALIBRATION_FILE, vib_cal),
        (VIBRATION_HOLDOUT_FILE, vib_hold),
    ]
}

/// Writes every demo CSV for `seed` into `dir` (created if missing) and returns the paths
/// written, in the order of [`demo_tables`].
///
/// Each file is written atomically: the text goes to a temporary file in the same folder,
/// which is flushed to disk and then renamed over the final name, so a reader never sees a
/// half-written CSV.
///
/// # Errors
/// Any I/O error from creating the folder, writing, syncing or renaming a file. Files already
/// renamed into place stay; the temporary file of the failing one is removed.
pub fn write_all(dir: &Path, seed: u64) -> io::Result<Vec<PathBuf>> {
    fs::create_dir_all(dir)?;
    let mut written = Vec::new();
    for (name, table) in demo_tables(seed) {
        let path = dir.join(name);
        hone_report::fsutil::write_atomic(&path, table.to_csv().as_bytes())?;
        written.push(path);
    }
    Ok(written)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn demo_data_dir() -> PathBuf {
        Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data")
    }

    /// The committed CSVs are exactly what the generators produce for the documented seed.
    #[test]
    fn committed_demo_csvs_match_generator() {
        for (name, table) in demo_tables(DEMO_SEED) {
            let path = demo_data_dir().join(name);
            let committed = fs::read_to_string(&path)
                .unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
            let generated = table.to_csv();
            assert!(
                committed == generated,
                "{name} differs from the generator output for DEMO_SEED; regenerate it with \
                 scenario::write_all"
            );
        }
    }

    #[test]
    fn same_seed_same_text_other_seed_other_text() {
        let a: Vec<String> = demo_tables(42).iter().map(|(_, t)| t.to_csv()).collect();
        let b: Vec<String> = demo_tables(42).iter().map(|(_, t)| t.to_csv()).collect();
        let c: Vec<String> = demo_tables(43).iter().map(|(_, t)| t.to_csv()).collect();
        assert_eq!(a, b);
        for (x, y) in a.iter().zip(&c) {
            assert_ne!(x, y);
        }
    }

    #[test]
    fn fixed_decimals_and_no_negative_zero() {
        let mut t = Table::new(&[("a", 0), ("b", 3)]);
        t.push(vec![-0.2, -0.0004]);
        t.push(vec![1234.5, 2.0]);
        t.push(vec![-7.0, 0.12345]);
        assert_eq!(t.to_csv(), "a,b\n0,0.000\n1234,2.000\n-7,0.123\n");
        assert_eq!(t.column("b"), Some(vec![-0.0004, 2.0, 0.12345]));
        assert_eq!(t.column("c"), None);
        assert_eq!(t.len(), 3);
        assert!(!t.is_empty());
    }

    #[test]
    fn write_all_writes_every_file_and_leaves_no_temporaries() {
        let dir = std::env::temp_dir().join(format!("hone-scenario-test-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        let paths = write_all(&dir, 7).expect("write demo files");
        let tables = demo_tables(7);
        assert_eq!(paths.len(), tables.len());
        for (path, (name, table)) in paths.iter().zip(&tables) {
            assert_eq!(path.file_name().and_then(|n| n.to_str()), Some(*name));
            assert_eq!(fs::read_to_string(path).expect("read back"), table.to_csv());
        }
        let leftovers: Vec<_> = fs::read_dir(&dir)
            .expect("list dir")
            .filter_map(Result::ok)
            .filter(|e| e.file_name().to_string_lossy().ends_with(".tmp"))
            .collect();
        assert!(leftovers.is_empty());
        fs::remove_dir_all(&dir).expect("clean up");
    }
}
