//! Whole runs: determinism across thread counts, the demo data, warm starts.

use crate::malformed::tempdir;
use crate::{mixgauge, root, stderr};

/// Same seed ⇒ byte-identical result JSON with RAYON_NUM_THREADS=1 and =2.
#[test]
fn sweep_results_are_byte_identical_for_one_and_two_threads() {
    let data = root().join("demo-data/reefer-telemetry.csv");
    let call = |threads: &str| {
        std::process::Command::new(env!("CARGO_BIN_EXE_mixgauge"))
            .env("RAYON_NUM_THREADS", threads)
            .args([
                "sweep",
                data.to_str().unwrap(),
                "--components",
                "1..3",
                "--restarts",
                "2",
            ])
            .args(["--labels", "regime", "--max-iterations", "50", "--json"])
            .output()
            .unwrap()
    };
    let (one, two) = (call("1"), call("2"));
    assert_eq!(one.status.code(), Some(0), "{}", stderr(&one));
    assert!(!one.stdout.is_empty());
    assert_eq!(one.stdout, two.stdout);
}

#[test]
fn a_fitted_model_scores_and_warm_starts() {
    let dir = tempdir();
    let data = root().join("demo-data/reefer-telemetry.csv");
    let model = dir.join("m.json");
    let cols = "--columns=return_air_c,supply_air_c,coil_c";
    let out = mixgauge([
        "fit",
        data.to_str().unwrap(),
        cols,
        "-k",
        "3",
        "--out",
        model.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let out = mixgauge([
        "score",
        data.to_str().unwrap(),
        cols,
        "--model",
        model.to_str().unwrap(),
        "--json",
        "--out",
    ]);
    assert_eq!(out.status.code(), Some(2), "--out needs a value");
    let rows = dir.join("rows.csv");
    let out = mixgauge([
        "score",
        data.to_str().unwrap(),
        cols,
        "--model",
        model.to_str().unwrap(),
        "--json",
        "--out",
        rows.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let summary: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let doc: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&model).unwrap()).unwrap();
    // Scoring the fitted rows gives the fit's log-likelihood (the fit sums ln of row products
    // per tile, scoring sums per-row ln: equal to rounding).
    let (scored, fitted) = (
        summary["loglik"].as_f64().unwrap(),
        doc["fitted"]["loglik"].as_f64().unwrap(),
    );
    assert!(
        (scored - fitted).abs() <= 1e-12 * fitted.abs(),
        "{scored} vs {fitted}"
    );
    let warm = dir.join("warm.json");
    let out = mixgauge([
        "fit",
        data.to_str().unwrap(),
        cols,
        "-k",
        "3",
        "--start",
        model.to_str().unwrap(),
        "--out",
        warm.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(0), "{}", stderr(&out));
    let warm: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(&warm).unwrap()).unwrap();
    assert!(
        warm["fitted"]["mean_loglik"].as_f64().unwrap()
            >= doc["fitted"]["mean_loglik"].as_f64().unwrap() - 1e-9
    );
    // A model with other columns is refused with exit code 2.
    let out = mixgauge([
        "score",
        data.to_str().unwrap(),
        "--model",
        model.to_str().unwrap(),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("the model has 3 columns but the data has 6"),
        "{}",
        stderr(&out)
    );
}
