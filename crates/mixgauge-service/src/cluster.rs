//! Cluster workers: processes on any host that take a sweep's fits from the PostgreSQL store
//! one task at a time (`mixgauge worker`, or `mixgauge serve --store postgres://…` with
//! `--workers` above 0).
//!
//! Each loop turn a worker leases one fit task, and looks for sweep-level work — a queued sweep
//! to split into fit tasks, or a sweep whose every task has reported, to assemble — when it has
//! no task, right after reporting a sweep's last one, and at least once a second. While it works it renews its lease every third of the lease time; a renewal that fails
//! (the lease ran out and another worker took the work, or the sweep was cancelled) stops the
//! fit. The plan is rebuilt from the dataset and settings by every worker that needs it — it is
//! deterministic — and kept for the next task of the same sweep, so a dataset is read once per
//! worker, not once per task. Fits go to the store as model documents, which read back bit for
//! bit, so the assembled result is byte-identical to a single-process sweep with the same seed.

use std::net::SocketAddr;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use anyhow::Context;
use axum::Router;
use axum::extract::State;
use axum::http::StatusCode;
use axum::response::IntoResponse;
use axum::routing::get;
use mixgauge_engine::{Error as EngineError, ModelDocument};
use mixgauge_select::{SweepPlan, SweepSettings};
use tokio::sync::watch;
use tokio::task::JoinHandle;

use crate::error::StoreError;
use crate::options::{DataOptions, Prepared, ReadLimits, prepare};
use crate::store::postgres::{NewTask, Reported, SweepClaim, SweepPhase, TaskClaim, TaskOutcome};
use crate::store::{Finish, PgStore, Store, SweepJob};
use crate::worker::{JobInputs, complete, read_job, sweep_input};

/// How long an idle worker waits before looking for work again.
const IDLE_POLL: Duration = Duration::from_millis(200);

/// Longest a busy worker goes without looking for sweep-level work.
const SWEEP_CHECK: Duration = Duration::from_secs(1);

/// Sweeps whose plan and rows a worker keeps in memory.
const KEPT_SWEEPS: usize = 2;

/// Counters of one worker process, shown on its `/metrics`.
#[derive(Debug, Default)]
pub struct WorkerStats {
    tasks: AtomicU64,
    refused: AtomicU64,
    claim_micros: AtomicU64,
    report_micros: AtomicU64,
    fit_micros: AtomicU64,
    sweeps_planned: AtomicU64,
    sweeps_assembled: AtomicU64,
}

impl WorkerStats {
    fn add(counter: &AtomicU64, d: Duration) {
        counter.fetch_add(d.as_micros() as u64, Ordering::Relaxed);
    }

    /// Prometheus text.
    pub fn render(&self) -> String {
        let secs = |c: &AtomicU64| c.load(Ordering::Relaxed) as f64 / 1e6;
        let n = |c: &AtomicU64| c.load(Ordering::Relaxed);
        format!(
            "# HELP mixgauge_worker_tasks_total Fit tasks this worker reported and the store took.\n\
             # TYPE mixgauge_worker_tasks_total counter\n\
             mixgauge_worker_tasks_total {}\n\
             # HELP mixgauge_worker_refused_total Reports the store refused (the lease was lost).\n\
             # TYPE mixgauge_worker_refused_total counter\n\
             mixgauge_worker_refused_total {}\n\
             # HELP mixgauge_worker_claim_seconds_total Time spent leasing fit tasks and looking for sweep-level work.\n\
             # TYPE mixgauge_worker_claim_seconds_total counter\n\
             mixgauge_worker_claim_seconds_total {}\n\
             # HELP mixgauge_worker_report_seconds_total Time spent recording fit outcomes.\n\
             # TYPE mixgauge_worker_report_seconds_total counter\n\
             mixgauge_worker_report_seconds_total {}\n\
             # HELP mixgauge_worker_fit_seconds_total Time spent fitting.\n\
             # TYPE mixgauge_worker_fit_seconds_total counter\n\
             mixgauge_worker_fit_seconds_total {}\n\
             # HELP mixgauge_worker_sweeps_planned_total Sweeps this worker split into tasks.\n\
             # TYPE mixgauge_worker_sweeps_planned_total counter\n\
             mixgauge_worker_sweeps_planned_total {}\n\
             # HELP mixgauge_worker_sweeps_assembled_total Sweeps whose result this worker built.\n\
             # TYPE mixgauge_worker_sweeps_assembled_total counter\n\
             mixgauge_worker_sweeps_assembled_total {}\n",
            n(&self.tasks),
            n(&self.refused),
            secs(&self.claim_micros),
            secs(&self.report_micros),
            secs(&self.fit_micros),
            n(&self.sweeps_planned),
            n(&self.sweeps_assembled),
        )
    }
}

/// A sweep as a worker needs it: its rows, settings and plan.
struct Loaded {
    prepared: Prepared,
    options: DataOptions,
    settings: SweepSettings,
    plan: SweepPlan,
}

/// Recently used sweeps, oldest first.
type KeptSweeps = Vec<(i64, Arc<Loaded>)>;

/// Why a sweep cannot be worked on: the reason its job fails with.
struct Unusable(String);

/// One worker loop's view of the cluster.
#[derive(Clone)]
struct Worker {
    store: Arc<PgStore>,
    name: String,
    lease: Duration,
    limits: ReadLimits,
    kept: Arc<Mutex<KeptSweeps>>,
    stats: Arc<WorkerStats>,
    /// Set after reporting a sweep's last task: look for its assembly next.
    sweep_due: Arc<AtomicBool>,
    /// When this loop last looked for sweep-level work.
    sweep_checked: Arc<Mutex<Instant>>,
}

/// How to run one worker process.
#[derive(Clone, Debug)]
pub struct WorkerConfig {
    /// `postgres://…` URL of the cluster store.
    pub store: String,
    /// Location of the dataset blobs (`file:///dir` or `s3://bucket/prefix`).
    pub blobs: String,
    /// Local folder for fetched datasets.
    pub cache: std::path::PathBuf,
    /// How long a lease lasts without a renewal.
    pub lease: Duration,
    /// This worker's name in the store (host name and process id by default).
    pub name: String,
    /// Address of the health and metrics endpoints, if any.
    pub health_listen: Option<SocketAddr>,
    /// Fit tasks worked on at once in this process. Default 1: a fit uses every core.
    pub loops: usize,
}

/// Worker loops running on the current runtime.
pub struct ClusterWorkers {
    shutdown: watch::Sender<bool>,
    handles: Vec<JoinHandle<()>>,
    /// Counters shared by the loops.
    pub stats: Arc<WorkerStats>,
}

impl ClusterWorkers {
    /// Starts `loops` worker loops on `store`, named `name` when there is one, else
    /// `name-1`, `name-2`, ….
    pub fn start(store: Arc<PgStore>, name: &str, loops: usize, lease: Duration) -> Self {
        let stats = Arc::new(WorkerStats::default());
        let kept = Arc::new(Mutex::new(Vec::new()));
        let (shutdown, rx) = watch::channel(false);
        let handles = (0..loops)
            .map(|i| {
                let w = Worker {
                    store: Arc::clone(&store),
                    name: if loops == 1 {
                        name.to_string()
                    } else {
                        format!("{name}-{}", i + 1)
                    },
                    lease,
                    limits: crate::state::Limits::default().read,
                    kept: Arc::clone(&kept),
                    stats: Arc::clone(&stats),
                    sweep_due: Arc::new(AtomicBool::new(true)),
                    sweep_checked: Arc::new(Mutex::new(Instant::now())),
                };
                tokio::spawn(w.run(rx.clone()))
            })
            .collect();
        ClusterWorkers {
            shutdown,
            handles,
            stats,
        }
    }

    /// Stops taking work, stops the fits in progress and hands their tasks back, waiting up
    /// to `grace`. A loop still busy after that is abandoned; its lease runs out.
    pub async fn stop(self, grace: Duration) {
        let _ = self.shutdown.send(true);
        let deadline = tokio::time::Instant::now() + grace;
        for mut h in self.handles {
            if tokio::time::timeout_at(deadline, &mut h).await.is_err() {
                tracing::warn!("a worker loop did not stop in time; its lease will run out");
                h.abort();
            }
        }
    }
}

impl Worker {
    async fn run(self, mut shutdown: watch::Receiver<bool>) {
        tracing::info!(worker = %self.name, "worker started");
        loop {
            if *shutdown.borrow() {
                break;
            }
            let busy = match self.turn(&shutdown).await {
                Ok(busy) => busy,
                Err(e) => {
                    tracing::error!(worker = %self.name, error = %e, "store call failed; retrying");
                    false
                }
            };
            if !busy {
                tokio::select! {
                    _ = shutdown.changed() => {}
                    _ = tokio::time::sleep(IDLE_POLL) => {}
                }
            }
        }
        tracing::info!(worker = %self.name, "worker stopped");
    }

    /// One piece of work; false when there was none.
    ///
    /// Fit tasks come first: looking for sweep-level work costs a round trip, so a busy worker
    /// does it only when it runs out of tasks, right after it reported a sweep's last task
    /// (so the result is built at once), or every [`SWEEP_CHECK`] (so a newly queued sweep is
    /// split while an older one is still being fitted).
    async fn turn(&self, shutdown: &watch::Receiver<bool>) -> Result<bool, StoreError> {
        let due = self.sweep_due.swap(false, Ordering::Relaxed)
            || self
                .sweep_checked
                .lock()
                .expect("sweep check lock")
                .elapsed()
                >= SWEEP_CHECK;
        if due && self.sweep_turn().await? {
            return Ok(true);
        }
        let started = Instant::now();
        let claim = self.store.claim_task(&self.name, self.lease).await?;
        WorkerStats::add(&self.stats.claim_micros, started.elapsed());
        match claim {
            Some(task) => {
                self.fit_task(task, shutdown).await?;
                Ok(true)
            }
            None if !due => self.sweep_turn().await,
            None => Ok(false),
        }
    }

    /// Claims and does one piece of sweep-level work, if there is any.
    async fn sweep_turn(&self) -> Result<bool, StoreError> {
        *self.sweep_checked.lock().expect("sweep check lock") = Instant::now();
        let started = Instant::now();
        let claim = self.store.claim_sweep(&self.name, self.lease).await?;
        WorkerStats::add(&self.stats.claim_micros, started.elapsed());
        match claim {
            Some(claim) => {
                self.sweep_work(claim).await?;
                Ok(true)
            }
            None => Ok(false),
        }
    }

    /// Renews a lease every third of its length until dropped; sets `lost` if a renewal fails.
    fn keep_alive<F, Fut>(&self, lost: Arc<AtomicBool>, renew: F) -> JoinHandle<()>
    where
        F: Fn() -> Fut + Send + 'static,
        Fut: std::future::Future<Output = Result<bool, StoreError>> + Send,
    {
        let every = self.lease / 3;
        tokio::spawn(async move {
            loop {
                tokio::time::sleep(every).await;
                match renew().await {
                    Ok(true) => {}
                    Ok(false) => {
                        lost.store(true, Ordering::SeqCst);
                        return;
                    }
                    // A missed renewal is not yet a lost lease: try again next time.
                    Err(e) => tracing::warn!(error = %e, "cannot renew a lease"),
                }
            }
        })
    }

    /// A sweep this worker has loaded before.
    fn kept(&self, sweep: i64) -> Option<Arc<Loaded>> {
        self.kept
            .lock()
            .expect("kept sweeps lock")
            .iter()
            .find(|(id, _)| *id == sweep)
            .map(|(_, l)| Arc::clone(l))
    }

    async fn load(&self, job: &SweepJob) -> Result<Result<Arc<Loaded>, Unusable>, StoreError> {
        if let Some(l) = self.kept(job.id) {
            return Ok(Ok(l));
        }
        let JobInputs {
            bytes,
            format,
            settings,
            options,
        } = match read_job(self.store.as_ref(), job).await? {
            Ok(inputs) => inputs,
            Err(why) => return Ok(Err(Unusable(why))),
        };
        let limits = self.limits;
        let built = tokio::task::spawn_blocking(move || -> Result<Loaded, Unusable> {
            let prepared =
                prepare(&bytes, format, &options, &limits).map_err(|e| Unusable(e.to_string()))?;
            let plan = {
                let input = sweep_input(&prepared, &options).map_err(Unusable)?;
                SweepPlan::new(&input, &settings).map_err(|e| Unusable(e.to_string()))?
            };
            Ok(Loaded {
                prepared,
                options,
                settings,
                plan,
            })
        })
        .await
        .map_err(|e| StoreError::Task(format!("loading sweep {}: {e}", job.id)))?;
        Ok(built.map(|l| {
            let l = Arc::new(l);
            let mut kept = self.kept.lock().expect("kept sweeps lock");
            kept.push((job.id, Arc::clone(&l)));
            if kept.len() > KEPT_SWEEPS {
                kept.remove(0);
            }
            l
        }))
    }

    async fn sweep_work(&self, claim: SweepClaim) -> Result<(), StoreError> {
        let id = claim.job.id;
        let lost = Arc::new(AtomicBool::new(false));
        let (store, token, lease) = (Arc::clone(&self.store), claim.token, self.lease);
        let beat = self.keep_alive(Arc::clone(&lost), move || {
            let store = Arc::clone(&store);
            async move { store.renew_sweep(id, token, lease).await }
        });
        let outcome = self.sweep_phase(&claim).await;
        beat.abort();
        let how = match outcome? {
            Ok(None) => return Ok(()),
            Ok(Some(how)) => how,
            Err(Unusable(why)) => Finish::Failed(why),
        };
        let label = match &how {
            Finish::Succeeded { .. } => "succeeded",
            Finish::Failed(_) => "failed",
            Finish::Cancelled => "cancelled",
        };
        if self.store.finish_claimed(&claim, how).await? {
            tracing::info!(worker = %self.name, sweep = id, state = label, "sweep finished");
        } else {
            tracing::warn!(worker = %self.name, sweep = id, "lost the sweep before finishing it");
        }
        Ok(())
    }

    /// Plans or assembles; `Ok(None)` when planning published the tasks (the sweep goes on).
    async fn sweep_phase(
        &self,
        claim: &SweepClaim,
    ) -> Result<Result<Option<Finish>, Unusable>, StoreError> {
        let id = claim.job.id;
        let loaded = match self.load(&claim.job).await? {
            Ok(l) => l,
            Err(u) => return Ok(Err(u)),
        };
        match claim.phase {
            SweepPhase::Planning => {
                let fits = loaded.plan.fits();
                let mut priority = vec![0; fits.len()];
                for (rank, &t) in loaded.plan.order().iter().enumerate() {
                    priority[t] = rank;
                }
                let tasks: Vec<NewTask> = fits
                    .iter()
                    .enumerate()
                    .map(|(t, f)| NewTask {
                        task: t,
                        priority: priority[t],
                        covariance: f.choice.covariance.to_string(),
                        components: f.choice.components,
                        fold: f.fold,
                        restart: f.restart,
                    })
                    .collect();
                if self.store.publish_plan(id, claim.token, &tasks).await? {
                    self.stats.sweeps_planned.fetch_add(1, Ordering::Relaxed);
                    tracing::info!(worker = %self.name, sweep = id, tasks = tasks.len(), "sweep split into fit tasks");
                } else {
                    tracing::warn!(worker = %self.name, sweep = id, "lost the sweep while planning it");
                }
                Ok(Ok(None))
            }
            SweepPhase::Assembling => {
                let Some(outcomes) = self.store.task_outcomes(id).await? else {
                    return Err(StoreError::Corrupt(format!(
                        "sweep {id} was claimed for assembly with unfinished tasks"
                    )));
                };
                let how = tokio::task::spawn_blocking(move || assemble(&loaded, outcomes))
                    .await
                    .map_err(|e| StoreError::Task(format!("assembling sweep {id}: {e}")))?;
                self.stats.sweeps_assembled.fetch_add(1, Ordering::Relaxed);
                Ok(Ok(Some(how)))
            }
        }
    }

    async fn fit_task(
        &self,
        claim: TaskClaim,
        shutdown: &watch::Receiver<bool>,
    ) -> Result<(), StoreError> {
        let loaded = match self.kept(claim.sweep) {
            Some(l) => Ok(l),
            None => match self.store.get_sweep(claim.sweep).await? {
                Some(job) => self.load(&job).await?,
                None => return Ok(()),
            },
        };
        let loaded = match loaded {
            Ok(l) => l,
            Err(Unusable(why)) => {
                // Planning read the same dataset without complaint; report it as the fit's
                // failure so the sweep still ends.
                let outcome = TaskOutcome::Failed(why);
                self.store
                    .report_task(&claim, outcome, Duration::ZERO)
                    .await?;
                return Ok(());
            }
        };
        let stop = Arc::new(AtomicBool::new(false));
        let lost = Arc::new(AtomicBool::new(false));
        let (store, lease) = (Arc::clone(&self.store), self.lease);
        let beat = self.keep_alive(Arc::clone(&lost), move || {
            let store = Arc::clone(&store);
            async move { store.renew_task(&claim, lease).await }
        });
        // Stop the fit when the lease is lost or the process is asked to stop.
        let watcher = {
            let (stop, lost) = (Arc::clone(&stop), Arc::clone(&lost));
            let mut shutdown = shutdown.clone();
            tokio::spawn(async move {
                loop {
                    if *shutdown.borrow() || lost.load(Ordering::SeqCst) {
                        stop.store(true, Ordering::SeqCst);
                        return;
                    }
                    tokio::select! {
                        _ = shutdown.changed() => {}
                        _ = tokio::time::sleep(Duration::from_millis(100)) => {}
                    }
                }
            })
        };
        let started = Instant::now();
        let fitted = {
            let (loaded, stop) = (Arc::clone(&loaded), Arc::clone(&stop));
            tokio::task::spawn_blocking(move || {
                let input =
                    sweep_input(&loaded.prepared, &loaded.options).map_err(EngineError::Model)?;
                let fit = loaded.plan.fit(&input, &loaded.settings, claim.task, &|| {
                    stop.load(Ordering::Relaxed)
                })?;
                Ok::<_, EngineError>(ModelDocument::from_fit(&fit, loaded.settings.seed))
            })
            .await
            .map_err(|e| StoreError::Task(format!("fit task: {e}")))?
        };
        let took = started.elapsed();
        WorkerStats::add(&self.stats.fit_micros, took);
        beat.abort();
        watcher.abort();
        let outcome = match fitted {
            Ok(doc) => TaskOutcome::Fitted(
                serde_json::to_string(&doc)
                    .map_err(|e| StoreError::Corrupt(format!("model document: {e}")))?,
            ),
            Err(EngineError::Cancelled) => {
                if !lost.load(Ordering::SeqCst) && self.store.release_task(&claim).await? {
                    tracing::info!(worker = %self.name, sweep = claim.sweep, task = claim.task, "fit task handed back");
                }
                return Ok(());
            }
            Err(e) => TaskOutcome::Failed(loaded.plan.failure(claim.task, &e)),
        };
        let started = Instant::now();
        let reported = self.store.report_task(&claim, outcome, took).await?;
        WorkerStats::add(&self.stats.report_micros, started.elapsed());
        match reported {
            Reported::Recorded { done, total } => {
                self.stats.tasks.fetch_add(1, Ordering::Relaxed);
                if done >= total {
                    self.sweep_due.store(true, Ordering::Relaxed);
                }
                tracing::debug!(worker = %self.name, sweep = claim.sweep, task = claim.task, done, total, "fit task done");
            }
            Reported::Refused => {
                self.stats.refused.fetch_add(1, Ordering::Relaxed);
                tracing::warn!(worker = %self.name, sweep = claim.sweep, task = claim.task, "the store refused the result: the lease was lost");
            }
        }
        Ok(())
    }
}

/// Builds a sweep's stored outcome from its tasks' outcomes.
fn assemble(loaded: &Loaded, outcomes: Vec<TaskOutcome>) -> Finish {
    let mut results = Vec::with_capacity(outcomes.len());
    for (t, o) in outcomes.into_iter().enumerate() {
        results.push(match o {
            TaskOutcome::Fitted(text) => {
                match ModelDocument::from_json(&text).and_then(|d| d.to_fit()) {
                    Ok(fit) => Ok(fit),
                    Err(e) => {
                        return Finish::Failed(format!(
                            "the stored result of fit {t} cannot be read: {e}"
                        ));
                    }
                }
            }
            TaskOutcome::Failed(why) => Err(why),
        });
    }
    let input = match sweep_input(&loaded.prepared, &loaded.options) {
        Ok(i) => i,
        Err(e) => return Finish::Failed(e),
    };
    match loaded.plan.assemble(&input, &loaded.settings, results) {
        Ok(outcome) => complete(&outcome, &loaded.prepared),
        Err(e) => Finish::Failed(e.to_string()),
    }
}

async fn healthz() -> &'static str {
    "ok"
}

async fn readyz(State((store, _)): State<(Arc<PgStore>, Arc<WorkerStats>)>) -> impl IntoResponse {
    match store.ping().await {
        Ok(()) => (StatusCode::OK, "ready"),
        Err(e) => {
            tracing::warn!(error = %e, "not ready: the store does not answer");
            (StatusCode::SERVICE_UNAVAILABLE, "the store does not answer")
        }
    }
}

async fn metrics(State((_, stats)): State<(Arc<PgStore>, Arc<WorkerStats>)>) -> impl IntoResponse {
    (
        [("content-type", "text/plain; version=0.0.4")],
        stats.render(),
    )
}

/// Runs one worker process until `stop` resolves: connects, serves the health endpoints if
/// asked, runs the loops, and on stop hands unfinished tasks back.
///
/// # Errors
/// If the store or the blob location cannot be opened, or the health address cannot be bound.
pub async fn work(
    config: WorkerConfig,
    stop: impl std::future::Future<Output = ()>,
) -> anyhow::Result<()> {
    let blobs = crate::store::Blobs::open(&config.blobs)
        .and_then(|b| b.with_cache(&config.cache))
        .with_context(|| format!("cannot open the blob store {}", config.blobs))?;
    let store = Arc::new(
        PgStore::connect(&config.store, blobs)
            .await
            .context("cannot open the cluster store")?,
    );
    let workers = ClusterWorkers::start(
        Arc::clone(&store),
        &config.name,
        config.loops.max(1),
        config.lease,
    );
    let health = match config.health_listen {
        Some(addr) => {
            let listener = tokio::net::TcpListener::bind(addr)
                .await
                .with_context(|| format!("cannot listen on {addr}"))?;
            let app = Router::new()
                .route("/healthz", get(healthz))
                .route("/readyz", get(readyz))
                .route("/metrics", get(metrics))
                .with_state((Arc::clone(&store), Arc::clone(&workers.stats)));
            tracing::info!(listen = %addr, "worker health endpoints");
            Some(tokio::spawn(async move {
                let _ = axum::serve(listener, app).await;
            }))
        }
        None => None,
    };
    tracing::info!(worker = %config.name, blobs = %config.blobs, lease_seconds = config.lease.as_secs_f64(), "working");
    stop.await;
    let stats = Arc::clone(&workers.stats);
    workers.stop(config.lease).await;
    if let Some(h) = health {
        h.abort();
    }
    tracing::info!(summary = %stats.render().lines().filter(|l| !l.starts_with('#')).collect::<Vec<_>>().join(", "), "worker stopped");
    Ok(())
}
