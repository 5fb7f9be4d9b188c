//! [`ReportError`]: why a [`ModelView`](crate::ModelView) could not be built. Rendering itself
//! never fails: a chart that cannot be drawn is replaced by a sentence saying why.

use thiserror::Error;

/// Everything [`ModelView::new`](crate::ModelView::new) can refuse.
#[derive(Debug, Error, Clone, PartialEq)]
#[non_exhaustive]
pub enum ReportError {
    /// The values do not split into whole rows of the model's columns.
    #[error(
        "{values} values do not split into rows of {dims} columns; pass the row-major values the model was fitted on"
    )]
    Shape {
        /// Length of the values slice.
        values: usize,
        /// Columns per row that were given.
        dims: usize,
    },
    /// No rows were given.
    #[error("there are no rows to draw; pass the rows the model was fitted on")]
    NoRows,
    /// The model and the rows disagree on the number of columns.
    #[error(
        "the model has {model} columns but the rows have {data}; pass the rows the model was fitted on"
    )]
    Dimensions {
        /// Columns of the model.
        model: usize,
        /// Columns of the rows.
        data: usize,
    },
    /// A value is NaN or infinite.
    #[error("row {row}, column {column} is not finite; drop or repair that row before drawing")]
    NotFinite {
        /// Zero-based row.
        row: usize,
        /// Zero-based column.
        column: usize,
    },
    /// `max_points` is zero.
    #[error("max_points = 0 would draw no rows; ask for at least 1 (5000 is a good default)")]
    NoPoints,
    /// The eigen-decomposition of the data's covariance did not settle.
    #[error(
        "the principal axes of the data could not be computed (the eigen-decomposition did not converge); check the data for extreme values"
    )]
    Axes,
    /// The model refused to score the rows.
    #[error("the model could not assign the rows to components: {0}")]
    Engine(#[from] mixgauge_engine::Error),
}
