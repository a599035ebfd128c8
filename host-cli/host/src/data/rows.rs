//! The rows of a dataset, stored flat: one allocation for the values of every row.

/// Rows of `f64` values, all of one width, stored one after another in a single vector: a
/// row costs `8 · width` bytes and nothing more, where a vector per row would add its own
/// header and allocation. Row `i` is `rows[i]` or [`Rows::row`].
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Rows {
    pub(super) width: usize,
    pub(super) len: usize,
    pub(super) values: Vec<f64>,
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
    pub(super) rows: &'a Rows,
    pub(super) next: std::ops::Range<usize>,
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
