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
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import ArrayLike, NDArray

from planner.errors import ScenarioError
from planner.sky.tracks import Sky

__all__ = [
    "Constraints",
    "DEFAULT_MOON_TABLE",
    "Exclusion",
    "LIMIT_WORDS",
    "binding_constraints",
    "blocking_limits",
    "instantaneous_ok",
    "observable_hours",
    "never_observable",
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


#: The limits that can keep a target out, as keys, and the words the reports use for them.
#: ``dark_time``: the dark windows less blackouts and lost time; ``window``: the target's own
#: allowed windows; then the three sky limits.
LIMIT_WORDS: dict[str, str] = {"dark_time": "dark time", "window": "window",
                               "altitude": "altitude", "airmass": "airmass", "moon": "Moon"}
_SKY_LIMITS = ("altitude", "airmass", "moon")


@dataclass(frozen=True)
class Exclusion:
    """Why a target can never be observed in the run.

    Attributes
    ----------
    target : str
        Target name.
    index : int
        Its index in the sky's targets.
    limit : str
        The binding limit, a key of :data:`LIMIT_WORDS`, or several joined by ``+`` when
        relaxing any one of them would let the target in (``altitude+moon``).
    reason : str
        What keeps it out, with the numbers (``its airmass never gets down to the limit 1.5
        during the dark windows (lowest 1.62)``).
    """

    target: str
    index: int
    limit: str
    reason: str

    @property
    def sentence(self) -> str:
        """The one sentence for the user: what, why, and how to fix it."""
        return (f"Target {self.target!r} is never observable in this run: {self.reason}; relax "
                "that limit or drop the target.")


def _relaxed_starts(sky: Sky, constraints: Constraints, exposure_s, drop) -> NDArray[np.bool_]:
    """Observable starts with the limits named in ``drop`` switched off."""
    masks = _limit_masks(sky, constraints)
    ok = np.ones(sky.altitude_deg.shape, dtype=bool)
    for key, mask in masks.items():
        if key not in drop:
            ok &= mask
    if "window" in drop:
        constraints = replace(constraints, target_windows=None)
    return _starts_from_mask(sky, ok, constraints, exposure_s)


def _any(starts: NDArray[np.bool_], sky: Sky, per_night: bool) -> NDArray[np.bool_]:
    if not per_night:
        return starts.any(axis=1)[:, None]
    counts = np.zeros((starts.shape[0], len(sky.nights)), dtype=np.int64)
    np.add.at(counts.T, sky.night_index, starts.T.astype(np.int64))
    return counts > 0


def blocking_limits(sky: Sky, constraints: Constraints, exposure_s,
                    per_night: bool = False) -> NDArray[np.object_]:
    """Name the limit that keeps each target out, over the run or per night.

    Parameters
    ----------
    sky : Sky
    constraints : Constraints
    exposure_s : float or array_like, shape (n_targets,)
        Exposure length [s] (each target's shortest, to ask whether it can be observed at all).
    per_night : bool
        One answer per night instead of one for the whole run.

    Returns
    -------
    ndarray of str, shape (n_targets,) or (n_targets, n_nights)
        ``""`` where an exposure can start; otherwise the key of :data:`LIMIT_WORDS` that keeps
        the target out, in this order of precedence: ``dark_time`` (no dark stretch long enough
        outside blackouts and lost time), ``window`` (its own windows hold none), then the first
        of ``altitude``, ``airmass``, ``moon`` that alone is never met; failing those, the
        limits whose relaxation alone would let it in, joined by ``+`` (all of them when no
        single relaxation would).

    Notes
    -----
    Each answer is found by switching limits off one at a time on the same gridded mask as
    :func:`observable_starts`, so a name given here is a limit whose relaxation changes the
    planner's own answer.
    """
    n = sky.n_targets
    exp = np.broadcast_to(np.asarray(exposure_s, dtype=float), (n,))
    every = ("window",) + _SKY_LIMITS
    shape = (n, len(sky.nights)) if per_night else (n, 1)
    out = np.full(shape, "", dtype=object)
    decided = np.zeros(shape, dtype=bool)

    def settle(open_, name):
        nonlocal decided
        hit = ~open_ & ~decided
        out[hit] = name
        decided |= hit

    full = _any(_relaxed_starts(sky, constraints, exp, ()), sky, per_night)
    decided |= full
    settle(_any(_relaxed_starts(sky, constraints, exp, every), sky, per_night), "dark_time")
    settle(_any(_relaxed_starts(sky, constraints, exp, _SKY_LIMITS), sky, per_night), "window")
    for key in _SKY_LIMITS:
        alone = tuple(k for k in _SKY_LIMITS if k != key)
        settle(_any(_relaxed_starts(sky, constraints, exp, alone), sky, per_night), key)
    if not decided.all():
        opened = {key: _any(_relaxed_starts(sky, constraints, exp, (key,)), sky, per_night)
                  for key in every}
        for idx in zip(*np.nonzero(~decided), strict=True):
            names = [key for key in every if opened[key][idx]] or list(_SKY_LIMITS)
            out[idx] = "+".join(names)
    return out if per_night else out[:, 0]


def never_observable(sky: Sky, constraints: Constraints,
                     exposure_s=0.0) -> tuple[Exclusion | None, ...]:
    """Explain, for each target never observable, which limit keeps it out.

    Parameters
    ----------
    sky : Sky
    constraints : Constraints
    exposure_s : float or array_like, shape (n_targets,)
        Exposure length [s]; give each target's shortest option.

    Returns
    -------
    tuple of (Exclusion or None), length n_targets
        ``None`` for a target observable at some time.
    """
    n = sky.n_targets
    exp = np.broadcast_to(np.asarray(exposure_s, dtype=float), (n,))
    limits = blocking_limits(sky, constraints, exp)
    dark = sky.times_jd <= _dark_end(sky)
    airmass_limits = constraints.airmass_limits(n)
    need = constraints.min_moon_separation(sky.moon_illumination)
    site = sky.site
    out: list[Exclusion | None] = []
    for k, name in enumerate(sky.names):
        limit = limits[k]
        if not limit:
            out.append(None)
            continue
        if limit == "dark_time":
            why = (f"the blackouts and lost time leave no dark stretch of {exp[k]:g} s")
        elif limit == "window":
            why = (f"its own allowed windows hold no dark stretch of {exp[k]:g} s outside the "
                   "blackouts")
        elif limit == "altitude":
            why = (f"it never stands between {site.min_altitude_deg:g} and "
                   f"{site.max_altitude_deg:g} deg altitude during the dark windows (highest "
                   f"{sky.altitude_deg[k][dark].max():.1f} deg)")
        elif limit == "airmass":
            why = (f"its airmass never gets down to the limit {airmass_limits[k]:g} during the "
                   f"dark windows (lowest {sky.airmass[k][dark].min():.2f})")
        elif limit == "moon":
            up = dark & (sky.moon_altitude_deg > 0.0)
            margin = np.where(up, sky.moon_separation_deg[k] - need, -np.inf)
            i = int(np.argmax(margin))
            why = (f"the Moon is always closer than the required separation while it is dark "
                   f"(at best {sky.moon_separation_deg[k, i]:.1f} deg from it, {need[i]:g} deg "
                   "needed)")
        else:
            words = [LIMIT_WORDS[key] for key in limit.split("+")]
            if len(words) == 1:
                why = (f"no stretch of {exp[k]:g} s meets the {words[0]} limit together with "
                       "the others (relaxing it would let the target in)")
            else:
                why = (f"no stretch of {exp[k]:g} s meets the {' and '.join(words)} limits "
                       "together (relaxing any one of them would let the target in)")
        logger.info("target %r never observable: %s", name, why)
        out.append(Exclusion(target=name, index=k, limit=limit, reason=why))
    return tuple(out)


def binding_constraints(
    sky: Sky, constraints: Constraints, exposure_s=0.0
) -> tuple[str | None, ...]:
    """Return the sentence of each target never observable (:func:`never_observable`), else None."""
    return tuple(None if e is None else e.sentence
                 for e in never_observable(sky, constraints, exposure_s))
