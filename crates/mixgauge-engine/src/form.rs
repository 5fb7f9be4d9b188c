//! The two covariance forms and their free-parameter counts.

use std::fmt;
use std::str::FromStr;

use serde::{Deserialize, Serialize};

/// How each component's covariance is parameterised.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum CovarianceForm {
    /// A full symmetric positive-definite D×D matrix per component.
    Full,
    /// A diagonal matrix (one variance per column) per component.
    Diagonal,
}

impl CovarianceForm {
    /// Both forms, in the order reports list them.
    pub const ALL: [CovarianceForm; 2] = [CovarianceForm::Full, CovarianceForm::Diagonal];

    /// The lower-case name used in documents and on the command line.
    pub fn as_str(self) -> &'static str {
        match self {
            CovarianceForm::Full => "full",
            CovarianceForm::Diagonal => "diagonal",
        }
    }

    /// Number of covariance numbers stored per component in the packed form the engine
    /// works with: `D(D+1)/2` for full (lower triangle), `D` for diagonal.
    pub(crate) fn packed_len(self, dims: usize) -> usize {
        match self {
            CovarianceForm::Full => dims * (dims + 1) / 2,
            CovarianceForm::Diagonal => dims,
        }
    }

    /// Free parameters of a K-component mixture in D dimensions:
    /// `(K−1) + K·D + K·D(D+1)/2` for full, `(K−1) + 2·K·D` for diagonal.
    pub fn free_parameters(self, components: usize, dims: usize) -> usize {
        components.saturating_sub(1) + components * dims + components * self.packed_len(dims)
    }
}

impl fmt::Display for CovarianceForm {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

impl FromStr for CovarianceForm {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim().to_ascii_lowercase().as_str() {
            "full" => Ok(CovarianceForm::Full),
            "diagonal" | "diag" => Ok(CovarianceForm::Diagonal),
            other => Err(format!(
                "unknown covariance form \"{other}\"; use \"full\" or \"diagonal\""
            )),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parameter_counts_match_the_closed_forms() {
        // Closed forms: full (K−1) + K·D + K·D(D+1)/2, diagonal (K−1) + 2·K·D.
        assert_eq!(CovarianceForm::Full.free_parameters(3, 4), 2 + 12 + 30);
        assert_eq!(CovarianceForm::Diagonal.free_parameters(3, 4), 2 + 24);
        assert_eq!(CovarianceForm::Full.free_parameters(1, 1), 2);
    }

    #[test]
    fn names_parse_back() {
        for form in CovarianceForm::ALL {
            assert_eq!(form.as_str().parse::<CovarianceForm>().unwrap(), form);
        }
        assert!("spherical".parse::<CovarianceForm>().is_err());
    }
}
