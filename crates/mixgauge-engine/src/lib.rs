//! The mixture engine of mixgauge: Gaussian mixture densities and EM fitting.
//!
//! This crate owns the numerics and nothing else: no files, no async, no HTTP, no SQL. Callers
//! hand it rows of `f64` as a borrowed [`Rows`] view (row-major values, optionally a subset of
//! row indices so that cross-validation folds need no copies) and get back a [`Mixture`] or a
//! [`Fit`].
//!
//! Main types:
//! - [`Mixture`]: weights, means and covariances of a full or diagonal Gaussian mixture, with
//!   the whitening factors (inverse Cholesky factors of the covariances) cached so that scoring
//!   a row costs one triangular product per component. Per-row log-densities use log-sum-exp.
//! - [`FitOptions`] and [`fit`]: EM from k-means++ seeding (Arthur & Vassilvitskii 2007) refined
//!   by Lloyd steps, from random responsibilities, or from a caller's model; best of several
//!   restarts, each with its own random stream derived from `(seed, restart)`.
//! - [`ModelDocument`]: the JSON form of a model, which round-trips exactly.
//!
//! Key design decision: every pass over the data is a fused E+M sweep over fixed blocks of
//! rows, combined by a reduction tree whose shape depends only on the number of rows. The
//! N×K responsibility matrix is never stored, memory per fit is O(block·K + K·D²), and the
//! result is bit-identical for any number of threads.
#![deny(missing_docs)]
// The numeric kernels index several arrays with one loop variable (rows, lanes, columns);
// rewriting them as zipped iterators hides the indexing the algorithms are written in.
#![allow(clippy::needless_range_loop)]

mod criteria;
mod dispatch;
mod document;
mod error;
mod fit;
mod form;
mod init;
mod kernel;
mod linalg;
mod model;
mod rows;
mod sample;
mod stats;

pub use criteria::{aic, bic, icl};
#[doc(hidden)]
pub use dispatch::force_kernel_variant;
pub use dispatch::{kernel_variant, kernel_variants};
pub use document::{FitRecord, MODEL_FORMAT, ModelDocument};
pub use error::Error;
pub use fit::{
    Fit, FitOptions, RestartOutcome, Ridge, Start, Termination, best_of, fit, fit_restart,
    fit_until,
};
pub use form::CovarianceForm;
pub use model::{Mixture, ScoreSummary};
pub use rows::Rows;
pub use stats::{ColumnMoments, Reseed};
