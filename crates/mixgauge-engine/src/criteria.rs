//! Penalised criteria computed from a fit's log-likelihood. Lower is better for all three.

/// Bayesian information criterion, `−2 ln L + p ln N` (Schwarz 1978).
pub fn bic(loglik: f64, free_parameters: usize, rows: usize) -> f64 {
    -2.0 * loglik + free_parameters as f64 * (rows as f64).ln()
}

/// Akaike information criterion, `−2 ln L + 2p` (Akaike 1974).
pub fn aic(loglik: f64, free_parameters: usize) -> f64 {
    -2.0 * loglik + 2.0 * free_parameters as f64
}

/// Integrated completed likelihood in its BIC form, `BIC + 2·EN` where
/// `EN = −Σᵢ Σₖ rᵢₖ ln rᵢₖ` is the entropy of the responsibilities
/// (Biernacki, Celeux & Govaert 2000): BIC penalised further for overlapping components.
pub fn icl(loglik: f64, free_parameters: usize, rows: usize, entropy: f64) -> f64 {
    bic(loglik, free_parameters, rows) + 2.0 * entropy
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn criteria_follow_their_published_formulas() {
        // ln L = −100, p = 5, N = e^2 ⇒ BIC = 200 + 10, AIC = 200 + 10.
        let n = 7usize; // ln 7 = 1.9459101090932196
        assert!((bic(-100.0, 5, n) - (200.0 + 5.0 * 7f64.ln())).abs() < 1e-12);
        assert_eq!(aic(-100.0, 5), 210.0);
        assert_eq!(icl(-100.0, 5, n, 0.0), bic(-100.0, 5, n));
        assert!((icl(-100.0, 5, n, 3.0) - bic(-100.0, 5, n) - 6.0).abs() < 1e-12);
    }
}
