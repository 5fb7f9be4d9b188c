//! The AVX2 + FMA path: two 256-bit registers hold a tile column (rows 0–3 and 4–7).
//!
//! The only `unsafe` of this path is here: the intrinsics need AVX2 and FMA, which the token
//! [`Avx2`] proves (only [`Avx2::detect`] creates one), and the loads and stores read through
//! references to 64-byte-aligned [`Lanes`].

use std::arch::x86_64::*;

use super::simd::{self, Simd};
use super::{Block, Lanes, PassStats};
use crate::model::Mixture;
use crate::rows::Rows;

/// Proof that this CPU runs AVX2 and FMA.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Avx2 {
    _detected: (),
}

// Register blocking (16 vector registers): one tile (2 vectors) per group in the
// full-covariance E-step (8 accumulators), 4 tiles in the diagonal one, 4×2 second-moment
// accumulators and 4 diagonal columns (8 accumulators) in the M-step.
const FULL: usize = 2;
const DIAGONAL: usize = 8;
const MI: usize = 4;
const MJ: usize = 2;
const G: usize = 4;

impl Avx2 {
    /// The token, if the CPU has AVX2 and FMA.
    pub(crate) fn detect() -> Option<Self> {
        (std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma"))
            .then_some(Avx2 { _detected: () })
    }

    pub(crate) fn fit_block(
        self,
        model: &Mixture,
        block: Block,
        centres: &[f64],
        accumulate: bool,
    ) -> PassStats {
        // SAFETY: `self` exists only when the CPU has AVX2 and FMA.
        unsafe { fit_block(self, model, block, centres, accumulate) }
    }

    pub(crate) fn score_block(
        self,
        model: &Mixture,
        rows: &Rows,
        block: usize,
        loglik: &mut [f64],
        resp: Option<&mut [f64]>,
    ) -> usize {
        // SAFETY: `self` exists only when the CPU has AVX2 and FMA.
        unsafe { score_block(self, model, rows, block, loglik, resp) }
    }
}

#[target_feature(enable = "avx2,fma")]
fn fit_block(
    s: Avx2,
    model: &Mixture,
    block: Block,
    centres: &[f64],
    accumulate: bool,
) -> PassStats {
    simd::fit_block::<Avx2, FULL, DIAGONAL, MI, MJ, G>(s, model, block, centres, accumulate)
}

#[target_feature(enable = "avx2,fma")]
fn score_block(
    s: Avx2,
    model: &Mixture,
    rows: &Rows,
    block: usize,
    loglik: &mut [f64],
    resp: Option<&mut [f64]>,
) -> usize {
    simd::score_block::<Avx2, FULL, DIAGONAL>(s, model, rows, block, loglik, resp)
}

/// Methods that apply one AVX or FMA intrinsic to vector arguments.
macro_rules! lanewise {
    ($($name:ident($($arg:ident),*) => $intrinsic:ident;)*) => {$(
        #[inline(always)]
        fn $name(self, $($arg: __m256d),*) -> __m256d {
            // SAFETY: a token exists only when the CPU has AVX2 and FMA.
            unsafe { $intrinsic($($arg),*) }
        }
    )*};
}

impl Simd for Avx2 {
    type V = __m256d;
    type M = __m256d;
    const UNITS: usize = 2;

    lanewise! {
        add(a, b) => _mm256_add_pd;
        sub(a, b) => _mm256_sub_pd;
        mul(a, b) => _mm256_mul_pd;
        div(a, b) => _mm256_div_pd;
        mul_add(a, b, c) => _mm256_fmadd_pd;
        neg_mul_add(a, b, c) => _mm256_fnmadd_pd;
        max(a, b) => _mm256_max_pd;
    }

    #[inline(always)]
    fn splat(self, x: f64) -> __m256d {
        // SAFETY: a token exists only when the CPU has AVX2 and FMA.
        unsafe { _mm256_set1_pd(x) }
    }

    #[inline(always)]
    fn load(self, tile: &Lanes, unit: usize) -> __m256d {
        // SAFETY: AVX as above; `unit & 1` picks the first or second 4 of the 8 f64 of
        // `tile`, which start at a 32-byte boundary because `Lanes` is 64-byte aligned.
        unsafe { _mm256_load_pd(tile.0.as_ptr().add(4 * (unit & 1))) }
    }

    #[inline(always)]
    fn store(self, tile: &mut Lanes, unit: usize, v: __m256d) {
        // SAFETY: as for `load`, on a writable tile.
        unsafe { _mm256_store_pd(tile.0.as_mut_ptr().add(4 * (unit & 1)), v) }
    }

    #[inline(always)]
    fn gt(self, a: __m256d, b: __m256d) -> __m256d {
        // SAFETY: a token exists only when the CPU has AVX2 and FMA.
        unsafe { _mm256_cmp_pd::<_CMP_GT_OQ>(a, b) }
    }

    #[inline(always)]
    fn lt(self, a: __m256d, b: __m256d) -> __m256d {
        // SAFETY: a token exists only when the CPU has AVX2 and FMA.
        unsafe { _mm256_cmp_pd::<_CMP_LT_OQ>(a, b) }
    }

    #[inline(always)]
    fn select(self, m: __m256d, a: __m256d, b: __m256d) -> __m256d {
        // SAFETY: a token exists only when the CPU has AVX2 and FMA.
        unsafe { _mm256_blendv_pd(b, a, m) }
    }

    #[inline(always)]
    fn bits(self, m: __m256d) -> u32 {
        // SAFETY: a token exists only when the CPU has AVX2 and FMA.
        unsafe { _mm256_movemask_pd(m) as u32 }
    }

    #[inline(always)]
    fn pow2(self, t: __m256d) -> __m256d {
        const BIAS: i64 = 0x4338_0000_0000_0000 - 1023; // bits of 1.5·2^52, less the bias
        // SAFETY: a token exists only when the CPU has AVX2 and FMA.
        unsafe {
            let n = _mm256_sub_epi64(_mm256_castpd_si256(t), _mm256_set1_epi64x(BIAS));
            _mm256_castsi256_pd(_mm256_slli_epi64::<52>(n))
        }
    }

    #[inline(always)]
    fn sum(self, v: __m256d) -> f64 {
        // SAFETY: a token exists only when the CPU has AVX2 and FMA.
        unsafe {
            let low = _mm256_castpd256_pd128(v);
            let high = _mm256_extractf128_pd::<1>(v);
            let pair = _mm_add_pd(low, high); // (v0 + v2, v1 + v3)
            _mm_cvtsd_f64(_mm_add_sd(pair, _mm_unpackhi_pd(pair, pair)))
        }
    }
}
