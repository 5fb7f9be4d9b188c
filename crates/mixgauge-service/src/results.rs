//! What a succeeded sweep offers beyond its result document: the full-data model of each
//! fitted candidate (`GET /v1/sweeps/{id}/models/{covariance}/{components}`) and scoring of
//! new rows under one of them (`POST /v1/sweeps/{id}/score`).
//!
//! Models are stored in the data's own units (a sweep over standardised rows has its models
//! mapped back), so new rows are scored as they are, with no transformation by the caller.

use axum::Json;
use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, Request, State};
use axum::http::{StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Deserialize;
use serde_json::{Value, json};

use mixgauge_data::{Dataset, Format};
use mixgauge_engine::{CovarianceForm, ModelDocument, Rows, aic, bic, icl};

use crate::error::{AppError, StoreError};
use crate::http::{find_sweep, invalid_data, unprocessable};
use crate::options::DataOptions;
use crate::state::AppState;
use crate::store::{JobState, SweepJob};

fn not_succeeded(job: &SweepJob, id: &str, what: &str) -> AppError {
    AppError::client(
        StatusCode::CONFLICT,
        "sweep_not_succeeded",
        format!(
            "sweep {id} is {}; {what} exist once it has succeeded — poll GET /v1/sweeps/{id}",
            job.state.as_str()
        ),
    )
    .with_detail(json!({ "state": job.state }))
}

fn parse_form(text: &str) -> Result<CovarianceForm, AppError> {
    text.parse::<CovarianceForm>().map_err(|e| {
        AppError::client(StatusCode::NOT_FOUND, "no_such_model", e)
            .with_detail(json!({ "field": "covariance" }))
    })
}

/// The stored document of one candidate, or a 404 that lists what the sweep has.
async fn stored_model(
    state: &AppState,
    job: &SweepJob,
    id: &str,
    form: CovarianceForm,
    components: usize,
) -> Result<String, AppError> {
    state
        .store
        .model(job.id, form.as_str(), components)
        .await?
        .ok_or_else(|| {
            AppError::client(
                StatusCode::NOT_FOUND,
                "no_such_model",
                format!(
                    "sweep {id} has no fitted {form} model with {components} components (it was not a candidate, or it was skipped or failed); the candidates are in the sweep's result"
                ),
            )
            .with_detail(json!({ "covariance": form, "components": components }))
        })
}

/// `GET /v1/sweeps/{id}/models/{covariance}/{components}`.
pub(crate) async fn model(
    State(state): State<AppState>,
    Path((id, covariance, components)): Path<(String, String, String)>,
) -> Result<Response, AppError> {
    let job = find_sweep(&state, &id).await?;
    let form = parse_form(&covariance)?;
    let components: usize = components.parse().map_err(|_| {
        AppError::client(
            StatusCode::NOT_FOUND,
            "no_such_model",
            format!("{components:?} is not a component count; use a whole number such as 3"),
        )
        .with_detail(json!({ "field": "components" }))
    })?;
    if job.state != JobState::Succeeded {
        return Err(not_succeeded(&job, &id, "its models"));
    }
    let doc = stored_model(&state, &job, &id, form, components).await?;
    Ok(([(header::CONTENT_TYPE, "application/json")], doc).into_response())
}

/// Query of `POST /v1/sweeps/{id}/score`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct ScoreQuery {
    covariance: Option<String>,
    components: Option<usize>,
    per_row: Option<bool>,
}

/// The model a score request names, or the sweep's held-out one-standard-error choice.
fn chosen(
    job: &SweepJob,
    q: &ScoreQuery,
    id: &str,
) -> Result<(CovarianceForm, usize, &'static str), AppError> {
    match (&q.covariance, q.components) {
        (Some(c), Some(k)) => Ok((
            parse_form(c).map_err(|e| match e {
                AppError::Client { message, .. } => {
                    AppError::client(StatusCode::BAD_REQUEST, "bad_query", message)
                }
                other => other,
            })?,
            k,
            "named",
        )),
        (None, None) => {
            let result: Value = serde_json::from_str(job.result.as_deref().unwrap_or("null"))
                .map_err(|e| StoreError::Corrupt(format!("result of sweep {}: {e}", job.id)))?;
            let pick = &result["recommendations"]["heldout_one_se"];
            let form = pick["covariance"].as_str().and_then(|s| s.parse().ok());
            let k = pick["components"].as_u64();
            match (form, k) {
                (Some(f), Some(k)) => Ok((f, k as usize, "heldout_one_se")),
                _ => Err(AppError::client(
                    StatusCode::CONFLICT,
                    "no_recommendation",
                    format!(
                        "sweep {id} recommends no model (no candidate could be compared on held-out rows); name one with ?covariance=full&components=3"
                    ),
                )),
            }
        }
        _ => Err(AppError::client(
            StatusCode::BAD_REQUEST,
            "bad_query",
            "give both covariance and components to name a model, or neither to use the recommended one",
        )),
    }
}

/// Reads rows to score so that their columns line up with the model's: by name when the
/// input names its columns, else by position.
fn read_rows(
    bytes: &[u8],
    format: Format,
    names: &[String],
    limits: &crate::options::ReadLimits,
) -> Result<Dataset, AppError> {
    let plain = DataOptions::default().read_options(format, limits);
    let data = mixgauge_data::read_bytes(bytes, &plain).map_err(|e| invalid_data(&e, format))?;
    if data.column_names == names {
        return Ok(data);
    }
    if names
        .iter()
        .all(|n| data.column_names.contains(n) || data.skipped_columns.contains(n))
    {
        let by_name = plain.columns(names.iter().cloned());
        return mixgauge_data::read_bytes(bytes, &by_name).map_err(|e| invalid_data(&e, format));
    }
    let generated = (1..=data.column_names.len()).map(|i| format!("x{i}"));
    if data.column_names.len() == names.len() && data.column_names.iter().cloned().eq(generated) {
        return Ok(data);
    }
    let missing: Vec<&String> = names
        .iter()
        .filter(|n| !data.column_names.contains(n))
        .collect();
    Err(unprocessable(
        "columns_do_not_match",
        format!(
            "the rows have columns {:?} but the model needs {:?} (missing {:?}); send rows with the model's columns, by name or, for unnamed data, in the same order",
            data.column_names, names, missing
        ),
    )
    .with_detail(json!({ "expected": names, "found": data.column_names })))
}

/// `POST /v1/sweeps/{id}/score`.
pub(crate) async fn score(
    State(state): State<AppState>,
    Path(id): Path<String>,
    query: Result<Query<ScoreQuery>, QueryRejection>,
    req: Request,
) -> Result<Response, AppError> {
    let Query(q) = query.map_err(|e| {
        AppError::client(
            StatusCode::BAD_REQUEST,
            "bad_query",
            format!(
                "{}; score takes ?covariance=full|diagonal&components=<K>&per_row=true|false",
                e.body_text()
            ),
        )
    })?;
    let job = find_sweep(&state, &id).await?;
    if job.state != JobState::Succeeded {
        return Err(not_succeeded(&job, &id, "scores"));
    }
    let (form, components, how) = chosen(&job, &q, &id)?;
    let doc_text = stored_model(&state, &job, &id, form, components).await?;
    let upload = crate::intake::upload(&state, req, false).await?;
    let limits = state.limits.read;
    let per_row = q.per_row.unwrap_or(true);
    let outcome = tokio::task::spawn_blocking(move || -> Result<Value, AppError> {
        let doc = ModelDocument::from_json(&doc_text)
            .map_err(|e| StoreError::Corrupt(format!("stored model: {e}")))?;
        let model = doc
            .to_mixture()
            .map_err(|e| StoreError::Corrupt(format!("stored model: {e}")))?;
        let names = doc.column_names.clone().unwrap_or_default();
        let data = read_rows(&upload.bytes, upload.format, &names, &limits)?;
        let values = data
            .values
            .as_slice()
            .ok_or_else(|| StoreError::Corrupt("values are not contiguous".into()))?;
        let rows = Rows::new(values, data.values.ncols())
            .map_err(|e| unprocessable("invalid_dataset", e.to_string()))?;
        let (loglik, resp) = model
            .responsibilities(&rows)
            .map_err(|e| unprocessable("invalid_dataset", e.to_string()))?;
        let summary = model
            .summarise(&rows)
            .map_err(|e| unprocessable("invalid_dataset", e.to_string()))?;
        let k = model.components();
        let p = model.free_parameters();
        let mut v = json!({
            "model": { "covariance": form, "components": components, "chosen_by": how },
            "rows": summary.rows,
            "loglik": summary.loglik,
            "mean_loglik": summary.mean(),
            "free_parameters": p,
            "bic": bic(summary.loglik, p, summary.rows),
            "aic": aic(summary.loglik, p),
            "icl": icl(summary.loglik, p, summary.rows, summary.entropy),
            "entropy": summary.entropy,
        });
        if per_row {
            let component: Vec<usize> = resp
                .chunks(k)
                .map(|r| (0..k).fold(0, |b, c| if r[c] > r[b] { c } else { b }))
                .collect();
            v["per_row"] = json!({ "loglik": loglik, "component": component });
        }
        Ok(v)
    })
    .await
    .map_err(|e| StoreError::Task(e.to_string()))??;
    Ok(Json(outcome).into_response())
}
