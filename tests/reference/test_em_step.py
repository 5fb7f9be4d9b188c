"""One EM update from given parameters against scikit-learn's.

Ours: ``mixgauge fit --start init.json --max-iterations 1 --ridge R --restarts 1``, which
applies one E-step and one M-step (Dempster, Laird & Rubin 1977) to the starting model, the
M-step covariance being the responsibility-weighted covariance around the new mean plus R
on the diagonal, and weights Nₖ/N.

Reference: scikit-learn ``GaussianMixture(max_iter=1, tol=0, reg_covar=R, weights_init=w,
means_init=μ, precisions_init=Σ⁻¹)`` ``.fit(X)``. Read from scikit-learn's source
(sklearn/mixture/_base.py, fit_predict): ``_initialize`` replaces every initial parameter by
the given ones, then each of ``max_iter`` iterations runs ``_e_step`` then ``_m_step``; with
tol=0 the ``abs(change) < tol`` test can never end the loop early, and the closing E-step
after the loop does not change the parameters. The M-step (``_estimate_gaussian_parameters``)
is Nₖ = Σᵢ rᵢₖ (+10·machine epsilon), μₖ = Σᵢ rᵢₖxᵢ / Nₖ, Σₖ = Σᵢ rᵢₖ(xᵢ−μₖ)(xᵢ−μₖ)ᵀ / Nₖ +
reg_covar·I, weights Nₖ/ΣNₖ. For covariance_type='diag' it forms E_r[x²] − μₖ² + reg_covar,
which cancels digits when |μ| ≫ σ; the data here are centred near the origin with unit-order
spread, so that loss (≈ machine epsilon × μ²/σ²) stays many orders below the tolerance.

Tolerance (requirement: 1e-8), elementwise |ours − sklearn| ≤ 1e-8·|sklearn| + 1e-8·s:
  weights      s = 0   (pure relative; every weight here is ≥ 0.02)
  means        s = the data's largest column standard deviation
  covariances  s = that component's largest sklearn variance (|Σᵢⱼ| ≤ √(ΣᵢᵢΣⱼⱼ), so
               off-diagonal entries are judged against the matrix's own scale)
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from sklearn.exceptions import ConvergenceWarning
from sklearn.mixture import GaussianMixture

import support

RTOL = 1e-8
ATOL_SCALE = 1e-8

# (dimensions, components, rows, absolute ridge)
CASES = [
    (1, 2, 600, 1e-2),
    (1, 4, 800, 0.0),
    (2, 3, 900, 1e-3),
    (3, 1, 300, 5e-2),
    (5, 3, 1200, 1e-4),
    (8, 2, 1000, 1e-6),
    (12, 4, 1600, 2e-2),
]


def overlapping_problem(rng, form, d, k, n):
    """Data from a mixture whose components overlap (so responsibilities are genuinely soft),
    and starting parameters that are a perturbed version of that mixture."""
    weights = support.random_weights(rng, k, floor=0.3)
    means = rng.normal(0.0, 1.5, (k, d))
    covariances = support.random_covariances(rng, form, k, d, condition=20.0)
    x, _ = support.sample(rng, form, weights, means, covariances, n)

    start_weights = support.random_weights(rng, k, floor=0.3)
    start_means = means + rng.normal(0.0, 0.5, (k, d))
    start_cov = support.random_covariances(rng, form, k, d, condition=20.0, scale=1.5)
    return x, (start_weights, start_means, start_cov)


def sklearn_one_step(x, form, start, ridge):
    """scikit-learn GaussianMixture single EM iteration from the given parameters."""
    weights, means, covariances = start
    if form == "full":
        precisions = np.stack([np.linalg.inv(c) for c in covariances])
        precisions = (precisions + np.transpose(precisions, (0, 2, 1))) / 2.0
    else:
        precisions = 1.0 / covariances
    gm = GaussianMixture(
        n_components=len(weights),
        covariance_type=support.SKLEARN_COVARIANCE_TYPE[form],
        max_iter=1,
        tol=0.0,
        reg_covar=ridge,
        weights_init=weights,
        means_init=means,
        precisions_init=precisions,
        init_params="random",  # computed, then replaced by the *_init values above
        random_state=0,
    )
    with warnings.catch_warnings():
        # One iteration never "converges" with tol=0; the warning is expected.
        warnings.simplefilter("ignore", ConvergenceWarning)
        gm.fit(x)
    assert gm.n_iter_ == 1
    return gm


@pytest.mark.parametrize("form", support.FORMS)
@pytest.mark.parametrize("d,k,n,ridge", CASES)
def test_one_em_update_matches_sklearn(mixgauge, form, d, k, n, ridge):
    """Source: scikit-learn GaussianMixture single EM iteration (max_iter=1, tol=0)."""
    rng = np.random.default_rng([303, d, k, support.FORMS.index(form)])
    x, start = overlapping_problem(rng, form, d, k, n)
    doc = mixgauge.fit(
        x, k, form,
        start=support.model_document(form, *start),
        max_iterations=1, ridge=ridge, restarts=1,
    )
    gm = sklearn_one_step(x, form, start, ridge)

    assert doc["fitted"]["iterations"] == 1
    _, weights, means, covariances = support.parameters(doc)

    assert weights.min() >= 0.02  # keeps the pure relative test on weights meaningful
    np.testing.assert_allclose(weights, gm.weights_, rtol=RTOL, atol=0.0, err_msg="weights")

    data_scale = float(np.max(np.std(x, axis=0)))
    np.testing.assert_allclose(
        means, gm.means_, rtol=RTOL, atol=ATOL_SCALE * data_scale, err_msg="means"
    )
    for c in range(k):
        sk_cov = gm.covariances_[c]
        scale = float(np.max(sk_cov if form == "diagonal" else np.diag(sk_cov)))
        np.testing.assert_allclose(
            covariances[c], sk_cov, rtol=RTOL, atol=ATOL_SCALE * scale,
            err_msg=f"covariance of component {c}",
        )


@pytest.mark.parametrize("form", support.FORMS)
def test_one_em_update_log_likelihoods_match_sklearn(mixgauge, form):
    """The fit record's log-likelihoods around the same single update.

    trace[0] is the mean per-row log-likelihood of the starting model; scikit-learn reports
    the same quantity as lower_bounds_[0] (for GaussianMixture the "lower bound" of an
    iteration is the mean log-likelihood computed in its E-step, i.e. under the parameters
    before the M-step: sklearn/mixture/_gaussian_mixture.py, _compute_lower_bound).
    mean_loglik is that of the updated model; the reference is scikit-learn's score(X) after
    the one iteration. Relative tolerance 1e-10 (a log-likelihood evaluation, as in
    test_density)."""
    d, k, n, ridge = 4, 3, 1000, 1e-3
    rng = np.random.default_rng([304, support.FORMS.index(form)])
    x, start = overlapping_problem(rng, form, d, k, n)
    doc = mixgauge.fit(
        x, k, form,
        start=support.model_document(form, *start),
        max_iterations=1, ridge=ridge, restarts=1,
    )
    gm = sklearn_one_step(x, form, start, ridge)
    fitted = doc["fitted"]
    before, after = fitted["trace"][0], fitted["mean_loglik"]
    assert after > before  # the update from a perturbed start improves the fit
    assert abs(before - gm.lower_bounds_[0]) <= 1e-10 * abs(gm.lower_bounds_[0])
    assert abs(after - gm.score(x)) <= 1e-10 * abs(gm.score(x))
