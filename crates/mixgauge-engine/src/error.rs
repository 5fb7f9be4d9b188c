//! The engine's one error type. Every variant carries the facts a caller needs to say what
//! went wrong (row, column, component) and its message says what to change.

use thiserror::Error;

/// Everything the engine can refuse or fail at.
#[derive(Debug, Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum Error {
    /// The values slice does not split into whole rows.
    #[error(
        "{values} values do not split into rows of {dims} columns; pass a row-major slice whose length is rows × columns"
    )]
    Shape {
        /// Length of the values slice.
        values: usize,
        /// Columns per row that were asked for.
        dims: usize,
    },
    /// No rows to work on.
    #[error("there are no rows to work on; supply at least one row of data")]
    NoRows,
    /// A row index of a subset points past the data.
    #[error(
        "row index {index} is out of range for {rows} rows; subset indices must be below the row count"
    )]
    RowIndex {
        /// The offending index.
        index: usize,
        /// Rows in the data.
        rows: usize,
    },
    /// A value is NaN or infinite.
    #[error(
        "row {row}, column {column}: value {value} is not finite; remove or repair that row before fitting"
    )]
    NotFinite {
        /// Zero-based row (in the full data, not the subset).
        row: usize,
        /// Zero-based column.
        column: usize,
        /// The value found.
        value: f64,
    },
    /// A column's spread is too large for double precision second moments.
    #[error(
        "column {column} spreads too widely for double precision (variance {variance:e}); rescale or standardise the data"
    )]
    TooWide {
        /// Zero-based column.
        column: usize,
        /// Its variance as computed (possibly infinite).
        variance: f64,
    },
    /// The model and the data disagree on the number of columns.
    #[error(
        "the model has {model} columns but the data has {data}; score data with the columns the model was fitted on"
    )]
    Dimensions {
        /// Columns the model expects.
        model: usize,
        /// Columns the data has.
        data: usize,
    },
    /// More components were asked for than there are rows.
    #[error(
        "cannot fit {components} components to {rows} rows; ask for at most {rows} components or supply more rows"
    )]
    TooFewRows {
        /// Rows available.
        rows: usize,
        /// Components requested.
        components: usize,
    },
    /// An option is outside its valid range.
    #[error("{name} = {value} is not valid: {expected}")]
    Option {
        /// The option's name.
        name: &'static str,
        /// The value given, as text.
        value: String,
        /// What would be accepted.
        expected: &'static str,
    },
    /// A model's numbers are inconsistent (shapes, weights, symmetry).
    #[error("invalid model: {0}")]
    Model(String),
    /// A covariance matrix is not positive definite even after the ridge.
    #[error(
        "covariance of component {component} is not positive definite{context}; raise the ridge or fit fewer components"
    )]
    NotPositiveDefinite {
        /// Zero-based component.
        component: usize,
        /// Where it happened, e.g. " after 12 EM steps".
        context: String,
    },
    /// The starting model does not match the requested fit.
    #[error(
        "the starting model has {found}, but the fit asks for {wanted}; use a start that matches or drop it"
    )]
    StartMismatch {
        /// What the start model has.
        found: String,
        /// What the options ask for.
        wanted: String,
    },
    /// A model document could not be read.
    #[error("model document: {0}")]
    Document(String),
    /// The caller cancelled the fit.
    #[error("the fit was cancelled")]
    Cancelled,
}
