//! [`check`]: a batch of rows against a [`Profile`], as separate checks each with its test, a
//! statistic, a p-value or effect size, and a verdict; the batch passes when every check does.
//!
//! - **Mean log-likelihood:** Welch's t-test (Welch 1947), one-sided — is the batch's mean
//!   per-row log-likelihood under the reference model lower than the reference's held-out
//!   mean? The reference enters through its mean, spread and row count.
//! - **Outlier rate:** the share of batch rows scoring below the reference's 1st percentile,
//!   against the 1 % expected, by an exact one-sided binomial test.
//! - **Column shift:** per column, the standardised mean difference (batch mean − reference
//!   mean over the reference SD) and the variance ratio; the columns that moved most come
//!   first. A column fails when its move is both large (beyond the effect-size limits: with
//!   thousands of rows every shift is "significant", and the question is whether it matters)
//!   and more than sampling noise explains (a two-sided z-test at the significance level,
//!   Bonferroni-corrected over the columns: small batches move by chance).

use mixgauge_engine::Rows;
use serde::{Deserialize, Serialize};
use statrs::distribution::{Binomial, ContinuousCDF, DiscreteCDF, Normal, StudentsT};

use crate::GateError;
use crate::profile::{Profile, mean_sd, score};

/// Format tag of a gate report.
pub const REPORT_FORMAT: &str = "mixgauge.gate/1";

/// Limits of the checks. The defaults keep batches from the reference distribution passing
/// in well over 95 % of trials (each p-value check errs 1 % of the time at most).
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Limits {
    /// A p-value below this fails the log-likelihood and outlier checks.
    pub significance: f64,
    /// A column whose |standardised mean difference| exceeds this fails, unless sampling
    /// noise explains it (0.2: Cohen's "small" effect, Cohen 1988 — a common-practice
    /// threshold, from memory).
    pub mean_shift: f64,
    /// A column whose variance ratio (batch over reference) leaves [1/x, x] fails, unless
    /// sampling noise explains it (2: the common-practice balance limit of Rubin 2001, from
    /// memory).
    pub variance_ratio: f64,
}

impl Default for Limits {
    fn default() -> Self {
        Limits {
            significance: 0.01,
            mean_shift: 0.2,
            variance_ratio: 2.0,
        }
    }
}

/// Whether a check (or the batch) passes.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum Verdict {
    /// Within the limits.
    Pass,
    /// Outside them.
    Fail,
}

/// One column's movement.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct ColumnShift {
    /// Column name.
    pub name: String,
    /// (batch mean − reference mean) / reference SD.
    pub mean_shift: f64,
    /// Batch variance / reference variance.
    pub variance_ratio: f64,
    /// Whether this column is within the limits.
    pub verdict: Verdict,
}

/// One check's outcome.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Check {
    /// `mean_loglik`, `outlier_rate` or `column_shift`.
    pub name: String,
    /// The test or measure used, by its published name.
    pub method: String,
    /// The test statistic (t, the outlier count, or the largest |mean shift|).
    pub statistic: f64,
    /// One-sided p-value, for the checks that are tests.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub p_value: Option<f64>,
    /// Effect size: mean log-likelihood difference (nats per row, batch − reference), the
    /// batch's outlier share, or the largest |mean shift|.
    pub effect: f64,
    /// The limit applied, in words.
    pub limit: String,
    /// Pass or fail.
    pub verdict: Verdict,
    /// One sentence for people.
    pub message: String,
    /// Per-column figures, most moved first (column shift only).
    #[serde(skip_serializing_if = "Vec::is_empty", default)]
    pub columns: Vec<ColumnShift>,
}

/// A gate's outcome for one batch.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct GateReport {
    /// Always [`REPORT_FORMAT`].
    pub format: String,
    /// Pass only when every check passes.
    pub verdict: Verdict,
    /// Rows in the batch.
    pub batch_rows: usize,
    /// Rows behind the reference.
    pub reference_rows: usize,
    /// The reference model, e.g. `full, K = 3`.
    pub reference_model: String,
    /// The limits applied.
    pub limits: Limits,
    /// The checks, in a fixed order.
    pub checks: Vec<Check>,
}

/// Checks `batch` (in the model's column order) against `profile`.
///
/// # Errors
/// [`GateError::Batch`] for a batch with fewer than 2 rows, other columns, or rows the model
/// cannot score; [`GateError::Reference`] for an unusable profile.
pub fn check(profile: &Profile, batch: &Rows, limits: &Limits) -> Result<GateReport, GateError> {
    if batch.len() < 2 {
        return Err(GateError::Batch(format!(
            "the batch has {} rows; a check needs at least 2",
            batch.len()
        )));
    }
    if batch.dims() != profile.columns.len() {
        return Err(GateError::Batch(format!(
            "the batch has {} columns but the reference has {} ({}); send the reference's columns",
            batch.dims(),
            profile.columns.len(),
            profile
                .columns
                .iter()
                .map(|c| c.name.as_str())
                .collect::<Vec<_>>()
                .join(", ")
        )));
    }
    let model = profile
        .model
        .to_mixture()
        .map_err(|e| GateError::Reference(format!("the reference model: {e}")))?;
    let scores = score(&model, batch)?;
    let checks = vec![
        loglik_check(profile, &scores, limits),
        outlier_check(profile, &scores, limits)?,
        column_check(profile, batch, limits),
    ];
    let verdict = if checks.iter().all(|c| c.verdict == Verdict::Pass) {
        Verdict::Pass
    } else {
        Verdict::Fail
    };
    Ok(GateReport {
        format: REPORT_FORMAT.to_string(),
        verdict,
        batch_rows: batch.len(),
        reference_rows: profile.loglik.rows,
        reference_model: format!(
            "{}, K = {}",
            profile.model.covariance.as_str(),
            profile.model.components
        ),
        limits: *limits,
        checks,
    })
}

fn verdict(ok: bool) -> Verdict {
    if ok { Verdict::Pass } else { Verdict::Fail }
}

/// Welch's t of batch against reference, one-sided towards a lower batch mean.
fn loglik_check(profile: &Profile, scores: &[f64], limits: &Limits) -> Check {
    let (mean, sd) = mean_sd(scores);
    let r = &profile.loglik;
    let (vb, vr) = (sd * sd / scores.len() as f64, r.sd * r.sd / r.rows as f64);
    let se = (vb + vr).sqrt();
    let diff = mean - r.mean;
    // Welch–Satterthwaite degrees of freedom.
    let df = (vb + vr).powi(2)
        / (vb * vb / (scores.len() as f64 - 1.0) + vr * vr / (r.rows as f64 - 1.0));
    let (t, p) = if se > 0.0 && df.is_finite() && df > 0.0 {
        let t = diff / se;
        let dist = StudentsT::new(0.0, 1.0, df).expect("positive degrees of freedom");
        (t, dist.cdf(t))
    } else {
        (0.0, if diff < 0.0 { 0.0 } else { 1.0 })
    };
    let ok = p >= limits.significance;
    Check {
        name: "mean_loglik".into(),
        method: "Welch's t-test, one-sided (batch mean lower)".into(),
        statistic: t,
        p_value: Some(p),
        effect: diff,
        limit: format!("p ≥ {}", limits.significance),
        verdict: verdict(ok),
        message: format!(
            "mean log-likelihood {mean:.4} nats/row against the reference's held-out {:.4} ({diff:+.4}); {}",
            r.mean,
            if ok {
                "no evidence the batch fits worse"
            } else {
                "the batch fits the reference model worse than unseen reference rows do"
            }
        ),
        columns: Vec::new(),
    }
}

/// Rows below the reference's 1st percentile, against 1 % by an exact binomial test.
fn outlier_check(profile: &Profile, scores: &[f64], limits: &Limits) -> Result<Check, GateError> {
    let floor = profile.quantile(0.01).ok_or_else(|| {
        GateError::Reference("the profile has no 1st percentile of log-likelihood".into())
    })?;
    let n = scores.len() as u64;
    let below = scores.iter().filter(|&&s| s < floor).count() as u64;
    let dist = Binomial::new(0.01, n).expect("a valid binomial");
    // P(X ≥ below) = 1 − P(X ≤ below − 1).
    let p = if below == 0 { 1.0 } else { dist.sf(below - 1) };
    let share = below as f64 / n as f64;
    let ok = p >= limits.significance;
    Ok(Check {
        name: "outlier_rate".into(),
        method: "exact binomial test, one-sided, against 1 %".into(),
        statistic: below as f64,
        p_value: Some(p),
        effect: share,
        limit: format!("p ≥ {}", limits.significance),
        verdict: verdict(ok),
        message: format!(
            "{below} of {n} rows ({:.2} %) score below the reference's 1st percentile ({floor:.3} nats); about 1 % expected",
            100.0 * share
        ),
        columns: Vec::new(),
    })
}

fn column_check(profile: &Profile, batch: &Rows, limits: &Limits) -> Check {
    let (nb, nr) = (batch.len() as f64, profile.loglik.rows as f64);
    let d = profile.columns.len() as f64;
    let z_limit = Normal::new(0.0, 1.0)
        .expect("the standard normal")
        .inverse_cdf(1.0 - limits.significance / (2.0 * d));
    let mut columns: Vec<ColumnShift> = profile
        .columns
        .iter()
        .enumerate()
        .map(|(j, c)| {
            let values: Vec<f64> = (0..batch.len()).map(|i| batch.row(i)[j]).collect();
            let (mean, sd) = mean_sd(&values);
            let reference_sd = if c.sd > 0.0 { c.sd } else { f64::MIN_POSITIVE };
            let mean_shift = (mean - c.mean) / reference_sd;
            let variance_ratio = (sd * sd) / (reference_sd * reference_sd);
            // Sampling noise: the SE of a standardised mean difference of two samples with
            // about equal spread, and of the log of a variance ratio with the batch's own
            // kurtosis (Var ln s² ≈ (κ − (n − 3)/(n − 1))/n; normal data give 2/(n − 1)).
            let mean_se = (1.0 / nb + 1.0 / nr).sqrt();
            let kurtosis = kurtosis(&values, mean, sd);
            let log_var =
                |n: f64| ((kurtosis - (n - 3.0) / (n - 1.0)) / n).max(2.0 / (n - 1.0) / 4.0);
            let ratio_se = (log_var(nb) + log_var(nr)).sqrt();
            let mean_moved =
                mean_shift.abs() > limits.mean_shift && mean_shift.abs() > z_limit * mean_se;
            let log_ratio = variance_ratio.ln().abs();
            let spread_moved =
                log_ratio > limits.variance_ratio.ln() && log_ratio > z_limit * ratio_se;
            ColumnShift {
                name: c.name.clone(),
                mean_shift,
                variance_ratio,
                verdict: verdict(!(mean_moved || spread_moved)),
            }
        })
        .collect();
    // Most moved first: by |mean shift|, then by how far the variance ratio is from 1.
    let moved = |c: &ColumnShift| c.mean_shift.abs().max(c.variance_ratio.ln().abs());
    columns.sort_by(|a, b| moved(b).total_cmp(&moved(a)).then(a.name.cmp(&b.name)));
    let largest = columns
        .iter()
        .map(|c| c.mean_shift.abs())
        .fold(0.0, f64::max);
    let failed: Vec<&str> = columns
        .iter()
        .filter(|c| c.verdict == Verdict::Fail)
        .map(|c| c.name.as_str())
        .collect();
    let top = &columns[0];
    Check {
        name: "column_shift".into(),
        method: "standardised mean difference and variance ratio per column".into(),
        statistic: largest,
        p_value: None,
        effect: largest,
        limit: format!(
            "|mean shift| ≤ {} SD and variance ratio within [{:.2}, {}], unless sampling noise explains the move (z ≤ {z_limit:.2})",
            limits.mean_shift,
            1.0 / limits.variance_ratio,
            limits.variance_ratio
        ),
        verdict: verdict(failed.is_empty()),
        message: if failed.is_empty() {
            format!(
                "no column moved beyond the limits; the most moved is {} (mean shift {:+.3} SD, variance ratio {:.3})",
                top.name, top.mean_shift, top.variance_ratio
            )
        } else {
            format!(
                "moved beyond the limits: {}; the most moved is {} (mean shift {:+.3} SD, variance ratio {:.3})",
                failed.join(", "),
                top.name,
                top.mean_shift,
                top.variance_ratio
            )
        },
        columns,
    }
}

/// Sample kurtosis m₄ / m₂² of `v` (3 for normal data).
fn kurtosis(v: &[f64], mean: f64, sd: f64) -> f64 {
    if sd <= 0.0 {
        return 3.0;
    }
    let m4 = v.iter().map(|x| ((x - mean) / sd).powi(4)).sum::<f64>() / v.len() as f64;
    m4.max(1.0)
}
