//! The defaults (several starts, a tight tolerance) reach the best optimum found more often
//! than a single k-means++ start with a loose tolerance, which can stall in a poor local
//! optimum when components overlap.

use mixgauge_engine::{CovarianceForm, FitOptions, Rows, fit};
use mixgauge_testkit::{Sampler, spaced};

#[test]
fn defaults_reach_the_optimum_more_often_than_one_short_run() {
    let (k, d) = (6, 4);
    let mut default_hits = 0;
    let mut short_hits = 0;
    let trials: usize = 12;
    for seed in 0..trials as u64 {
        // Means 3.5 apart along the axes with unit-scale covariances: neighbours overlap.
        let truth = spaced(k, d, CovarianceForm::Full, 100 + seed, 3.5);
        let values = Sampler::new(200 + seed).rows(&truth, 4_000);
        let rows = Rows::new(&values, d).unwrap();
        let mut short = FitOptions::new(k, CovarianceForm::Full);
        short.tolerance = 1e-3;
        short.max_iterations = 200;
        short.seed = seed;
        let mut defaults = FitOptions::new(k, CovarianceForm::Full);
        defaults.restarts = 4; // the command line's default
        defaults.seed = seed;
        let a = fit(&rows, &short).unwrap().mean_loglik();
        let b = fit(&rows, &defaults).unwrap().mean_loglik();
        // The best optimum we can find: many starts, run to a tight tolerance.
        let mut thorough = defaults.clone();
        thorough.restarts = 24;
        thorough.seed = 10_000 + seed;
        let best = fit(&rows, &thorough).unwrap().mean_loglik().max(a).max(b);
        short_hits += usize::from(a >= best - 1e-4);
        default_hits += usize::from(b >= best - 1e-4);
        eprintln!("seed {seed}: short {a:.6} defaults {b:.6} best {best:.6}");
    }
    eprintln!("defaults {default_hits}/{trials}, one short run {short_hits}/{trials}");
    assert!(
        default_hits > short_hits,
        "defaults {default_hits}/{trials} vs one short run {short_hits}/{trials}"
    );
    assert!(
        default_hits >= trials * 3 / 4,
        "defaults reached the optimum in only {default_hits}/{trials}"
    );
}
