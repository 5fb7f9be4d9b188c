//! The result endpoints (models, score), `/metrics`, access control, CORS, the limits and the
//! multipart and incomplete-row forms of uploads and sweeps, driven through the router.

use std::time::Duration;

use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use mixgauge_service::{AppState, Limits, ReadLimits, SqliteStore, WorkerPool, router};
use serde_json::{Value, json};

mod common;
use common::*;

/// Runs a two-component diagonal sweep on the two-groups data and returns its finished view.
async fn finished_sweep(app: &axum::Router) -> (String, Value) {
    let dataset = upload_groups(app).await;
    let body = json!({ "dataset": dataset, "settings": {
        "components": [1, 2, 3], "covariances": ["diagonal"], "folds": 2, "restarts": 2 } });
    let (status, created) = send_json(app, post_json("/v1/sweeps", &body, None)).await;
    assert_eq!(status, StatusCode::ACCEPTED, "{created}");
    let id = created["id"].as_str().unwrap().to_string();
    let done = wait_final(app, &id).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    (id, done)
}

/// log N(x | mean, diag(var)) written out from the normal density, independent of the engine.
fn diagonal_log_density(x: &[f64], mean: &[f64], var: &[f64]) -> f64 {
    x.iter()
        .zip(mean)
        .zip(var)
        .map(|((x, m), v)| -0.5 * ((2.0 * std::f64::consts::PI * v).ln() + (x - m).powi(2) / v))
        .sum()
}

fn log_sum_exp(terms: &[f64]) -> f64 {
    let top = terms.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    top + terms.iter().map(|t| (t - top).exp()).sum::<f64>().ln()
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn models_and_scores_agree_with_the_normal_density_and_bic() {
    let (_dir, state) = fresh();
    let pool = WorkerPool::start(&state, 1).await.unwrap();
    let app = router(state.clone());
    let (id, done) = finished_sweep(&app).await;
    assert_eq!(done["links"]["score"], format!("/v1/sweeps/{id}/score"));

    // The model document of K = 2, in the data's units and named columns.
    let (status, model) = send_json(&app, get(&format!("/v1/sweeps/{id}/models/diagonal/2"))).await;
    assert_eq!(status, StatusCode::OK, "{model}");
    assert_eq!(model["format"], "mixgauge.model/1");
    assert_eq!(model["column_names"], json!(["width", "height"]));
    let weights: Vec<f64> = serde_json::from_value(model["weights"].clone()).unwrap();
    let means: Vec<Vec<f64>> = serde_json::from_value(model["means"].clone()).unwrap();
    let vars: Vec<Vec<f64>> = serde_json::from_value(model["covariances"].clone()).unwrap();
    assert_eq!(weights.len(), 2);

    // Score three rows under that model, named explicitly.
    let rows = [[0.1, -0.2], [8.3, 7.9], [4.0, 4.0]];
    let mut csv = String::from("width,height\n");
    for r in rows {
        csv.push_str(&format!("{},{}\n", r[0], r[1]));
    }
    let (status, scored) = send_json(
        &app,
        Request::post(format!(
            "/v1/sweeps/{id}/score?covariance=diagonal&components=2"
        ))
        .header(header::CONTENT_TYPE, "text/csv")
        .body(Body::from(csv.clone()))
        .unwrap(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{scored}");
    assert_eq!(scored["model"]["chosen_by"], "named");
    assert_eq!(scored["rows"], 3);
    let per_row: Vec<f64> = serde_json::from_value(scored["per_row"]["loglik"].clone()).unwrap();
    let mut total = 0.0;
    for (i, x) in rows.iter().enumerate() {
        let terms: Vec<f64> = (0..2)
            .map(|k| weights[k].ln() + diagonal_log_density(x, &means[k], &vars[k]))
            .collect();
        let expected = log_sum_exp(&terms);
        total += expected;
        assert!(
            (per_row[i] - expected).abs() <= 1e-9 * expected.abs().max(1.0),
            "row {i}: {} vs {expected}",
            per_row[i]
        );
    }
    let loglik = scored["loglik"].as_f64().unwrap();
    assert!((loglik - total).abs() <= 1e-9 * total.abs());
    // Free parameters of a diagonal mixture: (K − 1) weights + K·D means + K·D variances.
    assert_eq!(scored["free_parameters"], 2 - 1 + 2 * 2 + 2 * 2);
    // BIC = −2 log L + p ln n (Schwarz 1978); AIC = −2 log L + 2p (Akaike 1974).
    let bic = scored["bic"].as_f64().unwrap();
    assert!((bic - (-2.0 * loglik + 9.0 * 3f64.ln())).abs() <= 1e-9 * bic.abs());
    let aic = scored["aic"].as_f64().unwrap();
    assert!((aic - (-2.0 * loglik + 18.0)).abs() <= 1e-9 * aic.abs());
    // The far-apart rows go to different components.
    let component = scored["per_row"]["component"].as_array().unwrap();
    assert_ne!(component[0], component[1]);

    // Without a name, the held-out one-standard-error choice scores, and per-row may be off.
    let (status, default) = send_json(
        &app,
        Request::post(format!("/v1/sweeps/{id}/score?per_row=false"))
            .header(header::CONTENT_TYPE, "text/csv")
            .body(Body::from(csv))
            .unwrap(),
    )
    .await;
    assert_eq!(status, StatusCode::OK, "{default}");
    assert_eq!(default["model"]["chosen_by"], "heldout_one_se");
    assert_eq!(
        default["model"]["components"],
        done["result"]["recommendations"]["heldout_one_se"]["components"]
    );
    assert!(default.get("per_row").is_none());
    pool.stop(&state, Duration::from_secs(5)).await;
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn bad_model_and_score_requests_are_named_client_errors() {
    let (_dir, state) = fresh();
    let pool = WorkerPool::start(&state, 1).await.unwrap();
    let app = router(state.clone());
    let (id, _) = finished_sweep(&app).await;

    for (uri, status, code) in [
        (
            format!("/v1/sweeps/{id}/models/full/2"),
            StatusCode::NOT_FOUND,
            "no_such_model",
        ),
        (
            format!("/v1/sweeps/{id}/models/diagonal/9"),
            StatusCode::NOT_FOUND,
            "no_such_model",
        ),
        (
            format!("/v1/sweeps/{id}/models/spherical/2"),
            StatusCode::NOT_FOUND,
            "no_such_model",
        ),
    ] {
        let (got, v) = send_json(&app, get(&uri)).await;
        assert_eq!(got, status, "{uri}: {v}");
        assert_eq!(v["error"]["code"], code, "{uri}: {v}");
    }

    let score = |query: &str, csv: &str| {
        Request::post(format!("/v1/sweeps/{id}/score{query}"))
            .header(header::CONTENT_TYPE, "text/csv")
            .body(Body::from(csv.to_string()))
            .unwrap()
    };
    // Only one of the two names of a model.
    let (status, v) = send_json(&app, score("?components=2", "width,height\n1,2\n")).await;
    assert_eq!(status, StatusCode::BAD_REQUEST, "{v}");
    // Rows whose columns are not the model's.
    let (status, v) = send_json(&app, score("", "depth,colour\n1,2\n")).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert_eq!(v["error"]["code"], "columns_do_not_match");
    assert!(
        v["error"]["message"].as_str().unwrap().contains("width"),
        "{v}"
    );
    // A text value among the rows names its place.
    let (status, v) = send_json(&app, score("", "width,height\n1,2\n3,tall\n")).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    let message = v["error"]["message"].as_str().unwrap();
    assert!(
        message.contains("row 2") && message.contains("height"),
        "{message}"
    );
    pool.stop(&state, Duration::from_secs(5)).await;
}

#[tokio::test]
async fn models_of_an_unfinished_sweep_are_a_conflict() {
    let (_dir, state) = fresh();
    let app = router(state);
    let dataset = upload_groups(&app).await;
    let (_, created) = send_json(&app, post_json("/v1/sweeps", &small_sweep(&dataset), None)).await;
    let id = created["id"].as_str().unwrap();
    let (status, v) = send_json(&app, get(&format!("/v1/sweeps/{id}/models/full/1"))).await;
    assert_eq!(status, StatusCode::CONFLICT, "{v}");
    let (status, v) = send_json(
        &app,
        Request::post(format!("/v1/sweeps/{id}/score"))
            .header(header::CONTENT_TYPE, "text/csv")
            .body(Body::from("width,height\n1,2\n"))
            .unwrap(),
    )
    .await;
    assert_eq!(status, StatusCode::CONFLICT, "{v}");
}

/// The value of an unlabelled sample line `name value` in Prometheus text.
fn sample(text: &str, name: &str) -> f64 {
    text.lines()
        .find_map(|l| l.strip_prefix(name).and_then(|r| r.strip_prefix(' ')))
        .unwrap_or_else(|| panic!("no sample {name} in:\n{text}"))
        .parse()
        .unwrap()
}

#[tokio::test]
async fn metrics_count_uploads_jobs_and_responses() {
    let (_dir, state) = fresh();
    let app = router(state);
    let (status, body, headers) = send(&app, get("/metrics")).await;
    assert_eq!(status, StatusCode::OK);
    assert!(
        headers[header::CONTENT_TYPE]
            .to_str()
            .unwrap()
            .starts_with("text/plain; version=0.0.4")
    );
    let before = String::from_utf8(body).unwrap();
    assert_eq!(sample(&before, "mixgauge_upload_bytes_total"), 0.0);

    let csv = two_groups_csv();
    let dataset = upload_groups(&app).await;
    send_json(&app, post_json("/v1/sweeps", &small_sweep(&dataset), None)).await;
    send_json(&app, get("/v1/datasets/ds-none")).await; // a 404

    let (_, body, _) = send(&app, get("/metrics")).await;
    let after = String::from_utf8(body).unwrap();
    assert_eq!(
        sample(&after, "mixgauge_upload_bytes_total"),
        csv.len() as f64
    );
    assert_eq!(sample(&after, "mixgauge_uploads_total"), 1.0);
    assert_eq!(sample(&after, "mixgauge_queue_depth"), 1.0);
    assert!(
        after.contains("mixgauge_sweeps{state=\"queued\"} 1\n"),
        "{after}"
    );
    assert!(
        after.contains("mixgauge_http_responses_total{class=\"4xx\"} 1\n"),
        "{after}"
    );
    // Every line is a comment or `name[{labels}] number`.
    for line in after.lines().filter(|l| !l.starts_with('#')) {
        let (name, value) = line.rsplit_once(' ').expect("name and value");
        assert!(name.starts_with("mixgauge_"), "{line}");
        assert!(value.parse::<f64>().is_ok(), "{line}");
    }
}

#[tokio::test]
async fn with_tokens_everything_but_health_and_page_needs_one() {
    let (_dir, state) = fresh();
    let token = "a-long-enough-test-token";
    let app = router(state.tokens(vec![token.to_string()]));
    for path in ["/healthz", "/readyz"] {
        let (status, _, _) = send(&app, get(path)).await;
        assert_eq!(status, StatusCode::OK, "{path}");
    }
    for path in ["/v1/datasets", "/v1/sweeps", "/metrics", "/v1/sweeps/1"] {
        let (status, v) = send_json(&app, get(path)).await;
        assert_eq!(status, StatusCode::UNAUTHORIZED, "{path}: {v}");
        assert_eq!(v["error"]["code"], "unauthorised");
    }
    let (status, _, headers) = send(&app, get("/v1/datasets")).await;
    assert_eq!(status, StatusCode::UNAUTHORIZED);
    assert_eq!(headers[header::WWW_AUTHENTICATE], "Bearer");

    let with = |value: &str| {
        Request::get("/v1/datasets")
            .header(header::AUTHORIZATION, value)
            .body(Body::empty())
            .unwrap()
    };
    let (status, v) = send_json(&app, with("Bearer a-long-enough-test-tokeX")).await;
    assert_eq!(status, StatusCode::UNAUTHORIZED, "{v}");
    assert!(
        v["error"]["message"]
            .as_str()
            .unwrap()
            .contains("not one this server accepts")
    );
    let (status, _) = send_json(&app, with("Basic dXNlcjpwYXNz")).await;
    assert_eq!(status, StatusCode::UNAUTHORIZED);
    let (status, v) = send_json(&app, with(&format!("Bearer {token}"))).await;
    assert_eq!(status, StatusCode::OK, "{v}");
}

#[tokio::test]
async fn cors_is_off_unless_origins_are_configured() {
    let preflight = || {
        Request::options("/v1/sweeps")
            .header(header::ORIGIN, "http://notebook.example:8888")
            .header(header::ACCESS_CONTROL_REQUEST_METHOD, "POST")
            .body(Body::empty())
            .unwrap()
    };
    let (_dir, state) = fresh();
    let app = router(state);
    let (_, _, headers) = send(&app, preflight()).await;
    assert!(headers.get(header::ACCESS_CONTROL_ALLOW_ORIGIN).is_none());

    let (_dir2, state) = fresh();
    let app = router(state.cors_origins(vec!["http://notebook.example:8888".into()]));
    let (status, _, headers) = send(&app, preflight()).await;
    assert!(status.is_success(), "{status}");
    assert_eq!(
        headers[header::ACCESS_CONTROL_ALLOW_ORIGIN],
        "http://notebook.example:8888"
    );
    let other = Request::get("/healthz")
        .header(header::ORIGIN, "http://elsewhere.example")
        .body(Body::empty())
        .unwrap();
    let (_, _, headers) = send(&app, other).await;
    assert!(headers.get(header::ACCESS_CONTROL_ALLOW_ORIGIN).is_none());
}

#[tokio::test]
async fn row_column_and_candidate_limits_are_client_errors() {
    let dir = tempfile::tempdir().unwrap();
    let store = SqliteStore::open(dir.path()).unwrap();
    let limits = Limits {
        read: ReadLimits {
            rows: 50,
            columns: 3,
        },
        candidates: 4,
        ..Limits::default()
    };
    let app = router(AppState::new(std::sync::Arc::new(store)).limits(limits));
    // 60 rows against a limit of 50.
    let (status, v) = send_json(&app, upload("text/csv", two_groups_csv())).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert!(
        v["error"]["message"]
            .as_str()
            .unwrap()
            .contains("more than 50 data rows"),
        "{v}"
    );
    let (status, v) = send_json(&app, upload("text/csv", "a,b,c,d\n1,2,3,4\n")).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert!(
        v["error"]["message"]
            .as_str()
            .unwrap()
            .contains("limit is 3"),
        "{v}"
    );

    let mut csv = String::from("a,b\n");
    for i in 0..40 {
        csv.push_str(&format!("{},{}\n", i % 7, i % 5));
    }
    let (_, d) = send_json(&app, upload("text/csv", csv)).await;
    let body = json!({ "dataset": d["id"], "settings": { "components": [1, 2, 3], "folds": 2 } });
    let (status, v) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert_eq!(v["error"]["code"], "too_many_candidates");
    let body = json!({ "dataset": d["id"], "settings": {
        "components": [1, 2], "covariances": ["full", "diagonal"], "folds": 2 } });
    let (status, v) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
    assert_eq!(status, StatusCode::ACCEPTED, "{v}");
}

/// A `multipart/form-data` body of named parts, each `(name, file name, type, content)`.
fn multipart(parts: &[(&str, Option<&str>, &str, &str)]) -> (String, String) {
    let boundary = "mixgauge-test-boundary-7d1f";
    let mut body = String::new();
    for (name, file, kind, content) in parts {
        body.push_str(&format!("--{boundary}\r\n"));
        match file {
            Some(f) => body.push_str(&format!(
                "Content-Disposition: form-data; name=\"{name}\"; filename=\"{f}\"\r\n"
            )),
            None => body.push_str(&format!(
                "Content-Disposition: form-data; name=\"{name}\"\r\n"
            )),
        }
        body.push_str(&format!("Content-Type: {kind}\r\n\r\n{content}\r\n"));
    }
    body.push_str(&format!("--{boundary}--\r\n"));
    (format!("multipart/form-data; boundary={boundary}"), body)
}

#[tokio::test]
async fn one_multipart_request_uploads_and_starts_a_sweep() {
    let (_dir, state) = fresh();
    let app = router(state);
    let csv = two_groups_csv();
    let request = json!({ "settings": { "components": [1, 2], "folds": 2 } }).to_string();
    let (kind, body) = multipart(&[
        ("file", Some("groups.csv"), "text/csv", &csv),
        ("request", None, "application/json", &request),
    ]);
    let req = Request::post("/v1/sweeps")
        .header(header::CONTENT_TYPE, kind)
        .body(Body::from(body))
        .unwrap();
    let (status, created) = send_json(&app, req).await;
    assert_eq!(status, StatusCode::ACCEPTED, "{created}");
    let (_, created) = send_json(&app, get(created["url"].as_str().unwrap())).await;
    let (_, listed) = send_json(&app, get("/v1/datasets")).await;
    assert_eq!(listed["items"][0]["id"], created["dataset"]);
    assert_eq!(listed["items"][0]["rows"], 60);

    // A form upload of the dataset alone is the same content, so the same record.
    let (kind, body) = multipart(&[("file", Some("groups.csv"), "text/csv", &csv)]);
    let req = Request::post("/v1/datasets")
        .header(header::CONTENT_TYPE, kind)
        .body(Body::from(body))
        .unwrap();
    let (status, v) = send_json(&app, req).await;
    assert_eq!(status, StatusCode::OK, "{v}");
    assert_eq!(v["id"], created["dataset"]);

    // A form without its file part names the part it wants.
    let (kind, body) = multipart(&[("request", None, "application/json", &request)]);
    let req = Request::post("/v1/sweeps")
        .header(header::CONTENT_TYPE, kind)
        .body(Body::from(body))
        .unwrap();
    let (status, v) = send_json(&app, req).await;
    assert!(status.is_client_error(), "{status}: {v}");
    assert!(
        v["error"]["message"].as_str().unwrap().contains("file"),
        "{v}"
    );
}

#[tokio::test]
async fn a_file_with_gaps_is_stored_and_sweeps_only_when_dropping_them() {
    let (_dir, state) = fresh();
    let app = router(state);
    let mut csv = two_groups_csv();
    csv.push_str("1.5,\n2.5,NaN\n");
    let (status, d) = send_json(&app, upload("text/csv", csv)).await;
    assert_eq!(status, StatusCode::CREATED, "{d}");
    assert_eq!(d["rows"], 62);
    assert_eq!(d["incomplete_rows"], 2);
    let id = d["id"].as_str().unwrap();

    let settings = json!({ "components": [1, 2], "folds": 2 });
    let body = json!({ "dataset": id, "settings": settings });
    let (status, v) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    let message = v["error"]["message"].as_str().unwrap();
    assert!(
        message.contains("row 61") && message.contains("drop incomplete rows"),
        "{message}"
    );

    let body = json!({ "dataset": id, "settings": settings, "data": { "drop_incomplete": true } });
    let (status, v) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
    assert_eq!(status, StatusCode::ACCEPTED, "{v}");
    let (_, v) = send_json(&app, get(v["url"].as_str().unwrap())).await;
    assert_eq!(v["data"]["drop_incomplete"], true, "{v}");

    // Every row incomplete: nothing a sweep could fit, refused at upload with the reason.
    let (status, v) = send_json(&app, upload("text/csv", "a,b\n1,\n,2\n")).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert!(
        v["error"]["message"]
            .as_str()
            .unwrap()
            .contains("all 2 rows"),
        "{v}"
    );
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_gate_passes_the_reference_rows_and_fails_shifted_ones() {
    let (_dir, state) = fresh();
    let pool = WorkerPool::start(&state, 1).await.unwrap();
    let app = router(state.clone());
    let (id, done) = finished_sweep(&app).await;
    let (status, profile) = send_json(&app, get(&format!("/v1/sweeps/{id}/profile"))).await;
    assert_eq!(status, StatusCode::OK, "{profile}");
    assert_eq!(profile["format"], "mixgauge.profile/1");
    assert_eq!(
        profile["model"]["components"],
        done["result"]["recommendations"]["heldout_one_se"]["components"]
    );
    let gate = |query: &str, csv: String| {
        Request::post(format!("/v1/sweeps/{id}/gate{query}"))
            .header(header::CONTENT_TYPE, "text/csv")
            .body(Body::from(csv))
            .unwrap()
    };
    // The reference rows themselves: they fit at least as well as held-out rows do.
    let (status, body, headers) = send(&app, gate("", two_groups_csv())).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(headers["mixgauge-verdict"], "pass");
    let report: Value = serde_json::from_slice(&body).unwrap();
    assert_eq!(report["verdict"], "pass", "{report}");
    // Every width moved by 5: a client's batch that does not fit is still a 200, verdict fail.
    let mut shifted = String::from("width,height\n");
    for line in two_groups_csv().lines().skip(1) {
        let (w, h) = line.split_once(',').unwrap();
        shifted.push_str(&format!("{},{h}\n", w.parse::<f64>().unwrap() + 5.0));
    }
    let (status, body, headers) = send(&app, gate("?format=junit", shifted)).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(headers["mixgauge-verdict"], "fail");
    assert_eq!(headers[header::CONTENT_TYPE], "application/xml");
    let xml = String::from_utf8(body).unwrap();
    assert_eq!(xml.matches("<testcase ").count(), 3, "{xml}");
    assert!(xml.contains("<failure "), "{xml}");
    // Client mistakes are 4xx.
    let (status, v) = send_json(&app, gate("?format=pdf", two_groups_csv())).await;
    assert_eq!(status, StatusCode::BAD_REQUEST, "{v}");
    let (status, v) = send_json(&app, gate("", "depth\n1\n2\n".into())).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert!(
        v["error"]["message"].as_str().unwrap().contains("width"),
        "{v}"
    );
    pool.stop(&state, Duration::from_secs(5)).await;
}
