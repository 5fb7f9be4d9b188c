//! [`serve`] and [`run`]: the store, the workers and the router behind a TCP listener, with
//! graceful shutdown on Ctrl-C or SIGTERM. This is the service's edge, so it returns `anyhow`.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use anyhow::Context;

use crate::cluster::{ClusterWorkers, WorkerConfig, work};
use crate::http::router;
use crate::state::{AppState, Limits};
use crate::store::{PgStore, SqliteStore};
use crate::worker::WorkerPool;

/// How long a shutdown waits for running sweeps to be handed back to the queue.
const SHUTDOWN_GRACE: Duration = Duration::from_secs(10);

/// Lease of the fit-task loops inside `serve` (cluster store).
const CLUSTER_LEASE: Duration = Duration::from_secs(30);

/// `file://` URL of `DATA_DIR/blobs`, the blob location when none is given.
fn default_blobs(data_dir: &std::path::Path) -> anyhow::Result<String> {
    let dir = std::path::absolute(data_dir.join("blobs"))
        .with_context(|| format!("cannot resolve {}", data_dir.display()))?;
    url::Url::from_directory_path(&dir)
        .map(|u| u.to_string())
        .map_err(|()| anyhow::anyhow!("{} is not a usable directory", dir.display()))
}

/// `worker-host-pid`: the default name of a `mixgauge worker` process.
pub fn default_worker_name() -> String {
    worker_name("worker")
}

/// `prefix-host-pid`: a worker name that tells the operator where the work ran.
pub(crate) fn worker_name(prefix: &str) -> String {
    let host = std::fs::read_to_string("/proc/sys/kernel/hostname")
        .ok()
        .or_else(|| std::env::var("HOSTNAME").ok())
        .map(|h| h.trim().to_string())
        .filter(|h| !h.is_empty())
        .unwrap_or_else(|| "host".into());
    format!("{prefix}-{host}-{}", std::process::id())
}

/// A dataset to upload and a sweep to queue at start-up (`mixgauge serve --demo`).
#[derive(Clone, Debug)]
pub struct Preload {
    /// The dataset's bytes.
    pub bytes: Vec<u8>,
    /// Their format.
    pub format: mixgauge_data::Format,
    /// The sweep request's `settings` object.
    pub settings: serde_json::Map<String, serde_json::Value>,
    /// How the sweep reads the dataset.
    pub data: crate::options::DataOptions,
}

/// How to run the service.
#[derive(Clone, Debug)]
pub struct ServeConfig {
    /// Address to listen on. Default `127.0.0.1:8080`.
    pub listen: SocketAddr,
    /// Folder of the database and dataset files; created if missing. Default `mixgauge-data`.
    pub data_dir: PathBuf,
    /// Sweeps run at the same time (embedded store), or fit-task loops in this process
    /// (cluster store; 0 leaves all fitting to `mixgauge worker` processes). Default 1.
    pub workers: usize,
    /// `postgres://…` URL of the cluster store; `None` for the embedded store in `data_dir`.
    pub store: Option<String>,
    /// Where the cluster store keeps dataset bytes (`file:///dir` or `s3://bucket/prefix`);
    /// `None` for `DATA_DIR/blobs`.
    pub blobs: Option<String>,
    /// Upload, row, column, candidate and time limits.
    pub limits: Limits,
    /// Accepted bearer tokens; empty turns access control off.
    pub tokens: Vec<String>,
    /// Origins allowed to call the API from a browser; empty sends no CORS headers.
    pub cors_origins: Vec<String>,
    /// Uploaded and queued at start-up, unless the same request was queued before.
    pub preload: Option<Preload>,
}

impl Default for ServeConfig {
    fn default() -> Self {
        ServeConfig {
            listen: SocketAddr::from(([127, 0, 0, 1], 8080)),
            data_dir: PathBuf::from("mixgauge-data"),
            workers: 1,
            store: None,
            blobs: None,
            limits: Limits::default(),
            tokens: Vec::new(),
            cors_origins: Vec::new(),
            preload: None,
        }
    }
}

/// Serves until Ctrl-C or SIGTERM.
///
/// # Errors
/// If the store cannot be opened, the address cannot be bound, or the server fails.
pub async fn serve(config: ServeConfig) -> anyhow::Result<()> {
    let (state, cluster) = match &config.store {
        None => {
            let store = SqliteStore::open(&config.data_dir).with_context(|| {
                format!("cannot open the store in {}", config.data_dir.display())
            })?;
            (AppState::new(Arc::new(store)), None)
        }
        Some(url) => {
            let location = match &config.blobs {
                Some(b) => b.clone(),
                None => default_blobs(&config.data_dir)?,
            };
            let blobs = crate::store::Blobs::open(&location)
                .with_context(|| format!("cannot open the blob store {location}"))?;
            let store = Arc::new(
                PgStore::connect(url, blobs)
                    .await
                    .context("cannot open the cluster store")?,
            );
            (AppState::cluster(store.clone()), Some(store))
        }
    };
    let state = state
        .limits(config.limits)
        .tokens(config.tokens.clone())
        .cors_origins(config.cors_origins.clone());
    let listener = tokio::net::TcpListener::bind(config.listen)
        .await
        .with_context(|| format!("cannot listen on {}", config.listen))?;
    let (pool, loops) = match cluster {
        None => (
            Some(
                WorkerPool::start(&state, config.workers)
                    .await
                    .context("cannot re-queue interrupted sweeps")?,
            ),
            None,
        ),
        Some(_) if config.workers == 0 => (None, None),
        Some(store) => (
            None,
            Some(ClusterWorkers::start(
                store,
                &worker_name("api"),
                config.workers,
                CLUSTER_LEASE,
            )),
        ),
    };
    if let Some(p) = config.preload {
        let id = crate::http::preload(&state, p)
            .await
            .map_err(|e| anyhow::anyhow!("cannot queue the start-up sweep: {e}"))?;
        tracing::info!(sweep = %id, "start-up sweep queued; open the page to watch it");
    }
    let shutdown_state = state.clone();
    tracing::info!(listen = %config.listen, data_dir = %config.data_dir.display(), "serving");
    axum::serve(listener, router(state))
        .with_graceful_shutdown(shutdown_signal())
        .await
        .context("the server failed")?;
    if let Some(pool) = pool {
        pool.stop(&shutdown_state, SHUTDOWN_GRACE).await;
    }
    if let Some(loops) = loops {
        loops.stop(SHUTDOWN_GRACE).await;
    }
    tracing::info!("stopped");
    Ok(())
}

/// Sets up logging (`RUST_LOG`, default `info`), runs [`serve`] on a new multi-thread runtime,
/// and returns without waiting for a sweep in progress (it is re-queued at the next start).
///
/// # Errors
/// As [`serve`], or if the runtime cannot be built.
pub fn run(config: ServeConfig) -> anyhow::Result<()> {
    init_logging();
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    let outcome = runtime.block_on(serve(config));
    runtime.shutdown_timeout(Duration::from_secs(1));
    outcome
}

/// Sets up logging and runs one cluster worker ([`work`]) until Ctrl-C or SIGTERM; on either
/// it hands its unfinished task back.
///
/// # Errors
/// As [`work`], or if the runtime cannot be built.
pub fn run_worker(config: WorkerConfig) -> anyhow::Result<()> {
    init_logging();
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    let outcome = runtime.block_on(work(config, shutdown_signal()));
    runtime.shutdown_timeout(Duration::from_secs(1));
    outcome
}

fn init_logging() {
    let _ = tracing_subscriber::fmt()
        .with_env_filter(
            tracing_subscriber::EnvFilter::try_from_default_env()
                .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info")),
        )
        .with_writer(std::io::stderr)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .try_init();
}

async fn shutdown_signal() {
    let ctrl_c = async {
        if let Err(e) = tokio::signal::ctrl_c().await {
            tracing::error!(error = %e, "cannot listen for Ctrl-C");
            std::future::pending::<()>().await;
        }
    };
    #[cfg(unix)]
    let terminate = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(e) => {
                tracing::error!(error = %e, "cannot listen for SIGTERM");
                std::future::pending::<()>().await;
            }
        }
    };
    #[cfg(not(unix))]
    let terminate = std::future::pending::<()>();
    tokio::select! {
        _ = ctrl_c => {}
        _ = terminate => {}
    }
    tracing::info!("shutting down");
}
