"""Bring a star's posterior up to date when new velocities arrive.

Importance reweighting is exact for the sample posterior and costs one likelihood evaluation
per sample: the weights are the likelihood of the new data alone (the old posterior already
holds the old data). When the new data are informative enough that few samples carry the
weight, the effective sample size (Kish 1965) drops and the reweighted sample is poor; then the
posterior is refitted from all the data with ``inference.sample.fit``. The result says which
route was taken.
"""

from __future__ import annotations

import dataclasses
import logging
import math
from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

from planner.information.entropy import InformationError

__all__ = [
    "PosteriorUpdate",
    "importance_weights",
    "new_data_log_likelihood",
    "systematic_resample",
    "update_posterior",
]

logger = logging.getLogger(__name__)

#: Default smallest effective sample size, as a fraction of the samples, to accept reweighting.
MIN_ESS_FRACTION = 0.25


@dataclass(frozen=True, eq=False)
class PosteriorUpdate:
    """The outcome of an update.

    Attributes
    ----------
    posterior : inference.posterior.Posterior
        Equal-weight posterior given old and new data.
    method : str
        ``"reweight"`` (importance reweighting, then systematic resampling) or ``"refit"``.
    ess : float
        Effective sample size of the importance weights (before any refit).
    ess_fraction : float
        `ess` divided by the number of samples.
    weights : ndarray, shape (n_samples,)
        The normalised importance weights of the old samples.
    """

    posterior: object
    method: str
    ess: float
    ess_fraction: float
    weights: np.ndarray


def importance_weights(log_likelihood):
    """Normalised importance weights and their effective sample size.

    Parameters
    ----------
    log_likelihood : ndarray, shape (n_samples,)
        Log-likelihood of the new data under each sample [nats].

    Returns
    -------
    weights : ndarray, shape (n_samples,)
        Weights summing to one.
    ess : float
        1 / sum w^2 (Kish 1965), between 1 and n_samples.
    """
    ll = np.asarray(log_likelihood, dtype=float)
    if ll.ndim != 1 or ll.size == 0 or not np.all(np.isfinite(ll)):
        raise InformationError(
            "log_likelihood must be a non-empty 1-D array of finite values, one per sample."
        )
    lw = ll - logsumexp(ll)
    w = np.exp(lw)
    return w, float(1.0 / np.sum(w * w))


def systematic_resample(weights, rng):
    """Return the indices of an equal-weight resample by systematic resampling.

    Parameters
    ----------
    weights : ndarray, shape (n_samples,)
        Normalised weights.
    rng : numpy.random.Generator
        Source of the single uniform offset.

    Returns
    -------
    indices : ndarray of int, shape (n_samples,)
        Each sample appears floor(n w_i) or ceil(n w_i) times (Kitagawa 1996).
    """
    w = np.asarray(weights, dtype=float)
    n = w.size
    edges = np.cumsum(w)
    edges[-1] = 1.0
    points = (rng.random() + np.arange(n)) / n
    return np.searchsorted(edges, points, side="right").clip(0, n - 1)


def new_data_log_likelihood(posterior, data):
    """Log-likelihood of new velocities under every posterior sample.

    Parameters
    ----------
    posterior : inference.posterior.Posterior
        Provides ``predict(t, instrument)`` and ``jitter(instrument)``.
    data : inference.data.RVData
        The new velocities (times BJD_TDB, rv and rv_err in m/s, instrument per row).

    Returns
    -------
    log_likelihood : ndarray, shape (n_samples,)
        sum_n log N(rv_n; v_i(t_n), rv_err_n^2 + s_i^2) [nats].
    """
    total = None
    for inst in data.instruments:
        rows = np.flatnonzero(np.asarray(data.instrument) == inst)
        try:
            pred = posterior.predict(data.time[rows], inst)
            jit = np.asarray(posterior.jitter(inst), dtype=float)
        except (KeyError, ValueError) as err:
            raise InformationError(
                f"the new data use instrument {inst!r}, which the posterior of "
                f"{posterior.target!r} does not model; refit with that instrument ({err})."
            ) from None
        var = data.rv_err[rows][None, :] ** 2 + jit[:, None] ** 2
        resid = data.rv[rows][None, :] - pred
        ll = -0.5 * np.sum(resid * resid / var + np.log(2.0 * math.pi * var), axis=1)
        total = ll if total is None else total + ll
    return total


def update_posterior(posterior, old_data, new_data, rng, settings=None,
                     min_ess_fraction=MIN_ESS_FRACTION, fit=None):
    """Posterior given old and new data: reweight if the samples stay good, else refit.

    Parameters
    ----------
    posterior : inference.posterior.Posterior
        Posterior given `old_data`.
    old_data, new_data : inference.data.RVData
        The data already fitted and the new velocities.
    rng : numpy.random.Generator
        Randomness for the resample or the refit.
    settings : object, optional
        Sampler settings passed to the refit.
    min_ess_fraction : float, optional
        Reweighting is accepted when ESS / n_samples is at least this.
    fit : callable, optional
        Refit function with the signature of ``inference.sample.fit``; default that function.

    Returns
    -------
    PosteriorUpdate
        The new posterior and which route produced it.
    """
    if not 0.0 < min_ess_fraction <= 1.0:
        raise InformationError(
            f"min_ess_fraction {min_ess_fraction!r} must lie in (0, 1]; 0.25 is a usual choice."
        )
    ll_new = new_data_log_likelihood(posterior, new_data)
    w, ess = importance_weights(ll_new)
    n = w.size
    combined = old_data.concat(new_data)
    if ess >= min_ess_fraction * n:
        idx = systematic_resample(w, rng)
        new = dataclasses.replace(
            posterior,
            samples=np.asarray(posterior.samples)[idx],
            log_likelihood=np.asarray(posterior.log_likelihood)[idx] + ll_new[idx],
            data_digest=combined.digest,
        )
        logger.info("%s: reweighted (ESS %.0f of %d)", posterior.target, ess, n)
        return PosteriorUpdate(new, "reweight", ess, ess / n, w)
    if fit is None:
        from inference.sample import fit as default_fit  # imported only when a refit is due

        fit = default_fit
    logger.info("%s: refit (ESS %.0f of %d is too low)", posterior.target, ess, n)
    new = fit(combined, posterior.model, settings, rng, target=posterior.target)
    return PosteriorUpdate(new, "refit", ess, ess / n, w)
