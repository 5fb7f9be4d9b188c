//! [`Profile`]: what a reference looks like — the recommended model, how well rows it did not
//! see score under it (held-out per-row log-likelihoods: mean, spread, quantiles), and each
//! column's mean and spread. A new batch is checked against it by [`crate::check`].

use mixgauge_engine::{Mixture, ModelDocument, Rows};
use serde::{Deserialize, Serialize};

use crate::GateError;

/// Format tag of a profile document.
pub const PROFILE_FORMAT: &str = "mixgauge.profile/1";

/// Probabilities of the quantiles a profile keeps.
pub const QUANTILE_LEVELS: [f64; 9] = [0.01, 0.05, 0.10, 0.25, 0.50, 0.75, 0.90, 0.95, 0.99];

/// Where a profile's log-likelihoods come from.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Yardstick {
    /// Each row scored by a fold model that did not see it (from a sweep): the honest view.
    Heldout,
    /// The rows scored by the model fitted on them (a model file plus its data): optimistic,
    /// so a batch from the same source looks slightly worse than it is.
    InSample,
}

/// One quantile of the per-row log-likelihoods.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Quantile {
    /// Probability, in (0, 1).
    pub level: f64,
    /// Log-likelihood (nats) at that probability.
    pub value: f64,
}

/// Summary of per-row log-likelihoods.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LoglikSummary {
    /// Rows summarised.
    pub rows: usize,
    /// Mean per-row log-likelihood, nats.
    pub mean: f64,
    /// Standard deviation (divisor rows − 1).
    pub sd: f64,
    /// Standard error of the mean.
    pub stderr: f64,
    /// Quantiles at [`QUANTILE_LEVELS`].
    pub quantiles: Vec<Quantile>,
}

/// Mean and spread of one column of the reference rows.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ColumnSummary {
    /// Column name.
    pub name: String,
    /// Mean.
    pub mean: f64,
    /// Standard deviation (divisor rows − 1).
    pub sd: f64,
}

/// A reference to check batches against.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Profile {
    /// Always [`PROFILE_FORMAT`].
    pub format: String,
    /// The reference model, in the data's units.
    pub model: ModelDocument,
    /// How the model was chosen (e.g. `heldout_one_se`), when it came from a sweep.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub chosen_by: Option<String>,
    /// Where the log-likelihoods come from.
    pub yardstick: Yardstick,
    /// The reference rows' per-row log-likelihoods.
    pub loglik: LoglikSummary,
    /// The reference rows' columns, in the model's order.
    pub columns: Vec<ColumnSummary>,
}

impl Profile {
    /// The profile of a sweep's recommended model: `heldout` holds every reference row's
    /// held-out log-likelihood; `rows` are the reference rows in the data's units.
    ///
    /// # Errors
    /// [`GateError::Reference`] when the pieces do not fit together (row counts, columns) or
    /// fewer than 2 rows are given.
    pub fn from_heldout(
        model: ModelDocument,
        chosen_by: Option<String>,
        heldout: &[f64],
        rows: &Rows,
        column_names: &[String],
    ) -> Result<Profile, GateError> {
        if heldout.len() != rows.len() {
            return Err(GateError::Reference(format!(
                "{} held-out values for {} rows; give one per reference row",
                heldout.len(),
                rows.len()
            )));
        }
        Profile::build(
            model,
            chosen_by,
            Yardstick::Heldout,
            heldout,
            rows,
            column_names,
        )
    }

    /// The profile of a saved model and the rows it describes, scored in-sample.
    ///
    /// # Errors
    /// [`GateError::Reference`] for rows whose columns differ from the model's, or a row the
    /// model cannot score.
    pub fn from_model(
        model: ModelDocument,
        rows: &Rows,
        column_names: &[String],
    ) -> Result<Profile, GateError> {
        let mixture = model
            .to_mixture()
            .map_err(|e| GateError::Reference(format!("the model: {e}")))?;
        let scores = score(&mixture, rows)?;
        Profile::build(
            model,
            None,
            Yardstick::InSample,
            &scores,
            rows,
            column_names,
        )
    }

    fn build(
        model: ModelDocument,
        chosen_by: Option<String>,
        yardstick: Yardstick,
        scores: &[f64],
        rows: &Rows,
        column_names: &[String],
    ) -> Result<Profile, GateError> {
        if rows.len() < 2 {
            return Err(GateError::Reference(
                "a reference needs at least 2 rows to measure spread".into(),
            ));
        }
        if rows.dims() != model.dimensions || column_names.len() != rows.dims() {
            return Err(GateError::Reference(format!(
                "the model has {} columns but the reference rows have {} ({} names)",
                model.dimensions,
                rows.dims(),
                column_names.len()
            )));
        }
        let columns = (0..rows.dims())
            .map(|j| {
                let column: Vec<f64> = (0..rows.len()).map(|i| rows.row(i)[j]).collect();
                let (mean, sd) = mean_sd(&column);
                ColumnSummary {
                    name: column_names[j].clone(),
                    mean,
                    sd,
                }
            })
            .collect();
        Ok(Profile {
            format: PROFILE_FORMAT.to_string(),
            model,
            chosen_by,
            yardstick,
            loglik: summarise(scores),
            columns,
        })
    }

    /// The per-row log-likelihood at `level` (one of [`QUANTILE_LEVELS`]), if kept.
    pub fn quantile(&self, level: f64) -> Option<f64> {
        self.loglik
            .quantiles
            .iter()
            .find(|q| (q.level - level).abs() < 1e-12)
            .map(|q| q.value)
    }

    /// The profile as JSON, keys in a fixed order.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a profile serialises")
    }

    /// Reads a profile document.
    ///
    /// # Errors
    /// [`GateError::Reference`] naming the field at fault.
    pub fn from_json(text: &str) -> Result<Profile, GateError> {
        let p: Profile = serde_json::from_str(text)
            .map_err(|e| GateError::Reference(format!("not a profile document: {e}")))?;
        if p.format != PROFILE_FORMAT {
            return Err(GateError::Reference(format!(
                "format is {:?}, expected {PROFILE_FORMAT:?}",
                p.format
            )));
        }
        Ok(p)
    }
}

/// Per-row log-likelihoods of `rows` under `model`.
pub(crate) fn score(model: &Mixture, rows: &Rows) -> Result<Vec<f64>, GateError> {
    model
        .log_density(rows)
        .map_err(|e| GateError::Batch(format!("rows could not be scored: {e}")))
}

/// Mean and standard deviation (divisor n − 1) of `v` (two passes, centred).
pub(crate) fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    let ss: f64 = v.iter().map(|x| (x - mean) * (x - mean)).sum();
    (mean, (ss / (n - 1.0).max(1.0)).sqrt())
}

/// Quantile by linear interpolation between order statistics (type 7 of Hyndman & Fan 1996,
/// the default of R and numpy).
pub(crate) fn quantile_sorted(sorted: &[f64], level: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * level;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

fn summarise(scores: &[f64]) -> LoglikSummary {
    let (mean, sd) = mean_sd(scores);
    let mut sorted = scores.to_vec();
    sorted.sort_by(f64::total_cmp);
    LoglikSummary {
        rows: scores.len(),
        mean,
        sd,
        stderr: sd / (scores.len() as f64).sqrt(),
        quantiles: QUANTILE_LEVELS
            .iter()
            .map(|&level| Quantile {
                level,
                value: quantile_sorted(&sorted, level),
            })
            .collect(),
    }
}
