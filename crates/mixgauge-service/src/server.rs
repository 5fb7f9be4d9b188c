//! [`serve`] and [`run`]: the store, the workers and the router behind a TCP listener, with
//! graceful shutdown on Ctrl-C or SIGTERM. This is the service's edge, so it returns `anyhow`.

use std::net::SocketAddr;
use std::path::PathBuf;
use std::sync::Arc;
use std::time::Duration;

use anyhow::Context;

use crate::http::router;
use crate::state::{AppState, Limits};
use crate::store::SqliteStore;
use crate::worker::WorkerPool;

/// How long a shutdown waits for running sweeps to be handed back to the queue.
const SHUTDOWN_GRACE: Duration = Duration::from_secs(10);

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
    /// Sweeps run at the same time. Default 1.
    pub workers: usize,
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
    let store = SqliteStore::open(&config.data_dir)
        .with_context(|| format!("cannot open the store in {}", config.data_dir.display()))?;
    let state = AppState::new(Arc::new(store))
        .limits(config.limits)
        .tokens(config.tokens.clone())
        .cors_origins(config.cors_origins.clone());
    let listener = tokio::net::TcpListener::bind(config.listen)
        .await
        .with_context(|| format!("cannot listen on {}", config.listen))?;
    let pool = WorkerPool::start(&state, config.workers)
        .await
        .context("cannot re-queue interrupted sweeps")?;
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
    pool.stop(&shutdown_state, SHUTDOWN_GRACE).await;
    tracing::info!("stopped");
    Ok(())
}

/// Sets up logging (`RUST_LOG`, default `info`), runs [`serve`] on a new multi-thread runtime,
/// and returns without waiting for a sweep in progress (it is re-queued at the next start).
///
/// # Errors
/// As [`serve`], or if the runtime cannot be built.
pub fn run(config: ServeConfig) -> anyhow::Result<()> {
    let _ = tracing_subscriber::fmt()
        .with_env_filter(
            tracing_subscriber::EnvFilter::try_from_default_env()
                .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new("info")),
        )
        .with_writer(std::io::stderr)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .try_init();
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
        .context("cannot start the async runtime")?;
    let outcome = runtime.block_on(serve(config));
    runtime.shutdown_timeout(Duration::from_secs(1));
    outcome
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
