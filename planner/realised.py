"""What a run really taught each star: realised information and the shrink of its volume.

Glue between posterior records and the estimators of :mod:`planner.divergence`. The new data's
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

from planner.divergence import (
    bridge_kl_bits,
    effective_sample_size,
    knn_kl_bits,
    log2_volume,
    normalised_log_weights,
    reweight_kl_bits,
)

__all__ = [
    "MAX_BRIDGE_STDERR_BITS",
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
        ``period_k`` [d], ``semi_amplitude_k`` [m/s], ``eccentricity_k`` for k = 1..n_planets.
    """
    names = [f"{p}_{k}" for k in range(1, posterior.model.n_planets + 1)
             for p in ("period", "semi_amplitude", "eccentricity")]
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
        (``planner.update.new_data_log_likelihood``).
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
MAX_BRIDGE_STDERR_BITS = 0.5


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
