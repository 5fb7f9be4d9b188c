//! The web page at `/` and its assets, compiled into the binary (no network resource).
//!
//! The page is plain HTML, one script and one stylesheet under `/ui/`. It talks to the API with
//! `fetch`, sending the bearer token the user typed (kept in the tab's session storage), and
//! shows a finished sweep's report in a sandboxed `<iframe srcdoc>`. A srcdoc frame keeps the
//! page's Content-Security-Policy, which refuses inline styles, so the script moves the
//! report's one inline `<style>` block into a `blob:` stylesheet: that is why `style-src`
//! allows `blob:` (only the page's own script can make a blob URL of this origin).
//!
//! Every response carries a strong `ETag` (the content's SHA-256) and `Cache-Control: no-cache`,
//! so browsers revalidate and a new binary's page is never mixed with an old script.

use std::sync::LazyLock;

use axum::Router;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use axum::routing::get;
use sha2::{Digest, Sha256};

use crate::state::AppState;

/// The page's policy: everything from this origin only, no inline script or style, no plugins,
/// no form posts, and no embedding of the page in another site's frame.
pub(crate) const PAGE_POLICY: &str = "default-src 'self'; script-src 'self'; style-src 'self' blob:; \
     img-src 'self'; font-src 'self'; connect-src 'self'; frame-src 'self'; object-src 'none'; \
     base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

/// One compiled-in file.
struct Asset {
    body: &'static str,
    content_type: &'static str,
    etag: String,
}

impl Asset {
    fn new(body: &'static str, content_type: &'static str) -> Asset {
        let digest = Sha256::digest(body.as_bytes());
        let hex: String = digest.iter().take(16).map(|b| format!("{b:02x}")).collect();
        Asset {
            body,
            content_type,
            etag: format!("\"{hex}\""),
        }
    }

    /// The file, or 304 when the request already holds this version.
    fn respond(&self, request: &HeaderMap, policy: Option<&'static str>) -> Response {
        let fresh = request
            .get(header::IF_NONE_MATCH)
            .and_then(|v| v.to_str().ok())
            .is_some_and(|tags| {
                tags.split(',')
                    .any(|t| t.trim() == self.etag || t.trim() == "*")
            });
        let mut response = if fresh {
            StatusCode::NOT_MODIFIED.into_response()
        } else {
            (
                [(
                    header::CONTENT_TYPE,
                    HeaderValue::from_static(self.content_type),
                )],
                self.body,
            )
                .into_response()
        };
        let h = response.headers_mut();
        h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
        if let Ok(tag) = HeaderValue::from_str(&self.etag) {
            h.insert(header::ETAG, tag);
        }
        h.insert(
            header::X_CONTENT_TYPE_OPTIONS,
            HeaderValue::from_static("nosniff"),
        );
        h.insert(
            header::REFERRER_POLICY,
            HeaderValue::from_static("no-referrer"),
        );
        if let Some(p) = policy {
            h.insert(header::CONTENT_SECURITY_POLICY, HeaderValue::from_static(p));
            h.insert(header::X_FRAME_OPTIONS, HeaderValue::from_static("DENY"));
        }
        response
    }
}

static INDEX: LazyLock<Asset> =
    LazyLock::new(|| Asset::new(include_str!("../ui/index.html"), "text/html; charset=utf-8"));
static SCRIPT: LazyLock<Asset> = LazyLock::new(|| {
    Asset::new(
        include_str!("../ui/app.js"),
        "text/javascript; charset=utf-8",
    )
});
static STYLE: LazyLock<Asset> =
    LazyLock::new(|| Asset::new(include_str!("../ui/style.css"), "text/css; charset=utf-8"));

async fn index(request: HeaderMap) -> Response {
    INDEX.respond(&request, Some(PAGE_POLICY))
}

async fn script(request: HeaderMap) -> Response {
    SCRIPT.respond(&request, None)
}

async fn style(request: HeaderMap) -> Response {
    STYLE.respond(&request, None)
}

/// The page has no icon; answering "nothing" keeps browsers from logging a missing file.
async fn icon() -> Response {
    (
        StatusCode::NO_CONTENT,
        [(header::CACHE_CONTROL, "public, max-age=86400")],
    )
        .into_response()
}

/// Routes of the page and its assets.
pub(crate) fn routes() -> Router<AppState> {
    Router::new()
        .route("/", get(index))
        .route("/ui/app.js", get(script))
        .route("/ui/style.css", get(style))
        .route("/favicon.ico", get(icon))
}
