//! `mixgauge sweep`: the model-selection sweep, its result document and a one-screen summary.

use std::fmt::Write as _;
use std::io::IsTerminal;
use std::sync::atomic::AtomicBool;

use indicatif::{ProgressBar, ProgressStyle};
use mixgauge_data::Standardizer;
use mixgauge_select::{CandidateStatus, Progress, SweepInput, SweepResult, SweepSettings, sweep};

use crate::args::SweepArgs;
use crate::failure::Failure;
use crate::fit::options;
use crate::inputs;

pub fn run(args: &SweepArgs) -> Result<(), Failure> {
    let mut data = inputs::labelled(&args.input, args.labels.as_deref())?;
    // The rows in their own units, for the profile's column summaries.
    let original = args.profile.is_some().then(|| data.values.clone());
    let standardizer = args.standardise.then(|| {
        let s = Standardizer::fit(data.values.view());
        s.apply(&mut data.values);
        s
    });
    let log_jacobian = standardizer.as_ref().map_or(0.0, |s| s.log_jacobian());
    let rows = inputs::rows(&data)?;
    let em = options(1, mixgauge_engine::CovarianceForm::Full, &args.em);
    let settings = SweepSettings {
        components: args.components.0.clone(),
        covariances: args.covariance.clone(),
        folds: args.folds,
        restarts: em.restarts,
        seed: em.seed,
        tolerance: em.tolerance,
        max_iterations: em.max_iterations,
        ridge: em.ridge,
    };
    let input = SweepInput {
        rows,
        column_names: data.column_names.clone(),
        sha256: data.sha256.clone(),
        dropped_rows: data.dropped_rows,
        labels: data.labels.as_deref(),
        log_jacobian,
        standardised: args.standardise,
    };
    let bar = std::io::stderr().is_terminal().then(|| {
        let b = ProgressBar::new(0);
        b.set_style(
            ProgressStyle::with_template(
                "{bar:40} {pos}/{len} fits  {msg}  [{elapsed_precise}, eta {eta}]",
            )
            .expect("a valid template"),
        );
        b
    });
    let report = |p: &Progress| {
        if let Some(b) = &bar {
            b.set_length(p.total as u64);
            b.set_position(p.done as u64);
            if let Some((c, v)) = p.best_so_far {
                b.set_message(format!(
                    "lowest BIC so far: {} K={} ({v:.1})",
                    c.covariance, c.components
                ));
            }
        }
    };
    let outcome =
        sweep(&input, &settings, &report, &AtomicBool::new(false)).map_err(|e| match e {
            mixgauge_select::SelectError::Setting { .. }
            | mixgauge_select::SelectError::Labels { .. } => Failure::Input(e.to_string()),
            mixgauge_select::SelectError::Engine(e) => Failure::from(e),
            other => Failure::Other(other.to_string()),
        })?;
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    if let Some(path) = &args.report {
        inputs::write_out(Some(path), &html_report(&outcome, &data)?)?;
    }
    if let (Some(path), Some(values)) = (&args.profile, &original) {
        let profile = profile(&outcome, values, &data.column_names, standardizer.as_ref())?;
        inputs::write_out(Some(path), &(profile.to_json() + "\n"))?;
    }
    let json = serde_json::to_string_pretty(&outcome.result).expect("a result serialises") + "\n";
    if let Some(path) = &args.out {
        inputs::write_out(Some(path), &json)?;
    }
    if args.json {
        inputs::write_out(None, &json)
    } else {
        inputs::write_out(None, &summary(&outcome.result))
    }
}

/// The profile of the recommended model, in the data's own units.
fn profile(
    outcome: &mixgauge_select::SweepOutcome,
    values: &ndarray::Array2<f64>,
    names: &[String],
    standardizer: Option<&Standardizer>,
) -> Result<mixgauge_gate::Profile, Failure> {
    let Some((choice, heldout)) = &outcome.recommended_heldout else {
        return Err(Failure::Other(
            "no candidate could be compared on held-out rows, so there is no profile to write"
                .into(),
        ));
    };
    let model = &outcome
        .models
        .iter()
        .find(|(c, _)| c == choice)
        .expect("the recommended candidate was fitted")
        .1;
    let model = match standardizer {
        Some(s) => model.in_original_units(&s.means, &s.scales)?,
        None => model.clone(),
    };
    let mut document = mixgauge_engine::ModelDocument::from_mixture(&model);
    document.column_names = Some(names.to_vec());
    let slice = values
        .as_slice()
        .ok_or_else(|| Failure::Other("dataset values are not contiguous".into()))?;
    let rows = mixgauge_engine::Rows::new(slice, values.ncols())?;
    mixgauge_gate::Profile::from_heldout(
        document,
        Some("heldout_one_se".into()),
        heldout,
        &rows,
        names,
    )
    .map_err(|e| Failure::Other(e.to_string()))
}

/// The HTML report, with the 2-D view of the recommended model.
fn html_report(
    outcome: &mixgauge_select::SweepOutcome,
    data: &mixgauge_data::Dataset,
) -> Result<String, Failure> {
    let values = data
        .values
        .as_slice()
        .ok_or_else(|| Failure::Other("dataset values are not contiguous".into()))?;
    mixgauge_report::render_outcome(outcome, values, data.values.ncols())
        .map_err(|e| Failure::Other(format!("cannot draw the model view: {e}")))
}

/// The candidate table and the summary sentences, for a terminal.
pub fn summary(r: &SweepResult) -> String {
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{} rows × {} columns, {} folds, {} starts per fit, seed {}\n",
        r.dataset.rows, r.dataset.columns, r.settings.folds, r.settings.restarts, r.settings.seed
    );
    let _ = writeln!(
        s,
        "{:<9} {:>3} {:>7}  {:>21}  {:>21}  {:>8}  {:>13}  {:>13}  note",
        "form", "K", "params", "train ± SE", "held-out ± SE", "gap", "BIC", "ICL"
    );
    for c in &r.candidates {
        let note = match c.status {
            CandidateStatus::Fitted if c.degenerate => "degenerate".to_string(),
            CandidateStatus::Fitted => String::new(),
            CandidateStatus::Skipped => "skipped".to_string(),
            CandidateStatus::Failed => "failed".to_string(),
        };
        let pm = |m: Option<mixgauge_select::MeanWithError>| {
            m.map_or("-".into(), |m| format!("{:.4} ± {:.4}", m.mean, m.stderr))
        };
        let ff = c.full_fit.as_ref();
        let _ = writeln!(
            s,
            "{:<9} {:>3} {:>7}  {:>21}  {:>21}  {:>8}  {:>13}  {:>13}  {note}",
            c.covariance.as_str(),
            c.components,
            c.free_parameters,
            pm(c.train),
            pm(c.heldout),
            c.gap.map_or("-".into(), |g| format!("{g:.4}")),
            ff.map_or("-".into(), |f| format!("{:.1}", f.bic)),
            ff.map_or("-".into(), |f| format!("{:.1}", f.icl)),
        );
    }
    s.push('\n');
    for line in &r.summary {
        let _ = writeln!(s, "{line}");
    }
    s
}
