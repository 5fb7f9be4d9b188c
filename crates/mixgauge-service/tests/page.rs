//! The web page at `/` and its assets: served from the binary with the right types, cache and
//! security headers, and referring to nothing outside this server.

use std::sync::Arc;

use axum::Router;
use axum::body::Body;
use axum::http::{HeaderMap, Request, StatusCode, header};
use http_body_util::BodyExt;
use mixgauge_service::{AppState, SqliteStore, router};
use tower::ServiceExt;

fn app() -> (tempfile::TempDir, Router) {
    let dir = tempfile::tempdir().expect("a temp dir");
    let store = SqliteStore::open(dir.path()).expect("the store opens");
    (dir, router(AppState::new(Arc::new(store))))
}

async fn get(
    app: &Router,
    path: &str,
    headers: &[(&str, &str)],
) -> (StatusCode, HeaderMap, String) {
    let mut req = Request::get(path);
    for (k, v) in headers {
        req = req.header(*k, *v);
    }
    let resp = app
        .clone()
        .oneshot(req.body(Body::empty()).expect("a request"))
        .await
        .expect("the router answers");
    let status = resp.status();
    let headers = resp.headers().clone();
    let bytes = resp.into_body().collect().await.expect("a body").to_bytes();
    let text = String::from_utf8(bytes.to_vec()).expect("UTF-8 text");
    (status, headers, text)
}

fn header_of(headers: &HeaderMap, name: header::HeaderName) -> &str {
    headers
        .get(&name)
        .and_then(|v| v.to_str().ok())
        .unwrap_or_else(|| panic!("a {name} header"))
}

/// Every `src="..."` and `href="..."` value in `html`.
fn references(html: &str) -> Vec<String> {
    let mut out = Vec::new();
    for attr in ["src=\"", "href=\""] {
        let mut rest = html;
        while let Some(at) = rest.find(attr) {
            rest = &rest[at + attr.len()..];
            let end = rest.find('"').expect("a closed attribute");
            out.push(rest[..end].to_string());
            rest = &rest[end..];
        }
    }
    out
}

#[tokio::test]
async fn the_page_and_its_assets_are_served_with_their_types() {
    let (_dir, app) = app();
    let (status, headers, html) = get(&app, "/", &[]).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(
        header_of(&headers, header::CONTENT_TYPE),
        "text/html; charset=utf-8"
    );
    assert!(html.starts_with("<!DOCTYPE html>"));
    assert!(header_of(&headers, header::CACHE_CONTROL).contains("no-cache"));
    let policy = header_of(&headers, header::CONTENT_SECURITY_POLICY);
    for directive in [
        "default-src 'self'",
        "script-src 'self'",
        "object-src 'none'",
        "frame-ancestors 'none'",
    ] {
        assert!(
            policy.contains(directive),
            "{directive:?} missing from {policy:?}"
        );
    }
    assert!(
        !policy.contains("unsafe-inline") && !policy.contains("unsafe-eval"),
        "{policy}"
    );
    assert_eq!(
        header_of(&headers, header::X_CONTENT_TYPE_OPTIONS),
        "nosniff"
    );

    let refs = references(&html);
    assert!(refs.contains(&"/ui/app.js".to_string()), "{refs:?}");
    assert!(refs.contains(&"/ui/style.css".to_string()), "{refs:?}");
    for r in &refs {
        assert!(
            r.starts_with('/') && !r.starts_with("//"),
            "{r:?} is not a path on this server"
        );
        let (status, _, _) = get(&app, r, &[]).await;
        assert_eq!(status, StatusCode::OK, "{r} is referenced but not served");
    }

    for (path, kind) in [
        ("/ui/app.js", "text/javascript; charset=utf-8"),
        ("/ui/style.css", "text/css; charset=utf-8"),
    ] {
        let (status, headers, body) = get(&app, path, &[]).await;
        assert_eq!(status, StatusCode::OK, "{path}");
        assert_eq!(header_of(&headers, header::CONTENT_TYPE), kind, "{path}");
        assert!(header_of(&headers, header::CACHE_CONTROL).contains("no-cache"));
        assert!(!body.is_empty(), "{path}");
    }
}

#[tokio::test]
async fn nothing_is_loaded_from_elsewhere() {
    let (_dir, app) = app();
    for path in ["/", "/ui/app.js", "/ui/style.css"] {
        let (status, _, body) = get(&app, path, &[]).await;
        assert_eq!(status, StatusCode::OK, "{path}");
        let lower = body.to_ascii_lowercase();
        for banned in ["http://", "https://", "//cdn"] {
            assert!(!lower.contains(banned), "{path} contains {banned:?}");
        }
        if path.ends_with(".css") {
            // A stylesheet fetches through these; the page's own needs none.
            for banned in ["@import", "url(", "@font-face"] {
                assert!(!lower.contains(banned), "{path} contains {banned:?}");
            }
        }
    }
    let (_, _, html) = get(&app, "/", &[]).await;
    assert!(
        !html.contains("<script>") && !html.contains(" style=") && !html.contains("<style"),
        "inline script or style would be refused by the page's own policy"
    );
    let lower = html.to_ascii_lowercase();
    for (at, _) in lower.match_indices(" on") {
        let name: String = lower[at + 3..]
            .chars()
            .take_while(char::is_ascii_alphabetic)
            .collect();
        assert!(
            !lower[at + 3 + name.len()..].starts_with('='),
            "inline event handler on{name}= would be refused too"
        );
    }
}

#[tokio::test]
async fn the_page_has_the_controls_it_promises() {
    let (_dir, app) = app();
    let (_, _, html) = get(&app, "/", &[]).await;
    for id in [
        "file-input",
        "upload-button",
        "dataset-select",
        "components-input",
        "cov-full",
        "cov-diagonal",
        "folds-input",
        "restarts-input",
        "seed-input",
        "start-button",
        "progress",
        "state",
        "cancel-button",
        "report-frame",
        "job-list",
        "token-input",
    ] {
        assert!(html.contains(&format!("id=\"{id}\"")), "no element #{id}");
    }
    // Every input and select has a label naming it, or sits inside one.
    let mut rest = html.as_str();
    while let Some(at) = rest.find("<input").or_else(|| rest.find("<select")) {
        let tag_end = rest[at..].find('>').expect("a closed tag") + at;
        let tag = &rest[at..tag_end];
        let id = tag
            .split("id=\"")
            .nth(1)
            .and_then(|s| s.split('"').next())
            .expect("every control has an id");
        let before = &html[..html.find(tag).expect("the tag")];
        // Inside a <label> that is still open where the control starts.
        let wrapped = match (before.rfind("<label>"), before.rfind("</label>")) {
            (Some(open), Some(close)) => open > close,
            (Some(_), None) => true,
            _ => false,
        };
        assert!(
            wrapped || html.contains(&format!("for=\"{id}\"")),
            "#{id} has no label"
        );
        rest = &rest[tag_end..];
    }
    // The frame showing the report may not run scripts.
    let frame = html
        .split("<iframe")
        .nth(1)
        .and_then(|s| s.split('>').next())
        .expect("an iframe");
    assert!(frame.contains("sandbox=\""), "{frame}");
    assert!(!frame.contains("allow-scripts"), "{frame}");
}

#[tokio::test]
async fn a_cached_asset_is_revalidated_not_resent() {
    let (_dir, app) = app();
    let (_, headers, _) = get(&app, "/ui/app.js", &[]).await;
    let tag = header_of(&headers, header::ETAG).to_string();
    let (status, _, body) = get(&app, "/ui/app.js", &[("if-none-match", tag.as_str())]).await;
    assert_eq!(status, StatusCode::NOT_MODIFIED);
    assert!(body.is_empty());
    let (status, _, body) = get(&app, "/ui/app.js", &[("if-none-match", "\"other\"")]).await;
    assert_eq!(status, StatusCode::OK);
    assert!(!body.is_empty());
}

#[tokio::test]
async fn the_page_needs_no_token_but_the_api_does() {
    let dir = tempfile::tempdir().expect("a temp dir");
    let store = SqliteStore::open(dir.path()).expect("the store opens");
    let app = router(AppState::new(Arc::new(store)).tokens(vec!["secret-token".to_string()]));
    for path in ["/", "/ui/app.js", "/ui/style.css"] {
        let (status, _, _) = get(&app, path, &[]).await;
        assert_eq!(status, StatusCode::OK, "{path}");
    }
    let (status, _, _) = get(&app, "/v1/sweeps", &[]).await;
    assert_eq!(status, StatusCode::UNAUTHORIZED);
    let (status, _, _) = get(
        &app,
        "/v1/sweeps",
        &[("authorization", "Bearer secret-token")],
    )
    .await;
    assert_eq!(status, StatusCode::OK);
}
