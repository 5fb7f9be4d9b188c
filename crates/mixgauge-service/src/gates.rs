//! The data-quality gate over HTTP: `GET /v1/sweeps/{id}/profile` (the reference profile of a
//! succeeded sweep's recommended model) and `POST /v1/sweeps/{id}/gate` (a batch of rows,
//! raw or multipart as for uploads, checked against it). The answer is 200 whatever the
//! verdict — the verdict is the report's content, also in the `Mixgauge-Verdict` header — so
//! a client's error stays distinguishable from a batch that does not fit.

use axum::extract::rejection::QueryRejection;
use axum::extract::{Path, Query, Request, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Deserialize;
use serde_json::json;

use mixgauge_gate::{Limits, Profile, Verdict, check, render};

use crate::error::{AppError, StoreError};
use crate::http::{find_sweep, invalid_data};
use crate::options::DataOptions;
use crate::state::AppState;
use crate::store::{JobState, SweepJob};

/// Query of `POST /v1/sweeps/{id}/gate`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub(crate) struct GateQuery {
    format: Option<String>,
    significance: Option<f64>,
    mean_shift: Option<f64>,
    variance_ratio: Option<f64>,
}

fn bad_query(message: impl Into<String>) -> AppError {
    AppError::client(StatusCode::BAD_REQUEST, "bad_query", message)
}

fn limits(q: &GateQuery) -> Result<Limits, AppError> {
    let d = Limits::default();
    let l = Limits {
        significance: q.significance.unwrap_or(d.significance),
        mean_shift: q.mean_shift.unwrap_or(d.mean_shift),
        variance_ratio: q.variance_ratio.unwrap_or(d.variance_ratio),
    };
    if !(l.significance > 0.0 && l.significance < 1.0) {
        return Err(bad_query("significance must be between 0 and 1, e.g. 0.01"));
    }
    if !(l.mean_shift.is_finite() && l.mean_shift > 0.0) {
        return Err(bad_query(
            "mean_shift must be a positive number of SDs, e.g. 0.2",
        ));
    }
    if !(l.variance_ratio.is_finite() && l.variance_ratio >= 1.0) {
        return Err(bad_query("variance_ratio must be a number ≥ 1, e.g. 2"));
    }
    Ok(l)
}

async fn stored_profile(state: &AppState, job: &SweepJob, id: &str) -> Result<String, AppError> {
    if job.state != JobState::Succeeded {
        return Err(AppError::client(
            StatusCode::CONFLICT,
            "sweep_not_succeeded",
            format!(
                "sweep {id} is {}; its profile exists once it has succeeded — poll GET /v1/sweeps/{id}",
                job.state.as_str()
            ),
        )
        .with_detail(json!({ "state": job.state })));
    }
    state.store.profile(job.id).await?.ok_or_else(|| {
        AppError::client(
            StatusCode::NOT_FOUND,
            "no_profile",
            format!(
                "sweep {id} has no reference profile: it recommends no model (or finished before profiles were kept); run a new sweep"
            ),
        )
    })
}

/// `GET /v1/sweeps/{id}/profile`.
pub(crate) async fn profile(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let job = find_sweep(&state, &id).await?;
    let text = stored_profile(&state, &job, &id).await?;
    Ok(([(header::CONTENT_TYPE, "application/json")], text).into_response())
}

/// `POST /v1/sweeps/{id}/gate`.
pub(crate) async fn gate(
    State(state): State<AppState>,
    Path(id): Path<String>,
    query: Result<Query<GateQuery>, QueryRejection>,
    req: Request,
) -> Result<Response, AppError> {
    let Query(q) = query.map_err(|e| {
        bad_query(format!(
            "{}; gate takes ?format=json|junit|markdown|text&significance=0.01&mean_shift=0.2&variance_ratio=2",
            e.body_text()
        ))
    })?;
    let format = q.format.clone().unwrap_or_else(|| "json".into());
    if !matches!(format.as_str(), "json" | "junit" | "markdown" | "text") {
        return Err(bad_query(format!(
            "format {format:?} is not one of json, junit, markdown, text"
        )));
    }
    let limits = limits(&q)?;
    let job = find_sweep(&state, &id).await?;
    let text = stored_profile(&state, &job, &id).await?;
    let upload = crate::intake::upload(&state, req, false).await?;
    let read_limits = state.limits.read;
    let report = tokio::task::spawn_blocking(move || -> Result<_, AppError> {
        let profile = Profile::from_json(&text)
            .map_err(|e| StoreError::Corrupt(format!("stored profile: {e}")))?;
        let names: Vec<String> = profile.columns.iter().map(|c| c.name.clone()).collect();
        let options = DataOptions {
            columns: Some(names),
            ..DataOptions::default()
        };
        let data = mixgauge_data::read_bytes(
            &upload.bytes,
            &options.read_options(upload.format, &read_limits),
        )
        .map_err(|e| invalid_data(&e, upload.format))?;
        let values = data
            .values
            .as_slice()
            .ok_or_else(|| StoreError::Corrupt("values are not contiguous".into()))?;
        let rows = mixgauge_engine::Rows::new(values, data.values.ncols())
            .map_err(|e| crate::http::unprocessable("invalid_dataset", e.to_string()))?;
        check(&profile, &rows, &limits)
            .map_err(|e| crate::http::unprocessable("invalid_batch", e.to_string()))
    })
    .await
    .map_err(|e| StoreError::Task(e.to_string()))??;
    let (body, kind) = match format.as_str() {
        "junit" => (render::junit(&report), "application/xml"),
        "markdown" => (render::markdown(&report), "text/markdown; charset=utf-8"),
        "text" => (render::text(&report), "text/plain; charset=utf-8"),
        _ => (render::json(&report), "application/json"),
    };
    let verdict = if report.verdict == Verdict::Pass {
        "pass"
    } else {
        "fail"
    };
    let mut response = ([(header::CONTENT_TYPE, kind)], body).into_response();
    response
        .headers_mut()
        .insert("mixgauge-verdict", HeaderValue::from_static(verdict));
    Ok(response)
}
