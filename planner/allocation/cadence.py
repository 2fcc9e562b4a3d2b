"""Cadence strategy: the plan an observer makes by hand.

Every night, targets are taken in order of science weight (highest first; ties by name), and
each gets one exposure of the default option at the open start nearest its lowest airmass of
the night (inside its must-do window, when that night holds one not yet served); a target whose
every start is taken or ruled out that night is skipped. This is
common practice for RV monitoring programmes, not a published method.
"""

from __future__ import annotations

import time

import numpy as np

from planner.allocation.conflicts import Schedule
from planner.allocation.plan import Plan, assemble_plan
from planner.allocation.problem import Problem
from planner.allocation.surrogate import Surrogate

__all__ = ["cadence_plan"]


def _in_unmet_window(problem: Problem, schedule: Schedule, s: int, idx: np.ndarray) -> np.ndarray:
    """Mask of candidates ``idx`` inside a must-do window of target ``s`` not yet served."""
    chosen = np.array([c for c in schedule.chosen if problem.target[c] == s], dtype=np.int64)
    out = np.zeros(idx.size, dtype=bool)
    for lo, hi in problem.rules[s].must_windows_jd:
        if np.any((problem.start_jd(chosen) >= lo) & (problem.end_jd(chosen) <= hi)):
            continue
        out |= (problem.start_jd(idx) >= lo) & (problem.end_jd(idx) <= hi)
    return out


def cadence_plan(problem: Problem, surrogate: Surrogate, *, option: int | None = None) -> Plan:
    """Each target once per night near its lowest airmass, highest weight first.

    Parameters
    ----------
    problem : Problem
        Candidate visits and rules.
    surrogate : Surrogate
        Objective reported in the plan's ``objective`` field and used for per-visit bits.
    option : int, optional
        Exposure option to use; default ``problem.default_option``.

    Returns
    -------
    Plan
        The cadence plan; ``bound`` and ``gap`` are None.
    """
    t0 = time.perf_counter()
    option = problem.default_option if option is None else int(option)
    schedule = Schedule(problem)
    order = sorted(range(problem.n_targets),
                   key=lambda s: (-problem.rules[s].weight, problem.target_names[s]))
    marginal = []
    for n in range(problem.n_nights):
        tonight = (problem.night == n) & (problem.option == option)
        for s in order:
            mine = np.flatnonzero(tonight & (problem.target == s))
            if mine.size == 0:
                continue
            best_airmass = problem.airmass[mine].min()
            ok = mine[schedule.open[mine]]
            inside = ok[_in_unmet_window(problem, schedule, s, ok)]
            ok = inside if inside.size else ok
            if ok.size == 0:
                continue
            v = int(ok[np.argmin(problem.airmass[ok] - best_airmass)])
            chosen = [c for c in schedule.chosen if problem.target[c] == s]
            marginal.append(surrogate.marginal(problem, [v], chosen)[0] / surrogate.scale)
            schedule.add(v)
    chosen = np.array(schedule.chosen, dtype=np.int64)
    return assemble_plan(
        problem, chosen, strategy="cadence",
        objective=surrogate.bits(problem, chosen),
        marginal_bits=marginal,
        runtime_s=time.perf_counter() - t0,
    )
