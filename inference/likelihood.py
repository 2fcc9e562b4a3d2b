"""Marginal likelihood of RV data over the linear parameters, vectorised over a batch.

For nonlinear parameters theta (periods, sqrt(e)-phase pairs, log jitters) the velocities are
linear in beta = (A_k, B_k, offsets, trend): y = X(theta) beta + noise, noise ~ N(0, C(theta)),
C diagonal (measurement error and jitter in quadrature). With a Gaussian prior
beta ~ N(mu, Lambda) the marginal is y ~ N(X mu, C + X Lambda X^T), evaluated through the
Woodbury identity with F = Lambda^-1 + X^T C^-1 X (a small n_lin x n_lin matrix per batch row).
"""

import math
from dataclasses import dataclass

import numpy as np

from .kepler import eccentric_anomaly_sincos

__all__ = [
    "LinearConditional",
    "Prepared",
    "linear_conditional",
    "log_joint",
    "log_marginal",
    "log_marginal_design",
    "log_prior",
    "prepare",
]

_LOG_2PI = float(np.log(2.0 * np.pi))


@dataclass(frozen=True, eq=False)
class Prepared:
    """Arrays of one (data, model) pair, computed once before sampling.

    Attributes
    ----------
    t : ndarray, shape (n,)
        Times minus ``t_ref`` [d].
    resid : ndarray, shape (n,)
        Velocities minus the prior-mean model X mu [m/s] (mu is zero for A, B).
    var : ndarray, shape (n,)
        Measurement variances [m^2/s^2].
    inst : ndarray of int, shape (n,)
        Instrument index of each row.
    fixed : ndarray, shape (n, n_fixed)
        Offset indicator columns, then the trend column (t - t_ref) if enabled.
    prior_mean : ndarray, shape (n_lin,)
        Prior means of the linear parameters.
    prior_prec : ndarray, shape (n_lin,)
        Prior precisions (1 / sigma^2) of the linear parameters.
    n_planets : int
    log_p : (float, float)
        ln of the period range [ln d].
    e_max : float
    ecc_beta : (float, float) or None
        Beta shape parameters, or None for the uniform eccentricity prior.
    jit_knee : ndarray, shape (n_inst,)
        Jitter prior knees [m/s].
    jit_log_range : ndarray, shape (n_inst, 2)
        Sampled range of ln jitter.
    log_period_density : float
        Log density of the ordered log-uniform period prior inside its support.
    log_prior_const : float
        Normalising constant of the whole prior (added by :func:`log_prior`).
    """

    t: np.ndarray
    resid: np.ndarray
    var: np.ndarray
    inst: np.ndarray
    fixed: np.ndarray
    prior_mean: np.ndarray
    prior_prec: np.ndarray
    n_planets: int
    log_p: tuple
    e_max: float
    ecc_beta: tuple | None
    jit_knee: np.ndarray
    jit_log_range: np.ndarray
    log_period_density: float
    log_prior_const: float


def prepare(data, model):
    """Precompute the arrays the likelihood needs.

    Parameters
    ----------
    data : RVData
    model : ModelSpec

    Returns
    -------
    Prepared
    """
    t = data.time - model.t_ref
    lookup = {name: k for k, name in enumerate(model.instruments)}
    inst = np.array([lookup[name] for name in data.instrument], dtype=np.intp)
    n_inst = len(model.instruments)
    cols = [(inst == k).astype(float) for k in range(n_inst)]
    mean = [0.0, 0.0] * model.n_planets + [p.mean for p in model.offsets]
    sigma = [model.amplitude, model.amplitude] * model.n_planets + [p.sigma for p in model.offsets]
    if model.trend:
        cols.append(t.copy())
        mean.append(model.trend_prior.mean)
        sigma.append(model.trend_prior.sigma)
    fixed = np.stack(cols, axis=1)
    mean = np.array(mean)
    resid = data.rv - fixed @ mean[2 * model.n_planets :]
    ecc = model.eccentricity
    npl = model.n_planets
    log_p = (float(np.log(model.period.minimum)), float(np.log(model.period.maximum)))
    # Ordered periods: n! times the density of n independent log-uniform periods.
    log_period_density = float(math.lgamma(npl + 1) - npl * np.log(log_p[1] - log_p[0]))
    if ecc.kind == "beta":
        from scipy.special import betainc, betaln  # imported here: scipy.special is slow

        log_ecc = -betaln(ecc.a, ecc.b) - np.log(betainc(ecc.a, ecc.b, ecc.maximum))
    else:
        log_ecc = -np.log(ecc.maximum)
    # (x, y) = sqrt(e) (cos M0, sin M0): dx dy = de dM0 / 2, so p(x, y) = p(e) / pi.
    log_disk = npl * (log_ecc - np.log(np.pi))
    jit_lo = np.array([np.exp(j.log_minimum) for j in model.jitters])
    jit_hi = np.array([j.maximum for j in model.jitters])
    knee = np.array([j.knee for j in model.jitters])
    log_jit = -np.sum(np.log(np.log(jit_hi + knee) - np.log(jit_lo + knee)))
    return Prepared(
        t=t,
        resid=resid,
        var=data.rv_err**2,
        inst=inst,
        fixed=fixed,
        prior_mean=mean,
        prior_prec=1.0 / np.array(sigma) ** 2,
        n_planets=npl,
        log_p=log_p,
        e_max=float(ecc.maximum),
        ecc_beta=(ecc.a, ecc.b) if ecc.kind == "beta" else None,
        jit_knee=knee,
        jit_log_range=np.column_stack([np.log(jit_lo), np.log(jit_hi)]),
        log_period_density=log_period_density,
        log_prior_const=float(log_period_density + log_disk + log_jit),
    )


def _unpack(theta, n_planets):
    """Split (b, d) sampled vectors into periods, eccentricities, phases, log jitters."""
    idx = 3 * np.arange(n_planets)
    log_p = theta[:, idx]
    x, y = theta[:, idx + 1], theta[:, idx + 2]
    return np.exp(log_p), x * x + y * y, np.arctan2(y, x), theta[:, 3 * n_planets :]


def log_prior(theta, prep):
    """Normalised log prior density of sampled vectors.

    Parameters
    ----------
    theta : ndarray, shape (n_batch, n_sampled)
        Sampled parameters in ``ModelSpec.sampled_names()`` order.
    prep : Prepared

    Returns
    -------
    lp : ndarray, shape (n_batch,)
        Log prior density in the sampled coordinates; ``-inf`` outside the support
        (period range and order, e <= e_max, jitter range).
    """
    theta = np.atleast_2d(theta)
    npl = prep.n_planets
    idx = 3 * np.arange(npl)
    log_p = theta[:, idx]
    e = theta[:, idx + 1] ** 2 + theta[:, idx + 2] ** 2
    log_s = theta[:, 3 * npl :]
    ok = np.all((log_p >= prep.log_p[0]) & (log_p <= prep.log_p[1]), axis=1)
    ok &= np.all(np.diff(log_p, axis=1) > 0.0, axis=1)
    ok &= np.all(e <= prep.e_max, axis=1)
    ok &= np.all((log_s >= prep.jit_log_range[:, 0]) & (log_s <= prep.jit_log_range[:, 1]), axis=1)
    lp = np.full(theta.shape[0], -np.inf)
    if not np.any(ok):
        return lp
    s = np.exp(log_s[ok])
    # ln p(ln s) = ln s - ln(s + knee): the modified-Jeffreys density times the Jacobian s.
    val = np.sum(log_s[ok] - np.log(s + prep.jit_knee), axis=1)
    if prep.ecc_beta is not None:
        a, b = prep.ecc_beta
        ee = np.clip(e[ok], 1e-300, None)
        val += np.sum((a - 1.0) * np.log(ee) + (b - 1.0) * np.log1p(-ee), axis=1)
    lp[ok] = val + prep.log_prior_const
    return lp


def _design(theta, prep):
    """Design matrices (b, n, n_lin) and inverse variances (b, n) for valid rows."""
    period, e, phase, log_s = _unpack(theta, prep.n_planets)
    b = theta.shape[0]
    n = prep.t.size
    n_fixed = prep.fixed.shape[1]
    x = np.empty((b, n, 2 * prep.n_planets + n_fixed))
    for k in range(prep.n_planets):
        m = (2.0 * np.pi / period[:, k, None]) * prep.t + phase[:, k, None]
        ek = e[:, k, None]
        _, sin_e, cos_e = eccentric_anomaly_sincos(m, ek)
        inv = 1.0 / (1.0 - ek * cos_e)
        x[:, :, 2 * k] = (cos_e - ek) * inv + ek
        x[:, :, 2 * k + 1] = -np.sqrt(1.0 - ek * ek) * sin_e * inv
    x[:, :, 2 * prep.n_planets :] = prep.fixed
    w = 1.0 / (prep.var + np.exp(2.0 * log_s)[:, prep.inst])
    return x, w


def _solve_design(x, w, resid, prior_prec):
    xw = x * w[:, :, None]
    f = np.matmul(xw.transpose(0, 2, 1), x)
    f[:, np.arange(f.shape[1]), np.arange(f.shape[1])] += prior_prec
    bvec = xw.transpose(0, 2, 1) @ resid
    chol = np.linalg.cholesky(f)
    z = np.linalg.solve(chol, bvec[:, :, None])[:, :, 0]
    return chol, z


def _solve(theta, prep):
    x, w = _design(theta, prep)
    chol, z = _solve_design(x, w, prep.resid, prep.prior_prec)
    return w, chol, z


def log_marginal_design(x, w, resid, prior_prec):
    """Log marginal likelihood of a linear-Gaussian model, for a batch of design matrices.

    Parameters
    ----------
    x : ndarray, shape (n_batch, n, n_lin)
        Design matrices.
    w : ndarray, shape (n_batch, n)
        Inverse noise variances [s^2/m^2].
    resid : ndarray, shape (n,)
        Data minus the prior-mean model [m/s].
    prior_prec : ndarray, shape (n_lin,)
        Prior precisions of the linear coefficients (prior means already in `resid`).

    Returns
    -------
    ll : ndarray, shape (n_batch,)
        ln N(resid | 0, C + X Lambda X^T) (see :func:`log_marginal`).
    """
    chol, z = _solve_design(x, w, resid, prior_prec)
    return _assemble(w, chol, z, resid, prior_prec)


def _assemble(w, chol, z, resid, prior_prec):
    quad = (w * resid**2).sum(axis=1) - (z * z).sum(axis=1)
    log_det_c = -np.log(w).sum(axis=1)
    log_det_f = 2.0 * np.log(np.diagonal(chol, axis1=1, axis2=2)).sum(axis=1)
    log_det_prior = -np.log(prior_prec).sum()
    return -0.5 * (quad + log_det_c + log_det_f + log_det_prior + resid.size * _LOG_2PI)


def log_marginal(theta, prep):
    """Log marginal likelihood of the data for a batch of sampled vectors.

    Parameters
    ----------
    theta : ndarray, shape (n_batch, n_sampled)
        Sampled parameters, all inside the prior support.
    prep : Prepared

    Returns
    -------
    ll : ndarray, shape (n_batch,)
        ln p(y | theta), the linear parameters integrated out under their Gaussian prior.

    Notes
    -----
    ln p = -1/2 [r^T C^-1 r - b^T F^-1 b + ln det C + ln det Lambda + ln det F + n ln 2 pi]
    with r = y - X mu, b = X^T C^-1 r and F = Lambda^-1 + X^T C^-1 X (Woodbury identity and
    the matrix determinant lemma; e.g. Rasmussen & Williams 2006, eq. A.9 and A.10).
    """
    theta = np.atleast_2d(theta)
    w, chol, z = _solve(theta, prep)
    return _assemble(w, chol, z, prep.resid, prep.prior_prec)


def log_joint(theta, prep, chunk=2048):
    """Log prior plus log marginal likelihood, ``-inf`` outside the prior support.

    Parameters
    ----------
    theta : ndarray, shape (n_batch, n_sampled)
        Sampled vectors, inside the support or not.
    prep : Prepared
    chunk : int, optional
        Rows evaluated at once (bounds the memory of the design matrices).

    Returns
    -------
    ndarray, shape (n_batch,)
        ln p(theta) + ln p(y | theta): the unnormalised log posterior, whose integral over
        theta is the evidence Z.
    """
    theta = np.atleast_2d(theta)
    out = log_prior(theta, prep)
    ok = np.flatnonzero(np.isfinite(out))
    for lo in range(0, ok.size, chunk):
        rows = ok[lo : lo + chunk]
        out[rows] += log_marginal(theta[rows], prep)
    return out


@dataclass(frozen=True)
class LinearConditional:
    """Gaussian posterior of the linear parameters given sampled vectors.

    Attributes
    ----------
    mean : ndarray, shape (n_batch, n_lin)
        Conditional means (in ``ModelSpec.linear_names()`` order).
    chol : ndarray, shape (n_batch, n_lin, n_lin)
        Lower Cholesky factor of the conditional precision F (covariance is F^-1).
    """

    mean: np.ndarray
    chol: np.ndarray

    def draw(self, rng):
        """Draw one vector per batch row, shape (n_batch, n_lin), using `rng`."""
        z = rng.standard_normal(self.mean.shape)
        # beta = mean + L^-T z has covariance (L L^T)^-1 = F^-1.
        return self.mean + np.linalg.solve(self.chol.transpose(0, 2, 1), z[:, :, None])[:, :, 0]

    def covariance(self):
        """Conditional covariances F^-1, shape (n_batch, n_lin, n_lin)."""
        f = self.chol @ self.chol.transpose(0, 2, 1)
        return np.linalg.inv(f)


def linear_conditional(theta, prep):
    """Conditional Gaussian of the linear parameters for each sampled vector.

    Parameters
    ----------
    theta : ndarray, shape (n_batch, n_sampled)
    prep : Prepared

    Returns
    -------
    LinearConditional
        Mean mu + F^-1 b and the Cholesky factor of F.
    """
    theta = np.atleast_2d(theta)
    _, chol, z = _solve(theta, prep)
    shift = np.linalg.solve(chol.transpose(0, 2, 1), z[:, :, None])[:, :, 0]
    return LinearConditional(mean=prep.prior_mean + shift, chol=chol)
