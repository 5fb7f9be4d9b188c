"""Penalised criteria of ``mixgauge score --json`` against scikit-learn and scipy.

BIC = −2 ln L + p ln N (Schwarz 1978) and AIC = −2 ln L + 2p (Akaike 1974), lower is
better. Requirement: both equal scikit-learn's GaussianMixture.bic(X) / .aic(X) on the same
fitted model to 1e-9 relative, and free_parameters equals scikit-learn's _n_parameters().

The model is fitted by mixgauge, then loaded into a scikit-learn GaussianMixture object
(weights_, means_, covariances_, precisions_cholesky_ from
sklearn.mixture._gaussian_mixture._compute_precision_cholesky) without fitting it there, so
scikit-learn evaluates exactly our parameters with its own code.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import logsumexp

import support

RTOL = 1e-9

# (dimensions, components, rows)
CASES = [(1, 1, 400), (1, 3, 600), (3, 2, 800), (6, 4, 1200), (12, 3, 1500)]


def overlapping_data(rng, form, d, k, n):
    """Data from a mixture whose components overlap (so the fit is not trivial and the
    responsibilities are soft)."""
    weights = support.random_weights(rng, k, floor=0.3)
    means = rng.normal(0.0, 2.0, (k, d))
    covariances = support.random_covariances(rng, form, k, d, condition=30.0)
    x, _ = support.sample(rng, form, weights, means, covariances, n)
    return x


def fitted_and_scored(mixgauge, form, d, k, n, seed):
    rng = np.random.default_rng([505, d, k, seed, support.FORMS.index(form)])
    x = overlapping_data(rng, form, d, k, n)
    doc = mixgauge.fit(x, k, form, seed=seed)
    summary = mixgauge.score(x, doc).summary
    return x, doc, summary


@pytest.mark.parametrize("form", support.FORMS)
@pytest.mark.parametrize("d,k,n", CASES)
def test_bic_aic_and_parameter_count_match_sklearn(mixgauge, form, d, k, n):
    """Source: scikit-learn GaussianMixture.bic(X), .aic(X) and ._n_parameters() on our
    fitted parameters (BIC: Schwarz 1978; AIC: Akaike 1974)."""
    x, doc, s = fitted_and_scored(mixgauge, form, d, k, n, seed=7)
    gm = support.sklearn_mixture(*support.parameters(doc))

    assert s["free_parameters"] == gm._n_parameters()
    assert s["rows"] == n
    sk_bic, sk_aic = float(gm.bic(x)), float(gm.aic(x))
    assert abs(s["bic"] - sk_bic) <= RTOL * abs(sk_bic), (s["bic"], sk_bic)
    assert abs(s["aic"] - sk_aic) <= RTOL * abs(sk_aic), (s["aic"], sk_aic)


@pytest.mark.parametrize("form", support.FORMS)
@pytest.mark.parametrize("d,k,n", CASES[1:4])
def test_criteria_follow_their_formulas_with_the_scipy_likelihood(mixgauge, form, d, k, n):
    """The same criteria written out from their definitions, independently of scikit-learn:
    ln L from scipy.stats.multivariate_normal.logpdf + scipy.special.logsumexp, and the
    free-parameter count of a K-component mixture in D dimensions,
    (K−1) + K·D + K·D(D+1)/2 for full and (K−1) + 2·K·D for diagonal covariances (weights
    on the simplex, means, covariance entries; common practice).
    BIC: Schwarz 1978. AIC: Akaike 1974. Relative tolerance 1e-9."""
    x, doc, s = fitted_and_scored(mixgauge, form, d, k, n, seed=8)
    loglik = float(np.sum(support.reference_log_density(x, *support.parameters(doc))))
    covariance_numbers = d * (d + 1) // 2 if form == "full" else d
    p = (k - 1) + k * d + k * covariance_numbers
    bic = -2.0 * loglik + p * math.log(n)
    aic = -2.0 * loglik + 2.0 * p

    assert s["free_parameters"] == p
    assert abs(s["loglik"] - loglik) <= 1e-10 * abs(loglik)
    assert abs(s["bic"] - bic) <= RTOL * abs(bic), (s["bic"], bic)
    assert abs(s["aic"] - aic) <= RTOL * abs(aic), (s["aic"], aic)


@pytest.mark.parametrize("form", support.FORMS)
def test_entropy_and_icl_follow_their_formulas(mixgauge, form):
    """entropy = −Σᵢ Σₖ rᵢₖ ln rᵢₖ with rᵢₖ the posterior responsibilities, and
    ICL = BIC + 2·entropy, the BIC form of the integrated completed likelihood (Biernacki,
    Celeux & Govaert 2000; formula from memory). Responsibilities from
    scipy.stats.multivariate_normal.logpdf, normalised with scipy.special.logsumexp, and
    ln rᵢₖ taken directly from those logarithms. The data overlap, so the entropy is large
    (checked) and a relative tolerance of 1e-9 applies to it."""
    d, k, n = 3, 3, 1000
    x, doc, s = fitted_and_scored(mixgauge, form, d, k, n, seed=9)
    joint = support.reference_log_joint(x, *support.parameters(doc))
    log_r = joint - logsumexp(joint, axis=1, keepdims=True)
    entropy = float(-np.sum(np.exp(log_r) * log_r))
    assert entropy > 10.0  # the responsibilities are genuinely soft for this data

    assert abs(s["entropy"] - entropy) <= RTOL * entropy, (s["entropy"], entropy)
    icl = s["bic"] + 2.0 * entropy
    assert abs(s["icl"] - icl) <= RTOL * abs(icl), (s["icl"], icl)
