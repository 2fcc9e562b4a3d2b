"""Long runs: the demo's stars and rules over more consecutive nights.

Loads the bundled demo (cached posteriors: ``nightbits fit`` first), sets the run to ``--nights``
consecutive nights, prepares it as ``nightbits plan`` does (targets past the surrogate's pattern
limit take the count form), and prints: prepare and surrogate times, the joint model's size,
greedy (surrogate gains), greedy (exact conditional gains, ``--exact-greedy``) and joint (the
pipeline's search, hinted by greedy), their exact scores (``planner.allocation.score``), the
joint / greedy ratios, the solver's status and gap, the wall time of each step and the peak
resident memory of the process (``resource.getrusage``). One run per process, so that the
memory figure is that run's.

    python tests/benchmarks/bench_longruns.py --nights 15 [--exact-greedy]
"""

from __future__ import annotations

import argparse
import dataclasses
import os
import resource
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from planner.allocation.greedy import exact_gain, greedy_plan  # noqa: E402
from planner.allocation.joint import build_model  # noqa: E402
from planner.allocation.score import score_plan  # noqa: E402
from planner.allocation.surrogate import CountValues  # noqa: E402
from planner.workflow import pipeline  # noqa: E402


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--nights", type=int, default=15)
    parser.add_argument("--exact-greedy", action="store_true",
                        help="also the greedy plan by exact conditional gains (slow)")
    parser.add_argument("--cache", default=None, help="posterior cache folder")
    args = parser.parse_args(argv)

    base = pipeline.load(None)
    scenario = dataclasses.replace(base, run=dataclasses.replace(base.run, nights=args.nights))
    posteriors = pipeline.fit_posteriors(
        scenario, cache=pipeline.cache_folder(scenario, args.cache, False))
    t0 = time.perf_counter()
    run = pipeline.prepare(scenario, posteriors)
    prepare_s = time.perf_counter() - t0
    problem, surrogate, predictors = run.problem, run.surrogate, run.predictors
    counted = sum(isinstance(p, CountValues) for p in surrogate.patterns)
    t0 = time.perf_counter()
    _, handles = build_model(problem, surrogate)
    model_s = time.perf_counter() - t0
    print(f"{args.nights} nights: {problem.n_targets} stars, {problem.n_candidates} candidates, "
          f"{counted} stars in the count form; prepare (with the surrogate) {prepare_s:.1f} s, "
          f"model build {model_s:.1f} s, " + ", ".join(f"{k} {v:g}" for k, v in handles.stats))
    del handles

    t0 = time.perf_counter()
    greedy = greedy_plan(problem, surrogate)
    greedy_s = time.perf_counter() - t0
    plans = {"greedy": (greedy, greedy_s)}
    if args.exact_greedy:
        t0 = time.perf_counter()
        plan = greedy_plan(problem, surrogate,
                           gain=exact_gain(predictors, rng=np.random.default_rng(11)))
        plans["greedy-exact"] = (plan, time.perf_counter() - t0)
    t0 = time.perf_counter()
    joint = pipeline.run_strategy(run, "joint", hint=greedy)
    plans["joint"] = (joint, time.perf_counter() - t0)
    scores = {}
    for name, (plan, wall) in plans.items():
        score = score_plan(plan, problem, predictors, rng=np.random.default_rng(5),
                           n_outcomes=512)
        scores[name] = score.total_bits
        extra = ""
        if name == "joint":
            gap = "none" if joint.gap is None else f"{100 * joint.gap:.2f} %"
            extra = f", status {joint.status}, gap {gap}"
        print(f"  {name:<13} {len(plan.visits):4d} visits, exact {score.total_bits:7.2f} "
              f"+- {score.stderr:.2f}, surrogate {plan.objective:7.2f}, {wall:6.1f} s{extra}")
    for name in plans:
        if name != "joint":
            print(f"  joint / {name}: {scores['joint'] / scores[name]:.4f}")
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"  peak memory {peak:.0f} MB; load average {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
