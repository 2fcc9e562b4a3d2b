"""Information curves: one star's one-visit bits at every grid time of a run, per exposure option.

The curve at a grid time is the expected information of an exposure *starting* then, with the
velocity predicted at mid-exposure. Mid-exposure times are snapped to the nearest grid time when
one lies within half a grid step (1 minute on a 2-minute grid), so that exposure options share
their predicted velocities and the binned samples of the entropy core: a velocity shifts by at
most |dv/dt| x 60 s (0.06 m/s for K = 56 m/s at P = 4.2 d), far below any exposure's noise.
Where no grid time is that close, the exact mid-exposure time is used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .entropy import InformationError, mixture_entropy_bits
from .information import mean_log_shifted

__all__ = ["InformationCurve", "build_curve"]

_DAY_S = 86400.0
_LN2 = math.log(2.0)
_HALF_LOG_2PIE = 0.5 * math.log(2.0 * math.pi * math.e)


@dataclass(frozen=True, eq=False)
class InformationCurve:
    """One star's expected information of one visit over a run, per exposure option.

    Attributes
    ----------
    target : str
        Target identifier.
    times_jd : ndarray, shape (n_times,)
        Grid times (exposure starts), JD UTC [d].
    exposures_s : ndarray, shape (n_opt,)
        Exposure time of each option [s].
    sigma_ms : ndarray, shape (n_opt, n_times)
        Measurement noise of each option at each start [m/s] (jitter not included).
    bits : ndarray, shape (n_opt, n_times)
        Expected information of one exposure [bits], unweighted; NaN where not observable.
    prediction_bjd : ndarray, shape (n_opt, n_times)
        Time at which the velocities were predicted (mid-exposure, snapped), BJD_TDB [d].
    weight : float
        Science weight of the target; the planner's value of a visit is ``weight * bits``.
    """

    target: str
    times_jd: np.ndarray
    exposures_s: np.ndarray
    sigma_ms: np.ndarray
    bits: np.ndarray
    prediction_bjd: np.ndarray
    weight: float = 1.0

    @property
    def weighted_bits(self):
        """Bits times the science weight, shape (n_opt, n_times)."""
        return self.weight * self.bits


def _mean_noise_entropy_bits(jitter_var, meas_var):
    """Return sum_i (1/N) 0.5 log2(2 pi e (s_i^2 + x)) for every x in `meas_var` (any shape)."""
    return (mean_log_shifted(jitter_var, meas_var) + 2 * _HALF_LOG_2PIE) / (2 * _LN2)


def _prediction_columns(bjd, exposures_s, observable):
    """Map each observable (option, start) to a prediction column; return columns' times."""
    n_opt, n_t = observable.shape
    step = np.median(np.diff(bjd)) if n_t > 1 else 0.0
    col = np.full((n_opt, n_t), -1, dtype=np.int64)
    extra_times = []
    for o in range(n_opt):
        starts = np.flatnonzero(observable[o])
        mid = bjd[starts] + 0.5 * exposures_s[o] / _DAY_S
        near = np.clip(np.searchsorted(bjd, mid), 1, max(n_t - 1, 1)) if n_t > 1 else np.zeros(
            starts.size, dtype=np.int64)
        if n_t > 1:
            left = near - 1
            near = np.where(np.abs(bjd[left] - mid) <= np.abs(bjd[near] - mid), left, near)
        ok = np.abs(bjd[near] - mid) <= 0.5 * step * (1 + 1e-9) if n_t > 1 else np.zeros(
            starts.size, dtype=bool)
        # A column used twice by one option would need two noise values: keep the first.
        _, first = np.unique(np.where(ok, near, -1 - np.arange(starts.size)), return_index=True)
        dup = np.ones(starts.size, dtype=bool)
        dup[first] = False
        ok &= ~dup
        col[o, starts[ok]] = near[ok]
        off = starts[~ok]
        col[o, off] = n_t + len(extra_times) + np.arange(off.size)
        extra_times.extend(mid[~ok])
    return col, np.concatenate([bjd, np.asarray(extra_times, dtype=float)])


def build_curve(predictor, bjd, sigma_meas, observable, exposures_s, *, times_jd=None,
                target="", weight=1.0):
    """One star's information curve over a run's grid, for every exposure option.

    Parameters
    ----------
    predictor : planner.predict.Predictor
        The star's posterior samples for the instrument used.
    bjd : array_like, shape (n_times,)
        Grid times (exposure starts) as the star's barycentric times, BJD_TDB [d], increasing.
    sigma_meas : array_like, shape (n_opt, n_times)
        Measurement noise [m/s] of each exposure option at each start (no jitter).
    observable : array_like of bool, shape (n_opt, n_times)
        True where an exposure of that option starting then lies inside every limit.
    exposures_s : array_like, shape (n_opt,)
        Exposure times [s].
    times_jd : array_like, shape (n_times,), optional
        The same grid in JD UTC [d], stored in the record; defaults to `bjd`.
    target : str, optional
        Target identifier.
    weight : float, optional
        Science weight (>= 0); stored, and applied by :attr:`InformationCurve.weighted_bits`.

    Returns
    -------
    InformationCurve
        Bits per option and start, NaN where not observable.
    """
    t = np.asarray(bjd, dtype=float)
    sig = np.array(sigma_meas, dtype=float, ndmin=2)
    obs = np.array(observable, dtype=bool, ndmin=2)
    exp_s = np.array(exposures_s, dtype=float, ndmin=1)
    n_t = t.size
    if t.ndim != 1 or (n_t > 1 and np.any(np.diff(t) <= 0)):
        raise InformationError("bjd must be a 1-D increasing array of grid times [BJD_TDB].")
    if sig.shape != obs.shape or sig.shape[1] != n_t or exp_s.shape != (sig.shape[0],):
        raise InformationError(
            f"sigma_meas {sig.shape}, observable {obs.shape} and exposures_s {exp_s.shape} must "
            f"be (n_opt, {n_t}), (n_opt, {n_t}) and (n_opt,); pass one row per exposure option."
        )
    if np.any(obs & ~(np.isfinite(sig) & (sig > 0))):
        raise InformationError(
            "sigma_meas must be finite and positive wherever observable is True; check the "
            "exposure noise model for those times."
        )
    if not (math.isfinite(weight) and weight >= 0):
        raise InformationError(f"weight {weight!r} must be a finite number >= 0.")
    n_opt = sig.shape[0]
    col, col_times = _prediction_columns(t, exp_s, obs)
    used = np.unique(col[col >= 0])
    bits = np.full((n_opt, n_t), np.nan)
    pred_t = np.full((n_opt, n_t), np.nan)
    if used.size:
        v = predictor.velocities(col_times[used])
        where = np.searchsorted(used, np.where(col >= 0, col, used[0]))
        extra = np.full((n_opt, used.size), np.nan)
        o_idx, t_idx = np.nonzero(col >= 0)
        extra[o_idx, where[o_idx, t_idx]] = sig[o_idx, t_idx] ** 2
        jit2 = predictor.jitter**2
        h = mixture_entropy_bits(v, jit2[:, None], extra)
        noise = _mean_noise_entropy_bits(jit2, sig[o_idx, t_idx] ** 2)
        bits[o_idx, t_idx] = np.maximum(h[o_idx, where[o_idx, t_idx]] - noise, 0.0)
        pred_t[o_idx, t_idx] = col_times[col[o_idx, t_idx]]
    grid = t if times_jd is None else np.asarray(times_jd, dtype=float)
    return InformationCurve(str(target), grid.copy(), exp_s, sig, bits, pred_t, float(weight))
