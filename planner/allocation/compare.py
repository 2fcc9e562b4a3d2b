"""The three strategies side by side on one exact score.

:func:`compare_strategies` runs cadence, greedy and joint on the same problem, verifies each plan
when given a verifier, scores each with :func:`planner.allocation.score.score_plan`, and returns a
:class:`Comparison`: one :class:`StrategyRow` per strategy (exact bits total and per dark hour,
visits, stars observed, slew and idle time, solver gap, run time) and the per-star bits and
visits under each. :meth:`Comparison.document` gives the JSON document that ``compare.json`` holds.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import asdict, dataclass

import numpy as np

from planner.allocation.cadence import cadence_plan
from planner.allocation.greedy import exact_gain, greedy_plan
from planner.allocation.joint import joint_plan
from planner.allocation.plan import Plan
from planner.allocation.problem import Problem
from planner.allocation.score import PlanScore, score_plan
from planner.allocation.surrogate import Surrogate

__all__ = ["Comparison", "StrategyRow", "compare_strategies"]


@dataclass(frozen=True)
class StrategyRow:
    """One strategy's line of the comparison.

    Attributes
    ----------
    strategy : str
    total_bits, stderr : float
        Exact weighted expected information of the plan and its standard error [bit].
    bits_per_dark_hour : float
        ``total_bits`` per hour of dark time in the run [bit/h].
    surrogate_bits : float
        The plan's surrogate objective [bit], for reference.
    visits, stars_observed : int
    slew_s, idle_s : float
        Time in slews and overheads, and dark time neither exposing nor slewing [s].
    gap : float or None
        Solver gap on the surrogate (joint only).
    runtime_s : float
        Strategy wall-clock time [s].
    verified : bool or None
        Outcome of the feasibility check (None: not checked).
    """

    strategy: str
    total_bits: float
    stderr: float
    bits_per_dark_hour: float
    surrogate_bits: float
    visits: int
    stars_observed: int
    slew_s: float
    idle_s: float
    gap: float | None
    runtime_s: float
    verified: bool | None


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_strategies`.

    Attributes
    ----------
    rows : tuple of StrategyRow
        Cadence, greedy, joint.
    targets : tuple of str
        Target names.
    per_target_bits : dict of str to tuple of float
        Strategy to weighted exact bits per target.
    per_target_visits : dict of str to tuple of int
        Strategy to visits per target.
    plans : dict of str to Plan
        The plans compared.
    """

    rows: tuple[StrategyRow, ...]
    targets: tuple[str, ...]
    per_target_bits: dict
    per_target_visits: dict
    plans: dict

    def records(self) -> list[dict]:
        """One JSON-ready record per strategy (the fields of :class:`StrategyRow`)."""
        return [asdict(r) for r in self.rows]

    def document(self) -> dict:
        """Return the JSON-ready ``compare.json`` document: strategies, per-target figures."""
        return {
            "strategies": self.records(),
            "targets": list(self.targets),
            "per_target_bits": {k: list(v) for k, v in self.per_target_bits.items()},
            "per_target_visits": {k: list(v) for k, v in self.per_target_visits.items()},
        }


def _row(plan: Plan, score: PlanScore, problem: Problem, verified) -> StrategyRow:
    dark_s = float(np.sum(problem.dark_jd[:, 1] - problem.dark_jd[:, 0]) * 86400.0)
    exposing = sum(v.exposure_s for v in plan.visits)
    slewing = sum(v.slew_s for v in plan.visits)
    return StrategyRow(
        strategy=plan.strategy,
        total_bits=score.total_bits,
        stderr=score.stderr,
        bits_per_dark_hour=score.total_bits / (dark_s / 3600.0) if dark_s > 0 else 0.0,
        surrogate_bits=plan.objective,
        visits=len(plan.visits),
        stars_observed=int(np.count_nonzero(score.per_target_visits)),
        slew_s=float(slewing),
        idle_s=float(max(0.0, dark_s - exposing - slewing)),
        gap=plan.gap,
        runtime_s=plan.runtime_s,
        verified=verified,
    )


def compare_strategies(
    problem: Problem,
    surrogate: Surrogate,
    predictors: Sequence,
    *,
    rng: np.random.Generator,
    time_limit_s: float | None = None,
    seed: int = 0,
    workers: int = 2,
    exact_greedy: bool = True,
    n_outcomes: int = 512,
    verify: Callable[[Plan], object] | None = None,
    focus_per_group: int | None = None,
    pack: Callable[[Plan], object] | None = None,
    streams=None,
    limit=None,
) -> Comparison:
    """Run cadence, greedy and joint on one problem and score them exactly.

    Parameters
    ----------
    problem : Problem
    surrogate : Surrogate
    predictors : sequence, length n_targets
        Posterior predictors per target (problem order).
    rng : numpy.random.Generator
        Source of the Monte Carlo outcomes of greedy's exact gains, and of the scores unless
        ``streams`` is given.
    time_limit_s, seed, workers, limit
        Joint solver limits (:func:`~planner.allocation.joint.joint_plan`).
    exact_greedy : bool
        Greedy by exact conditional gains (True) or by the surrogate's marginal gains.
    n_outcomes : int
        Simulated outcomes per target for the scores.
    verify : callable, optional
        ``plan -> Verification``; its ``ok`` goes into each row.
    focus_per_group : int, optional
        Passed to :func:`~planner.allocation.joint.joint_plan` (two-stage solve).
    pack : callable, optional
        ``plan -> Packing`` (:func:`planner.allocation.packing.pack_plan`), applied to every
        strategy's plan alike before it is verified and scored on the packing's problem.
    streams : planner.information.streams.Streams, optional
        Score every plan with one stream per target
        (:func:`~planner.allocation.score.score_plan`), so a plan's score is the same here as
        wherever else it is scored with these streams.

    Returns
    -------
    Comparison
    """
    cadence = cadence_plan(problem, surrogate)
    gain = exact_gain(predictors, rng=rng) if exact_greedy else None
    greedy = greedy_plan(problem, surrogate, gain=gain)
    hint = greedy if not exact_greedy else greedy_plan(problem, surrogate)
    best_hint = max((hint, greedy), key=lambda p: p.objective)
    joint = joint_plan(problem, surrogate, time_limit_s=time_limit_s, seed=seed, workers=workers,
                       hint=best_hint, focus_per_group=focus_per_group, limit=limit)
    rows, bits, visits, plans = [], {}, {}, {}
    for plan in (cadence, greedy, joint):
        scored = problem
        if pack is not None:
            packing = pack(plan)
            plan, scored = packing.plan, packing.problem
        score = score_plan(plan, scored, predictors, rng=None if streams else rng,
                           streams=streams, n_outcomes=n_outcomes)
        verified = None if verify is None else bool(verify(plan).ok)
        rows.append(_row(plan, score, problem, verified))
        bits[plan.strategy] = score.per_target_bits
        visits[plan.strategy] = score.per_target_visits
        plans[plan.strategy] = plan
    return Comparison(tuple(rows), problem.target_names, bits, visits, plans)
