"""Observing limits and the mask of grid times at which an exposure may start.

An exposure of length ``T`` may start at grid time ``t_i`` of a night when

* it ends inside the dark window: ``t_i + T <= dark_end`` (and ``t_i >= dark_start``);
* at every grid time from ``t_i`` through the first grid time at or after
  ``t_i + T``, the target is within the site's altitude limits, at or below its
  airmass limit, and far enough from the Moon (the required separation is read
  from a table by the Moon's illuminated fraction; no separation is required while
  the Moon's centre is below the horizon);
* the interval ``[t_i, t_i + T]`` overlaps no blackout window and, if the target
  has allowed windows, lies wholly inside one of them (these two are exact, not
  gridded).

Checking the grid time at or after the end makes the mask slightly conservative:
an exposure can be refused when only the last fraction of a step would breach a
limit. The defaults here are starting points; the observatory's own rules on
pointing limits, Moon, wind and dome come first.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from planner.errors import ScenarioError
from planner.sky.tracks import Sky

__all__ = [
    "Constraints",
    "DEFAULT_MOON_TABLE",
    "binding_constraints",
    "instantaneous_ok",
    "observable_hours",
    "observable_starts",
]

logger = logging.getLogger(__name__)

#: (max illumination, min separation [deg]) rows: a common-practice default for fibre-fed
#: RV spectrographs, chosen by us, not taken from a published rule; replace it by your own.
DEFAULT_MOON_TABLE: tuple[tuple[float, float], ...] = ((0.25, 15.0), (0.6, 25.0), (1.0, 35.0))


@dataclass(frozen=True)
class Constraints:
    """Limits every exposure must respect (besides the site's altitude limits).

    Attributes
    ----------
    max_airmass : float or tuple of float
        Largest airmass, one value or one per target.
    moon_table : tuple of (float, float)
        Rows ``(max_illumination, min_separation_deg)`` with increasing illumination,
        the last row at 1.0: the first row whose illumination is not exceeded gives
        the required separation from the Moon [deg].
    blackouts : tuple of (float, float)
        Time ranges closed to this program, JD UTC pairs (calibrations, other programs).
    target_windows : tuple, optional
        Per target, ``None`` (any time) or a tuple of allowed ``(start_jd, end_jd)``.
    """

    max_airmass: float | tuple[float, ...] = 2.0
    moon_table: tuple[tuple[float, float], ...] = DEFAULT_MOON_TABLE
    blackouts: tuple[tuple[float, float], ...] = ()
    target_windows: tuple[tuple[tuple[float, float], ...] | None, ...] | None = None

    def __post_init__(self) -> None:
        limits = np.atleast_1d(np.asarray(self.max_airmass, dtype=float))
        if not np.all(np.isfinite(limits) & (limits >= 1.0)):
            raise ScenarioError(
                f"Constraints: max_airmass {self.max_airmass!r} must be at least 1 (1 is the "
                "zenith); raise it."
            )
        rows = tuple(tuple(map(float, r)) for r in self.moon_table)
        ill = [r[0] for r in rows]
        if (
            not rows
            or any(len(r) != 2 for r in rows)
            or ill != sorted(ill)
            or not math.isclose(ill[-1], 1.0)
            or any(not 0.0 <= r[1] <= 180.0 for r in rows)
        ):
            raise ScenarioError(
                f"Constraints: moon_table {self.moon_table!r} needs rows (max_illumination, "
                "min_separation_deg) with increasing illumination ending at 1.0 and separations "
                "in [0, 180]."
            )
        for a, b in tuple(self.blackouts) + _all_windows(self.target_windows):
            if not (math.isfinite(a) and math.isfinite(b) and a < b):
                raise ScenarioError(
                    f"Constraints: time window ({a!r}, {b!r}) must be two finite JDs with start "
                    "before end."
                )

    def airmass_limits(self, n_targets: int) -> NDArray[np.float64]:
        """Return the airmass limit of each target, shape (n_targets,)."""
        limits = np.atleast_1d(np.asarray(self.max_airmass, dtype=float))
        if limits.size == 1:
            return np.full(n_targets, limits[0])
        if limits.size != n_targets:
            raise ScenarioError(
                f"Constraints: {limits.size} airmass limits given for {n_targets} targets; give "
                "one value or one per target."
            )
        return limits

    def min_moon_separation(self, illumination: ArrayLike) -> NDArray[np.float64]:
        """Return the required Moon separation [deg] at each illuminated fraction."""
        ill = np.asarray(illumination, dtype=float)
        edges = np.array([r[0] for r in self.moon_table])
        seps = np.array([r[1] for r in self.moon_table])
        return seps[np.minimum(np.searchsorted(edges, ill, side="left"), len(seps) - 1)]


def _all_windows(target_windows) -> tuple[tuple[float, float], ...]:
    if target_windows is None:
        return ()
    return tuple(w for wins in target_windows if wins is not None for w in wins)


def _limit_masks(sky: Sky, constraints: Constraints) -> dict[str, NDArray[np.bool_]]:
    site = sky.site
    alt = sky.altitude_deg
    limits = constraints.airmass_limits(sky.n_targets)
    need = constraints.min_moon_separation(sky.moon_illumination)
    return {
        "altitude": (alt >= site.min_altitude_deg) & (alt <= site.max_altitude_deg),
        "airmass": sky.airmass <= limits[:, None],
        "moon": (sky.moon_altitude_deg <= 0.0)[None, :]
        | (sky.moon_separation_deg >= need[None, :]),
    }


def instantaneous_ok(sky: Sky, constraints: Constraints) -> NDArray[np.bool_]:
    """Return where the altitude, airmass and Moon limits hold, shape (n_targets, n_times)."""
    masks = _limit_masks(sky, constraints)
    return masks["altitude"] & masks["airmass"] & masks["moon"]


def _dark_end(sky: Sky) -> NDArray[np.float64]:
    return np.array([n.dark_end_jd for n in sky.nights])[sky.night_index]


def _starts_from_mask(sky: Sky, ok, constraints: Constraints, exposure_s) -> NDArray[np.bool_]:
    n_targets, n_times = ok.shape
    exp = np.broadcast_to(np.asarray(exposure_s, dtype=float), (n_targets,))
    if not np.all(np.isfinite(exp) & (exp >= 0.0)):
        raise ScenarioError(f"observable_starts: exposure_s {exposure_s!r} must be >= 0 seconds.")
    m = np.ceil(exp / sky.step_s - 1e-9).astype(np.int64)
    cs = np.concatenate([np.zeros((n_targets, 1), np.int64), np.cumsum(~ok, axis=1)], axis=1)
    stop = np.minimum(np.arange(n_times)[None, :] + m[:, None] + 1, n_times)
    clean = (np.take_along_axis(cs, stop, axis=1) - cs[:, :-1]) == 0
    t0 = sky.times_jd[None, :]
    t1 = t0 + exp[:, None] / 86400.0
    inside = t1 <= _dark_end(sky)[None, :] + 1e-9
    same_night = sky.night_index[stop - 1] == sky.night_index[None, :]
    result = clean & inside & same_night
    for a, b in constraints.blackouts:
        result &= ~((t0 < b) & (t1 > a))
    if constraints.target_windows is not None:
        if len(constraints.target_windows) != n_targets:
            raise ScenarioError(
                f"Constraints: target_windows has {len(constraints.target_windows)} entries for "
                f"{n_targets} targets; give one entry (None or windows) per target."
            )
        for k, wins in enumerate(constraints.target_windows):
            if wins is None:
                continue
            allowed = np.zeros(n_times, dtype=bool)
            for a, b in wins:
                allowed |= (t0[0] >= a) & (t1[k] <= b)
            result[k] &= allowed
    return result


def observable_starts(sky: Sky, constraints: Constraints, exposure_s) -> NDArray[np.bool_]:
    """Return where an exposure may start, shape (n_targets, n_times).

    Parameters
    ----------
    sky : Sky
    constraints : Constraints
    exposure_s : float or array_like, shape (n_targets,)
        Exposure length [s] (shutter open to shutter closed).

    Returns
    -------
    ndarray of bool, shape (n_targets, n_times)
        True where an exposure starting at that grid time lies wholly inside the
        dark window and every limit (see the module docstring).
    """
    return _starts_from_mask(sky, instantaneous_ok(sky, constraints), constraints, exposure_s)


def observable_hours(sky: Sky, constraints: Constraints, exposure_s=0.0) -> NDArray[np.float64]:
    """Return each target's observable hours per night, shape (n_targets, n_nights).

    Counts grid steps whose start is observable for ``exposure_s`` (0 gives the
    time during which the target itself satisfies every limit) [h].
    """
    starts = observable_starts(sky, constraints, exposure_s)
    hours = np.zeros((sky.n_targets, len(sky.nights)))
    np.add.at(hours.T, sky.night_index, starts.T * (sky.step_s / 3600.0))
    return hours


def binding_constraints(
    sky: Sky, constraints: Constraints, exposure_s=0.0
) -> tuple[str | None, ...]:
    """Explain, for each target never observable, which limit keeps it out.

    Returns
    -------
    tuple of (str or None), length n_targets
        ``None`` for a target observable at some time; otherwise one sentence
        naming the binding limit (also logged as a warning).
    """
    masks = _limit_masks(sky, constraints)
    dark = sky.times_jd <= _dark_end(sky)
    starts = observable_starts(sky, constraints, exposure_s)
    open_time = _starts_from_mask(sky, np.ones_like(starts), constraints, np.zeros(sky.n_targets))
    limits = constraints.airmass_limits(sky.n_targets)
    site = sky.site
    out: list[str | None] = []
    for k, name in enumerate(sky.names):
        if starts[k].any():
            out.append(None)
            continue
        alone = [key for key, mask in masks.items() if not (mask[k] & dark).any()]
        both = masks["altitude"][k] & masks["airmass"][k] & masks["moon"][k] & dark
        if not open_time[k].any():
            why = "the blackout windows and its own allowed windows leave no dark time"
        elif "altitude" in alone:
            best = sky.altitude_deg[k][dark].max()
            why = (
                f"it never stands between {site.min_altitude_deg:g} and {site.max_altitude_deg:g} "
                f"deg altitude during the dark windows (highest {best:.1f} deg)"
            )
        elif "airmass" in alone:
            why = (
                f"its airmass never gets down to the limit {limits[k]:g} during the dark windows "
                f"(lowest {sky.airmass[k][dark].min():.2f})"
            )
        elif "moon" in alone:
            why = "the Moon is always closer than the required separation while it is dark"
        elif not (both & (open_time[k])).any():
            why = "the altitude, airmass and Moon limits are never met together outside blackouts"
        else:
            why = f"no stretch of {float(np.max(exposure_s)):g} s meets every limit throughout"
        sentence = (
            f"Target {name!r} is never observable in this run: {why}; relax that limit or drop "
            "the target."
        )
        logger.warning(sentence)
        out.append(sentence)
    return tuple(out)
