"""Every star accounted for: the stars left out of a run and what bound each star's visits.

Two records go into the plan file under keys of their own:

* :class:`LeftOut` (``left_out``): a target that can never be observed in the run, with the
  limit that keeps it out (:func:`planner.sky.observability.never_observable`);
* :class:`TargetAccount` (``target_summary``): per target its visits, nights and expected bits,
  and the limit or rule that bound it: a limit for a star never observable, ``max_visits``,
  ``max_visits_per_night``, ``min_gap_h`` or ``weight`` where a rule left no further visit
  open, and ``telescope_time`` where more visits were allowed but the time went to visits worth
  more. For a star bound by telescope time the record carries the best bits per telescope
  minute of its next visit and the rate of the last visit taken, the plan's lowest.

A telescope minute here is the exposure plus the mount's fixed overhead for a candidate, and
the exposure plus the slew before it for a planned visit. The next visit's bits are its gain
given the star's planned visits on the solver's surrogate objective (exact joint information of
visit patterns, :mod:`planner.allocation.surrogate`), among the candidate starts the star's own
rules still allow.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["LeftOut", "TargetAccount", "account_targets", "left_out"]

#: Bound key of a star that more visits were allowed for, but the time went to visits worth more.
TIME_BOUND = "telescope_time"


@dataclass(frozen=True)
class LeftOut:
    """A target the plan leaves out because it can never be observed in the run.

    Attributes
    ----------
    target : str
        Target id.
    limit : str
        Key of :data:`planner.sky.observability.LIMIT_WORDS` (``airmass``, ``altitude``,
        ``moon``, ``window``, ``dark_time``), or several joined by ``+``.
    reason : str
        What keeps it out, with the numbers.
    """

    target: str
    limit: str
    reason: str


@dataclass(frozen=True)
class TargetAccount:
    """One target's share of the plan and what bound it.

    Attributes
    ----------
    target : str
        Target id.
    visits : int
        Visits in the plan (planned and executed).
    nights : int
        Nights with at least one of them.
    expected_bits : float
        Weighted joint expected bits of its visits [bits].
    bound : str
        What bound it: a limit key (never observable, see :class:`LeftOut`), a rule key
        (``max_visits``, ``max_visits_per_night``, ``min_gap_h``, ``weight``),
        ``saturated`` (one more visit is worth no measurable bits) or ``telescope_time``.
    reason : str
        The same in words, with the numbers.
    best_bits_per_min : float or None
        The best weighted bits per telescope minute of its next visit, given its planned
        visits, for a star bound by telescope time [bits/min].
    last_bits_per_min : float or None
        The marginal bits per telescope minute of the last visit taken (the plan's lowest
        rate), for a star bound by telescope time [bits/min].
    """

    target: str
    visits: int
    nights: int
    expected_bits: float
    bound: str
    reason: str
    best_bits_per_min: float | None = None
    last_bits_per_min: float | None = None


def left_out(run) -> tuple[LeftOut, ...]:
    """Return the run's never-observable targets as plan-file records, in scenario order."""
    return tuple(LeftOut(target=e.target, limit=e.limit, reason=e.reason) for e in run.excluded)


def _last_rate(plan, marginals) -> float | None:
    """Lowest marginal bits per telescope minute among the plan's visits."""
    rates = [float(m) / ((v.exposure_s + v.slew_s) / 60.0)
             for v, m in zip(plan.visits, marginals, strict=True) if v.exposure_s + v.slew_s > 0]
    return min(rates) if rates else None


def _open_candidates(problem, s: int, starts, nights, rule):
    """Candidates of target ``s`` its own rules still allow next to its planned visits.

    Returns the mask of candidates allowed by the per-night rule and the mask also allowed by
    the spacing rule (and not overlapping its own visits).
    """
    mine = np.flatnonzero(problem.target == s)
    used = np.bincount(np.asarray(nights, dtype=np.int64), minlength=problem.n_nights)
    per_night = used[problem.night[mine]] < rule.max_per_night
    spaced = np.ones(mine.size, dtype=bool)
    for start, end in starts:
        c_start, c_end = problem.start[mine], problem.start[mine] + problem.duration[mine]
        apart = np.abs(c_start - start) >= max(rule.min_spacing_min, 1)
        spaced &= apart & ((c_start >= end) | (c_end <= start))
    return mine, per_night, per_night & spaced


def account_targets(run, plan, marginals, target_bits) -> tuple[TargetAccount, ...]:
    """Account for every target of the run: visits, nights, bits and what bound it.

    Parameters
    ----------
    run : planner.workflow.prepared.PreparedRun
    plan : planner.allocation.plan.Plan
        The new visits (executed visits kept by a re-plan are ``run.done``).
    marginals : ndarray, shape (n_visits,)
        Weighted marginal bits of ``plan.visits`` [bits].
    target_bits : dict of str to float
        Weighted joint bits of the new visits per target [bits].

    Returns
    -------
    tuple of TargetAccount
        In scenario order.
    """
    excluded = {e.target: e for e in run.excluded}
    last = _last_rate(plan, marginals)
    out = []
    for s, target in enumerate(run.scenario.targets):
        mine = [v for v in plan.visits if v.target == target.id]
        done = [v for v in run.done if v.target == target.id]
        visits = len(mine) + len(done)
        if target.id in excluded:
            e = excluded[target.id]
            bound, reason, best, floor = e.limit, f"never observable: {e.reason}", None, None
        else:
            bound, reason, best, floor = _bound(run, plan, s, target, mine, visits, last)
        out.append(TargetAccount(
            target=target.id, visits=visits,
            nights=len({v.night for v in mine} | {v.night for v in done}),
            expected_bits=round(float(target_bits.get(target.id, 0.0))
                                + sum(float(v.expected_bits) for v in done), 5),
            bound=bound, reason=reason, best_bits_per_min=best, last_bits_per_min=floor))
    return tuple(out)


def _bound(run, plan, s, target, mine, visits, last):
    """(bound, reason, best rate, last rate) of an observable target."""
    problem = run.problem
    rule = problem.rules[s]
    if rule.weight == 0:
        return "weight", "weight 0: its bits count for nothing in this run", None, None
    if rule.max_visits is not None and visits >= rule.max_visits:
        return ("max_visits", f"max_visits {rule.max_visits} reached" if rule.max_visits
                else "max_visits 0 allows no visit", None, None)
    starts = [(int(problem.start[v.candidate]),
               int(problem.start[v.candidate] + problem.duration[v.candidate])) for v in mine]
    nights = [int(problem.night[v.candidate]) for v in mine]
    cands, per_night, allowed = _open_candidates(problem, s, starts, nights, rule)
    if cands.size and not per_night.any():
        plural = "s" if rule.max_per_night != 1 else ""
        return ("max_visits_per_night", f"max_visits_per_night {rule.max_per_night} visit"
                f"{plural} on every night it is observable", None, None)
    if cands.size and not allowed.any():
        return ("min_gap_h", f"min_gap_h {target.min_gap_h:g} h between its visits leaves no "
                "free observable start", None, None)
    pool = cands[allowed]
    exposure = np.asarray(problem.exposure_s, dtype=float)[problem.option[pool]]
    minutes = (exposure + problem.overhead_s) / 60.0
    best = round(_best_next(run, plan, pool, minutes), 5) if pool.size else None
    floor = None if last is None else round(last, 5)
    if best is None:
        return TIME_BOUND, "observable, but no candidate start was left for it", None, floor
    if best <= 0.0:
        # Another visit adds nothing the Monte Carlo values can tell from zero.
        return ("saturated", f"one more visit adds nothing measurable (best {best:.4f} bits/tel. "
                "min)", best, floor)
    if floor is None:
        return (TIME_BOUND, f"best visit {best:.4f} bits/tel. min; no visit was taken", best,
                None)
    what = "next visit" if visits else "best visit"
    reason = (f"outvalued{' in time' if best > floor else ''}: {what} {best:.4f} bits/tel. min "
              f"against {floor:.4f} for the last visit taken")
    return TIME_BOUND, reason, best, floor


def _best_next(run, plan, pool, minutes) -> float:
    """Best weighted bits per telescope minute of one more visit among ``pool``.

    Each candidate is valued by the solver's surrogate objective given the star's planned
    visits (:meth:`planner.allocation.surrogate.Surrogate.marginal`: the exact joint
    information of the star's visit pattern with and without it, redundancy included), the
    value every strategy packs by.
    """
    chosen = np.array([v.candidate for v in plan.visits], dtype=np.int64)
    gain = run.surrogate.marginal(run.problem, pool, chosen) / run.surrogate.scale
    return float(np.max(gain / minutes))
