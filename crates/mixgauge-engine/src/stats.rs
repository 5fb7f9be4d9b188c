//! The fixed reduction tree that makes every parallel pass reproducible, and the small
//! records that passes produce: per-column moments and re-seeding events.
//!
//! [`reduce_blocks`] splits the block range at fixed midpoints and combines the halves left
//! then right. The tree's shape depends only on the number of blocks, never on the number of
//! threads or on which thread ran what, so floating-point sums come out bit-identical.

use serde::{Deserialize, Serialize};

use crate::Error;
use crate::kernel::{BLOCK_ROWS, block_count};
use crate::rows::Rows;

/// Computes `leaf(b)` for every block `b` in `0..blocks` in parallel and combines the results
/// with `merge` over a fixed binary tree.
pub(crate) fn reduce_blocks<T, L, M>(blocks: usize, leaf: &L, merge: &M) -> T
where
    T: Send,
    L: Fn(usize) -> T + Sync,
    M: Fn(T, T) -> T + Sync,
{
    fn go<T: Send, L: Fn(usize) -> T + Sync, M: Fn(T, T) -> T + Sync>(
        lo: usize,
        hi: usize,
        leaf: &L,
        merge: &M,
    ) -> T {
        if hi - lo == 1 {
            return leaf(lo);
        }
        let mid = lo + (hi - lo) / 2;
        let (a, b) = rayon::join(|| go(lo, mid, leaf, merge), || go(mid, hi, leaf, merge));
        merge(a, b)
    }
    assert!(blocks > 0, "reduce_blocks needs at least one block");
    go(0, blocks, leaf, merge)
}

/// Per-column mean and variance of some rows (divisor N), computed in two passes so that the
/// variance is a sum of centred squares.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ColumnMoments {
    /// Mean of each column.
    pub means: Vec<f64>,
    /// Variance of each column (population form, divisor N).
    pub variances: Vec<f64>,
}

impl ColumnMoments {
    /// Moments of the rows in `rows`.
    ///
    /// # Errors
    /// [`Error::TooWide`] when a column's variance overflows double precision.
    pub fn of(rows: &Rows) -> Result<Self, Error> {
        let d = rows.dims();
        let n = rows.len();
        let blocks = block_count(n);
        let range = |b: usize| (b * BLOCK_ROWS)..((b + 1) * BLOCK_ROWS).min(n);
        let add = |mut a: Vec<f64>, b: Vec<f64>| {
            for (x, y) in a.iter_mut().zip(&b) {
                *x += y;
            }
            a
        };
        let sums = reduce_blocks(
            blocks,
            &|b| {
                let mut s = vec![0.0; d];
                for i in range(b) {
                    for (acc, &v) in s.iter_mut().zip(rows.row(i)) {
                        *acc += v;
                    }
                }
                s
            },
            &add,
        );
        let means: Vec<f64> = sums.iter().map(|s| s / n as f64).collect();
        let squares = reduce_blocks(
            blocks,
            &|b| {
                let mut s = vec![0.0; d];
                for i in range(b) {
                    for ((acc, &v), &m) in s.iter_mut().zip(rows.row(i)).zip(&means) {
                        let c = v - m;
                        *acc += c * c;
                    }
                }
                s
            },
            &add,
        );
        let variances: Vec<f64> = squares.iter().map(|s| s / n as f64).collect();
        if let Some(column) = variances.iter().position(|v| !v.is_finite() || *v > 1e300) {
            return Err(Error::TooWide {
                column,
                variance: variances[column],
            });
        }
        Ok(ColumnMoments { means, variances })
    }
}

/// A component that lost its rows during EM and what was done about it.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Reseed {
    /// Restart the event happened in.
    pub restart: usize,
    /// EM iteration (number of updates applied before it).
    pub iteration: usize,
    /// Zero-based component.
    pub component: usize,
    /// Its effective row count (sum of responsibilities) when it fell below the floor.
    pub effective_rows: f64,
    /// Row of the data (zero-based, of the view fitted) it was moved to, or `None` when the
    /// re-seeding budget was spent and it kept its previous mean and covariance.
    pub moved_to_row: Option<usize>,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn moments_are_centred_and_exact_on_offset_data() {
        // A large offset would ruin E[x²] − E[x]²; the centred two-pass form keeps it exact.
        let values: Vec<f64> = (0..1000).map(|i| 1e9 + (i % 2) as f64).collect();
        let m = ColumnMoments::of(&Rows::new(&values, 1).unwrap()).unwrap();
        assert_eq!(m.means[0], 1e9 + 0.5);
        assert_eq!(m.variances[0], 0.25);
    }

    #[test]
    fn reduction_tree_is_the_same_for_any_pool() {
        let leaf = |b: usize| ((b as f64) * 0.1).sin() * 1e-3 + 1.0 / (b as f64 + 1.0);
        let merge = |a: f64, b: f64| a + b;
        let one = rayon::ThreadPoolBuilder::new()
            .num_threads(1)
            .build()
            .unwrap();
        let two = rayon::ThreadPoolBuilder::new()
            .num_threads(2)
            .build()
            .unwrap();
        let a = one.install(|| reduce_blocks(1001, &leaf, &merge));
        let b = two.install(|| reduce_blocks(1001, &leaf, &merge));
        assert_eq!(a.to_bits(), b.to_bits());
    }
}
