"""Benchmark packing: each strategy's plan on grid starts against the same plan packed.

For the demo run (posteriors from the cache; the first run fits every target) it solves each
strategy once on the grid-start problem and packs that same plan
(:func:`planner.workflow.pipeline.pack`), then prints for both, per night: exposing, overheads
(slews, settling, acquisition, readout) and idle hours, the share of dark time with the shutter
open, the minutes of gaps under 3 minutes, and the exact bits
(:func:`planner.allocation.score.score_plan`, 2048 outcomes, one seed for both). With
``--alternatives`` it also packs the joint plan with the exact conditional refill gain and with
compaction alone, for the decision log.

Usage::

    python tests/benchmarks/bench_packing.py [--cache DIR] [--time-limit S] [--alternatives]
                                             [SCENARIO]

The default scenario is the source tree's ``scenarios/demo/demo.yaml``.
"""

from __future__ import annotations

import argparse
import dataclasses
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]


def night_parts(plan, problem) -> np.ndarray:
    """Hours per night of exposing, overheads and idle, shape (n_nights, 3).

    Overheads before the dark start are not counted (they lie outside the window).
    """
    parts = np.zeros((problem.n_nights, 3))
    for v in plan.visits:
        n = problem.night_dates.index(v.night)
        d0 = problem.dark_jd[n, 0]
        parts[n, 0] += v.exposure_s / 3600.0
        parts[n, 1] += max(0.0, min(v.slew_s, (v.start_jd - d0) * 86400.0)) / 3600.0
    dark = (problem.dark_jd[:, 1] - problem.dark_jd[:, 0]) * 24.0
    parts[:, 2] = dark - parts[:, 0] - parts[:, 1]
    return parts


def small_gaps_min(plan, problem, under_s: float = 180.0) -> np.ndarray:
    """Minutes per night of idle gaps between exposures shorter than ``under_s``."""
    out = np.zeros(problem.n_nights)
    visits = sorted(plan.visits, key=lambda v: v.start_jd)
    for a, b in zip(visits, visits[1:], strict=False):
        if a.night == b.night:
            gap = (b.start_jd - b.slew_s / 86400.0 - a.end_jd) * 86400.0
            if 0.0 < gap < under_s:
                out[problem.night_dates.index(a.night)] += gap / 60.0
    return out


def _row(label, plan, problem, predictors, seed):
    from planner.allocation.score import score_plan

    score = score_plan(plan, problem, predictors, rng=np.random.default_rng(seed),
                       n_outcomes=2048)
    parts = night_parts(plan, problem)
    dark = parts.sum()
    print(f"{label:<22} {len(plan.visits):>4} visits  exact {score.total_bits:7.2f} "
          f"+-{score.stderr:.2f} bits  shutter {100 * parts[:, 0].sum() / dark:5.1f}%  "
          f"overheads {100 * parts[:, 1].sum() / dark:5.1f}%  idle "
          f"{100 * parts[:, 2].sum() / dark:5.1f}%")
    gaps = small_gaps_min(plan, problem)
    for n, date in enumerate(problem.night_dates):
        e, o, i = parts[n]
        print(f"    {date}  exposing {e:5.2f} h  overheads {o:5.2f} h  idle {i:5.2f} h "
              f"gaps < 3 min {gaps[n]:5.1f} min")
    return score.total_bits


def main(argv=None) -> None:
    from planner.allocation.packing import exact_refill_gain, pack_plan
    from planner.workflow import pipeline

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("scenario", nargs="?", default=str(ROOT / "scenarios/demo/demo.yaml"))
    parser.add_argument("--cache", default=None)
    parser.add_argument("--time-limit", type=float, default=None)
    parser.add_argument("--alternatives", action="store_true")
    args = parser.parse_args(argv)
    scenario = pipeline.load(args.scenario)
    cache = pipeline.cache_folder(scenario, args.cache, False)
    posteriors = pipeline.fit_posteriors(scenario, cache)
    run = pipeline.prepare(scenario, posteriors)
    seed = scenario.solver.seed
    for strategy in ("cadence", "greedy", "joint"):
        plan = pipeline.run_strategy(run, strategy, args.time_limit)
        t0 = time.perf_counter()
        packing = pipeline.pack(run, plan)
        pack_s = time.perf_counter() - t0
        before = _row(f"{strategy} grid starts", plan, run.problem, run.predictors, seed)
        after = _row(f"{strategy} packed", packing.plan, packing.problem, run.predictors, seed)
        packed_run = dataclasses.replace(run, problem=packing.problem)
        ok = pipeline.verify(packed_run, packing.plan).ok
        print(f"  {strategy}: packing {pack_s:.1f} s, {packing.moved} moved, {packing.added} "
              f"added, exact bits {100 * (after - before) / before:+.1f}%, verified {ok}\n")
        if args.alternatives and strategy == "joint":
            exact = exact_refill_gain(run.problem, run.predictors,
                                      rng=np.random.default_rng(seed))
            for label, kwargs in (("joint exact gain", {"gain": exact}),
                                  ("joint compaction only", {"refill": False})):
                t0 = time.perf_counter()
                alt = pack_plan(run.problem, run.surrogate, plan, **kwargs)
                print(f"  ({time.perf_counter() - t0:.1f} s)")
                _row(label, alt.plan, alt.problem, run.predictors, seed)


if __name__ == "__main__":
    main()
