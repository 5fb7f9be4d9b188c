//! Small dense linear algebra on packed lower triangles: Cholesky factors and their inverses
//! (through nalgebra), and the packed index arithmetic the kernels share.
//!
//! A full covariance is stored packed, row by row: entry (i, j) with j ≤ i sits at
//! `i(i+1)/2 + j`. Scoring needs W = L⁻¹ where Σ = L·Lᵀ, because (x−μ)ᵀΣ⁻¹(x−μ) = ‖W(x−μ)‖²
//! and ½·ln|Σ| = Σᵢ ln Lᵢᵢ.

use nalgebra::DMatrix;

/// Position of entry (i, j), j ≤ i, in a packed lower triangle.
#[inline]
pub(crate) fn packed(i: usize, j: usize) -> usize {
    i * (i + 1) / 2 + j
}

/// Expands a packed lower triangle into a dense symmetric matrix.
pub(crate) fn dense_symmetric(tri: &[f64], d: usize) -> DMatrix<f64> {
    DMatrix::from_fn(d, d, |i, j| {
        if j <= i {
            tri[packed(i, j)]
        } else {
            tri[packed(j, i)]
        }
    })
}

/// The whitening factor of a covariance given as a packed lower triangle.
///
/// Returns `W = L⁻¹` packed, and `Σᵢ ln Lᵢᵢ` (half the log-determinant), or `None` when the
/// matrix is not numerically positive definite.
pub(crate) fn whitening(tri: &[f64], d: usize) -> Option<(Vec<f64>, f64)> {
    let chol = nalgebra::Cholesky::new(dense_symmetric(tri, d))?;
    let l = chol.l();
    let mut half_log_det = 0.0;
    for i in 0..d {
        let lii = l[(i, i)];
        if !(lii > 0.0 && lii.is_finite()) {
            return None;
        }
        half_log_det += lii.ln();
    }
    let inv = l.solve_lower_triangular(&DMatrix::identity(d, d))?;
    let mut w = vec![0.0; d * (d + 1) / 2];
    for i in 0..d {
        for j in 0..=i {
            let v = inv[(i, j)];
            if !v.is_finite() {
                return None;
            }
            w[packed(i, j)] = v;
        }
    }
    Some((w, half_log_det))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn whitening_inverts_the_cholesky_factor() {
        // Σ = [[4, 2], [2, 3]]: L = [[2, 0], [1, √2]], |Σ| = 8.
        let (w, hld) = whitening(&[4.0, 2.0, 3.0], 2).unwrap();
        assert!((hld - 0.5 * 8f64.ln()).abs() < 1e-15);
        assert!((w[packed(0, 0)] - 0.5).abs() < 1e-15);
        assert!((w[packed(1, 1)] - 1.0 / 2f64.sqrt()).abs() < 1e-15);
        // W·L = I  ⇒  w10·2 + w11·1 = 0.
        assert!((w[packed(1, 0)] * 2.0 + w[packed(1, 1)]).abs() < 1e-15);
    }

    #[test]
    fn indefinite_matrices_are_refused() {
        assert!(whitening(&[1.0, 2.0, 1.0], 2).is_none());
        assert!(whitening(&[0.0], 1).is_none());
    }
}
