//! A data-quality gate: does a new batch of rows still fit a reference mixture model?
//!
//! A [`Profile`] records the reference — the recommended model of a sweep and how well rows it
//! did not see score under it — and [`check`] compares a batch with it, check by check, each
//! with its published test, a statistic, a p-value or effect size and a verdict.
//! [`render`] writes the outcome as text, JSON, JUnit XML or Markdown. No I/O here.

mod check;
mod profile;
pub mod render;

pub use check::{Check, ColumnShift, GateReport, Limits, REPORT_FORMAT, Verdict, check};
pub use profile::{
    ColumnSummary, LoglikSummary, PROFILE_FORMAT, Profile, QUANTILE_LEVELS, Quantile, Yardstick,
};

/// What can go wrong building a profile or checking a batch.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum GateError {
    /// The reference (profile, model or its rows) cannot be used.
    #[error("reference: {0}")]
    Reference(String),
    /// The batch cannot be checked.
    #[error("batch: {0}")]
    Batch(String),
}
