"""Candidate visits on the integer solver clock: the :class:`Problem` every strategy solves.

The solver clock counts whole minutes from ``Problem.epoch_jd`` (the first grid time); inside a
night, differences on it are exact because the run grid's step is a whole number of minutes. A
candidate visit is one target, one exposure option and one fixed start on the run grid; its
exposure occupies ``duration`` minutes (the exposure rounded up to the minute) and the telescope
needs ``changeover_min(i, j)`` minutes between the end of candidate ``i`` and the start of
``j``: the slew from where ``i`` ends to where ``j`` starts plus the per-visit overhead plus a
small safety margin, rounded up to the minute. Because starts are fixed, every slew between two
candidates is known exactly before solving, so strategies can respect it pairwise.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, fields

import numpy as np

from planner.allocation.rules import TargetRules, validate_rules
from planner.allocation.timeline import Timeline
from planner.errors import PlanError

__all__ = ["Problem", "build_problem", "mount_slew", "problem_from_sky"]

MINUTES_PER_DAY = 1440.0
_PER_CANDIDATE = ("target", "night", "option", "start", "start_jd_grid", "duration", "bits",
                  "sigma", "airmass", "alt_start", "az_start", "alt_end", "az_end", "bjd_mid")

#: A slew model: (alt1, az1, alt2, az2) in degrees, broadcasting, to slew seconds.
SlewModel = Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]


@dataclass(frozen=True, eq=False)
class Problem:
    """Candidate visits and rules of one allocation, on the integer-minute clock.

    Attributes
    ----------
    epoch_jd : float
        JD (UTC) of minute 0 of the solver clock.
    step_min : int
        Spacing of the run grid the candidate starts come from [min].
    target_names : tuple of str, length n_targets
        Target names, in input order.
    rules : tuple of TargetRules, length n_targets
        Per-target rules.
    night_dates : tuple of str, length n_nights
        Night names (local evening date, ``YYYY-MM-DD``).
    dark_jd : ndarray, shape (n_nights, 2)
        Dark window of each night, start and end, JD UTC [d]; exposures lie inside.
    dark_min : ndarray of int, shape (n_nights, 2)
        The same on the solver clock, rounded to the minute [min].
    exposure_s : ndarray, shape (n_options,)
        Exposure time of each option [s].
    default_option : int
        Option the cadence plan uses.
    overhead_s : float
        Per-visit overhead before each exposure (acquisition, readout of the previous one) [s].
    slew_margin_s : float
        Safety margin added to every slew before rounding up to the minute [s] (only with a slew
        model: it absorbs the interpolated end positions).
    slew : callable or None
        Slew model ``(alt1, az1, alt2, az2) -> seconds`` (degrees, broadcasting); None: no slews,
        only the overhead.
    reserved_jd : ndarray, shape (n_reserved, 2)
        Blocks when the telescope is not ours, JD UTC [d]; no exposure or overhead overlaps them.
    target, night, option : ndarray of int, shape (n_candidates,)
        Target, night and exposure-option index of each candidate.
    start : ndarray of int, shape (n_candidates,)
        Exposure start of each candidate [min on the solver clock]; exact differences inside a
        night.
    start_jd_grid : ndarray, shape (n_candidates,)
        Exact exposure start (the grid time it came from), JD UTC [d].
    duration : ndarray of int, shape (n_candidates,)
        Exposure length rounded up to the minute [min].
    bits : ndarray, shape (n_candidates,)
        Expected information of the candidate alone, unweighted [bit].
    sigma : ndarray, shape (n_candidates,)
        Measurement noise of the candidate, without stellar jitter [m/s].
    airmass : ndarray, shape (n_candidates,)
        Airmass at mid-exposure.
    alt_start, az_start, alt_end, az_end : ndarray, shape (n_candidates,)
        Telescope position at the exposure's start and end [deg].
    bjd_mid : ndarray, shape (n_candidates,)
        Mid-exposure barycentric time of the target, BJD_TDB [d].
    timeline : Timeline or None
        The grid arrays the candidates came from, for starts off the grid (packing); candidates
        added by :func:`planner.allocation.packing.extend_problem` start off the grid
        (``start_jd_grid`` exact, ``start`` the minute it falls in).
    """

    epoch_jd: float
    step_min: int
    target_names: tuple[str, ...]
    rules: tuple[TargetRules, ...]
    night_dates: tuple[str, ...]
    dark_jd: np.ndarray
    dark_min: np.ndarray
    exposure_s: np.ndarray
    default_option: int
    overhead_s: float
    slew_margin_s: float
    slew: SlewModel | None
    reserved_jd: np.ndarray
    target: np.ndarray
    night: np.ndarray
    option: np.ndarray
    start: np.ndarray
    start_jd_grid: np.ndarray
    duration: np.ndarray
    bits: np.ndarray
    sigma: np.ndarray
    airmass: np.ndarray
    alt_start: np.ndarray
    az_start: np.ndarray
    alt_end: np.ndarray
    az_end: np.ndarray
    bjd_mid: np.ndarray
    timeline: Timeline | None = None

    def __post_init__(self) -> None:
        # The record is immutable, its arrays too: caches keyed on a Problem (the largest slew
        # changeover in planner.allocation.conflicts) rely on its content never changing.
        for field_ in fields(self):
            value = getattr(self, field_.name)
            if isinstance(value, np.ndarray) and value.flags.writeable:
                value = value.copy()  # the caller's array stays the caller's
                value.flags.writeable = False
                object.__setattr__(self, field_.name, value)

    @property
    def n_candidates(self) -> int:
        """Number of candidate visits."""
        return int(self.target.size)

    @property
    def n_targets(self) -> int:
        """Number of targets."""
        return len(self.target_names)

    @property
    def n_nights(self) -> int:
        """Number of nights."""
        return len(self.night_dates)

    @property
    def weights(self) -> np.ndarray:
        """Science weight of each target, shape (n_targets,)."""
        return np.array([r.weight for r in self.rules], dtype=float)

    @property
    def end(self) -> np.ndarray:
        """Exposure end of each candidate on the solver clock [min], shape (n_candidates,)."""
        return self.start + self.duration

    def start_jd(self, idx) -> np.ndarray:
        """Exact exposure start, JD UTC [d], of candidates ``idx``."""
        return self.start_jd_grid[idx]

    def end_jd(self, idx) -> np.ndarray:
        """Exact exposure end, JD UTC [d] (start plus the exposure time, not rounded)."""
        return self.start_jd(idx) + self.exposure_s[self.option[idx]] / 86400.0

    def slew_seconds(self, i, j) -> np.ndarray:
        """Slew plus overhead from the end of candidate ``i`` to the start of ``j`` [s].

        ``i`` and ``j`` broadcast. Without a slew model this is the overhead alone.
        """
        i, j = np.broadcast_arrays(np.asarray(i), np.asarray(j))
        if self.slew is None:
            return np.full(i.shape, float(self.overhead_s))
        moved = self.slew(self.alt_end[i], self.az_end[i], self.alt_start[j], self.az_start[j])
        return self.overhead_s + np.asarray(moved, dtype=float)

    def changeover_min(self, i, j) -> np.ndarray:
        """Whole minutes the telescope needs between the end of ``i`` and the start of ``j``."""
        return self.minutes(self.slew_seconds(i, j))

    def minutes(self, seconds) -> np.ndarray:
        """Whole minutes of a changeover of ``seconds`` (margin added, rounded up)."""
        total = np.asarray(seconds, dtype=float) + self._margin()
        return np.ceil(total / 60.0 - 1e-9).astype(np.int64)

    @property
    def min_changeover_min(self) -> int:
        """A lower bound on every changeover [min]: overhead and margin alone (slews >= 0)."""
        return int(math.ceil((self.overhead_s + self._margin()) / 60.0 - 1e-9))

    def _margin(self) -> float:
        return self.slew_margin_s if self.slew is not None else 0.0

    def restrict(self, idx) -> Problem:
        """Return the same problem restricted to candidates ``idx`` (in the given order)."""
        idx = np.asarray(idx, dtype=np.int64)
        per_candidate = {name: getattr(self, name)[idx] for name in _PER_CANDIDATE}
        return dataclasses.replace(self, **per_candidate)

    def lead_min(self) -> int:
        """Minutes before the first exposure of a night taken by its overhead."""
        return self.min_changeover_min


def _thin(values: np.ndarray, keep: int, spacing: int) -> np.ndarray:
    """Return up to ``keep`` indices of the largest values, no two within ``spacing``."""
    order = np.argsort(-values, kind="stable")
    chosen: list[int] = []
    for k in order:
        if all(abs(int(k) - c) >= spacing for c in chosen):
            chosen.append(int(k))
            if len(chosen) == keep:
                break
    return np.array(sorted(chosen), dtype=np.int64)


def _interp_position(alt, az, frac_index):
    """Altitude and azimuth [deg] at fractional grid positions, per target row."""
    n_times = alt.shape[1]
    lo = np.clip(np.floor(frac_index).astype(np.int64), 0, n_times - 1)
    hi = np.clip(lo + 1, 0, n_times - 1)
    w = np.clip(frac_index - lo, 0.0, 1.0)
    rows = np.arange(alt.shape[0])[:, None] if alt.ndim == 2 else None
    a = (1 - w) * alt[rows, lo] + w * alt[rows, hi]
    z0, z1 = np.radians(az[rows, lo]), np.radians(az[rows, hi])
    s = (1 - w) * np.sin(z0) + w * np.sin(z1)
    c = (1 - w) * np.cos(z0) + w * np.cos(z1)
    return a, np.degrees(np.arctan2(s, c)) % 360.0


def _inside_any(lo: np.ndarray, hi: np.ndarray, windows: np.ndarray) -> np.ndarray:
    if windows.size == 0:
        return np.ones(lo.shape, dtype=bool)
    return np.any((lo[..., None] >= windows[:, 0]) & (hi[..., None] <= windows[:, 1]), axis=-1)


def build_problem(
    *,
    times_jd: np.ndarray,
    night_index: np.ndarray,
    dark_jd: np.ndarray,
    night_dates: Sequence[str],
    target_names: Sequence[str],
    rules: Sequence[TargetRules],
    exposure_s: Sequence[float],
    observable: np.ndarray,
    bits: np.ndarray,
    sigma: np.ndarray,
    airmass: np.ndarray,
    altitude_deg: np.ndarray,
    azimuth_deg: np.ndarray,
    bjd_tdb: np.ndarray,
    slew: SlewModel | None = None,
    overhead_s: float = 0.0,
    reserved_jd: Sequence[tuple[float, float]] = (),
    default_option: int = 0,
    keep_per_night: int = 8,
    thin_spacing_min: int = 20,
    slew_margin_s: float = 5.0,
) -> Problem:
    """Build the candidate visits of a run from per-target grid arrays.

    Parameters
    ----------
    times_jd : ndarray, shape (n_times,)
        Run grid, JD UTC [d], increasing; inside each night spaced by whole minutes.
    night_index, dark_jd : ndarray, shapes (n_times,) and (n_nights, 2)
        Night of each grid time (negative: none) and each night's dark window, JD UTC [d].
    night_dates, target_names : sequence of str
        Night names (``YYYY-MM-DD``) and target names.
    rules : sequence of TargetRules, length n_targets
    exposure_s : sequence of float, length n_options
        Exposure time of each option [s].
    observable : ndarray of bool, shape (n_options, n_targets, n_times)
        True where an exposure of that option starting at that time lies inside every limit.
    bits, sigma : ndarray, shape (n_options, n_targets, n_times)
        One-visit expected information [bit] and measurement noise without jitter [m/s].
    airmass, altitude_deg, azimuth_deg, bjd_tdb : ndarray, shape (n_targets, n_times)
        Airmass, altitude [deg], azimuth [deg] and BJD_TDB [d] of each target on the grid.
    slew : callable or None
        Slew model ``(alt1, az1, alt2, az2) -> s`` in degrees; None: overhead only.
    overhead_s, slew_margin_s : float
        Per-visit overhead before each exposure, and the safety margin added to each slew
        before rounding up [s].
    reserved_jd : sequence of (float, float)
        Blocks when the telescope is not ours, JD UTC.
    default_option : int
        Option the cadence plan uses.
    keep_per_night, thin_spacing_min : int
        Starts kept per (target, night, option), the best by ``bits``, at least
        ``thin_spacing_min`` minutes apart.

    Returns
    -------
    Problem

    Raises
    ------
    PlanError
        If an input has the wrong shape or an impossible value.
    """
    times = np.asarray(times_jd, dtype=float)
    names = tuple(str(n) for n in target_names)
    exposure = np.asarray(exposure_s, dtype=float)
    night_index = np.asarray(night_index, dtype=np.int64)
    dark_jd = np.asarray(dark_jd, dtype=float).reshape(-1, 2)
    bits = np.asarray(bits, dtype=float)
    _check_inputs(times, night_index, names, rules, exposure, default_option, {
        "observable": observable, "bits": bits, "sigma": sigma, "airmass": airmass,
        "altitude_deg": altitude_deg, "azimuth_deg": azimuth_deg, "bjd_tdb": bjd_tdb})
    observable = np.asarray(observable, dtype=bool) & np.isfinite(bits)
    if np.any(bits[observable] < 0):
        raise PlanError("One-visit bits must be >= 0 wherever a start is observable.")
    epoch, step_min, grid_min = _solver_clock(times, night_index)
    reserved_jd = np.asarray(reserved_jd, dtype=float).reshape(-1, 2)
    allowed = _allowed_starts(times, night_index, dark_jd, exposure, observable, rules,
                              reserved_jd, overhead_s)
    spacing = max(1, int(math.ceil(thin_spacing_min / step_min)))
    tgt, nig, opt, tix = _kept_starts(times, night_index, grid_min, exposure, allowed, bits,
                                      rules, np.asarray(airmass, float), default_option,
                                      keep_per_night, spacing)
    am, bj = np.asarray(airmass, float), np.asarray(bjd_tdb, float)
    alt, az = np.asarray(altitude_deg, float), np.asarray(azimuth_deg, float)
    return Problem(
        epoch_jd=epoch, step_min=step_min, target_names=names, rules=tuple(rules),
        night_dates=tuple(str(d) for d in night_dates), dark_jd=dark_jd,
        dark_min=_dark_minutes(times, night_index, grid_min, dark_jd), exposure_s=exposure,
        default_option=int(default_option), overhead_s=float(overhead_s),
        slew_margin_s=float(slew_margin_s), slew=slew, reserved_jd=reserved_jd,
        **_candidate_fields(tgt, nig, opt, tix, grid_min, times, exposure, step_min, bits,
                            np.asarray(sigma, float), am, alt, az, bj),
        timeline=Timeline(times_jd=times, night_index=night_index, grid_min=grid_min,
                          allowed=allowed, bits=np.nan_to_num(bits),
                          sigma=np.asarray(sigma, float), airmass=am,
                          altitude_deg=alt, azimuth_deg=az, bjd_tdb=bj, exposure_s=exposure),
    )


def _candidate_fields(tgt, nig, opt, tix, grid_min, times, exposure, step_min, bits, sigma,
                      am, alt, az, bj) -> dict:
    """Per-candidate fields: start and length on the solver clock, values from the grid.

    Airmass and barycentric time are taken at mid-exposure, the position at the end, by
    linear interpolation between grid times.
    """
    duration = np.ceil(exposure / 60.0 - 1e-9).astype(np.int64)
    per_step = exposure[opt] / (60.0 * step_min)
    alt_end, az_end = _interp_position(alt[tgt], az[tgt], (tix + per_step)[:, None])
    frac_mid = tix + 0.5 * per_step
    mid_lo = np.clip(np.floor(frac_mid).astype(np.int64), 0, times.size - 1)
    mid_hi = np.clip(mid_lo + 1, 0, times.size - 1)
    w = np.clip(frac_mid - mid_lo, 0.0, 1.0)
    return dict(
        target=tgt, night=nig, option=opt, start=grid_min[tix], start_jd_grid=times[tix],
        duration=duration[opt], bits=bits[opt, tgt, tix], sigma=sigma[opt, tgt, tix],
        airmass=(1 - w) * am[tgt, mid_lo] + w * am[tgt, mid_hi],
        alt_start=alt[tgt, tix], az_start=az[tgt, tix],
        alt_end=alt_end[:, 0], az_end=az_end[:, 0],
        bjd_mid=(1 - w) * bj[tgt, mid_lo] + w * bj[tgt, mid_hi],
    )


def _check_inputs(times, night_index, names, rules, exposure, default_option, arrays) -> None:
    """Refuse wrong shapes and impossible values with one sentence."""
    n_times, n_opt, n_tgt = times.size, exposure.size, len(names)
    if n_times < 2 or night_index.shape != times.shape:
        raise PlanError("The run grid needs at least two times and one night index per time.")
    if len(rules) != n_tgt:
        raise PlanError(f"Got {len(rules)} rule records for {n_tgt} targets; give one per target.")
    for name, rule in zip(names, rules, strict=True):
        validate_rules(rule, name)
    for label, arr in arrays.items():
        shape = (n_opt, n_tgt, n_times) if label in ("observable", "bits", "sigma") else (
            n_tgt, n_times)
        if np.shape(arr) != shape:
            raise PlanError(f"{label} has shape {np.shape(arr)}; expected {shape}.")
    if not (0 <= default_option < n_opt):
        raise PlanError(f"default_option {default_option} is not one of the {n_opt} options.")
    if np.any(~np.isfinite(exposure)) or np.any(exposure <= 0):
        raise PlanError("Every exposure time must be a positive number of seconds.")


def _solver_clock(times, night_index):
    """Return the solver clock: epoch JD, grid step [min] and each grid time in minutes.

    Exact whole minutes inside each night (the grid step is whole minutes), each night's first
    grid time rounded to the minute from the epoch (nights never meet).
    """
    epoch = float(times[0])
    same = np.diff(night_index) == 0
    steps = np.diff(times)[same] * MINUTES_PER_DAY
    step_min = int(round(steps.min())) if steps.size else 1
    if step_min < 1 or np.any(np.abs(steps - np.rint(steps)) > 1e-3):
        raise PlanError("Grid times inside a night must be a whole number of minutes apart.")
    first = np.r_[True, ~same]
    night_first = np.maximum.accumulate(np.where(first, np.arange(times.size), 0))
    grid_min = (np.rint((times[night_first] - epoch) * MINUTES_PER_DAY)
                + np.rint((times - times[night_first]) * MINUTES_PER_DAY)).astype(np.int64)
    return epoch, step_min, grid_min


def _allowed_starts(times, night_index, dark_jd, exposure, observable, rules, reserved_jd,
                    overhead_s) -> np.ndarray:
    """Mark the starts inside a dark window, every limit, the windows, no reserved block.

    Returns a boolean array of shape (n_options, n_targets, n_times).
    """
    in_night = (night_index >= 0) & (night_index < len(dark_jd))
    nights_of = np.clip(night_index, 0, len(dark_jd) - 1)
    allowed = np.zeros(observable.shape, dtype=bool)
    for o in range(exposure.size):
        end = times + exposure[o] / 86400.0
        ok_time = in_night & (times >= dark_jd[nights_of, 0] - 1e-9) & (
            end <= dark_jd[nights_of, 1] + 1e-9)
        if reserved_jd.size:
            early = times - overhead_s / 86400.0
            ok_time &= ~((early[:, None] < reserved_jd[:, 1]) & (end[:, None] > reserved_jd[:, 0])
                         ).any(axis=1)
        for s, rule in enumerate(rules):
            ok = observable[o, s] & ok_time
            ok &= _inside_any(times, end, np.asarray(rule.windows_jd, float).reshape(-1, 2))
            allowed[o, s] = ok
    return allowed


def _kept_starts(times, night_index, grid_min, exposure, allowed, bits, rules, airmass,
                 default_option, keep_per_night, spacing):
    """Choose the candidate starts kept per (target, night, option), in solver order.

    The best ``keep_per_night`` by one-visit bits, thinned to ``spacing`` grid steps, plus the
    same inside each must-do window, plus, for the cadence plan's option, the night's start at
    the lowest airmass. Returns (target, night, option, grid index) arrays sorted by night,
    start, option and target.
    """
    parts = {k: [] for k in ("target", "night", "option", "time")}
    for o in range(exposure.size):
        end = times + exposure[o] / 86400.0
        for s, rule in enumerate(rules):
            ok = allowed[o, s]
            must = np.asarray(rule.must_windows_jd, float).reshape(-1, 2)
            for n in np.unique(night_index[ok]):
                idx = np.flatnonzero(ok & (night_index == n))
                groups = [idx] + [idx[_inside_any(times[idx], end[idx], w[None])] for w in must]
                kept = [g[_thin(bits[o, s, g], keep_per_night, spacing)] for g in groups if g.size]
                if o == default_option:  # the cadence plan's start: lowest airmass of the night
                    kept.append(idx[[np.argmin(airmass[s, idx])]])
                kept = np.unique(np.concatenate(kept))
                parts["target"].append(np.full(kept.size, s))
                parts["night"].append(np.full(kept.size, n))
                parts["option"].append(np.full(kept.size, o))
                parts["time"].append(kept)
    cat = {k: (np.concatenate(v).astype(np.int64) if v else np.zeros(0, np.int64))
           for k, v in parts.items()}
    order = np.lexsort((cat["target"], cat["option"], grid_min[cat["time"]], cat["night"]))
    return tuple(cat[k][order] for k in ("target", "night", "option", "time"))


def _dark_minutes(times, night_index, grid_min, dark_jd) -> np.ndarray:
    """Each night's dark window on the solver clock [min], shape (n_nights, 2)."""
    night_min = np.zeros((len(dark_jd), 2), dtype=np.int64)
    for n in range(len(dark_jd)):
        here = np.flatnonzero(night_index == n)
        if here.size:
            k = here[0]
            night_min[n] = grid_min[k] + np.rint((dark_jd[n] - times[k]) * MINUTES_PER_DAY)
    return night_min


def mount_slew(mount) -> SlewModel:
    """Return the slew model of a :class:`planner.sky.slew.Mount` (motion only, no overhead).

    The model (a :class:`planner.sky.slew.MountSlew`) also gives the exact largest slew over all
    pairs of two sets of positions, which
    :func:`planner.allocation.conflicts.max_changeover_min` uses.
    """
    from planner.sky.slew import MountSlew

    return MountSlew(mount)


def problem_from_sky(
    sky,
    *,
    rules: Sequence[TargetRules],
    exposure_s: Sequence[float],
    observable: np.ndarray,
    bits: np.ndarray,
    sigma: np.ndarray,
    mount=None,
    **options,
) -> Problem:
    """Build the problem from a :class:`planner.sky.tracks.Sky` and an alt-azimuth mount.

    Parameters
    ----------
    sky : planner.sky.tracks.Sky
        Grid geometry of every target.
    rules, exposure_s, observable, bits, sigma
        As in :func:`build_problem`.
    mount : planner.sky.slew.Mount or None
        Slew and overhead model (alt-azimuth); None: no slews and no overhead.
    **options
        Passed to :func:`build_problem` (``reserved_jd``, ``default_option``,
        ``keep_per_night``, ``thin_spacing_min``, ``slew_margin_s``).

    Returns
    -------
    Problem
    """
    if mount is not None and getattr(mount, "kind", "altaz") != "altaz":
        raise PlanError("The allocation slews by altitude and azimuth; give an alt-azimuth mount.")
    return build_problem(
        times_jd=sky.times_jd,
        night_index=sky.night_index,
        dark_jd=np.array([[n.dark_start_jd, n.dark_end_jd] for n in sky.nights]),
        night_dates=[n.date for n in sky.nights],
        target_names=sky.names,
        rules=rules,
        exposure_s=exposure_s,
        observable=observable,
        bits=bits,
        sigma=sigma,
        airmass=sky.airmass,
        altitude_deg=sky.altitude_deg,
        azimuth_deg=sky.azimuth_deg,
        bjd_tdb=sky.bjd_tdb,
        slew=None if mount is None else mount_slew(mount),
        overhead_s=0.0 if mount is None else float(mount.overhead_s()),
        **options,
    )
