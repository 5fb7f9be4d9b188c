//! The portable path: the fused pass in plain Rust over 8-lane arrays, the readable reference
//! the vector paths are checked against.
//!
//! Every inner loop runs across the lanes of a tile (one row per lane), so the compiler can
//! vectorise it for the target's baseline (SSE2 on x86-64) without being told how. No fused
//! multiply-add: each `a * b + c` rounds twice, exactly as written.

use std::cell::RefCell;

use super::{BLOCK_ROWS, Block, LANES, Lanes, PassStats, TILES, gather, resize};
use crate::form::CovarianceForm;
use crate::linalg::packed;
use crate::model::Mixture;
use crate::rows::Rows;

/// Working memory for one block, reused by each worker thread.
#[derive(Default)]
struct Scratch {
    tiles: Vec<Lanes>,
    logp: Vec<f64>,
    centred: Vec<Lanes>,
    weighted: Vec<Lanes>,
    first: Vec<Lanes>,
    second: Vec<Lanes>,
    row_max: Vec<f64>,
    row_sum: Vec<f64>,
}

thread_local! {
    static SCRATCH: RefCell<Scratch> = RefCell::new(Scratch::default());
}

/// Borrows this thread's scratch by moving it out (and back with [`put_scratch`]).
fn take_scratch() -> Scratch {
    SCRATCH.with(RefCell::take)
}

fn put_scratch(s: Scratch) {
    SCRATCH.with(|cell| *cell.borrow_mut() = s);
}

/// e^x for x ≤ 0, exact to a few ulp, and 0 below −600.
///
/// Cody–Waite reduction x = n·ln2 + r with |r| ≤ ln2/2 (constants from fdlibm), a degree-13
/// Taylor polynomial for e^r (truncation error below 4e-18 relative), and 2^n built in the
/// exponent bits. Written with plain arithmetic so that the compiler vectorises it across a
/// tile; libm's `exp` would be a scalar call per value.
#[inline(always)]
pub(crate) fn exp_nonpositive(x: f64) -> f64 {
    const ROUND: f64 = 6_755_399_441_055_744.0; // 1.5·2^52: adding it rounds to an integer
    const LN2_HI: f64 = 6.931_471_803_691_238e-1;
    const LN2_LO: f64 = 1.908_214_929_270_587_7e-10;
    const CUTOFF: f64 = -600.0;
    let xc = if x < CUTOFF { CUTOFF } else { x };
    let t = xc * std::f64::consts::LOG2_E + ROUND;
    let n = t - ROUND;
    let r = (xc - n * LN2_HI) - n * LN2_LO;
    let mut p = 1.0 / 6_227_020_800.0; // 1/13!
    p = p * r + 1.0 / 479_001_600.0;
    p = p * r + 1.0 / 39_916_800.0;
    p = p * r + 1.0 / 3_628_800.0;
    p = p * r + 1.0 / 362_880.0;
    p = p * r + 1.0 / 40_320.0;
    p = p * r + 1.0 / 5_040.0;
    p = p * r + 1.0 / 720.0;
    p = p * r + 1.0 / 120.0;
    p = p * r + 1.0 / 24.0;
    p = p * r + 1.0 / 6.0;
    p = p * r + 0.5;
    p = p * r + 1.0;
    p = p * r + 1.0;
    let exponent = t.to_bits().wrapping_sub(ROUND.to_bits()).wrapping_add(1023) << 52;
    let v = p * f64::from_bits(exponent);
    if x < CUTOFF { 0.0 } else { v }
}

/// Log-density of component `k` (weight included) for every lane of every tile.
#[inline(always)]
fn component_logp(
    model: &Mixture,
    k: usize,
    tiles: &[Lanes],
    ntiles: usize,
    centred: &mut [Lanes],
    out: &mut [f64],
) {
    let d = model.dims();
    let mean = model.mean(k);
    let constant = model.log_norm[k];
    match model.form() {
        CovarianceForm::Full => {
            let p = d * (d + 1) / 2;
            let w = &model.factors[k * p..(k + 1) * p];
            for t in 0..ntiles {
                let x = &tiles[t * d..(t + 1) * d];
                for j in 0..d {
                    for lane in 0..LANES {
                        centred[j][lane] = x[j][lane] - mean[j];
                    }
                }
                let mut sq = [0.0; LANES];
                for i in 0..d {
                    let wi = &w[packed(i, 0)..=packed(i, i)];
                    let mut z = [0.0; LANES];
                    for (xj, &wij) in centred.iter().zip(wi) {
                        for lane in 0..LANES {
                            z[lane] += wij * xj[lane];
                        }
                    }
                    for lane in 0..LANES {
                        sq[lane] += z[lane] * z[lane];
                    }
                }
                for lane in 0..LANES {
                    out[t * LANES + lane] = constant - 0.5 * sq[lane];
                }
            }
        }
        CovarianceForm::Diagonal => {
            let prec = &model.factors[k * d..(k + 1) * d];
            for t in 0..ntiles {
                let x = &tiles[t * d..(t + 1) * d];
                let mut sq = [0.0; LANES];
                for j in 0..d {
                    for lane in 0..LANES {
                        let c = x[j][lane] - mean[j];
                        sq[lane] += c * c * prec[j];
                    }
                }
                for lane in 0..LANES {
                    out[t * LANES + lane] = constant - 0.5 * sq[lane];
                }
            }
        }
    }
}

/// Turns the block's per-component log-densities into responsibilities in place and
/// returns, per valid row, the log-density via `row_max` and `row_sum` (log = max + ln sum).
/// Rows whose log-density is −∞ under every component get zero responsibilities and
/// `row_sum = 0`.
#[inline(always)]
fn normalise(logp: &mut [f64], k: usize, len: usize, row_max: &mut [f64], row_sum: &mut [f64]) {
    row_max[..len].copy_from_slice(&logp[..len]);
    for c in 1..k {
        let lp = &logp[c * BLOCK_ROWS..c * BLOCK_ROWS + len];
        for (m, &v) in row_max[..len].iter_mut().zip(lp) {
            *m = if v > *m { v } else { *m };
        }
    }
    row_sum[..len].fill(0.0);
    for c in 0..k {
        let lp = &mut logp[c * BLOCK_ROWS..c * BLOCK_ROWS + len];
        for ((v, &m), s) in lp.iter_mut().zip(&row_max[..len]).zip(&mut row_sum[..len]) {
            let e = exp_nonpositive(*v - m);
            *v = e;
            *s += e;
        }
    }
    // A row at −∞ for every component has max = −∞ and NaN differences: zero it.
    for r in 0..len {
        if row_max[r] == f64::NEG_INFINITY || row_max[r].is_nan() {
            row_sum[r] = 0.0;
            for c in 0..k {
                logp[c * BLOCK_ROWS + r] = 0.0;
            }
        }
    }
    for r in 0..len {
        let s = row_sum[r];
        row_sum[r] = if s > 0.0 { s } else { 0.0 };
    }
    for c in 0..k {
        let lp = &mut logp[c * BLOCK_ROWS..c * BLOCK_ROWS + len];
        for (v, &s) in lp.iter_mut().zip(&row_sum[..len]) {
            *v = if s > 0.0 { *v / s } else { 0.0 };
        }
    }
}

/// Adds component `k`'s weighted moments of one block into lane accumulators.
#[allow(clippy::too_many_arguments)] // the scratch buffers are passed apart to borrow them separately
#[inline(always)]
fn accumulate_moments(
    form: CovarianceForm,
    d: usize,
    centre: &[f64],
    tiles: &[Lanes],
    resp: &[f64],
    ntiles: usize,
    centred: &mut [Lanes],
    weighted: &mut [Lanes],
    weight: &mut Lanes,
    first: &mut [Lanes],
    second: &mut [Lanes],
) {
    for t in 0..ntiles {
        let r: &[f64; LANES] = resp[t * LANES..(t + 1) * LANES]
            .try_into()
            .expect("tile of responsibilities");
        if r.iter().all(|&v| v <= 0.0) {
            continue;
        }
        let x = &tiles[t * d..(t + 1) * d];
        for j in 0..d {
            for lane in 0..LANES {
                let c = x[j][lane] - centre[j];
                centred[j][lane] = c;
                weighted[j][lane] = r[lane] * c;
            }
        }
        for lane in 0..LANES {
            weight[lane] += r[lane];
        }
        for j in 0..d {
            for lane in 0..LANES {
                first[j][lane] += weighted[j][lane];
            }
        }
        match form {
            CovarianceForm::Full => {
                for i in 0..d {
                    let wi = weighted[i];
                    let row = &mut second[packed(i, 0)..=packed(i, i)];
                    for (acc, xj) in row.iter_mut().zip(centred.iter()) {
                        for lane in 0..LANES {
                            acc[lane] += wi[lane] * xj[lane];
                        }
                    }
                }
            }
            CovarianceForm::Diagonal => {
                for j in 0..d {
                    for lane in 0..LANES {
                        second[j][lane] += weighted[j][lane] * centred[j][lane];
                    }
                }
            }
        }
    }
}

/// Sums the lanes of an accumulator in a fixed order.
#[inline]
fn lane_sum(v: &Lanes) -> f64 {
    let mut s = 0.0;
    for &x in v.iter() {
        s += x;
    }
    s
}

/// Leaves each row's responsibilities in `s.logp` (component-major) with its log-density as
/// `row_max + ln row_sum`.
fn block_responsibilities(model: &Mixture, tiles: &[Lanes], count: usize, s: &mut Scratch) {
    let k = model.components();
    let d = model.dims();
    let ntiles = count.div_ceil(LANES);
    resize(&mut s.logp, k * BLOCK_ROWS);
    resize(&mut s.centred, d);
    resize(&mut s.row_max, BLOCK_ROWS);
    resize(&mut s.row_sum, BLOCK_ROWS);
    for c in 0..k {
        component_logp(
            model,
            c,
            tiles,
            ntiles,
            &mut s.centred,
            &mut s.logp[c * BLOCK_ROWS..],
        );
    }
    normalise(
        &mut s.logp,
        k,
        ntiles * LANES,
        &mut s.row_max,
        &mut s.row_sum,
    );
}

/// One block of a fitting pass (see [`super::fit_block`]).
pub(crate) fn fit_block(
    model: &Mixture,
    block: Block,
    centres: &[f64],
    accumulate: bool,
) -> PassStats {
    let k = model.components();
    let d = model.dims();
    let form = model.form();
    let p = form.packed_len(d);
    let count = block.count;
    let ntiles = count.div_ceil(LANES);
    let mut out = PassStats::zeros(k, d, p, accumulate);
    let mut scratch = take_scratch();
    {
        let s = &mut scratch;
        resize(&mut s.weighted, d);
        resize(&mut s.first, d);
        resize(&mut s.second, p);
        block_responsibilities(model, block.tiles, count, s);
        let padded = ntiles * LANES;
        // Mask the padding lanes out of every sum.
        for c in 0..k {
            s.logp[c * BLOCK_ROWS + count..c * BLOCK_ROWS + padded].fill(0.0);
        }
        // One ln per tile, of the product of its row sums (each in [1, K]).
        let mut loglik = 0.0;
        for t in 0..ntiles {
            let mut product = 1.0;
            let mut max_sum = 0.0;
            for lane in 0..LANES.min(count - t * LANES) {
                let r = t * LANES + lane;
                if s.row_sum[r] > 0.0 {
                    product *= s.row_sum[r];
                    max_sum += s.row_max[r];
                } else {
                    out.lost_rows += 1;
                }
            }
            loglik += max_sum + product.ln();
        }
        out.loglik = loglik;
        if accumulate {
            for c in 0..k {
                let mut weight = Lanes::default();
                s.first[..d].fill(Lanes::default());
                s.second[..p].fill(Lanes::default());
                accumulate_moments(
                    form,
                    d,
                    &centres[c * d..(c + 1) * d],
                    block.tiles,
                    &s.logp[c * BLOCK_ROWS..(c + 1) * BLOCK_ROWS],
                    ntiles,
                    &mut s.centred[..d],
                    &mut s.weighted[..d],
                    &mut weight,
                    &mut s.first[..d],
                    &mut s.second[..p],
                );
                out.weight[c] = lane_sum(&weight);
                for j in 0..d {
                    out.first[c * d + j] = lane_sum(&s.first[j]);
                }
                for q in 0..p {
                    out.second[c * p + q] = lane_sum(&s.second[q]);
                }
            }
        }
    }
    put_scratch(scratch);
    out
}

/// One block of a scoring pass (see [`super::score_block`]).
pub(crate) fn score_block(
    model: &Mixture,
    rows: &Rows,
    block: usize,
    loglik: &mut [f64],
    resp: Option<&mut [f64]>,
) -> usize {
    let k = model.components();
    let start = block * BLOCK_ROWS;
    let count = (rows.len() - start).min(BLOCK_ROWS);
    let mut scratch = take_scratch();
    let mut tiles = std::mem::take(&mut scratch.tiles);
    resize(&mut tiles, TILES * rows.dims());
    gather(rows, start, count, &mut tiles);
    let lost = {
        let s = &mut scratch;
        block_responsibilities(model, &tiles, count, s);
        let mut lost = 0;
        for r in 0..count {
            loglik[r] = if s.row_sum[r] > 0.0 {
                s.row_max[r] + s.row_sum[r].ln()
            } else {
                lost += 1;
                f64::NEG_INFINITY
            };
        }
        if let Some(resp) = resp {
            for r in 0..count {
                for c in 0..k {
                    resp[r * k + c] = s.logp[c * BLOCK_ROWS + r];
                }
            }
        }
        lost
    };
    scratch.tiles = tiles;
    put_scratch(scratch);
    lost
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn vector_exp_matches_libm_to_a_few_ulp() {
        let mut worst: f64 = 0.0;
        let mut x: f64 = 0.0;
        while x > -600.0 {
            let exact = x.exp();
            let ours = exp_nonpositive(x);
            worst = worst.max(((ours - exact) / exact).abs());
            x -= 0.013_7;
        }
        assert!(worst < 4.0 * f64::EPSILON, "worst relative error {worst:e}");
        assert_eq!(exp_nonpositive(0.0), 1.0);
        assert_eq!(exp_nonpositive(-600.5), 0.0);
        assert_eq!(exp_nonpositive(f64::NEG_INFINITY), 0.0);
    }
}
