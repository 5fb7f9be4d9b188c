//! The JSON model document: a mixture's parameters in plain nested arrays, plus an optional
//! record of the fit that produced it. Numbers are printed in their shortest round-trip form
//! and parsed back exactly, so a saved model scores rows bit-identically after loading.
//!
//! Its JSON Schema is `api-spec/model.schema.json`.

use serde::{Deserialize, Serialize};

use crate::Error;
use crate::fit::{Fit, RestartOutcome, Termination};
use crate::form::CovarianceForm;
use crate::model::Mixture;
use crate::stats::Reseed;

/// The value of the document's `format` key.
pub const MODEL_FORMAT: &str = "mixgauge.model/1";

/// Covariances as nested arrays: K×D×D for full, K×D variances for diagonal.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(untagged)]
pub enum Covariances {
    /// One D×D matrix per component.
    Full(Vec<Vec<Vec<f64>>>),
    /// One row of D variances per component.
    Diagonal(Vec<Vec<f64>>),
}

/// How a stored model was fitted.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct FitRecord {
    /// Rows fitted.
    pub rows: usize,
    /// Total log-likelihood of those rows, nats.
    pub loglik: f64,
    /// Mean per-row log-likelihood, nats.
    pub mean_loglik: f64,
    /// EM updates applied.
    pub iterations: usize,
    /// Why EM stopped.
    pub termination: Termination,
    /// Ridge added to each column's variance.
    pub ridge: Vec<f64>,
    /// Seed of the random streams.
    pub seed: u64,
    /// The winning restart.
    pub restart: usize,
    /// What every restart reached, in restart order.
    pub restarts: Vec<RestartOutcome>,
    /// Mean per-row log-likelihood after each update.
    pub trace: Vec<f64>,
    /// Components re-seeded or held during the fit.
    pub reseeds: Vec<Reseed>,
}

/// A mixture as a JSON document.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ModelDocument {
    /// Always [`MODEL_FORMAT`].
    pub format: String,
    /// `"full"` or `"diagonal"`.
    pub covariance: CovarianceForm,
    /// K.
    pub components: usize,
    /// D.
    pub dimensions: usize,
    /// Names of the D columns, when known.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub column_names: Option<Vec<String>>,
    /// K mixing weights.
    pub weights: Vec<f64>,
    /// K×D means.
    pub means: Vec<Vec<f64>>,
    /// K×D×D covariances (full) or K×D variances (diagonal).
    pub covariances: Covariances,
    /// The fit that produced the model, when it came from one.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fitted: Option<FitRecord>,
}

impl ModelDocument {
    /// The document of a mixture.
    pub fn from_mixture(model: &Mixture) -> Self {
        let k = model.components();
        let d = model.dims();
        let covariances = match model.form() {
            CovarianceForm::Full => Covariances::Full(
                (0..k)
                    .map(|c| model.covariance(c).chunks(d).map(<[f64]>::to_vec).collect())
                    .collect(),
            ),
            CovarianceForm::Diagonal => {
                Covariances::Diagonal((0..k).map(|c| model.variances(c)).collect())
            }
        };
        ModelDocument {
            format: MODEL_FORMAT.to_string(),
            covariance: model.form(),
            components: k,
            dimensions: d,
            column_names: None,
            weights: model.weights().to_vec(),
            means: (0..k).map(|c| model.mean(c).to_vec()).collect(),
            covariances,
            fitted: None,
        }
    }

    /// The document of a fit's model, with the fit recorded.
    pub fn from_fit(fit: &Fit, seed: u64) -> Self {
        let mut doc = Self::from_mixture(&fit.model);
        doc.fitted = Some(FitRecord {
            rows: fit.rows,
            loglik: fit.loglik,
            mean_loglik: fit.mean_loglik(),
            iterations: fit.iterations,
            termination: fit.termination,
            ridge: fit.ridge.clone(),
            seed,
            restart: fit.restart,
            restarts: fit.restarts.clone(),
            trace: fit.trace.clone(),
            reseeds: fit.reseeds.clone(),
        });
        doc
    }

    /// The fit this document records, model included, exactly as it was when saved (numbers
    /// round-trip bit for bit, and the model's factors are recomputed from the same values):
    /// how a fit done on one machine is handed to another.
    ///
    /// # Errors
    /// [`Error::Document`] when the document records no fit, and the errors of
    /// [`ModelDocument::to_mixture`].
    pub fn to_fit(&self) -> Result<Fit, Error> {
        let Some(record) = &self.fitted else {
            return Err(Error::Document(
                "the document records no fit (\"fitted\" is missing)".into(),
            ));
        };
        Ok(Fit {
            model: self.to_mixture()?,
            rows: record.rows,
            loglik: record.loglik,
            iterations: record.iterations,
            termination: record.termination,
            trace: record.trace.clone(),
            reseeds: record.reseeds.clone(),
            ridge: record.ridge.clone(),
            restart: record.restart,
            restarts: record.restarts.clone(),
        })
    }

    /// The mixture this document describes.
    ///
    /// # Errors
    /// [`Error::Document`] when the document's shapes disagree with each other, and the
    /// errors of [`Mixture::new`] for invalid numbers.
    pub fn to_mixture(&self) -> Result<Mixture, Error> {
        if self.format != MODEL_FORMAT {
            return Err(Error::Document(format!(
                "format is \"{}\"; this version reads \"{MODEL_FORMAT}\"",
                self.format
            )));
        }
        let (k, d) = (self.components, self.dimensions);
        let shape = |what: &str, found: usize, want: usize| {
            Error::Document(format!(
                "\"{what}\" has {found} entries; components = {k} and dimensions = {d} need {want}"
            ))
        };
        if self.weights.len() != k {
            return Err(shape("weights", self.weights.len(), k));
        }
        if self.means.len() != k {
            return Err(shape("means", self.means.len(), k));
        }
        if let Some(c) = self.means.iter().position(|m| m.len() != d) {
            return Err(shape(&format!("means[{c}]"), self.means[c].len(), d));
        }
        if let Some(names) = &self.column_names
            && names.len() != d
        {
            return Err(shape("column_names", names.len(), d));
        }
        let covariances = match (&self.covariances, self.covariance) {
            (Covariances::Full(m), CovarianceForm::Full) => {
                if m.len() != k {
                    return Err(shape("covariances", m.len(), k));
                }
                let mut flat = Vec::with_capacity(k * d * d);
                for (c, matrix) in m.iter().enumerate() {
                    if matrix.len() != d {
                        return Err(shape(&format!("covariances[{c}]"), matrix.len(), d));
                    }
                    for (i, row) in matrix.iter().enumerate() {
                        if row.len() != d {
                            return Err(shape(&format!("covariances[{c}][{i}]"), row.len(), d));
                        }
                        flat.extend_from_slice(row);
                    }
                }
                flat
            }
            (Covariances::Diagonal(v), CovarianceForm::Diagonal) => {
                if v.len() != k {
                    return Err(shape("covariances", v.len(), k));
                }
                let mut flat = Vec::with_capacity(k * d);
                for (c, row) in v.iter().enumerate() {
                    if row.len() != d {
                        return Err(shape(&format!("covariances[{c}]"), row.len(), d));
                    }
                    flat.extend_from_slice(row);
                }
                flat
            }
            (_, form) => {
                return Err(Error::Document(format!(
                    "\"covariance\" is \"{form}\" but \"covariances\" has the other shape; \
                     full needs K×D×D matrices, diagonal K×D variances"
                )));
            }
        };
        Mixture::new(
            self.covariance,
            self.weights.clone(),
            self.means.concat(),
            covariances,
        )
    }

    /// The document as pretty-printed JSON.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a model document always serialises")
    }

    /// Parses a document.
    ///
    /// # Errors
    /// [`Error::Document`] with serde's line and column when the JSON does not fit the schema.
    pub fn from_json(text: &str) -> Result<Self, Error> {
        serde_json::from_str(text).map_err(|e| Error::Document(e.to_string()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn documents_round_trip_bit_for_bit() {
        let model = Mixture::new(
            CovarianceForm::Full,
            vec![0.1 + 0.2, 1.0 - (0.1 + 0.2)],
            vec![1.0 / 3.0, -2.0, 1e-300, 5e17],
            vec![2.0, 0.3, 0.3, 1.0 / 7.0, 1.0, 0.0, 0.0, 1.0],
        )
        .unwrap();
        let doc = ModelDocument::from_mixture(&model);
        let back = ModelDocument::from_json(&doc.to_json()).unwrap();
        assert_eq!(doc, back);
        let again = back.to_mixture().unwrap();
        for (a, b) in model.weights().iter().zip(again.weights()) {
            assert_eq!(a.to_bits(), b.to_bits());
        }
        assert_eq!(model.covariance(0), again.covariance(0));
    }

    /// A fit saved on one machine and read on another is the same fit: every number the
    /// model selection uses comes back with the same bits, and the model scores rows the same.
    #[test]
    fn fits_round_trip_bit_for_bit() {
        use crate::fit::{FitOptions, fit_restart};
        use crate::rows::Rows;
        let values: Vec<f64> = (0..600)
            .map(|i| {
                let x = i as f64;
                (x * 0.618_033_988_7).fract() * 3.0 + if i % 4 < 2 { 0.0 } else { 8.0 }
            })
            .collect();
        let rows = Rows::new(&values, 3).unwrap();
        for form in [CovarianceForm::Full, CovarianceForm::Diagonal] {
            let mut options = FitOptions::new(3, form);
            options.seed = 7;
            let fit = fit_restart(&rows, &options, 1, &|| false).unwrap();
            let text = serde_json::to_string(&ModelDocument::from_fit(&fit, 7)).unwrap();
            let back = ModelDocument::from_json(&text).unwrap().to_fit().unwrap();
            assert_eq!(fit.loglik.to_bits(), back.loglik.to_bits());
            assert_eq!(fit.rows, back.rows);
            assert_eq!(
                (fit.iterations, fit.restart),
                (back.iterations, back.restart)
            );
            assert_eq!(fit.trace, back.trace);
            assert_eq!(fit.restarts, back.restarts);
            let (a, b) = (
                fit.model.summarise(&rows).unwrap(),
                back.model.summarise(&rows).unwrap(),
            );
            assert_eq!(a.loglik.to_bits(), b.loglik.to_bits());
            assert_eq!(a.entropy.to_bits(), b.entropy.to_bits());
        }
        let bare = ModelDocument::from_mixture(
            &Mixture::new(CovarianceForm::Diagonal, vec![1.0], vec![0.0], vec![1.0]).unwrap(),
        );
        assert!(
            bare.to_fit()
                .unwrap_err()
                .to_string()
                .contains("records no fit")
        );
    }

    #[test]
    fn mismatched_shapes_are_named() {
        let mut doc = ModelDocument::from_mixture(
            &Mixture::new(
                CovarianceForm::Diagonal,
                vec![1.0],
                vec![0.0, 0.0],
                vec![1.0, 1.0],
            )
            .unwrap(),
        );
        doc.means[0].pop();
        let e = doc.to_mixture().unwrap_err().to_string();
        assert!(e.contains("\"means[0]\" has 1 entries"), "{e}");
        doc.means[0].push(0.0);
        doc.covariance = CovarianceForm::Full;
        assert!(
            doc.to_mixture()
                .unwrap_err()
                .to_string()
                .contains("other shape")
        );
    }
}
