//! The fused E+M pass over one block of rows, and the scoring pass, in three instruction-set
//! paths chosen at run time by [`crate::dispatch`].
//!
//! Rows are laid out in tiles of [`LANES`] rows, column by column (`tile[column][lane]`), so
//! that every inner loop runs across rows: a vector lane is a row. A fit lays its rows out once
//! ([`Tiled`]); a scoring pass gathers each block as it goes. The padding lanes of a short last
//! tile repeat the block's last row and are masked out of every sum.
//!
//! Per block a pass (1) computes each component's log-density for every row,
//! `constₖ − ½‖Lₖ⁻¹(x − μₖ)‖²` (a triangular product over the lower triangle only), (2) turns
//! the K values of each row into responsibilities with log-sum-exp (the row maximum is
//! subtracted before `exp`, so nothing overflows), and (3) when fitting, accumulates each
//! component's sufficient statistics around a provisional centre (its current mean): Σr,
//! Σr(x−c) and Σr(x−c)(x−c)ᵀ. Centring avoids the cancellation of E[xxᵀ] − μμᵀ.
//! Responsibilities below e^−600 are exactly zero: they cannot change any sum, and subnormal
//! numbers are slow.
//!
//! The paths:
//! - [`portable`]: plain Rust over 8-lane arrays, the readable reference. Compiled for the
//!   baseline of the target (SSE2 on x86-64), it runs everywhere.
//! - `avx512` and `avx2` (x86-64 only): the same pass written once over explicit vectors
//!   (`simd`) and instantiated for AVX-512F (one 8-lane register per tile) and AVX2 with FMA
//!   (two 4-lane registers per tile). They use fused multiply-add and sum in a different order
//!   from the reference, so they agree with it to rounding (about 1e-15 relative per pass), not
//!   bit for bit. Each path on its own is bit-identical for any thread count: a block's result
//!   depends only on the block, and blocks are combined over a fixed tree.

use std::ops::{Deref, DerefMut};

use rayon::prelude::*;

use crate::dispatch::{Variant, variant};
use crate::model::Mixture;
use crate::rows::Rows;

#[cfg(target_arch = "x86_64")]
pub(crate) mod avx2;
#[cfg(target_arch = "x86_64")]
pub(crate) mod avx512;
mod portable;
#[cfg(target_arch = "x86_64")]
mod simd;

/// Rows per vector tile.
pub(crate) const LANES: usize = 8;
/// Rows per block: the unit of parallel work and of the fixed reduction tree.
pub(crate) const BLOCK_ROWS: usize = 256;
/// Tiles per block.
pub(crate) const TILES: usize = BLOCK_ROWS / LANES;

/// One column of one tile: a value per row (lane), aligned to a 64-byte cache line so that a
/// tile column is one aligned AVX-512 load or two aligned AVX2 loads.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
#[repr(C, align(64))]
pub(crate) struct Lanes(pub [f64; LANES]);

impl Deref for Lanes {
    type Target = [f64; LANES];
    fn deref(&self) -> &Self::Target {
        &self.0
    }
}

impl DerefMut for Lanes {
    fn deref_mut(&mut self) -> &mut Self::Target {
        &mut self.0
    }
}

/// Sufficient statistics of one pass over some rows.
#[derive(Clone, Debug)]
pub(crate) struct PassStats {
    /// Σ over rows of the row's log-density under the current model.
    pub loglik: f64,
    /// Rows whose log-density is not representable (−∞ for every component).
    pub lost_rows: usize,
    /// Σr per component.
    pub weight: Vec<f64>,
    /// Σr(x−c) per component, K×D.
    pub first: Vec<f64>,
    /// Σr(x−c)(x−c)ᵀ per component, K×packed (lower triangle for full, diagonal otherwise).
    pub second: Vec<f64>,
}

impl PassStats {
    pub(crate) fn zeros(k: usize, d: usize, p: usize, accumulate: bool) -> Self {
        let (kw, kd, kp) = if accumulate {
            (k, k * d, k * p)
        } else {
            (0, 0, 0)
        };
        PassStats {
            loglik: 0.0,
            lost_rows: 0,
            weight: vec![0.0; kw],
            first: vec![0.0; kd],
            second: vec![0.0; kp],
        }
    }

    /// Adds `other` into `self`; the caller fixes the order, so sums are reproducible.
    pub fn merge(mut self, other: PassStats) -> PassStats {
        self.loglik += other.loglik;
        self.lost_rows += other.lost_rows;
        for (a, b) in self.weight.iter_mut().zip(&other.weight) {
            *a += b;
        }
        for (a, b) in self.first.iter_mut().zip(&other.first) {
            *a += b;
        }
        for (a, b) in self.second.iter_mut().zip(&other.second) {
            *a += b;
        }
        self
    }
}

/// Number of blocks that cover `rows` rows.
pub(crate) fn block_count(rows: usize) -> usize {
    rows.div_ceil(BLOCK_ROWS)
}

pub(crate) fn resize<T: Clone + Default>(v: &mut Vec<T>, len: usize) {
    if v.len() < len {
        v.resize(len, T::default());
    }
}

/// Rows `[start, start + count)` of the view, gathered into tiles.
#[inline]
pub(crate) fn gather(rows: &Rows, start: usize, count: usize, tiles: &mut [Lanes]) {
    let d = rows.dims();
    let ntiles = count.div_ceil(LANES);
    for t in 0..ntiles {
        for lane in 0..LANES {
            let i = start + (t * LANES + lane).min(count - 1);
            let row = rows.row(i);
            for (j, &v) in row.iter().enumerate() {
                tiles[t * d + j][lane] = v;
            }
        }
    }
}

/// The rows of a fit, laid out in tiles once so that each EM pass reads them directly.
///
/// Block `b` occupies `TILES·D` tile columns starting at `b·TILES·D` (a short last block
/// leaves the end unused). The copy costs as much memory as the rows themselves.
pub(crate) struct Tiled {
    tiles: Vec<Lanes>,
    dims: usize,
    rows: usize,
}

/// One block of tiled rows: `count` valid rows in `count.div_ceil(LANES)` tiles.
#[derive(Clone, Copy)]
pub(crate) struct Block<'a> {
    pub tiles: &'a [Lanes],
    pub count: usize,
}

impl Tiled {
    /// Lays out every row of the view (blocks in parallel).
    pub(crate) fn new(rows: &Rows) -> Tiled {
        let d = rows.dims();
        let n = rows.len();
        let mut tiles = vec![Lanes::default(); block_count(n) * TILES * d];
        tiles
            .par_chunks_mut(TILES * d)
            .enumerate()
            .for_each(|(b, out)| {
                let start = b * BLOCK_ROWS;
                gather(rows, start, (n - start).min(BLOCK_ROWS), out);
            });
        Tiled {
            tiles,
            dims: d,
            rows: n,
        }
    }

    pub(crate) fn block(&self, b: usize) -> Block<'_> {
        let span = TILES * self.dims;
        let start = b * BLOCK_ROWS;
        Block {
            tiles: &self.tiles[b * span..(b + 1) * span],
            count: (self.rows - start).min(BLOCK_ROWS),
        }
    }

    pub(crate) fn len(&self) -> usize {
        self.rows
    }
}

/// One block of a fitting pass: the log-likelihood of its rows under `model`, and, when
/// `accumulate`, the sufficient statistics around `centres` (K×D).
pub(crate) fn fit_block(
    model: &Mixture,
    tiled: &Tiled,
    block: usize,
    centres: &[f64],
    accumulate: bool,
) -> PassStats {
    let block = tiled.block(block);
    match variant() {
        Variant::Portable => portable::fit_block(model, block, centres, accumulate),
        #[cfg(target_arch = "x86_64")]
        Variant::Avx2(path) => path.fit_block(model, block, centres, accumulate),
        #[cfg(target_arch = "x86_64")]
        Variant::Avx512(path) => path.fit_block(model, block, centres, accumulate),
    }
}

/// One block of a scoring pass: per-row log-densities into `loglik` (one per row of the
/// block) and, if given, responsibilities into `resp` (row-major, K per row).
/// Returns the number of rows whose log-density is −∞ (written as −∞).
pub(crate) fn score_block(
    model: &Mixture,
    rows: &Rows,
    block: usize,
    loglik: &mut [f64],
    resp: Option<&mut [f64]>,
) -> usize {
    match variant() {
        Variant::Portable => portable::score_block(model, rows, block, loglik, resp),
        #[cfg(target_arch = "x86_64")]
        Variant::Avx2(path) => path.score_block(model, rows, block, loglik, resp),
        #[cfg(target_arch = "x86_64")]
        Variant::Avx512(path) => path.score_block(model, rows, block, loglik, resp),
    }
}
