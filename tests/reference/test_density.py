"""Per-row log-density of a given model (``mixgauge score``) against scipy.

Reference: ln p(x) = logsumexp_k [ln wₖ + ln N(x | μₖ, Σₖ)] with
scipy.stats.multivariate_normal.logpdf for each component and scipy.special.logsumexp to
combine them. Requirement: relative error ≤ 1e-10 on every row, full and diagonal
covariances, D from 1 to 40.

The relative error is |ours − ref| / max(|ref|, 1 nat): a pure relative error for every row
whose log-density has magnitude ≥ 1 nat, and an absolute error of 1e-10 nats for the rare row
whose log-density lies within 1 nat of zero (where a ratio is meaningless).
"""

from __future__ import annotations

import numpy as np
import pytest

import support

DIMENSIONS = (1, 2, 3, 5, 8, 13, 21, 40)
COMPONENTS = (1, 3, 5)
TOLERANCE = 1e-10  # relative, as stated in the module docstring

# Overall covariance scales: 1 gives negative log-densities; 1e-3 gives positive ones (small
# volumes), so both signs and the zero crossing between them are exercised.
SCALES = {1: 1.0, 3: 1e-3, 5: 1.0}


def probe_rows(rng, form, weights, means, covariances, n_near=701):
    """Rows near the components (drawn from the mixture), between pairs of components, and
    far from all of them (5 to 1000 of the largest standard deviation away). 761 rows in all:
    several of the engine's row blocks, the last one partly filled."""
    k, d = means.shape
    near, _ = support.sample(rng, form, weights, means, covariances, n_near)
    sd = np.sqrt(max(np.max(np.linalg.eigvalsh(support.dense(form, c))) for c in covariances))
    between = []
    for _ in range(30):
        a, b = rng.integers(k, size=2)
        t = rng.uniform(0.2, 0.8)
        between.append(t * means[a] + (1 - t) * means[b] + rng.normal(0, 0.3 * sd, d))
    far = []
    for distance in np.geomspace(5.0, 1000.0, 30):
        u = rng.standard_normal(d)
        far.append(means[rng.integers(k)] + distance * sd * u / np.linalg.norm(u))
    return np.vstack([near, np.array(between), np.array(far)])


def random_model(rng, form, k, d, scale):
    weights = support.random_weights(rng, k)
    # Means spread over a few standard deviations so that components overlap partly.
    means = rng.normal(0.0, 3.0 * np.sqrt(scale), (k, d))
    covariances = support.random_covariances(rng, form, k, d, condition=1e3, scale=scale)
    return weights, means, covariances


@pytest.mark.parametrize("form", support.FORMS)
@pytest.mark.parametrize("k", COMPONENTS)
@pytest.mark.parametrize("d", DIMENSIONS)
def test_per_row_log_density_matches_scipy(mixgauge, form, k, d):
    """Source: scipy.stats.multivariate_normal.logpdf + scipy.special.logsumexp."""
    rng = np.random.default_rng([101, d, k, support.FORMS.index(form)])
    weights, means, covariances = random_model(rng, form, k, d, SCALES[k])
    x = probe_rows(rng, form, weights, means, covariances)

    result = mixgauge.score(x, support.model_document(form, weights, means, covariances))
    ref = support.reference_log_density(x, form, weights, means, covariances)

    assert result.loglik.shape == ref.shape
    err = support.relative_error(result.loglik, ref)
    worst = int(np.argmax(err))
    assert err[worst] <= TOLERANCE, (
        f"row {worst}: mixgauge {result.loglik[worst]!r}, scipy {ref[worst]!r}, "
        f"relative error {err[worst]:.3e} > {TOLERANCE:g}"
    )

    # The summary's total is the sum of the per-row log-densities (same reference).
    total = float(np.sum(ref))
    s = result.summary
    assert s["rows"] == len(x)
    assert abs(s["loglik"] - total) <= TOLERANCE * abs(total)
    assert abs(s["mean_loglik"] - total / len(x)) <= TOLERANCE * abs(total / len(x))


@pytest.mark.parametrize("form", support.FORMS)
@pytest.mark.parametrize("d", (2, 13, 40))
def test_most_responsible_component_is_the_posterior_argmax(mixgauge, form, d):
    """The per-row ``component`` is argmaxₖ of the posterior wₖN(x|μₖ,Σₖ)/p(x) (Bayes' rule),
    computed from scipy.stats.multivariate_normal.logpdf. Rows whose two best components are
    within 1e-6 nats of each other are near-ties where either answer is right; they are left
    out, and the test requires most rows to remain."""
    k = 4
    rng = np.random.default_rng([202, d, support.FORMS.index(form)])
    weights, means, covariances = random_model(rng, form, k, d, 1.0)
    x = probe_rows(rng, form, weights, means, covariances)

    result = mixgauge.score(x, support.model_document(form, weights, means, covariances))
    joint = support.reference_log_joint(x, form, weights, means, covariances)
    top2 = np.sort(joint, axis=1)[:, -2:]
    clear = (top2[:, 1] - top2[:, 0]) > 1e-6
    assert clear.sum() >= 0.9 * len(x)
    np.testing.assert_array_equal(result.component[clear], np.argmax(joint, axis=1)[clear])
