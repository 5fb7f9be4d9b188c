//! Helpers shared by the service's integration tests: a fresh store, the router driven with
//! `tower::ServiceExt::oneshot` (no socket), request builders and a poll until a sweep ends.
#![allow(dead_code)] // each test file uses its own subset

use std::sync::Arc;
use std::time::Duration;

use axum::Router;
use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use http_body_util::BodyExt;
use mixgauge_service::{AppState, SqliteStore};
use serde_json::{Value, json};
use tower::ServiceExt;

/// A fresh data directory and state over it. Keep the `TempDir` alive for the whole test.
pub fn fresh() -> (tempfile::TempDir, AppState) {
    let dir = tempfile::tempdir().expect("a temp dir");
    let state = open(&dir);
    (dir, state)
}

pub fn open(dir: &tempfile::TempDir) -> AppState {
    let store = SqliteStore::open(dir.path()).expect("the store opens");
    AppState::new(Arc::new(store))
}

/// Two well-separated groups of 30 rows in 2 columns, no randomness.
pub fn two_groups_csv() -> String {
    let mut s = String::from("width,height\n");
    for i in 0..60 {
        let centre = if i % 2 == 0 { 0.0 } else { 8.0 };
        let t = i as f64;
        s.push_str(&format!(
            "{:.6},{:.6}\n",
            centre + 0.5 * (1.7 * t).sin(),
            centre + 0.5 * (2.3 * t).cos()
        ));
    }
    s
}

pub async fn send(app: &Router, req: Request<Body>) -> (StatusCode, Vec<u8>, header::HeaderMap) {
    let resp = app.clone().oneshot(req).await.expect("the router answers");
    let status = resp.status();
    let headers = resp.headers().clone();
    let bytes = resp.into_body().collect().await.expect("a body").to_bytes();
    (status, bytes.to_vec(), headers)
}

pub async fn send_json(app: &Router, req: Request<Body>) -> (StatusCode, Value) {
    let (status, bytes, headers) = send(app, req).await;
    assert_eq!(
        headers
            .get(header::CONTENT_TYPE)
            .and_then(|v| v.to_str().ok()),
        Some("application/json"),
        "status {status}, body {}",
        String::from_utf8_lossy(&bytes)
    );
    (status, serde_json::from_slice(&bytes).expect("a JSON body"))
}

pub fn upload(content_type: &str, body: impl Into<Body>) -> Request<Body> {
    Request::post("/v1/datasets")
        .header(header::CONTENT_TYPE, content_type)
        .body(body.into())
        .unwrap()
}

pub fn get(uri: &str) -> Request<Body> {
    Request::get(uri).body(Body::empty()).unwrap()
}

pub fn post_json(uri: &str, body: &Value, key: Option<&str>) -> Request<Body> {
    let mut b = Request::post(uri).header(header::CONTENT_TYPE, "application/json");
    if let Some(k) = key {
        b = b.header("idempotency-key", k);
    }
    b.body(Body::from(body.to_string())).unwrap()
}

pub async fn upload_groups(app: &Router) -> String {
    let (status, v) = send_json(app, upload("text/csv", two_groups_csv())).await;
    assert_eq!(status, StatusCode::CREATED, "{v}");
    v["id"].as_str().unwrap().to_string()
}

pub fn small_sweep(dataset: &str) -> Value {
    json!({ "dataset": dataset, "settings": { "components": [1, 2], "folds": 2, "restarts": 1 } })
}

/// Polls a sweep until it reaches a final state; panics after a generous bound.
pub async fn wait_final(app: &Router, id: &str) -> Value {
    for _ in 0..1200 {
        let (status, v) = send_json(app, get(&format!("/v1/sweeps/{id}"))).await;
        assert_eq!(status, StatusCode::OK, "{v}");
        if matches!(
            v["state"].as_str(),
            Some("succeeded" | "failed" | "cancelled")
        ) {
            return v;
        }
        tokio::time::sleep(Duration::from_millis(50)).await;
    }
    panic!("sweep {id} did not finish within 60 s");
}
