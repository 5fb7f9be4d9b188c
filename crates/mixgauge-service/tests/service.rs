//! End-to-end tests of the service: the router driven with `tower::ServiceExt::oneshot` (no
//! socket), each test on a fresh temporary data directory with its own SQLite database.

use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use mixgauge_service::{
    CreateOutcome, JobState, LocalQueue, NewSweep, SqliteStore, Store, WorkerPool, router,
};
use serde_json::{Value, json};

mod common;
use common::*;

#[tokio::test]
async fn csv_upload_returns_its_metadata_and_dedupes() {
    let (_dir, state) = fresh();
    let app = router(state);
    let (status, v) = send_json(&app, upload("text/csv; charset=utf-8", two_groups_csv())).await;
    assert_eq!(status, StatusCode::CREATED, "{v}");
    assert_eq!(v["rows"], 60);
    assert_eq!(v["columns"], 2);
    assert_eq!(v["column_names"], json!(["width", "height"]));
    assert_eq!(v["sha256"].as_str().unwrap().len(), 64);
    let id = v["id"].as_str().unwrap().to_string();

    let (status, again) = send_json(&app, upload("text/csv", two_groups_csv())).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(again["id"], id.as_str());

    let (status, got) = send_json(&app, get(&format!("/v1/datasets/{id}"))).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(got, v);

    let (status, list) = send_json(&app, get("/v1/datasets?limit=10")).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(list["items"].as_array().unwrap().len(), 1);
    assert_eq!(list["next"], Value::Null);
}

#[tokio::test]
async fn datasets_page_with_limit_and_after() {
    let (_dir, state) = fresh();
    let app = router(state);
    for k in 0..3 {
        let csv = format!("a,b\n1,{k}\n2,3\n");
        let (status, _) = send_json(&app, upload("text/csv", csv)).await;
        assert_eq!(status, StatusCode::CREATED);
    }
    let (_, first) = send_json(&app, get("/v1/datasets?limit=2")).await;
    assert_eq!(first["items"].as_array().unwrap().len(), 2);
    let next = first["next"].as_str().expect("a next page").to_string();
    let (_, second) = send_json(&app, get(&format!("/v1/datasets?limit=2&after={next}"))).await;
    assert_eq!(second["items"].as_array().unwrap().len(), 1);
    assert_eq!(second["next"], Value::Null);
    let (status, v) = send_json(&app, get("/v1/datasets?limit=0")).await;
    assert_eq!(status, StatusCode::BAD_REQUEST);
    assert_eq!(v["error"]["code"], "bad_query");
}

#[tokio::test]
async fn bad_csv_is_422_naming_row_and_column() {
    let (_dir, state) = fresh();
    let app = router(state);
    let (status, v) = send_json(&app, upload("text/csv", "a,b\n1,2\n3,x\n")).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
    assert_eq!(v["error"]["code"], "invalid_dataset");
    let message = v["error"]["message"].as_str().unwrap();
    assert!(message.contains("row 2"), "{message}");
    assert!(message.contains("column \"b\""), "{message}");
    assert!(message.contains("\"x\""), "{message}");
}

#[tokio::test]
async fn wrong_content_type_is_415() {
    let (_dir, state) = fresh();
    let app = router(state);
    let (status, v) = send_json(&app, upload("image/png", "a,b\n1,2\n")).await;
    assert_eq!(status, StatusCode::UNSUPPORTED_MEDIA_TYPE);
    assert_eq!(v["error"]["code"], "unsupported_media_type");
    assert!(v["error"]["message"].as_str().unwrap().contains("text/csv"));
    // Octet-stream without the NPY magic is not guessed at.
    let (status, _) = send_json(&app, upload("application/octet-stream", "a,b\n1,2\n")).await;
    assert_eq!(status, StatusCode::UNSUPPORTED_MEDIA_TYPE);
}

#[tokio::test]
async fn oversized_upload_is_413() {
    let (_dir, state) = fresh();
    let app = router(state.max_upload_bytes(64));
    let (status, v) = send_json(&app, upload("text/csv", two_groups_csv())).await;
    assert_eq!(status, StatusCode::PAYLOAD_TOO_LARGE, "{v}");
    assert_eq!(v["error"]["detail"]["limit_bytes"], 64);
}

#[tokio::test]
async fn unknown_ids_are_404_json_errors() {
    let (_dir, state) = fresh();
    let app = router(state);
    let (status, v) = send_json(&app, get("/v1/datasets/ds-0000000000000000")).await;
    assert_eq!(status, StatusCode::NOT_FOUND);
    assert_eq!(v["error"]["code"], "dataset_not_found");
    assert!(
        v["error"]["message"]
            .as_str()
            .unwrap()
            .contains("GET /v1/datasets")
    );
    let (status, v) = send_json(&app, get("/v1/sweeps/sw-99")).await;
    assert_eq!(status, StatusCode::NOT_FOUND);
    assert_eq!(v["error"]["code"], "sweep_not_found");
    let (status, _) = send_json(&app, get("/v1/sweeps/nonsense")).await;
    assert_eq!(status, StatusCode::NOT_FOUND);
    let (status, v) = send_json(&app, get("/v2/elsewhere")).await;
    assert_eq!(status, StatusCode::NOT_FOUND);
    assert_eq!(v["error"]["code"], "no_such_route");
}

#[tokio::test]
async fn health_and_readiness() {
    let (_dir, state) = fresh();
    let app = router(state);
    let (status, _) = send_json(&app, get("/healthz")).await;
    assert_eq!(status, StatusCode::OK);
    let (status, v) = send_json(&app, get("/readyz")).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(v["status"], "ready");
}

#[tokio::test]
async fn sweep_settings_are_checked_against_the_dataset() {
    let (_dir, state) = fresh();
    let app = router(state);
    let id = upload_groups(&app).await;
    let cases = [
        (json!({ "folds": 1 }), "folds = 1"),
        (json!({ "folds": 61 }), "60 rows"),
        (json!({ "components": [2, 1] }), "ascending"),
        (
            json!({ "colour": "red" }),
            "settings.colour is not a setting",
        ),
        (json!({ "restarts": "many" }), "settings are not valid"),
    ];
    for (settings, expected) in cases {
        let body = json!({ "dataset": id, "settings": settings });
        let (status, v) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
        assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{settings}: {v}");
        let message = v["error"]["message"].as_str().unwrap();
        assert!(message.contains(expected), "{settings}: {message}");
    }
    let body = json!({ "dataset": "ds-missing", "settings": {} });
    let (status, v) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY);
    assert_eq!(v["error"]["code"], "dataset_not_found");
    let req = Request::post("/v1/sweeps")
        .header(header::CONTENT_TYPE, "application/json")
        .body(Body::from("{not json"))
        .unwrap();
    let (status, v) = send_json(&app, req).await;
    assert_eq!(status, StatusCode::BAD_REQUEST);
    assert_eq!(v["error"]["code"], "bad_json");
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_small_sweep_runs_to_a_result_and_a_report() {
    let (_dir, state) = fresh();
    let pool = WorkerPool::start(&state, 1).await.unwrap();
    let app = router(state.clone());
    let dataset = upload_groups(&app).await;
    let (status, created) =
        send_json(&app, post_json("/v1/sweeps", &small_sweep(&dataset), None)).await;
    assert_eq!(status, StatusCode::ACCEPTED, "{created}");
    let id = created["id"].as_str().unwrap().to_string();
    assert_eq!(created["url"], format!("/v1/sweeps/{id}"));

    let done = wait_final(&app, &id).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    assert_eq!(done["dataset"], dataset.as_str());
    assert_eq!(done["settings"]["folds"], 2);
    let candidates = done["result"]["candidates"].as_array().expect("candidates");
    // components [1, 2] × the two default covariance forms.
    assert_eq!(candidates.len(), 4, "{}", done["result"]);
    assert!(done["progress"]["total"].as_u64().unwrap() > 0);

    let (status, html, headers) = send(&app, get(&format!("/v1/sweeps/{id}/report"))).await;
    assert_eq!(status, StatusCode::OK);
    assert!(
        headers[header::CONTENT_TYPE]
            .to_str()
            .unwrap()
            .starts_with("text/html")
    );
    assert!(String::from_utf8_lossy(&html).contains("<html"));

    let (status, list) = send_json(&app, get("/v1/sweeps")).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(list["items"].as_array().unwrap().len(), 1);
    assert!(list["items"][0].get("result").is_none());

    let (status, v) = send_json(
        &app,
        Request::post(format!("/v1/sweeps/{id}/cancel"))
            .body(Body::empty())
            .unwrap(),
    )
    .await;
    assert_eq!(status, StatusCode::CONFLICT);
    assert_eq!(v["error"]["code"], "sweep_finished");
    pool.stop(&state, std::time::Duration::from_secs(5)).await;
}

#[tokio::test]
async fn an_idempotency_key_returns_the_same_job_or_a_conflict() {
    let (_dir, state) = fresh();
    let app = router(state);
    let dataset = upload_groups(&app).await;
    let body = small_sweep(&dataset);
    let (status, first) = send_json(&app, post_json("/v1/sweeps", &body, Some("k-1"))).await;
    assert_eq!(status, StatusCode::ACCEPTED);
    let (status, again) = send_json(&app, post_json("/v1/sweeps", &body, Some("k-1"))).await;
    assert_eq!(status, StatusCode::OK);
    assert_eq!(again["id"], first["id"]);

    let mut other = body.clone();
    other["settings"]["folds"] = json!(3);
    let (status, v) = send_json(&app, post_json("/v1/sweeps", &other, Some("k-1"))).await;
    assert_eq!(status, StatusCode::CONFLICT);
    assert_eq!(v["error"]["code"], "idempotency_key_reused");

    // Without a key every request is a new job.
    let (_, a) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
    let (_, b) = send_json(&app, post_json("/v1/sweeps", &body, None)).await;
    assert_ne!(a["id"], b["id"]);
    assert_ne!(a["id"], first["id"]);
}

#[tokio::test]
async fn a_dataset_in_use_cannot_be_deleted_until_its_sweep_is_cancelled() {
    let (_dir, state) = fresh();
    // No workers: the job stays queued.
    let app = router(state);
    let dataset = upload_groups(&app).await;
    let (_, created) = send_json(&app, post_json("/v1/sweeps", &small_sweep(&dataset), None)).await;
    let sweep = created["id"].as_str().unwrap().to_string();

    let delete = || {
        Request::delete(format!("/v1/datasets/{dataset}"))
            .body(Body::empty())
            .unwrap()
    };
    let (status, v) = send_json(&app, delete()).await;
    assert_eq!(status, StatusCode::CONFLICT);
    assert_eq!(v["error"]["code"], "dataset_in_use");
    assert_eq!(v["error"]["detail"]["sweeps"], json!([sweep]));

    let (status, v) = send_json(
        &app,
        Request::post(format!("/v1/sweeps/{sweep}/cancel"))
            .body(Body::empty())
            .unwrap(),
    )
    .await;
    assert_eq!(status, StatusCode::ACCEPTED);
    assert_eq!(v["state"], "cancelled");

    let (status, v) = send_json(&app, get(&format!("/v1/sweeps/{sweep}/report"))).await;
    assert_eq!(status, StatusCode::CONFLICT);
    assert_eq!(v["error"]["code"], "sweep_not_succeeded");

    let (status, _, _) = send(&app, delete()).await;
    assert_eq!(status, StatusCode::NO_CONTENT);
    let (status, _) = send_json(&app, get(&format!("/v1/datasets/{dataset}"))).await;
    assert_eq!(status, StatusCode::NOT_FOUND);
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn a_job_left_running_is_requeued_and_finished_after_a_restart() {
    let dir = tempfile::tempdir().unwrap();
    let sweep_id = {
        // The first "process": a job is claimed, then the process dies mid-sweep.
        let state = open(&dir);
        let app = router(state.clone());
        let dataset = upload_groups(&app).await;
        let (_, created) =
            send_json(&app, post_json("/v1/sweeps", &small_sweep(&dataset), None)).await;
        let claimed = state
            .queue()
            .unwrap()
            .claim_next()
            .await
            .unwrap()
            .expect("a queued job");
        assert_eq!(claimed.state, JobState::Running);
        assert!(state.queue().unwrap().claim_next().await.unwrap().is_none());
        created["id"].as_str().unwrap().to_string()
    };

    let state = open(&dir);
    let app = router(state.clone());
    let (_, before) = send_json(&app, get(&format!("/v1/sweeps/{sweep_id}"))).await;
    assert_eq!(before["state"], "running");
    let pool = WorkerPool::start(&state, 1).await.unwrap();
    let done = wait_final(&app, &sweep_id).await;
    assert_eq!(done["state"], "succeeded", "{done}");
    let job = state
        .store()
        .get_sweep(sweep_id.trim_start_matches("sw-").parse().unwrap())
        .await
        .unwrap()
        .unwrap();
    assert_eq!(job.requeues, 1);
    pool.stop(&state, std::time::Duration::from_secs(5)).await;
}

#[tokio::test]
async fn the_store_claims_each_job_once_and_only_finishes_running_ones() {
    let dir = tempfile::tempdir().unwrap();
    let store = SqliteStore::open(dir.path()).unwrap();
    assert_eq!(store.schema_version().await.unwrap(), 3);
    // Reopening applies no migration twice.
    let store = SqliteStore::open(dir.path()).unwrap();
    assert_eq!(store.schema_version().await.unwrap(), 3);
    let new = |key: Option<&str>| NewSweep {
        dataset: "ds-x".into(),
        settings: "{}".into(),
        data: "{}".into(),
        idempotency_key: key.map(str::to_string),
        request_hash: "h".into(),
    };
    let CreateOutcome::Created(a) = store.create_sweep(new(None)).await.unwrap() else {
        panic!("created")
    };
    let CreateOutcome::Created(b) = store.create_sweep(new(Some("k"))).await.unwrap() else {
        panic!("created")
    };
    assert_eq!(store.claim_next().await.unwrap().unwrap().id, a.id);
    assert_eq!(store.claim_next().await.unwrap().unwrap().id, b.id);
    assert!(store.claim_next().await.unwrap().is_none());
    store
        .update_progress(
            a.id,
            mixgauge_service::JobProgress {
                done: 3,
                total: 8,
                finished: "[]".into(),
            },
        )
        .await
        .unwrap();
    let got = store.get_sweep(a.id).await.unwrap().unwrap();
    assert_eq!((got.done, got.total), (3, 8));
    assert!(
        store
            .finish(a.id, mixgauge_service::Finish::Cancelled)
            .await
            .unwrap()
    );
    // A finished job cannot be finished again.
    assert!(
        !store
            .finish(a.id, mixgauge_service::Finish::Failed("late".into()))
            .await
            .unwrap()
    );
    assert_eq!(
        store.get_sweep(a.id).await.unwrap().unwrap().state,
        JobState::Cancelled
    );
    assert_eq!(store.requeue_running().await.unwrap(), 1);
    assert_eq!(
        store.get_sweep(b.id).await.unwrap().unwrap().state,
        JobState::Queued
    );
}

#[tokio::test]
async fn a_cancel_asked_of_a_running_job_is_kept_across_a_restart() {
    let dir = tempfile::tempdir().unwrap();
    let sweep = {
        let state = open(&dir);
        let app = router(state.clone());
        let dataset = upload_groups(&app).await;
        let (_, created) =
            send_json(&app, post_json("/v1/sweeps", &small_sweep(&dataset), None)).await;
        state
            .queue()
            .unwrap()
            .claim_next()
            .await
            .unwrap()
            .expect("a queued job");
        let sweep = created["id"].as_str().unwrap().to_string();
        let (status, v) = send_json(
            &app,
            Request::post(format!("/v1/sweeps/{sweep}/cancel"))
                .body(Body::empty())
                .unwrap(),
        )
        .await;
        assert_eq!(status, StatusCode::ACCEPTED, "{v}");
        assert_eq!(v["state"], "running");
        assert_eq!(v["cancel_requested"], true);
        sweep
    };
    // The process died before its worker saw the request: the restart must not run the job.
    let state = open(&dir);
    assert_eq!(state.queue().unwrap().requeue_running().await.unwrap(), 0);
    let app = router(state);
    let (_, v) = send_json(&app, get(&format!("/v1/sweeps/{sweep}"))).await;
    assert_eq!(v["state"], "cancelled", "{v}");
}

/// An NPY version 1.0 file of little-endian f64 in C order.
fn npy(rows: usize, cols: usize, values: &[f64]) -> Vec<u8> {
    let mut header =
        format!("{{'descr': '<f8', 'fortran_order': False, 'shape': ({rows}, {cols}), }}");
    while (10 + header.len() + 1) % 64 != 0 {
        header.push(' ');
    }
    header.push('\n');
    let mut out = b"\x93NUMPY\x01\x00".to_vec();
    out.extend_from_slice(&(header.len() as u16).to_le_bytes());
    out.extend_from_slice(header.as_bytes());
    for v in values {
        out.extend_from_slice(&v.to_le_bytes());
    }
    out
}

#[tokio::test]
async fn npy_and_json_uploads_are_read_by_content_type() {
    let (_dir, state) = fresh();
    let app = router(state);
    let values = [1.0, 2.0, 3.0, 4.0, 5.0, 6.5];
    for content_type in ["application/x-npy", "application/octet-stream"] {
        let (status, v) = send_json(&app, upload(content_type, npy(3, 2, &values))).await;
        assert!(status.is_success(), "{content_type}: {status} {v}");
        assert_eq!(v["format"], "npy");
        assert_eq!(
            (v["rows"].as_u64(), v["columns"].as_u64()),
            (Some(3), Some(2))
        );
        assert_eq!(v["column_names"], json!(["x1", "x2"]));
    }
    let table = json!({ "speed": [1.0, 2.0, 4.0], "load": [0.5, 0.25, 0.125] }).to_string();
    let (status, v) = send_json(&app, upload("application/json", table)).await;
    assert_eq!(status, StatusCode::CREATED, "{v}");
    assert_eq!(v["format"], "json");
    assert_eq!(v["rows"], 3);
    // CSV bytes sent as JSON are a client mistake, answered as such.
    let (status, v) = send_json(&app, upload("application/json", "a,b\n1,2\n")).await;
    assert_eq!(status, StatusCode::UNPROCESSABLE_ENTITY, "{v}");
}

#[tokio::test]
async fn a_wrong_method_is_405_with_a_json_error() {
    let (_dir, state) = fresh();
    let app = router(state);
    let req = Request::put("/v1/datasets").body(Body::empty()).unwrap();
    let (status, v) = send_json(&app, req).await;
    assert_eq!(status, StatusCode::METHOD_NOT_ALLOWED);
    assert_eq!(v["error"]["code"], "method_not_allowed");
}
