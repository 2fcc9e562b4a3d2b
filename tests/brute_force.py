"""An independent brute-force posterior for the sampler tests: prior draws, likelihood weights.

Written from docs/priors.md alone, without the project's likelihood, Kepler solver or priors
code: Kepler's equation by plain Newton iterations, the marginal likelihood as the Gaussian
N(y; X mu, C + X Lambda X^T) on the full n x n covariance (the definition, not the Woodbury form
the project uses), and draws straight from the stated priors. Only the prior's numbers (period
range, e_max, sigma_K, offset prior, jitter knee and range) are read from the ModelSpec, as
inputs. Weighting prior draws by the likelihood is importance sampling with the prior as the
proposal, so the weighted draws are posterior draws and the mean weight is the evidence.
"""

from dataclasses import dataclass

import numpy as np


def _eccentric_anomaly(m, e):
    """Newton's method on E - e sin E = M from E = M + e sin M (converges for e < 1)."""
    m = np.remainder(m, 2.0 * np.pi)
    big_e = m + e * np.sin(m) + 0.5 * e * e * np.sin(2.0 * m)
    big_e = np.where(e > 0.8, np.pi, big_e)  # a safe start for very eccentric orbits
    for _ in range(50):
        f = big_e - e * np.sin(big_e) - m
        big_e = big_e - f / (1.0 - e * np.cos(big_e))
        if np.max(np.abs(f)) < 1e-12:
            break
    return big_e


@dataclass
class Reference:
    """Weighted prior draws: periods [d] per planet and normalised weights."""

    period: np.ndarray  # (n, n_planets)
    eccentricity: np.ndarray
    weights: np.ndarray
    log_z: float
    log_z_se: float
    ess: float

    def mass(self, lo, hi, planet=0):
        """Posterior mass of lo <= P < hi and its standard error."""
        inside = (self.period[:, planet] >= lo) & (self.period[:, planet] < hi)
        share = float(self.weights[inside].sum())
        se = float(np.sqrt(np.sum(self.weights**2 * (inside - share) ** 2)))
        return share, se


def _log_gauss_full(resid, x, var, lam):
    """ln N(resid; 0, diag(var) + X diag(lam) X^T) for a batch (b, n), by Cholesky of n x n."""
    cov = np.einsum("bik,k,bjk->bij", x, lam, x)
    idx = np.arange(resid.shape[1])
    cov[:, idx, idx] += var
    chol = np.linalg.cholesky(cov)
    z = np.linalg.solve(chol, resid[:, :, None])[:, :, 0]
    log_det = 2.0 * np.sum(np.log(np.diagonal(chol, axis1=1, axis2=2)), axis=1)
    return -0.5 * (np.sum(z * z, axis=1) + log_det + resid.shape[1] * np.log(2.0 * np.pi))


def brute_force(data, model, n_draws, rng, chunk=50_000):
    """Weighted prior draws of a one-instrument model without trend (docs/priors.md)."""
    assert len(model.instruments) == 1 and not model.trend
    t = data.time - model.t_ref
    y = data.rv
    npl = model.n_planets
    off = model.offsets[0]
    jit = model.jitters[0]
    log_pmin, log_pmax = np.log(model.period.minimum), np.log(model.period.maximum)
    periods, eccs, log_ws = [], [], []
    for lo in range(0, n_draws, chunk):
        b = min(chunk, n_draws - lo)
        log_p = np.sort(rng.uniform(log_pmin, log_pmax, (b, npl)), axis=1)
        e = rng.uniform(0.0, model.eccentricity.maximum, (b, npl))
        m0 = rng.uniform(-np.pi, np.pi, (b, npl))
        # Modified Jeffreys on [s_min, s_max]: ln(s + knee) uniform.
        s_min = np.exp(jit.log_minimum)
        u = rng.uniform(np.log(s_min + jit.knee), np.log(jit.maximum + jit.knee), b)
        s = np.maximum(np.exp(u) - jit.knee, s_min)
        cols = []
        for k in range(npl):
            m = 2.0 * np.pi * t[None, :] / np.exp(log_p[:, k, None]) + m0[:, k, None]
            ek = e[:, k, None]
            big_e = _eccentric_anomaly(m, ek)
            nu = 2.0 * np.arctan2(np.sqrt(1 + ek) * np.sin(big_e / 2),
                                  np.sqrt(1 - ek) * np.cos(big_e / 2))
            # v = K cos(nu + w) + e K cos w = A (cos nu + e) - B sin nu.
            cols += [np.cos(nu) + ek, -np.sin(nu)]
        cols.append(np.ones((b, t.size)))
        x = np.stack(cols, axis=2)
        lam = np.array([model.amplitude**2] * (2 * npl) + [off.sigma**2])
        resid = np.broadcast_to(y - off.mean, (b, t.size))
        var = data.rv_err[None, :] ** 2 + s[:, None] ** 2
        log_ws.append(_log_gauss_full(resid, x, var, lam))
        periods.append(np.exp(log_p))
        eccs.append(e)
    log_w = np.concatenate(log_ws)
    top = log_w.max()
    w = np.exp(log_w - top)
    mean = w.mean()
    return Reference(
        period=np.concatenate(periods),
        eccentricity=np.concatenate(eccs),
        weights=w / w.sum(),
        log_z=float(top + np.log(mean)),
        log_z_se=float(w.std(ddof=1) / np.sqrt(w.size) / mean),
        ess=float(w.sum() ** 2 / np.sum(w * w)),
    )
