//! Every kernel path this CPU can run agrees with the portable reference to 1e-12 relative
//! over one EM pass, on random models and data (D from 1 to 64, K from 1 to 32, row counts
//! that are not multiples of the tile or block size, rows with extreme log-densities); and
//! each path on its own gives the same bits for one and two threads.
//!
//! The bound: the vector paths use fused multiply-add and sum in another order, so each
//! floating-point result may differ from the reference by rounding, a few units of 1e-16
//! per operation. 1e-12 leaves room for sums over thousands of rows and no more; a wrong
//! index, a lost lane or a mishandled tail changes results at 1e-3 or worse.

use crate::{bits, fit_with_threads};
use mixgauge_engine::{
    CovarianceForm, Fit, FitOptions, Mixture, Ridge, Rows, Start, fit, force_kernel_variant,
    kernel_variant, kernel_variants,
};
use mixgauge_testkit::{Sampler, random_covariances, separated};

use crate::kernel_lock;

const BOUND: f64 = 1e-12;

/// A random mixture: weights in proportion to 1 + U(0,1) (none tiny), means N(0, 3²) per
/// coordinate, covariances B·Bᵀ/D + 0.3·I with B standard normal (full) or variances
/// 0.3 + U(0, 2) (diagonal).
fn random_mixture(k: usize, d: usize, form: CovarianceForm, seed: u64) -> Mixture {
    let mut s = Sampler::new(seed);
    let raw: Vec<f64> = (0..k).map(|_| 1.0 + s.uniform()).collect();
    let total: f64 = raw.iter().sum();
    let weights = raw.iter().map(|w| w / total).collect();
    let means = (0..k * d).map(|_| 3.0 * s.normal()).collect();
    let covs = random_covariances(&mut s, form, k, d, 0.3, 2.0);
    Mixture::new(form, weights, means, covs).expect("a valid random mixture")
}

/// The same mixture with every mean moved by `shift` and every covariance scaled by `scale`,
/// so that one EM pass from it changes the parameters a good deal.
fn perturbed(m: &Mixture, shift: f64, scale: f64) -> Mixture {
    let k = m.components();
    let means = m.means().iter().map(|v| v + shift).collect();
    let covs = (0..k)
        .flat_map(|c| match m.form() {
            CovarianceForm::Full => m.covariance(c),
            CovarianceForm::Diagonal => m.variances(c),
        })
        .map(|v| v * scale)
        .collect();
    Mixture::new(m.form(), m.weights().to_vec(), means, covs).unwrap()
}

/// Rows drawn from `truth`, then a few rows with extreme log-densities written over some of
/// them: far outliers (450 typical standard deviations from a component's mean along a random
/// direction, where the log-density is about −1e5 or lower under every component and the
/// nearest one takes the row) and rows 60 standard deviations out, where every component's
/// density is below e^−745 (the smallest double) but the row is representable in log space.
fn rows_with_extremes(truth: &Mixture, n: usize, seed: u64) -> Vec<f64> {
    let d = truth.dims();
    let mut s = Sampler::new(seed ^ 0x5eed);
    let mut values = Sampler::new(seed).rows(truth, n);
    for (slot, distance) in [(3, 450.0), (n / 2, 60.0), (n - 1, 450.0), (n / 3, 60.0)] {
        let dir: Vec<f64> = (0..d).map(|_| s.normal()).collect();
        let norm = dir.iter().map(|v| v * v).sum::<f64>().sqrt();
        let c = (slot * 7) % truth.components();
        let spread = (truth.variances(c).iter().sum::<f64>() / d as f64).sqrt();
        for j in 0..d {
            values[slot * d + j] = truth.mean(c)[j] + distance * spread * dir[j] / norm;
        }
    }
    values
}

fn one_pass(data: &[f64], d: usize, start: &Mixture) -> Fit {
    let mut o = FitOptions::new(start.components(), start.form());
    o.start = Start::Model(start.clone());
    o.max_iterations = 1;
    o.tolerance = 0.0;
    o.ridge = Ridge::Absolute(1e-6);
    fit(&Rows::new(data, d).unwrap(), &o).unwrap()
}

/// Largest difference between two fits, each relative to its natural scale: the weight; a
/// mean coordinate's magnitude plus its standard deviation; √(Σᵢᵢ·Σⱼⱼ) for covariance entry
/// (i, j); the log-likelihood's magnitude.
fn worst_difference(a: &Fit, b: &Fit) -> (f64, String) {
    let (ma, mb) = (&a.model, &b.model);
    let d = ma.dims();
    let mut worst = (0.0, String::new());
    let mut note = |v: f64, what: String| {
        // NaN counts as the worst possible difference.
        if v.is_nan() || v > worst.0 {
            worst = (v, what);
        }
    };
    let rel = |x: f64, y: f64, scale: f64| (x - y).abs() / scale;
    note(
        rel(a.trace[0], b.trace[0], a.trace[0].abs()),
        "start log-likelihood".into(),
    );
    note(
        rel(a.loglik, b.loglik, a.loglik.abs()),
        "log-likelihood".into(),
    );
    for c in 0..ma.components() {
        let wa = ma.weights()[c];
        note(rel(wa, mb.weights()[c], wa), format!("weight {c}"));
        let (ca, cb) = (ma.covariance(c), mb.covariance(c));
        for j in 0..d {
            let scale = ma.mean(c)[j].abs() + ca[j * d + j].sqrt();
            note(
                rel(ma.mean(c)[j], mb.mean(c)[j], scale),
                format!("mean {c},{j}"),
            );
        }
        for i in 0..d {
            for j in 0..=i {
                let scale = (ca[i * d + i] * ca[j * d + j]).sqrt();
                note(
                    rel(ca[i * d + j], cb[i * d + j], scale),
                    format!("covariance {c},({i},{j})"),
                );
            }
        }
    }
    worst
}

/// (K, D, rows) cases: D from 1 to 64, K from 1 to 32, no row count a multiple of 8.
const CASES: [(usize, usize, usize); 12] = [
    (1, 1, 203),
    (5, 1, 1_001),
    (3, 2, 777),
    (32, 3, 3_001),
    (7, 5, 1_283),
    (8, 8, 2_049),
    (4, 13, 1_539),
    (8, 16, 4_099),
    (32, 17, 6_151),
    (3, 31, 1_805),
    (16, 33, 5_123),
    (32, 64, 7_013),
];

#[test]
fn every_path_agrees_with_the_portable_one_over_a_pass() {
    let _lock = kernel_lock();
    let paths = kernel_variants();
    println!("kernel paths on this CPU: {paths:?}");
    for form in CovarianceForm::ALL {
        for (case, &(k, d, n)) in CASES.iter().enumerate() {
            let seed = 100 + case as u64;
            let truth = random_mixture(k, d, form, seed);
            let data = rows_with_extremes(&truth, n, seed);
            let start = perturbed(&truth, 0.5, 1.3);
            force_kernel_variant(Some("portable")).unwrap();
            let reference = one_pass(&data, d, &start);
            let rows = Rows::new(&data, d).unwrap();
            let (ref_ll, ref_resp) = reference.model.responsibilities(&rows).unwrap();
            assert_eq!(
                reference.iterations, 1,
                "{form} K={k} D={d}: the pass applied"
            );
            for &path in paths.iter().filter(|p| **p != "portable") {
                force_kernel_variant(Some(path)).unwrap();
                assert_eq!(kernel_variant(), path);
                let other = one_pass(&data, d, &start);
                let (worst, what) = worst_difference(&reference, &other);
                println!(
                    "{path} {form} K={k} D={d} N={n}: worst relative difference {worst:.1e} ({what})"
                );
                assert!(
                    worst <= BOUND,
                    "{path} {form} K={k} D={d} N={n}: {what} differs by {worst:e} relative"
                );
                // Scoring: per-row log-densities and responsibilities of the updated model.
                let (ll, resp) = reference.model.responsibilities(&rows).unwrap();
                for (r, (a, b)) in ref_ll.iter().zip(&ll).enumerate() {
                    assert!(
                        (a - b).abs() <= BOUND * a.abs().max(1.0),
                        "{path} {form} K={k} D={d}: row {r} log-density {a} vs {b}"
                    );
                }
                for (a, b) in ref_resp.iter().zip(&resp) {
                    assert!((a - b).abs() <= BOUND, "{path}: responsibility {a} vs {b}");
                }
            }
            force_kernel_variant(None).unwrap();
        }
    }
}

#[test]
fn the_extreme_rows_are_extreme() {
    // The parity test above is only as strong as its data: check that the rows written in
    // really sit at log-densities near −1e5 and beyond the range of exp.
    let _lock = kernel_lock();
    force_kernel_variant(Some("portable")).unwrap();
    let truth = random_mixture(8, 16, CovarianceForm::Full, 107);
    let data = rows_with_extremes(&truth, 4_099, 107);
    let ll = truth.log_density(&Rows::new(&data, 16).unwrap()).unwrap();
    force_kernel_variant(None).unwrap();
    assert!(ll[3] < -3e4 && ll[4_098] < -3e4, "{} {}", ll[3], ll[4_098]);
    assert!(ll[4_099 / 2] < -745.0 && ll[4_099 / 3] < -745.0);
}

#[test]
fn each_path_gives_the_same_bits_for_one_and_two_threads() {
    let _lock = kernel_lock();
    for path in kernel_variants() {
        force_kernel_variant(Some(path)).unwrap();
        for form in CovarianceForm::ALL {
            let truth = separated(5, 9, form, 21);
            // Not a multiple of the block or tile size.
            let data = Sampler::new(22).rows(&truth, 9_001);
            let mut options = FitOptions::new(5, form);
            options.restarts = 2;
            options.seed = 7;
            options.max_iterations = 25;
            let one = fit_with_threads(1, &data, 9, &options);
            let two = fit_with_threads(2, &data, 9, &options);
            assert_eq!(bits(&one), bits(&two), "path {path}, {form}");
            let rows = Rows::new(&data, 9).unwrap();
            let pool = |n| {
                rayon::ThreadPoolBuilder::new()
                    .num_threads(n)
                    .build()
                    .unwrap()
            };
            let a = pool(1).install(|| one.model.log_density(&rows).unwrap());
            let b = pool(2).install(|| one.model.log_density(&rows).unwrap());
            assert!(
                a.iter().zip(&b).all(|(x, y)| x.to_bits() == y.to_bits()),
                "path {path}, {form}: scoring"
            );
        }
    }
    force_kernel_variant(None).unwrap();
}
