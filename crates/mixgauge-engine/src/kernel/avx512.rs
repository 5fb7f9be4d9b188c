//! The AVX-512F path: one 512-bit register holds a tile column (8 rows), fused multiply-add.
//!
//! The only `unsafe` of this path is here: the intrinsics need AVX-512F, which the token
//! [`Avx512`] proves (only [`Avx512::detect`] creates one), and the loads and stores read
//! through references to 64-byte-aligned [`Lanes`].

use std::arch::x86_64::*;

use super::simd::{self, Simd};
use super::{Block, Lanes, PassStats};
use crate::model::Mixture;
use crate::rows::Rows;

/// Proof that this CPU runs AVX-512F.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Avx512 {
    _detected: (),
}

// Register blocking (32 vector registers): 4 tiles per group in the full-covariance E-step
// (16 accumulators), 8 tiles in the diagonal one, 4×4 second-moment accumulators and 8
// diagonal columns (16 accumulators) in the M-step.
const FULL: usize = 4;
const DIAGONAL: usize = 8;
const MI: usize = 4;
const MJ: usize = 4;
const G: usize = 8;

impl Avx512 {
    /// The token, if the CPU has AVX-512F.
    pub(crate) fn detect() -> Option<Self> {
        std::is_x86_feature_detected!("avx512f").then_some(Avx512 { _detected: () })
    }

    pub(crate) fn fit_block(
        self,
        model: &Mixture,
        block: Block,
        centres: &[f64],
        accumulate: bool,
    ) -> PassStats {
        // SAFETY: `self` exists only when the CPU has AVX-512F.
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
        // SAFETY: `self` exists only when the CPU has AVX-512F.
        unsafe { score_block(self, model, rows, block, loglik, resp) }
    }
}

#[target_feature(enable = "avx512f")]
fn fit_block(
    s: Avx512,
    model: &Mixture,
    block: Block,
    centres: &[f64],
    accumulate: bool,
) -> PassStats {
    simd::fit_block::<Avx512, FULL, DIAGONAL, MI, MJ, G>(s, model, block, centres, accumulate)
}

#[target_feature(enable = "avx512f")]
fn score_block(
    s: Avx512,
    model: &Mixture,
    rows: &Rows,
    block: usize,
    loglik: &mut [f64],
    resp: Option<&mut [f64]>,
) -> usize {
    simd::score_block::<Avx512, FULL, DIAGONAL>(s, model, rows, block, loglik, resp)
}

/// Methods that apply one AVX-512F intrinsic to vector arguments.
macro_rules! lanewise {
    ($($name:ident($($arg:ident),*) => $intrinsic:ident;)*) => {$(
        #[inline(always)]
        fn $name(self, $($arg: __m512d),*) -> __m512d {
            // SAFETY: a token exists only when the CPU has AVX-512F.
            unsafe { $intrinsic($($arg),*) }
        }
    )*};
}

impl Simd for Avx512 {
    type V = __m512d;
    type M = __mmask8;
    const UNITS: usize = 1;

    lanewise! {
        add(a, b) => _mm512_add_pd;
        sub(a, b) => _mm512_sub_pd;
        mul(a, b) => _mm512_mul_pd;
        div(a, b) => _mm512_div_pd;
        mul_add(a, b, c) => _mm512_fmadd_pd;
        neg_mul_add(a, b, c) => _mm512_fnmadd_pd;
        max(a, b) => _mm512_max_pd;
    }

    #[inline(always)]
    fn splat(self, x: f64) -> __m512d {
        // SAFETY: a token exists only when the CPU has AVX-512F.
        unsafe { _mm512_set1_pd(x) }
    }

    #[inline(always)]
    fn load(self, tile: &Lanes, _unit: usize) -> __m512d {
        // SAFETY: AVX-512F as above; `tile` is 8 readable f64 at a 64-byte boundary.
        unsafe { _mm512_load_pd(tile.0.as_ptr()) }
    }

    #[inline(always)]
    fn store(self, tile: &mut Lanes, _unit: usize, v: __m512d) {
        // SAFETY: AVX-512F as above; `tile` is 8 writable f64 at a 64-byte boundary.
        unsafe { _mm512_store_pd(tile.0.as_mut_ptr(), v) }
    }

    #[inline(always)]
    fn gt(self, a: __m512d, b: __m512d) -> __mmask8 {
        // SAFETY: a token exists only when the CPU has AVX-512F.
        unsafe { _mm512_cmp_pd_mask::<_CMP_GT_OQ>(a, b) }
    }

    #[inline(always)]
    fn lt(self, a: __m512d, b: __m512d) -> __mmask8 {
        // SAFETY: a token exists only when the CPU has AVX-512F.
        unsafe { _mm512_cmp_pd_mask::<_CMP_LT_OQ>(a, b) }
    }

    #[inline(always)]
    fn select(self, m: __mmask8, a: __m512d, b: __m512d) -> __m512d {
        // SAFETY: a token exists only when the CPU has AVX-512F.
        unsafe { _mm512_mask_blend_pd(m, b, a) }
    }

    #[inline(always)]
    fn bits(self, m: __mmask8) -> u32 {
        u32::from(m)
    }

    #[inline(always)]
    fn pow2(self, t: __m512d) -> __m512d {
        const BIAS: i64 = 0x4338_0000_0000_0000 - 1023; // bits of 1.5·2^52, less the bias
        // SAFETY: a token exists only when the CPU has AVX-512F.
        unsafe {
            let n = _mm512_sub_epi64(_mm512_castpd_si512(t), _mm512_set1_epi64(BIAS));
            _mm512_castsi512_pd(_mm512_slli_epi64::<52>(n))
        }
    }

    #[inline(always)]
    fn sum(self, v: __m512d) -> f64 {
        // SAFETY: a token exists only when the CPU has AVX-512F. The reduction is a fixed
        // sequence of shuffles and adds, so its order never varies.
        unsafe { _mm512_reduce_add_pd(v) }
    }
}
