"""How far importance weights can be trusted: the Pareto k-hat diagnostic and the effective size.

The largest weights of an importance sample are fitted with a generalised Pareto distribution
(Vehtari, Simpson, Gelman, Yao & Gabry 2024, "Pareto smoothed importance sampling", JMLR 25,
72). Its shape k-hat says how heavy the weights' tail is: below 0.5 the variance of the weights
is finite, up to 0.7 the estimates are still usable in practice, above 0.7 they are not (that
paper's thresholds). The shape is estimated by the quadrature of Zhang & Stephens (2009,
Technometrics 51, 316) with the weak prior towards 0.5 of the PSIS paper.
"""

import numpy as np
from scipy.special import logsumexp

__all__ = ["K_HAT_LIMIT", "effective_sample_size", "pareto_k_hat"]

#: Largest k-hat for which importance estimates are trusted (Vehtari et al. 2024).
K_HAT_LIMIT = 0.7


def effective_sample_size(log_w):
    """Kish's effective sample size (sum w)^2 / sum w^2 of log importance weights.

    Parameters
    ----------
    log_w : ndarray, shape (n,)
        Log weights; ``-inf`` for draws outside the target's support.

    Returns
    -------
    float
        Between 1 and n (0 when every weight is zero).
    """
    log_w = np.asarray(log_w, dtype=float)
    finite = np.isfinite(log_w)
    if not np.any(finite):
        return 0.0
    w = np.exp(log_w[finite] - np.max(log_w[finite]))
    return float(w.sum() ** 2 / np.sum(w * w))


def _generalised_pareto_shape(x):
    """Zhang-Stephens estimate of the shape of exceedances x > 0, sorted ascending."""
    n = x.size
    m = 30 + int(np.sqrt(n))
    b = 1.0 - np.sqrt(m / (np.arange(1, m + 1) - 0.5))
    b /= 3.0 * x[int(n / 4 + 0.5) - 1]
    b += 1.0 / x[-1]
    k = np.mean(np.log1p(-b[:, None] * x), axis=1)  # profile shape at each b (sign: -k there)
    log_l = n * (np.log(-b / k) - k - 1.0)
    w = np.exp(-logsumexp(log_l[None, :] - log_l[:, None], axis=1))
    keep = w >= 10 * np.finfo(float).eps
    w = w[keep] / w[keep].sum()
    b_hat = np.sum(b[keep] * w)
    shape = np.mean(np.log1p(-b_hat * x))
    # Weakly informative prior: shrink towards 0.5 as if from 10 more observations.
    return float((shape * n + 0.5 * 10) / (n + 10))


def pareto_k_hat(log_w):
    """Shape k-hat of the generalised Pareto fitted to the largest importance weights.

    Parameters
    ----------
    log_w : ndarray, shape (n,)
        Log weights; ``-inf`` entries count as zero weights.

    Returns
    -------
    float
        k-hat; ``inf`` when fewer than 10 weights are positive. Trust the weights when it is
        at most :data:`K_HAT_LIMIT`.

    Notes
    -----
    The tail is the largest M = min(n / 5, 3 sqrt(n)) weights and the threshold the next one
    (Vehtari et al. 2024, section 3). Weights are scaled by their maximum first, which does not
    change the shape.
    """
    log_w = np.asarray(log_w, dtype=float)
    log_w = np.sort(log_w[np.isfinite(log_w)])
    n = log_w.size
    if n < 10:
        return float("inf")
    m = int(np.ceil(min(0.2 * n, 3.0 * np.sqrt(n))))
    w = np.exp(log_w - log_w[-1])
    threshold = w[n - m - 1]
    x = w[n - m :] - threshold
    x = x[x > 0]
    if x.size < 5:
        return 0.0  # a flat tail: as light as weights get
    return _generalised_pareto_shape(x)
