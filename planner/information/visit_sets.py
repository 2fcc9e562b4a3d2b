"""Exact expected information of many sets of one star's visits, on shared outcomes.

The solver's surrogate (:mod:`planner.allocation.surrogate`) values every visit pattern of a star
by the
exact joint information of its representative visits. :func:`pattern_bits` runs the estimator
of :func:`planner.information.gain.joint_bits` on all those subsets at once: one set of simulated
outcomes for the star (common random numbers, so differences between subsets carry little
Monte Carlo noise), each subset's log-likelihoods its parent's plus one visit's.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from planner.information.entropy import LN2
from planner.information.gain import simulate_outcomes

__all__ = ["enumerate_visit_sets", "pattern_bits"]



def enumerate_visit_sets(requires: Sequence[int], top: int):
    """Column bitmasks of every subset of at most ``top`` columns closed under ``requires``.

    Column ``j`` may be in a subset only with column ``requires[j]`` (or freely when it is -1);
    required columns come first. Yields ``(mask, columns)`` in depth-first order.
    """
    n = len(requires)
    stack = [(0, -1, ())]
    while stack:
        mask, last, cols = stack.pop()
        yield mask, cols
        if len(cols) >= top:
            continue
        for j in range(n - 1, last, -1):
            r = requires[j]
            if r < 0 or mask >> r & 1:
                stack.append((mask | 1 << j, j, cols + (j,)))


def pattern_bits(predicted, sigma, requires, top, rng, n_outcomes=256):
    """Exact expected information of many subsets of one star's visits, on shared outcomes.

    Parameters
    ----------
    predicted : ndarray, shape (n_samples, n_visits)
        Predicted velocities of the equal-weight posterior samples at the visits [m/s].
    sigma : ndarray, broadcastable to (n_samples, n_visits)
        Total noise standard deviation [m/s].
    requires : sequence of int, length n_visits
        Visit that must be in a subset for visit ``j`` to be in it (-1: none); earlier index.
    top : int
        Largest subset size.
    rng : numpy.random.Generator
        Source of the simulated outcomes (one set for every subset).
    n_outcomes : int
        Simulated outcomes.

    Returns
    -------
    dict of int to (float, float)
        Visit bitmask (bit ``j`` for visit ``j``) to ``(bits, stderr)``; the empty set is 0.

    Notes
    -----
    ``I(S) = H(d_S) - E_theta H(d_S | theta)`` (Lindley 1956): the second term is closed form,
    the first the mean of ``-log p(d_S)`` over outcomes drawn from the sample-posterior mixture,
    with ``p`` its exact density (no nested-Monte-Carlo bias) and the moment-matched Gaussian
    as a control variate: the estimator of :func:`planner.information.gain.joint_bits`, which draws
    the same outcomes from the same generator state. Each subset's log-likelihoods are its
    parent's plus one visit's, and all subsets share the outcomes (common random numbers), so a
    subset costs one ``(n_outcomes, n_samples)`` sum and one log-sum-exp.
    """
    v = np.asarray(predicted, dtype=float)
    s = np.broadcast_to(np.asarray(sigma, dtype=float), v.shape)
    n_s, n_v = v.shape
    m = int(n_outcomes)
    y, pick = simulate_outcomes(v, s, rng, m, return_picks=True)
    # Per visit: log N(y_mj; v_ij, s_ij^2) without the common 0.5 log(2 pi), shape (m, n_s),
    # in float32 like joint_bits' exponentials (the sums that matter stay within ~1e-5).
    ell = [(-0.5 * ((y[:, j, None] - v[None, :, j]) / s[None, :, j]) ** 2
            - np.log(s[None, :, j])).astype(np.float32) for j in range(n_v)]
    # Conditional entropy of each visit given the orbit, in the same units: exact.
    noise = 0.5 + np.mean(np.log(s), axis=0)
    masks, members, entropies = [], [], []
    # _subsets walks depth first, so the log-likelihoods of a subset's parent are still in
    # the buffer one level up; preallocated buffers avoid an allocation per subset.
    logs = np.zeros((min(top, n_v) + 1, m, n_s), dtype=np.float32)
    buf = np.empty((m, n_s), dtype=np.float32)
    rows = np.arange(m)
    log_n = math.log(n_s)
    for mask, cols in enumerate_visit_sets(requires, top):
        if mask == 0:
            continue
        total = logs[len(cols)]
        np.add(logs[len(cols) - 1], ell[cols[-1]], out=total)
        # Shift by each outcome's own sample (a component, so the sum is >= 1); rows where
        # another sample is so much likelier that the float32 exponential overflows are redone
        # with the row maximum.
        peak = total[rows, pick].astype(np.float64)
        np.subtract(total, peak[:, None].astype(np.float32), out=buf)
        with np.errstate(over="ignore"):
            np.exp(buf, out=buf)
        mass = buf.sum(axis=1, dtype=np.float64)
        bad = ~np.isfinite(mass)
        if bad.any():
            peak[bad] = total[bad].max(axis=1)
            mass[bad] = np.exp(total[bad] - peak[bad, None].astype(np.float32)).sum(
                axis=1, dtype=np.float64)
        masks.append(mask)
        members.append(cols)
        entropies.append(log_n - peak - np.log(mass))
    out = {0: (0.0, 0.0)}
    if not masks:
        return out
    est = _gaussian_control(np.array(entropies), y, v, s, members)
    for mask, cols, e in zip(masks, members, est, strict=True):
        bits = (float(e.mean()) - float(noise[list(cols)].sum())) / LN2
        out[mask] = (bits, float(e.std(ddof=1)) / math.sqrt(m) / LN2)
    return out


def _gaussian_control(h, y, v, s, members):
    """Entropy samples ``h = -log p(y)`` corrected by the moment-matched Gaussian, per subset.

    ``g = -log q(y_S)`` (without the 0.5 log 2 pi per visit, as ``h``) has the closed-form mean
    ``0.5 (log det C_S + k)``; each subset's coefficient is fitted by least squares. Subsets of
    one size are done together. ``h`` has shape (n_subsets, n_outcomes).
    """
    mean = v.mean(axis=0)
    cov = (np.cov(v, rowvar=False, bias=True).reshape(v.shape[1], v.shape[1])
           + np.diag(np.mean(s**2, axis=0)))
    out = h.copy()
    sizes = np.array([len(c) for c in members])
    for k in np.unique(sizes):
        rows = np.flatnonzero(sizes == k)
        idx = np.array([members[r] for r in rows], dtype=np.int64)  # (n, k)
        c = cov[idx[:, :, None], idx[:, None, :]]  # (n, k, k)
        sign, logdet = np.linalg.slogdet(c)
        d = y[:, idx].transpose(1, 0, 2) - mean[idx][:, None, :]  # (n, m, k)
        quad = np.einsum("nmi,nmi->nm", d, np.linalg.solve(c, d.transpose(0, 2, 1))
                         .transpose(0, 2, 1))
        g = 0.5 * (logdet[:, None] + quad)
        gc = g - g.mean(axis=1, keepdims=True)
        hc = h[rows] - h[rows].mean(axis=1, keepdims=True)
        denom = np.einsum("nm,nm->n", gc, gc)
        beta = np.where((sign > 0) & (denom > 0),
                        np.einsum("nm,nm->n", hc, gc) / np.where(denom > 0, denom, 1.0), 0.0)
        out[rows] -= beta[:, None] * (g - 0.5 * (logdet[:, None] + k))
    return out
