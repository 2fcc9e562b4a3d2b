"""Divergence estimators between an old and a new posterior, and the volume measure.

Pure array functions (no posterior records): the cores of :mod:`planner.simulation.realised`.

The realised information of new data is the Kullback-Leibler divergence from the old posterior
to the new one, ``KL(new || old)`` in bits. Its expectation over the data the old posterior
predicts is the expected information the planner promises (Lindley 1956), which is what makes
the two comparable.

Three estimators, each used where it is exact or best:

* ``reweight_kl_bits``: the new posterior is the old samples with normalised importance
  weights ``w_i``; then ``KL = sum_i w_i log2(N w_i)``, exact on that support.
* ``bridge_kl_bits``: after a refit the density ratio new/old is the likelihood of the new data
  over its evidence ``Z``; ``KL = E_new[log L_new] - log Z`` with ``Z`` from bridge sampling
  between the old and the new samples (Meng and Wong 1996). Needs only the likelihood of the new
  data on both sample sets, no density estimate.
* ``knn_kl_bits``: the k-nearest-neighbour estimator of Wang, Kulkarni and Verdu (2009) from the
  two sample sets alone, in whitened coordinates; the fallback when the bridge's overlap is too
  small. ``gaussian_kl_bits`` is the closed form between Gaussian approximations.

``log2_volume`` is the volume measure: the log2 of the product of the standard deviations of the
columns it is given (period, semi-amplitude and eccentricity of every planet, in
:mod:`planner.simulation.realised`); the shrink in bits is ``log2 V_before - log2 V_after``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.spatial import cKDTree

from planner.information.entropy import LN2

__all__ = [
    "LN2",
    "normalised_log_weights",
    "reweight_kl_bits",
    "effective_sample_size",
    "bridge_log_evidence",
    "bridge_kl_bits",
    "knn_kl_bits",
    "gaussian_kl_closed_bits",
    "gaussian_kl_bits",
    "log2_volume",
]

#: Natural log of 2: nats per bit.


def _logsumexp(a):
    """Return ``log(sum(exp(a)))`` of a 1-D array, stably (plain numpy; -inf entries allowed)."""
    a = np.asarray(a, dtype=float)
    top = float(np.max(a))
    if not math.isfinite(top):
        return top
    return top + math.log(float(np.sum(np.exp(a - top))))


def normalised_log_weights(log_weights):
    """Normalise log importance weights so that their exponentials sum to one.

    Parameters
    ----------
    log_weights : ndarray, shape (n_samples,)
        Unnormalised log weights [nats]; -inf allowed, NaN not.

    Returns
    -------
    ndarray, shape (n_samples,)
        ``log_weights - logsumexp(log_weights)``.
    """
    lw = np.asarray(log_weights, dtype=float)
    if lw.ndim != 1 or lw.size == 0:
        raise ValueError(
            "log_weights must be a non-empty 1-D array; pass one log weight per old sample."
        )
    if not np.all(np.isfinite(lw) | (lw == -np.inf)) or np.all(lw == -np.inf):
        raise ValueError(
            "log_weights must be finite or -inf with at least one finite value; check the "
            "likelihood of the new data for NaN."
        )
    return lw - _logsumexp(lw)


def reweight_kl_bits(log_weights):
    """KL divergence [bits] of an importance-reweighted posterior from the equal-weight one.

    Parameters
    ----------
    log_weights : ndarray, shape (n_samples,)
        Unnormalised log importance weights of the old equal-weight samples (for new data:
        the log likelihood of the new data at each sample) [nats].

    Returns
    -------
    float
        ``sum_i w_i log2(N w_i)`` with ``w`` the normalised weights [bits]; 0 for equal weights,
        ``log2 N`` when one sample takes all the weight.

    Notes
    -----
    Exact for the discrete distribution on the old samples, which is also the distribution the
    planner's expected information is computed on, so the calibration identity holds exactly.
    """
    lwn = normalised_log_weights(log_weights)
    w = np.exp(lwn)
    keep = w > 0
    n = lwn.size
    return float(np.sum(w[keep] * (lwn[keep] + math.log(n))) / LN2)


def effective_sample_size(log_weights):
    """Kish effective sample size ``1 / sum w_i^2`` of normalised importance weights.

    Parameters
    ----------
    log_weights : ndarray, shape (n_samples,)
        Unnormalised log weights [nats].

    Returns
    -------
    float
        Between 1 and ``n_samples``.
    """
    lwn = normalised_log_weights(log_weights)
    return float(1.0 / np.exp(_logsumexp(2.0 * lwn)))


def bridge_log_evidence(loglike_old, loglike_new, max_iter=200, tol=1e-10):
    """Log evidence ``log E_old[L]`` of new data by optimal bridge sampling.

    Parameters
    ----------
    loglike_old : ndarray, shape (n_old,)
        Log likelihood of the new data at samples of the old posterior [nats].
    loglike_new : ndarray, shape (n_new,)
        Log likelihood of the new data at samples of the new posterior (old times that
        likelihood, normalised) [nats].
    max_iter : int
        Iterations of the fixed-point scheme.
    tol : float
        Convergence tolerance on the log evidence [nats].

    Returns
    -------
    log_z : float
        Estimate of ``log Z`` [nats].
    rel_error : float
        Approximate relative standard error of ``Z`` (delta method on the two means, samples
        treated as independent; Fruhwirth-Schnatter 2004).

    Notes
    -----
    Meng and Wong (1996), optimal bridge: with ``p_old`` normalised, ``q = p_old L`` unnormalised
    and the optimal bridge, ``Z = E_old[L / (s1 Z + s2 L)] / E_new[1 / (s1 Z + s2 L)]``,
    ``s_j`` the sample fractions, iterated to its fixed point.
    """
    lo = np.asarray(loglike_old, dtype=float)
    ln = np.asarray(loglike_new, dtype=float)
    n1, n2 = lo.size, ln.size
    ls1, ls2 = math.log(n1 / (n1 + n2)), math.log(n2 / (n1 + n2))
    # Start from the importance estimate; the scheme converges from any start.
    log_z = float(_logsumexp(lo) - math.log(n1))
    for _ in range(max_iter):
        # Z = mean_old[L / (s1 Z + s2 L)] / mean_new[1 / (s1 Z + s2 L)], in logs.
        num = _logsumexp(lo - np.logaddexp(ls1 + log_z, ls2 + lo)) - math.log(n1)
        den = _logsumexp(-np.logaddexp(ls1 + log_z, ls2 + ln)) - math.log(n2)
        new = float(num - den)
        converged = abs(new - log_z) < tol
        log_z = new
        if converged:
            break
    # Delta method on the ratio of two independent means, each bounded in [0, 1].
    f_old = np.exp(ls2 + lo - np.logaddexp(ls1 + log_z, ls2 + lo))
    f_new = np.exp(ls1 + log_z - np.logaddexp(ls1 + log_z, ls2 + ln))
    re2 = 0.0
    for f, n in ((f_old, n1), (f_new, n2)):
        mean = float(np.mean(f))
        re2 = math.inf if mean <= 0 else re2 + float(np.var(f)) / (n * mean**2)
    return log_z, math.sqrt(re2)


def bridge_kl_bits(loglike_old, loglike_new):
    """KL divergence [bits] of a refitted posterior from the old one, by bridge sampling.

    Parameters
    ----------
    loglike_old : ndarray, shape (n_old,)
        Log likelihood of the new data at the old samples [nats].
    loglike_new : ndarray, shape (n_new,)
        Log likelihood of the new data at the new samples [nats].

    Returns
    -------
    bits : float
        ``(mean(loglike_new) - log Z) / ln 2`` [bits].
    stderr : float
        Its approximate standard error [bits]: sample spread of the mean and the bridge error
        of ``log Z``.

    Notes
    -----
    Uses ``p_new / p_old = L / Z`` for conditionally independent data (Bayes' rule), and
    ``Z`` from :func:`bridge_log_evidence` (Meng and Wong 1996).
    """
    ln = np.asarray(loglike_new, dtype=float)
    log_z, rel = bridge_log_evidence(loglike_old, ln)
    bits = (float(np.mean(ln)) - log_z) / LN2
    se_mean = float(np.std(ln)) / math.sqrt(ln.size)
    return bits, math.hypot(se_mean, rel) / LN2


def _kth_positive_distance(dist, k):
    """k-th smallest strictly positive distance per row (duplicates count as ties)."""
    d = np.where(dist > 0, dist, np.inf)
    d = np.sort(d, axis=1)
    return d[:, k - 1]


def knn_kl_bits(new, old, k=1):
    """k-nearest-neighbour estimate of KL(new || old) [bits] from two sample sets.

    Parameters
    ----------
    new : ndarray, shape (n, d)
        Samples of the distribution ``p`` whose divergence is measured.
    old : ndarray, shape (m, d)
        Samples of the reference ``q``.
    k : int
        Neighbour order, the same in both sets.

    Returns
    -------
    float
        ``(d/n) sum_i log(nu_k(i) / rho_k(i)) + log(m / (n - 1))`` in bits, with ``rho_k`` the
        distance to the k-th neighbour among the other ``new`` samples and ``nu_k`` among the
        ``old`` samples, both in coordinates whitened by the covariance of ``old`` (an affine map,
        which leaves KL unchanged).

    Notes
    -----
    Wang, Kulkarni and Verdu (2009), IEEE Trans. Inf. Theory 55, 2392, with
    ``k_n = l_m = k``. Exact duplicates (repeated MCMC states) are skipped by taking the k-th
    strictly positive distance. Columns constant in both sets are dropped.
    """
    p = np.atleast_2d(np.asarray(new, dtype=float))
    q = np.atleast_2d(np.asarray(old, dtype=float))
    if p.shape[1] != q.shape[1]:
        raise ValueError(
            f"new has {p.shape[1]} columns and old {q.shape[1]}; pass the same coordinates."
        )
    if p.shape[0] <= k or q.shape[0] < k:
        raise ValueError(f"need more than k={k} samples in each set for the kNN estimator.")
    keep = (np.ptp(q, axis=0) > 0) | (np.ptp(p, axis=0) > 0)
    p, q = p[:, keep], q[:, keep]
    mean = q.mean(axis=0)
    cov = np.atleast_2d(np.cov(q, rowvar=False))
    chol = np.linalg.cholesky(cov + 1e-12 * np.diag(np.diag(cov)))
    pw = np.linalg.solve(chol, (p - mean).T).T
    qw = np.linalg.solve(chol, (q - mean).T).T
    n, d = pw.shape
    m = qw.shape[0]
    extra = k + 8
    rho_all, _ = cKDTree(pw).query(pw, k=min(n, extra + 1))
    nu_all, _ = cKDTree(qw).query(pw, k=min(m, extra))
    rho = _kth_positive_distance(np.atleast_2d(rho_all), k)
    nu = _kth_positive_distance(np.atleast_2d(nu_all), k)
    ok = np.isfinite(rho) & np.isfinite(nu)
    if not np.any(ok):
        raise ValueError("every sample is a duplicate; the kNN estimator needs distinct samples.")
    nats = d * float(np.mean(np.log(nu[ok] / rho[ok]))) + math.log(m / (n - 1))
    return nats / LN2


def gaussian_kl_closed_bits(mean1, cov1, mean0, cov0):
    """Closed-form KL(N(mean1, cov1) || N(mean0, cov0)) [bits].

    Parameters
    ----------
    mean1, mean0 : ndarray, shape (d,)
        Means.
    cov1, cov0 : ndarray, shape (d, d)
        Covariances, positive definite.

    Returns
    -------
    float
        ``0.5 [tr(S0^-1 S1) + dm^T S0^-1 dm - d + ln(det S0 / det S1)] / ln 2``.

    Notes
    -----
    The standard result for multivariate normals (e.g. Kullback 1959; Cover and Thomas 2006).
    """
    m1, m0 = np.atleast_1d(mean1).astype(float), np.atleast_1d(mean0).astype(float)
    s1, s0 = np.atleast_2d(cov1).astype(float), np.atleast_2d(cov0).astype(float)
    d = m1.size
    c0 = np.linalg.cholesky(s0)
    c1 = np.linalg.cholesky(s1)
    a = np.linalg.solve(c0, c1)
    dm = np.linalg.solve(c0, m0 - m1)
    logdet = 2.0 * (np.sum(np.log(np.diag(c0))) - np.sum(np.log(np.diag(c1))))
    nats = 0.5 * (np.sum(a**2) + dm @ dm - d + logdet)
    return float(nats / LN2)


def gaussian_kl_bits(new, old, new_weights=None):
    """KL(new || old) [bits] between Gaussian approximations of two sample sets.

    Parameters
    ----------
    new : ndarray, shape (n, d)
        Samples of the new posterior.
    old : ndarray, shape (m, d)
        Samples of the old posterior.
    new_weights : ndarray, shape (n,), optional
        Normalised weights of the new samples.

    Returns
    -------
    float
        :func:`gaussian_kl_closed_bits` of the sample means and covariances; exact for
        Gaussian posteriors, an approximation otherwise.
    """
    p = np.atleast_2d(np.asarray(new, dtype=float))
    q = np.atleast_2d(np.asarray(old, dtype=float))
    keep = (np.ptp(q, axis=0) > 0) | (np.ptp(p, axis=0) > 0)
    p, q = p[:, keep], q[:, keep]
    m1 = np.average(p, axis=0, weights=new_weights)
    s1 = np.atleast_2d(np.cov(p, rowvar=False, aweights=new_weights))
    return gaussian_kl_closed_bits(m1, s1, q.mean(axis=0), np.atleast_2d(np.cov(q, rowvar=False)))


def log2_volume(columns, weights=None):
    """log2 of the product of the standard deviations of the given parameter columns.

    Parameters
    ----------
    columns : ndarray, shape (n_samples, n_columns)
        Samples of period [d], semi-amplitude [m/s] and eccentricity of every planet.
    weights : ndarray, shape (n_samples,), optional
        Normalised sample weights (an importance-reweighted posterior).

    Returns
    -------
    float
        ``sum_j log2 std_j`` [log2 of d * m/s]; ``-inf`` if a column is constant.
    """
    x = np.asarray(columns, dtype=float)
    if x.ndim == 2 and x.shape[1] == 0:
        return 0.0  # the empty product
    x = np.atleast_2d(x)
    mean = np.average(x, axis=0, weights=weights)
    var = np.average((x - mean) ** 2, axis=0, weights=weights)
    with np.errstate(divide="ignore"):
        return float(0.5 * np.sum(np.log2(var)))
