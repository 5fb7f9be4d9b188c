//! Integration tests of model selection on mixtures whose true component count is known.

use std::sync::atomic::AtomicBool;

use mixgauge_engine::{CovarianceForm, Rows};
use mixgauge_select::{CandidateStatus, SweepInput, SweepResult, SweepSettings, sweep};
use mixgauge_testkit::{Sampler, spaced};

fn run(values: &[f64], d: usize, settings: &SweepSettings) -> SweepResult {
    let input = SweepInput {
        rows: Rows::new(values, d).unwrap(),
        column_names: (1..=d).map(|j| format!("x{j}")).collect(),
        sha256: String::new(),
        dropped_rows: 0,
        labels: None,
        log_jacobian: 0.0,
        standardised: false,
    };
    sweep(&input, settings, &|_| {}, &AtomicBool::new(false))
        .unwrap()
        .result
}

/// Known-K recovery: on ten synthetic mixtures (varied dimension, count and spacing, i.e.
/// overlap) the held-out maximum and the BIC minimum each name the true K at least 9 times.
#[test]
fn heldout_and_bic_recover_the_true_component_count() {
    let mut heldout_hits = 0;
    let mut bic_hits = 0;
    for seed in 0..10u64 {
        let d = [2, 3, 5][seed as usize % 3];
        let k = 2 + (seed as usize % 3);
        let spacing = [6.0, 7.0, 9.0, 12.0][seed as usize % 4];
        let truth = spaced(k, d, CovarianceForm::Full, seed, spacing);
        let values = Sampler::new(1000 + seed).rows(&truth, 1500);
        let settings = SweepSettings {
            components: (1..=6).collect(),
            covariances: vec![CovarianceForm::Full],
            restarts: 2,
            seed,
            ..Default::default()
        };
        let result = run(&values, d, &settings);
        let rec = &result.recommendations;
        heldout_hits += usize::from(rec.heldout_max.map(|c| c.components) == Some(k));
        bic_hits += usize::from(rec.bic_min.map(|c| c.components) == Some(k));
        // The training curve never decreases with K.
        let train: Vec<f64> = result
            .candidates
            .iter()
            .filter_map(|c| c.train.map(|t| t.mean))
            .collect();
        for w in train.windows(2) {
            assert!(
                w[1] >= w[0] - 1e-9,
                "seed {seed}: training curve fell from {} to {}",
                w[0],
                w[1]
            );
        }
        assert!(
            result
                .candidates
                .iter()
                .all(|c| c.status == CandidateStatus::Fitted)
        );
    }
    eprintln!("true K found: held-out maximum {heldout_hits}/10, BIC minimum {bic_hits}/10");
    assert!(
        heldout_hits >= 9,
        "held-out maximum found the true K in {heldout_hits}/10"
    );
    assert!(
        bic_hits >= 9,
        "BIC minimum found the true K in {bic_hits}/10"
    );
}

/// Same seed ⇒ byte-identical result document with one or two threads.
#[test]
fn result_documents_are_identical_for_any_thread_count() {
    let truth = spaced(3, 3, CovarianceForm::Full, 4, 7.0);
    let values = Sampler::new(5).rows(&truth, 1203);
    let settings = SweepSettings {
        components: (1..=4).collect(),
        restarts: 2,
        ..Default::default()
    };
    let json = |threads| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        serde_json::to_string(&pool.install(|| run(&values, 3, &settings))).unwrap()
    };
    assert_eq!(json(1), json(2));
}

/// A candidate with more free parameters than training rows is skipped with the reason.
#[test]
fn oversized_candidates_are_skipped_not_failed() {
    let truth = spaced(2, 4, CovarianceForm::Full, 1, 8.0);
    let values = Sampler::new(2).rows(&truth, 60);
    let settings = SweepSettings {
        components: vec![1, 2, 5],
        folds: 3,
        ..Default::default()
    };
    let result = run(&values, 4, &settings);
    let big = result
        .candidates
        .iter()
        .find(|c| c.components == 5 && c.covariance == CovarianceForm::Full)
        .unwrap();
    assert_eq!(big.status, CandidateStatus::Skipped);
    assert!(
        big.reason
            .as_deref()
            .unwrap()
            .contains("free parameters exceed the 40 training rows"),
        "{:?}",
        big.reason
    );
    let small = result
        .candidates
        .iter()
        .find(|c| c.components == 1)
        .unwrap();
    assert_eq!(small.status, CandidateStatus::Fitted);
}

#[test]
fn the_recommended_heldout_rows_average_to_the_reported_heldout_mean() {
    let truth = spaced(2, 3, CovarianceForm::Full, 5, 6.0);
    let values = Sampler::new(9).rows(&truth, 1_203);
    let input = SweepInput {
        rows: Rows::new(&values, 3).unwrap(),
        column_names: vec!["a".into(), "b".into(), "c".into()],
        sha256: String::new(),
        dropped_rows: 0,
        labels: None,
        log_jacobian: -0.75,
        standardised: true,
    };
    let settings = SweepSettings {
        components: vec![1, 2, 3],
        covariances: vec![CovarianceForm::Full],
        restarts: 1,
        ..SweepSettings::default()
    };
    let outcome = sweep(&input, &settings, &|_| {}, &AtomicBool::new(false)).unwrap();
    let (choice, rows) = outcome.recommended_heldout.expect("a recommendation");
    assert_eq!(Some(choice), outcome.result.recommendations.heldout_one_se);
    assert_eq!(rows.len(), 1_203);
    let candidate = outcome
        .result
        .candidates
        .iter()
        .find(|c| c.covariance == choice.covariance && c.components == choice.components)
        .unwrap();
    let reported = candidate.heldout.unwrap().mean;
    let mean = rows.iter().sum::<f64>() / rows.len() as f64;
    // Same values, summed in another order: equal to rounding.
    assert!(
        (mean - reported).abs() <= 1e-12 * reported.abs(),
        "{mean} vs {reported}"
    );
}

/// A plan's fits run one by one in reverse order, each result saved as a model document and
/// read back (as a worker on another machine hands it over), assemble into the byte-identical
/// result document of an in-process sweep.
#[test]
fn a_plan_run_elsewhere_assembles_the_same_result() {
    use mixgauge_engine::ModelDocument;
    use mixgauge_select::SweepPlan;
    let truth = spaced(3, 2, CovarianceForm::Full, 8, 7.0);
    let values = Sampler::new(3).rows(&truth, 900);
    let settings = SweepSettings {
        components: vec![1, 2, 3, 4],
        restarts: 2,
        seed: 11,
        ..Default::default()
    };
    let input = SweepInput {
        rows: Rows::new(&values, 2).unwrap(),
        column_names: vec!["x1".into(), "x2".into()],
        sha256: String::new(),
        dropped_rows: 0,
        labels: None,
        log_jacobian: 0.0,
        standardised: false,
    };
    let local = run(&values, 2, &settings);
    let plan = SweepPlan::new(&input, &settings).unwrap();
    // 4 K × 2 forms × 2 restarts × (5 folds + all rows).
    assert_eq!(plan.len(), 4 * 2 * 2 * 6);
    assert_eq!(plan.order().len(), plan.len());
    let mut results: Vec<Option<Result<mixgauge_engine::Fit, String>>> = vec![None; plan.len()];
    for &t in plan.order().iter().rev() {
        let fit = plan.fit(&input, &settings, t, &|| false);
        let handed = fit.map_err(|e| plan.failure(t, &e)).map(|f| {
            let text = serde_json::to_string(&ModelDocument::from_fit(&f, settings.seed)).unwrap();
            ModelDocument::from_json(&text).unwrap().to_fit().unwrap()
        });
        results[t] = Some(handed);
    }
    let outcome = plan
        .assemble(
            &input,
            &settings,
            results.into_iter().map(Option::unwrap).collect(),
        )
        .unwrap();
    assert_eq!(
        serde_json::to_string(&local).unwrap(),
        serde_json::to_string(&outcome.result).unwrap()
    );
    assert!(plan.assemble(&input, &settings, Vec::new()).is_err());
}
