//! The store's operations, run against both backends: the embedded SQLite store and the
//! PostgreSQL cluster store (each test in a schema of its own on the server named by
//! `MIXGAUGE_TEST_POSTGRES`, default `postgres://root@127.0.0.1:5432/test`). Then the cluster
//! store's task leasing: one claim per task under concurrency, an expired lease taken over,
//! and a late report from the old holder refused, so no result is counted twice.

use std::sync::Arc;
use std::time::Duration;

use mixgauge_service::{
    Blobs, CreateOutcome, DatasetRecord, DeleteOutcome, Finish, JobState, LocalQueue, NewSweep,
    NewTask, PgStore, PutOutcome, Reported, SqliteStore, Store, StoredModel, SweepJob, SweepPhase,
    TaskOutcome,
};

fn postgres_url() -> String {
    std::env::var("MIXGAUGE_TEST_POSTGRES")
        .unwrap_or_else(|_| "postgres://root@127.0.0.1:5432/test".into())
}

/// A PostgreSQL store in a fresh schema `name`, with blobs in a temporary directory.
async fn pg_store(name: &str) -> (tempfile::TempDir, PgStore) {
    let url = postgres_url();
    let (client, conn) = tokio_postgres::connect(&url, tokio_postgres::NoTls)
        .await
        .unwrap_or_else(|e| {
            panic!("these tests need PostgreSQL at {url} (set MIXGAUGE_TEST_POSTGRES): {e}")
        });
    tokio::spawn(conn);
    let schema = format!("store_test_{name}");
    client
        .batch_execute(&format!(
            "DROP SCHEMA IF EXISTS {schema} CASCADE; CREATE SCHEMA {schema}"
        ))
        .await
        .unwrap();
    let sep = if url.contains('?') { '&' } else { '?' };
    let scoped = format!("{url}{sep}options=-csearch_path%3D{schema}");
    let dir = tempfile::tempdir().unwrap();
    let blobs = Blobs::open(url::Url::from_directory_path(dir.path()).unwrap().as_str()).unwrap();
    let store = PgStore::connect(&scoped, blobs).await.unwrap();
    (dir, store)
}

fn sqlite_store() -> (tempfile::TempDir, SqliteStore) {
    let dir = tempfile::tempdir().unwrap();
    let store = SqliteStore::open(dir.path()).unwrap();
    (dir, store)
}

fn dataset(tag: &str) -> (DatasetRecord, Vec<u8>) {
    let bytes = format!("a,b\n1,2\n3,{tag}\n").into_bytes();
    let sha256: String = {
        use sha2::Digest;
        sha2::Sha256::digest(&bytes)
            .iter()
            .map(|b| format!("{b:02x}"))
            .collect()
    };
    (
        DatasetRecord {
            id: format!("ds-{sha256}"),
            rows: 2,
            incomplete_rows: 0,
            columns: 2,
            column_names: vec!["a".into(), "b".into()],
            sha256,
            format: "csv".into(),
            created: 1,
        },
        bytes,
    )
}

fn new_sweep(dataset: &str, key: Option<&str>, hash: &str) -> NewSweep {
    NewSweep {
        dataset: dataset.into(),
        settings: r#"{"components":[1]}"#.into(),
        data: "{}".into(),
        idempotency_key: key.map(String::from),
        request_hash: hash.into(),
    }
}

async fn created(store: &dyn Store, new: NewSweep) -> SweepJob {
    match store.create_sweep(new).await.unwrap() {
        CreateOutcome::Created(job) => job,
        other => panic!("expected a new job, got {other:?}"),
    }
}

/// Moves the oldest queued job to `running`, as each backend's workers do.
enum Starter<'a> {
    Local(&'a dyn LocalQueue),
    Cluster(&'a PgStore),
}

impl Starter<'_> {
    async fn start(&self) -> SweepJob {
        match self {
            Starter::Local(q) => q.claim_next().await.unwrap().expect("a queued job"),
            Starter::Cluster(pg) => {
                let claim = pg
                    .claim_sweep("test", Duration::from_secs(30))
                    .await
                    .unwrap()
                    .expect("a queued job");
                assert_eq!(claim.phase, SweepPhase::Planning);
                claim.job
            }
        }
    }
}

async fn datasets_are_stored_once_listed_and_deleted(store: &dyn Store) {
    store.ping().await.unwrap();
    let (a, a_bytes) = dataset("4");
    let (b, b_bytes) = dataset("5");
    assert_eq!(
        store.put_dataset(a.clone(), a_bytes.clone()).await.unwrap(),
        PutOutcome::Created(a.clone())
    );
    let mut again = a.clone();
    again.created = 99;
    assert_eq!(
        store.put_dataset(again, a_bytes.clone()).await.unwrap(),
        PutOutcome::Existing(a.clone()),
        "the same bytes are stored once"
    );
    store.put_dataset(b.clone(), b_bytes).await.unwrap();
    assert_eq!(store.get_dataset(&a.id).await.unwrap(), Some(a.clone()));
    assert_eq!(store.dataset_bytes(&a.id).await.unwrap(), Some(a_bytes));
    let mut ids = [a.id.clone(), b.id.clone()];
    ids.sort();
    let first = store.list_datasets(1, None).await.unwrap();
    assert_eq!(first.len(), 1);
    assert_eq!(first[0].id, ids[0]);
    let rest = store.list_datasets(10, Some(ids[0].clone())).await.unwrap();
    assert_eq!(
        rest.iter().map(|d| &d.id).collect::<Vec<_>>(),
        vec![&ids[1]]
    );
    assert_eq!(
        store.delete_dataset(&a.id).await.unwrap(),
        DeleteOutcome::Deleted
    );
    assert_eq!(store.get_dataset(&a.id).await.unwrap(), None);
    assert_eq!(store.dataset_bytes(&a.id).await.unwrap(), None);
    assert_eq!(
        store.delete_dataset(&a.id).await.unwrap(),
        DeleteOutcome::NotFound
    );
}

async fn a_dataset_in_use_is_kept_until_its_sweep_ends(store: &dyn Store) {
    let (d, bytes) = dataset("6");
    store.put_dataset(d.clone(), bytes).await.unwrap();
    let job = created(store, new_sweep(&d.id, None, "h")).await;
    assert_eq!(
        store.delete_dataset(&d.id).await.unwrap(),
        DeleteOutcome::InUse(vec![job.id])
    );
    assert_eq!(
        store.request_cancel(job.id).await.unwrap(),
        Some(JobState::Cancelled)
    );
    assert_eq!(
        store.delete_dataset(&d.id).await.unwrap(),
        DeleteOutcome::Deleted
    );
}

async fn idempotency_keys_return_the_same_job_or_a_conflict(store: &dyn Store) {
    let (d, bytes) = dataset("7");
    store.put_dataset(d.clone(), bytes).await.unwrap();
    let first = created(store, new_sweep(&d.id, Some("nightly"), "h1")).await;
    assert_eq!(first.state, JobState::Queued);
    match store
        .create_sweep(new_sweep(&d.id, Some("nightly"), "h1"))
        .await
        .unwrap()
    {
        CreateOutcome::Existing(job) => assert_eq!(job.id, first.id),
        other => panic!("expected the earlier job, got {other:?}"),
    }
    assert_eq!(
        store
            .create_sweep(new_sweep(&d.id, Some("nightly"), "h2"))
            .await
            .unwrap(),
        CreateOutcome::KeyConflict
    );
    let a = created(store, new_sweep(&d.id, None, "h1")).await;
    let b = created(store, new_sweep(&d.id, None, "h1")).await;
    assert!(first.id < a.id && a.id < b.id, "ids grow");
    let page = store.list_sweeps(2, None).await.unwrap();
    assert_eq!(
        page.iter().map(|j| j.id).collect::<Vec<_>>(),
        vec![first.id, a.id]
    );
    let next = store.list_sweeps(2, Some(a.id)).await.unwrap();
    assert_eq!(next.iter().map(|j| j.id).collect::<Vec<_>>(), vec![b.id]);
    assert_eq!(store.get_sweep(b.id + 100).await.unwrap(), None);
}

async fn cancels_end_queued_jobs_and_leave_final_ones(store: &dyn Store) {
    let (d, bytes) = dataset("8");
    store.put_dataset(d.clone(), bytes).await.unwrap();
    let job = created(store, new_sweep(&d.id, None, "h")).await;
    assert_eq!(
        store.request_cancel(job.id).await.unwrap(),
        Some(JobState::Cancelled)
    );
    let after = store.get_sweep(job.id).await.unwrap().unwrap();
    assert!(after.cancel_requested);
    assert_eq!(
        store.request_cancel(job.id).await.unwrap(),
        Some(JobState::Cancelled)
    );
    assert!(
        !store
            .finish(job.id, Finish::Failed("late".into()))
            .await
            .unwrap()
    );
    assert_eq!(store.request_cancel(job.id + 100).await.unwrap(), None);
}

async fn a_running_job_finishes_once_with_its_documents(store: &dyn Store, starter: Starter<'_>) {
    let (d, bytes) = dataset("9");
    store.put_dataset(d.clone(), bytes).await.unwrap();
    let job = created(store, new_sweep(&d.id, None, "h")).await;
    assert!(
        !store.finish(job.id, Finish::Cancelled).await.unwrap(),
        "a queued job is not finished"
    );
    let running = starter.start().await;
    assert_eq!((running.id, running.state), (job.id, JobState::Running));
    let how = Finish::Succeeded {
        result: r#"{"format":"r"}"#.into(),
        report: "<html></html>".into(),
        models: vec![StoredModel {
            covariance: "full".into(),
            components: 2,
            document: r#"{"format":"m"}"#.into(),
        }],
        profile: Some(r#"{"format":"p"}"#.into()),
    };
    assert!(store.finish(job.id, how.clone()).await.unwrap());
    assert!(
        !store.finish(job.id, how).await.unwrap(),
        "a finished job is not finished again"
    );
    let done = store.get_sweep(job.id).await.unwrap().unwrap();
    assert_eq!(done.state, JobState::Succeeded);
    assert_eq!(done.result.as_deref(), Some(r#"{"format":"r"}"#));
    assert_eq!(
        store.report(job.id).await.unwrap().as_deref(),
        Some("<html></html>")
    );
    assert_eq!(
        store.model(job.id, "full", 2).await.unwrap().as_deref(),
        Some(r#"{"format":"m"}"#)
    );
    assert_eq!(store.model(job.id, "full", 3).await.unwrap(), None);
    assert_eq!(
        store.profile(job.id).await.unwrap().as_deref(),
        Some(r#"{"format":"p"}"#)
    );
    let counts = store.count_by_state().await.unwrap();
    assert_eq!(
        counts.iter().find(|(s, _)| *s == JobState::Succeeded),
        Some(&(JobState::Succeeded, 1))
    );
}

macro_rules! on_both_backends {
    ($($name:ident),* $(,)?) => {
        mod sqlite {
            $(
                #[tokio::test]
                async fn $name() {
                    let (_dir, store) = super::sqlite_store();
                    super::$name(&store).await;
                }
            )*
        }
        mod postgres {
            $(
                #[tokio::test]
                async fn $name() {
                    let (_dir, store) = super::pg_store(stringify!($name)).await;
                    super::$name(&store).await;
                }
            )*
        }
    };
}

on_both_backends!(
    datasets_are_stored_once_listed_and_deleted,
    a_dataset_in_use_is_kept_until_its_sweep_ends,
    idempotency_keys_return_the_same_job_or_a_conflict,
    cancels_end_queued_jobs_and_leave_final_ones,
);

#[tokio::test]
async fn sqlite_a_running_job_finishes_once_with_its_documents() {
    let (_dir, store) = sqlite_store();
    a_running_job_finishes_once_with_its_documents(&store, Starter::Local(&store)).await;
}

#[tokio::test]
async fn postgres_a_running_job_finishes_once_with_its_documents() {
    let (_dir, store) = pg_store("finishes_once").await;
    a_running_job_finishes_once_with_its_documents(&store, Starter::Cluster(&store)).await;
}

#[tokio::test]
async fn postgres_migrations_are_recorded_and_reapplied_as_no_ops() {
    let (dir, store) = pg_store("migrations").await;
    let version = store.schema_version().await.unwrap();
    assert!(version >= 1);
    // A second process connecting to the same schema applies nothing and sees the same data.
    let (d, bytes) = dataset("m");
    store.put_dataset(d.clone(), bytes).await.unwrap();
    let url = format!(
        "{}?options=-csearch_path%3Dstore_test_migrations",
        postgres_url()
    );
    let blobs = Blobs::open(url::Url::from_directory_path(dir.path()).unwrap().as_str()).unwrap();
    let second = PgStore::connect(&url, blobs).await.unwrap();
    assert_eq!(second.schema_version().await.unwrap(), version);
    assert_eq!(second.get_dataset(&d.id).await.unwrap(), Some(d));
}

/// A planned sweep of `count` tasks in `store`; returns its id.
async fn planned(store: &PgStore, count: usize) -> i64 {
    let (d, bytes) = dataset("t");
    store.put_dataset(d.clone(), bytes).await.unwrap();
    let job = created(store, new_sweep(&d.id, None, "h")).await;
    let claim = store
        .claim_sweep("planner", Duration::from_secs(30))
        .await
        .unwrap()
        .unwrap();
    assert_eq!(claim.job.id, job.id);
    let tasks: Vec<NewTask> = (0..count)
        .map(|t| NewTask {
            task: t,
            priority: count - 1 - t,
            covariance: "full".into(),
            components: 1 + t % 3,
            fold: Some(t % 5),
            restart: 0,
        })
        .collect();
    assert!(
        store
            .publish_plan(job.id, claim.token, &tasks)
            .await
            .unwrap()
    );
    assert!(
        !store
            .publish_plan(job.id, claim.token, &tasks)
            .await
            .unwrap(),
        "a plan is published once"
    );
    job.id
}

/// Eight claimers racing over 60 tasks: every task is leased exactly once and every report
/// counted once; the sweep is then ready for assembly, with every candidate listed finished.
#[tokio::test]
async fn postgres_concurrent_claimers_lease_each_task_once() {
    let (_dir, store) = pg_store("concurrent_claims").await;
    let store = Arc::new(store);
    let id = planned(&store, 60).await;
    let mut handles = Vec::new();
    for w in 0..8 {
        let store = Arc::clone(&store);
        handles.push(tokio::spawn(async move {
            let mut mine = Vec::new();
            let name = format!("w{w}");
            while let Some(claim) = store
                .claim_task(&name, Duration::from_secs(30))
                .await
                .unwrap()
            {
                let reported = store
                    .report_task(
                        &claim,
                        TaskOutcome::Failed(format!("task {}", claim.task)),
                        Duration::ZERO,
                    )
                    .await
                    .unwrap();
                assert!(matches!(reported, Reported::Recorded { .. }));
                mine.push(claim.task);
            }
            mine
        }));
    }
    let mut all = Vec::new();
    for h in handles {
        all.extend(h.await.unwrap());
    }
    all.sort_unstable();
    assert_eq!(all, (0..60).collect::<Vec<_>>(), "each task leased once");
    let job = store.get_sweep(id).await.unwrap().unwrap();
    assert_eq!((job.done, job.total), (60, 60));
    let finished: serde_json::Value = serde_json::from_str(&job.finished).unwrap();
    assert_eq!(finished.as_array().unwrap().len(), 3, "{finished}");
    let outcomes = store.task_outcomes(id).await.unwrap().unwrap();
    assert_eq!(outcomes[7], TaskOutcome::Failed("task 7".into()));
    let claim = store
        .claim_sweep("assembler", Duration::from_secs(30))
        .await
        .unwrap()
        .unwrap();
    assert_eq!((claim.job.id, claim.phase), (id, SweepPhase::Assembling));
    assert_eq!(
        store.task_counts().await.unwrap().unwrap(),
        vec![
            ("waiting".to_string(), 0),
            ("leased".to_string(), 0),
            ("done".to_string(), 0),
            ("failed".to_string(), 60)
        ]
    );
}

/// A holder that stops renewing loses its task once the lease runs out; the next claimer
/// gets it (second attempt), and the first holder's late renewal and report are refused.
#[tokio::test]
async fn postgres_an_expired_lease_is_taken_over_and_the_late_report_refused() {
    let (_dir, store) = pg_store("expired_lease").await;
    let id = planned(&store, 2).await;
    let short = Duration::from_millis(300);
    let first = store.claim_task("stalled", short).await.unwrap().unwrap();
    assert_eq!((first.sweep, first.task, first.attempts), (id, 1, 1));
    assert!(store.renew_task(&first, short).await.unwrap());
    tokio::time::sleep(Duration::from_millis(700)).await;
    let second = store
        .claim_task("healthy", Duration::from_secs(30))
        .await
        .unwrap()
        .unwrap();
    assert_eq!(
        (second.task, second.attempts),
        (1, 2),
        "the expired task comes first"
    );
    assert!(!store.renew_task(&first, short).await.unwrap());
    assert_eq!(
        store
            .report_task(&first, TaskOutcome::Fitted("{}".into()), Duration::ZERO)
            .await
            .unwrap(),
        Reported::Refused
    );
    assert_eq!(
        store
            .report_task(&second, TaskOutcome::Fitted("{}".into()), Duration::ZERO)
            .await
            .unwrap(),
        Reported::Recorded { done: 1, total: 2 }
    );
    assert_eq!(
        store
            .report_task(&second, TaskOutcome::Fitted("{}".into()), Duration::ZERO)
            .await
            .unwrap(),
        Reported::Refused,
        "a report is taken once"
    );
    // The other task, handed back by a stopping worker, is claimable again at once.
    let third = store
        .claim_task("stopping", Duration::from_secs(30))
        .await
        .unwrap()
        .unwrap();
    assert_eq!(third.task, 0);
    assert!(store.release_task(&third).await.unwrap());
    let fourth = store
        .claim_task("healthy", Duration::from_secs(30))
        .await
        .unwrap()
        .unwrap();
    assert_eq!((fourth.task, fourth.attempts), (0, 2));
    assert!(
        store.task_outcomes(id).await.unwrap().is_none(),
        "not all reported"
    );
}

/// Cancelling a running sweep ends it at once; its leased tasks' renewals and reports are
/// refused, and nothing of it is claimable.
#[tokio::test]
async fn postgres_a_cancelled_sweep_stops_its_workers() {
    let (_dir, store) = pg_store("cancelled_sweep").await;
    let id = planned(&store, 3).await;
    let claim = store
        .claim_task("w", Duration::from_secs(30))
        .await
        .unwrap()
        .unwrap();
    assert_eq!(
        store.request_cancel(id).await.unwrap(),
        Some(JobState::Cancelled)
    );
    assert!(
        !store
            .renew_task(&claim, Duration::from_secs(30))
            .await
            .unwrap()
    );
    assert_eq!(
        store
            .report_task(&claim, TaskOutcome::Fitted("{}".into()), Duration::ZERO)
            .await
            .unwrap(),
        Reported::Refused
    );
    assert!(
        store
            .claim_task("w", Duration::from_secs(30))
            .await
            .unwrap()
            .is_none()
    );
    assert!(
        store
            .claim_sweep("w", Duration::from_secs(30))
            .await
            .unwrap()
            .is_none()
    );
}
