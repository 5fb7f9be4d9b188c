//! `mixgauge demo`: invented refrigerated-trailer telemetry and a sweep over it.
//!
//! The scenario is invented for demonstration only: a fleet's cold-chain trailers log six
//! channels, and each trailer is at any moment in one of six operating regimes. Each regime is
//! a full-covariance Gaussian below; rows are drawn from that mixture with a fixed seed, so the
//! committed file `demo-data/reefer-telemetry.csv` can always be regenerated bit for bit.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use mixgauge_engine::{CovarianceForm, Mixture};

use crate::failure::{Failure, io};

/// The six channels, in column order.
pub const CHANNELS: [&str; 6] = [
    "return_air_c",
    "supply_air_c",
    "ambient_c",
    "coil_c",
    "compressor_amps",
    "head_pressure_bar",
];

/// Regime name, weight, means and standard deviations per channel.
type Regime = (&'static str, f64, [f64; 6], [f64; 6]);

const REGIMES: [Regime; 6] = [
    (
        "steady_frozen",
        0.30,
        [-18.0, -21.0, 22.0, -26.0, 9.0, 14.0],
        [0.8, 0.9, 4.0, 1.2, 0.8, 1.0],
    ),
    (
        "steady_chill",
        0.25,
        [3.0, 1.0, 24.0, -3.0, 7.0, 13.0],
        [0.7, 0.8, 4.5, 1.0, 0.7, 0.9],
    ),
    (
        "pull_down",
        0.12,
        [8.0, -12.0, 28.0, -20.0, 14.0, 18.0],
        [3.0, 2.5, 4.0, 2.0, 1.2, 1.5],
    ),
    (
        "defrost",
        0.08,
        [-10.0, 5.0, 20.0, 12.0, 3.0, 9.0],
        [2.0, 2.0, 4.0, 3.0, 0.6, 1.0],
    ),
    (
        "door_open",
        0.10,
        [10.0, -5.0, 26.0, -12.0, 11.0, 16.0],
        [3.5, 3.0, 4.0, 2.5, 1.5, 1.5],
    ),
    (
        "standby",
        0.15,
        [15.0, 15.0, 18.0, 15.0, 0.5, 6.0],
        [3.0, 3.0, 5.0, 3.0, 0.2, 0.8],
    ),
];

/// Correlations shared by every regime: return/supply air move together, and head pressure
/// follows ambient temperature and compressor load.
fn correlation(i: usize, j: usize) -> f64 {
    match (i.min(j), i.max(j)) {
        (a, b) if a == b => 1.0,
        (0, 1) => 0.6,
        (2, 5) => 0.5,
        (4, 5) => 0.4,
        (0, 3) | (1, 3) => 0.3,
        _ => 0.0,
    }
}

/// Component counts the demo sweeps (CLI and `serve --demo` alike): enough to see the
/// held-out curve turn over the six invented regimes.
pub const DEMO_COMPONENTS: [usize; 10] = [1, 2, 3, 4, 5, 6, 7, 8, 9, 10];

/// Rows in the demo file, and the seed they are drawn with.
pub const DEMO_ROWS: usize = 12_000;
pub const DEMO_SEED: u64 = 2026;

/// The regimes as a mixture.
pub fn regimes() -> Mixture {
    let d = CHANNELS.len();
    let mut weights = Vec::new();
    let mut means = Vec::new();
    let mut covs = Vec::new();
    for (_, w, mu, sd) in REGIMES {
        weights.push(w);
        means.extend_from_slice(&mu);
        for i in 0..d {
            for j in 0..d {
                covs.push(sd[i] * sd[j] * correlation(i, j));
            }
        }
    }
    Mixture::new(CovarianceForm::Full, weights, means, covs)
        .expect("the demo regimes are a valid mixture")
}

/// The demo CSV text: a header, the six channels rounded to 3 decimals, and the regime.
pub fn csv() -> String {
    let (values, labels) = regimes().sample(DEMO_ROWS, DEMO_SEED);
    let mut out = String::with_capacity(DEMO_ROWS * 48);
    out.push_str(&CHANNELS.join(","));
    out.push_str(",regime\n");
    for (row, label) in values.chunks(CHANNELS.len()).zip(labels) {
        for v in row {
            let _ = write!(out, "{v:.3},");
        }
        out.push_str(REGIMES[label].0);
        out.push('\n');
    }
    out
}

/// Writes the demo file into `dir` unless it is there already; returns its path.
pub fn ensure_data(dir: &Path) -> Result<PathBuf, Failure> {
    let path = dir.join("reefer-telemetry.csv");
    if !path.exists() {
        std::fs::create_dir_all(dir).map_err(|e| io("create", dir, e))?;
        std::fs::write(&path, csv()).map_err(|e| io("write", &path, e))?;
        eprintln!(
            "wrote {} ({DEMO_ROWS} rows of invented trailer telemetry)",
            path.display()
        );
    }
    Ok(path)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_committed_demo_file_is_what_the_generator_writes() {
        let committed =
            Path::new(env!("CARGO_MANIFEST_DIR")).join("../../demo-data/reefer-telemetry.csv");
        let text = std::fs::read_to_string(&committed)
            .expect("demo-data/reefer-telemetry.csv is committed");
        assert!(
            text == csv(),
            "regenerate it with `mixgauge demo` after deleting the file"
        );
        assert!(text.len() < 2_000_000);
    }
}
