//! [`AppState`]: what every handler and worker shares — the store, limits, access tokens,
//! counters, the wake-up signal for idle workers and the cancellation flags of running sweeps.

use std::collections::HashMap;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;

use tokio::sync::Notify;

use crate::metrics::Metrics;
use crate::options::ReadLimits;
use crate::store::{LocalQueue, Store};

/// What the service accepts. Every limit answers a clear 413 or 422 when crossed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Limits {
    /// Largest dataset upload, bytes. Default 512 MiB.
    pub upload_bytes: usize,
    /// Largest dataset, rows and columns. Default 10^7 rows, 512 columns.
    pub read: ReadLimits,
    /// Most candidates (covariance forms × component counts) in one sweep. Default 200.
    pub candidates: usize,
    /// Longest a request may take before it is answered 408. Default 30 s.
    pub request_timeout: Duration,
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            upload_bytes: 512 * 1024 * 1024,
            read: ReadLimits {
                rows: 10_000_000,
                columns: 512,
            },
            candidates: 200,
            request_timeout: Duration::from_secs(30),
        }
    }
}

/// Shared state of the service. Cheap to clone.
#[derive(Clone)]
pub struct AppState {
    pub(crate) store: Arc<dyn Store>,
    /// The whole-sweep queue, when the store has one (the embedded store); a cluster store
    /// has none: its sweeps are split into fit tasks for `mixgauge worker` processes.
    pub(crate) queue: Option<Arc<dyn LocalQueue>>,
    pub(crate) limits: Limits,
    pub(crate) tokens: Arc<Vec<Vec<u8>>>,
    pub(crate) cors_origins: Arc<Vec<String>>,
    pub(crate) metrics: Arc<Metrics>,
    pub(crate) wake: Arc<Notify>,
    pub(crate) cancels: Arc<Mutex<HashMap<i64, Arc<AtomicBool>>>>,
    pub(crate) shutting_down: Arc<AtomicBool>,
}

impl AppState {
    /// Default upload limit: 512 MiB.
    pub const DEFAULT_MAX_UPLOAD_BYTES: usize = 512 * 1024 * 1024;

    /// State over a store that runs sweeps whole in this process (the embedded store), with
    /// the default limits, no access tokens and no CORS.
    pub fn new<S: LocalQueue + 'static>(store: Arc<S>) -> Self {
        let queue: Arc<dyn LocalQueue> = store.clone();
        let mut state = Self::cluster(store);
        state.queue = Some(queue);
        state
    }

    /// State over a store whose sweeps are fitted by separate worker processes (the cluster
    /// store): this process serves the API and runs no sweep itself.
    pub fn cluster(store: Arc<dyn Store>) -> Self {
        AppState {
            store,
            queue: None,
            limits: Limits::default(),
            tokens: Arc::new(Vec::new()),
            cors_origins: Arc::new(Vec::new()),
            metrics: Arc::new(Metrics::default()),
            wake: Arc::new(Notify::new()),
            cancels: Arc::new(Mutex::new(HashMap::new())),
            shutting_down: Arc::new(AtomicBool::new(false)),
        }
    }

    /// Sets the largest accepted dataset upload in bytes; larger bodies get 413.
    pub fn max_upload_bytes(mut self, limit: usize) -> Self {
        self.limits.upload_bytes = limit;
        self
    }

    /// Sets every limit.
    pub fn limits(mut self, limits: Limits) -> Self {
        self.limits = limits;
        self
    }

    /// Requires `Authorization: Bearer <token>` with one of `tokens` on every endpoint but the
    /// health checks and the page. An empty list turns access control off.
    pub fn tokens(mut self, tokens: Vec<String>) -> Self {
        self.tokens = Arc::new(tokens.into_iter().map(String::into_bytes).collect());
        self
    }

    /// Allows cross-origin requests from these origins. Empty (the default): no CORS headers.
    pub fn cors_origins(mut self, origins: Vec<String>) -> Self {
        self.cors_origins = Arc::new(origins);
        self
    }

    /// The store.
    pub fn store(&self) -> &Arc<dyn Store> {
        &self.store
    }

    /// The whole-sweep queue, when the store runs sweeps in this process.
    pub fn queue(&self) -> Option<&Arc<dyn LocalQueue>> {
        self.queue.as_ref()
    }

    /// Sets the cancel flag of a sweep running in this process; false if none is running.
    pub(crate) fn signal_cancel(&self, id: i64) -> bool {
        let map = self.cancels.lock().expect("cancel map lock poisoned");
        match map.get(&id) {
            Some(flag) => {
                flag.store(true, Ordering::SeqCst);
                true
            }
            None => false,
        }
    }

    /// Marks the process as shutting down and stops every running sweep; their workers put
    /// them back in the queue.
    pub(crate) fn begin_shutdown(&self) {
        self.shutting_down.store(true, Ordering::SeqCst);
        let map = self.cancels.lock().expect("cancel map lock poisoned");
        for flag in map.values() {
            flag.store(true, Ordering::SeqCst);
        }
    }
}
