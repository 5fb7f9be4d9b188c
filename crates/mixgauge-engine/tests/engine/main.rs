//! Integration tests of the engine against published results: Gibbs' inequality, the
//! differential entropy of the normal distribution, and the invariants EM must keep.

mod degenerate;
mod determinism;
mod optimum;
mod paths;
mod textbook;

use std::sync::{Mutex, MutexGuard};

use mixgauge_engine::{Fit, FitOptions, ModelDocument, Rows, fit};

/// A fit's parameters as text: the document prints every number in shortest round-trip form,
/// so equal text ⇔ equal bits.
fn bits(f: &Fit) -> String {
    ModelDocument::from_fit(f, 0).to_json()
}

/// Fits `data` on a rayon pool of `threads` threads.
fn fit_with_threads(threads: usize, data: &[f64], d: usize, options: &FitOptions) -> Fit {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .unwrap();
    pool.install(|| fit(&Rows::new(data, d).unwrap(), options).unwrap())
}

/// Held by every test that forces a kernel path or compares bits between runs: the forced
/// path is process-wide, and tests run concurrently.
fn kernel_lock() -> MutexGuard<'static, ()> {
    static LOCK: Mutex<()> = Mutex::new(());
    LOCK.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}
