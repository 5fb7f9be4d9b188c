//! `mixgauge gate`: a batch against a reference profile (or a model and its rows), with a
//! verdict for CI: exit 0 when the batch still fits, 1 when it does not.

use mixgauge_data::ReadOptions;
use mixgauge_gate::{Limits, PROFILE_FORMAT, Profile, Verdict, check, render};

use crate::args::{GateArgs, GateFormat};
use crate::failure::{Failure, io};
use crate::inputs;

/// Runs the gate; `Ok(true)` when the batch passes.
pub fn run(a: &GateArgs) -> Result<bool, Failure> {
    if let Some(server) = &a.server {
        return run_remote(a, server);
    }
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

/// The gate run by a mixgauge service against sweep `a.reference`; `Ok(true)` on pass.
pub fn run_remote(a: &GateArgs, server: &str) -> Result<bool, Failure> {
    let sweep = a.reference.to_string_lossy();
    if !sweep.starts_with("sw-") {
        return Err(Failure::Input(format!(
            "with --server, --reference is a sweep id such as sw-3, not {sweep:?}"
        )));
    }
    if a.reference_data.is_some() || a.drop_incomplete {
        return Err(Failure::Input(
            "--reference-data and --drop-incomplete apply to local references only".into(),
        ));
    }
    let bytes = std::fs::read(&a.batch).map_err(|e| io("read", &a.batch, e))?;
    let kind = match a.batch.extension().and_then(|e| e.to_str()) {
        Some("json") => "application/json",
        Some("npy") => "application/x-npy",
        _ => "text/csv",
    };
    let format = match a.format {
        GateFormat::Text => "text",
        GateFormat::Json => "json",
        GateFormat::Junit => "junit",
        GateFormat::Markdown => "markdown",
    };
    let url = format!(
        "{}/v1/sweeps/{sweep}/gate?format={format}&significance={}&mean_shift={}&variance_ratio={}",
        server.trim_end_matches('/'),
        a.significance,
        a.mean_shift,
        a.variance_ratio
    );
    let agent: ureq::Agent = ureq::Agent::config_builder()
        .http_status_as_error(false)
        .build()
        .into();
    let mut request = agent.post(&url).header("Content-Type", kind);
    if let Some(t) = &a.token {
        request = request.header("Authorization", &format!("Bearer {t}"));
    }
    let mut response = request
        .send(&bytes[..])
        .map_err(|e| Failure::Input(format!("cannot reach {server}: {e}")))?;
    let status = response.status();
    let verdict = response
        .headers()
        .get("mixgauge-verdict")
        .and_then(|v| v.to_str().ok())
        .map(String::from);
    let body = response
        .body_mut()
        .with_config()
        .limit(64 * 1024 * 1024)
        .read_to_string()
        .map_err(|e| {
            Failure::Input(format!(
                "{server} answered {status} with an unreadable body: {e}"
            ))
        })?;
    if !status.is_success() {
        let message = serde_json::from_str::<serde_json::Value>(&body)
            .ok()
            .and_then(|v| v["error"]["message"].as_str().map(String::from))
            .unwrap_or(body);
        return Err(Failure::Input(format!(
            "{server} answered {status}: {message}"
        )));
    }
    inputs::write_out(a.out.as_deref(), &body)?;
    match verdict.as_deref() {
        Some("pass") => Ok(true),
        Some("fail") => Ok(false),
        _ => Err(Failure::Input(format!(
            "{server} gave no verdict; is it a mixgauge service?"
        ))),
    }
}
