"""The run grid behind a :class:`~planner.allocation.problem.Problem`, for starts off the grid.

The strategies choose among candidate visits whose exposures start on the run grid (5 minutes
on the demo). Packing (:mod:`planner.allocation.packing`) moves exposures to the second, as
soon as the slew and overheads after the previous one allow, and needs the value and geometry
of a visit at any instant. A :class:`Timeline` keeps the per-target grid arrays the problem was
built from and interpolates them linearly between neighbouring grid times of one night.

An exposure starting at ``t`` between grid times ``t_k`` and ``t_k+1`` is *allowed* when the
exposures starting at both are: the union of those two exposures covers ``[t, t + T]``, so
every instant the observability mask checked for them (altitude, airmass and Moon limits at
the grid times through the end, dark window, blackouts and reserved blocks) also covers this
one. Fixed windows, must-do windows, blackouts and the dark window are rechecked exactly by
the packer.
"""

from __future__ import annotations

import bisect
import math
from dataclasses import dataclass, fields
from functools import cached_property

import numpy as np

__all__ = ["Timeline"]

MINUTES_PER_DAY = 1440.0


@dataclass(frozen=True, eq=False)
class Timeline:
    """Per-target run-grid arrays of a problem (read-only).

    Attributes
    ----------
    times_jd : ndarray, shape (n_times,)
        Run grid, JD UTC [d].
    night_index : ndarray of int, shape (n_times,)
        Night of each grid time (negative: none).
    grid_min : ndarray of int, shape (n_times,)
        Each grid time on the solver clock [min].
    allowed : ndarray of bool, shape (n_options, n_targets, n_times)
        Where an exposure of that option may start on the grid (every sky limit, the dark
        window, blackouts, reserved blocks and the target's fixed windows).
    bits, sigma : ndarray, shape (n_options, n_targets, n_times)
        One-visit expected bits [bit] and measurement noise [m/s] of a start there.
    airmass, altitude_deg, azimuth_deg, bjd_tdb : ndarray, shape (n_targets, n_times)
        Airmass, altitude [deg], azimuth [deg] and BJD_TDB [d] of each target on the grid.
    exposure_s : ndarray, shape (n_options,)
        Exposure time of each option [s].
    """

    times_jd: np.ndarray
    night_index: np.ndarray
    grid_min: np.ndarray
    allowed: np.ndarray
    bits: np.ndarray
    sigma: np.ndarray
    airmass: np.ndarray
    altitude_deg: np.ndarray
    azimuth_deg: np.ndarray
    bjd_tdb: np.ndarray
    exposure_s: np.ndarray

    def __post_init__(self) -> None:
        for field_ in fields(self):
            value = np.array(getattr(self, field_.name))
            value.flags.writeable = False
            object.__setattr__(self, field_.name, value)

    @cached_property
    def _times(self) -> list:
        """Grid times as a plain list, for the scalar lookups the packer makes by the thousand."""
        return self.times_jd.tolist()

    @cached_property
    def _nights(self) -> list:
        return self.night_index.tolist()

    def _bracket1(self, t: float) -> tuple[int, float]:
        """:meth:`bracket` of one time, without numpy's per-call overhead."""
        times = self._times
        k = min(max(bisect.bisect_right(times, t + 1e-11) - 1, 0), len(times) - 2)
        step = times[k + 1] - times[k]
        w = min(max((t - times[k]) / step, 0.0), 1.0)
        return k, (0.0 if w * step * 86400.0 < 1e-6 else w)

    def allowed1(self, option: int, target: int, t_jd: float) -> bool:
        """:meth:`allowed_at` of one start."""
        k, w = self._bracket1(t_jd)
        row = self.allowed[option, target]
        if not row[k]:
            return False
        return w == 0.0 or (self._nights[k + 1] == self._nights[k] and bool(row[k + 1]))

    def position1(self, target: int, t_jd: float) -> tuple[float, float]:
        """Altitude and azimuth [deg] of one target at one time."""
        k, w = self._bracket1(t_jd)
        alt = (1 - w) * self.altitude_deg[target, k] + w * self.altitude_deg[target, k + 1]
        z0 = math.radians(self.azimuth_deg[target, k])
        z1 = math.radians(self.azimuth_deg[target, k + 1])
        sin = (1 - w) * math.sin(z0) + w * math.sin(z1)
        cos = (1 - w) * math.cos(z0) + w * math.cos(z1)
        return float(alt), math.degrees(math.atan2(sin, cos)) % 360.0

    def sample1(self, option: int, target: int, t_jd: float) -> dict:
        """:meth:`sample` of one start, as floats."""
        exp_d = float(self.exposure_s[option]) / 86400.0
        k, w = self._bracket1(t_jd)
        out = {"bits": float((1 - w) * self.bits[option, target, k]
                             + w * self.bits[option, target, k + 1]),
               "sigma": float((1 - w) * self.sigma[option, target, k]
                              + w * self.sigma[option, target, k + 1])}
        out["alt_start"], out["az_start"] = self.position1(target, t_jd)
        out["alt_end"], out["az_end"] = self.position1(target, t_jd + exp_d)
        km, wm = self._bracket1(t_jd + 0.5 * exp_d)
        out["airmass"] = float((1 - wm) * self.airmass[target, km]
                               + wm * self.airmass[target, km + 1])
        out["bjd_mid"] = float((1 - wm) * self.bjd_tdb[target, km]
                               + wm * self.bjd_tdb[target, km + 1])
        return out

    def bracket(self, t_jd) -> tuple[np.ndarray, np.ndarray]:
        """Grid index at or before each time and the fraction of a step past it.

        Returns
        -------
        k : ndarray of int
            Index with ``times_jd[k] <= t < times_jd[k + 1]`` (clipped to the grid).
        w : ndarray
            ``(t - times_jd[k]) / step`` in [0, 1); 0 within a microsecond of a grid time.
        """
        t = np.asarray(t_jd, dtype=float)
        n = self.times_jd.size
        k = np.clip(np.searchsorted(self.times_jd, t + 1e-11, side="right") - 1, 0, n - 2)
        step = self.times_jd[k + 1] - self.times_jd[k]
        w = np.clip((t - self.times_jd[k]) / step, 0.0, 1.0)
        w = np.where(w * step * 86400.0 < 1e-6, 0.0, w)
        return k, w

    def allowed_at(self, option, target, t_jd) -> np.ndarray:
        """Return True where an exposure of (option, target) may start at ``t_jd`` (broadcast)."""
        o, s, t = np.broadcast_arrays(np.asarray(option), np.asarray(target),
                                      np.asarray(t_jd, dtype=float))
        k, w = self.bracket(t)
        here = self.allowed[o, s, k]
        on_grid = w == 0.0
        same = self.night_index[k + 1] == self.night_index[k]
        return here & (on_grid | (same & self.allowed[o, s, k + 1]))

    def next_allowed(self, option: int, target: int, t_jd: float) -> float:
        """Earliest instant at or after ``t_jd`` at which a start is allowed (inf: none)."""
        if self.allowed1(option, target, t_jd):
            return float(t_jd)
        k, _ = self._bracket1(t_jd)
        later = np.flatnonzero(self.allowed[option, target, int(k) + 1:])
        if later.size == 0:
            return float("inf")
        return float(self.times_jd[int(k) + 1 + later[0]])

    def last_allowed(self, option: int, target: int, t_jd: float) -> float:
        """Latest instant at or before ``t_jd`` at which a start is allowed (-inf: none)."""
        if self.allowed1(option, target, t_jd):
            return float(t_jd)
        k, _ = self._bracket1(t_jd)
        row = self.allowed[option, target, :int(k) + 1]
        earlier = np.flatnonzero(row)
        if earlier.size == 0:
            return float("-inf")
        return float(self.times_jd[int(earlier[-1])])

    def sample(self, option, target, t_jd) -> dict:
        """Candidate fields of exposures starting at ``t_jd`` (arrays, broadcast).

        Returns
        -------
        dict
            ``start`` (minute of the solver clock the start falls in), ``bits``, ``sigma``,
            ``airmass`` (mid-exposure), ``alt_start``, ``az_start``, ``alt_end``, ``az_end``
            [deg] and ``bjd_mid`` [d], each interpolated linearly between grid times.
        """
        o, s, t = np.broadcast_arrays(np.asarray(option), np.asarray(target),
                                      np.asarray(t_jd, dtype=float))
        exp_d = self.exposure_s[o] / 86400.0
        k, w = self.bracket(t)
        out = {
            "start": (self.grid_min[k] + np.floor((t - self.times_jd[k]) * MINUTES_PER_DAY
                                                  + 1e-6)).astype(np.int64),
            "bits": (1 - w) * self.bits[o, s, k] + w * self.bits[o, s, k + 1],
            "sigma": (1 - w) * self.sigma[o, s, k] + w * self.sigma[o, s, k + 1],
        }
        out["alt_start"], out["az_start"] = self._position(s, t)
        out["alt_end"], out["az_end"] = self._position(s, t + exp_d)
        km, wm = self.bracket(t + 0.5 * exp_d)
        out["airmass"] = (1 - wm) * self.airmass[s, km] + wm * self.airmass[s, km + 1]
        out["bjd_mid"] = (1 - wm) * self.bjd_tdb[s, km] + wm * self.bjd_tdb[s, km + 1]
        return out

    def _position(self, s, t):
        """Altitude and azimuth [deg] of targets ``s`` at times ``t``."""
        k, w = self.bracket(t)
        alt = (1 - w) * self.altitude_deg[s, k] + w * self.altitude_deg[s, k + 1]
        z0, z1 = np.radians(self.azimuth_deg[s, k]), np.radians(self.azimuth_deg[s, k + 1])
        sin = (1 - w) * np.sin(z0) + w * np.sin(z1)
        cos = (1 - w) * np.cos(z0) + w * np.cos(z1)
        return alt, np.degrees(np.arctan2(sin, cos)) % 360.0
