//! Same seed ⇒ bit-identical results for any thread count (on the default kernel path; every
//! path is checked in `paths.rs`).

use crate::{bits, fit_with_threads};
use mixgauge_engine::{CovarianceForm, FitOptions, Rows, Start};

use mixgauge_testkit::{Sampler, separated};

#[test]
fn one_and_two_threads_give_the_same_bits() {
    let _lock = crate::kernel_lock();
    for form in CovarianceForm::ALL {
        let truth = separated(4, 6, form, 5);
        // Not a multiple of the block or tile size.
        let data = Sampler::new(6).rows(&truth, 10_007);
        for start in [Start::Seeded, Start::RandomResponsibilities] {
            let mut options = FitOptions::new(4, form);
            options.start = start;
            options.restarts = 3;
            options.seed = 42;
            let one = fit_with_threads(1, &data, 6, &options);
            let two = fit_with_threads(2, &data, 6, &options);
            assert_eq!(bits(&one), bits(&two));
            let log_one = one
                .model
                .log_density(&Rows::new(&data, 6).unwrap())
                .unwrap();
            let log_two = two
                .model
                .log_density(&Rows::new(&data, 6).unwrap())
                .unwrap();
            assert!(
                log_one
                    .iter()
                    .zip(&log_two)
                    .all(|(a, b)| a.to_bits() == b.to_bits())
            );
        }
    }
}

#[test]
fn different_seeds_give_independent_restarts() {
    let _lock = crate::kernel_lock();
    let truth = separated(3, 2, CovarianceForm::Diagonal, 3);
    let data = Sampler::new(4).rows(&truth, 3_000);
    let mut a = FitOptions::new(3, CovarianceForm::Diagonal);
    a.start = Start::RandomResponsibilities;
    a.max_iterations = 3;
    let mut b = a.clone();
    b.seed = 1;
    assert_ne!(
        bits(&fit_with_threads(2, &data, 2, &a)),
        bits(&fit_with_threads(2, &data, 2, &b))
    );
}
