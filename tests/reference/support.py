"""Shared helpers of the reference tests: synthetic mixtures, the scipy reference density,
model documents, and loading a mixture's parameters into scikit-learn.

Everything here is either synthetic test input (drawn from a seeded numpy Generator) or a
direct call into scipy / scikit-learn. Nothing here computes an expected value with
mixgauge itself.
"""

from __future__ import annotations

import numpy as np
from scipy.special import logsumexp
from scipy.stats import multivariate_normal

#: Our covariance form names mapped to scikit-learn's ``covariance_type`` names.
SKLEARN_COVARIANCE_TYPE = {"full": "full", "diagonal": "diag"}

FORMS = ("full", "diagonal")


# --------------------------------------------------------------------------------------
# Synthetic input (seeded; invented data, not expected answers)
# --------------------------------------------------------------------------------------


def random_rotation(rng: np.random.Generator, d: int) -> np.ndarray:
    """A random orthogonal matrix: QR of a Gaussian matrix with the signs of R's diagonal
    folded into Q (common practice, so that Q is uniformly distributed)."""
    q, r = np.linalg.qr(rng.standard_normal((d, d)))
    return q * np.sign(np.diag(r))


def random_spd(
    rng: np.random.Generator, d: int, condition: float, scale: float = 1.0
) -> np.ndarray:
    """A random symmetric positive-definite matrix Q·diag(λ)·Qᵀ whose eigenvalues are
    log-uniform in scale·[condition^-1/2, condition^1/2], with the two extremes pinned so
    that the condition number is exactly ``condition`` when d ≥ 2. Exactly symmetric."""
    q = random_rotation(rng, d)
    half = 0.5 * np.log(condition)
    log_eig = rng.uniform(-half, half, d)
    if d >= 2:
        log_eig[0], log_eig[1] = -half, half
    eig = scale * np.exp(log_eig)
    m = (q * eig) @ q.T
    return (m + m.T) / 2.0


def random_variances(
    rng: np.random.Generator, d: int, condition: float, scale: float = 1.0
) -> np.ndarray:
    """D positive variances, log-uniform in scale·[condition^-1/2, condition^1/2]."""
    half = 0.5 * np.log(condition)
    return scale * np.exp(rng.uniform(-half, half, d))


def random_weights(rng: np.random.Generator, k: int, floor: float = 0.1) -> np.ndarray:
    """K mixing weights, Dirichlet(5) draws mixed with a uniform floor so that no component
    is starved of rows. They sum to 1 to a few ulp."""
    w = (1.0 - floor) * rng.dirichlet(np.full(k, 5.0)) + floor / k
    return w / w.sum()


def random_covariances(
    rng: np.random.Generator, form: str, k: int, d: int, condition: float, scale: float = 1.0
) -> np.ndarray:
    """K×D×D SPD matrices (full) or K×D variances (diagonal)."""
    if form == "full":
        return np.stack([random_spd(rng, d, condition, scale) for _ in range(k)])
    return np.stack([random_variances(rng, d, condition, scale) for _ in range(k)])


def dense(form: str, cov: np.ndarray) -> np.ndarray:
    """One component's covariance as a dense D×D matrix."""
    return np.diag(cov) if form == "diagonal" else cov


def sample(
    rng: np.random.Generator,
    form: str,
    weights: np.ndarray,
    means: np.ndarray,
    covariances: np.ndarray,
    n: int,
) -> tuple[np.ndarray, np.ndarray]:
    """N rows drawn from the mixture (component counts are multinomial), and their labels."""
    k, d = means.shape
    counts = rng.multinomial(n, weights)
    xs, labels = [], []
    for c in range(k):
        cov = dense(form, covariances[c])
        xs.append(rng.multivariate_normal(means[c], cov, size=counts[c], method="cholesky"))
        labels.append(np.full(counts[c], c))
    x = np.concatenate(xs).reshape(n, d)
    lab = np.concatenate(labels)
    order = rng.permutation(n)
    return np.ascontiguousarray(x[order], dtype=np.float64), lab[order]


def separated_means(
    rng: np.random.Generator, form: str, covariances: np.ndarray, separation: float
) -> tuple[np.ndarray, float]:
    """K means, one per given covariance, such that every pair (a, b) satisfies
    ‖μa − μb‖ ≥ separation · (σa(u) + σb(u)), with u the unit vector from μb to μa and
    σ(u) = √(uᵀΣu) the component's standard deviation along u. Pairs are also kept below
    1.3 × that bound for the closest pair, so the data are no easier than asked for.
    Rejection sampling from a Gaussian cloud. Returns the means and the achieved minimum."""
    k = len(covariances)
    mats = [dense(form, c) for c in covariances]
    d = mats[0].shape[0]
    sd = np.sqrt(max(np.linalg.eigvalsh(m).max() for m in mats))
    spread = 3.0 * separation * sd / np.sqrt(d) if d > 1 else 2.0 * separation * sd
    for _ in range(100_000):
        means = rng.normal(0.0, spread, (k, d))
        if k == 1:
            return means, np.inf
        worst = np.inf
        for a in range(k):
            for b in range(a + 1, k):
                delta = means[a] - means[b]
                dist = np.linalg.norm(delta)
                u = delta / dist
                worst = min(worst, dist / (np.sqrt(u @ mats[a] @ u) + np.sqrt(u @ mats[b] @ u)))
        if separation <= worst < 1.3 * separation:
            return means, worst
    raise RuntimeError("could not place separated means")


# --------------------------------------------------------------------------------------
# Reference computations (scipy)
# --------------------------------------------------------------------------------------


def reference_log_joint(
    x: np.ndarray, form: str, weights, means, covariances
) -> np.ndarray:
    """N×K matrix of ln wₖ + ln N(xᵢ | μₖ, Σₖ).

    Source: scipy.stats.multivariate_normal.logpdf (a diagonal covariance is passed to it as
    the dense matrix diag(σ²)).
    """
    n = x.shape[0]
    cols = []
    for w, m, c in zip(weights, means, covariances):
        lp = multivariate_normal(mean=np.asarray(m), cov=dense(form, np.asarray(c))).logpdf(x)
        cols.append(np.log(w) + np.reshape(lp, n))
    return np.column_stack(cols)


def reference_log_density(x: np.ndarray, form: str, weights, means, covariances) -> np.ndarray:
    """Per-row mixture log-density ln Σₖ wₖ N(xᵢ | μₖ, Σₖ).

    Source: scipy.stats.multivariate_normal.logpdf combined with scipy.special.logsumexp.
    """
    return logsumexp(reference_log_joint(x, form, weights, means, covariances), axis=1)


def relative_error(ours: np.ndarray, ref: np.ndarray, floor: float = 1.0) -> np.ndarray:
    """|ours − ref| / max(|ref|, floor).

    The floor (1 nat for log-densities) keeps the ratio meaningful for the rare value that
    lies near zero, where a pure relative error is undefined; every value with |ref| ≥ floor
    is judged by the pure relative error.
    """
    ours = np.asarray(ours, dtype=float)
    ref = np.asarray(ref, dtype=float)
    return np.abs(ours - ref) / np.maximum(np.abs(ref), floor)


# --------------------------------------------------------------------------------------
# Model documents (our own JSON format, "mixgauge.model/1")
# --------------------------------------------------------------------------------------


def model_document(form: str, weights, means, covariances) -> dict:
    """A hand-written model document without a ``fitted`` record."""
    means = np.asarray(means, dtype=float)
    k, d = means.shape
    return {
        "format": "mixgauge.model/1",
        "covariance": form,
        "components": int(k),
        "dimensions": int(d),
        "weights": [float(v) for v in np.asarray(weights, dtype=float)],
        "means": np.asarray(means, dtype=float).tolist(),
        "covariances": np.asarray(covariances, dtype=float).tolist(),
    }


def parameters(doc: dict) -> tuple[str, np.ndarray, np.ndarray, np.ndarray]:
    """(form, weights K, means K×D, covariances K×D×D or K×D) of a model document."""
    return (
        doc["covariance"],
        np.asarray(doc["weights"], dtype=float),
        np.asarray(doc["means"], dtype=float),
        np.asarray(doc["covariances"], dtype=float),
    )


# --------------------------------------------------------------------------------------
# scikit-learn
# --------------------------------------------------------------------------------------


def sklearn_mixture(form: str, weights, means, covariances):
    """A scikit-learn GaussianMixture holding exactly the given parameters, usable for
    score(), bic(), aic() and _n_parameters() without fitting.

    Source: scikit-learn GaussianMixture's fitted attributes (weights_, means_,
    covariances_, precisions_cholesky_, precisions_); the Cholesky factors of the precisions
    come from sklearn.mixture._gaussian_mixture._compute_precision_cholesky, as in its own
    M-step.
    """
    from sklearn.mixture import GaussianMixture
    from sklearn.mixture._gaussian_mixture import _compute_precision_cholesky

    sk_type = SKLEARN_COVARIANCE_TYPE[form]
    means = np.asarray(means, dtype=float)
    covariances = np.asarray(covariances, dtype=float)
    k, d = means.shape
    gm = GaussianMixture(n_components=k, covariance_type=sk_type)
    gm.weights_ = np.asarray(weights, dtype=float)
    gm.means_ = means
    gm.covariances_ = covariances
    gm.precisions_cholesky_ = _compute_precision_cholesky(covariances, sk_type)
    if sk_type == "full":
        gm.precisions_ = np.stack([p @ p.T for p in gm.precisions_cholesky_])
    else:
        gm.precisions_ = gm.precisions_cholesky_**2
    gm.converged_ = True
    gm.n_iter_ = 0
    gm.lower_bound_ = -np.inf
    gm.n_features_in_ = d
    return gm
