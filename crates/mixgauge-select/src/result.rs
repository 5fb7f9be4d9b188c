//! The sweep result document. Its JSON Schema is `api-spec/result.schema.json`; the CLI writes
//! it and the service returns it. Log-likelihoods are in nats; per-row means are per row of data.
//! It holds no timings, so the same data, settings and seed give byte-identical documents.

use mixgauge_engine::CovarianceForm;
use serde::{Deserialize, Serialize};

use crate::SweepSettings;

/// The value of the document's `format` key.
pub const RESULT_FORMAT: &str = "mixgauge.sweep/1";

/// The whole result of a sweep.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct SweepResult {
    /// Always [`RESULT_FORMAT`].
    pub format: String,
    /// What was fitted.
    pub dataset: DatasetInfo,
    /// How it was fitted.
    pub settings: SweepSettings,
    /// One entry per component count and covariance form, forms in settings order, counts
    /// ascending.
    pub candidates: Vec<Candidate>,
    /// What the views recommend.
    pub recommendations: Recommendations,
    /// Plain-language sentences: where the views agree and where overfitting starts.
    pub summary: Vec<String>,
}

/// The dataset a sweep ran on.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct DatasetInfo {
    /// Rows fitted (after any dropped).
    pub rows: usize,
    /// Feature columns.
    pub columns: usize,
    /// Their names.
    pub column_names: Vec<String>,
    /// SHA-256 of the input bytes, lowercase hex.
    pub sha256: String,
    /// Rows dropped for missing or non-finite values.
    pub dropped_rows: usize,
    /// Whether columns were standardised before fitting (results are in the data's own units
    /// either way).
    pub standardised: bool,
}

/// Whether a candidate was fitted.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CandidateStatus {
    /// Fitted on every fold and on all rows.
    Fitted,
    /// Not fitted: too many free parameters for the training rows.
    Skipped,
    /// A fit failed; `reason` says why.
    Failed,
}

/// A mean with its standard error.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct MeanWithError {
    /// The mean.
    pub mean: f64,
    /// Its standard error.
    pub stderr: f64,
}

/// One fold of one candidate.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FoldOutcome {
    /// Mean per-row log-likelihood of the fold's training rows under its model.
    pub train_mean: f64,
    /// Mean per-row log-likelihood of the fold's held-out rows.
    pub heldout_mean: f64,
    /// EM iterations of the winning start.
    pub iterations: usize,
    /// Whether the winning start converged.
    pub converged: bool,
}

/// The fit on all rows.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FullFit {
    /// Total log-likelihood.
    pub loglik: f64,
    /// −2 ln L + p ln N (Schwarz 1978).
    pub bic: f64,
    /// −2 ln L + 2p (Akaike 1974).
    pub aic: f64,
    /// BIC + 2 × responsibility entropy (Biernacki, Celeux & Govaert 2000).
    pub icl: f64,
    /// EM iterations of the winning start.
    pub iterations: usize,
    /// Whether the winning start converged.
    pub converged: bool,
    /// Effective rows (N × weight) of the smallest component.
    pub smallest_component_rows: f64,
}

/// Agreement of the full-data fit's hard assignment with the label column.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct LabelAgreement {
    /// Adjusted Rand index (Hubert & Arabie 1985).
    pub adjusted_rand: f64,
    /// Mutual information normalised by the mean of the two entropies.
    pub normalised_mutual_information: f64,
}

/// One component count with one covariance form.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Candidate {
    /// Covariance form.
    pub covariance: CovarianceForm,
    /// Component count.
    pub components: usize,
    /// Fitted, skipped or failed.
    pub status: CandidateStatus,
    /// Why it was skipped or failed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reason: Option<String>,
    /// Free parameters of the model.
    pub free_parameters: usize,
    /// Training mean per-row log-likelihood: the mean over folds of each fold's training mean,
    /// with the standard error over folds.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub train: Option<MeanWithError>,
    /// Held-out mean per-row log-likelihood over all rows (each held out once), with the
    /// standard error of the per-row values.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub heldout: Option<MeanWithError>,
    /// Train mean minus held-out mean: the overfitting gap.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub gap: Option<f64>,
    /// The fit on all rows.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub full_fit: Option<FullFit>,
    /// Per fold.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub folds: Vec<FoldOutcome>,
    /// Whether some fit of this candidate collapsed a component (see `degenerate_reason`).
    /// Degenerate candidates are never recommended.
    pub degenerate: bool,
    /// What collapsed.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub degenerate_reason: Option<String>,
    /// Agreement with the label column, when one was given.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub labels: Option<LabelAgreement>,
}

impl Candidate {
    /// Whether the candidate may be recommended: fitted and not degenerate.
    pub fn eligible(&self) -> bool {
        self.status == CandidateStatus::Fitted && !self.degenerate
    }
}

/// A recommended candidate.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize)]
pub struct Choice {
    /// Covariance form.
    pub covariance: CovarianceForm,
    /// Component count.
    pub components: usize,
}

/// What each view recommends (`None` when no candidate is eligible).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Recommendations {
    /// Highest held-out mean.
    pub heldout_max: Option<Choice>,
    /// Fewest free parameters among candidates whose held-out mean is within one standard
    /// error (of the paired per-row differences) of the best.
    pub heldout_one_se: Option<Choice>,
    /// Lowest BIC.
    pub bic_min: Option<Choice>,
    /// Lowest AIC.
    pub aic_min: Option<Choice>,
    /// Lowest ICL.
    pub icl_min: Option<Choice>,
    /// Knee of the training curve of each covariance form (Kneedle), shown as one more view.
    pub training_elbow: Vec<Choice>,
}
