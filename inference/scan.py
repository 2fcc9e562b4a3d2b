"""A Keplerian periodogram: the marginal likelihood of one eccentric orbit at every frequency.

Sparse velocities of an eccentric orbit often favour periods where no circular orbit or short
Fourier series fits, so a circular periodogram misses whole modes. This scan scores every grid
frequency with the exact marginal likelihood of one Keplerian orbit (semi-amplitude and omega
marginalised as in docs/priors.md) on a coarse grid of eccentricity and phase, at one trial
jitter, and averages over that grid (a quadrature of the uniform prior on e and M0).

It stays cheap because, with the jitter fixed, the noise covariance is the same for every grid
point: the fixed columns (offsets, trend, other planets held circular) are folded into one
n x n covariance C' = C + X_f Lambda_f X_f^T, whitened once by its Cholesky factor, and each
grid point leaves a two-parameter linear-Gaussian model solved in closed form. The orbit's
shape at each eccentricity is tabulated once over the mean anomaly (Kepler's equation solved
by :func:`inference.kepler.eccentric_anomaly_sincos`), so no Kepler solve runs per point.
"""

import numpy as np

from .kepler import eccentric_anomaly_sincos

__all__ = ["ECC_GRID", "keplerian_scores"]

#: Eccentricities of the scan and phases per eccentricity (finer where the velocity spike at
#: periastron is narrower).
ECC_GRID = ((0.35, 12), (0.65, 16), (0.85, 24))
_TABLE = 4096  # mean-anomaly samples of the tabulated orbit shape
_CHUNK = 256  # frequencies per block


def _shape_table(e):
    """cos(nu) + e and -sin(nu) on a uniform grid of the mean anomaly over one turn."""
    m = 2.0 * np.pi * np.arange(_TABLE) / _TABLE
    _, sin_e, cos_e = eccentric_anomaly_sincos(m, e)
    inv = 1.0 / (1.0 - e * cos_e)
    return np.stack([(cos_e - e) * inv + e, -np.sqrt(1.0 - e * e) * sin_e * inv])


#: The finer grid of the zoom on each candidate period (:func:`inference.start.find_modes`).
ZOOM_GRID = tuple((e, 48) for e in (0.05, 0.15, 0.25, 0.35, 0.45, 0.55, 0.65, 0.75, 0.85, 0.93))


def keplerian_scores(t, w, resid, fixed, fixed_prec, amp_prec, freqs, top=3, grid=ECC_GRID):
    """Keplerian marginal likelihood of each frequency, and the best grid point of each.

    Parameters
    ----------
    t : ndarray, shape (n,)
        Times from the reference epoch [d].
    w : ndarray, shape (n,)
        Inverse noise variances (measurement error and the trial jitter) [s^2/m^2].
    resid : ndarray, shape (n,)
        Velocities minus the prior-mean model [m/s].
    fixed : ndarray, shape (n, n_fixed)
        Columns whose coefficients have Gaussian priors of precisions `fixed_prec`.
    fixed_prec : ndarray, shape (n_fixed,)
    amp_prec : float
        Prior precision of A = K cos omega and B = K sin omega.
    freqs : ndarray, shape (n_freq,)
        Trial frequencies [1/d].
    top : int, optional
        Grid points returned per frequency, best first.
    grid : tuple of (float, int), optional
        Eccentricities and the number of phases at each.

    Returns
    -------
    score : ndarray, shape (n_freq,)
        ln of the mean, over the (e, M0) grid, of the marginal likelihood.
    best : ndarray, shape (n_freq, top, 2)
        Eccentricity and mean anomaly at ``t = 0`` of the best `top` grid points.
    best_ll : ndarray, shape (n_freq, top)
        Their marginal likelihoods [ln units].
    """
    n = t.size
    cov = np.diag(1.0 / w) + (fixed / fixed_prec) @ fixed.T
    chol = np.linalg.cholesky(cov)
    white = np.linalg.inv(chol).T  # row vector x -> x @ white is L^-1 x
    y = resid @ white
    yy = float(y @ y)
    log_det = 2.0 * float(np.sum(np.log(np.diag(chol))))
    const = -0.5 * (yy + log_det - 2.0 * np.log(amp_prec) + n * np.log(2.0 * np.pi))
    tables = [(e, n_phase, _shape_table(e)) for e, n_phase in grid]
    n_grid = sum(n_phase for _, n_phase in grid)
    score = np.empty(freqs.size)
    best = np.empty((freqs.size, top, 2))
    best_ll = np.empty((freqs.size, top))
    for lo in range(0, freqs.size, _CHUNK):
        f = freqs[lo : lo + _CHUNK]
        arg = f[:, None] * t  # turns
        lls, where = [], []
        for e, n_phase, table in tables:
            phase = np.arange(n_phase) / n_phase  # turns
            idx = np.rint((arg[:, None, :] + phase[None, :, None]) * _TABLE).astype(np.int64)
            idx %= _TABLE
            xa = table[0][idx] @ white  # (n_f, n_phase, n)
            xb = table[1][idx] @ white
            a = amp_prec + np.einsum("fpn,fpn->fp", xa, xa)
            d = amp_prec + np.einsum("fpn,fpn->fp", xb, xb)
            c = np.einsum("fpn,fpn->fp", xa, xb)
            b1 = xa @ y
            b2 = xb @ y
            det = a * d - c * c
            quad = (d * b1 * b1 - 2.0 * c * b1 * b2 + a * b2 * b2) / det
            lls.append(const + 0.5 * (quad - np.log(det)))
            where.append(np.column_stack([np.full(n_phase, e), 2.0 * np.pi * phase]))
        ll = np.concatenate(lls, axis=1)  # (n_f, n_grid)
        peak = ll.max(axis=1)
        score[lo : lo + f.size] = peak + np.log(np.exp(ll - peak[:, None]).sum(axis=1) / n_grid)
        order = np.argsort(ll, axis=1)[:, ::-1][:, :top]
        best[lo : lo + f.size] = np.concatenate(where)[order]
        best_ll[lo : lo + f.size] = np.take_along_axis(ll, order, axis=1)
    return score, best, best_ll
