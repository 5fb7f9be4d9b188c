//! [`Folds`]: a seeded shuffle of the rows split into k nearly equal parts. Every candidate of a
//! sweep uses the same folds, so held-out scores can be compared row by row.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Row indices of each fold's held-out part and of its training part (both ascending).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Folds {
    heldout: Vec<Vec<u32>>,
    training: Vec<Vec<u32>>,
}

/// The stream number of the fold shuffle (EM starts use streams numbered by restart).
const FOLD_STREAM: u64 = u64::MAX;

impl Folds {
    /// Shuffles `0..rows` with a Fisher–Yates shuffle from the seed's ChaCha8 stream and deals
    /// it into `k` parts whose sizes differ by at most one.
    pub fn shuffled(rows: usize, k: usize, seed: u64) -> Self {
        assert!(
            k >= 2 && k <= rows,
            "2 ≤ folds ≤ rows is checked by the settings"
        );
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(FOLD_STREAM);
        let mut order: Vec<u32> = (0..rows as u32).collect();
        for i in (1..rows).rev() {
            // Lemire's multiply-shift: an unbiased enough index for shuffling (bias < 2^-32·rows).
            let j = ((rng.next_u64() >> 32) * (i as u64 + 1)) >> 32;
            order.swap(i, j as usize);
        }
        let mut heldout = Vec::with_capacity(k);
        let (base, extra) = (rows / k, rows % k);
        let mut start = 0;
        for f in 0..k {
            let len = base + usize::from(f < extra);
            let mut part = order[start..start + len].to_vec();
            part.sort_unstable();
            heldout.push(part);
            start += len;
        }
        let mut fold_of = vec![0usize; rows];
        for (f, part) in heldout.iter().enumerate() {
            for &r in part {
                fold_of[r as usize] = f;
            }
        }
        let training = (0..k)
            .map(|f| {
                (0..rows as u32)
                    .filter(|&r| fold_of[r as usize] != f)
                    .collect()
            })
            .collect();
        Folds { heldout, training }
    }

    /// Number of folds.
    pub fn len(&self) -> usize {
        self.heldout.len()
    }

    /// Always false: there are at least two folds.
    pub fn is_empty(&self) -> bool {
        self.heldout.is_empty()
    }

    /// Held-out rows of fold `f`.
    pub fn heldout(&self, f: usize) -> &[u32] {
        &self.heldout[f]
    }

    /// Training rows of fold `f` (every row not held out by it).
    pub fn training(&self, f: usize) -> &[u32] {
        &self.training[f]
    }

    /// The smallest training part, which bounds the free parameters a candidate may have.
    pub fn smallest_training(&self) -> usize {
        self.training.iter().map(Vec::len).min().unwrap_or(0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn folds_partition_the_rows() {
        let f = Folds::shuffled(103, 5, 9);
        let mut all: Vec<u32> = (0..5).flat_map(|i| f.heldout(i).to_vec()).collect();
        all.sort_unstable();
        assert_eq!(all, (0..103).collect::<Vec<u32>>());
        for i in 0..5 {
            assert!(f.heldout(i).len() == 20 || f.heldout(i).len() == 21);
            assert_eq!(f.training(i).len() + f.heldout(i).len(), 103);
        }
        assert_eq!(f, Folds::shuffled(103, 5, 9));
        assert_ne!(f, Folds::shuffled(103, 5, 10));
    }
}
