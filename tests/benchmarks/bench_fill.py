"""Benchmark how fully each strategy fills the demo nights, and what the idle time is made of.

For the demo run (posteriors from the cache; the first run fits every target) it prints, per
strategy (cadence, greedy, joint): exposures, exact bits (``planner.allocation.score.score_plan``),
and the
idle hours of each night (dark time not spent exposing or slewing). For the joint plan it then
lists the idle stretches of at least 15 minutes and, for each, how many candidate visits of the
problem fit inside it (in time, without looking at rules) and how many of those belong to a
target that the rules still allow another visit (run cap and per-night cap). It also reports the
CPU and wall seconds of each stage.

Usage::

    NIGHTBITS_CACHE=DIR python tests/benchmarks/bench_fill.py [--quick] [--time-limit S] [SCENARIO]

``--quick`` uses a 5 s solver limit.
"""

from __future__ import annotations

import argparse
import time
from contextlib import contextmanager

import numpy as np


@contextmanager
def _stage(label: str, table: list):
    wall, cpu = time.perf_counter(), time.process_time()
    yield
    table.append((label, time.perf_counter() - wall, time.process_time() - cpu))


def _idle_by_night(plan, problem) -> np.ndarray:
    """Idle hours per night: dark time minus exposures and slews."""
    idle = (problem.dark_jd[:, 1] - problem.dark_jd[:, 0]) * 24.0
    for v in plan.visits:
        n = problem.night_dates.index(v.night)
        idle[n] -= (v.exposure_s + v.slew_s) / 3600.0
    return idle


def _stretches(plan, problem, least_min: float = 15.0):
    """Idle stretches of at least ``least_min`` minutes: (night, start_jd, end_jd)."""
    out = []
    for n in range(problem.n_nights):
        mine = sorted((v for v in plan.visits if v.night == problem.night_dates[n]),
                      key=lambda v: v.start_jd)
        edges = [problem.dark_jd[n, 0]]
        for v in mine:
            edges += [v.start_jd - v.slew_s / 86400.0, v.end_jd]
        edges.append(problem.dark_jd[n, 1])
        for a, b in zip(edges[0::2], edges[1::2], strict=True):
            if (b - a) * 1440.0 >= least_min:
                out.append((n, a, b))
    return out


def main() -> None:
    """Measure and print."""
    from planner.allocation.score import score_plan
    from planner.workflow import pipeline

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="5 s solver limit")
    parser.add_argument("--time-limit", type=float, default=None, help="solver limit [s]")
    parser.add_argument("scenario", nargs="?", default=None, help="scenario (default: demo)")
    args = parser.parse_args()
    limit = args.time_limit or (5.0 if args.quick else None)
    stages: list = []
    scenario = pipeline.load(args.scenario)
    with _stage("fit (cache)", stages):
        posteriors = pipeline.fit_posteriors(scenario, pipeline.cache_folder(scenario, None,
                                                                             False))
    with _stage("prepare", stages):
        run = pipeline.prepare(scenario, posteriors)
    problem = run.problem
    print(f"candidates {problem.n_candidates}, dark hours per night "
          + " ".join(f"{h:.2f}" for h in (problem.dark_jd[:, 1] - problem.dark_jd[:, 0]) * 24))
    plans = {}
    for name in ("cadence", "greedy", "joint"):
        with _stage(name, stages):
            plans[name] = pipeline.run_strategy(run, name, limit)
    rng = np.random.default_rng(0)
    for name, plan in plans.items():
        with _stage(f"score {name}", stages):
            score = score_plan(plan, problem, run.predictors, rng=rng, n_outcomes=512)
        ok = pipeline.verify(run, plan).ok
        idle = _idle_by_night(plan, problem)
        print(f"{name:<8} exposures {len(plan.visits):>4}  exact bits {score.total_bits:8.2f}"
              f" +- {score.stderr:.2f}  verified {ok}  idle h "
              + " ".join(f"{h:.2f}" for h in idle) + f"  total {idle.sum():.2f}")
    joint = plans["joint"]
    visits = np.zeros(problem.n_targets, dtype=int)
    per_night = np.zeros((problem.n_targets, problem.n_nights), dtype=int)
    for v in joint.visits:
        s = problem.target_names.index(v.target)
        visits[s] += 1
        per_night[s, problem.night_dates.index(v.night)] += 1
    caps = np.array([r.max_visits if r.max_visits is not None else 10**6 for r in problem.rules])
    print(f"joint: targets at their run cap {int(np.sum(visits >= caps))} of "
          f"{problem.n_targets}; visits {visits.sum()} of at most "
          f"{int(np.minimum(caps, 10**4).sum())}")
    start, end = problem.start_jd_grid, problem.end_jd(np.arange(problem.n_candidates))
    lead = problem.min_changeover_min / 1440.0
    print("joint idle stretches >= 15 min: night, start UTC hour, minutes, candidates inside, "
          "of targets the rules still allow")
    for n, a, b in _stretches(joint, problem):
        inside = (problem.night == n) & (start - lead >= a - 1e-9) & (end <= b + 1e-9)
        s = problem.target[inside]
        allowed = (visits[s] < caps[s]) & (
            per_night[s, n] < np.array([problem.rules[k].max_per_night for k in s]))
        hour = ((a + 0.5) % 1.0) * 24.0
        print(f"  night {n} {hour:5.2f}h {(b - a) * 1440:6.1f} min  {int(inside.sum()):4d}  "
              f"{int(allowed.sum()):4d} ({len(set(s[allowed].tolist()))} targets)")
    print("stage            wall s    cpu s")
    for label, wall, cpu in stages:
        print(f"{label:<15} {wall:7.1f} {cpu:8.1f}")


if __name__ == "__main__":
    main()
