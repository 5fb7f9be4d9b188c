//! The fused pass written once over explicit SIMD vectors, for the x86-64 paths.
//!
//! [`Simd`] is implemented by a path's token, a zero-sized value that only CPU detection can
//! create (`avx512::Avx512`, `avx2::Avx2`), so every operation is a safe method call. The kernels
//! here are generic over it and `#[inline(always)]`: each path's `#[target_feature]` entry point
//! instantiates them with its own register-blocking sizes, and they compile to that path's
//! instructions. This file holds no `unsafe`; the intrinsics live in the path modules.
//!
//! A tile of 8 rows is `Simd::UNITS` vectors (one 8-lane AVX-512 register, or two 4-lane AVX2
//! registers). What the layout of the work does, and why:
//! - Full-covariance E-step: component k's whitening factor W = Lₖ⁻¹ is laid out in strips of
//!   4 rows (zero above the diagonal), so `z = W(x − μ)` runs over the lower triangle only
//!   with 4 rows × A vectors of accumulators in registers; each broadcast factor entry serves
//!   A vectors, each loaded centred column serves 4 rows.
//! - Normalisation: a polynomial `exp` in vector registers; the row sums (each in [1, K]) are
//!   multiplied per lane and their `ln` taken once per block, or sooner if the product nears
//!   2^600.
//! - Full-covariance M-step: for each block of MI×MJ entries of the second moment, the
//!   accumulators stay in registers over every tile of the block that has a nonzero
//!   responsibility (tiles without one are skipped), and are lane-summed once at the end in a
//!   fixed order.
//! - Diagonal covariance: G columns at a time, the first and second moments of each kept in
//!   registers over the block's tiles.
//!
//! Every sum runs in an order fixed by the block's contents, so a path gives the same bits for
//! any number of threads; against the portable reference the paths differ only by rounding
//! (fused multiply-add, a different order of the lane sums and of the `ln` of products).

use std::cell::RefCell;

use super::{BLOCK_ROWS, Block, LANES, Lanes, PassStats, TILES, gather, resize};
use crate::form::CovarianceForm;
use crate::linalg::packed;
use crate::model::Mixture;
use crate::rows::Rows;

/// The vector operations the kernels need, as methods of a path's token.
pub(crate) trait Simd: Copy {
    /// A vector of `LANES / UNITS` f64 lanes.
    type V: Copy;
    /// The result of a lane-wise comparison.
    type M: Copy;
    /// Vectors per tile of [`LANES`] rows.
    const UNITS: usize;

    fn splat(self, x: f64) -> Self::V;
    /// Vector `unit` (0..UNITS) of a tile column.
    fn load(self, tile: &Lanes, unit: usize) -> Self::V;
    fn store(self, tile: &mut Lanes, unit: usize, v: Self::V);
    fn add(self, a: Self::V, b: Self::V) -> Self::V;
    fn sub(self, a: Self::V, b: Self::V) -> Self::V;
    fn mul(self, a: Self::V, b: Self::V) -> Self::V;
    fn div(self, a: Self::V, b: Self::V) -> Self::V;
    /// a·b + c with one rounding.
    fn mul_add(self, a: Self::V, b: Self::V, c: Self::V) -> Self::V;
    /// c − a·b with one rounding.
    fn neg_mul_add(self, a: Self::V, b: Self::V, c: Self::V) -> Self::V;
    /// The larger of a and b; b when either is NaN.
    fn max(self, a: Self::V, b: Self::V) -> Self::V;
    /// a > b (false where either is NaN).
    fn gt(self, a: Self::V, b: Self::V) -> Self::M;
    /// a < b (false where either is NaN).
    fn lt(self, a: Self::V, b: Self::V) -> Self::M;
    /// a where m holds, b elsewhere.
    fn select(self, m: Self::M, a: Self::V, b: Self::V) -> Self::V;
    /// One bit per lane, lane 0 lowest.
    fn bits(self, m: Self::M) -> u32;
    /// 2^n where `t = n + 1.5·2^52` holds the integer n (|n| < 1023) in its low bits.
    fn pow2(self, t: Self::V) -> Self::V;
    /// The sum of the lanes, in a fixed order.
    fn sum(self, v: Self::V) -> f64;
}

/// Working memory of the vector paths for one block, reused by each worker thread.
#[derive(Default)]
struct Work {
    /// Gathered rows of a scoring pass.
    tiles: Vec<Lanes>,
    /// K×TILES log-densities, then responsibilities.
    logp: Vec<Lanes>,
    /// E-step: centred rows of one group of tiles. M-step: centred rows of the active tiles.
    centred: Vec<Lanes>,
    /// M-step: responsibility × centred rows of the active tiles.
    weighted: Vec<Lanes>,
    /// One component's whitening factor in strips of 4 rows.
    strips: Vec<f64>,
    /// Tiles of the block with a nonzero responsibility for the current component.
    active: Vec<usize>,
    row_max: Vec<Lanes>,
    row_sum: Vec<Lanes>,
    /// Lane accumulators of Σr(x−c).
    first: Vec<Lanes>,
}

thread_local! {
    static WORK: RefCell<Work> = RefCell::new(Work::default());
}

fn take_work() -> Work {
    WORK.with(RefCell::take)
}

fn put_work(w: Work) {
    WORK.with(|cell| *cell.borrow_mut() = w);
}

/// Rows of the whitening factor per strip.
const STRIP: usize = 4;

/// e^x for x ≤ 0, and exactly 0 below −600; NaN stays NaN.
///
/// The portable path's method (Cody–Waite reduction with fdlibm's split of ln 2, degree-13
/// Taylor polynomial, 2^n built in the exponent bits), with fused multiply-adds.
#[inline(always)]
fn exp_nonpositive<S: Simd>(s: S, x: S::V) -> S::V {
    const ROUND: f64 = 6_755_399_441_055_744.0; // 1.5·2^52
    const LN2_HI: f64 = 6.931_471_803_691_238e-1;
    const LN2_LO: f64 = 1.908_214_929_270_587_7e-10;
    const CUTOFF: f64 = -600.0;
    // 1/13!, 1/12!, …, 1/2!, 1, 1.
    const TAYLOR: [f64; 14] = [
        1.0 / 6_227_020_800.0,
        1.0 / 479_001_600.0,
        1.0 / 39_916_800.0,
        1.0 / 3_628_800.0,
        1.0 / 362_880.0,
        1.0 / 40_320.0,
        1.0 / 5_040.0,
        1.0 / 720.0,
        1.0 / 120.0,
        1.0 / 24.0,
        1.0 / 6.0,
        0.5,
        1.0,
        1.0,
    ];
    let cutoff = s.splat(CUTOFF);
    let xc = s.max(cutoff, x);
    let t = s.mul_add(xc, s.splat(std::f64::consts::LOG2_E), s.splat(ROUND));
    let n = s.sub(t, s.splat(ROUND));
    let r = s.neg_mul_add(n, s.splat(LN2_HI), xc);
    let r = s.neg_mul_add(n, s.splat(LN2_LO), r);
    let mut p = s.splat(TAYLOR[0]);
    for &c in &TAYLOR[1..] {
        p = s.mul_add(p, r, s.splat(c));
    }
    let v = s.mul(p, s.pow2(t));
    s.select(s.lt(x, cutoff), s.splat(0.0), v)
}

/// Lays out a packed whitening factor in strips of [`STRIP`] rows: strip `q` (rows
/// `4q..4q+4`) holds, for each column `j < min(4q + 4, D)`, the four entries `W[4q + r][j]`,
/// zero above the diagonal and past row D.
fn prepare_strips(w: &[f64], d: usize, out: &mut Vec<f64>) {
    out.clear();
    for q in 0..d.div_ceil(STRIP) {
        let i0 = q * STRIP;
        for j in 0..(i0 + STRIP).min(d) {
            for r in 0..STRIP {
                let i = i0 + r;
                out.push(if i < d && j <= i {
                    w[packed(i, j)]
                } else {
                    0.0
                });
            }
        }
    }
}

/// Full-covariance log-densities of units `g0..g0+A` (unit g is vector `g % UNITS` of tile
/// `g / UNITS`; A is a multiple of UNITS or 1) into `out[tile]`.
#[allow(clippy::too_many_arguments)] // the scratch buffers are passed apart to borrow them separately
#[inline(always)]
fn full_group<S: Simd, const A: usize>(
    s: S,
    tiles: &[Lanes],
    d: usize,
    g0: usize,
    mean: &[f64],
    strips: &[f64],
    centred: &mut [Lanes],
    constant: f64,
    out: &mut [Lanes],
) {
    let tile0 = g0 / S::UNITS;
    let place = |a: usize| {
        let g = g0 + a;
        (g / S::UNITS, g % S::UNITS)
    };
    for j in 0..d {
        let m = s.splat(mean[j]);
        for a in 0..A {
            let (t, u) = place(a);
            let c = s.sub(s.load(&tiles[t * d + j], u), m);
            s.store(&mut centred[(t - tile0) * d + j], u, c);
        }
    }
    let mut sq = [s.splat(0.0); A];
    let mut offset = 0;
    for q in 0..d.div_ceil(STRIP) {
        let end = (q * STRIP + STRIP).min(d);
        let strip = &strips[offset..offset + STRIP * end];
        offset += STRIP * end;
        let mut z = [[s.splat(0.0); A]; STRIP];
        let i0 = q * STRIP;
        // Columns left of the strip's diagonal block: all four rows.
        for (j, w) in strip[..STRIP * i0].chunks_exact(STRIP).enumerate() {
            let b: [S::V; STRIP] = std::array::from_fn(|r| s.splat(w[r]));
            for a in 0..A {
                let (t, u) = place(a);
                let c = s.load(&centred[(t - tile0) * d + j], u);
                for r in 0..STRIP {
                    z[r][a] = s.mul_add(b[r], c, z[r][a]);
                }
            }
        }
        // The diagonal block: column i0 + jj reaches rows jj.. only (W is lower triangular).
        for jj in 0..STRIP {
            let j = i0 + jj;
            if j >= end {
                break;
            }
            let w = &strip[STRIP * j..STRIP * j + STRIP];
            for a in 0..A {
                let (t, u) = place(a);
                let c = s.load(&centred[(t - tile0) * d + j], u);
                for r in jj..STRIP {
                    z[r][a] = s.mul_add(s.splat(w[r]), c, z[r][a]);
                }
            }
        }
        for zr in &z {
            for a in 0..A {
                sq[a] = s.mul_add(zr[a], zr[a], sq[a]);
            }
        }
    }
    store_log_densities(s, g0, &sq, constant, out);
}

/// Writes `constant − ½·sq[a]` (a log-density from its squared Mahalanobis distance) for
/// units `g0..g0+A` into `out[tile]`.
#[inline(always)]
fn store_log_densities<S: Simd, const A: usize>(
    s: S,
    g0: usize,
    sq: &[S::V; A],
    constant: f64,
    out: &mut [Lanes],
) {
    let (half, constant) = (s.splat(0.5), s.splat(constant));
    for (a, &q) in sq.iter().enumerate() {
        let g = g0 + a;
        s.store(
            &mut out[g / S::UNITS],
            g % S::UNITS,
            s.neg_mul_add(half, q, constant),
        );
    }
}

/// Diagonal-covariance log-densities of units `g0..g0+A` into `out[tile]`.
#[allow(clippy::too_many_arguments)] // inputs and scratch buffers passed apart, to borrow them separately
#[inline(always)]
fn diagonal_group<S: Simd, const A: usize>(
    s: S,
    tiles: &[Lanes],
    d: usize,
    g0: usize,
    mean: &[f64],
    precision: &[f64],
    constant: f64,
    out: &mut [Lanes],
) {
    let place = |a: usize| {
        let g = g0 + a;
        (g / S::UNITS, g % S::UNITS)
    };
    let columns: [&[Lanes]; A] = std::array::from_fn(|a| {
        let t = place(a).0;
        &tiles[t * d..(t + 1) * d]
    });
    let mut sq = [s.splat(0.0); A];
    for j in 0..d {
        let (m, p) = (s.splat(mean[j]), s.splat(precision[j]));
        for a in 0..A {
            let c = s.sub(s.load(&columns[a][j], place(a).1), m);
            sq[a] = s.mul_add(s.mul(c, p), c, sq[a]);
        }
    }
    store_log_densities(s, g0, &sq, constant, out);
}

/// Every component's log-density for every row of the block, into `logp[c·TILES + t]`.
#[allow(clippy::too_many_arguments)] // inputs and scratch buffers passed apart, to borrow them separately
#[inline(always)]
fn log_densities<S: Simd, const FULL: usize, const DIAGONAL: usize>(
    s: S,
    model: &Mixture,
    tiles: &[Lanes],
    ntiles: usize,
    strips: &mut Vec<f64>,
    centred: &mut Vec<Lanes>,
    logp: &mut [Lanes],
) {
    let k = model.components();
    let d = model.dims();
    let units = ntiles * S::UNITS;
    match model.form() {
        CovarianceForm::Full => {
            let p = d * (d + 1) / 2;
            resize(centred, FULL.div_ceil(S::UNITS) * d);
            for c in 0..k {
                prepare_strips(&model.factors[c * p..(c + 1) * p], d, strips);
                let out = &mut logp[c * TILES..(c + 1) * TILES];
                let (mean, constant) = (model.mean(c), model.log_norm[c]);
                let mut g = 0;
                while g + FULL <= units {
                    full_group::<S, FULL>(s, tiles, d, g, mean, strips, centred, constant, out);
                    g += FULL;
                }
                while g < units {
                    full_group::<S, 1>(s, tiles, d, g, mean, strips, centred, constant, out);
                    g += 1;
                }
            }
        }
        CovarianceForm::Diagonal => {
            for c in 0..k {
                let precision = &model.factors[c * d..(c + 1) * d];
                let out = &mut logp[c * TILES..(c + 1) * TILES];
                let (mean, constant) = (model.mean(c), model.log_norm[c]);
                let mut g = 0;
                while g + DIAGONAL <= units {
                    diagonal_group::<S, DIAGONAL>(s, tiles, d, g, mean, precision, constant, out);
                    g += DIAGONAL;
                }
                while g < units {
                    diagonal_group::<S, 1>(s, tiles, d, g, mean, precision, constant, out);
                    g += 1;
                }
            }
        }
    }
}

/// Σ ln of the lanes of `v`.
#[inline(always)]
fn ln_lanes<S: Simd>(s: S, v: S::V) -> f64 {
    let mut tmp = Lanes::default();
    s.store(&mut tmp, 0, v);
    let mut total = 0.0;
    for &x in &tmp[..LANES / S::UNITS] {
        total += x.ln();
    }
    total
}

/// Turns the block's log-densities into responsibilities in place (zero on padding lanes and
/// on rows whose log-density is not representable) and stores each row's maximum and sum
/// (sum 0 for such rows and for padding). Returns the block's log-likelihood over the rows
/// that have one, and the number of rows that do not.
#[inline(always)]
fn normalise<S: Simd>(
    s: S,
    logp: &mut [Lanes],
    k: usize,
    count: usize,
    row_max: &mut [Lanes],
    row_sum: &mut [Lanes],
) -> (f64, usize) {
    const FLUSH: f64 = 4.149_515_568_880_993e180; // 2^600
    let ntiles = count.div_ceil(LANES);
    let (zero, one) = (s.splat(0.0), s.splat(1.0));
    let mut max_total = [zero; 2];
    let mut product = [one; 2];
    let mut logs = 0.0;
    let mut lost = 0;
    let full = Lanes([1.0; LANES]);
    let mut last = Lanes([0.0; LANES]);
    for lane in 0..count - (ntiles - 1) * LANES {
        last[lane] = 1.0;
    }
    for t in 0..ntiles {
        let valid = if t + 1 == ntiles { &last } else { &full };
        for u in 0..S::UNITS {
            let mut m = s.load(&logp[t], u);
            for c in 1..k {
                m = s.max(s.load(&logp[c * TILES + t], u), m);
            }
            let mut sum = zero;
            for c in 0..k {
                let e = exp_nonpositive(s, s.sub(s.load(&logp[c * TILES + t], u), m));
                s.store(&mut logp[c * TILES + t], u, e);
                sum = s.add(sum, e);
            }
            // NaN (a row at −∞ for every component, or worse) fails `> 0` and is lost.
            let inside = s.gt(s.load(valid, u), zero);
            let sum = s.select(inside, sum, zero);
            let ok = s.gt(sum, zero);
            lost += (s.bits(inside) & !s.bits(ok)).count_ones() as usize;
            let inverse = s.div(one, s.select(ok, sum, one));
            for c in 0..k {
                let r = s.mul(s.load(&logp[c * TILES + t], u), inverse);
                s.store(&mut logp[c * TILES + t], u, s.select(ok, r, zero));
            }
            let sum = s.select(ok, sum, zero);
            s.store(&mut row_max[t], u, m);
            s.store(&mut row_sum[t], u, sum);
            max_total[u] = s.add(max_total[u], s.select(ok, m, zero));
            product[u] = s.mul(product[u], s.select(ok, sum, one));
            if s.bits(s.gt(product[u], s.splat(FLUSH))) != 0 {
                logs += ln_lanes(s, product[u]);
                product[u] = one;
            }
        }
    }
    let mut total = 0.0;
    for u in 0..S::UNITS {
        total += s.sum(max_total[u]);
    }
    for u in 0..S::UNITS {
        logs += ln_lanes(s, product[u]);
    }
    (total + logs, lost)
}

/// Full-covariance statistics of component `c` over the block: Σr into `weight`, Σr(x−c)
/// into `first` (D), Σr(x−c)(x−c)ᵀ packed into `second`.
#[allow(clippy::too_many_arguments)] // inputs and scratch buffers passed apart, to borrow them separately
#[inline(always)]
fn accumulate_full<S: Simd, const MI: usize, const MJ: usize>(
    s: S,
    tiles: &[Lanes],
    d: usize,
    ntiles: usize,
    centre: &[f64],
    resp: &[Lanes],
    w: &mut Work,
    weight: &mut f64,
    first: &mut [f64],
    second: &mut [f64],
) {
    const { assert!(MI.is_multiple_of(MJ)) };
    let dp = d.next_multiple_of(MI);
    resize(&mut w.centred, TILES * dp);
    resize(&mut w.weighted, TILES * dp);
    resize(&mut w.first, d);
    let zero = s.splat(0.0);
    w.first[..d].fill(Lanes::default());
    let mut total = [zero; 2];
    let mut active = 0;
    for t in 0..ntiles {
        let mut any = 0;
        for u in 0..S::UNITS {
            any |= s.bits(s.gt(s.load(&resp[t], u), zero));
        }
        if any == 0 {
            continue;
        }
        let centred = &mut w.centred[active * dp..(active + 1) * dp];
        let weighted = &mut w.weighted[active * dp..(active + 1) * dp];
        for u in 0..S::UNITS {
            let r = s.load(&resp[t], u);
            total[u] = s.add(total[u], r);
            for j in 0..d {
                let c = s.sub(s.load(&tiles[t * d + j], u), s.splat(centre[j]));
                let rc = s.mul(r, c);
                s.store(&mut centred[j], u, c);
                s.store(&mut weighted[j], u, rc);
                let f = s.add(s.load(&w.first[j], u), rc);
                s.store(&mut w.first[j], u, f);
            }
            for j in d..dp {
                s.store(&mut centred[j], u, zero);
                s.store(&mut weighted[j], u, zero);
            }
        }
        active += 1;
    }
    *weight = 0.0;
    for u in 0..S::UNITS {
        *weight += s.sum(total[u]);
    }
    for j in 0..d {
        let mut f = 0.0;
        for u in 0..S::UNITS {
            f += s.sum(s.load(&w.first[j], u));
        }
        first[j] = f;
    }
    for i0 in (0..dp).step_by(MI) {
        let end = (i0 + MI).min(d);
        for j0 in (0..end).step_by(MJ) {
            let acc = if MI == MJ && j0 == i0 {
                second_block::<S, MI, MJ, true>(s, &w.weighted, &w.centred, dp, active, i0, j0)
            } else {
                second_block::<S, MI, MJ, false>(s, &w.weighted, &w.centred, dp, active, i0, j0)
            };
            for r in 0..MI {
                for q in 0..MJ {
                    let (i, j) = (i0 + r, j0 + q);
                    if i < d && j <= i {
                        second[packed(i, j)] = s.sum(acc[r][q]);
                    }
                }
            }
        }
    }
}

/// Σ over the active tiles of r(xᵢ−cᵢ)·(xⱼ−cⱼ) for i in `i0..i0+MI`, j in `j0..j0+MJ`, in
/// registers. On a block across the diagonal (`TRIANGLE`: i0 = j0, MI = MJ) only the entries
/// with j ≤ i are computed; the others stay zero.
#[inline(always)]
fn second_block<S: Simd, const MI: usize, const MJ: usize, const TRIANGLE: bool>(
    s: S,
    weighted: &[Lanes],
    centred: &[Lanes],
    dp: usize,
    active: usize,
    i0: usize,
    j0: usize,
) -> [[S::V; MJ]; MI] {
    let mut acc = [[s.splat(0.0); MJ]; MI];
    for a in 0..active {
        let wrow = &weighted[a * dp + i0..a * dp + i0 + MI];
        let crow = &centred[a * dp + j0..a * dp + j0 + MJ];
        for u in 0..S::UNITS {
            let wv: [S::V; MI] = std::array::from_fn(|r| s.load(&wrow[r], u));
            for q in 0..MJ {
                let cv = s.load(&crow[q], u);
                for r in 0..MI {
                    if !TRIANGLE || q <= r {
                        acc[r][q] = s.mul_add(wv[r], cv, acc[r][q]);
                    }
                }
            }
        }
    }
    acc
}

/// Σr(x−c) and Σr(x−c)² of columns `j0..j0+G` over the active tiles.
#[allow(clippy::too_many_arguments)] // inputs and scratch buffers passed apart, to borrow them separately
#[inline(always)]
fn diagonal_columns<S: Simd, const G: usize>(
    s: S,
    tiles: &[Lanes],
    d: usize,
    j0: usize,
    active: &[usize],
    centre: &[f64],
    resp: &[Lanes],
    first: &mut [f64],
    second: &mut [f64],
) {
    let zero = s.splat(0.0);
    let cen: [S::V; G] = std::array::from_fn(|q| s.splat(centre[j0 + q]));
    let mut f = [zero; G];
    let mut sq = [zero; G];
    for &t in active {
        let x = &tiles[t * d + j0..t * d + j0 + G];
        for u in 0..S::UNITS {
            let r = s.load(&resp[t], u);
            for q in 0..G {
                let c = s.sub(s.load(&x[q], u), cen[q]);
                let rc = s.mul(r, c);
                f[q] = s.add(f[q], rc);
                sq[q] = s.mul_add(rc, c, sq[q]);
            }
        }
    }
    for q in 0..G {
        first[j0 + q] = s.sum(f[q]);
        second[j0 + q] = s.sum(sq[q]);
    }
}

/// Diagonal-covariance statistics of one component over the block.
#[allow(clippy::too_many_arguments)] // inputs and scratch buffers passed apart, to borrow them separately
#[inline(always)]
fn accumulate_diagonal<S: Simd, const G: usize>(
    s: S,
    tiles: &[Lanes],
    d: usize,
    ntiles: usize,
    centre: &[f64],
    resp: &[Lanes],
    active: &mut Vec<usize>,
    weight: &mut f64,
    first: &mut [f64],
    second: &mut [f64],
) {
    let zero = s.splat(0.0);
    active.clear();
    let mut total = [zero; 2];
    for t in 0..ntiles {
        let mut any = 0;
        for u in 0..S::UNITS {
            let r = s.load(&resp[t], u);
            any |= s.bits(s.gt(r, zero));
            total[u] = s.add(total[u], r);
        }
        if any != 0 {
            active.push(t);
        }
    }
    *weight = 0.0;
    for u in 0..S::UNITS {
        *weight += s.sum(total[u]);
    }
    let mut j0 = 0;
    while j0 + G <= d {
        diagonal_columns::<S, G>(s, tiles, d, j0, active, centre, resp, first, second);
        j0 += G;
    }
    while j0 < d {
        diagonal_columns::<S, 1>(s, tiles, d, j0, active, centre, resp, first, second);
        j0 += 1;
    }
}

/// One block of a fitting pass (see [`super::fit_block`]).
///
/// Register blocking, chosen per path: `FULL` and `DIAGONAL` vectors per group in the
/// E-step, `MI`×`MJ` second-moment accumulators and `G` diagonal columns in the M-step.
#[inline(always)]
pub(crate) fn fit_block<
    S: Simd,
    const FULL: usize,
    const DIAGONAL: usize,
    const MI: usize,
    const MJ: usize,
    const G: usize,
>(
    s: S,
    model: &Mixture,
    block: Block,
    centres: &[f64],
    accumulate: bool,
) -> PassStats {
    let k = model.components();
    let d = model.dims();
    let form = model.form();
    let p = form.packed_len(d);
    let ntiles = block.count.div_ceil(LANES);
    let mut out = PassStats::zeros(k, d, p, accumulate);
    let mut w = take_work();
    resize(&mut w.logp, k * TILES);
    resize(&mut w.row_max, TILES);
    resize(&mut w.row_sum, TILES);
    log_densities::<S, FULL, DIAGONAL>(
        s,
        model,
        block.tiles,
        ntiles,
        &mut w.strips,
        &mut w.centred,
        &mut w.logp,
    );
    let (loglik, lost) = normalise(
        s,
        &mut w.logp,
        k,
        block.count,
        &mut w.row_max,
        &mut w.row_sum,
    );
    out.loglik = loglik;
    out.lost_rows = lost;
    if accumulate {
        let logp = std::mem::take(&mut w.logp);
        for c in 0..k {
            let resp = &logp[c * TILES..(c + 1) * TILES];
            let centre = &centres[c * d..(c + 1) * d];
            let first = &mut out.first[c * d..(c + 1) * d];
            let second = &mut out.second[c * p..(c + 1) * p];
            match form {
                CovarianceForm::Full => accumulate_full::<S, MI, MJ>(
                    s,
                    block.tiles,
                    d,
                    ntiles,
                    centre,
                    resp,
                    &mut w,
                    &mut out.weight[c],
                    first,
                    second,
                ),
                CovarianceForm::Diagonal => accumulate_diagonal::<S, G>(
                    s,
                    block.tiles,
                    d,
                    ntiles,
                    centre,
                    resp,
                    &mut w.active,
                    &mut out.weight[c],
                    first,
                    second,
                ),
            }
        }
        w.logp = logp;
    }
    put_work(w);
    out
}

/// One block of a scoring pass (see [`super::score_block`]).
#[inline(always)]
pub(crate) fn score_block<S: Simd, const FULL: usize, const DIAGONAL: usize>(
    s: S,
    model: &Mixture,
    rows: &Rows,
    block: usize,
    loglik: &mut [f64],
    resp: Option<&mut [f64]>,
) -> usize {
    let k = model.components();
    let start = block * BLOCK_ROWS;
    let count = (rows.len() - start).min(BLOCK_ROWS);
    let ntiles = count.div_ceil(LANES);
    let mut w = take_work();
    let mut tiles = std::mem::take(&mut w.tiles);
    resize(&mut tiles, TILES * rows.dims());
    gather(rows, start, count, &mut tiles);
    resize(&mut w.logp, k * TILES);
    resize(&mut w.row_max, TILES);
    resize(&mut w.row_sum, TILES);
    log_densities::<S, FULL, DIAGONAL>(
        s,
        model,
        &tiles,
        ntiles,
        &mut w.strips,
        &mut w.centred,
        &mut w.logp,
    );
    let (_, lost) = normalise(s, &mut w.logp, k, count, &mut w.row_max, &mut w.row_sum);
    for r in 0..count {
        let (t, lane) = (r / LANES, r % LANES);
        let sum = w.row_sum[t][lane];
        loglik[r] = if sum > 0.0 {
            w.row_max[t][lane] + sum.ln()
        } else {
            f64::NEG_INFINITY
        };
    }
    if let Some(resp) = resp {
        for r in 0..count {
            let (t, lane) = (r / LANES, r % LANES);
            for c in 0..k {
                resp[r * k + c] = w.logp[c * TILES + t][lane];
            }
        }
    }
    w.tiles = tiles;
    put_work(w);
    lost
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernel::{avx2::Avx2, avx512::Avx512};

    /// The vector exp on every lane of `xs`, a tile at a time.
    fn exp_all<S: Simd>(s: S, xs: &[f64]) -> Vec<f64> {
        let mut out = Vec::new();
        for chunk in xs.chunks(LANES) {
            let mut tile = Lanes::default();
            tile[..chunk.len()].copy_from_slice(chunk);
            for u in 0..S::UNITS {
                let v = exp_nonpositive(s, s.load(&tile, u));
                s.store(&mut tile, u, v);
            }
            out.extend_from_slice(&tile[..chunk.len()]);
        }
        out
    }

    fn check_exp<S: Simd>(s: S) {
        let xs: Vec<f64> = (0..43_790).map(|i| -0.013_7 * i as f64).collect(); // down to −599.9
        let mut worst: f64 = 0.0;
        for (x, e) in xs.iter().zip(exp_all(s, &xs)) {
            let exact = x.exp(); // libm
            worst = worst.max(((e - exact) / exact).abs());
        }
        assert!(worst < 4.0 * f64::EPSILON, "worst relative error {worst:e}");
        let edges = exp_all(s, &[0.0, -600.5, f64::NEG_INFINITY, f64::NAN, -1e-300]);
        assert_eq!(edges[..3], [1.0, 0.0, 0.0]);
        assert!(edges[3].is_nan());
        assert_eq!(edges[4], 1.0);
    }

    #[test]
    fn vector_exp_matches_libm_to_a_few_ulp_on_every_path() {
        if let Some(s) = Avx512::detect() {
            check_exp(s);
        }
        if let Some(s) = Avx2::detect() {
            check_exp(s);
        }
    }

    #[test]
    fn strips_hold_the_lower_triangle_padded_with_zeros() {
        // D = 5: strips of rows 0..4 (columns 0..4) and 4..8 (columns 0..5).
        let w: Vec<f64> = (1..=15).map(f64::from).collect();
        let mut out = Vec::new();
        prepare_strips(&w, 5, &mut out);
        assert_eq!(out.len(), 4 * 4 + 4 * 5);
        // Column 1 of the first strip: W[0][1] = 0 (above the diagonal), W[1][1], W[2][1], W[3][1].
        assert_eq!(
            out[4..8],
            [0.0, w[packed(1, 1)], w[packed(2, 1)], w[packed(3, 1)]]
        );
        // Column 4 of the second strip: W[4][4], then rows 5..8 past D.
        assert_eq!(out[16 + 16..16 + 20], [w[packed(4, 4)], 0.0, 0.0, 0.0]);
    }
}
