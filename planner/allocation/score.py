"""The one exact score every plan is judged by, whatever strategy made it.

A plan's score is the expected information of all its visits of each target taken together,
``I(S_s)`` from :func:`planner.information.gain.joint_bits` (not the sum of one-visit values), times
the target's science weight, summed over targets (Lindley 1956). The strategies' own surrogate
objective is reported beside it, never instead of it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from planner.allocation.plan import Plan
from planner.allocation.problem import Problem

__all__ = ["PlanScore", "score_plan"]


@dataclass(frozen=True)
class PlanScore:
    """Exact expected information of a plan.

    Attributes
    ----------
    total_bits : float
        Weighted sum over targets of each target's joint information [bit].
    stderr : float
        Monte Carlo standard error of ``total_bits`` (targets independent) [bit].
    per_target_bits : tuple of float, length n_targets
        Weighted joint information of each target's visits [bit].
    per_target_stderr : tuple of float, length n_targets
        Their standard errors [bit].
    per_target_visits : tuple of int, length n_targets
        Visits of each target.
    surrogate_bits : float or None
        The plan's surrogate objective, for comparison only [bit].
    """

    total_bits: float
    stderr: float
    per_target_bits: tuple[float, ...]
    per_target_stderr: tuple[float, ...]
    per_target_visits: tuple[int, ...]
    surrogate_bits: float | None


def score_plan(
    plan: Plan,
    problem: Problem,
    predictors: Sequence,
    *,
    rng: np.random.Generator | None = None,
    streams=None,
    n_outcomes: int = 512,
) -> PlanScore:
    """Score a plan by the exact joint information of each target's visits.

    Parameters
    ----------
    plan : Plan
        Any strategy's plan of ``problem``.
    problem : Problem
        Supplies each visit's mid-exposure barycentric time and measurement noise.
    predictors : sequence, length n_targets
        Per target, ``velocities(bjd) -> (n_samples, n)`` [m/s] and ``jitter (n_samples,)``
        [m/s], e.g. :class:`planner.information.predict.Predictor`.
    rng : numpy.random.Generator, optional
        Source of the simulated outcomes, drawn target after target (so one target's value
        depends on the others' visits).
    streams : planner.information.streams.Streams, optional
        Instead of ``rng``: each target draws from its own stream (stage ``score``, keyed by
        its name), so its value depends only on the seed and its own visits, whatever else the
        plan holds and in whatever order the targets come. Give exactly one of the two.
    n_outcomes : int
        Simulated outcomes per target.

    Returns
    -------
    PlanScore
    """
    from planner.information.gain import joint_bits

    if (rng is None) == (streams is None):
        raise ValueError("give exactly one of rng and streams.")
    cand = plan.candidates
    weights = problem.weights
    bits = np.zeros(problem.n_targets)
    err = np.zeros(problem.n_targets)
    visits = np.zeros(problem.n_targets, dtype=np.int64)
    for s in range(problem.n_targets):
        mine = cand[problem.target[cand] == s]
        visits[s] = mine.size
        if mine.size == 0:
            continue
        predictor = predictors[s]
        pred = np.asarray(predictor.velocities(problem.bjd_mid[mine]), dtype=float)
        jitter = np.asarray(predictor.jitter, dtype=float)
        sigma = np.sqrt(problem.sigma[mine][None, :] ** 2 + jitter[:, None] ** 2)
        here = rng if streams is None else streams.star("score", problem.target_names[s])
        est = joint_bits(pred, sigma, here, n_outcomes)
        bits[s] = weights[s] * est.bits
        err[s] = weights[s] * est.stderr
    return PlanScore(
        total_bits=float(bits.sum()),
        stderr=float(math.sqrt(np.sum(err**2))),
        per_target_bits=tuple(float(b) for b in bits),
        per_target_stderr=tuple(float(e) for e in err),
        per_target_visits=tuple(int(v) for v in visits),
        surrogate_bits=float(plan.objective),
    )
