//! [`WorkerPool`]: a fixed number of in-process workers that take queued sweep jobs from the
//! store and run them.
//!
//! Each sweep runs on `spawn_blocking` (the sweep itself fans out on the rayon pool), never on
//! an async worker thread. Progress goes from the sweep's callback into a `watch` channel, and a
//! small task writes the latest value to the store at most every [`PROGRESS_INTERVAL`], so a
//! sweep with thousands of fits does not turn into thousands of writes. Cancellation is an
//! `AtomicBool` per running job, kept in [`AppState`] and set by the cancel endpoint.

use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::Duration;

use std::time::Instant;

use mixgauge_data::{Format, Standardizer};
use mixgauge_engine::{Mixture, ModelDocument, Rows};
use mixgauge_select::{Progress, SelectError, SweepInput, SweepSettings, sweep};
use tokio::sync::watch;
use tokio::task::JoinHandle;

use crate::error::StoreError;
use crate::options::{DataOptions, ReadLimits, prepare};
use crate::state::AppState;
use crate::store::{Finish, JobProgress, StoredModel, SweepJob};

/// Shortest time between two progress writes of one job.
pub(crate) const PROGRESS_INTERVAL: Duration = Duration::from_millis(250);

/// How long an idle worker waits before looking at the queue again without a wake-up (covers
/// jobs queued by another process sharing the data directory).
const IDLE_POLL: Duration = Duration::from_secs(1);

/// Running workers. Dropping the pool does not stop them; call [`WorkerPool::stop`].
pub struct WorkerPool {
    shutdown: watch::Sender<bool>,
    handles: Vec<JoinHandle<()>>,
}

impl WorkerPool {
    /// Re-queues the jobs a previous process left `running`, then starts `workers` workers
    /// (at least one) on the current tokio runtime.
    ///
    /// # Errors
    /// The store error if the re-queue fails.
    pub async fn start(state: &AppState, workers: usize) -> Result<Self, StoreError> {
        let Some(queue) = &state.queue else {
            return Err(StoreError::Corrupt(
                "this store has no whole-sweep queue; run `mixgauge worker` processes instead"
                    .into(),
            ));
        };
        let requeued = queue.requeue_running().await?;
        if requeued > 0 {
            tracing::warn!(
                requeued,
                "re-queued sweeps left running by an earlier process"
            );
        }
        let (shutdown, rx) = watch::channel(false);
        let handles = (0..workers.max(1))
            .map(|_| tokio::spawn(worker_loop(state.clone(), rx.clone())))
            .collect();
        Ok(WorkerPool { shutdown, handles })
    }

    /// Tells the workers to take no new jobs, stops the sweeps in progress and waits up to
    /// `grace` for the workers to put them back in the queue. A worker still busy after that
    /// is abandoned: its job stays `running` in the store and is re-queued at the next start.
    pub async fn stop(self, state: &AppState, grace: Duration) {
        let _ = self.shutdown.send(true);
        state.begin_shutdown();
        let deadline = tokio::time::Instant::now() + grace;
        for mut h in self.handles {
            if tokio::time::timeout_at(deadline, &mut h).await.is_err() {
                tracing::warn!(
                    "a worker did not stop in time; its sweep is re-queued at the next start"
                );
                h.abort();
            }
        }
    }
}

async fn worker_loop(state: AppState, mut shutdown: watch::Receiver<bool>) {
    loop {
        if *shutdown.borrow() {
            return;
        }
        // Registered before looking at the queue, so a job created in between still wakes us.
        let woken = state.wake.notified();
        if state
            .shutting_down
            .load(std::sync::atomic::Ordering::SeqCst)
        {
            return;
        }
        let Some(queue) = &state.queue else { return };
        match queue.claim_next().await {
            Ok(Some(job)) => run_job(&state, job).await,
            Ok(None) => {
                tokio::select! {
                    _ = woken => {}
                    _ = shutdown.changed() => {}
                    _ = tokio::time::sleep(IDLE_POLL) => {}
                }
            }
            Err(e) => {
                tracing::error!(error = %e, "cannot claim a sweep");
                tokio::time::sleep(IDLE_POLL).await;
            }
        }
    }
}

async fn run_job(state: &AppState, job: SweepJob) {
    let id = job.id;
    tracing::info!(sweep = id, dataset = %job.dataset, "sweep started");
    let flag = Arc::new(AtomicBool::new(false));
    state
        .cancels
        .lock()
        .expect("cancel map lock poisoned")
        .insert(id, Arc::clone(&flag));
    // A cancel that arrived between the claim and the line above is only in the store.
    match state.store.get_sweep(id).await {
        Ok(Some(j)) if j.cancel_requested => flag.store(true, std::sync::atomic::Ordering::SeqCst),
        Ok(_) => {}
        Err(e) => tracing::warn!(sweep = id, error = %e, "cannot read the cancel request"),
    }
    let how = match execute(state, &job, flag).await {
        Ok(how) => how,
        Err(e) => {
            tracing::error!(sweep = id, error = %e, "sweep could not run");
            Finish::Failed("the service failed to run this sweep; see the server log".into())
        }
    };
    state
        .cancels
        .lock()
        .expect("cancel map lock poisoned")
        .remove(&id);
    if how == Finish::Cancelled
        && state
            .shutting_down
            .load(std::sync::atomic::Ordering::SeqCst)
    {
        let handed = match &state.queue {
            Some(q) => q.hand_back(id).await,
            None => Ok(false),
        };
        match handed {
            Ok(_) => tracing::info!(
                sweep = id,
                "sweep handed back to the queue for the next start"
            ),
            Err(e) => {
                tracing::error!(sweep = id, error = %e, "cannot hand a sweep back; it is re-queued at the next start")
            }
        }
        return;
    }
    let label = match &how {
        Finish::Succeeded { .. } => "succeeded",
        Finish::Failed(_) => "failed",
        Finish::Cancelled => "cancelled",
    };
    match state.store.finish(id, how).await {
        Ok(_) => tracing::info!(sweep = id, state = label, "sweep finished"),
        Err(e) => tracing::error!(sweep = id, error = %e, "cannot record the end of a sweep"),
    }
}

async fn execute(
    state: &AppState,
    job: &SweepJob,
    cancel: Arc<AtomicBool>,
) -> Result<Finish, StoreError> {
    let JobInputs {
        bytes,
        format,
        settings,
        options,
    } = match read_job(state.store.as_ref(), job).await? {
        Ok(inputs) => inputs,
        Err(why) => return Ok(Finish::Failed(why)),
    };

    let (progress_tx, mut progress_rx) = watch::channel(JobProgress::default());
    let queue = state.queue.clone();
    let id = job.id;
    let metrics = Arc::clone(&state.metrics);
    let writer = tokio::spawn(async move {
        let mut recorded = 0;
        while progress_rx.changed().await.is_ok() {
            let p = progress_rx.borrow_and_update().clone();
            metrics.fits_done(p.done.saturating_sub(recorded));
            recorded = p.done;
            let Some(queue) = &queue else { break };
            if let Err(e) = queue.update_progress(id, p).await {
                tracing::warn!(sweep = id, error = %e, "cannot record progress");
            }
            tokio::time::sleep(PROGRESS_INTERVAL).await;
        }
    });
    let limits = state.limits.read;
    let started = Instant::now();
    let how = tokio::task::spawn_blocking(move || {
        run_sweep(
            &bytes,
            format,
            &options,
            &limits,
            &settings,
            &progress_tx,
            &cancel,
        )
    })
    .await
    .map_err(|e| StoreError::Task(format!("sweep task: {e}")))?;
    let _ = writer.await;
    if matches!(how, Finish::Succeeded { .. }) {
        state.metrics.sweep_took(started.elapsed());
    }
    Ok(how)
}

/// What a job needs from the store before any fitting: the dataset's bytes and format, the
/// sweep's settings and read options.
pub(crate) struct JobInputs {
    pub(crate) bytes: Vec<u8>,
    pub(crate) format: Format,
    pub(crate) settings: SweepSettings,
    pub(crate) options: DataOptions,
}

/// Reads a job's inputs; the inner `Err` is the reason the job fails (its dataset is gone).
pub(crate) async fn read_job(
    store: &dyn crate::store::Store,
    job: &SweepJob,
) -> Result<Result<JobInputs, String>, StoreError> {
    let (Some(meta), Some(bytes)) = (
        store.get_dataset(&job.dataset).await?,
        store.dataset_bytes(&job.dataset).await?,
    ) else {
        return Ok(Err(format!(
            "dataset {} no longer exists; upload it again and create a new sweep",
            job.dataset
        )));
    };
    let format = match meta.format.as_str() {
        "csv" => Format::Csv,
        "npy" => Format::Npy,
        "json" => Format::Json,
        other => return Err(StoreError::Corrupt(format!("dataset format {other:?}"))),
    };
    let settings: SweepSettings = serde_json::from_str(&job.settings)
        .map_err(|e| StoreError::Corrupt(format!("settings of sweep {}: {e}", job.id)))?;
    let options: DataOptions = serde_json::from_str(&job.data)
        .map_err(|e| StoreError::Corrupt(format!("data options of sweep {}: {e}", job.id)))?;
    Ok(Ok(JobInputs {
        bytes,
        format,
        settings,
        options,
    }))
}

/// The blocking part: read, sweep, render, and the models in the data's own units.
fn run_sweep(
    bytes: &[u8],
    format: Format,
    options: &DataOptions,
    limits: &ReadLimits,
    settings: &SweepSettings,
    progress: &watch::Sender<JobProgress>,
    cancel: &AtomicBool,
) -> Finish {
    let prepared = match prepare(bytes, format, options, limits) {
        Ok(p) => p,
        Err(e) => return Finish::Failed(e.to_string()),
    };
    let input = match sweep_input(&prepared, options) {
        Ok(i) => i,
        Err(e) => return Finish::Failed(e),
    };
    let report = |p: &Progress| {
        let finished: Vec<serde_json::Value> = p
            .finished
            .iter()
            .map(|c| serde_json::json!({ "covariance": c.covariance, "components": c.components }))
            .collect();
        progress.send_replace(JobProgress {
            done: p.done as u64,
            total: p.total as u64,
            finished: serde_json::Value::Array(finished).to_string(),
        });
    };
    let outcome = match sweep(&input, settings, &report, cancel) {
        Ok(o) => o,
        Err(SelectError::Cancelled) => return Finish::Cancelled,
        Err(e) => return Finish::Failed(e.to_string()),
    };
    complete(&outcome, &prepared)
}

/// The rows of `prepared` as a sweep's input.
pub(crate) fn sweep_input<'a>(
    prepared: &'a crate::options::Prepared,
    options: &DataOptions,
) -> Result<SweepInput<'a>, String> {
    let data = &prepared.data;
    let values = data
        .values
        .as_slice()
        .ok_or("dataset values are not contiguous")?;
    let rows = Rows::new(values, data.values.ncols()).map_err(|e| e.to_string())?;
    Ok(SweepInput {
        rows,
        column_names: data.column_names.clone(),
        sha256: data.sha256.clone(),
        dropped_rows: data.dropped_rows,
        labels: data.labels.as_deref(),
        log_jacobian: prepared.log_jacobian(),
        standardised: options.standardise,
    })
}

/// What a finished sweep stores: the result document, the report, the models in the data's
/// own units and the reference profile. Shared by this pool and the cluster workers, so both
/// store the same bytes for the same outcome.
pub(crate) fn complete(
    outcome: &mixgauge_select::SweepOutcome,
    prepared: &crate::options::Prepared,
) -> Finish {
    let data = &prepared.data;
    let Some(values) = data.values.as_slice() else {
        return Finish::Failed("dataset values are not contiguous".into());
    };
    let report = match mixgauge_report::render_outcome(outcome, values, data.values.ncols()) {
        Ok(r) => r,
        Err(e) => return Finish::Failed(format!("the report could not be drawn: {e}")),
    };
    let mut models = Vec::with_capacity(outcome.models.len());
    for (choice, model) in &outcome.models {
        let in_units = match &prepared.standardizer {
            Some(s) => match to_data_units(model, s) {
                Ok(m) => m,
                Err(e) => {
                    return Finish::Failed(format!(
                        "the {} K={} model could not be put back in the data's units: {e}",
                        choice.covariance, choice.components
                    ));
                }
            },
            None => model.clone(),
        };
        let mut doc = ModelDocument::from_mixture(&in_units);
        doc.column_names = Some(data.column_names.clone());
        models.push(StoredModel {
            covariance: choice.covariance.to_string(),
            components: choice.components,
            document: doc.to_json(),
        });
    }
    let profile = match profile(outcome, prepared) {
        Ok(p) => p,
        Err(e) => return Finish::Failed(format!("the reference profile could not be built: {e}")),
    };
    match serde_json::to_string(&outcome.result) {
        Ok(result) => Finish::Succeeded {
            report,
            result,
            models,
            profile,
        },
        Err(e) => Finish::Failed(format!("the result could not be written: {e}")),
    }
}

/// The reference profile of the recommended model, in the data's units (as the CLI's
/// `sweep --profile` writes it); `None` when nothing is recommended.
fn profile(
    outcome: &mixgauge_select::SweepOutcome,
    prepared: &crate::options::Prepared,
) -> Result<Option<String>, String> {
    let Some((choice, heldout)) = &outcome.recommended_heldout else {
        return Ok(None);
    };
    let Some((_, model)) = outcome.models.iter().find(|(c, _)| c == choice) else {
        return Err("the recommended model is missing".into());
    };
    let data = &prepared.data;
    // Column summaries need the rows in their own units: undo the standardisation on a copy.
    let mut values = data.values.clone();
    let model = match &prepared.standardizer {
        Some(s) => {
            for mut row in values.rows_mut() {
                for (j, v) in row.iter_mut().enumerate() {
                    *v = s.means[j] + s.scales[j] * *v;
                }
            }
            to_data_units(model, s).map_err(|e| e.to_string())?
        }
        None => model.clone(),
    };
    let slice = values
        .as_slice()
        .ok_or("dataset values are not contiguous")?;
    let rows = Rows::new(slice, values.ncols()).map_err(|e| e.to_string())?;
    let mut document = ModelDocument::from_mixture(&model);
    document.column_names = Some(data.column_names.clone());
    mixgauge_gate::Profile::from_heldout(
        document,
        Some("heldout_one_se".into()),
        heldout,
        &rows,
        &data.column_names,
    )
    .map(|p| Some(p.to_json()))
    .map_err(|e| e.to_string())
}

/// `model` fitted on standardised rows, as a model of the data in its own units.
fn to_data_units(model: &Mixture, s: &Standardizer) -> Result<Mixture, mixgauge_engine::Error> {
    model.in_original_units(&s.means, &s.scales)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::store::{CreateOutcome, DatasetRecord, JobState, NewSweep, SqliteStore};

    /// A fresh store holding an 8-row dataset and one sweep over it, claimed as a worker would.
    async fn claimed_job(settings: SweepSettings) -> (tempfile::TempDir, AppState, SweepJob) {
        let dir = tempfile::tempdir().unwrap();
        let state = AppState::new(Arc::new(SqliteStore::open(dir.path()).unwrap()));
        let csv = b"a,b\n0,0\n1,1\n2,0\n3,1\n10,10\n11,11\n12,10\n13,11\n".to_vec();
        let meta = DatasetRecord {
            id: "ds-t".into(),
            rows: 8,
            incomplete_rows: 0,
            columns: 2,
            column_names: vec!["a".into(), "b".into()],
            sha256: "t".repeat(64),
            format: "csv".into(),
            created: 0,
        };
        state.store.put_dataset(meta, csv).await.unwrap();
        let new = NewSweep {
            dataset: "ds-t".into(),
            settings: serde_json::to_string(&settings).unwrap(),
            data: "{}".into(),
            idempotency_key: None,
            request_hash: "h".into(),
        };
        let CreateOutcome::Created(_) = state.store.create_sweep(new).await.unwrap() else {
            panic!("created")
        };
        let job = state
            .queue
            .as_ref()
            .unwrap()
            .claim_next()
            .await
            .unwrap()
            .unwrap();
        (dir, state, job)
    }

    fn small() -> SweepSettings {
        SweepSettings {
            components: vec![1, 2],
            folds: 2,
            restarts: 1,
            ..Default::default()
        }
    }

    /// A job whose cancel request is already in the store when its worker starts stops without
    /// a result and ends `cancelled`.
    #[tokio::test]
    async fn a_cancel_recorded_before_the_worker_starts_stops_the_sweep() {
        let (_dir, state, job) = claimed_job(small()).await;
        assert_eq!(
            state.store.request_cancel(job.id).await.unwrap(),
            Some(JobState::Running)
        );
        let id = job.id;
        run_job(&state, job).await;
        let done = state.store.get_sweep(id).await.unwrap().unwrap();
        assert_eq!(done.state, JobState::Cancelled);
        assert!(done.result.is_none());
        assert!(state.cancels.lock().unwrap().is_empty());
    }

    /// The same job without a cancel request succeeds, so the test above is not vacuous.
    #[tokio::test]
    async fn an_uncancelled_job_succeeds_through_run_job() {
        let (_dir, state, job) = claimed_job(small()).await;
        let id = job.id;
        run_job(&state, job).await;
        let done = state.store.get_sweep(id).await.unwrap().unwrap();
        assert_eq!(done.state, JobState::Succeeded, "{:?}", done.error);
        assert!(state.store.report(id).await.unwrap().is_some());
    }
}
