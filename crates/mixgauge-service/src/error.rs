//! Errors: [`StoreError`] for the persistence layer, [`AppError`] for HTTP handlers.
//!
//! Use [`AppError`] in handlers: its client variants carry a status, a stable code and a message
//! that says what to change; [`AppError::Internal`] wraps anything else, logs the cause and sends
//! a generic 500 body. Every error body has the shape
//! `{ "error": { "code", "message", "detail" } }`.

use axum::Json;
use axum::http::StatusCode;
use axum::response::{IntoResponse, Response};
use serde_json::{Value, json};

/// A failure inside the store: the database, the blob store or the dataset files.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum StoreError {
    /// SQLite reported an error.
    #[error("database error: {0}")]
    Sqlite(#[from] rusqlite::Error),
    /// PostgreSQL reported an error, or no connection could be had.
    #[error("PostgreSQL: {0}")]
    Postgres(String),
    /// The blob store holding dataset bytes reported an error.
    #[error("blob store: {0}")]
    Blobs(String),
    /// Reading or writing a dataset file, or the data directory, failed.
    #[error("{action} {path}: {source}")]
    Io {
        /// What was being done.
        action: &'static str,
        /// The file or directory.
        path: String,
        /// The cause.
        source: std::io::Error,
    },
    /// A stored value does not have the expected form (a bug or a hand-edited database).
    #[error("corrupt store: {0}")]
    Corrupt(String),
    /// The blocking task running the store call was lost (panicked or cancelled).
    #[error("store task failed: {0}")]
    Task(String),
}

/// An error answered to an HTTP client.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum AppError {
    /// The client's request cannot be served as sent (4xx).
    #[error("{message}")]
    Client {
        /// HTTP status, always 4xx.
        status: StatusCode,
        /// Stable machine-readable code, e.g. `dataset_not_found`.
        code: &'static str,
        /// What happened and what to change.
        message: String,
        /// Structured facts (field, limit, state); `null` when there are none.
        detail: Value,
    },
    /// Anything the client did not cause: logged, answered with a generic 500.
    #[error(transparent)]
    Internal(#[from] StoreError),
}

impl AppError {
    /// A 4xx error with no detail.
    pub(crate) fn client(
        status: StatusCode,
        code: &'static str,
        message: impl Into<String>,
    ) -> Self {
        AppError::Client {
            status,
            code,
            message: message.into(),
            detail: Value::Null,
        }
    }

    /// Adds structured detail to a client error.
    pub(crate) fn with_detail(self, detail: Value) -> Self {
        match self {
            AppError::Client {
                status,
                code,
                message,
                ..
            } => AppError::Client {
                status,
                code,
                message,
                detail,
            },
            other => other,
        }
    }

    /// 404 for a resource kind and id.
    pub(crate) fn not_found(kind: &'static str, code: &'static str, id: &str) -> Self {
        AppError::client(
            StatusCode::NOT_FOUND,
            code,
            format!("no {kind} has the id \"{id}\"; list them with GET /v1/{kind}s"),
        )
        .with_detail(json!({ "id": id }))
    }
}

impl IntoResponse for AppError {
    fn into_response(self) -> Response {
        match self {
            AppError::Client {
                status,
                code,
                message,
                detail,
            } => (
                status,
                Json(json!({ "error": { "code": code, "message": message, "detail": detail } })),
            )
                .into_response(),
            AppError::Internal(cause) => {
                tracing::error!(error = %cause, "internal error");
                (
                    StatusCode::INTERNAL_SERVER_ERROR,
                    Json(json!({ "error": {
                        "code": "internal",
                        "message": "the server failed to handle this request; try again later",
                        "detail": null,
                    } })),
                )
                    .into_response()
            }
        }
    }
}
