//! Degenerate data gives finite results or a clear error, never a panic or NaN.

use mixgauge_engine::{CovarianceForm, Error, Fit, FitOptions, ModelDocument, Rows, fit};

fn all_finite(f: &Fit) -> bool {
    let doc = ModelDocument::from_fit(f, 0);
    let json: serde_json::Value = serde_json::from_str(&doc.to_json()).unwrap();
    fn walk(v: &serde_json::Value) -> bool {
        match v {
            serde_json::Value::Number(n) => n.as_f64().is_some_and(f64::is_finite),
            serde_json::Value::Null => false,
            serde_json::Value::Array(a) => a.iter().all(walk),
            serde_json::Value::Object(o) => o.values().all(walk),
            _ => true,
        }
    }
    // serde_json writes NaN/inf as null, so a null anywhere (outside optional keys) is a failure.
    walk(&json) && f.loglik.is_finite()
}

fn fit_all_forms(values: &[f64], d: usize, k: usize) -> Vec<Result<Fit, Error>> {
    CovarianceForm::ALL
        .iter()
        .map(|&form| fit(&Rows::new(values, d).unwrap(), &FitOptions::new(k, form)))
        .collect()
}

#[test]
fn duplicate_rows_fit_finitely() {
    let values: Vec<f64> = (0..300)
        .flat_map(|i| if i % 2 == 0 { [1.0, 2.0] } else { [3.0, -1.0] })
        .collect();
    for f in fit_all_forms(&values, 2, 2) {
        let f = f.unwrap();
        assert!(all_finite(&f));
        assert!((f.model.weights()[0] - 0.5).abs() < 1e-9);
    }
}

#[test]
fn a_constant_column_fits_finitely() {
    let values: Vec<f64> = (0..500)
        .flat_map(|i| [(i as f64 * 0.37).sin(), 4.0, (i as f64 * 0.11).cos()])
        .collect();
    for f in fit_all_forms(&values, 3, 3) {
        assert!(all_finite(&f.unwrap()));
    }
}

#[test]
fn more_components_than_distinct_rows_fit_finitely() {
    let values: Vec<f64> = (0..60).map(|i| (i % 3) as f64).collect();
    for f in fit_all_forms(&values, 1, 5) {
        let f = f.unwrap();
        assert!(all_finite(&f), "{:?}", f.model);
    }
}

#[test]
fn one_column_and_every_row_identical() {
    let values = vec![7.5; 40];
    for f in fit_all_forms(&values, 1, 2) {
        assert!(all_finite(&f.unwrap()));
    }
}

#[test]
fn fewer_rows_than_components_is_a_clear_error() {
    let values = [1.0, 2.0, 3.0];
    for f in fit_all_forms(&values, 1, 4) {
        let e = f.unwrap_err();
        assert_eq!(
            e,
            Error::TooFewRows {
                rows: 3,
                components: 4
            }
        );
        assert!(e.to_string().contains("ask for at most 3 components"));
    }
}

#[test]
fn non_finite_and_oversized_data_are_named() {
    let mut values = vec![0.5; 20];
    values[13] = f64::INFINITY;
    let e = fit(
        &Rows::new(&values, 2).unwrap(),
        &FitOptions::new(1, CovarianceForm::Full),
    )
    .unwrap_err();
    assert_eq!(
        e,
        Error::NotFinite {
            row: 6,
            column: 1,
            value: f64::INFINITY
        }
    );
    let huge: Vec<f64> = (0..20)
        .map(|i| if i % 2 == 0 { 1e200 } else { -1e200 })
        .collect();
    let e = fit(
        &Rows::new(&huge, 1).unwrap(),
        &FitOptions::new(1, CovarianceForm::Diagonal),
    )
    .unwrap_err();
    assert!(e.to_string().contains("rescale or standardise"), "{e}");
}

#[test]
fn cancellation_stops_a_fit() {
    let values: Vec<f64> = (0..2000).map(|i| (i as f64).sin()).collect();
    let e = mixgauge_engine::fit_until(
        &Rows::new(&values, 2).unwrap(),
        &FitOptions::new(2, CovarianceForm::Full),
        &|| true,
    )
    .unwrap_err();
    assert_eq!(e, Error::Cancelled);
}
