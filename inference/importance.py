"""Adaptive importance sampling of one star's posterior: population Monte Carlo over a mixture.

Starting from one Student-t component per candidate period mode (:mod:`inference.start`), each
round draws from the defensive mixture (:mod:`inference.mixture`), weights every draw by
posterior / mixture (the deterministic-mixture weights, so one weight serves all components),
and refits the mixture to the weighted draws by the Rao-Blackwellised updates of population
Monte Carlo (Cappe, Guillin, Marin & Robert 2004, J. Comput. Graph. Stat. 13, 907; Cappe,
Douc, Guillin, Marin & Robert 2008, Stat. Comput. 18, 447, section 3 for Student-t mixtures).
Heavy draws that no component explains (they came from the prior share) start new components,
so a mode the period scan missed is still found. A last, larger draw from the adapted mixture
gives the weighted sample, the evidence Z = E_q[p(y, theta) / q(theta)] with its standard
error, the effective sample size and the Pareto k-hat of the weights (:mod:`inference.psis`).
"""

from dataclasses import dataclass

import numpy as np

from .likelihood import log_joint
from .mixture import JitterProposal, Mixture, mixture_draw, mixture_log_density
from .psis import K_HAT_LIMIT, effective_sample_size, pareto_k_hat

__all__ = ["ImportanceResult", "population_monte_carlo"]

_BIRTHS_PER_ROUND = 5
_BIRTH_MASS = 5e-4  # a prior-share draw carrying this much of the weight starts a component
_DEATH_MASS = 1e-5  # components with less mass are dropped (unless anchored)
_ANCHOR_SHARE = 0.05  # least share of the draws kept on the scan's candidate components
_IDLE_MASS = 1e-4  # an anchor carrying less than this ...
_IDLE_ROUNDS = 3  # ... in this many rounds running is released


@dataclass(frozen=True, eq=False)
class ImportanceResult:
    """Weighted draws of one posterior and what they say about their own quality.

    Attributes
    ----------
    theta : ndarray, shape (n_draws, n_sampled)
        Final draws from the adapted mixture.
    log_w : ndarray, shape (n_draws,)
        Their log importance weights ln p(y, theta) - ln q(theta) (``-inf`` outside the prior).
    log_z : float
        ln of the evidence estimate mean(w).
    log_z_se : float
        Standard error of `log_z` (delta method: sd(w) / (mean(w) sqrt(n))).
    ess : float
        Kish effective sample size of the final draws.
    k_hat : float
        Pareto k-hat of the final weights.
    mixture : Mixture
        The adapted proposal the final draws came from.
    rounds : int
        Adaptation rounds run.
    n_evaluations : int
        Posterior evaluations, adaptation included.
    """

    theta: np.ndarray
    log_w: np.ndarray
    log_z: float
    log_z_se: float
    ess: float
    k_hat: float
    mixture: Mixture
    rounds: int
    n_evaluations: int

    def normalised_weights(self):
        """Weights that sum to one, shape (n_draws,)."""
        return _normalise(self.log_w)


def _normalise(log_w):
    finite = np.isfinite(log_w)
    w = np.zeros(log_w.shape)
    if np.any(finite):
        w[finite] = np.exp(log_w[finite] - np.max(log_w[finite]))
        w /= w.sum()
    return w


def _weigh(mix, prep, theta):
    log_t = log_joint(theta, prep)
    log_q, parts, maha = mixture_log_density(mix, prep, theta)
    log_w = np.where(np.isfinite(log_t), log_t - log_q, -np.inf)
    return log_w, log_q, parts, maha


def _refit(mix, anchored, idle, theta, w, log_q, parts, maha):
    """One Rao-Blackwellised PMC update of the Student-t components (Cappe et al. 2008).

    Anchored components (the scan's candidates) are not dropped and keep at least the share
    ``_ANCHOR_SHARE / n_anchored``, so no candidate mode can vanish between rounds unseen: if
    it holds mass, its draws come out heavy and the next update raises it. An anchor whose
    draws carried under ``_IDLE_MASS`` in ``_IDLE_ROUNDS`` rounds running is released.
    Returns the new weights, means, scales, anchor flags and idle counts.
    """
    d = theta.shape[1]
    resp = np.exp(parts[:, 1:] - log_q[:, None])  # a_c t_c / q, rows with q > 0
    resp[~np.isfinite(resp)] = 0.0
    v_all = w[:, None] * resp
    masses = v_all.sum(axis=0)
    weights, means, covs, flags, idles = [], [], [], [], []
    floor = _ANCHOR_SHARE / max(sum(anchored), 1)
    for c in range(mix.n_components):
        mass = float(masses[c])
        count = idle[c] + 1 if mass < _IDLE_MASS else 0
        anchor = anchored[c] and count < _IDLE_ROUNDS
        if not anchor and mass < _DEATH_MASS:
            continue
        flags.append(anchor)
        idles.append(count)
        weights.append(max(mass, floor) if anchor else mass)
        rows = np.flatnonzero(v_all[:, c] > 1e-12 * max(mass, 1e-300))
        v = v_all[rows, c]
        n_eff = mass**2 / max(float(np.sum(v * v)), 1e-300)
        if n_eff < 2 * d + 2:
            means.append(mix.means[c])  # too few effective draws to refit the shape: keep it
            covs.append(mix.chols[c] @ mix.chols[c].T)
            continue
        u = (mix.dof + d) / (mix.dof + maha[rows, c])  # E-step of the Student-t scale mixture
        vu = v * u
        mean = vu @ theta[rows] / vu.sum()
        diff = theta[rows] - mean
        means.append(mean)
        covs.append((diff * vu[:, None]).T @ diff / mass)
    return weights, means, covs, flags, idles


def _births(mix, prep, theta, w, parts, weights, means, covs, span):
    """Start components at heavy draws: where the target outweighs the mixture most.

    A draw carrying more than ``_BIRTH_MASS`` of the total weight shows a region the mixture
    under-covers: either a mode no component holds (the draw came from the defensive share)
    or a part of a mode its component's ellipsoid misses (a curved or skewed mode). A new
    component is centred there; its scale is the default peak-sized box for the first case
    and a quarter of the responsible component's scale for the second.
    """
    npl = prep.n_planets
    order = np.argsort(w)[::-1]
    born = []
    for i in order[: 10 * _BIRTHS_PER_ROUND]:
        if w[i] < _BIRTH_MASS or len(born) >= _BIRTHS_PER_ROUND:
            break
        if any(np.all(np.abs(theta[i] - b) < 0.02) for b in born):
            continue
        born.append(theta[i])
        owner = int(np.argmax(parts[i]))
        if owner == 0:
            freq = np.exp(-theta[i, 0 : 3 * npl : 3])
            sd = np.full(theta.shape[1], 0.3)
            sd[0 : 3 * npl : 3] = np.minimum(0.25 / (freq * span), 0.3)  # ~ a quarter peak
            sd[1 : 3 * npl : 3] = sd[2 : 3 * npl : 3] = 0.15
            cov = np.diag(sd * sd)
        else:
            chol = mix.chols[owner - 1]
            cov = 0.25 * chol @ chol.T
        weights.append(max(w[i], 0.01))
        means.append(theta[i].copy())
        covs.append(cov)
    return len(born)


def _first_good(pool, settings):
    """Return the longest run of the latest pooled rounds that meets every target, or None."""
    for start in range(len(pool)):
        log_w = np.concatenate([lw for _, lw in pool[start:]])
        if effective_sample_size(log_w) < settings.min_ess:
            break  # earlier starts only add draws; fewer draws can only lose ESS
        if pareto_k_hat(log_w) <= K_HAT_LIMIT and _log_mean(log_w)[1] <= settings.max_log_z_se:
            return np.concatenate([t for t, _ in pool[start:]]), log_w
    return None


def _log_mean(log_w):
    finite = log_w[np.isfinite(log_w)]
    if finite.size == 0:
        return -np.inf, np.inf
    top = finite.max()
    w = np.exp(finite - top)
    n = log_w.size
    mean = w.sum() / n
    var = (np.sum(w * w) / n - mean * mean) * n / max(n - 1, 1)
    return float(top + np.log(mean)), float(np.sqrt(max(var, 0.0) / n) / mean)


def population_monte_carlo(prep, settings, rng, seeds, span, frequencies=None):
    """Adapt a defensive Student-t mixture to the posterior and draw the weighted sample.

    Parameters
    ----------
    prep : Prepared
        The data and model arrays (:func:`inference.likelihood.prepare`).
    settings : SamplerSettings
        Uses ``draws``, ``rounds``, ``max_draws``, ``min_ess``, ``max_log_z_se``,
        ``defensive`` and ``dof``.
    rng : numpy.random.Generator
    seeds : sequence of (float, ndarray, ndarray)
        Starting components: relative weight, mean and scale matrix of each.
    span : float
        Time span of the data [d] (sets the width of a period peak, 1 / span in frequency).
    frequencies : FrequencyProposal, optional
        Where the defensive share draws periods (default: the prior).

    Returns
    -------
    ImportanceResult
    """
    mix, anchored = _start_mixture(prep, settings, seeds, frequencies)
    idle = [0] * len(anchored)
    jitters = None
    n_eval = 0
    n = settings.draws
    rounds = 0
    good = None
    pool = []  # rounds since the mixture last changed its set of components
    while True:
        rounds += 1
        theta, _ = mixture_draw(mix, prep, rng, n)
        log_w, log_q, parts, maha = _weigh(mix, prep, theta)
        n_eval += n
        w = _normalise(log_w)
        if not np.any(w > 0):
            break
        k_round = pareto_k_hat(log_w)
        if k_round <= K_HAT_LIMIT:
            pool.append((theta, log_w))
        # Trusted rounds of one mixture family are pooled: each round's weights p / q_r are
        # unbiased for the same posterior, so together they are one larger importance sample.
        # All of them are tried first, then without the earliest, and so on.
        good = _first_good(pool, settings)
        if good is not None:
            break
        ess, k_hat = effective_sample_size(log_w), k_round
        left = settings.max_draws - n_eval
        if left < settings.draws or rounds >= settings.rounds:
            break
        weights, means, covs, anchored, idle = _refit(mix, anchored, idle, theta, w, log_q,
                                                      parts, maha)
        n_born = 0
        # Births only in the first third of the rounds and half the budget; then only refits,
        # so that the rounds can grow to the effective sample size wanted.
        if rounds <= settings.rounds // 3 and n_eval < settings.max_draws // 2:
            n_born = _births(mix, prep, theta, w, parts, weights, means, covs, span)
            anchored += [False] * n_born
            idle += [0] * n_born
        if n_born:
            pool = []
        # The defensive share and its frequency histogram adapt too.
        defensive, frequencies, jitters = _adapt_defensive(
            prep, settings, theta, w, log_q, parts, frequencies, jitters)
        if weights:
            mix = Mixture.build(defensive, weights, means, covs, settings.dof, frequencies,
                                jitters)
        elif not mix.weights.size:  # no planet: the defensive share is all, its jitters adapt
            mix = Mixture(mix.defensive, mix.weights, mix.means, mix.chols, mix.dof,
                          frequencies, jitters)
        # Good weights but too few of them: draw enough next time (with a 30% margin).
        if k_hat <= K_HAT_LIMIT and n_born == 0 and ess > 0:
            n = int(min(max(settings.draws, 1.3 * settings.min_ess * n / ess),
                        4 * settings.draws, left))
        else:
            n = settings.draws
    if good is None and pool:
        good = (np.concatenate([t for t, _ in pool]), np.concatenate([lw for _, lw in pool]))
    if good is None:
        good = (theta, log_w)
    return _result(*good, mix, rounds, n_eval)


def _start_mixture(prep, settings, seeds, frequencies):
    """Build the first mixture from the seeds (each anchored), or the defensive share alone."""
    if seeds:
        weights, means, covs = (list(x) for x in zip(*seeds, strict=True))
        mix = Mixture.build(settings.defensive, weights, means, covs, settings.dof, frequencies)
        return mix, [True] * len(weights)
    d = 3 * prep.n_planets + prep.jit_knee.size
    return Mixture(1.0 - 1e-12, np.zeros(0), np.zeros((0, d)), np.zeros((0, d, d)), 4.0), []


def _adapt_defensive(prep, settings, theta, w, log_q, parts, frequencies, jitters):
    """Refit the defensive share, its frequency histogram and its jitter proposal.

    The share never falls below the setting: mass that only it explains is a continuum of
    small modes.
    """
    own = w * np.exp(parts[:, 0] - log_q)
    own[~np.isfinite(own)] = 0.0
    defensive = float(np.clip(own.sum(), settings.defensive, 0.9))
    if frequencies is not None:
        frequencies = frequencies.refit(theta[:, 0 : 3 * prep.n_planets : 3], own)
    jitters = JitterProposal.fit(theta[:, 3 * prep.n_planets :], own, jitters)
    return defensive, frequencies, jitters


def _result(theta, log_w, mix, rounds, n_eval) -> ImportanceResult:
    """Record the weighted sample with its evidence and diagnostics."""
    log_z, rel_se = _log_mean(log_w)
    return ImportanceResult(
        theta=theta,
        log_w=log_w,
        log_z=log_z,
        log_z_se=float(rel_se),
        ess=effective_sample_size(log_w),
        k_hat=pareto_k_hat(log_w),
        mixture=mix,
        rounds=int(rounds),
        n_evaluations=int(n_eval),
    )
