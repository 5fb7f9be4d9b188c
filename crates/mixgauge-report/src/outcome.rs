//! [`render_outcome`]: the report of a finished sweep, with the 2-D view of the model it
//! recommends (the highest held-out candidate, else the BIC minimum) drawn from its rows.

use mixgauge_select::SweepOutcome;

use crate::{ModelView, ReportError, render};

/// Rows drawn in the model view at most.
const MAX_POINTS: usize = 5_000;

/// The whole report of `outcome`, whose sweep ran on `values` (row-major, `dims` columns, in
/// the units the models were fitted in). Without an eligible candidate there is no model view.
///
/// # Errors
/// The errors of [`ModelView::new`] when the rows do not fit the recommended model.
pub fn render_outcome(
    outcome: &SweepOutcome,
    values: &[f64],
    dims: usize,
) -> Result<String, ReportError> {
    let rec = &outcome.result.recommendations;
    let chosen = rec.heldout_max.or(rec.bic_min);
    let model = chosen
        .and_then(|c| outcome.models.iter().find(|(m, _)| *m == c))
        .map(|(_, m)| m);
    let view = model
        .map(|m| ModelView::new(m, values, dims, MAX_POINTS))
        .transpose()?;
    Ok(render(&outcome.result, view.as_ref()))
}
