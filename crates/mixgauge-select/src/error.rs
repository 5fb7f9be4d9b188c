//! The selection crate's error type.

use thiserror::Error;

/// What a sweep can refuse or fail at.
#[derive(Debug, Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum SelectError {
    /// A setting is outside its valid range.
    #[error("{name} = {value} is not valid: {expected}")]
    Setting {
        /// The setting's name.
        name: &'static str,
        /// The value given, as text.
        value: String,
        /// What would be accepted.
        expected: String,
    },
    /// The labels do not match the rows.
    #[error("{labels} labels were given for {rows} rows; give one label per row")]
    Labels {
        /// Labels given.
        labels: usize,
        /// Rows in the data.
        rows: usize,
    },
    /// The data cannot be fitted at all.
    #[error(transparent)]
    Engine(#[from] mixgauge_engine::Error),
    /// The caller cancelled the sweep.
    #[error("the sweep was cancelled")]
    Cancelled,
}
