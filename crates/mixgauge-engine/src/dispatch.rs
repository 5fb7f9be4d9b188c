//! Chooses, once per process, which compiled variant of the block kernels runs.
//!
//! The kernels are written once in portable Rust ([`crate::kernel`]) and inlined into
//! variants compiled with wider vector instruction sets enabled. No variant uses fused
//! multiply-add (Rust never contracts `a * b + c`), and every sum runs in the same order, so
//! all variants compute the same IEEE operations and return bit-identical results; the wider
//! ones are only faster. `MIXGAUGE_KERNEL=portable` forces the portable variant (for tests and
//! benchmarks); otherwise AVX2 runs wherever the CPU has it.
//!
//! (Enabling AVX-512 the same way was measured slower than AVX2 on this code: left to the
//! compiler, 8-lane tiles do not map well onto 512-bit registers. Explicit kernels per
//! instruction set are the next step.)

use std::sync::OnceLock;
use std::sync::atomic::{AtomicU8, Ordering};

use crate::kernel::{PassStats, fit_block_body, score_block_body};
use crate::model::Mixture;
use crate::rows::Rows;

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Variant {
    Portable,
    #[cfg(target_arch = "x86_64")]
    Avx2,
}

static FORCED: AtomicU8 = AtomicU8::new(0);

fn variant() -> Variant {
    static CHOSEN: OnceLock<Variant> = OnceLock::new();
    if FORCED.load(Ordering::Relaxed) == 1 {
        return Variant::Portable;
    }
    *CHOSEN.get_or_init(|| {
        let wanted = std::env::var("MIXGAUGE_KERNEL").unwrap_or_default();
        #[cfg(target_arch = "x86_64")]
        {
            if wanted != "portable" && std::is_x86_feature_detected!("avx2") {
                return Variant::Avx2;
            }
        }
        let _ = wanted;
        Variant::Portable
    })
}

/// Forces (or releases) the portable kernels for the rest of the process. All variants give
/// bit-identical results, so this changes only speed; tests use it to prove exactly that.
#[doc(hidden)]
pub fn force_portable_kernels(on: bool) {
    FORCED.store(u8::from(on), Ordering::Relaxed);
}

/// The name of the kernel variant in use ("portable" or "avx2"), for logs and benchmarks.
pub fn kernel_variant() -> &'static str {
    match variant() {
        Variant::Portable => "portable",
        #[cfg(target_arch = "x86_64")]
        Variant::Avx2 => "avx2",
    }
}

pub(crate) fn fit_block(
    model: &Mixture,
    rows: &Rows,
    block: usize,
    centres: &[f64],
    accumulate: bool,
) -> PassStats {
    match variant() {
        Variant::Portable => fit_block_body(model, rows, block, centres, accumulate),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `variant()` returns Avx2 only when the CPU reports AVX2.
        Variant::Avx2 => unsafe { x86::fit_block_avx2(model, rows, block, centres, accumulate) },
    }
}

pub(crate) fn score_block(
    model: &Mixture,
    rows: &Rows,
    block: usize,
    loglik: &mut [f64],
    resp: Option<&mut [f64]>,
) -> usize {
    match variant() {
        Variant::Portable => score_block_body(model, rows, block, loglik, resp),
        #[cfg(target_arch = "x86_64")]
        // SAFETY: `variant()` returns Avx2 only when the CPU reports AVX2.
        Variant::Avx2 => unsafe { x86::score_block_avx2(model, rows, block, loglik, resp) },
    }
}

#[cfg(target_arch = "x86_64")]
mod x86 {
    use super::*;

    #[target_feature(enable = "avx2")]
    pub(super) fn fit_block_avx2(
        model: &Mixture,
        rows: &Rows,
        block: usize,
        centres: &[f64],
        accumulate: bool,
    ) -> PassStats {
        fit_block_body(model, rows, block, centres, accumulate)
    }

    #[target_feature(enable = "avx2")]
    pub(super) fn score_block_avx2(
        model: &Mixture,
        rows: &Rows,
        block: usize,
        loglik: &mut [f64],
        resp: Option<&mut [f64]>,
    ) -> usize {
        score_block_body(model, rows, block, loglik, resp)
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn a_variant_is_chosen() {
        assert!(["portable", "avx2"].contains(&super::kernel_variant()));
    }
}
