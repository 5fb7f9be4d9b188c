//! [`AppState`]: what every handler and worker shares — the store, limits, the wake-up signal
//! for idle workers and the cancellation flags of running sweeps.

use std::collections::HashMap;
use std::sync::atomic::AtomicBool;
use std::sync::{Arc, Mutex};

use tokio::sync::Notify;

use crate::store::Store;

/// Shared state of the service. Cheap to clone.
#[derive(Clone)]
pub struct AppState {
    pub(crate) store: Arc<dyn Store>,
    pub(crate) max_upload_bytes: usize,
    pub(crate) wake: Arc<Notify>,
    pub(crate) cancels: Arc<Mutex<HashMap<i64, Arc<AtomicBool>>>>,
}

impl AppState {
    /// Default upload limit: 512 MiB.
    pub const DEFAULT_MAX_UPLOAD_BYTES: usize = 512 * 1024 * 1024;

    /// State over `store`, with the default upload limit.
    pub fn new(store: Arc<dyn Store>) -> Self {
        AppState {
            store,
            max_upload_bytes: Self::DEFAULT_MAX_UPLOAD_BYTES,
            wake: Arc::new(Notify::new()),
            cancels: Arc::new(Mutex::new(HashMap::new())),
        }
    }

    /// Sets the largest accepted dataset upload in bytes. Default 512 MiB; larger bodies get 413.
    pub fn max_upload_bytes(mut self, limit: usize) -> Self {
        self.max_upload_bytes = limit;
        self
    }

    /// The store.
    pub fn store(&self) -> &Arc<dyn Store> {
        &self.store
    }

    /// Sets the cancel flag of a sweep running in this process; false if none is running.
    pub(crate) fn signal_cancel(&self, id: i64) -> bool {
        let map = self.cancels.lock().expect("cancel map lock poisoned");
        match map.get(&id) {
            Some(flag) => {
                flag.store(true, std::sync::atomic::Ordering::SeqCst);
                true
            }
            None => false,
        }
    }
}
