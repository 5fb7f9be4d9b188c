//! The [`Store`] trait: datasets and sweep jobs, and the records it hands out; and
//! [`LocalQueue`], the whole-sweep queue of one process.
//!
//! The traits use `async-trait` so they stay object-safe and can be injected as
//! `Arc<dyn Store>`; the boxed future per call is negligible next to a database round trip.
//! [`SqliteStore`] is the embedded implementation of both. [`PgStore`] is the cluster store:
//! it implements [`Store`], and instead of a whole-sweep queue it splits each sweep into fit
//! tasks that worker processes on any host lease (see `crate::cluster`).

pub(crate) mod blobs;
pub(crate) mod postgres;
mod sqlite;

use async_trait::async_trait;
use serde::Serialize;

use crate::error::StoreError;

pub use blobs::Blobs;
pub use postgres::PgStore;
pub use sqlite::SqliteStore;

/// Metadata of an uploaded dataset. The bytes live beside it, addressed by `sha256`.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct DatasetRecord {
    /// Public id, derived from the content hash.
    pub id: String,
    /// Data rows, complete or not.
    pub rows: usize,
    /// Rows with a missing or non-finite feature value; a sweep reads such a file only when
    /// it chooses to drop incomplete rows.
    pub incomplete_rows: usize,
    /// Feature columns.
    pub columns: usize,
    /// Feature column names, in order.
    pub column_names: Vec<String>,
    /// SHA-256 of the uploaded bytes, lower-case hex.
    pub sha256: String,
    /// `csv`, `npy` or `json`.
    pub format: String,
    /// Upload time, Unix milliseconds.
    pub created: i64,
}

/// Whether [`Store::put_dataset`] stored new content or found it already there.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum PutOutcome {
    /// Newly stored.
    Created(DatasetRecord),
    /// The same bytes were stored before; this is the earlier record.
    Existing(DatasetRecord),
}

/// Result of [`Store::delete_dataset`].
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum DeleteOutcome {
    /// Deleted, file and metadata.
    Deleted,
    /// No such dataset.
    NotFound,
    /// A queued or running sweep uses it; these are the job ids.
    InUse(Vec<i64>),
}

/// Lifecycle of a sweep job.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "lowercase")]
pub enum JobState {
    /// Waiting for a worker.
    Queued,
    /// A worker is fitting it.
    Running,
    /// Finished with a result.
    Succeeded,
    /// Finished with an error.
    Failed,
    /// Stopped at a client's request.
    Cancelled,
}

impl JobState {
    /// The stored and serialised name.
    pub fn as_str(self) -> &'static str {
        match self {
            JobState::Queued => "queued",
            JobState::Running => "running",
            JobState::Succeeded => "succeeded",
            JobState::Failed => "failed",
            JobState::Cancelled => "cancelled",
        }
    }

    fn parse(text: &str) -> Result<Self, StoreError> {
        Ok(match text {
            "queued" => JobState::Queued,
            "running" => JobState::Running,
            "succeeded" => JobState::Succeeded,
            "failed" => JobState::Failed,
            "cancelled" => JobState::Cancelled,
            other => return Err(StoreError::Corrupt(format!("unknown job state {other:?}"))),
        })
    }

    /// True once the job can change no more.
    pub fn is_final(self) -> bool {
        matches!(
            self,
            JobState::Succeeded | JobState::Failed | JobState::Cancelled
        )
    }
}

/// A sweep job as stored.
#[derive(Clone, Debug, PartialEq)]
pub struct SweepJob {
    /// Numeric id, assigned by the store.
    pub id: i64,
    /// The dataset's id.
    pub dataset: String,
    /// Fully resolved `SweepSettings`, as JSON text.
    pub settings: String,
    /// How the dataset is read for this sweep (columns, labels, …), as JSON text.
    pub data: String,
    /// Candidates finished so far, as a JSON list of `{covariance, components}`.
    pub finished: String,
    /// Where the job is in its lifecycle.
    pub state: JobState,
    /// Fits finished so far.
    pub done: u64,
    /// Fits in the sweep (0 until the worker reports).
    pub total: u64,
    /// The `SweepResult` document as JSON text, once succeeded.
    pub result: Option<String>,
    /// Why it failed, once failed.
    pub error: Option<String>,
    /// How many times the job was put back in the queue after a crash.
    pub requeues: u32,
    /// Creation time, Unix milliseconds.
    pub created: i64,
    /// Last change, Unix milliseconds.
    pub updated: i64,
    /// A client asked to cancel the job; a running job stops at its next check.
    pub cancel_requested: bool,
}

/// A job to create.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct NewSweep {
    /// The dataset's id (must exist).
    pub dataset: String,
    /// Resolved settings as JSON text.
    pub settings: String,
    /// Read options as JSON text.
    pub data: String,
    /// The client's `Idempotency-Key`, if any.
    pub idempotency_key: Option<String>,
    /// Hash of the request body, compared when the key is reused.
    pub request_hash: String,
}

/// Result of [`Store::create_sweep`].
#[derive(Clone, Debug, PartialEq)]
pub enum CreateOutcome {
    /// A new queued job.
    Created(SweepJob),
    /// The idempotency key was used before with the same request: that job.
    Existing(SweepJob),
    /// The idempotency key was used before with a different request.
    KeyConflict,
}

/// How a running job ended.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Finish {
    /// With a result document (JSON), its HTML report and the full-data models.
    Succeeded {
        /// `SweepResult` as JSON text.
        result: String,
        /// The rendered report.
        report: String,
        /// One model document per fitted candidate.
        models: Vec<StoredModel>,
        /// The reference profile of the recommended model, as JSON, when there is one.
        profile: Option<String>,
    },
    /// With an error message.
    Failed(String),
    /// Stopped by a cancel request.
    Cancelled,
}

/// What [`Finish`] writes to a job's row: state, result, report, error, models, profile.
pub(crate) type FinishColumns = (
    &'static str,
    Option<String>,
    Option<String>,
    Option<String>,
    Vec<StoredModel>,
    Option<String>,
);

impl Finish {
    /// The columns a store writes for this ending.
    pub(crate) fn into_columns(self) -> FinishColumns {
        match self {
            Finish::Succeeded {
                result,
                report,
                models,
                profile,
            } => (
                "succeeded",
                Some(result),
                Some(report),
                None,
                models,
                profile,
            ),
            Finish::Failed(e) => ("failed", None, None, Some(e), Vec::new(), None),
            Finish::Cancelled => ("cancelled", None, None, None, Vec::new(), None),
        }
    }
}

/// A full-data model of a finished sweep.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct StoredModel {
    /// `full` or `diagonal`.
    pub covariance: String,
    /// Component count.
    pub components: usize,
    /// The `mixgauge.model/1` document as JSON text.
    pub document: String,
}

/// Progress of a running job, as the worker reports it.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct JobProgress {
    /// Fits finished.
    pub done: u64,
    /// Fits in the sweep.
    pub total: u64,
    /// Finished candidates as a JSON list of `{covariance, components}`.
    pub finished: String,
}

/// Persistence of datasets and sweep jobs. Every method may be called from async code: an
/// implementation must not block the runtime.
#[async_trait]
pub trait Store: Send + Sync {
    /// Succeeds when the store answers a trivial query.
    async fn ping(&self) -> Result<(), StoreError>;
    /// Stores `bytes` and `meta`, unless a dataset with the same SHA-256 exists.
    async fn put_dataset(
        &self,
        meta: DatasetRecord,
        bytes: Vec<u8>,
    ) -> Result<PutOutcome, StoreError>;
    /// Metadata of one dataset.
    async fn get_dataset(&self, id: &str) -> Result<Option<DatasetRecord>, StoreError>;
    /// The uploaded bytes of one dataset.
    async fn dataset_bytes(&self, id: &str) -> Result<Option<Vec<u8>>, StoreError>;
    /// Up to `limit` datasets with id greater than `after`, by id.
    async fn list_datasets(
        &self,
        limit: usize,
        after: Option<String>,
    ) -> Result<Vec<DatasetRecord>, StoreError>;
    /// Deletes a dataset unless a queued or running job uses it.
    async fn delete_dataset(&self, id: &str) -> Result<DeleteOutcome, StoreError>;
    /// Creates a queued job, honouring the idempotency key.
    async fn create_sweep(&self, new: NewSweep) -> Result<CreateOutcome, StoreError>;
    /// One job.
    async fn get_sweep(&self, id: i64) -> Result<Option<SweepJob>, StoreError>;
    /// Up to `limit` jobs with id greater than `after`, by id.
    async fn list_sweeps(
        &self,
        limit: usize,
        after: Option<i64>,
    ) -> Result<Vec<SweepJob>, StoreError>;
    /// Ends a running job. Returns false if the job was not running.
    async fn finish(&self, id: i64, how: Finish) -> Result<bool, StoreError>;
    /// Cancels a queued job at once and records the request on a running one (its worker
    /// stops it; the cluster store cancels a running job at once too, and its workers stop at
    /// their next heartbeat); returns the state after, `None` if no such job. Final jobs are
    /// unchanged.
    async fn request_cancel(&self, id: i64) -> Result<Option<JobState>, StoreError>;
    /// The HTML report of a succeeded job.
    async fn report(&self, id: i64) -> Result<Option<String>, StoreError>;
    /// The reference profile of a succeeded job's recommended model, for gates.
    async fn profile(&self, id: i64) -> Result<Option<String>, StoreError>;
    /// The model document of one candidate of a succeeded job.
    async fn model(
        &self,
        id: i64,
        covariance: &str,
        components: usize,
    ) -> Result<Option<String>, StoreError>;
    /// How many jobs are in each state.
    async fn count_by_state(&self) -> Result<Vec<(JobState, u64)>, StoreError>;
    /// How many fit tasks are in each state (`waiting`, `leased`, `done`, `failed`), for a
    /// store that splits sweeps into tasks; `None` for one that runs sweeps whole.
    async fn task_counts(&self) -> Result<Option<Vec<(String, u64)>>, StoreError> {
        Ok(None)
    }
}

/// The whole-sweep queue of a single process (the embedded store): a worker claims a queued
/// job, runs every fit itself and reports progress as it goes.
#[async_trait]
pub trait LocalQueue: Store {
    /// Marks the oldest queued job running and returns it.
    async fn claim_next(&self) -> Result<Option<SweepJob>, StoreError>;
    /// Records progress of a running job.
    async fn update_progress(&self, id: i64, progress: JobProgress) -> Result<(), StoreError>;
    /// Puts one running job back in the queue (this process is shutting down and stopped it
    /// before it finished). Returns false if the job was not running.
    async fn hand_back(&self, id: i64) -> Result<bool, StoreError>;
    /// Puts every job left `running` back in the queue (after a crash) and returns how many;
    /// those with a cancel request are marked cancelled instead.
    async fn requeue_running(&self) -> Result<usize, StoreError>;
}
