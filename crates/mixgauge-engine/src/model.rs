//! [`Mixture`]: a Gaussian mixture's parameters, the cached factors that make scoring cheap,
//! and the scoring entry points (per-row log-density, responsibilities, hard assignment).

use rayon::prelude::*;

use crate::Error;
use crate::form::CovarianceForm;
use crate::kernel::{BLOCK_ROWS, score_block};
use crate::linalg::{packed, whitening};
use crate::rows::Rows;

const LN_2PI: f64 = 1.837_877_066_409_345_3;

/// A K-component Gaussian mixture in D dimensions with full or diagonal covariances.
///
/// Besides the parameters it caches, per component, `ln wₖ − ½D·ln 2π − ½ln|Σₖ|` and the
/// whitening factor (the inverse Cholesky factor `Lₖ⁻¹` for full covariance, the precisions
/// `1/σ²` for diagonal), so that a component's log-density at x is
/// `constₖ − ½‖Lₖ⁻¹(x − μₖ)‖²`.
#[derive(Clone, Debug)]
pub struct Mixture {
    form: CovarianceForm,
    components: usize,
    dims: usize,
    weights: Vec<f64>,
    means: Vec<f64>,
    /// Packed: lower triangle row by row (full) or variances (diagonal), per component.
    covariances: Vec<f64>,
    pub(crate) factors: Vec<f64>,
    pub(crate) log_norm: Vec<f64>,
}

/// Totals of scoring some rows under a model.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ScoreSummary {
    /// Rows scored.
    pub rows: usize,
    /// Σ of per-row log-densities, in nats.
    pub loglik: f64,
    /// Σ over rows of the entropy of the row's responsibilities, −Σₖ rₖ ln rₖ, in nats.
    pub entropy: f64,
}

impl ScoreSummary {
    /// Mean per-row log-density.
    pub fn mean(&self) -> f64 {
        self.loglik / self.rows as f64
    }
}

impl Mixture {
    /// A mixture from its parameters. `means` is K×D row-major; `covariances` is K×D×D
    /// row-major (full) or K×D variances (diagonal).
    ///
    /// # Errors
    /// [`Error::Model`] for wrong lengths, non-finite numbers, weights that are not positive
    /// or do not sum to 1 (within 1e-6), or full covariances that are not symmetric;
    /// [`Error::NotPositiveDefinite`] for a covariance without a Cholesky factor.
    pub fn new(
        form: CovarianceForm,
        weights: Vec<f64>,
        means: Vec<f64>,
        covariances: Vec<f64>,
    ) -> Result<Self, Error> {
        let k = weights.len();
        if k == 0 {
            return Err(Error::Model(
                "a mixture needs at least one component".into(),
            ));
        }
        if means.is_empty() || !means.len().is_multiple_of(k) {
            return Err(Error::Model(format!(
                "{} mean values do not split into {k} components",
                means.len()
            )));
        }
        let d = means.len() / k;
        let packed_cov = match form {
            CovarianceForm::Full => {
                if covariances.len() != k * d * d {
                    return Err(Error::Model(format!(
                        "full covariances need {k}×{d}×{d} = {} values, found {}",
                        k * d * d,
                        covariances.len()
                    )));
                }
                let mut tri = Vec::with_capacity(k * d * (d + 1) / 2);
                for c in 0..k {
                    let m = &covariances[c * d * d..(c + 1) * d * d];
                    for i in 0..d {
                        for j in 0..=i {
                            let (a, b) = (m[i * d + j], m[j * d + i]);
                            let scale = (m[i * d + i].abs() * m[j * d + j].abs())
                                .sqrt()
                                .max(f64::MIN_POSITIVE);
                            if (a - b).abs() > 1e-9 * scale {
                                return Err(Error::Model(format!(
                                    "covariance of component {c} is not symmetric at ({i}, {j}): {a} vs {b}"
                                )));
                            }
                            tri.push(a);
                        }
                    }
                }
                tri
            }
            CovarianceForm::Diagonal => {
                if covariances.len() != k * d {
                    return Err(Error::Model(format!(
                        "diagonal covariances need {k}×{d} = {} variances, found {}",
                        k * d,
                        covariances.len()
                    )));
                }
                covariances
            }
        };
        Self::from_packed(form, weights, means, packed_cov, "")
    }

    /// A mixture from packed covariances; `context` is added to positive-definiteness errors.
    pub(crate) fn from_packed(
        form: CovarianceForm,
        weights: Vec<f64>,
        means: Vec<f64>,
        covariances: Vec<f64>,
        context: &str,
    ) -> Result<Self, Error> {
        let k = weights.len();
        let d = means.len() / k;
        if let Some(i) = weights.iter().position(|w| !(w.is_finite() && *w > 0.0)) {
            return Err(Error::Model(format!(
                "weight of component {i} is {}; weights must be positive",
                weights[i]
            )));
        }
        let total: f64 = weights.iter().sum();
        if (total - 1.0).abs() > 1e-6 {
            return Err(Error::Model(format!(
                "weights sum to {total}; they must sum to 1"
            )));
        }
        if let Some(i) = means.iter().position(|m| !m.is_finite()) {
            return Err(Error::Model(format!(
                "mean of component {} has a non-finite value",
                i / d
            )));
        }
        let p = form.packed_len(d);
        let mut factors = Vec::with_capacity(k * p);
        let mut log_norm = Vec::with_capacity(k);
        for c in 0..k {
            let cov = &covariances[c * p..(c + 1) * p];
            let not_pd = || Error::NotPositiveDefinite {
                component: c,
                context: context.to_string(),
            };
            let half_log_det = match form {
                CovarianceForm::Full => {
                    let (w, hld) = whitening(cov, d).ok_or_else(not_pd)?;
                    factors.extend_from_slice(&w);
                    hld
                }
                CovarianceForm::Diagonal => {
                    let mut hld = 0.0;
                    for &v in cov {
                        if !(v > 0.0 && v.is_finite() && (1.0 / v).is_finite()) {
                            return Err(not_pd());
                        }
                        factors.push(1.0 / v);
                        hld += 0.5 * v.ln();
                    }
                    hld
                }
            };
            log_norm.push(weights[c].ln() - 0.5 * d as f64 * LN_2PI - half_log_det);
        }
        Ok(Mixture {
            form,
            components: k,
            dims: d,
            weights,
            means,
            covariances,
            factors,
            log_norm,
        })
    }

    /// Covariance form.
    pub fn form(&self) -> CovarianceForm {
        self.form
    }

    /// Number of components K.
    pub fn components(&self) -> usize {
        self.components
    }

    /// Number of columns D.
    pub fn dims(&self) -> usize {
        self.dims
    }

    /// Mixing weights, K values summing to 1.
    pub fn weights(&self) -> &[f64] {
        &self.weights
    }

    /// Mean of component `k`.
    pub fn mean(&self, k: usize) -> &[f64] {
        &self.means[k * self.dims..(k + 1) * self.dims]
    }

    /// All means, K×D row-major.
    pub fn means(&self) -> &[f64] {
        &self.means
    }

    /// Packed covariance of component `k` (lower triangle row by row, or variances).
    pub(crate) fn packed_covariance(&self, k: usize) -> &[f64] {
        let p = self.form.packed_len(self.dims);
        &self.covariances[k * p..(k + 1) * p]
    }

    /// Covariance of component `k` as a dense D×D row-major matrix.
    pub fn covariance(&self, k: usize) -> Vec<f64> {
        let d = self.dims;
        let tri = self.packed_covariance(k);
        let mut m = vec![0.0; d * d];
        for i in 0..d {
            for j in 0..d {
                m[i * d + j] = match self.form {
                    CovarianceForm::Full => tri[if j <= i { packed(i, j) } else { packed(j, i) }],
                    CovarianceForm::Diagonal if i == j => tri[i],
                    CovarianceForm::Diagonal => 0.0,
                };
            }
        }
        m
    }

    /// Variances of component `k` (the covariance diagonal).
    pub fn variances(&self, k: usize) -> Vec<f64> {
        let tri = self.packed_covariance(k);
        match self.form {
            CovarianceForm::Full => (0..self.dims).map(|i| tri[packed(i, i)]).collect(),
            CovarianceForm::Diagonal => tri.to_vec(),
        }
    }

    /// This model, fitted on standardised rows `z = (x − centre) / scale`, as a model of `x`:
    /// means map to `centre + scale·μ`, covariances to `S Σ S` with `S = diag(scale)`. The
    /// density of `x` is the density of `z` times the Jacobian `∏ 1/scale`, so per-row
    /// log-likelihoods agree with the standardised fit's plus its log-Jacobian.
    ///
    /// # Errors
    /// [`Error::Dimensions`] when `centres` or `scales` do not have one entry per column;
    /// [`Error::Model`] when a scaled covariance is not positive definite.
    pub fn in_original_units(&self, centres: &[f64], scales: &[f64]) -> Result<Mixture, Error> {
        let (k, d) = (self.components(), self.dims());
        if centres.len() != d || scales.len() != d {
            return Err(Error::Dimensions {
                model: d,
                data: if centres.len() == d {
                    scales.len()
                } else {
                    centres.len()
                },
            });
        }
        let mut means = Vec::with_capacity(k * d);
        let mut covariances = Vec::new();
        for c in 0..k {
            means.extend(
                self.mean(c)
                    .iter()
                    .zip(centres.iter().zip(scales))
                    .map(|(m, (centre, scale))| centre + scale * m),
            );
            match self.form() {
                CovarianceForm::Full => {
                    let cov = self.covariance(c);
                    for i in 0..d {
                        for j in 0..d {
                            // s_i·s_j first, so entries (i, j) and (j, i) stay equal.
                            covariances.push(cov[i * d + j] * (scales[i] * scales[j]));
                        }
                    }
                }
                CovarianceForm::Diagonal => covariances.extend(
                    self.variances(c)
                        .iter()
                        .zip(scales)
                        .map(|(v, scale)| v * (scale * scale)),
                ),
            }
        }
        Mixture::new(self.form(), self.weights().to_vec(), means, covariances)
    }

    /// Free parameters of this model (see [`CovarianceForm::free_parameters`]).
    pub fn free_parameters(&self) -> usize {
        self.form.free_parameters(self.components, self.dims)
    }

    fn check_dims(&self, rows: &Rows) -> Result<(), Error> {
        if rows.dims() != self.dims {
            return Err(Error::Dimensions {
                model: self.dims,
                data: rows.dims(),
            });
        }
        Ok(())
    }

    fn score_into(
        &self,
        rows: &Rows,
        loglik: &mut [f64],
        resp: Option<&mut [f64]>,
    ) -> Result<(), Error> {
        self.check_dims(rows)?;
        let k = self.components;
        let lost: usize = match resp {
            Some(resp) => loglik
                .par_chunks_mut(BLOCK_ROWS)
                .zip(resp.par_chunks_mut(BLOCK_ROWS * k))
                .enumerate()
                .map(|(b, (ll, r))| score_block(self, rows, b, ll, Some(r)))
                .sum(),
            None => loglik
                .par_chunks_mut(BLOCK_ROWS)
                .enumerate()
                .map(|(b, ll)| score_block(self, rows, b, ll, None))
                .sum(),
        };
        if lost > 0 {
            let row = loglik
                .iter()
                .position(|v| *v == f64::NEG_INFINITY)
                .unwrap_or(0);
            return Err(Error::Model(format!(
                "row {} lies too far from every component for double precision (its log-density underflows); \
                 check that row for unit or scale errors",
                rows.source_index(row)
            )));
        }
        Ok(())
    }

    /// Log-density of every row of the view, in nats (log-sum-exp over components).
    ///
    /// # Errors
    /// [`Error::Dimensions`] when the columns differ from the model's; [`Error::Model`] when a
    /// row is so far from every component that its density underflows double precision.
    pub fn log_density(&self, rows: &Rows) -> Result<Vec<f64>, Error> {
        let mut out = vec![0.0; rows.len()];
        self.score_into(rows, &mut out, None)?;
        Ok(out)
    }

    /// Per-row log-densities and responsibilities (row-major, K per row).
    ///
    /// # Errors
    /// As [`Mixture::log_density`].
    pub fn responsibilities(&self, rows: &Rows) -> Result<(Vec<f64>, Vec<f64>), Error> {
        let mut ll = vec![0.0; rows.len()];
        let mut resp = vec![0.0; rows.len() * self.components];
        self.score_into(rows, &mut ll, Some(&mut resp))?;
        Ok((ll, resp))
    }

    /// The most responsible component of every row (ties go to the lower index).
    ///
    /// # Errors
    /// As [`Mixture::log_density`].
    pub fn assign(&self, rows: &Rows) -> Result<Vec<usize>, Error> {
        let (_, resp) = self.responsibilities(rows)?;
        let k = self.components;
        Ok(resp
            .chunks(k)
            .map(|r| {
                let mut best = 0;
                for c in 1..k {
                    if r[c] > r[best] {
                        best = c;
                    }
                }
                best
            })
            .collect())
    }

    /// Total log-likelihood and responsibility entropy of the rows, computed block by block
    /// and combined over the fixed reduction tree.
    ///
    /// # Errors
    /// As [`Mixture::log_density`].
    pub fn summarise(&self, rows: &Rows) -> Result<ScoreSummary, Error> {
        self.check_dims(rows)?;
        let k = self.components;
        let n = rows.len();
        let blocks = crate::kernel::block_count(n);
        let (loglik, entropy, lost) = crate::stats::reduce_blocks(
            blocks,
            &|b| {
                let len = (n - b * BLOCK_ROWS).min(BLOCK_ROWS);
                let mut ll = vec![0.0; len];
                let mut resp = vec![0.0; len * k];
                let lost = score_block(self, rows, b, &mut ll, Some(&mut resp));
                let mut sum = 0.0;
                for v in &ll {
                    if v.is_finite() {
                        sum += v;
                    }
                }
                let mut ent = 0.0;
                for &r in &resp {
                    if r > 0.0 {
                        ent -= r * r.ln();
                    }
                }
                (sum, ent, lost)
            },
            &|a, b| (a.0 + b.0, a.1 + b.1, a.2 + b.2),
        );
        if lost > 0 {
            // Reuse the per-row path for its error naming the row.
            self.log_density(rows)?;
        }
        Ok(ScoreSummary {
            rows: n,
            loglik,
            entropy,
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_standard_normal_has_the_textbook_density() {
        // N(0, 1) at x: −½ln 2π − x²/2.
        let m = Mixture::new(CovarianceForm::Full, vec![1.0], vec![0.0], vec![1.0]).unwrap();
        let xs = [0.0, 1.0, -2.5];
        let ll = m.log_density(&Rows::new(&xs, 1).unwrap()).unwrap();
        for (x, l) in xs.iter().zip(ll) {
            assert!((l - (-0.5 * LN_2PI - 0.5 * x * x)).abs() < 1e-15);
        }
    }

    #[test]
    fn responsibilities_sum_to_one() {
        let m = Mixture::new(
            CovarianceForm::Diagonal,
            vec![0.3, 0.7],
            vec![0.0, 0.0, 3.0, 1.0],
            vec![1.0, 2.0, 0.5, 1.5],
        )
        .unwrap();
        let xs: Vec<f64> = (0..1000).map(|i| (i as f64 * 0.37).sin() * 4.0).collect();
        let (_, resp) = m.responsibilities(&Rows::new(&xs, 2).unwrap()).unwrap();
        for r in resp.chunks(2) {
            assert!((r[0] + r[1] - 1.0).abs() < 1e-14);
        }
    }

    #[test]
    fn bad_parameters_are_refused_with_the_reason() {
        let e = Mixture::new(
            CovarianceForm::Full,
            vec![0.5, 0.6],
            vec![0.0, 1.0],
            vec![1.0, 1.0],
        )
        .unwrap_err();
        assert!(e.to_string().contains("sum to"));
        let e = Mixture::new(
            CovarianceForm::Full,
            vec![1.0],
            vec![0.0, 0.0],
            vec![1.0, 2.0, 0.0, 1.0],
        )
        .unwrap_err();
        assert!(e.to_string().contains("not symmetric"));
        let e =
            Mixture::new(CovarianceForm::Diagonal, vec![1.0], vec![0.0], vec![-1.0]).unwrap_err();
        assert!(matches!(e, Error::NotPositiveDefinite { component: 0, .. }));
    }
}
