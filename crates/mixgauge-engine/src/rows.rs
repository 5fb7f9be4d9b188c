//! [`Rows`]: a borrowed, row-major view of the data a computation runs over, optionally
//! restricted to a subset of row indices (a fold's training or held-out part) without copying.

use crate::Error;

/// Rows of `f64` values, row-major, with an optional subset of row indices.
///
/// The subset keeps cross-validation cheap: every fold borrows the same values and differs
/// only in its index list. Indices are `u32`, so one view covers up to 4,294,967,295 rows.
#[derive(Clone, Copy, Debug)]
pub struct Rows<'a> {
    values: &'a [f64],
    dims: usize,
    subset: Option<&'a [u32]>,
}

impl<'a> Rows<'a> {
    /// A view of `values` as rows of `dims` columns.
    ///
    /// # Errors
    /// [`Error::Shape`] when `dims` is zero or `values.len()` is not a multiple of `dims`;
    /// [`Error::NoRows`] when there are no values.
    pub fn new(values: &'a [f64], dims: usize) -> Result<Self, Error> {
        if dims == 0 || !values.len().is_multiple_of(dims) {
            return Err(Error::Shape {
                values: values.len(),
                dims,
            });
        }
        if values.is_empty() {
            return Err(Error::NoRows);
        }
        if values.len() / dims > u32::MAX as usize {
            return Err(Error::Option {
                name: "rows",
                value: (values.len() / dims).to_string(),
                expected: "at most 4294967295 rows per view",
            });
        }
        Ok(Rows {
            values,
            dims,
            subset: None,
        })
    }

    /// The same data restricted to the rows listed in `subset` (in that order).
    ///
    /// # Errors
    /// [`Error::RowIndex`] when an index is out of range, [`Error::NoRows`] when empty.
    pub fn with_subset(self, subset: &'a [u32]) -> Result<Self, Error> {
        let total = self.values.len() / self.dims;
        if subset.is_empty() {
            return Err(Error::NoRows);
        }
        if let Some(&bad) = subset.iter().find(|&&i| i as usize >= total) {
            return Err(Error::RowIndex {
                index: bad as usize,
                rows: total,
            });
        }
        Ok(Rows {
            subset: Some(subset),
            ..self
        })
    }

    /// Number of rows in the view.
    pub fn len(&self) -> usize {
        match self.subset {
            Some(s) => s.len(),
            None => self.values.len() / self.dims,
        }
    }

    /// Always false: a view holds at least one row.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Number of columns.
    pub fn dims(&self) -> usize {
        self.dims
    }

    /// Position `i` of the view in the underlying data.
    #[inline]
    pub(crate) fn source_index(&self, i: usize) -> usize {
        match self.subset {
            Some(s) => s[i] as usize,
            None => i,
        }
    }

    /// Row `i` of the view.
    #[inline]
    pub fn row(&self, i: usize) -> &'a [f64] {
        let r = self.source_index(i);
        &self.values[r * self.dims..(r + 1) * self.dims]
    }

    /// Checks that every value in the view is finite.
    ///
    /// # Errors
    /// [`Error::NotFinite`] naming the first offending row (of the underlying data) and column.
    pub fn check_finite(&self) -> Result<(), Error> {
        for i in 0..self.len() {
            let row = self.row(i);
            if let Some(column) = row.iter().position(|v| !v.is_finite()) {
                return Err(Error::NotFinite {
                    row: self.source_index(i),
                    column,
                    value: row[column],
                });
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn subset_reads_the_named_rows() {
        let values = [1.0, 2.0, 3.0, 4.0, 5.0, 6.0];
        let rows = Rows::new(&values, 2).unwrap();
        assert_eq!(rows.len(), 3);
        let idx = [2u32, 0];
        let sub = rows.with_subset(&idx).unwrap();
        assert_eq!(sub.row(0), &[5.0, 6.0]);
        assert_eq!(sub.row(1), &[1.0, 2.0]);
    }

    #[test]
    fn shape_and_index_errors_name_the_facts() {
        assert_eq!(
            Rows::new(&[1.0, 2.0, 3.0], 2).unwrap_err(),
            Error::Shape { values: 3, dims: 2 }
        );
        let values = [1.0, 2.0];
        let rows = Rows::new(&values, 1).unwrap();
        let err = rows.with_subset(&[5]).unwrap_err();
        assert!(err.to_string().contains("row index 5"));
        let bad = [1.0, f64::NAN];
        let err = Rows::new(&bad, 1).unwrap().check_finite().unwrap_err();
        assert_eq!(
            err.to_string(),
            "row 1, column 0: value NaN is not finite; remove or repair that row before fitting"
        );
    }
}
