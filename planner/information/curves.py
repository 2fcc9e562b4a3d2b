"""Information curves: one star's one-visit bits at every grid time of a run, per exposure option.

The curve at a grid time is the expected information of an exposure *starting* then, with the
velocity predicted at mid-exposure. Mid-exposure times are snapped to the nearest grid time when
one lies within half a grid step (1 minute on a 2-minute grid), so that exposure options share
their predicted velocities and the binned samples of the entropy core: a velocity shifts by at
most |dv/dt| x 60 s (0.06 m/s for K = 56 m/s at P = 4.2 d), far below any exposure's noise.
Where no grid time is that close, the exact mid-exposure time is used.

By default the mixture entropy is evaluated exactly on every other grid time of each run of
consecutive columns, and the times in between are filled by the cubic midpoint rule
``(-H[-3] + 9 H[-1] + 9 H[+1] - H[+3]) / 16`` wherever the fourth differences of the evaluated
neighbours bound its error (``3/128`` of the fourth difference, the rule's error term) below
``INTERPOLATION_TOLERANCE_BITS``; everywhere else, at run ends and next to any feature sharper
than that, the entropy is evaluated exactly. ``interpolate=False`` evaluates every column.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from planner.information.entropy import LN2, InformationError, mixture_entropy_bits
from planner.information.gain import mean_log_shifted

__all__ = ["INTERPOLATION_TOLERANCE_BITS", "InformationCurve", "build_curve"]

#: Largest estimated error [bits] of an entropy filled in by the cubic midpoint rule.
INTERPOLATION_TOLERANCE_BITS = 1e-4
#: Columns on either side of a failed check that are evaluated rather than filled in.
_GUARD = 8

_DAY_S = 86400.0
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
    return (mean_log_shifted(jitter_var, meas_var) + 2 * _HALF_LOG_2PIE) / (2 * LN2)


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


def _fill_plan(used, n_grid, wanted):
    """Which columns to evaluate first, and which may be filled in.

    used : (n_u,) sorted column indices (grid indices below `n_grid`, off-grid ones above);
    wanted : (n_opt, n_u) bool. Returns ``first`` (n_u,) bool, the columns evaluated at once,
    and ``fill`` (n_u,) bool, the others: odd positions of a run of consecutive grid columns
    whose neighbours at -5, -3, -1, +1, +3 or -3, -1, +1, +3, +5 are all evaluated and wanted by
    every option the column is wanted by.
    """
    n_u = used.size
    on_grid = used < n_grid
    # Runs of consecutive grid columns; position inside the run.
    new_run = np.ones(n_u, dtype=bool)
    new_run[1:] = (np.diff(used) != 1) | ~on_grid[1:] | ~on_grid[:-1]
    run_start = np.maximum.accumulate(np.where(new_run, np.arange(n_u), 0))
    odd = on_grid & ((np.arange(n_u) - run_start) % 2 == 1)

    def shifted(a, d, fill_value):
        """Return a[..., j + d] at every j, `fill_value` past either end."""
        out = np.full(a.shape, fill_value, dtype=a.dtype)
        if d > 0:
            out[..., :-d] = a[..., d:]
        else:
            out[..., -d:] = a[..., :d]
        return out

    fill = np.zeros(n_u, dtype=bool)
    for offsets in ((-5, -3, -1, 1, 3), (-3, -1, 1, 3, 5)):
        ok = odd.copy()
        have = np.ones(wanted.shape, dtype=bool)
        for d in offsets:
            ok &= shifted(run_start, d, -1) == run_start
            have &= shifted(wanted, d, False)
        fill |= ok & np.all(~wanted | have, axis=0)
    return ~fill, fill


def _midpoint(h, j, first):
    """Cubic midpoint values at columns `j` from evaluated neighbours, and error bounds.

    h : (n_opt, n_u) entropies with the evaluated columns filled; first : evaluated mask.
    Returns (value, error) of shape (n_opt, j.size); error is 3/128 of the largest available
    fourth difference (NaN where none is available).
    """
    value = (-h[:, j - 3] + 9 * h[:, j - 1] + 9 * h[:, j + 1] - h[:, j + 3]) / 16
    err = np.full(value.shape, np.nan)
    n_u = h.shape[1]
    for lead in (-5, -3):
        k = j[:, None] + np.arange(lead, lead + 10, 2)[None, :]
        ok = (k[:, 0] >= 0) & (k[:, -1] < n_u)
        kk = np.clip(k, 0, n_u - 1)
        ok &= np.all(first[kk], axis=1)
        d4 = h[:, kk[:, 0]] - 4 * h[:, kk[:, 1]] + 6 * h[:, kk[:, 2]] - 4 * h[:, kk[:, 3]] \
            + h[:, kk[:, 4]]
        d4 = np.where(ok[None, :], np.abs(d4), np.nan)
        err = np.fmax(err, (3.0 / 128.0) * d4)
    return value, err


def _column_entropies(predictor, col_times, n_grid, used, extra, jit2, interpolate):
    """Mixture entropies [bits] (n_opt, n_u) at the used columns, NaN where not wanted.

    col_times : prediction times of all columns (the first `n_grid` are the grid's own).
    """
    wanted = np.isfinite(extra)

    def evaluate(cols):
        v = predictor.velocities(col_times[used[cols]])
        return mixture_entropy_bits(v, jit2[:, None], extra[:, cols])

    h = np.full(extra.shape, np.nan)
    if not interpolate or used.size < 7:
        h[:] = evaluate(np.arange(used.size))
        return h
    first, fill = _fill_plan(used, n_grid, wanted)
    cols = np.flatnonzero(first)
    h[:, cols] = evaluate(cols)
    j = np.flatnonzero(fill)
    if j.size:
        value, err = _midpoint(h, j, first)
        # A column is filled only where every option it is wanted by passes the error check,
        # and no column within _GUARD columns fails it: a curve that changes on the scale of
        # the grid step (periastron of an eccentric short-period orbit) can pass one check by
        # chance, but not every check around it.
        good = np.all(~wanted[:, j] | (err <= INTERPOLATION_TOLERANCE_BITS), axis=0)
        bad = np.zeros(used.size)
        bad[j[~good]] = 1.0
        near_bad = np.convolve(bad, np.ones(2 * _GUARD + 1), mode="same") > 0
        good &= ~near_bad[j]
        h[:, j[good]] = np.where(wanted[:, j[good]], value[:, good], np.nan)
        late = j[~good]
        if late.size:
            h[:, late] = evaluate(late)
    return h


def build_curve(predictor, bjd, sigma_meas, observable, exposures_s, *, times_jd=None,
                target="", weight=1.0, interpolate=True):
    """One star's information curve over a run's grid, for every exposure option.

    Parameters
    ----------
    predictor : planner.information.predict.Predictor
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
    interpolate : bool, optional
        Fill in every other grid time by the cubic midpoint rule where its error bound stays
        below ``INTERPOLATION_TOLERANCE_BITS`` (see the module docstring); False evaluates the
        entropy at every observable start.

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
        where = np.searchsorted(used, np.where(col >= 0, col, used[0]))
        extra = np.full((n_opt, used.size), np.nan)
        o_idx, t_idx = np.nonzero(col >= 0)
        extra[o_idx, where[o_idx, t_idx]] = sig[o_idx, t_idx] ** 2
        jit2 = predictor.jitter**2
        h = _column_entropies(predictor, col_times, n_t, used, extra, jit2, interpolate)
        noise = _mean_noise_entropy_bits(jit2, sig[o_idx, t_idx] ** 2)
        bits[o_idx, t_idx] = np.maximum(h[o_idx, where[o_idx, t_idx]] - noise, 0.0)
        pred_t[o_idx, t_idx] = col_times[col[o_idx, t_idx]]
    grid = t if times_jd is None else np.asarray(times_jd, dtype=float)
    return InformationCurve(str(target), grid.copy(), exp_s, sig, bits, pred_t, float(weight))
