//! Renders a sweep result document as an HTML report.
//!
//! ```text
//! cargo run -p mixgauge-report --example render -- RESULT.json OUT.html [DATA]
//! ```
//!
//! With `DATA` (the file the sweep ran on, read the same way the CLI reads it) the example
//! fits the highest held-out candidate on all rows with the sweep's own settings and adds the
//! two-dimensional model view; without it the report has no model view.

use std::error::Error;
use std::path::Path;

use mixgauge_data::{ReadOptions, Standardizer, read_path};
use mixgauge_engine::{FitOptions, Rows, fit};
use mixgauge_report::{ModelView, render};
use mixgauge_select::SweepResult;

/// Rows drawn in the model view at most.
const MAX_POINTS: usize = 5000;

fn view(result: &SweepResult, data: &Path) -> Result<Option<ModelView>, Box<dyn Error>> {
    let Some(best) = result.recommendations.heldout_max else {
        eprintln!("no candidate is recommended, so there is no model to draw");
        return Ok(None);
    };
    let mut data = read_path(data, &ReadOptions::default())?;
    if result.dataset.standardised {
        let s = Standardizer::fit(data.values.view());
        s.apply(&mut data.values);
    }
    let dims = data.values.ncols();
    let values = data
        .values
        .as_slice()
        .ok_or("the data's values are not contiguous")?;
    let s = &result.settings;
    let mut options = FitOptions::new(best.components, best.covariance);
    options.restarts = s.restarts;
    options.seed = s.seed;
    options.tolerance = s.tolerance;
    options.max_iterations = s.max_iterations;
    options.ridge = s.ridge;
    let fitted = fit(&Rows::new(values, dims)?, &options)?;
    Ok(Some(ModelView::new(
        &fitted.model,
        values,
        dims,
        MAX_POINTS,
    )?))
}

fn main() -> Result<(), Box<dyn Error>> {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let (result_path, out_path) = match args.as_slice() {
        [r, o] | [r, o, _] => (r, o),
        _ => return Err("usage: render RESULT.json OUT.html [DATA]".into()),
    };
    let result: SweepResult = serde_json::from_str(&std::fs::read_to_string(result_path)?)?;
    let view = match args.get(2) {
        Some(data) => view(&result, Path::new(data))?,
        None => None,
    };
    std::fs::write(out_path, render(&result, view.as_ref()))?;
    eprintln!("wrote {out_path}");
    Ok(())
}
