//! Chooses, once per process, which instruction-set path of the block kernels runs.
//!
//! Paths, best first: `avx512` (AVX-512F), `avx2` (AVX2 with FMA), `portable` (plain Rust, the
//! reference; every CPU). Detection uses `std::arch`'s `is_x86_feature_detected!`, so one binary
//! built for the x86-64 baseline runs the widest path the CPU has; no `-C target-cpu` is needed.
//! A path is represented by a token that only detection can create ([`crate::kernel::avx512`],
//! [`crate::kernel::avx2`]), so holding one proves the instructions exist.
//!
//! `MIXGAUGE_KERNEL=portable|avx2|avx512` (read once, at the first pass) asks for a path, for
//! tests and benchmarks; `auto` or unset takes the best. A path the CPU lacks, or an unknown
//! name, falls back to the best available path with a one-line note on standard error, and
//! [`kernel_variant`] names the path actually used. Results agree across paths to rounding
//! (the vector paths use fused multiply-add), and are bit-identical across thread counts for
//! any one path.

use std::sync::OnceLock;
use std::sync::atomic::{AtomicU8, Ordering};

#[cfg(target_arch = "x86_64")]
use crate::kernel::{avx2::Avx2, avx512::Avx512};

/// The path a pass runs, carrying the proof that the CPU supports it.
#[derive(Clone, Copy, Debug)]
pub(crate) enum Variant {
    Portable,
    #[cfg(target_arch = "x86_64")]
    Avx2(Avx2),
    #[cfg(target_arch = "x86_64")]
    Avx512(Avx512),
}

impl Variant {
    fn name(self) -> &'static str {
        match self {
            Variant::Portable => "portable",
            #[cfg(target_arch = "x86_64")]
            Variant::Avx2(_) => "avx2",
            #[cfg(target_arch = "x86_64")]
            Variant::Avx512(_) => "avx512",
        }
    }
}

const KNOWN: [&str; 3] = ["avx512", "avx2", "portable"];

/// The paths of [`KNOWN`], each present if this CPU can run it (detected once).
fn table() -> &'static [Option<Variant>; 3] {
    static TABLE: OnceLock<[Option<Variant>; 3]> = OnceLock::new();
    TABLE.get_or_init(|| {
        #[cfg(target_arch = "x86_64")]
        {
            [
                Avx512::detect().map(Variant::Avx512),
                Avx2::detect().map(Variant::Avx2),
                Some(Variant::Portable),
            ]
        }
        #[cfg(not(target_arch = "x86_64"))]
        {
            [None, None, Some(Variant::Portable)]
        }
    })
}

/// Every path this CPU can run, best first.
fn available() -> impl Iterator<Item = Variant> {
    table().iter().flatten().copied()
}

/// The path named `name`, if it is known and this CPU has it.
fn named(name: &str) -> Option<Variant> {
    let i = KNOWN.iter().position(|k| *k == name)?;
    table()[i]
}

/// Index into [`KNOWN`] plus one of the path forced by [`force_kernel_variant`]; 0: none.
static FORCED: AtomicU8 = AtomicU8::new(0);

pub(crate) fn variant() -> Variant {
    let forced = FORCED.load(Ordering::Relaxed);
    if forced > 0
        && let Some(v) = table()[usize::from(forced) - 1]
    {
        return v;
    }
    static CHOSEN: OnceLock<Variant> = OnceLock::new();
    *CHOSEN.get_or_init(|| {
        let best = available()
            .next()
            .expect("the portable path is always available");
        let wanted = std::env::var("MIXGAUGE_KERNEL").unwrap_or_default();
        let wanted = wanted.trim();
        if wanted.is_empty() || wanted == "auto" {
            return best;
        }
        match named(wanted) {
            Some(v) => v,
            None => {
                let why = if KNOWN.contains(&wanted) {
                    "this CPU lacks its instructions"
                } else {
                    "the known paths are auto, avx512, avx2 and portable"
                };
                eprintln!(
                    "mixgauge: MIXGAUGE_KERNEL={wanted} is not available ({why}); using {}",
                    best.name()
                );
                best
            }
        }
    })
}

/// The name of the kernel path in use ("avx512", "avx2" or "portable"), for logs and
/// benchmarks.
pub fn kernel_variant() -> &'static str {
    variant().name()
}

/// The kernel paths this CPU can run, best first (always ends with "portable").
pub fn kernel_variants() -> Vec<&'static str> {
    available().map(Variant::name).collect()
}

/// Forces a kernel path for the rest of the process (`None` releases it), overriding
/// `MIXGAUGE_KERNEL`. For tests and benchmarks that compare paths in one process; the setting
/// is global, so callers that depend on it must not run concurrently with each other.
///
/// # Errors
/// The path is unknown or this CPU lacks it; the setting is then unchanged.
#[doc(hidden)]
pub fn force_kernel_variant(name: Option<&str>) -> Result<(), String> {
    let code = match name {
        None => 0,
        Some(n) => {
            let i = KNOWN
                .iter()
                .position(|k| *k == n)
                .ok_or_else(|| format!("unknown kernel path {n:?}; use one of {KNOWN:?}"))?;
            if table()[i].is_none() {
                return Err(format!("this CPU cannot run the {n} kernel path"));
            }
            i as u8 + 1
        }
    };
    FORCED.store(code, Ordering::Relaxed);
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_portable_path_is_always_available_and_last() {
        let all = kernel_variants();
        assert_eq!(all.last(), Some(&"portable"));
        assert!(all.contains(&kernel_variant()));
        assert!(force_kernel_variant(Some("sse9")).is_err());
    }
}
