"""Surrogate against the exact joint information on the demo run's three plans.

Loads the bundled demo through the pipeline (cached posteriors: ``nightbits fit`` first),
builds the cadence, greedy and joint plans as ``nightbits compare`` does, and prints per star:
visits, nights, exact joint bits (``planner.information.gain.joint_bits``) with their standard
error,
the surrogate's value and its parts: ``V(first)`` (the pattern of each night's first slot),
``within`` (what the further same-night slots add to ``V``) and ``unary`` (the visits' own
one-visit bits less their slot representatives'). Then per strategy the totals, the median
per-star relative error (stars with two or more visits), the build time of the surrogate, the
model size and the joint solve time.

    python tests/benchmarks/bench_surrogate.py [--quick] [--stars]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from planner.allocation.cadence import cadence_plan  # noqa: E402
from planner.allocation.greedy import greedy_plan  # noqa: E402
from planner.allocation.joint import build_model, joint_plan  # noqa: E402
from planner.allocation.score import score_plan  # noqa: E402
from planner.allocation.surrogate import build_surrogate, slot_bit  # noqa: E402
from planner.workflow import pipeline  # noqa: E402


def decompose(surrogate, problem, s, mine):
    """``(V(first slots), within-night part of V, unary corrections)`` [weighted bit]."""
    nights, counts = np.unique(problem.night[mine], return_counts=True)
    key = surrogate.key(problem, nights, counts)
    first = sum(slot_bit(n, 0, problem.n_nights) for n in nights)
    v_all = surrogate.patterns[s][key]
    v_first = surrogate.patterns[s][first]
    unary = surrogate.unary[mine].sum() - (v_all - surrogate.net(problem, s, key))
    return v_first / surrogate.scale, (v_all - v_first) / surrogate.scale, unary / surrogate.scale


def report(name, plan, problem, surrogate, predictors, rng, n_outcomes, stars):
    score = score_plan(plan, problem, predictors, rng=rng, n_outcomes=n_outcomes)
    per = surrogate.per_target(problem, plan.candidates)
    errors = []
    if stars:
        print(f"\n{name}: star  visits nights   exact +- err   surrogate  V(first) within  unary")
    for s in range(problem.n_targets):
        mine = plan.candidates[problem.target[plan.candidates] == s]
        if mine.size == 0:
            continue
        exact = score.per_target_bits[s]
        if mine.size >= 2 and exact > 0:
            errors.append((per[s] - exact) / exact)
        if stars:
            v1, within, unary = decompose(surrogate, problem, s, mine)
            n_nights = np.unique(problem.night[mine]).size
            print(f"  {problem.target_names[s]:<12} {mine.size:>4} {n_nights:>6}"
                  f" {exact:>8.2f} +-{score.per_target_stderr[s]:.2f} {per[s]:>9.2f}"
                  f" {v1:>9.2f} {within:>6.2f} {unary:>6.2f}")
    errors = np.array(errors)
    total = float(per.sum())
    print(f"{name:<8} exact {score.total_bits:7.2f} +-{score.stderr:.2f}  surrogate {total:7.2f}"
          f"  total error {100 * (total - score.total_bits) / score.total_bits:+6.1f} %"
          f"  median |star error| {100 * np.median(np.abs(errors)):5.1f} %"
          f" (signed {100 * np.median(errors):+5.1f} %, {errors.size} stars)")
    return score


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true",
                        help="8 s joint search and 256 scoring outcomes")
    parser.add_argument("--stars", action="store_true", help="print every star's figures")
    args = parser.parse_args(argv)
    limit, n_outcomes = (8.0, 256) if args.quick else (None, 512)

    scenario = pipeline.load(None)
    posteriors = pipeline.fit_posteriors(scenario,
                                         cache=pipeline.cache_folder(scenario, None, False))
    t0 = time.perf_counter()
    run = pipeline.prepare(scenario, posteriors)
    prepare_s = time.perf_counter() - t0
    problem, predictors = run.problem, run.predictors
    builds = []
    for k in range(1 if args.quick else 3):
        t0 = time.perf_counter()
        build_surrogate(problem, predictors, rng=np.random.default_rng(k))
        builds.append(time.perf_counter() - t0)
    surrogate = run.surrogate
    t0 = time.perf_counter()
    _, handles = build_model(problem, surrogate)
    model_s = time.perf_counter() - t0
    print(f"demo: {problem.n_targets} stars, {problem.n_nights} nights, "
          f"{problem.n_candidates} candidates; prepare {prepare_s:.1f} s, surrogate build "
          f"median {np.median(builds):.2f} s, model build {model_s:.1f} s, "
          + ", ".join(f"{k} {v:g}" for k, v in handles.stats))

    cadence = cadence_plan(problem, surrogate)
    greedy = greedy_plan(problem, surrogate)
    solver = scenario.solver
    joint = joint_plan(problem, surrogate,
                       time_limit_s=solver.time_limit_s if limit is None else limit,
                       seed=solver.seed, workers=solver.workers, hint=greedy,
                       focus_per_group=pipeline.JOINT_FOCUS_PER_GROUP)
    bound = "none" if joint.bound is None else (
        f"{joint.bound:.2f}, gap {100 * joint.gap:.2f} % (whole problem)")
    print(f"joint: status {joint.status}, {joint.runtime_s:.1f} s with the model builds, "
          f"surrogate {joint.objective:.2f} (first stage "
          f"{dict(joint.stats)['focus_objective']:.2f}, greedy {greedy.objective:.2f}), "
          f"bound {bound}")
    rng = np.random.default_rng(solver.seed)
    scores = {}
    for name, plan in (("cadence", cadence), ("greedy", greedy), ("joint", joint)):
        scores[name] = report(name, plan, problem, surrogate, predictors, rng, n_outcomes,
                              args.stars)
    j, g = scores["joint"].total_bits, scores["greedy"].total_bits
    print(f"joint against greedy: {j - g:+.2f} bits ({100 * (j - g) / g:+.1f} %)")


if __name__ == "__main__":
    main()
