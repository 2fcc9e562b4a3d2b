"""What a run really taught each star: realised information and the shrink of its volume.

Glue between posterior records and the estimators of :mod:`planner.simulation.divergence`. The new
data's
log likelihood at every complete old sample gives the importance weights; while their effective
sample size allows, the new posterior is the reweighted old samples and the realised information
is exact on that support (the same support the planner's expected information is computed on);
after a refit it is the bridge estimate, or the kNN estimate where the two sample sets barely
overlap. See ``docs/simulation.md``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from planner.errors import PlanError
from planner.information.update import MIN_ESS_FRACTION, new_data_log_likelihood
from planner.simulation.divergence import (
    bridge_kl_bits,
    effective_sample_size,
    knn_kl_bits,
    log2_volume,
    normalised_log_weights,
    reweight_kl_bits,
)

__all__ = [
    "MAX_BRIDGE_STDERR_BITS",
    "cost_to_reach",
    "measure_execution",
    "support_curve",
    "StarRealised",
    "measure_refit",
    "measure_reweighted",
    "volume_columns",
]


def volume_columns(posterior):
    """Return the period, semi-amplitude and eccentricity columns of every planet.

    Parameters
    ----------
    posterior : inference.posterior.Posterior
        Posterior with complete samples.

    Returns
    -------
    ndarray, shape (n_samples, 3 * n_planets)
        ``period_k`` [d], ``semi_amplitude_k`` [m/s], ``eccentricity_k`` for k = 1..n_planets
        (no columns without planets: the log2 volume is then 0 and nothing shrinks).
    """
    names = [f"{p}_{k}" for k in range(1, posterior.model.n_planets + 1)
             for p in ("period", "semi_amplitude", "eccentricity")]
    if not names:  # a star modelled without planets has no orbit volume
        return np.zeros((posterior.n_samples, 0))
    return np.column_stack([posterior.param(n) for n in names])


@dataclass(frozen=True)
class StarRealised:
    """What one star's new velocities taught.

    Attributes
    ----------
    target : str
        Target id.
    bits : float
        Realised information ``KL(new || old)`` [bits].
    stderr : float
        Standard error of ``bits`` from the estimator (0 for the exact reweighting) [bits].
    method : str
        ``"reweight"`` (exact on the old samples), ``"refit-bridge"`` or ``"refit-knn"``.
    ess : float
        Effective sample size of the new data's weights on the old samples.
    n_new : int
        Number of new velocities.
    log2_volume_before, log2_volume_after : float
        :func:`log2_volume` of the period, semi-amplitude and eccentricity of every planet,
        before and after.
    """

    target: str
    bits: float
    stderr: float
    method: str
    ess: float
    n_new: int
    log2_volume_before: float
    log2_volume_after: float

    @property
    def shrink_bits(self) -> float:
        """Shrink of the posterior volume, ``log2 V_before - log2 V_after`` [bits]."""
        return self.log2_volume_before - self.log2_volume_after


def measure_reweighted(old, loglike_old, n_new):
    """Realised information when the new posterior is the old samples reweighted.

    Parameters
    ----------
    old : inference.posterior.Posterior
        Posterior before the new data.
    loglike_old : ndarray, shape (n_samples,)
        Log likelihood of the new data at the old samples [nats]
        (``planner.information.update.new_data_log_likelihood``).
    n_new : int
        Number of new velocities.

    Returns
    -------
    StarRealised
        ``method="reweight"``, exact on the old samples (:func:`reweight_kl_bits`).
    """
    lwn = normalised_log_weights(loglike_old)
    cols = volume_columns(old)
    return StarRealised(
        target=old.target, bits=reweight_kl_bits(lwn), stderr=0.0, method="reweight",
        ess=effective_sample_size(lwn), n_new=int(n_new),
        log2_volume_before=log2_volume(cols), log2_volume_after=log2_volume(cols, np.exp(lwn)),
    )


#: The bridge estimate is used while its standard error stays below this [bits]; past it the
#: two sample sets barely overlap and the kNN estimator takes over.
MAX_BRIDGE_STDERR_BITS = 0.2


def _mean_anomalies(posterior):
    t_ref = float(posterior.model.t_ref)
    return [2.0 * np.pi * (t_ref - posterior.param(f"time_periastron_{k}"))
            / posterior.param(f"period_{k}") for k in range(1, posterior.model.n_planets + 1)]


def _knn_coordinates(posterior, centres):
    """Map complete samples to coordinates without wrap-around for the kNN estimator.

    Per planet: log period, eccentricity, ``K cos omega``, ``K sin omega`` and the mean anomaly
    at ``t_ref`` unwrapped about ``centres[k]`` into (-pi, pi]; then every other column as it
    is. The map is one-to-one on the samples, so KL is unchanged.
    """
    cols, used = [], set()
    for k, ma in enumerate(_mean_anomalies(posterior), start=1):
        amp, om = posterior.param(f"semi_amplitude_{k}"), posterior.param(f"omega_{k}")
        cols += [np.log(posterior.param(f"period_{k}")), posterior.param(f"eccentricity_{k}"),
                 amp * np.cos(om), amp * np.sin(om), np.angle(np.exp(1j * (ma - centres[k - 1])))]
        used |= {f"{n}_{k}" for n in ("period", "semi_amplitude", "eccentricity", "omega",
                                      "time_periastron")}
    cols += [posterior.param(n) for n in posterior.names if n not in used]
    return np.column_stack(cols)


def measure_refit(old, new, loglike_old, loglike_new, n_new):
    """Realised information when the new posterior was sampled afresh.

    Parameters
    ----------
    old, new : inference.posterior.Posterior
        Posteriors before and after the new data (same model).
    loglike_old, loglike_new : ndarray, shape (n_old,) and (n_new_samples,)
        Log likelihood of the new data at the old and at the new samples [nats].
    n_new : int
        Number of new velocities.

    Returns
    -------
    StarRealised
        ``method="refit-bridge"`` (:func:`bridge_kl_bits`) while its standard error is below
        :data:`MAX_BRIDGE_STDERR_BITS`, else ``"refit-knn"`` (:func:`knn_kl_bits` on
        wrap-free coordinates, standard error ``nan``).
    """
    bits, se = bridge_kl_bits(loglike_old, loglike_new)
    method = "refit-bridge"
    if not (math.isfinite(se) and se <= MAX_BRIDGE_STDERR_BITS):
        centres = [math.atan2(float(np.mean(np.sin(ma))), float(np.mean(np.cos(ma))))
                   for ma in _mean_anomalies(old)]
        bits = knn_kl_bits(_knn_coordinates(new, centres), _knn_coordinates(old, centres))
        se, method = math.nan, "refit-knn"
    return StarRealised(
        target=old.target, bits=float(bits), stderr=float(se), method=method,
        ess=effective_sample_size(loglike_old), n_new=int(n_new),
        log2_volume_before=log2_volume(volume_columns(old)),
        log2_volume_after=log2_volume(volume_columns(new)),
    )


def measure_execution(posteriors, execution, rng, past=None, refit=False,
                      min_ess_fraction=MIN_ESS_FRACTION, fit_settings=None):
    """Measure what every visited target learnt, against the posteriors before the run.

    Parameters
    ----------
    posteriors : mapping of str to inference.posterior.Posterior
        Posteriors before the run.
    execution : planner.simulation.simulate.Execution
        All new velocities of the run.
    rng : numpy.random.Generator
        Generator for refits.
    past : mapping of str to inference.data.RVData, optional
        The data each posterior was fitted to (needed for refits).
    refit : bool
        Refit a target when the effective sample size of its weights is below
        ``min_ess_fraction`` of the samples; False keeps the exact on-support reweighting
        for every target (the estimator the expected bits are comparable with).
    min_ess_fraction : float
        Threshold of the refit.
    fit_settings : inference.settings.SamplerSettings, optional
        Settings of the refits.

    Returns
    -------
    tuple of StarRealised
        One per target with new velocities, in order of first visit.
    """
    out = []
    for target in execution.targets():
        old = posteriors[target]
        data = execution.data(target)
        ll = new_data_log_likelihood(old, data)
        star = measure_reweighted(old, ll, len(data))
        if refit and star.ess < min_ess_fraction * old.n_samples:
            from inference.sample import fit

            if past is None:
                raise PlanError("refits need the data the posteriors were fitted to; pass past.")
            new = fit(past[target].concat(data), old.model, fit_settings, rng, target=target)
            star = measure_refit(old, new, ll, new_data_log_likelihood(new, data), len(data))
        out.append(star)
    return tuple(out)


def support_curve(posteriors, execution, weights=None):
    """On-support realised bits of the whole run after each executed exposure.

    Parameters
    ----------
    posteriors : mapping of str to inference.posterior.Posterior
        Posteriors before the run.
    execution : planner.simulation.simulate.Execution
        The run's velocities, in time order.
    weights : mapping of str to float, optional
        Weight of each target's bits (default 1).

    Returns
    -------
    ndarray, shape (n_executed,)
        Weighted total ``sum_stars reweight_kl_bits`` after the first k exposures [bits].

    Notes
    -----
    Only the star of the k-th exposure changes at step k, so the curve costs one reweighting
    per exposure. The last value equals the total of :func:`measure_execution` without refits.
    """
    w = dict(weights or {})
    columns = {}
    for target in execution.targets():
        post = posteriors[target]
        rows = execution.rows(target)
        # One column per exposure: the new data's log likelihood, one velocity at a time.
        columns[target] = [new_data_log_likelihood(post, execution.data(target, row))
                           for row in rows]
    running = {t: np.zeros(posteriors[t].n_samples) for t in columns}
    seen = dict.fromkeys(columns, 0)
    bits = dict.fromkeys(columns, 0.0)
    total = 0.0
    curve = np.empty(len(execution.visits))
    for k, visit in enumerate(execution.visits):
        t = visit.target
        running[t] = running[t] + columns[t][seen[t]]
        seen[t] += 1
        new = reweight_kl_bits(running[t])
        total += w.get(t, 1.0) * (new - bits[t])
        bits[t] = new
        curve[k] = total
    return curve


def cost_to_reach(curve_bits, curve_hours, goal_bits):
    """Exposures and hours a strategy needs to first reach a realised-information goal.

    Parameters
    ----------
    curve_bits : ndarray, shape (n,)
        Realised bits after each exposure, in time order.
    curve_hours : ndarray, shape (n,)
        Hours used after each exposure.
    goal_bits : float
        The goal (cadence's whole-run realised bits in the same seed).

    Returns
    -------
    exposures : int or None
        Smallest k with ``curve_bits[k-1] >= goal_bits``; None if never reached.
    hours : float or None
        ``curve_hours[k-1]``; None if never reached.
    """
    bits = np.asarray(curve_bits, dtype=float)
    hit = np.flatnonzero(bits >= goal_bits - 1e-12)
    if hit.size == 0:
        return None, None
    return int(hit[0]) + 1, float(np.asarray(curve_hours, dtype=float)[hit[0]])
