"""Which candidate visits cannot share a plan: time, slew and per-target rules.

Candidates have fixed starts, so two visits of one night are compatible exactly when the later
one starts no earlier than the earlier one's end plus the changeover between them
(:meth:`planner.allocation.problem.Problem.changeover_min`: slew, overhead, margin). Checking every
pair, not
only neighbours, loses nothing as long as changeovers obey the triangle inequality up to the
exposure in between, which holds for any slew model of the form overhead + distance / speed.

This module finds those conflicts for the strategies: the instant cliques (all candidates whose
exposure plus the smallest possible changeover covers one start time conflict with each other), the
extra pairs that conflict only through a longer slew, the per-target spacing cliques, and the
working :class:`Schedule` greedy and cadence fill.
"""

from __future__ import annotations

import weakref

import numpy as np

from planner.allocation.problem import Problem

__all__ = ["Schedule", "max_changeover_min", "slew_pairs", "instant_cliques", "spacing_cliques"]

_CHUNK = 512
_CHANGEOVER_CACHE: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()


def _night_slices(problem: Problem):
    """Candidate index arrays per night, each sorted by start."""
    order = np.lexsort((problem.start, problem.night))
    nights = problem.night[order]
    cuts = np.flatnonzero(np.diff(nights)) + 1
    return [part for part in np.split(order, cuts) if part.size]


def max_changeover_min(problem: Problem) -> int:
    """Largest changeover between any two candidates of the same night [min] (exact, all pairs).

    Computed once per problem (problems are immutable) and remembered.
    """
    if problem in _CHANGEOVER_CACHE:
        return _CHANGEOVER_CACHE[problem]
    best = problem.min_changeover_min
    if problem.slew is not None:
        # A mount's model gives the largest slew over all pairs in O(n log n); any other
        # model is checked pair by pair.
        exact = getattr(problem.slew, "has_pair_max", False)
        for idx in _night_slices(problem):
            if exact:
                motion = problem.slew.pair_max(problem.alt_end[idx], problem.az_end[idx],
                                               problem.alt_start[idx], problem.az_start[idx])
                best = max(best, int(problem.minutes(problem.overhead_s + motion)))
                continue
            for lo in range(0, idx.size, _CHUNK):
                rows = idx[lo:lo + _CHUNK]
                best = max(best, int(problem.changeover_min(rows[:, None], idx[None, :]).max()))
    _CHANGEOVER_CACHE[problem] = best
    return best


def instant_cliques(problem: Problem) -> list[np.ndarray]:
    """Maximal sets of candidates whose exposure plus the minimum changeover overlap one instant.

    Returns
    -------
    list of ndarray of int
        Each set holds mutually conflicting candidates of one night (at most one can be chosen).
    """
    gmin = problem.min_changeover_min
    out = []
    for idx in _night_slices(problem):
        starts = problem.start[idx]
        busy_until = problem.end[idx] + gmin
        times = np.unique(starts)
        for k, t in enumerate(times):
            members = idx[(starts <= t) & (busy_until > t)]
            nxt = times[k + 1] if k + 1 < times.size else None
            if members.size > 1 and (nxt is None or busy_until[(starts <= t) & (busy_until > t)]
                                     .min() <= nxt):
                out.append(members)
    return out


def slew_pairs(problem: Problem, gmax: int | None = None) -> np.ndarray:
    """Pairs that no instant clique covers but that conflict through a slew longer than the minimum.

    Returns
    -------
    ndarray of int, shape (n_pairs, 2)
        ``(earlier, later)`` candidate pairs with
        ``end + min_changeover <= later start < end + changeover``.
    """
    gmin = problem.min_changeover_min
    gmax = max_changeover_min(problem) if gmax is None else gmax
    found = [np.zeros((0, 2), np.int64)]
    if gmax <= gmin:
        return found[0]
    for idx in _night_slices(problem):
        starts = problem.start[idx]
        lo = np.searchsorted(starts, problem.end[idx] + gmin, side="left")
        hi = np.searchsorted(starts, problem.end[idx] + gmax, side="left")
        counts = hi - lo
        if counts.sum() == 0:
            continue
        first = np.repeat(np.arange(idx.size), counts)
        offsets = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
        second = np.repeat(lo, counts) + offsets
        a, b = idx[first], idx[second]
        bad = problem.start[b] < problem.end[a] + problem.changeover_min(a, b)
        found.append(np.stack([a[bad], b[bad]], axis=1))
    return np.concatenate(found)


def spacing_cliques(problem: Problem) -> list[np.ndarray]:
    """Return sets of one target's candidates whose starts lie closer than its minimum spacing."""
    out = []
    for s, rule in enumerate(problem.rules):
        if rule.min_spacing_min <= 0:
            continue
        idx = np.flatnonzero(problem.target == s)
        idx = idx[np.argsort(problem.start[idx], kind="stable")]
        starts = problem.start[idx]
        hi = np.searchsorted(starts, starts + rule.min_spacing_min, side="left")
        prev_hi = -1
        for k in range(idx.size):
            if hi[k] - k > 1 and hi[k] > prev_hi:
                out.append(idx[k:hi[k]])
            prev_hi = max(prev_hi, hi[k])
    return out


class Schedule:
    """A plan being filled one visit at a time (working state of greedy and cadence).

    ``open`` marks the candidates that can still be added without breaking any time, slew or
    per-target rule; :meth:`added_minutes` is the telescope time a candidate would add,
    counting the change in slews around it.
    """

    def __init__(self, problem: Problem):
        self.problem = problem
        self.chosen: list[int] = []
        self.open = np.ones(problem.n_candidates, dtype=bool)
        self.visits = np.zeros(problem.n_targets, dtype=np.int64)
        self.per_night = np.zeros((problem.n_targets, problem.n_nights), dtype=np.int64)
        self._gmax = max_changeover_min(problem)
        self._dmax = int(problem.duration.max()) if problem.n_candidates else 0
        self._key = problem.night.astype(np.int64) * 10**7 + problem.start

    def add(self, v: int) -> None:
        """Add candidate ``v`` and close everything it rules out."""
        p = self.problem
        if not self.open[v]:
            raise ValueError(f"candidate {v} conflicts with the schedule")
        self.chosen.append(int(v))
        s, n = int(p.target[v]), int(p.night[v])
        self.visits[s] += 1
        self.per_night[s, n] += 1
        near = np.flatnonzero(
            (p.night == n) & (p.start > p.start[v] - self._dmax - self._gmax)
            & (p.start < p.end[v] + self._gmax)
        )
        before = p.start[near] <= p.start[v]
        clash = np.where(
            before,
            p.start[v] < p.end[near] + p.changeover_min(near, v),
            p.start[near] < p.end[v] + p.changeover_min(v, near),
        )
        self.open[near[clash]] = False
        self.open[v] = False
        rule = p.rules[s]
        mine = p.target == s
        if rule.max_visits is not None and self.visits[s] >= rule.max_visits:
            self.open[mine] = False
        if self.per_night[s, n] >= rule.max_per_night:
            self.open[mine & (p.night == n)] = False
        if rule.min_spacing_min > 0:
            self.open[mine & (np.abs(p.start - p.start[v]) < rule.min_spacing_min)] = False

    def added_minutes(self, candidates: np.ndarray) -> np.ndarray:
        """Telescope minutes each candidate would add: exposure plus the change in changeovers."""
        p = self.problem
        candidates = np.asarray(candidates, dtype=np.int64)
        lead = p.lead_min()
        cost = p.duration[candidates] + lead
        if not self.chosen:
            return cost.astype(float)
        chosen = np.array(sorted(self.chosen, key=lambda c: self._key[c]), dtype=np.int64)
        keys = self._key[chosen]
        pos = np.searchsorted(keys, self._key[candidates], side="right")
        has_prev = (pos > 0) & (p.night[chosen[np.maximum(pos - 1, 0)]] == p.night[candidates])
        has_next = (pos < chosen.size) & (
            p.night[chosen[np.minimum(pos, chosen.size - 1)]] == p.night[candidates])
        prev = chosen[np.maximum(pos - 1, 0)]
        nxt = chosen[np.minimum(pos, chosen.size - 1)]
        into = np.where(has_prev, p.changeover_min(prev, candidates), lead)
        out_of = np.where(has_next, p.changeover_min(candidates, nxt), 0)
        replaced = np.where(has_next, np.where(has_prev, p.changeover_min(prev, nxt), lead), 0)
        return (p.duration[candidates] + into + out_of - replaced).astype(float)
