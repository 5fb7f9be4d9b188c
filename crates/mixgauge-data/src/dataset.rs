//! The result of a read: a dense feature matrix plus what is known about it.

use ndarray::Array2;

use crate::format::Format;

/// A table of finite feature values read from one input.
///
/// Every value in [`values`](Dataset::values) is finite: missing and
/// non-finite values were either rejected or their rows dropped.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub struct Dataset {
    /// Rows × columns, in standard (row-major, C) layout.
    pub values: Array2<f64>,
    /// One name per column of `values`, in the same order.
    pub column_names: Vec<String>,
    /// Text labels, one per row of `values`, when a label column was chosen.
    pub labels: Option<Vec<String>>,
    /// Rows removed because a feature value was missing or non-finite
    /// (only when dropping incomplete rows was chosen; otherwise 0).
    pub dropped_rows: usize,
    /// Columns left out because they hold no numbers (text or empty), when
    /// the feature columns were not named by the caller; otherwise empty.
    pub skipped_columns: Vec<String>,
    /// Lowercase hexadecimal SHA-256 of the exact input bytes.
    pub sha256: String,
    /// The format the input was read as.
    pub format: Format,
}
