"""Idle time of a plan, and why the telescope waits there.

Between two exposures of a night the telescope slews, settles and acquires (the next visit's
``slew_s``, spent just before its shutter opens); any other dark time is idle. For each idle
stretch :func:`idle_stretches` gives one of three reasons, from the problem's timeline
(:class:`planner.allocation.timeline.Timeline`) and rules:

* ``"window"``: the next exposure could not start earlier: its target's limits or fixed window
  open only then, or its spacing or must-do window holds it;
* ``"waiting for a better moment"``: the next exposure could have started earlier, or another
  visit fits in the opening, and the plan waits (its value is higher later);
* ``"nothing observable"``: no target that may still take a visit can fit a whole exposure,
  with its overheads, into the opening.
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass

import numpy as np

from planner.allocation.plan import Plan
from planner.allocation.problem import Problem

__all__ = ["REASONS", "IdleStretch", "idle_stretches"]

#: The reasons :func:`idle_stretches` gives.
REASONS = ("window", "waiting for a better moment", "nothing observable")
_SECOND = 1.0 / 86400.0


@dataclass(frozen=True)
class IdleStretch:
    """One idle stretch of dark time.

    Attributes
    ----------
    night : str
        Night name.
    start_jd, end_jd : float
        The stretch, JD UTC [d].
    reason : str
        One of :data:`REASONS`.
    """

    night: str
    start_jd: float
    end_jd: float
    reason: str

    @property
    def seconds(self) -> float:
        """Length [s]."""
        return (self.end_jd - self.start_jd) * 86400.0


def _held(problem: Problem, visit, ready: float, visits) -> bool:
    """Return True when ``visit`` could not have started at ``ready`` (limits, window, rules)."""
    tl = problem.timeline
    s = problem.target_names.index(visit.target)
    rule = problem.rules[s]
    t = min(ready, visit.start_jd)
    if not bool(tl.allowed_at(visit.option, s, t)):
        return True
    end = t + visit.exposure_s * _SECOND
    if rule.windows_jd and not any(a <= t and end <= b for a, b in rule.windows_jd):
        return True
    for a, b in rule.must_windows_jd:
        if a <= visit.start_jd and visit.end_jd <= b and t < a:
            return True
    others = [v.start_jd for v in visits if v.target == visit.target and v is not visit]
    return rule.min_spacing_min > 0 and any(
        abs(t - o) * 1440.0 < rule.min_spacing_min - 1e-6 for o in others)


def _anything_fits(problem: Problem, start: float, end: float, counts, tonight, cap) -> bool:
    """Return True when a target with visits left can take a whole exposure in the opening."""
    tl = problem.timeline
    for s, rule in enumerate(problem.rules):
        if rule.max_visits is not None and counts[s] >= rule.max_visits:
            continue
        if tonight[s] >= min(rule.max_per_night, cap or rule.max_per_night):
            continue
        for o, exposure in enumerate(problem.exposure_s):
            first = start + problem.overhead_s * _SECOND
            last = end - exposure * _SECOND
            if last < first:
                continue
            times = np.append(np.arange(first, last, 60.0 * _SECOND), last)
            if np.any(tl.allowed_at(o, s, times)):
                return True
    return False


def _open_pieces(start: float, stop: float, blocks) -> list[tuple[float, float]]:
    """Parts of ``[start, stop]`` outside every reserved block (lost, past, executed)."""
    pieces, cursor = [], start
    for a, b in sorted((float(a), float(b)) for a, b in blocks if a < stop and b > start):
        if a > cursor:
            pieces.append((cursor, a))
        cursor = max(cursor, b)
    if cursor < stop:
        pieces.append((cursor, stop))
    return pieces


def idle_stretches(problem: Problem, plan: Plan, min_s: float = 60.0,
              max_per_night: int | None = None) -> tuple[IdleStretch, ...]:
    """Idle stretches longer than ``min_s`` of every night, with their reasons.

    Parameters
    ----------
    problem : Problem
        The problem the plan was made for (with a timeline; without one, no stretch is explained
        and every reason is ``"nothing observable"`` only where no visit follows).
    plan : Plan
    min_s : float
        Shortest stretch reported [s].
    max_per_night : int, optional
        Visits per target and night the strategy allows besides the rules (the cadence plan's
        one), for ``"nothing observable"``.

    Returns
    -------
    tuple of IdleStretch
        In time order. A stretch is the dark time between one exposure's end and the start of
        the next one's slew (or the dark window's edges), less the problem's reserved blocks
        (blackouts, lost time, the past and executed visits of a re-plan).
    """
    by_night = defaultdict(list)
    for v in sorted(plan.visits, key=lambda v: v.start_jd):
        by_night[v.night].append(v)
    counts = np.zeros(problem.n_targets, dtype=np.int64)
    for v in plan.visits:
        counts[problem.target_names.index(v.target)] += 1
    out = []
    for n, date in enumerate(problem.night_dates):
        visits = by_night.get(date, [])
        tonight = np.zeros(problem.n_targets, dtype=np.int64)
        for v in visits:
            tonight[problem.target_names.index(v.target)] += 1
        cursor = problem.dark_jd[n, 0]
        for v in [*visits, None]:
            stop = problem.dark_jd[n, 1] if v is None else v.start_jd - v.slew_s * _SECOND
            pieces = _open_pieces(cursor, stop, problem.reserved_jd)
            for k, (a, b) in enumerate(pieces):
                if (b - a) * 86400.0 <= min_s:
                    continue
                nxt = v if (k == len(pieces) - 1 and b == stop) else None
                if problem.timeline is None:
                    reason = "nothing observable" if nxt is None else "window"
                elif nxt is not None and _held(problem, nxt, a + nxt.slew_s * _SECOND, visits):
                    reason = "window"
                elif nxt is not None or _anything_fits(problem, a, b, counts, tonight,
                                                       max_per_night):
                    reason = "waiting for a better moment"
                else:
                    reason = "nothing observable"
                out.append(IdleStretch(date, float(a), float(b), reason))
            if v is not None:
                cursor = max(cursor, v.end_jd)
    return tuple(out)
