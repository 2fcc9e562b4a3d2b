"""Expected information, in bits, of one visit, a set of visits, and one more visit given a set.

All three are mutual informations between the orbit parameters and future velocities, with the
posterior represented by its equal-weight samples (the "sample posterior"). With conditionally
independent Gaussian noise, I(S) = H(d_S) - E_theta H(d_S | theta), and the second term is
closed form. See ``docs/information.md`` for the estimators and their error bars.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import logsumexp

from planner.information.entropy import LN2, InformationError, mixture_entropy_bits

__all__ = [
    "InformationError",
    "JointEstimate",
    "check_predictions",
    "conditional_bits",
    "joint_bits",
    "mean_log_shifted",
    "noise_entropy_bits",
    "one_visit_bits",
    "outcome_log_likelihoods",
    "simulate_outcomes",
]

_HALF_LOG_2PIE = 0.5 * math.log(2.0 * math.pi * math.e)
#: Largest total weight of the samples dropped from a reweighted mixture.
_PRUNE_MASS = 1e-7
#: Nodes of the spline for the mean log noise variance over jitter samples.
_SPLINE_NODES = 96


@dataclass(frozen=True)
class JointEstimate:
    """Monte Carlo estimate of the joint information of a set of visits.

    Attributes
    ----------
    bits : float
        Estimated I(S) [bits].
    stderr : float
        One-sigma Monte Carlo standard error of `bits` [bits].
    n_outcomes : int
        Number of simulated outcomes used.
    """

    bits: float
    stderr: float
    n_outcomes: int


def check_predictions(predicted, sigma, what):
    """Return (predicted, sigma) as arrays after checking them; one clear error otherwise.

    Parameters
    ----------
    predicted : array_like, shape (n_samples, n_times)
        Predicted velocities [m/s].
    sigma : array_like, broadcastable to `predicted`
        Total noise standard deviations [m/s], finite and positive.
    what : str
        Name of `predicted` in the error sentence.

    Returns
    -------
    v, s : ndarray
    """
    v = np.asarray(predicted, dtype=float)
    if v.ndim != 2:
        raise InformationError(
            f"{what} has shape {v.shape}; pass a 2-D array (n_samples, n_times) of velocities."
        )
    s = np.asarray(sigma, dtype=float)
    try:
        np.broadcast_shapes(s.shape, v.shape)
    except ValueError:
        raise InformationError(
            f"the sigma for {what} has shape {s.shape}, which does not broadcast to {v.shape}; "
            "pass one noise value per sample and time, or a broadcastable shape."
        ) from None
    if not np.all(np.isfinite(s)) or np.any(s <= 0):
        raise InformationError(
            f"the sigma for {what} must be finite and positive [m/s]; check the exposure noise "
            "and jitter."
        )
    return v, s


def mean_log_shifted(base, shift, weights=None):
    """Return sum_i w_i log(base_i + x) for every x in `shift`, by a spline when that is cheaper.

    Parameters
    ----------
    base : ndarray, shape (n_samples,)
        Per-sample variances b_i >= 0 (e.g. jitter squared) [m^2/s^2].
    shift : ndarray, any shape
        Common variances x > 0 (e.g. measurement noise squared) [m^2/s^2].
    weights : ndarray, shape (n_samples,), optional
        Normalised weights; default equal.

    Returns
    -------
    ndarray, shape of `shift`
        The weighted mean log [log of m^2/s^2].

    Notes
    -----
    The function is smooth in log x; a cubic spline on 96 geometric nodes over the range of
    `shift` is exact to about 1e-10 (checked in ``tests/test_curves.py``).
    """
    x = np.asarray(shift, dtype=float)
    b = np.asarray(base, dtype=float)
    w = np.full(b.size, 1.0 / b.size) if weights is None else np.asarray(weights, dtype=float)
    if x.size == 0:
        return np.zeros(x.shape)
    lo, hi = float(x.min()), float(x.max())
    if np.ptp(b) == 0:
        return np.log(b[0] + x)
    if x.size <= 4 * _SPLINE_NODES or hi <= lo * (1 + 1e-12):
        return (w @ np.log(b[:, None] + x.reshape(1, -1))).reshape(x.shape)
    nodes = np.geomspace(lo, hi, _SPLINE_NODES)
    spline = CubicSpline(np.log(nodes), w @ np.log(b[:, None] + nodes[None, :]))
    return spline(np.log(x))


def noise_entropy_bits(sigma, shape, weights=None):
    """Mean entropy of the Gaussian noise, sum_i w_i 0.5 log2(2 pi e sigma_i^2), per column.

    Parameters
    ----------
    sigma : ndarray, broadcastable to `shape`
        Total noise standard deviation [m/s].
    shape : tuple of int
        (n_samples, n_cols).
    weights : ndarray, shape (n_samples,), optional
        Normalised sample weights; default equal.

    Returns
    -------
    h : ndarray, shape (n_cols,)
        Conditional entropy of one velocity given the orbit [bits].
    """
    var = np.asarray(sigma, dtype=float) ** 2
    var = var.reshape((1,) * (2 - var.ndim) + var.shape) if var.ndim < 2 else var
    n_s, n_c = shape
    w = None if weights is None else np.asarray(weights, dtype=float)
    if var.shape[0] == 1:  # the same for every sample
        mean = np.log(var[0])
    elif var.shape[1] == 1:  # the same for every column
        mean = np.full(1, np.mean(np.log(var[:, 0])) if w is None else w @ np.log(var[:, 0]))
    else:
        col = var.min(axis=0)
        rest = var - col[None, :]
        if np.allclose(rest, rest[:, :1], rtol=0.0, atol=1e-9 * float(var.max())):
            mean = mean_log_shifted(rest[:, 0], col, w)  # jitter^2 + sigma_t^2
        else:
            mean = np.mean(np.log(var), axis=0) if w is None else w @ np.log(var)
    return np.broadcast_to((mean + 2 * _HALF_LOG_2PIE) / (2 * LN2), (n_c,)).copy()


def one_visit_bits(predicted, sigma, weights=None):
    """Return the expected information gain of one velocity at each time.

    Parameters
    ----------
    predicted : ndarray, shape (n_samples, n_times)
        Predicted velocity of every posterior sample at every time [m/s].
    sigma : array_like, broadcastable to (n_samples, n_times)
        Total noise standard deviation [m/s]: measurement noise and jitter in quadrature.
    weights : array_like, shape (n_samples,), optional
        Sample weights (e.g. after reweighting); default equal.

    Returns
    -------
    bits : ndarray, shape (n_times,)
        EIG(t) = H[sum_i w_i N(v_i(t), sigma_i^2)] - sum_i w_i 0.5 log2(2 pi e sigma_i^2) [bits],
        never negative (rounding below zero is set to zero).

    Notes
    -----
    Lindley (1956) expected information; maximum entropy sampling (Shewry and Wynn 1987). The
    mixture entropy is deterministic (``planner.information.entropy``), within 1e-3 bit of
    quadrature.
    """
    v, s = check_predictions(predicted, sigma, "predicted")
    w = None
    if weights is not None:
        w = np.asarray(weights, dtype=float)
        if w.shape != (v.shape[0],) or np.any(w < 0) or not np.isfinite(w).all() or w.sum() <= 0:
            raise InformationError(
                f"weights must be {v.shape[0]} finite non-negative values with a positive sum."
            )
        w = w / w.sum()
    h_mix = mixture_entropy_bits(v, s * s, weights=None if w is None else w[:, None])[0]
    return np.maximum(h_mix - noise_entropy_bits(s, v.shape, w), 0.0)


def simulate_outcomes(v, s, rng, n_outcomes, return_picks=False):
    """Simulate outcomes of a set of visits from the sample-posterior predictive.

    Balanced draws: every sample is used equally often (up to one) across the outcomes.

    Parameters
    ----------
    v : ndarray, shape (n_samples, n_visits)
        Predicted velocities [m/s].
    s : ndarray, broadcastable to `v`
        Total noise standard deviations [m/s].
    rng : numpy.random.Generator
    n_outcomes : int

    return_picks : bool, optional
        Also return the sample each outcome was drawn from.

    Returns
    -------
    y : ndarray, shape (n_outcomes, n_visits)
        Simulated velocities [m/s].
    pick : ndarray of int, shape (n_outcomes,)
        Only if `return_picks`: the sample behind each outcome.
    """
    n_s = v.shape[0]
    blocks = -(-n_outcomes // n_s)
    pick = np.concatenate([rng.permutation(n_s) for _ in range(blocks)])[:n_outcomes]
    s_full = np.broadcast_to(s, v.shape)
    y = v[pick] + s_full[pick] * rng.standard_normal((n_outcomes, v.shape[1]))
    return (y, pick) if return_picks else y


def outcome_log_likelihoods(y, v, s):
    """Return log prod_v N(y_mv; v_iv, s_iv^2) for outcomes y (M, V), shape (M, n_s), nats.

    Parameters
    ----------
    y : ndarray, shape (n_outcomes, n_visits)
        Outcomes [m/s].
    v : ndarray, shape (n_samples, n_visits)
        Predicted velocities [m/s].
    s : ndarray, broadcastable to `v`
        Total noise standard deviations [m/s].

    Returns
    -------
    log_l : ndarray, shape (n_outcomes, n_samples)
        Log-likelihood of each outcome under each sample [nats].
    """
    inv = 1.0 / np.broadcast_to(s, v.shape) ** 2
    centre = v.mean(axis=0)
    vc, yc = v - centre, y - centre
    # One matrix product for the whole quadratic form and the normalisation:
    # -0.5 sum_v (y - v)^2 inv - 0.5 sum_v log(2 pi / inv) = [y^2, y, 1] . [-inv/2, v inv, c].
    left = np.hstack([yc * yc, yc, np.ones((y.shape[0], 1))])
    const = -0.5 * np.sum(vc * vc * inv + np.log(2.0 * math.pi / inv), axis=1)
    right = np.hstack([-0.5 * inv, vc * inv, const[:, None]])
    return left @ right.T


def _logsumexp_rows(a):
    """Row-wise log-sum-exp; the exponentials in float32 (relative error 1e-7), sums in float64."""
    top = a.max(axis=1)
    a -= top[:, None]
    e = a.astype(np.float32)
    np.exp(e, out=e)
    return top + np.log(e.sum(axis=1, dtype=np.float64))


def joint_bits(predicted, sigma, rng, n_outcomes=512):
    """Joint expected information of a set of visits of one star.

    Parameters
    ----------
    predicted : ndarray, shape (n_samples, n_visits)
        Predicted velocities [m/s] of every sample at the visits' times.
    sigma : array_like, broadcastable to (n_samples, n_visits)
        Total noise standard deviation [m/s].
    rng : numpy.random.Generator
        Source of the simulated outcomes.
    n_outcomes : int, optional
        Simulated outcomes; the standard error falls as 1 / sqrt(n_outcomes).

    Returns
    -------
    JointEstimate
        I(S) = H(d_S) - E_theta H(d_S | theta) [bits] and its standard error.

    Notes
    -----
    H(d_S) = -E log p(d_S) with p the exact sample-posterior mixture density (all components),
    so the average over outcomes drawn from that mixture is unbiased: no nested-Monte-Carlo
    bias. A control variate, -log q with q the moment-matched Gaussian whose expectation is
    closed form, removes most of the variance (coefficient fitted by least squares, bias
    O(1/n_outcomes)). E_theta H(d_S | theta) is closed form. Lindley (1956).
    """
    v, s = check_predictions(predicted, sigma, "predicted")
    n_s, n_v = v.shape
    if n_v == 0:
        return JointEstimate(0.0, 0.0, 0)
    if int(n_outcomes) < 2:
        raise InformationError("n_outcomes must be at least 2 to give an error bar.")
    y = simulate_outcomes(v, s, rng, int(n_outcomes))
    log_p = _logsumexp_rows(outcome_log_likelihoods(y, v, s)) - math.log(n_s)
    h_samples = -log_p
    # Moment-matched Gaussian control variate.
    var_mean = np.mean(np.broadcast_to(s, v.shape) ** 2, axis=0)
    cov = np.atleast_2d(np.cov(v, rowvar=False, bias=True)) + np.diag(var_mean)
    sign, logdet = np.linalg.slogdet(cov)
    if sign > 0:
        d = y - v.mean(axis=0)
        g = 0.5 * (n_v * math.log(2 * math.pi) + logdet) + 0.5 * np.einsum(
            "mi,mi->m", d, np.linalg.solve(cov, d.T).T)
        g_mean = 0.5 * (n_v * math.log(2 * math.pi * math.e) + logdet)
        gc = g - g.mean()
        denom = float(gc @ gc)
        beta = float((h_samples - h_samples.mean()) @ gc) / denom if denom > 0 else 0.0
        est = h_samples - beta * (g - g_mean)
    else:
        est = h_samples
    noise = float(np.sum(noise_entropy_bits(s, v.shape))) * LN2
    bits = (float(est.mean()) - noise) / LN2
    stderr = float(est.std(ddof=1)) / math.sqrt(est.size) / LN2
    return JointEstimate(bits, stderr, int(est.size))


def conditional_bits(predicted_set, sigma_set, predicted_new, sigma_new, rng, n_outcomes=64,
                     return_stderr=False):
    """Return the expected gain of one more visit at each candidate time, given a planned set.

    Parameters
    ----------
    predicted_set : ndarray, shape (n_samples, n_visits)
        Predicted velocities [m/s] at the planned visits (outcomes not yet known).
    sigma_set : array_like, broadcastable to (n_samples, n_visits)
        Total noise standard deviation of the planned visits [m/s].
    predicted_new : ndarray, shape (n_samples, n_times)
        Predicted velocities [m/s] at the candidate times.
    sigma_new : array_like, broadcastable to (n_samples, n_times)
        Total noise standard deviation of the candidates [m/s].
    rng : numpy.random.Generator
        Source of the simulated outcomes of the set.
    n_outcomes : int, optional
        Simulated outcomes of the set (shared by every candidate time).
    return_stderr : bool, optional
        Also return the Monte Carlo standard error per time.

    Returns
    -------
    bits : ndarray, shape (n_times,)
        I(t | S) = E_{d_S}[EIG_w(t)] [bits], the one-visit gain under the posterior reweighted
        by each simulated outcome of S, averaged over outcomes; equal to I(S + t) - I(S).
    stderr : ndarray, shape (n_times,)
        Only if `return_stderr`: standard error of `bits`.
    """
    vs, ss = check_predictions(predicted_set, sigma_set, "predicted_set")
    vn, sn = check_predictions(predicted_new, sigma_new, "predicted_new")
    if vs.shape[0] != vn.shape[0]:
        raise InformationError(
            f"predicted_set has {vs.shape[0]} samples but predicted_new has {vn.shape[0]}; "
            "predict both from the same posterior."
        )
    if vs.shape[1] == 0:
        bits = one_visit_bits(vn, sn)
        return (bits, np.zeros_like(bits)) if return_stderr else bits
    y = simulate_outcomes(vs, ss, rng, int(n_outcomes))
    log_w = outcome_log_likelihoods(y, vs, ss)
    log_w -= logsumexp(log_w, axis=1, keepdims=True)
    gains = np.empty((y.shape[0], vn.shape[1]))
    var_n = sn * sn
    full_var = np.ndim(var_n) == 2 and var_n.shape[0] > 1
    for m in range(y.shape[0]):
        # Drop the lightest samples whose weights add up to at most _PRUNE_MASS.
        w_all = np.exp(log_w[m])
        order = np.argsort(w_all)
        light = np.searchsorted(np.cumsum(w_all[order]), _PRUNE_MASS, side="right")
        keep = np.sort(order[light:])
        w = w_all[keep] / w_all[keep].sum()
        var_k = var_n[keep] if full_var else var_n
        sig_k = sn[keep] if full_var else sn
        h = mixture_entropy_bits(vn[keep], var_k, weights=w[:, None])[0]
        gains[m] = h - noise_entropy_bits(sig_k, (keep.size, vn.shape[1]), w)
    bits = np.maximum(gains.mean(axis=0), 0.0)
    if return_stderr:
        return bits, gains.std(axis=0, ddof=1) / math.sqrt(gains.shape[0])
    return bits
