//! Checks against textbook results.

use mixgauge_engine::{CovarianceForm, FitOptions, Mixture, Rows, fit};

use mixgauge_testkit::{Sampler, mean_and_stderr, separated};

/// Gibbs' inequality: E_p[ln q] ≤ E_p[ln p] for any density q, so a fitted model's mean
/// held-out log-likelihood cannot beat the true mixture's mean log-density beyond sampling
/// noise (3 standard errors of the paired per-row differences), and a consistent estimator
/// comes within 0.01 nats/row of it at N = 200,000.
#[test]
fn fitted_models_obey_gibbs_inequality_and_approach_the_truth() {
    for (form, k, d, seed) in [
        (CovarianceForm::Full, 3, 4, 1),
        (CovarianceForm::Diagonal, 4, 3, 2),
    ] {
        let truth = separated(k, d, form, seed);
        let mut s = Sampler::new(seed + 100);
        let train = s.rows(&truth, 200_000);
        let test = s.rows(&truth, 200_000);
        let mut options = FitOptions::new(k, form);
        options.restarts = 2;
        let fitted = fit(&Rows::new(&train, d).unwrap(), &options).unwrap();
        let test_rows = Rows::new(&test, d).unwrap();
        let q = fitted.model.log_density(&test_rows).unwrap();
        let p = truth.log_density(&test_rows).unwrap();
        let diff: Vec<f64> = q.iter().zip(&p).map(|(a, b)| a - b).collect();
        let (mean, se) = mean_and_stderr(&diff);
        assert!(
            mean <= 3.0 * se,
            "{form}: held-out gain over the truth {mean} > 3 SE ({se})"
        );
        assert!(
            mean > -0.01,
            "{form}: held-out loss {mean} nats/row vs the true mixture"
        );
    }
}

/// For one Gaussian the mean log-density is −½ ln((2πe)^D |Σ|), the negative differential
/// entropy of the normal distribution (standard textbook result, e.g. Cover & Thomas,
/// Elements of Information Theory, Theorem 8.4.1). At the maximum-likelihood fit the identity
/// holds exactly with the fitted Σ̂ (mean squared Mahalanobis distance = D), and the fitted
/// value approaches the true Σ's within sampling error.
#[test]
fn one_gaussian_reaches_the_normal_entropy() {
    let d = 5;
    let truth = separated(1, d, CovarianceForm::Full, 9);
    let rows_vec = Sampler::new(10).rows(&truth, 200_000);
    let rows = Rows::new(&rows_vec, d).unwrap();
    let mut options = FitOptions::new(1, CovarianceForm::Full);
    options.ridge = mixgauge_engine::Ridge::Absolute(0.0);
    let fitted = fit(&rows, &options).unwrap();
    let log_det = |m: &Mixture| {
        let l = mixgauge_testkit::cholesky(&m.covariance(0), d);
        2.0 * (0..d).map(|i| l[i * d + i].ln()).sum::<f64>()
    };
    let entropy_of =
        |ld: f64| 0.5 * (d as f64 * (2.0 * std::f64::consts::PI * std::f64::consts::E).ln() + ld);
    let mean = fitted.mean_loglik();
    assert!(
        (mean + entropy_of(log_det(&fitted.model))).abs() < 1e-9,
        "MLE identity: {mean}"
    );
    // sd of a normal's log-density is √(D/2).
    let se = (d as f64 / 2.0).sqrt() / (rows.len() as f64).sqrt();
    let gap = mean + entropy_of(log_det(&truth));
    assert!(
        gap.abs() < 4.0 * se,
        "fitted {mean} vs −H {}: gap {gap}, SE {se}",
        -entropy_of(log_det(&truth))
    );
}

/// EM never lowers the likelihood (Dempster, Laird & Rubin 1977): the trace is non-decreasing
/// up to round-off when no component was re-seeded. The ridge is off here: with it the M-step
/// maximises a slightly different objective and the guarantee is only approximate.
#[test]
fn em_never_lowers_the_likelihood() {
    for form in CovarianceForm::ALL {
        let truth = separated(5, 3, form, 21);
        let data = Sampler::new(22).rows(&truth, 20_000);
        let mut options = FitOptions::new(5, form);
        options.start = mixgauge_engine::Start::RandomResponsibilities;
        options.tolerance = 0.0;
        options.max_iterations = 200;
        options.ridge = mixgauge_engine::Ridge::Absolute(0.0);
        let f = fit(&Rows::new(&data, 3).unwrap(), &options).unwrap();
        assert!(f.reseeds.is_empty());
        for w in f.trace.windows(2) {
            assert!(
                w[1] >= w[0] - 1e-12 * w[0].abs(),
                "{form}: {} then {}",
                w[0],
                w[1]
            );
        }
    }
}
