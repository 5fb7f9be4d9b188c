//! [`SweepSettings`]: which candidates to try and how to fit them, validated once.

use mixgauge_engine::{CovarianceForm, FitOptions, Ridge};
use serde::{Deserialize, Serialize};

use crate::SelectError;

/// Everything a sweep needs to know besides the data. Field defaults are those of
/// [`SweepSettings::default`].
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SweepSettings {
    /// Component counts to try, ascending. Default 1 to 12.
    pub components: Vec<usize>,
    /// Covariance forms to try. Default full and diagonal.
    pub covariances: Vec<CovarianceForm>,
    /// Number of cross-validation folds. Default 5.
    pub folds: usize,
    /// Independent EM starts per fit; the best log-likelihood wins. Default 4.
    pub restarts: usize,
    /// Seed of the fold shuffle and of every EM start. Default 0.
    pub seed: u64,
    /// EM stops when the mean per-row log-likelihood improves by less than this (nats).
    /// Default 1e-6.
    pub tolerance: f64,
    /// Cap on EM iterations per start. Default 1000.
    pub max_iterations: usize,
    /// Covariance ridge. Default 1e-6 of each column's variance.
    pub ridge: Ridge,
}

impl Default for SweepSettings {
    fn default() -> Self {
        SweepSettings {
            components: (1..=12).collect(),
            covariances: CovarianceForm::ALL.to_vec(),
            folds: 5,
            restarts: 4,
            seed: 0,
            tolerance: 1e-6,
            max_iterations: 1000,
            ridge: Ridge::Relative(1e-6),
        }
    }
}

impl SweepSettings {
    /// Checks the settings against a dataset of `rows` rows.
    ///
    /// # Errors
    /// [`SelectError::Setting`] naming the setting and what would be accepted.
    pub fn validate(&self, rows: usize) -> Result<(), SelectError> {
        let bad = |name, value: String, expected: String| {
            Err(SelectError::Setting {
                name,
                value,
                expected,
            })
        };
        if self.components.is_empty() || self.components.contains(&0) {
            return bad(
                "components",
                format!("{:?}", self.components),
                "a non-empty list of counts ≥ 1, e.g. 1..12".into(),
            );
        }
        if self.components.windows(2).any(|w| w[0] >= w[1]) {
            return bad(
                "components",
                format!("{:?}", self.components),
                "strictly ascending counts without repeats".into(),
            );
        }
        if self.covariances.is_empty() {
            return bad(
                "covariances",
                "[]".into(),
                "at least one of full, diagonal".into(),
            );
        }
        let mut forms = self.covariances.clone();
        forms.sort();
        forms.dedup();
        if forms.len() != self.covariances.len() {
            return bad(
                "covariances",
                format!("{:?}", self.covariances),
                "each form at most once".into(),
            );
        }
        if self.folds < 2 || self.folds > rows {
            return bad(
                "folds",
                self.folds.to_string(),
                format!("between 2 and the number of rows ({rows})"),
            );
        }
        if self.restarts == 0 {
            return bad("restarts", "0".into(), "at least 1".into());
        }
        if !(self.tolerance.is_finite() && self.tolerance >= 0.0) {
            return bad(
                "tolerance",
                self.tolerance.to_string(),
                "a finite value ≥ 0".into(),
            );
        }
        let (Ridge::Relative(r) | Ridge::Absolute(r)) = self.ridge;
        if !(r.is_finite() && r >= 0.0) {
            return bad("ridge", r.to_string(), "a finite value ≥ 0".into());
        }
        Ok(())
    }

    /// Engine options for one candidate.
    pub(crate) fn fit_options(&self, components: usize, form: CovarianceForm) -> FitOptions {
        let mut o = FitOptions::new(components, form);
        o.restarts = self.restarts;
        o.seed = self.seed;
        o.tolerance = self.tolerance;
        o.max_iterations = self.max_iterations;
        o.ridge = self.ridge;
        o
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bad_settings_name_the_setting_and_the_fix() {
        let s = SweepSettings {
            folds: 1,
            ..Default::default()
        };
        let e = s.validate(100).unwrap_err().to_string();
        assert_eq!(
            e,
            "folds = 1 is not valid: between 2 and the number of rows (100)"
        );
        let s = SweepSettings {
            folds: 200,
            ..Default::default()
        };
        assert!(s.validate(100).is_err());
        let s = SweepSettings {
            components: vec![3, 2],
            ..Default::default()
        };
        assert!(
            s.validate(100)
                .unwrap_err()
                .to_string()
                .contains("ascending")
        );
        assert!(SweepSettings::default().validate(100).is_ok());
    }
}
