//! A self-contained HTML report of a finished mixgauge sweep.
//!
//! [`render`] turns a [`SweepResult`](mixgauge_select::SweepResult) into one HTML document:
//! the dataset and settings, the plain-language summary, three charts (training against
//! held-out log-likelihood, the penalised criteria, and a two-dimensional view of a fitted
//! model), and the full candidate table. [`ModelView`] computes that two-dimensional view from
//! a [`Mixture`](mixgauge_engine::Mixture) and its rows: the data's first two principal axes,
//! every row (or an evenly strided subsample) projected and coloured by its most responsible
//! component, and each component's 1σ and 2σ ellipses.
//!
//! Key design decision: the page needs nothing from outside itself. Charts are drawn with
//! `plotters` into SVG strings, whose text is plain SVG `<text>` (so no font files or system
//! font libraries are involved), and are embedded inline; styling is one inline `<style>`
//! block; there are no scripts. The output holds no timestamp, so the same result renders to
//! the same bytes.
#![deny(missing_docs)]

mod criteria_chart;
mod error;
mod format;
mod likelihood_chart;
mod outcome;
mod page;
mod palette;
mod svg;
mod table;
mod view;
mod view_chart;

pub use error::ReportError;
pub use outcome::render_outcome;
pub use page::render;
pub use view::{ModelView, ProjectedComponent};
