//! Request bodies that carry data: a raw CSV, NPY or JSON body named by `Content-Type`, or a
//! `multipart/form-data` form with a `file` part (and, for sweeps, a `request` part). Bodies
//! are read frame by frame against the upload limit, so an oversized upload is refused as
//! soon as it crosses the limit rather than after it has been buffered.

use axum::body::Body;
use axum::extract::{FromRequest, Multipart, Request};
use axum::http::{HeaderMap, StatusCode, header};
use http_body_util::BodyExt;
use serde_json::json;

use mixgauge_data::Format;

use crate::error::AppError;
use crate::state::AppState;

/// A data file taken from a request.
pub(crate) struct Upload {
    /// The file's bytes.
    pub bytes: Vec<u8>,
    /// Its format.
    pub format: Format,
    /// The multipart `request` part, when there was one.
    pub request: Option<Vec<u8>>,
}

pub(crate) fn too_large(limit: usize) -> AppError {
    AppError::client(
        StatusCode::PAYLOAD_TOO_LARGE,
        "body_too_large",
        format!(
            "the request body is larger than the limit of {limit} bytes; send a smaller file or raise the server's --max-upload-bytes"
        ),
    )
    .with_detail(json!({ "limit_bytes": limit }))
}

pub(crate) fn media_type(headers: &HeaderMap) -> (String, String) {
    let given = headers
        .get(header::CONTENT_TYPE)
        .and_then(|v| v.to_str().ok())
        .unwrap_or("")
        .to_string();
    let media = given
        .split(';')
        .next()
        .unwrap_or("")
        .trim()
        .to_ascii_lowercase();
    (given, media)
}

/// The format a media type names; `application/octet-stream` only for NPY bytes.
fn format_of(media: &str, bytes: &[u8]) -> Option<Format> {
    match media {
        "text/csv" | "application/csv" => Some(Format::Csv),
        "application/json" => Some(Format::Json),
        "application/x-npy" => Some(Format::Npy),
        "application/octet-stream" if bytes.starts_with(b"\x93NUMPY") => Some(Format::Npy),
        _ => None,
    }
}

fn unsupported(given: &str) -> AppError {
    AppError::client(
        StatusCode::UNSUPPORTED_MEDIA_TYPE,
        "unsupported_media_type",
        format!(
            "Content-Type {given:?} is not a dataset format; send text/csv, application/json, application/x-npy (or application/octet-stream holding an NPY file), or a multipart/form-data form with a `file` part"
        ),
    )
    .with_detail(json!({ "content_type": given }))
}

/// Reads a whole body, refusing it once it passes `limit` bytes.
pub(crate) async fn read_limited(body: Body, limit: usize) -> Result<Vec<u8>, AppError> {
    let mut body = body;
    let mut out = Vec::new();
    while let Some(frame) = body.frame().await {
        let frame = frame.map_err(|e| {
            AppError::client(
                StatusCode::BAD_REQUEST,
                "bad_body",
                format!("the request body could not be read: {e}; send it again"),
            )
        })?;
        if let Ok(data) = frame.into_data() {
            if out.len() + data.len() > limit {
                return Err(too_large(limit));
            }
            out.extend_from_slice(&data);
        }
    }
    Ok(out)
}

/// True for a `multipart/form-data` body.
pub(crate) fn is_multipart(headers: &HeaderMap) -> bool {
    media_type(headers).1 == "multipart/form-data"
}

/// A data file from `req`: raw by `Content-Type`, or multipart with a `file` part.
/// `with_request` accepts a multipart `request` part too.
pub(crate) async fn upload(
    state: &AppState,
    req: Request,
    with_request: bool,
) -> Result<Upload, AppError> {
    let limit = state.limits.upload_bytes;
    let (given, media) = media_type(req.headers());
    if media == "multipart/form-data" {
        return multipart(state, req, limit, with_request).await;
    }
    // A Content-Length over the limit is refused before a byte is read.
    if let Some(n) = req
        .headers()
        .get(header::CONTENT_LENGTH)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.parse::<u64>().ok())
        && n > limit as u64
    {
        return Err(too_large(limit));
    }
    if !matches!(
        media.as_str(),
        "text/csv"
            | "application/csv"
            | "application/json"
            | "application/x-npy"
            | "application/octet-stream"
    ) {
        return Err(unsupported(&given));
    }
    let bytes = read_limited(req.into_body(), limit).await?;
    let format = format_of(&media, &bytes).ok_or_else(|| unsupported(&given))?;
    Ok(Upload {
        bytes,
        format,
        request: None,
    })
}

async fn multipart(
    state: &AppState,
    req: Request,
    limit: usize,
    with_request: bool,
) -> Result<Upload, AppError> {
    let bad = |message: String| AppError::client(StatusCode::BAD_REQUEST, "bad_multipart", message);
    let mut form = Multipart::from_request(req, state).await.map_err(|e| {
        bad(format!(
            "{}; send a multipart/form-data body with a `file` part",
            e.body_text()
        ))
    })?;
    let mut file = None;
    let mut request = None;
    while let Some(mut field) = form
        .next_field()
        .await
        .map_err(|e| bad(format!("the form could not be read: {}", e.body_text())))?
    {
        let name = field.name().unwrap_or("").to_string();
        let part_type = field.content_type().unwrap_or("").to_ascii_lowercase();
        let filename = field.file_name().unwrap_or("").to_ascii_lowercase();
        let mut bytes = Vec::new();
        while let Some(chunk) = field.chunk().await.map_err(|e| {
            bad(format!(
                "part `{name}` could not be read: {}",
                e.body_text()
            ))
        })? {
            if bytes.len() + chunk.len() > limit {
                return Err(too_large(limit));
            }
            bytes.extend_from_slice(&chunk);
        }
        match name.as_str() {
            "file" => {
                let media = part_type.split(';').next().unwrap_or("").trim().to_string();
                let format = format_of(&media, &bytes).or_else(|| {
                    let ext = filename.rsplit_once('.').map(|(_, e)| e)?;
                    match ext {
                        "csv" => Some(Format::Csv),
                        "npy" => Some(Format::Npy),
                        "json" => Some(Format::Json),
                        _ => None,
                    }
                });
                let format = format.ok_or_else(|| {
                    AppError::client(
                        StatusCode::UNSUPPORTED_MEDIA_TYPE,
                        "unsupported_media_type",
                        format!(
                            "the `file` part ({filename:?}, type {part_type:?}) is not CSV, NPY or JSON; give the part one of those types or a .csv, .npy or .json file name"
                        ),
                    )
                })?;
                file = Some((bytes, format));
            }
            "request" if with_request => request = Some(bytes),
            other => {
                let expected = if with_request {
                    "`file` and `request`"
                } else {
                    "`file`"
                };
                return Err(bad(format!(
                    "the form has a part named {other:?}; the parts are {expected}"
                )));
            }
        }
    }
    let (bytes, format) = file.ok_or_else(|| {
        bad("the form has no `file` part; add the data file as a part named `file`".into())
    })?;
    Ok(Upload {
        bytes,
        format,
        request,
    })
}
