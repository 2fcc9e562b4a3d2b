"""The :class:`Visit` and :class:`Plan` records every strategy returns."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from enum import StrEnum

import numpy as np

from planner.allocation.problem import Problem
from planner.errors import PlanError

__all__ = ["Plan", "SearchStatus", "Visit", "assemble_plan"]


class SearchStatus(StrEnum):
    """How a strategy's search ended; printed in the schedule and stored in plan.json.

    A ``StrEnum``: each member equals its name as a string, so files and messages hold the name.
    """

    #: Greedy, cadence and packing: the strategy ran to its end (no bound is proved).
    COMPLETE = "COMPLETE"
    #: CP-SAT proved the plan optimal on the surrogate objective.
    OPTIMAL = "OPTIMAL"
    #: CP-SAT stopped at the relative gap limit: optimal within ``gap`` of its bound.
    WITHIN_GAP = "WITHIN_GAP"
    #: CP-SAT found a plan but stopped at its time or work limit before proving optimality.
    FEASIBLE = "FEASIBLE"
    #: CP-SAT found nothing in its limit; the plan is the greedy hint it was given, no bound.
    HINT_ONLY = "HINT_ONLY"
    #: Two-stage search: the hint was kept because no stage improved on it (with a bound).
    HINT_KEPT = "HINT_KEPT"
    #: Two-stage search: the first (focused) stage's plan, unimproved by the whole problem.
    FOCUSED = "FOCUSED"


@dataclass(frozen=True)
class Visit:
    """One planned exposure.

    Attributes
    ----------
    target : str
        Target name.
    night : str
        Night name, local evening date ``YYYY-MM-DD``.
    start_jd, end_jd : float
        Exposure start and end, JD UTC [d] (end = start + exposure time).
    exposure_s : float
        Exposure time [s].
    slew_s : float
        Slew from the previous exposure of the night plus the per-visit overhead, spent just
        before ``start_jd`` [s]; the first visit of a night carries the overhead alone.
    option : int
        Exposure-option index.
    bits : float
        Expected marginal information of this visit given the earlier visits of its target in
        the plan, weighted, as the strategy estimated it [bit].
    candidate : int
        Index of the candidate visit in the :class:`~planner.allocation.problem.Problem` it came
        from.
    """

    target: str
    night: str
    start_jd: float
    end_jd: float
    exposure_s: float
    slew_s: float
    option: int
    bits: float
    candidate: int


@dataclass(frozen=True)
class Plan:
    """The output of one strategy.

    Attributes
    ----------
    strategy : str
        ``"joint"``, ``"greedy"`` or ``"cadence"``.
    visits : tuple of Visit
        Visits in time order.
    objective : float
        The strategy-independent surrogate objective of the visits (weighted) [bit].
    bound : float or None
        Proven upper bound on the surrogate objective over all plans of this problem [bit]; None
        when the strategy proves none.
    gap : float or None
        ``(bound - objective) / bound``; None without a bound.
    status : SearchStatus
        How the strategy ended (a string given here is checked against :class:`SearchStatus`).
    runtime_s : float
        Wall-clock time the strategy took [s].
    seed : int or None
        Random seed used, if any.
    stats : tuple of (str, float) pairs
        Solver or strategy statistics (model size, branches, ...).
    """

    strategy: str
    visits: tuple[Visit, ...]
    objective: float
    bound: float | None
    gap: float | None
    status: SearchStatus
    runtime_s: float
    seed: int | None
    stats: tuple[tuple[str, float], ...] = ()

    def __post_init__(self):
        try:
            object.__setattr__(self, "status", SearchStatus(self.status))
        except ValueError:
            raise PlanError(f"Plan status {self.status!r} is not one of "
                            f"{', '.join(SearchStatus)}; use a SearchStatus.") from None

    @property
    def candidates(self) -> np.ndarray:
        """Candidate indices of the visits, shape (n_visits,)."""
        return np.array([v.candidate for v in self.visits], dtype=np.int64)


def assemble_plan(
    problem: Problem,
    chosen: Sequence[int],
    *,
    strategy: str,
    objective: float,
    marginal_bits: Sequence[float] | None = None,
    bound: float | None = None,
    status: str = "COMPLETE",  # a SearchStatus
    runtime_s: float = 0.0,
    seed: int | None = None,
    stats: Sequence[tuple[str, float]] = (),
) -> Plan:
    """Turn chosen candidate indices into a time-ordered :class:`Plan` with its slews.

    Parameters
    ----------
    problem : Problem
        The problem the candidates index into.
    chosen : sequence of int
        Chosen candidate indices, any order.
    strategy, objective, bound, status, runtime_s, seed, stats
        Copied into the plan (see :class:`Plan`); ``gap`` follows from ``bound``.
    marginal_bits : sequence of float, optional
        Per-candidate marginal bits aligned with ``chosen``; zeros if omitted.

    Returns
    -------
    Plan
        Visits sorted by start, each with the slew from its predecessor in the same night.
    """
    chosen = np.asarray(chosen, dtype=np.int64)
    marg = np.zeros(chosen.size) if marginal_bits is None else np.asarray(marginal_bits, float)
    order = np.argsort(problem.start[chosen], kind="stable")
    chosen, marg = chosen[order], marg[order]
    starts = problem.start_jd(chosen)
    ends = problem.end_jd(chosen)
    visits = []
    for k, c in enumerate(chosen):
        same_night = k > 0 and problem.night[chosen[k - 1]] == problem.night[c]
        slew = problem.slew_seconds(chosen[k - 1], c) if same_night else problem.overhead_s
        visits.append(Visit(
            target=problem.target_names[problem.target[c]],
            night=problem.night_dates[problem.night[c]],
            start_jd=float(starts[k]),
            end_jd=float(ends[k]),
            exposure_s=float(problem.exposure_s[problem.option[c]]),
            slew_s=float(slew),
            option=int(problem.option[c]),
            bits=float(marg[k]),
            candidate=int(c),
        ))
    gap = None
    if bound is not None:
        gap = max(0.0, (bound - objective) / bound) if bound > 0 else 0.0
    return Plan(
        strategy=strategy,
        visits=tuple(visits),
        objective=float(objective),
        bound=None if bound is None else float(bound),
        gap=gap,
        status=status,
        runtime_s=float(runtime_s),
        seed=seed,
        stats=tuple((str(k), float(v)) for k, v in stats),
    )
