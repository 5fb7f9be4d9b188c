//! What the caller asks of a read: format, columns, label, missing values, limits.
//!
//! [`ReadOptions`] is plain data with public fields and chainable setters.
//! It is checked against the input's columns once, when the table builder
//! is set up, so a misspelt column name fails before any row is parsed.

use crate::format::Format;

/// How to read an input. `ReadOptions::default()` reads every numeric column,
/// keeps no labels, rejects missing values and sets no limits.
///
/// ```
/// use mixgauge_data::{Format, ReadOptions};
///
/// let options = ReadOptions::default()
///     .format(Format::Csv)
///     .columns(["t01", "t02"])
///     .label_column("site")
///     .drop_incomplete(true)
///     .max_rows(1_000_000);
/// assert_eq!(options.columns.as_deref(), Some(&["t01".to_string(), "t02".to_string()][..]));
/// ```
#[derive(Debug, Clone, Default, PartialEq, Eq)]
#[non_exhaustive]
pub struct ReadOptions {
    /// The input format. Default `None`: taken from the file extension
    /// ([`read_path`](crate::read_path) only), then from the first bytes.
    pub format: Option<Format>,
    /// Feature columns to read, by name and in this order. CSV and JSON
    /// objects name columns by header or key; NPY arrays and JSON arrays of
    /// rows have columns `x1`, `x2`, … `xD`. Default `None`: every column that
    /// holds at least one number, except the label column, in input order;
    /// columns with no numbers (text or empty) are skipped and listed in
    /// [`Dataset::skipped_columns`](crate::Dataset::skipped_columns).
    /// A chosen column must hold only numbers (or missing values).
    pub columns: Option<Vec<String>>,
    /// A column kept as text labels, one per kept row, and never used as a
    /// feature. Default `None`: no labels.
    pub label_column: Option<String>,
    /// What to do with a row holding a missing value (empty CSV field, JSON
    /// `null`) or a non-finite one (NaN, infinity, or a number too large for
    /// `f64` such as `1e400`) in a feature column. Default `false`: such a
    /// value is an error naming its row and column. `true`: the row is dropped
    /// and counted in [`Dataset::dropped_rows`](crate::Dataset::dropped_rows).
    /// Text in a feature column is an error either way.
    pub drop_incomplete: bool,
    /// The most data rows the input may have, counted before any row is
    /// dropped. Default `None`: no limit.
    pub max_rows: Option<usize>,
    /// The most columns the input may have (all columns, not only the chosen
    /// ones), checked as soon as the header or shape is known.
    /// Default `None`: no limit.
    pub max_columns: Option<usize>,
}

impl ReadOptions {
    /// Reads the input as `format` instead of guessing it.
    pub fn format(mut self, format: Format) -> Self {
        self.format = Some(format);
        self
    }

    /// Reads only these feature columns, in this order.
    pub fn columns<I, S>(mut self, names: I) -> Self
    where
        I: IntoIterator<Item = S>,
        S: Into<String>,
    {
        self.columns = Some(names.into_iter().map(Into::into).collect());
        self
    }

    /// Keeps this column as text labels.
    pub fn label_column(mut self, name: impl Into<String>) -> Self {
        self.label_column = Some(name.into());
        self
    }

    /// Drops (`true`) or rejects (`false`, the default) rows with missing or
    /// non-finite feature values.
    pub fn drop_incomplete(mut self, drop: bool) -> Self {
        self.drop_incomplete = drop;
        self
    }

    /// Fails when the input has more than `limit` data rows.
    pub fn max_rows(mut self, limit: usize) -> Self {
        self.max_rows = Some(limit);
        self
    }

    /// Fails when the input has more than `limit` columns.
    pub fn max_columns(mut self, limit: usize) -> Self {
        self.max_columns = Some(limit);
        self
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_are_as_documented() {
        let options = ReadOptions::default();
        assert_eq!(options.format, None);
        assert_eq!(options.columns, None);
        assert_eq!(options.label_column, None);
        assert!(!options.drop_incomplete);
        assert_eq!(options.max_rows, None);
        assert_eq!(options.max_columns, None);
    }

    #[test]
    fn setters_fill_their_fields() {
        let options = ReadOptions::default()
            .format(Format::Json)
            .columns(vec![String::from("a"), String::from("b")])
            .label_column("y")
            .drop_incomplete(true)
            .max_rows(10)
            .max_columns(3);
        assert_eq!(options.format, Some(Format::Json));
        assert_eq!(
            options.columns,
            Some(vec!["a".to_string(), "b".to_string()])
        );
        assert_eq!(options.label_column.as_deref(), Some("y"));
        assert!(options.drop_incomplete);
        assert_eq!(options.max_rows, Some(10));
        assert_eq!(options.max_columns, Some(3));
    }
}
