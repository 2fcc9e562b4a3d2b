"""Greedy strategy: add the visit worth most per minute of telescope time, until nothing fits.

Each step adds the open candidate with the largest conditional gain (given the visits already
chosen for its target) divided by the telescope minutes it adds, its slews included. Targets with
``min_visits`` or must-do windows still unmet are served first. For a monotone submodular
objective this is the classical rule with the (1 - 1/e) guarantee for cardinality constraints
(Nemhauser, Wolsey and Fisher 1978); with time costs and packing it has no such guarantee, which
is what the joint strategy improves on.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from planner.allocation.conflicts import Schedule
from planner.allocation.plan import Plan, assemble_plan
from planner.allocation.problem import Problem
from planner.allocation.surrogate import Surrogate

__all__ = ["exact_gain", "greedy_plan", "surrogate_gain"]

#: Gain model: (problem, candidates of one target, chosen visits of that target) -> weighted bits.
GainModel = Callable[[Problem, np.ndarray, np.ndarray], np.ndarray]


def surrogate_gain(surrogate: Surrogate) -> GainModel:
    """Return the surrogate's exact marginal gains as a gain model [weighted bit]."""

    def gain(problem: Problem, candidates: np.ndarray, chosen: np.ndarray) -> np.ndarray:
        return surrogate.marginal(problem, candidates, chosen) / surrogate.scale

    return gain


def exact_gain(predictors, *, rng: np.random.Generator, n_outcomes: int = 64) -> GainModel:
    """Exact conditional gains [weighted bit].

    The gains come from :func:`planner.information.gain.conditional_bits`.
    The gain of a candidate given the target's chosen visits is the expected one-visit
    information under the posterior reweighted by simulated outcomes of those visits
    (equal to ``I(S + c) - I(S)``); with nothing chosen it is the candidate's one-visit bits.
    """
    from planner.information.gain import conditional_bits

    def gain(problem: Problem, candidates: np.ndarray, chosen: np.ndarray) -> np.ndarray:
        s = int(problem.target[candidates[0]])
        weight = problem.rules[s].weight
        if chosen.size == 0:
            return weight * problem.bits[candidates]
        pred = predictors[s]
        jitter = np.asarray(pred.jitter, dtype=float)[:, None]
        v_set = pred.velocities(problem.bjd_mid[chosen])
        v_new = pred.velocities(problem.bjd_mid[candidates])
        s_set = np.sqrt(problem.sigma[chosen][None, :] ** 2 + jitter**2)
        s_new = np.sqrt(problem.sigma[candidates][None, :] ** 2 + jitter**2)
        return weight * conditional_bits(v_set, s_set, v_new, s_new, rng, n_outcomes)

    return gain


def _unmet(problem: Problem, schedule: Schedule, needy: list[int]) -> np.ndarray:
    """Candidates that serve a target's still-unmet must-do windows or minimum visits.

    A target's unmet must-do windows come first: while one is open only the candidates inside
    it serve the target, so its minimum visits (or its last visit under ``max_visits``) are not
    spent elsewhere first.
    """
    serve = np.zeros(problem.n_candidates, dtype=bool)
    chosen = np.array(schedule.chosen, dtype=np.int64)
    start, end = problem.start_jd(chosen), problem.end_jd(chosen)
    all_start, all_end = problem.start_jd(slice(None)), problem.end_jd(slice(None))
    for s in needy:
        rule = problem.rules[s]
        mine = problem.target == s
        windows = np.zeros(problem.n_candidates, dtype=bool)
        for lo, hi in rule.must_windows_jd:
            done = np.any((problem.target[chosen] == s) & (start >= lo) & (end <= hi))
            if not done:
                windows |= mine & (all_start >= lo) & (all_end <= hi) & schedule.open
        if windows.any():
            serve |= windows
        elif schedule.visits[s] < rule.min_visits:
            serve |= mine
    return serve


def greedy_plan(
    problem: Problem,
    surrogate: Surrogate,
    *,
    gain: GainModel | None = None,
    strategy: str = "greedy",
) -> Plan:
    """Fill the run greedily by conditional gain per telescope minute.

    Parameters
    ----------
    problem : Problem
        Candidate visits and rules.
    surrogate : Surrogate
        Objective the plan's ``objective`` field reports; also the default gain model.
    gain : callable, optional
        Conditional gain model ``(problem, candidates, chosen) -> bits`` for candidates of one
        target given its chosen visits, e.g. exact conditional information; default: the
        surrogate's marginal gains.
    strategy : str
        Name recorded in the plan.

    Returns
    -------
    Plan
        The greedy plan; ``bound`` and ``gap`` are None.
    """
    t0 = time.perf_counter()
    gain = surrogate_gain(surrogate) if gain is None else gain
    schedule = Schedule(problem)
    current = np.zeros(problem.n_candidates)
    for s in np.unique(problem.target):
        idx = np.flatnonzero(problem.target == s)
        current[idx] = gain(problem, idx, np.zeros(0, np.int64))
    marginal = []
    needy = [s for s, r in enumerate(problem.rules) if r.min_visits > 0 or r.must_windows_jd]
    stale = np.zeros(problem.n_targets, dtype=bool)
    recomputed = 0
    while True:
        pool = schedule.open & (current > 0)
        serve = _unmet(problem, schedule, needy) & schedule.open
        if serve.any():
            pool = serve
        cand = np.flatnonzero(pool)
        if cand.size == 0:
            break
        ratio = current[cand] / schedule.added_minutes(cand)
        v = int(cand[np.argmax(ratio)])
        s = problem.target[v]
        if stale[s]:
            # Lazy evaluation (Minoux 1978): a target's gains change only when its own visits
            # do, and (submodularity) only downwards, so they are recomputed only when one of
            # its candidates comes out on top.
            idx = np.flatnonzero((problem.target == s) & schedule.open)
            mine = np.array([c for c in schedule.chosen if problem.target[c] == s], np.int64)
            current[idx] = gain(problem, idx, mine)
            stale[s] = False
            recomputed += 1
            continue
        marginal.append(current[v])
        schedule.add(v)
        stale[s] = True
    chosen = np.array(schedule.chosen, dtype=np.int64)
    return assemble_plan(
        problem, chosen, strategy=strategy,
        objective=surrogate.bits(problem, chosen),
        marginal_bits=marginal,
        runtime_s=time.perf_counter() - t0,
        stats=(("candidates", problem.n_candidates), ("gain_updates", recomputed)),
    )
