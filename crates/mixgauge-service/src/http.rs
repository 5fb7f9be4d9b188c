//! The HTTP surface: [`router`] and one handler per endpoint under `/v1`, plus `/healthz` and
//! `/readyz`. Handlers extract, call the store, and map records to JSON; every failure is an
//! [`AppError`]. Extractor rejections are taken as `Result` and mapped to `AppError`, so even a
//! malformed query string gets the JSON error shape.

use axum::Router;
use axum::extract::rejection::QueryRejection;
use axum::extract::{DefaultBodyLimit, Path, Query, State};
use axum::http::{HeaderMap, StatusCode, header};
use axum::response::{Html, IntoResponse, Response};
use axum::routing::{get, post};
use axum::{Json, extract::Request};
use serde::Deserialize;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};

use mixgauge_data::Format;
use mixgauge_select::SweepSettings;

use crate::error::AppError;
use crate::options::{DataOptions, ReadLimits};
use crate::server::Preload;
use crate::state::{AppState, Limits};
use crate::store::{
    CreateOutcome, DatasetRecord, DeleteOutcome, JobState, NewSweep, PutOutcome, SweepJob,
};

/// Largest page a list endpoint returns; also the default.
const MAX_PAGE: usize = 100;

/// Largest accepted `POST /v1/sweeps` body: settings are small.
const SWEEP_BODY_LIMIT: usize = 64 * 1024;

/// Most fits one sweep may ask for, candidates × (folds + 1) × restarts. A sweep lists all its
/// fits before the first starts (and cannot be cancelled while it does), so a count the server
/// cannot hold would take the whole process down rather than fail the one job.
const MAX_FITS: u128 = 1_000_000;

/// Most row numbers the folds of one sweep may hold, folds × rows (each fold lists its
/// training rows): 800 MB of indices.
const MAX_FOLD_ROWS: u128 = 200_000_000;

/// Builds the service's router over `state`. No socket is opened: serve it with `axum::serve`,
/// or call it directly with `tower::ServiceExt::oneshot` in tests.
pub fn router(state: AppState) -> Router {
    let cors = crate::guard::cors(&state.cors_origins);
    let router = Router::new()
        .route("/healthz", get(healthz))
        .route("/readyz", get(readyz))
        .route("/metrics", get(metrics))
        .route(
            "/v1/datasets",
            post(upload_dataset)
                .get(list_datasets)
                .layer(DefaultBodyLimit::disable()),
        )
        .route("/v1/datasets/{id}", get(get_dataset).delete(delete_dataset))
        .route(
            "/v1/sweeps",
            post(create_sweep)
                .get(list_sweeps)
                .layer(DefaultBodyLimit::disable()),
        )
        .route("/v1/sweeps/{id}", get(get_sweep))
        .route("/v1/sweeps/{id}/cancel", post(cancel_sweep))
        .route("/v1/sweeps/{id}/report", get(sweep_report))
        .route(
            "/v1/sweeps/{id}/models/{covariance}/{components}",
            get(crate::results::model),
        )
        .route(
            "/v1/sweeps/{id}/score",
            post(crate::results::score).layer(DefaultBodyLimit::disable()),
        )
        .route("/v1/sweeps/{id}/profile", get(crate::gates::profile))
        .route(
            "/v1/sweeps/{id}/gate",
            post(crate::gates::gate).layer(DefaultBodyLimit::disable()),
        )
        .merge(crate::page::routes())
        .fallback(no_route)
        .method_not_allowed_fallback(wrong_method)
        .layer(axum::middleware::from_fn_with_state(
            state.clone(),
            crate::guard::authorise,
        ))
        .layer(axum::middleware::from_fn_with_state(
            state.clone(),
            crate::guard::time_and_count,
        ))
        .layer(tower_http::trace::TraceLayer::new_for_http());
    let router = match cors {
        Some(c) => router.layer(c),
        None => router,
    };
    router.with_state(state)
}

async fn no_route(req: Request) -> AppError {
    AppError::client(
        StatusCode::NOT_FOUND,
        "no_such_route",
        format!(
            "{} {} is not an endpoint of this service; the endpoints are under /v1/datasets and /v1/sweeps",
            req.method(),
            req.uri().path()
        ),
    )
}

async fn wrong_method(req: Request) -> AppError {
    AppError::client(
        StatusCode::METHOD_NOT_ALLOWED,
        "method_not_allowed",
        format!(
            "{} is not allowed on {}; see the endpoint list for the methods it takes",
            req.method(),
            req.uri().path()
        ),
    )
}

async fn healthz() -> Json<Value> {
    Json(json!({ "status": "ok" }))
}

async fn metrics(State(state): State<AppState>) -> Result<Response, AppError> {
    let jobs = state.store.count_by_state().await?;
    let mut text = state.metrics.render(&jobs);
    if let Some(tasks) = state.store.task_counts().await? {
        text.push_str("# HELP mixgauge_fit_tasks Fit tasks in the cluster store, by state.\n");
        text.push_str("# TYPE mixgauge_fit_tasks gauge\n");
        for (s, n) in tasks {
            text.push_str(&format!("mixgauge_fit_tasks{{state=\"{s}\"}} {n}\n"));
        }
    }
    Ok((
        [(
            header::CONTENT_TYPE,
            "text/plain; version=0.0.4; charset=utf-8",
        )],
        text,
    )
        .into_response())
}

async fn readyz(State(state): State<AppState>) -> Response {
    match state.store.ping().await {
        Ok(()) => Json(json!({ "status": "ready" })).into_response(),
        Err(e) => {
            tracing::error!(error = %e, "store not reachable");
            (
                StatusCode::SERVICE_UNAVAILABLE,
                Json(json!({ "error": {
                    "code": "store_unavailable",
                    "message": "the store is not reachable",
                    "detail": null,
                } })),
            )
                .into_response()
        }
    }
}

/// Paging parameters of the list endpoints.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Page {
    limit: Option<usize>,
    after: Option<String>,
}

fn page(query: Result<Query<Page>, QueryRejection>) -> Result<(usize, Option<String>), AppError> {
    let Query(p) = query.map_err(|e| {
        AppError::client(
            StatusCode::BAD_REQUEST,
            "bad_query",
            format!(
                "{}; the list endpoints take ?limit=1..{MAX_PAGE}&after=<id>",
                e.body_text()
            ),
        )
    })?;
    let limit = p.limit.unwrap_or(MAX_PAGE);
    if limit == 0 || limit > MAX_PAGE {
        return Err(AppError::client(
            StatusCode::BAD_REQUEST,
            "bad_query",
            format!("limit = {limit} is not valid; give a limit between 1 and {MAX_PAGE}"),
        )
        .with_detail(json!({ "field": "limit", "max": MAX_PAGE })));
    }
    Ok((limit, p.after))
}

fn format_name(f: Format) -> String {
    f.name().to_ascii_lowercase()
}

/// A dataset's id: its whole content hash, so two different files can never share an id.
fn dataset_id(sha256: &str) -> String {
    format!("ds-{sha256}")
}

fn dataset_json(d: &DatasetRecord) -> Value {
    json!({
        "id": d.id,
        "rows": d.rows,
        "incomplete_rows": d.incomplete_rows,
        "columns": d.columns,
        "column_names": d.column_names,
        "sha256": d.sha256,
        "format": d.format,
        "created": d.created,
        "url": format!("/v1/datasets/{}", d.id),
    })
}

async fn upload_dataset(State(state): State<AppState>, req: Request) -> Result<Response, AppError> {
    let upload = crate::intake::upload(&state, req, false).await?;
    Ok(
        match store_dataset(&state, upload.bytes, upload.format).await? {
            PutOutcome::Created(d) => (StatusCode::CREATED, Json(dataset_json(&d))).into_response(),
            PutOutcome::Existing(d) => (StatusCode::OK, Json(dataset_json(&d))).into_response(),
        },
    )
}

/// Checks that `raw` reads as a dataset (under the row and column limits) and stores it.
async fn store_dataset(
    state: &AppState,
    raw: Vec<u8>,
    format: Format,
) -> Result<PutOutcome, AppError> {
    let limits = state.limits.read;
    let size = raw.len();
    // Parsing a large file is CPU work: off the async threads.
    let (raw, parsed) = tokio::task::spawn_blocking(move || {
        let parsed = check_upload(&raw, format, &limits);
        (raw, parsed)
    })
    .await
    .map_err(|e| crate::error::StoreError::Task(e.to_string()))?;
    let (data, incomplete_rows) = parsed.map_err(|e| invalid_data(&e, format))?;
    let meta = DatasetRecord {
        id: dataset_id(&data.sha256),
        rows: data.values.nrows() + incomplete_rows,
        incomplete_rows,
        columns: data.values.ncols(),
        column_names: data.column_names.clone(),
        sha256: data.sha256.clone(),
        format: format_name(format),
        created: now_ms(),
    };
    let outcome = state.store.put_dataset(meta, raw).await?;
    if matches!(outcome, PutOutcome::Created(_)) {
        state.metrics.uploaded(size);
    }
    Ok(outcome)
}

/// Reads an upload as every sweep will: strictly, or — when the only fault is missing or
/// non-finite values — again with incomplete rows dropped, so a file with gaps is stored for
/// sweeps that choose to drop them. Returns the rows read and how many were incomplete.
fn check_upload(
    raw: &[u8],
    format: Format,
    limits: &ReadLimits,
) -> Result<(mixgauge_data::Dataset, usize), mixgauge_data::DataError> {
    use mixgauge_data::DataError;
    let strict = DataOptions::default().read_options(format, limits);
    match mixgauge_data::read_bytes(raw, &strict) {
        Ok(data) => Ok((data, 0)),
        Err(DataError::MissingValue { .. } | DataError::NonFinite { .. }) => {
            let lenient = DataOptions {
                drop_incomplete: true,
                ..DataOptions::default()
            };
            match mixgauge_data::read_bytes(raw, &lenient.read_options(format, limits)) {
                Ok(data) => {
                    let dropped = data.dropped_rows;
                    Ok((data, dropped))
                }
                // Every row has a gap (AllRowsDropped): nothing a sweep could fit.
                Err(e) => Err(e),
            }
        }
        Err(e) => Err(e),
    }
}

/// 422 for data the reader refused; its message names the row, column or field.
pub(crate) fn invalid_data(e: &mixgauge_data::DataError, format: Format) -> AppError {
    AppError::client(
        StatusCode::UNPROCESSABLE_ENTITY,
        "invalid_dataset",
        e.to_string(),
    )
    .with_detail(json!({ "format": format_name(format) }))
}

fn now_ms() -> i64 {
    std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_millis() as i64)
}

async fn get_dataset(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Json<Value>, AppError> {
    let d = state
        .store
        .get_dataset(&id)
        .await?
        .ok_or_else(|| AppError::not_found("dataset", "dataset_not_found", &id))?;
    Ok(Json(dataset_json(&d)))
}

async fn list_datasets(
    State(state): State<AppState>,
    query: Result<Query<Page>, QueryRejection>,
) -> Result<Json<Value>, AppError> {
    let (limit, after) = page(query)?;
    let items = state.store.list_datasets(limit, after).await?;
    let next = (items.len() == limit).then(|| items.last().map(|d| d.id.clone()));
    Ok(Json(json!({
        "items": items.iter().map(dataset_json).collect::<Vec<_>>(),
        "next": next.flatten(),
    })))
}

async fn delete_dataset(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<StatusCode, AppError> {
    match state.store.delete_dataset(&id).await? {
        DeleteOutcome::Deleted => Ok(StatusCode::NO_CONTENT),
        DeleteOutcome::NotFound => Err(AppError::not_found("dataset", "dataset_not_found", &id)),
        DeleteOutcome::InUse(jobs) => Err(AppError::client(
            StatusCode::CONFLICT,
            "dataset_in_use",
            format!(
                "dataset {id} is used by {} queued or running sweep(s); cancel them or wait until they finish, then delete again",
                jobs.len()
            ),
        )
        .with_detail(json!({ "sweeps": jobs.iter().map(|j| sweep_id(*j)).collect::<Vec<_>>() }))),
    }
}

/// The body of `POST /v1/sweeps`.
#[derive(Debug, Default, Deserialize)]
#[serde(deny_unknown_fields)]
struct SweepRequest {
    /// Absent only in a multipart request, whose `file` part is the dataset.
    #[serde(default)]
    dataset: Option<String>,
    #[serde(default)]
    settings: serde_json::Map<String, Value>,
    #[serde(default)]
    data: Option<Value>,
}

pub(crate) fn sweep_id(id: i64) -> String {
    format!("sw-{id}")
}

/// The numeric id in `sw-<n>`; anything else names no sweep.
pub(crate) fn parse_sweep_id(text: &str) -> Result<i64, AppError> {
    text.strip_prefix("sw-")
        .and_then(|n| n.parse::<i64>().ok())
        .filter(|n| *n > 0)
        .ok_or_else(|| AppError::not_found("sweep", "sweep_not_found", text))
}

pub(crate) fn unprocessable(code: &'static str, message: String) -> AppError {
    AppError::client(StatusCode::UNPROCESSABLE_ENTITY, code, message)
}

/// The request's settings laid over the defaults, checked against the dataset's row count.
fn resolve_settings(
    given: &serde_json::Map<String, Value>,
    rows: usize,
    limits: &Limits,
) -> Result<SweepSettings, AppError> {
    let Value::Object(mut merged) =
        serde_json::to_value(SweepSettings::default()).expect("settings serialise")
    else {
        unreachable!("settings serialise as an object")
    };
    for (k, v) in given {
        if !merged.contains_key(k) {
            let known: Vec<&String> = merged.keys().collect();
            return Err(unprocessable(
                "invalid_settings",
                format!("settings.{k} is not a setting; the settings are {known:?}"),
            )
            .with_detail(json!({ "field": format!("settings.{k}") })));
        }
        merged.insert(k.clone(), v.clone());
    }
    let settings: SweepSettings = serde_json::from_value(Value::Object(merged)).map_err(|e| {
        unprocessable(
            "invalid_settings",
            format!(
                "settings are not valid: {e}; see the defaults in GET /v1/sweeps/<id> of any job"
            ),
        )
    })?;
    settings.validate(rows).map_err(|e| {
        unprocessable(
            "invalid_settings",
            format!("{e} (the dataset has {rows} rows)"),
        )
    })?;
    let candidates = settings.components.len() * settings.covariances.len();
    if candidates > limits.candidates {
        return Err(unprocessable(
            "too_many_candidates",
            format!(
                "the sweep has {candidates} candidates ({} component counts × {} covariance forms); this server takes at most {} per sweep — split it into several sweeps",
                settings.components.len(),
                settings.covariances.len(),
                limits.candidates
            ),
        )
        .with_detail(json!({ "field": "settings.components", "limit": limits.candidates })));
    }
    let fits = (candidates as u128)
        .saturating_mul(settings.folds as u128 + 1)
        .saturating_mul(settings.restarts as u128);
    if fits > MAX_FITS {
        return Err(unprocessable(
            "too_many_fits",
            format!(
                "the sweep needs {fits} fits ({candidates} candidates × ({} folds + 1) × {} restarts); this server runs at most {MAX_FITS} per sweep — use fewer restarts or folds",
                settings.folds, settings.restarts
            ),
        )
        .with_detail(json!({ "field": "settings.restarts", "limit": MAX_FITS as u64 })));
    }
    let fold_rows = (settings.folds as u128).saturating_mul(rows as u128);
    if fold_rows > MAX_FOLD_ROWS {
        return Err(unprocessable(
            "too_many_fits",
            format!(
                "{} folds over {rows} rows would list {fold_rows} training rows; this server holds at most {MAX_FOLD_ROWS} per sweep — use fewer folds",
                settings.folds
            ),
        )
        .with_detail(json!({ "field": "settings.folds", "limit": MAX_FOLD_ROWS as u64 })));
    }
    Ok(settings)
}

async fn create_sweep(State(state): State<AppState>, req: Request) -> Result<Response, AppError> {
    let key = idempotency_key(req.headers())?;
    let (given, dataset) = if crate::intake::is_multipart(req.headers()) {
        let upload = crate::intake::upload(&state, req, true).await?;
        let given = match &upload.request {
            Some(r) => parse_request(r)?,
            None => SweepRequest::default(),
        };
        if given.dataset.is_some() {
            return Err(AppError::client(
                StatusCode::BAD_REQUEST,
                "bad_json",
                "a multipart sweep request takes its dataset from the `file` part; leave `dataset` out of the `request` part",
            ));
        }
        let dataset = match store_dataset(&state, upload.bytes, upload.format).await? {
            PutOutcome::Created(d) | PutOutcome::Existing(d) => d,
        };
        (given, dataset)
    } else {
        let (given, media) = crate::intake::media_type(req.headers());
        if !media.is_empty() && media != "application/json" {
            return Err(AppError::client(
                StatusCode::UNSUPPORTED_MEDIA_TYPE,
                "unsupported_media_type",
                format!(
                    "Content-Type {given:?} is not a sweep request; send application/json, or multipart/form-data with `file` and `request` parts"
                ),
            ));
        }
        let bytes = crate::intake::read_limited(req.into_body(), SWEEP_BODY_LIMIT).await?;
        let given = parse_request(&bytes)?;
        let Some(id) = &given.dataset else {
            return Err(unprocessable(
                "invalid_request",
                "the request names no dataset; send {\"dataset\": \"<id>\", \"settings\": {...}} with the id POST /v1/datasets returned".into(),
            )
            .with_detail(json!({ "field": "dataset" })));
        };
        let dataset = state.store.get_dataset(id).await?.ok_or_else(|| {
            unprocessable(
                "dataset_not_found",
                format!(
                    "no dataset has the id {id:?}; upload it with POST /v1/datasets and use the id it returns"
                ),
            )
            .with_detail(json!({ "field": "dataset" }))
        })?;
        (given, dataset)
    };
    let (status, job) = submit(&state, &given, dataset, key).await?;
    let id = sweep_id(job.id);
    Ok((
        status,
        [(header::LOCATION, format!("/v1/sweeps/{id}"))],
        Json(json!({ "id": id, "url": format!("/v1/sweeps/{id}") })),
    )
        .into_response())
}

fn parse_request(bytes: &[u8]) -> Result<SweepRequest, AppError> {
    serde_json::from_slice(bytes).map_err(|e| {
        AppError::client(
            StatusCode::BAD_REQUEST,
            "bad_json",
            format!(
                "the body is not a sweep request: {e}; send {{\"dataset\": \"<id>\", \"settings\": {{...}}, \"data\": {{...}}}}"
            ),
        )
    })
}

fn idempotency_key(headers: &HeaderMap) -> Result<Option<String>, AppError> {
    match headers.get("idempotency-key") {
        None => Ok(None),
        Some(v) => Ok(Some(
            v.to_str()
                .ok()
                .filter(|k| !k.is_empty() && k.len() <= 255)
                .ok_or_else(|| {
                    AppError::client(
                        StatusCode::BAD_REQUEST,
                        "bad_idempotency_key",
                        "the Idempotency-Key header must be 1 to 255 visible ASCII characters",
                    )
                })?
                .to_string(),
        )),
    }
}

/// Resolves and checks a sweep request over `dataset`, then queues it (or finds the job an
/// earlier request with the same idempotency key queued).
async fn submit(
    state: &AppState,
    given: &SweepRequest,
    dataset: DatasetRecord,
    key: Option<String>,
) -> Result<(StatusCode, SweepJob), AppError> {
    let options: DataOptions = match &given.data {
        None => DataOptions::default(),
        Some(v) => serde_json::from_value(v.clone()).map_err(|e| {
            unprocessable(
                "invalid_data_options",
                format!("data options are not valid: {e}; the options are columns (list of names), labels (a column name), drop_incomplete and standardise (true/false)"),
            )
            .with_detail(json!({ "field": "data" }))
        })?,
    };
    // Options other than the defaults change the rows, and a file with gaps reads only when
    // they are dropped: read the file again to check now, so a misspelt column or a missing
    // value is a 422 here rather than a failed job later.
    let rows = if options == DataOptions::default() && dataset.incomplete_rows == 0 {
        dataset.rows
    } else {
        let bytes = state
            .store
            .dataset_bytes(&dataset.id)
            .await?
            .ok_or_else(|| AppError::not_found("dataset", "dataset_not_found", &dataset.id))?;
        let format = parse_format(&dataset.format)?;
        let limits = state.limits.read;
        let checked = options.clone();
        let parsed = tokio::task::spawn_blocking(move || {
            crate::options::prepare(&bytes, format, &checked, &limits)
                .map(|p| p.data.values.nrows())
        })
        .await
        .map_err(|e| crate::error::StoreError::Task(e.to_string()))?;
        parsed.map_err(|e| {
            invalid_data(&e, format)
                .with_detail(json!({ "field": "data", "format": dataset.format }))
        })?
    };
    let settings = resolve_settings(&given.settings, rows, &state.limits)?;
    let settings_json = serde_json::to_string(&settings).expect("settings serialise");
    let data_json = serde_json::to_string(&options).expect("options serialise");
    // The hash covers the resolved request, so key order and spelled-out defaults do not matter.
    let request_hash = hex(&Sha256::digest(
        format!("{}\n{settings_json}\n{data_json}", dataset.id).as_bytes(),
    ));
    let outcome = state
        .store
        .create_sweep(NewSweep {
            dataset: dataset.id,
            settings: settings_json,
            data: data_json,
            idempotency_key: key,
            request_hash,
        })
        .await?;
    match outcome {
        CreateOutcome::Created(job) => {
            state.wake.notify_waiters();
            Ok((StatusCode::ACCEPTED, job))
        }
        CreateOutcome::Existing(job) => Ok((StatusCode::OK, job)),
        CreateOutcome::KeyConflict => Err(AppError::client(
            StatusCode::CONFLICT,
            "idempotency_key_reused",
            "this Idempotency-Key was already used with a different request; use a new key for a new sweep",
        )),
    }
}

pub(crate) fn parse_format(name: &str) -> Result<Format, AppError> {
    Ok(match name {
        "csv" => Format::Csv,
        "npy" => Format::Npy,
        "json" => Format::Json,
        other => {
            return Err(AppError::Internal(crate::error::StoreError::Corrupt(
                format!("dataset format {other:?}"),
            )));
        }
    })
}

/// Uploads the start-up dataset and queues its sweep (idempotent across restarts: the key is
/// derived from the request, so a restart finds the earlier job).
pub(crate) async fn preload(state: &AppState, p: Preload) -> Result<String, AppError> {
    let dataset = match store_dataset(state, p.bytes, p.format).await? {
        PutOutcome::Created(d) | PutOutcome::Existing(d) => d,
    };
    let data = serde_json::to_value(&p.data).expect("options serialise");
    let key = format!(
        "start-up-{}",
        &hex(&Sha256::digest(
            format!(
                "{}\n{}\n{data}",
                dataset.id,
                Value::Object(p.settings.clone())
            )
            .as_bytes()
        ))[..32]
    );
    let given = SweepRequest {
        dataset: None,
        settings: p.settings,
        data: Some(data),
    };
    let (_, job) = submit(state, &given, dataset, Some(key)).await?;
    Ok(sweep_id(job.id))
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

fn sweep_json(job: &SweepJob, full: bool) -> Result<Value, AppError> {
    let parse = |text: &str, what: &str| {
        serde_json::from_str::<Value>(text).map_err(|e| {
            AppError::Internal(crate::error::StoreError::Corrupt(format!(
                "{what} of sweep {}: {e}",
                job.id
            )))
        })
    };
    let mut v = json!({
        "id": sweep_id(job.id),
        "url": format!("/v1/sweeps/{}", sweep_id(job.id)),
        "dataset": job.dataset,
        "state": job.state,
        "progress": { "done": job.done, "total": job.total },
        "cancel_requested": job.cancel_requested,
        "settings": parse(&job.settings, "settings")?,
        "data": parse(&job.data, "data options")?,
        "finished": parse(&job.finished, "finished candidates")?,
        "requeues": job.requeues,
        "created": job.created,
        "updated": job.updated,
        "links": {
            "report": format!("/v1/sweeps/{}/report", sweep_id(job.id)),
            "models": format!("/v1/sweeps/{}/models/{{covariance}}/{{components}}", sweep_id(job.id)),
            "score": format!("/v1/sweeps/{}/score", sweep_id(job.id)),
            "profile": format!("/v1/sweeps/{}/profile", sweep_id(job.id)),
            "gate": format!("/v1/sweeps/{}/gate", sweep_id(job.id)),
        },
    });
    if full {
        if let Some(r) = &job.result {
            v["result"] = parse(r, "result")?;
        }
        if let Some(e) = &job.error {
            v["error"] = json!(e);
        }
    }
    Ok(v)
}

pub(crate) async fn find_sweep(state: &AppState, text: &str) -> Result<SweepJob, AppError> {
    let id = parse_sweep_id(text)?;
    state
        .store
        .get_sweep(id)
        .await?
        .ok_or_else(|| AppError::not_found("sweep", "sweep_not_found", text))
}

async fn get_sweep(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Json<Value>, AppError> {
    let job = find_sweep(&state, &id).await?;
    Ok(Json(sweep_json(&job, true)?))
}

async fn list_sweeps(
    State(state): State<AppState>,
    query: Result<Query<Page>, QueryRejection>,
) -> Result<Json<Value>, AppError> {
    let (limit, after) = page(query)?;
    let after = match after {
        None => None,
        Some(a) => Some(parse_sweep_id(&a).map_err(|_| {
            AppError::client(
                StatusCode::BAD_REQUEST,
                "bad_query",
                format!(
                    "after = {a:?} is not a sweep id; pass the \"next\" value of the previous page"
                ),
            )
        })?),
    };
    let jobs = state.store.list_sweeps(limit, after).await?;
    let next = (jobs.len() == limit)
        .then(|| jobs.last().map(|j| sweep_id(j.id)))
        .flatten();
    let items = jobs
        .iter()
        .map(|j| sweep_json(j, false))
        .collect::<Result<Vec<_>, _>>()?;
    Ok(Json(json!({ "items": items, "next": next })))
}

async fn cancel_sweep(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let job = find_sweep(&state, &id).await?;
    match state.store.request_cancel(job.id).await? {
        Some(JobState::Cancelled) => {}
        Some(JobState::Running) => {
            // Recorded in the store first, then signalled: a worker that claimed the job but
            // has not yet registered its flag reads the request from the store instead.
            state.signal_cancel(job.id);
        }
        Some(s) => {
            return Err(AppError::client(
                StatusCode::CONFLICT,
                "sweep_finished",
                format!(
                    "sweep {id} has already {}; there is nothing to cancel",
                    s.as_str()
                ),
            )
            .with_detail(json!({ "state": s })));
        }
        None => return Err(AppError::not_found("sweep", "sweep_not_found", &id)),
    }
    let job = find_sweep(&state, &id).await?;
    Ok((StatusCode::ACCEPTED, Json(sweep_json(&job, false)?)).into_response())
}

async fn sweep_report(
    State(state): State<AppState>,
    Path(id): Path<String>,
) -> Result<Response, AppError> {
    let job = find_sweep(&state, &id).await?;
    if job.state != JobState::Succeeded {
        return Err(AppError::client(
            StatusCode::CONFLICT,
            "sweep_not_succeeded",
            format!(
                "sweep {id} is {}; the report exists once it has succeeded — poll GET /v1/sweeps/{id}",
                job.state.as_str()
            ),
        )
        .with_detail(json!({ "state": job.state })));
    }
    let html = state.store.report(job.id).await?.ok_or_else(|| {
        AppError::Internal(crate::error::StoreError::Corrupt(format!(
            "succeeded sweep {} has no report",
            job.id
        )))
    })?;
    Ok(Html(html).into_response())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn resolve(given: Value, rows: usize) -> Result<SweepSettings, AppError> {
        let Value::Object(given) = given else {
            panic!("settings are an object")
        };
        resolve_settings(&given, rows, &Limits::default())
    }

    fn code(r: Result<SweepSettings, AppError>) -> &'static str {
        match r {
            Err(AppError::Client { code, .. }) => code,
            other => panic!("expected a client error, got {other:?}"),
        }
    }

    #[test]
    fn a_sweep_too_large_to_list_is_refused_before_it_is_queued() {
        // 24 candidates × 6 × 10^12 restarts: listing the fits alone would exhaust memory.
        assert_eq!(
            code(resolve(json!({ "restarts": 1_000_000_000_000u64 }), 100)),
            "too_many_fits"
        );
        // 1000 folds over a million rows: a billion training-row numbers.
        let many_folds =
            json!({ "components": [1], "covariances": ["diagonal"], "folds": 1000, "restarts": 1 });
        assert_eq!(code(resolve(many_folds, 1_000_000)), "too_many_fits");
        // The defaults, and a generous sweep, pass.
        assert!(resolve(json!({}), 100).is_ok());
        assert!(resolve(json!({ "folds": 10, "restarts": 20 }), 100_000).is_ok());
    }
}
