//! Agreement between a clustering and known labels: adjusted Rand index (Hubert & Arabie 1985)
//! and normalised mutual information. Reported beside candidates, never used to choose.

use std::collections::HashMap;

/// Contingency table of two labelings of the same rows.
fn contingency<A: std::hash::Hash + Eq, B: std::hash::Hash + Eq>(
    a: &[A],
    b: &[B],
) -> (Vec<Vec<f64>>, usize) {
    let mut ia = HashMap::new();
    let mut ib = HashMap::new();
    let mut cells: HashMap<(usize, usize), f64> = HashMap::new();
    for (x, y) in a.iter().zip(b) {
        let na = ia.len();
        let i = *ia.entry(x).or_insert(na);
        let nb = ib.len();
        let j = *ib.entry(y).or_insert(nb);
        *cells.entry((i, j)).or_insert(0.0) += 1.0;
    }
    let mut table = vec![vec![0.0; ib.len()]; ia.len()];
    for ((i, j), v) in cells {
        table[i][j] = v;
    }
    (table, a.len())
}

fn pairs(x: f64) -> f64 {
    x * (x - 1.0) / 2.0
}

/// Adjusted Rand index of two labelings (Hubert & Arabie 1985): 1 for identical partitions,
/// about 0 for independent ones. Defined as 1 when both put every row in one group.
pub fn adjusted_rand_index<A: std::hash::Hash + Eq, B: std::hash::Hash + Eq>(
    a: &[A],
    b: &[B],
) -> f64 {
    let (table, n) = contingency(a, b);
    let sum_cells: f64 = table.iter().flatten().map(|&v| pairs(v)).sum();
    let sum_rows: f64 = table.iter().map(|r| pairs(r.iter().sum())).sum();
    let cols = table.first().map_or(0, Vec::len);
    let sum_cols: f64 = (0..cols)
        .map(|j| pairs(table.iter().map(|r| r[j]).sum()))
        .sum();
    let expected = sum_rows * sum_cols / pairs(n as f64);
    let max = 0.5 * (sum_rows + sum_cols);
    if (max - expected).abs() < f64::EPSILON * max.max(1.0) {
        return 1.0;
    }
    (sum_cells - expected) / (max - expected)
}

/// Mutual information of two labelings normalised by the arithmetic mean of their entropies,
/// 2·I(A;B)/(H(A)+H(B)), in [0, 1]. Defined as 1 when both entropies are 0.
pub fn normalised_mutual_information<A: std::hash::Hash + Eq, B: std::hash::Hash + Eq>(
    a: &[A],
    b: &[B],
) -> f64 {
    let (table, n) = contingency(a, b);
    let n = n as f64;
    let rows: Vec<f64> = table.iter().map(|r| r.iter().sum()).collect();
    let cols = table.first().map_or(0, Vec::len);
    let colsum: Vec<f64> = (0..cols)
        .map(|j| table.iter().map(|r| r[j]).sum())
        .collect();
    let entropy = |v: &[f64]| {
        -v.iter()
            .filter(|&&c| c > 0.0)
            .map(|&c| (c / n) * (c / n).ln())
            .sum::<f64>()
    };
    let (ha, hb) = (entropy(&rows), entropy(&colsum));
    let mut mi = 0.0;
    for (i, r) in table.iter().enumerate() {
        for (j, &c) in r.iter().enumerate() {
            if c > 0.0 {
                mi += (c / n) * ((c * n) / (rows[i] * colsum[j])).ln();
            }
        }
    }
    if ha + hb <= 0.0 {
        return 1.0;
    }
    (2.0 * mi / (ha + hb)).clamp(0.0, 1.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn identical_and_relabelled_partitions_agree_fully() {
        let a = [0, 0, 1, 1, 2, 2];
        let b = ["x", "x", "y", "y", "z", "z"];
        assert!((adjusted_rand_index(&a, &b) - 1.0).abs() < 1e-12);
        assert!((normalised_mutual_information(&a, &b) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn adjusted_rand_matches_a_hand_computed_table() {
        // Table [[2,1],[0,3]]: Σ C(nij,2) = 1+0+0+3 = 4; rows (3,3) → 3+3 = 6; cols (2,4) → 1+6 = 7;
        // C(6,2) = 15; expected = 6·7/15 = 2.8; max = 6.5; ARI = (4−2.8)/(6.5−2.8) = 0.3243…
        let a = [0, 0, 0, 1, 1, 1];
        let b = [0, 0, 1, 1, 1, 1];
        assert!((adjusted_rand_index(&a, &b) - 1.2 / 3.7).abs() < 1e-12);
    }
}
