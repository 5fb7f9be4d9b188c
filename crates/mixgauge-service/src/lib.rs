//! The mixgauge HTTP job service: upload a dataset, queue a model-selection sweep over it, poll
//! the job, fetch the result document and the HTML report.
//!
//! - [`router`] builds the whole HTTP surface from an [`AppState`], with no socket, so tests drive
//!   it with `tower::ServiceExt::oneshot`.
//! - [`Store`] is the persistence boundary (datasets and sweep jobs); [`SqliteStore`] is the
//!   embedded implementation (bundled SQLite plus content-addressed dataset files).
//! - [`WorkerPool`] takes queued jobs from the store and runs each sweep on `spawn_blocking`, so
//!   CPU-bound fitting never occupies an async worker thread.
//! - [`PgStore`] is the cluster store (PostgreSQL plus shared dataset [`Blobs`]): each sweep is
//!   split into fit tasks that [`work`] loops (`mixgauge worker`) on any host lease and report.
//! - [`serve`] / [`run`] wire these together behind a TCP listener with graceful shutdown.
//!
//! Key design decision: the store is the queue. Every job state change goes through the store,
//! so a restarted process finds jobs left `running` and puts them back in the queue.
#![deny(missing_docs)]

mod cluster;
mod error;
mod gates;
mod guard;
mod http;
mod intake;
mod metrics;
mod options;
mod page;
mod results;
mod server;
mod state;
mod store;
mod worker;

pub use cluster::{ClusterWorkers, WorkerConfig, WorkerStats, work};
pub use error::{AppError, StoreError};
pub use http::router;
pub use metrics::Metrics;
pub use options::{DataOptions, ReadLimits};
pub use server::{
    Preload, ServeConfig, default_worker_name as worker_name, run, run_worker, serve,
};
pub use state::{AppState, Limits};
pub use store::postgres::{NewTask, Reported, SweepClaim, SweepPhase, TaskClaim, TaskOutcome};
pub use store::{
    Blobs, CreateOutcome, DatasetRecord, DeleteOutcome, Finish, JobProgress, JobState, LocalQueue,
    NewSweep, PgStore, PutOutcome, SqliteStore, Store, StoredModel, SweepJob,
};
pub use worker::WorkerPool;
