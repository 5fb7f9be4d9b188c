//! `mixgauge fit`: one EM fit, written as a model document.

use mixgauge_engine::{FitOptions, ModelDocument, Ridge, Start, fit};

use crate::args::{EmArgs, FitArgs};
use crate::failure::Failure;
use crate::inputs;

/// Engine options from the shared EM flags.
pub fn options(
    components: usize,
    form: mixgauge_engine::CovarianceForm,
    em: &EmArgs,
) -> FitOptions {
    let mut o = FitOptions::new(components, form);
    o.restarts = em.restarts;
    o.seed = em.seed;
    o.tolerance = em.tolerance;
    o.max_iterations = em.max_iterations;
    o.ridge = match em.ridge {
        Some(v) => Ridge::Absolute(v),
        None => Ridge::Relative(em.ridge_fraction),
    };
    if em.random_start {
        o.start = Start::RandomResponsibilities;
    }
    o
}

pub fn run(args: &FitArgs) -> Result<(), Failure> {
    let data = inputs::dataset(&args.input)?;
    let rows = inputs::rows(&data)?;
    let mut o = options(args.components, args.covariance, &args.em);
    if let Some(path) = &args.start {
        let doc = inputs::model(path)?;
        o.start = Start::Model(
            doc.to_mixture()
                .map_err(|e| Failure::Input(format!("{}: {e}", path.display())))?,
        );
        o.restarts = 1;
    }
    let fitted = fit(&rows, &o)?;
    let mut doc = ModelDocument::from_fit(&fitted, o.seed);
    doc.column_names = Some(data.column_names.clone());
    inputs::write_out(args.out.as_deref(), &(doc.to_json() + "\n"))?;
    eprintln!(
        "fitted {} {} components to {} rows × {} columns: mean log-likelihood {:.6} nats/row, \
         {} iterations, {}",
        args.components,
        args.covariance,
        rows.len(),
        rows.dims(),
        fitted.mean_loglik(),
        fitted.iterations,
        if fitted.converged() {
            "converged"
        } else {
            "stopped at the iteration cap"
        },
    );
    Ok(())
}
