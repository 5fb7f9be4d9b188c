//! Integration tests of the engine against published results: Gibbs' inequality, the
//! differential entropy of the normal distribution, and the invariants EM must keep.

mod degenerate;
mod determinism;
mod optimum;
mod paths;
mod textbook;

use std::sync::{Mutex, MutexGuard};

/// Held by every test that forces a kernel path or compares bits between runs: the forced
/// path is process-wide, and tests run concurrently.
fn kernel_lock() -> MutexGuard<'static, ()> {
    static LOCK: Mutex<()> = Mutex::new(());
    LOCK.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}
