//! Model selection for Gaussian mixtures: which component count and covariance form the data
//! supports.
//!
//! For every candidate (component count × covariance form) a sweep fits the mixture on the
//! training part of each of k shuffled folds — the same folds for every candidate, so
//! comparisons are paired row by row — scores the held-out rows, and fits once more on all rows
//! for the penalised criteria (BIC, AIC, ICL). [`recommend`] turns the candidates into
//! recommendations and a plain-language summary.
//!
//! Main entry point: [`sweep`] with [`SweepSettings`], returning a [`SweepOutcome`] (the
//! [`SweepResult`] document plus the fitted full-data models).
//!
//! Key design decision: every fit (candidate × fold × restart, and candidate × restart on all
//! rows) is an independent task, run biggest first by a small scheduler on the rayon pool and
//! stored by task number, so the result is identical for any thread count or completion order.
#![deny(missing_docs)]
#![allow(clippy::needless_range_loop)] // index loops over candidates/folds read like the formulas

mod agreement;
mod error;
mod folds;
mod kneedle;
mod recommend;
mod result;
mod schedule;
mod settings;
mod sweep;

pub use agreement::{adjusted_rand_index, normalised_mutual_information};
pub use error::SelectError;
pub use folds::Folds;
pub use kneedle::knee;
pub use recommend::recommend;
pub use result::{
    Candidate, CandidateStatus, Choice, DatasetInfo, FoldOutcome, FullFit, LabelAgreement,
    MeanWithError, RESULT_FORMAT, Recommendations, SweepResult,
};
pub use schedule::Progress;
pub use settings::SweepSettings;
pub use sweep::{PlannedFit, SweepInput, SweepOutcome, SweepPlan, sweep};
