//! `mixgauge gate`: a batch against a reference profile (or a model and its rows), with a
//! verdict for CI: exit 0 when the batch still fits, 1 when it does not.

use mixgauge_data::ReadOptions;
use mixgauge_gate::{Limits, PROFILE_FORMAT, Profile, Verdict, check, render};

use crate::args::{GateArgs, GateFormat};
use crate::failure::{Failure, io};
use crate::inputs;

/// Runs the gate; `Ok(true)` when the batch passes.
pub fn run(a: &GateArgs) -> Result<bool, Failure> {
    let profile = reference(a)?;
    let names: Vec<String> = profile.columns.iter().map(|c| c.name.clone()).collect();
    let options = ReadOptions::default()
        .drop_incomplete(a.drop_incomplete)
        .columns(names.iter().cloned());
    let batch = mixgauge_data::read_path(&a.batch, &options)?;
    let rows = inputs::rows(&batch)?;
    for (name, value) in [
        ("--significance", a.significance),
        ("--mean-shift", a.mean_shift),
        ("--variance-ratio", a.variance_ratio),
    ] {
        if !(value.is_finite() && value > 0.0) {
            return Err(Failure::Input(format!(
                "{name} must be a positive number, not {value}"
            )));
        }
    }
    if a.significance >= 1.0 || a.variance_ratio < 1.0 {
        return Err(Failure::Input(
            "--significance must be below 1 and --variance-ratio at least 1".into(),
        ));
    }
    let limits = Limits {
        significance: a.significance,
        mean_shift: a.mean_shift,
        variance_ratio: a.variance_ratio,
    };
    let report = check(&profile, &rows, &limits).map_err(|e| Failure::Input(e.to_string()))?;
    let text = match a.format {
        GateFormat::Text => render::text(&report),
        GateFormat::Json => render::json(&report) + "\n",
        GateFormat::Junit => render::junit(&report),
        GateFormat::Markdown => render::markdown(&report),
    };
    inputs::write_out(a.out.as_deref(), &text)?;
    Ok(report.verdict == Verdict::Pass)
}

/// The profile named by `--reference`: a profile document, or a model document scored on
/// `--reference-data`.
fn reference(a: &GateArgs) -> Result<Profile, Failure> {
    let path = &a.reference;
    let text = std::fs::read_to_string(path).map_err(|e| io("read reference", path, e))?;
    let tag: Option<String> = serde_json::from_str::<serde_json::Value>(&text)
        .ok()
        .and_then(|v| v.get("format").and_then(|f| f.as_str()).map(String::from));
    match tag.as_deref() {
        Some(PROFILE_FORMAT) => {
            if a.reference_data.is_some() {
                return Err(Failure::Input(
                    "--reference-data goes with a model document; a profile carries its own reference"
                        .into(),
                ));
            }
            Profile::from_json(&text)
                .map_err(|e| Failure::Input(format!("{}: {e}", path.display())))
        }
        Some(mixgauge_engine::MODEL_FORMAT) => {
            let Some(data_path) = &a.reference_data else {
                return Err(Failure::Input(format!(
                    "{} is a model document; give the rows it describes with --reference-data, or use a profile from `mixgauge sweep --profile`",
                    path.display()
                )));
            };
            let model = inputs::model(path)?;
            let mut options = ReadOptions::default();
            if let Some(names) = &model.column_names {
                options = options.columns(names.iter().cloned());
            }
            let data = mixgauge_data::read_path(data_path, &options)?;
            let rows = inputs::rows(&data)?;
            Profile::from_model(model, &rows, &data.column_names)
                .map_err(|e| Failure::Input(format!("{}: {e}", data_path.display())))
        }
        _ => Err(Failure::Input(format!(
            "{} is neither a profile ({PROFILE_FORMAT}) nor a model document ({}); write one with `mixgauge sweep --profile` or `mixgauge fit --out`",
            path.display(),
            mixgauge_engine::MODEL_FORMAT
        ))),
    }
}
