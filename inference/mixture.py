"""The importance proposal: a defensive mixture of the prior and multivariate Student-t components.

    q(theta) = a_0 p(theta) + sum_c a_c t_nu(theta; mu_c, S_c)

in the sampled coordinates (ln P, sqrt(e) cos M0, sqrt(e) sin M0 per planet, ln jitter per
instrument). The defensive share a_0 bounds every importance weight wherever the Student-t
components miss (defensive importance sampling, Hesterberg 1995, Technometrics 37, 185), so a
missed mode shows up as heavy draws instead of silently vanishing. Its periods come from a
:class:`FrequencyProposal`, the period scan's tempered score mixed with the prior, so the
defensive draws land where the data allow a period, and its other coordinates from the prior:
p(theta) is replaced by p(theta) g(P) / p(P), where g is the frequency proposal.
"""

from dataclasses import dataclass

import numpy as np
from scipy.special import gammaln

from .likelihood import log_prior

__all__ = [
    "FrequencyProposal",
    "JitterProposal",
    "Mixture",
    "draw_prior",
    "mixture_draw",
    "mixture_log_density",
]


@dataclass(frozen=True, eq=False)
class FrequencyProposal:
    """A piecewise-uniform density of each planet's frequency 1 / P over the prior's range.

    Attributes
    ----------
    edges : ndarray, shape (n_cells + 1,)
        Cell edges in frequency [1/d], increasing, spanning exactly [1 / P_max, 1 / P_min].
    log_mass : ndarray, shape (n_cells,)
        ln of each cell's probability (they sum to one).
    """

    edges: np.ndarray
    log_mass: np.ndarray
    floor: float = 0.2

    def __post_init__(self):
        for arr in (self.edges, self.log_mass):
            arr.flags.writeable = False

    def _prior_mass(self):
        prior = np.log(self.edges[1:] / self.edges[:-1])
        return prior / prior.sum()

    def refit(self, log_p, v, damping=0.5):
        """Move the cell masses towards the weighted histogram of draws (a PMC update).

        Parameters
        ----------
        log_p : ndarray, shape (n, n_planets)
            ln P of the draws.
        v : ndarray, shape (n,)
            Weight each draw gives this proposal: normalised importance weight times the
            defensive component's responsibility for the draw.
        damping : float, optional
            Share of the new histogram in the update (the rest keeps the old masses).

        Returns
        -------
        FrequencyProposal
            The histogram is smoothed over five cells (a peak width at the default grid
            oversampling) and keeps the prior share `floor`.
        """
        if v.sum() <= 0:
            return self
        cells = np.searchsorted(self.edges, np.exp(-log_p), side="right") - 1
        inside = (cells >= 0) & (cells < self.log_mass.size)
        hist = np.zeros(self.log_mass.size)
        np.add.at(hist, cells[inside], np.broadcast_to(v[:, None], cells.shape)[inside])
        hist = np.convolve(hist, np.array([1.0, 2.0, 3.0, 2.0, 1.0]) / 9.0)[2:-2]
        if hist.sum() <= 0:
            return self
        prior = self._prior_mass()
        lifted = (1.0 - damping) * np.exp(self.log_mass) + damping * hist / hist.sum()
        mass = (1.0 - self.floor) * lifted + self.floor * prior
        return FrequencyProposal(self.edges, np.log(mass / mass.sum()), self.floor)

    @classmethod
    def from_scores(cls, edges, scores, temper, floor):
        """Cells weighted by prior mass x exp(temper x score), mixed with the prior (share floor).

        Parameters
        ----------
        edges : ndarray, shape (n_cells + 1,)
        scores : ndarray, shape (n_cells,)
            Log scores of each cell (any offset).
        temper : float
            Power applied to the score (below 1 flattens it, so flanks of peaks get draws).
        floor : float
            Share of the plain log-uniform prior, in (0, 1).
        """
        prior = np.log(edges[1:] / edges[:-1])  # prior mass of each cell in ln P
        prior = prior / prior.sum()
        lifted = prior * np.exp(temper * (scores - np.max(scores)))
        mass = (1.0 - floor) * lifted / lifted.sum() + floor * prior
        return cls(np.asarray(edges, dtype=float), np.log(mass), float(floor))

    def draw_log_period(self, rng, size):
        """Draw ln P [ln d] of the given shape."""
        cell = rng.choice(self.log_mass.size, size=size, p=np.exp(self.log_mass))
        f = rng.uniform(self.edges[cell], self.edges[cell + 1])
        return -np.log(f)

    def log_density(self, log_p):
        """Ln density in ln P at each entry of `log_p` (``-inf`` outside the range)."""
        f = np.exp(-log_p)
        cell = np.searchsorted(self.edges, f, side="right") - 1
        inside = (cell >= 0) & (cell < self.log_mass.size)
        cell = np.clip(cell, 0, self.log_mass.size - 1)
        width = self.edges[cell + 1] - self.edges[cell]
        # q(ln P) = q(f) |df / d ln P| = (mass / width) f.
        return np.where(inside, self.log_mass[cell] - np.log(width) - log_p, -np.inf)


@dataclass(frozen=True, eq=False)
class JitterProposal:
    """Where the defensive share draws ln jitters: a Gaussian per instrument mixed with the prior.

    Attributes
    ----------
    mean, sd : ndarray, shape (n_inst,)
        Gaussian of each instrument's ln s [ln m/s].
    share : float
        Gaussian share; the rest is the modified-Jeffreys prior.
    """

    mean: np.ndarray
    sd: np.ndarray
    share: float = 0.5

    def __post_init__(self):
        for arr in (self.mean, self.sd):
            arr.flags.writeable = False

    @classmethod
    def fit(cls, log_s, v, old=None):
        """Fit to ln s of draws (n, n_inst) weighted by v; None when v has too little weight."""
        if v.sum() <= 0 or v.sum() ** 2 / np.sum(v * v) < 20:
            return old
        v = v / v.sum()
        mean = v @ log_s
        sd = np.sqrt(np.maximum(v @ (log_s - mean) ** 2, 0.1**2))
        return cls(mean, sd)

    def draw(self, prep, rng, n):
        """Draw ln s, shape (n, n_inst)."""
        out = draw_log_jitter(prep, rng, n)
        gauss = rng.uniform(size=out.shape) < self.share
        z = self.mean + self.sd * rng.standard_normal(out.shape)
        return np.where(gauss, z, out)

    def log_density(self, prep, log_s):
        """Return the log density of ln s, summed over instruments, shape (n,)."""
        lo, hi = _jitter_span(prep)
        inside = (log_s >= prep.jit_log_range[:, 0]) & (log_s <= prep.jit_log_range[:, 1])
        with np.errstate(divide="ignore"):
            prior = np.where(inside, log_s - np.log(np.exp(log_s) + prep.jit_knee)
                             - np.log(hi - lo), -np.inf)
        gauss = (-0.5 * ((log_s - self.mean) / self.sd) ** 2 - np.log(self.sd)
                 - 0.5 * np.log(2.0 * np.pi))
        both = np.logaddexp(np.log(self.share) + gauss, np.log1p(-self.share) + prior)
        return both.sum(axis=1)


def _jitter_span(prep):
    """Return the modified-Jeffreys prior's support in ln(s + knee) per instrument, (lo, hi)."""
    lo = np.log(np.exp(prep.jit_log_range[:, 0]) + prep.jit_knee)
    hi = np.log(np.exp(prep.jit_log_range[:, 1]) + prep.jit_knee)
    return lo, hi


def _log_jitter_prior(prep, log_s):
    """Return the log prior density of ln s, summed over instruments (inside the support)."""
    lo, hi = _jitter_span(prep)
    return np.sum(log_s - np.log(np.exp(log_s) + prep.jit_knee) - np.log(hi - lo), axis=1)


@dataclass(frozen=True, eq=False)
class Mixture:
    """A defensive Student-t mixture over the sampled coordinates.

    Attributes
    ----------
    defensive : float
        Share a_0 of the prior component, in (0, 1).
    weights : ndarray, shape (n_comp,)
        Shares a_c of the Student-t components; they sum to ``1 - defensive``.
    means : ndarray, shape (n_comp, n_dim)
        Component locations mu_c.
    chols : ndarray, shape (n_comp, n_dim, n_dim)
        Lower Cholesky factors of the component scale matrices S_c.
    dof : float
        Degrees of freedom nu of every component.
    frequencies : FrequencyProposal or None
        Where the defensive share draws periods; None: from the prior.
    jitters : JitterProposal or None
        Where the defensive share draws ln jitters; None: from the prior.
    """

    defensive: float
    weights: np.ndarray
    means: np.ndarray
    chols: np.ndarray
    dof: float
    frequencies: FrequencyProposal | None = None
    jitters: JitterProposal | None = None

    def __post_init__(self):
        for arr in (self.weights, self.means, self.chols):
            arr.flags.writeable = False

    @property
    def n_components(self):
        """Int: number of Student-t components (the prior not counted)."""
        return int(self.weights.size)

    @classmethod
    def build(cls, defensive, weights, means, covs, dof, frequencies=None, jitters=None):
        """Make a mixture from unnormalised weights and scale matrices (regularised if needed)."""
        weights = np.asarray(weights, dtype=float)
        weights = (1.0 - defensive) * weights / weights.sum()
        means = np.array(means, dtype=float)
        chols = np.array([_safe_cholesky(c) for c in covs])
        return cls(float(defensive), weights, means, chols, float(dof), frequencies, jitters)


def _safe_cholesky(cov):
    """Cholesky factor of a scale matrix, adding a growing ridge until it is positive."""
    cov = 0.5 * (np.asarray(cov, dtype=float) + np.asarray(cov, dtype=float).T)
    scale = np.maximum(np.diag(cov), 1e-12)
    for ridge in (0.0, 1e-10, 1e-8, 1e-6, 1e-4, 1e-2):
        try:
            return np.linalg.cholesky(cov + np.diag(ridge * scale + 1e-14))
        except np.linalg.LinAlgError:
            continue
    return np.diag(np.sqrt(scale))


def draw_prior(prep, rng, n, frequencies=None, jitters=None):
    """Draw n sampled vectors from the prior of ``docs/priors.md``.

    Periods are log-uniform and sorted (the ordered prior), (sqrt(e) cos M0, sqrt(e) sin M0)
    have e from its prior and M0 uniform, ln jitters follow the modified-Jeffreys prior. With
    `frequencies`, each planet's period comes from that proposal instead (then sorted), and
    with `jitters` the ln jitters from that one.
    """
    npl = prep.n_planets
    theta = np.empty((n, 3 * npl + prep.jit_knee.size))
    if npl:
        if frequencies is None:
            log_p = rng.uniform(prep.log_p[0], prep.log_p[1], size=(n, npl))
        else:
            log_p = frequencies.draw_log_period(rng, (n, npl))
        log_p = np.sort(log_p, axis=1)
        theta[:, 0 : 3 * npl : 3] = log_p
        e = draw_eccentricity(prep, rng, (n, npl))
        phase = rng.uniform(-np.pi, np.pi, size=(n, npl))
        theta[:, 1 : 3 * npl : 3] = np.sqrt(e) * np.cos(phase)
        theta[:, 2 : 3 * npl : 3] = np.sqrt(e) * np.sin(phase)
    theta[:, 3 * npl :] = (draw_log_jitter(prep, rng, n) if jitters is None
                           else jitters.draw(prep, rng, n))
    return theta


def draw_eccentricity(prep, rng, size):
    """Draw eccentricities from the uniform or truncated-Beta prior by its inverse CDF."""
    u = rng.uniform(0.0, 1.0, size=size)
    if prep.ecc_beta is None:
        return prep.e_max * u
    from scipy.special import betainc, betaincinv

    a, b = prep.ecc_beta
    return betaincinv(a, b, u * betainc(a, b, prep.e_max))


def draw_log_jitter(prep, rng, n):
    """Draw ln s from the modified-Jeffreys prior by its inverse CDF, ln(s + knee) uniform."""
    lo, hi = _jitter_span(prep)
    u = rng.uniform(lo, hi, size=(n, lo.size))
    return np.log(np.maximum(np.exp(u) - prep.jit_knee, np.exp(prep.jit_log_range[:, 0])))


def defensive_log_density(frequencies, prep, theta, jitters=None):
    """Log density of the defensive component: the prior, or proposals where given.

    Periods come from `frequencies` and ln jitters from `jitters` when those are given.
    The sorted periods of n planets drawn independently from g have the density n! prod g;
    every other coordinate keeps its prior density.
    """
    lp = log_prior(theta, prep)
    npl = prep.n_planets
    if jitters is not None:
        log_s = theta[:, 3 * npl :]
        ok = np.isfinite(lp)
        lp[ok] += jitters.log_density(prep, log_s[ok]) - _log_jitter_prior(prep, log_s[ok])
    if frequencies is None or npl == 0:
        return lp
    g = frequencies.log_density(theta[:, 0 : 3 * npl : 3]).sum(axis=1)
    return lp - prep.log_period_density + float(gammaln(npl + 1)) + g


def mixture_log_density(mix, prep, theta, chunk=8192):
    """Log density of the mixture and of each weighted component at each row of theta.

    Returns
    -------
    log_q : ndarray, shape (n,)
        ln q(theta).
    log_parts : ndarray, shape (n, 1 + n_comp)
        ln a_0 p(theta) (column 0), then ln a_c t_c(theta).
    maha : ndarray, shape (n, n_comp)
        Squared Mahalanobis distances to each component (used by the t-mixture updates).
    """
    n, d = theta.shape
    parts = np.empty((n, 1 + mix.n_components))
    parts[:, 0] = np.log(mix.defensive) + defensive_log_density(mix.frequencies, prep, theta,
                                                                mix.jitters)
    inv_t = np.linalg.inv(mix.chols).transpose(0, 2, 1)  # (n_comp, d, d)
    maha = np.empty((n, mix.n_components))
    for lo in range(0, n, chunk):
        # z = L_c^-1 (theta - mu_c) for a block of rows and every component at once.
        z = np.matmul(theta[None, lo : lo + chunk, :] - mix.means[:, None, :], inv_t)
        maha[lo : lo + chunk] = np.sum(z * z, axis=2).T
    dof = mix.dof
    const = gammaln(0.5 * (dof + d)) - gammaln(0.5 * dof) - 0.5 * d * np.log(dof * np.pi)
    log_det = np.sum(np.log(np.diagonal(mix.chols, axis1=1, axis2=2)), axis=1)
    parts[:, 1:] = (np.log(mix.weights) + const - log_det) - 0.5 * (dof + d) * np.log1p(maha / dof)
    top = np.max(parts, axis=1)
    safe = np.where(np.isfinite(top), top, 0.0)
    log_q = safe + np.log(np.sum(np.exp(parts - safe[:, None]), axis=1))
    return np.where(np.isfinite(top), log_q, -np.inf), parts, maha


def mixture_draw(mix, prep, rng, n):
    """Draw n vectors from the mixture; return them and their component (0 = defensive)."""
    shares = np.concatenate([[mix.defensive], mix.weights])
    which = rng.choice(shares.size, size=n, p=shares / shares.sum())
    d = mix.means.shape[1] if mix.n_components else prep.jit_knee.size + 3 * prep.n_planets
    theta = np.empty((n, d))
    prior_rows = np.flatnonzero(which == 0)
    theta[prior_rows] = draw_prior(prep, rng, prior_rows.size, mix.frequencies, mix.jitters)
    for c in range(mix.n_components):
        rows = np.flatnonzero(which == c + 1)
        if rows.size == 0:
            continue
        z = rng.standard_normal((rows.size, d))
        scale = np.sqrt(mix.dof / rng.chisquare(mix.dof, size=rows.size))
        theta[rows] = mix.means[c] + (z @ mix.chols[c].T) * scale[:, None]
    return theta, which
