//! Middleware on every request: bearer-token access control, the request time limit, the
//! response counters behind `/metrics`, and CORS when origins are configured.
//!
//! Tokens are compared with `subtle`'s constant-time equality against every configured token
//! (no early exit on the first match), so response timing does not reveal how much of a
//! guess was right. Only a token's length can leak, which says nothing about its content.

use std::time::Duration;

use axum::extract::{Request, State};
use axum::http::{HeaderValue, Method, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};
use subtle::ConstantTimeEq;
use tower_http::cors::{AllowOrigin, CorsLayer};

use crate::error::AppError;
use crate::state::AppState;

/// Requests that take a data body (uploads, score) may run this long; the others get the
/// configured request time limit.
pub(crate) const UPLOAD_TIMEOUT: Duration = Duration::from_secs(600);

/// Paths anyone may call: health checks, and the page with its assets (the page asks for a
/// token and sends it with each API call).
fn is_open(path: &str) -> bool {
    matches!(path, "/healthz" | "/readyz" | "/" | "/favicon.ico") || path.starts_with("/ui/")
}

fn known(tokens: &[Vec<u8>], given: &[u8]) -> bool {
    let mut found = subtle::Choice::from(0u8);
    for t in tokens {
        found |= t.as_slice().ct_eq(given);
    }
    bool::from(found)
}

/// Refuses a request without a valid bearer token when tokens are configured.
pub(crate) async fn authorise(State(state): State<AppState>, req: Request, next: Next) -> Response {
    if state.tokens.is_empty() || is_open(req.uri().path()) {
        return next.run(req).await;
    }
    let given = req
        .headers()
        .get(header::AUTHORIZATION)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| {
            v.strip_prefix("Bearer ")
                .or_else(|| v.strip_prefix("bearer "))
        })
        .map(str::trim);
    match given {
        Some(t) if known(&state.tokens, t.as_bytes()) => next.run(req).await,
        Some(_) => unauthorised(
            "the bearer token is not one this server accepts; check it for typos or ask for a new one",
        ),
        None => unauthorised(
            "this server needs an access token: send the header `Authorization: Bearer <token>`",
        ),
    }
}

fn unauthorised(message: &str) -> Response {
    let mut r = AppError::client(StatusCode::UNAUTHORIZED, "unauthorised", message).into_response();
    r.headers_mut()
        .insert(header::WWW_AUTHENTICATE, HeaderValue::from_static("Bearer"));
    r
}

/// Answers 408 when a request takes longer than its limit, and counts every response.
pub(crate) async fn time_and_count(
    State(state): State<AppState>,
    req: Request,
    next: Next,
) -> Response {
    let takes_data = req.method() == Method::POST
        && (req.uri().path() == "/v1/datasets"
            || req.uri().path() == "/v1/sweeps"
            || req.uri().path().ends_with("/score")
            || req.uri().path().ends_with("/gate"));
    let limit = if takes_data {
        UPLOAD_TIMEOUT.max(state.limits.request_timeout)
    } else {
        state.limits.request_timeout
    };
    let response = match tokio::time::timeout(limit, next.run(req)).await {
        Ok(r) => r,
        Err(_) => AppError::client(
            StatusCode::REQUEST_TIMEOUT,
            "request_timeout",
            format!(
                "the request took longer than {} s; send a smaller body or a faster connection, or raise the server's time limit",
                limit.as_secs()
            ),
        )
        .into_response(),
    };
    state.metrics.responded(response.status().as_u16());
    response
}

/// CORS for the configured origins, or `None` when there are none.
pub(crate) fn cors(origins: &[String]) -> Option<CorsLayer> {
    if origins.is_empty() {
        return None;
    }
    let values: Vec<HeaderValue> = origins
        .iter()
        .filter_map(|o| HeaderValue::from_str(o).ok())
        .collect();
    Some(
        CorsLayer::new()
            .allow_origin(AllowOrigin::list(values))
            .allow_methods([Method::GET, Method::POST, Method::DELETE])
            .allow_headers([
                header::AUTHORIZATION,
                header::CONTENT_TYPE,
                header::HeaderName::from_static("idempotency-key"),
            ])
            .expose_headers([header::LOCATION])
            .max_age(Duration::from_secs(600)),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_token_matches_only_itself() {
        let tokens = vec![b"alpha-123".to_vec(), b"beta-456".to_vec()];
        assert!(known(&tokens, b"beta-456"));
        assert!(known(&tokens, b"alpha-123"));
        assert!(!known(&tokens, b"alpha-12"));
        assert!(!known(&tokens, b"alpha-1234"));
        assert!(!known(&tokens, b""));
        assert!(!known(&[], b"alpha-123"));
    }

    #[test]
    fn health_checks_and_the_page_are_open() {
        assert!(is_open("/healthz") && is_open("/readyz") && is_open("/") && is_open("/ui/app.js"));
        assert!(!is_open("/v1/sweeps") && !is_open("/metrics") && !is_open("/uix"));
    }
}
