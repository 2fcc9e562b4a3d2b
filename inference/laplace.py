"""Laplace refinement of starting components: a few batched Newton steps on the log posterior.

A scan seed knows its period to a fraction of a peak width but its eccentricity, phase and
jitter only roughly. Before the importance rounds, every seed climbs to the nearest local
maximum of ln p(y, theta) by damped Newton steps, with gradient and Hessian from central
finite differences, all seeds at once. Where the Hessian H there is negative definite the
seed's scale becomes -H^-1 (the Laplace approximation, e.g. MacKay 2003, *Information Theory,
Inference, and Learning Algorithms*, ch. 27), widened by `inflate`; elsewhere it keeps its
scale. The refinement only moves proposals: the importance weights stay exact either way.
"""

import numpy as np

from .likelihood import log_joint

__all__ = ["refine_seeds"]


def _offsets(d):
    """Return the unit steps of a central-difference gradient and Hessian in d dimensions."""
    eye = np.eye(d)
    steps = [np.zeros(d)]
    steps += [s * eye[i] for i in range(d) for s in (1.0, -1.0)]
    pairs = [(i, j) for i in range(d) for j in range(i + 1, d)]
    for i, j in pairs:
        steps += [eye[i] + eye[j], eye[i] - eye[j], -eye[i] + eye[j], -eye[i] - eye[j]]
    return np.array(steps), pairs


def _derivatives(prep, x, h, steps, pairs):
    """Log posterior, gradient and Hessian at each row of x (central differences, step h)."""
    s, d = x.shape
    pts = x[:, None, :] + steps[None, :, :] * h[:, None, :]
    f = log_joint(pts.reshape(-1, d), prep).reshape(s, steps.shape[0])
    # A step outside the prior support gives -inf: no finite derivatives for that seed.
    f[~np.isfinite(f)] = np.nan
    f0 = f[:, 0]
    plus, minus = f[:, 1 : 2 * d + 1 : 2], f[:, 2 : 2 * d + 2 : 2]
    grad = (plus - minus) / (2.0 * h)
    hess = np.empty((s, d, d))
    idx = np.arange(d)
    hess[:, idx, idx] = (plus - 2.0 * f0[:, None] + minus) / h**2
    base = 2 * d + 1
    for m, (i, j) in enumerate(pairs):
        pp, pm, mp, mm = (f[:, base + 4 * m + q] for q in range(4))
        hess[:, i, j] = hess[:, j, i] = (pp - pm - mp + mm) / (4.0 * h[:, i] * h[:, j])
    return f0, grad, hess


def refine_seeds(prep, means, covs, iterations=25, inflate=1.5):
    """Move seeds to nearby posterior maxima and give them Laplace scales.

    Parameters
    ----------
    prep : Prepared
    means : ndarray, shape (n_seeds, n_sampled)
    covs : ndarray, shape (n_seeds, n_sampled, n_sampled)
        Starting scale matrices; their diagonals set the difference steps.
    iterations : int, optional
        Newton steps.
    inflate : float, optional
        Factor on the Laplace standard deviations (a proposal should be wider than the
        target).

    Returns
    -------
    means, covs : ndarray
        Refined seeds (a seed whose density is not finite is returned unchanged).
    """
    means = np.array(means, dtype=float)
    covs = np.array(covs, dtype=float)
    s, d = means.shape
    steps, pairs = _offsets(d)
    h = 0.05 * np.sqrt(np.diagonal(covs, axis1=1, axis2=2))
    x = means.copy()
    best = log_joint(x, prep)
    active = np.isfinite(best)
    still = np.zeros(s, dtype=int)
    for _ in range(iterations):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        f0, grad, hess = _derivatives(prep, x[idx], h[idx], steps, pairs)
        ok = np.isfinite(f0) & np.all(np.isfinite(grad), axis=1)
        ok &= np.all(np.isfinite(hess.reshape(idx.size, -1)), axis=1)
        step = np.zeros((idx.size, d))
        for j in np.flatnonzero(ok):
            # Saddle-free Newton (Dauphin et al. 2014, NeurIPS): |eigenvalues| of -H, so a
            # step always climbs, and the curvature sets the next difference steps.
            lam, vec = np.linalg.eigh(-hess[j])
            lam = np.maximum(np.abs(lam), 1e-12 * max(np.abs(lam).max(), 1e-300))
            step[j] = vec @ ((vec.T @ grad[j]) / lam)
            sd = np.sqrt(np.diag((vec / lam) @ vec.T))
            h[idx[j]] = np.clip(0.1 * sd, 1e-9, h[idx[j]])
        # Damped: keep the best of a full, half, quarter and tenth step, if it improves.
        gain = np.zeros(idx.size)
        for frac in (1.0, 0.5, 0.25, 0.1):
            trial = x[idx] + frac * step
            f = log_joint(trial, prep)
            better = np.isfinite(f) & (f > best[idx])
            gain[better] += f[better] - best[idx][better]
            x[idx[better]], best[idx[better]] = trial[better], f[better]
            step[better] = 0.0
        # No gain: the difference steps may be too wide for a sharp peak, so shrink them; a
        # seed without gain six times running has arrived.
        stalled = gain < 1e-3
        h[idx[stalled]] *= 0.3
        still[idx] = np.where(stalled, still[idx] + 1, 0)
        active[idx[(still[idx] >= 6) | ~np.isfinite(best[idx])]] = False
    _, _, hess = _derivatives(prep, x, h, steps, pairs)
    out = covs.copy()
    for i in range(s):
        if not np.all(np.isfinite(hess[i])):
            continue
        try:
            np.linalg.cholesky(-hess[i])
        except np.linalg.LinAlgError:
            continue
        lap = np.linalg.inv(-hess[i]) * inflate**2
        # Never wider than the starting scale (a flat direction would send draws anywhere).
        sd0 = np.sqrt(np.diag(covs[i]))
        sd = np.sqrt(np.diag(lap))
        shrink = np.minimum(1.0, sd0 / sd)
        out[i] = lap * np.outer(shrink, shrink)
    return x, out
