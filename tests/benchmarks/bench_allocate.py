"""Benchmark of the allocation strategies on the seeded instances of ``instances.py``.

Run ``python tests/benchmarks/bench_allocate.py [--quick] [--scale demo|large|both]``.

For each instance it prints the joint plan's surrogate objective, CP-SAT's proven bound and the
gap, and the exact expected information (``planner.allocation.score``) of the joint, greedy
(surrogate
gains and exact conditional gains) and cadence plans, with the surrogate's error against the
exact score; then medians over the instances and the joint/greedy ratios.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from planner.allocation.cadence import cadence_plan  # noqa: E402
from planner.allocation.greedy import exact_gain, greedy_plan  # noqa: E402
from planner.allocation.joint import joint_plan  # noqa: E402
from planner.allocation.score import score_plan  # noqa: E402
from planner.allocation.surrogate import build_surrogate  # noqa: E402
from tests.benchmarks.instances import sky_instance  # noqa: E402


def _surrogate_error(problem, surrogate, plan, score):
    sur = surrogate.per_target(problem, plan.candidates)
    exact = np.array(score.per_target_bits)
    seen = np.array(score.per_target_visits) >= 2
    rel = np.abs(sur - exact)[seen] / np.maximum(exact[seen], 1e-9)
    total = (sur.sum() - exact.sum()) / exact.sum()
    return (float(np.median(rel)) if rel.size else float("nan")), float(total)


def run(n_targets, n_nights, seed, time_limit_s, workers, n_samples, exact_greedy=True,
        keep_per_group=None, no_calibration=False):
    """One instance: build, plan with every strategy, score; return a dict of figures."""
    t0 = time.perf_counter()
    inst = sky_instance(n_targets, n_nights, seed=seed, n_samples=n_samples)
    p = inst.problem
    surrogate = build_surrogate(p, inst.predictors,
                                rng=None if no_calibration else np.random.default_rng(seed))
    build_s = time.perf_counter() - t0
    rng = np.random.default_rng(seed)
    plans = {"greedy": greedy_plan(p, surrogate), "cadence": cadence_plan(p, surrogate)}
    if exact_greedy:
        plans["greedy_exact"] = greedy_plan(p, surrogate, gain=exact_gain(inst.predictors,
                                                                          rng=rng),
                                            strategy="greedy_exact")
    hint = max(plans["greedy"], plans.get("greedy_exact", plans["greedy"]),
               key=lambda q: q.objective)
    plans["joint"] = joint_plan(p, surrogate, time_limit_s=time_limit_s, workers=workers,
                                seed=seed, hint=hint, keep_per_group=keep_per_group)
    out = {"instance": f"{n_targets}x{n_nights} seed {seed}", "candidates": p.n_candidates,
           "build_s": build_s}
    for name, plan in plans.items():
        score = score_plan(plan, p, inst.predictors, rng=np.random.default_rng(seed + 1))
        err_med, err_total = _surrogate_error(p, surrogate, plan, score)
        out[name] = {
            "visits": len(plan.visits), "surrogate": plan.objective, "exact": score.total_bits,
            "stderr": score.stderr, "runtime_s": plan.runtime_s, "gap": plan.gap,
            "bound": plan.bound, "status": plan.status, "err_median": err_med,
            "err_total": err_total,
        }
    return out


def show(result):
    print(f"\n{result['instance']}: {result['candidates']} candidates, "
          f"instance + surrogate built in {result['build_s']:.1f} s")
    print(f"  {'strategy':<13}{'visits':>7}{'surrogate':>11}{'exact bits':>12}{'+-':>6}"
          f"{'run s':>8}{'gap':>8}  surrogate error (median per star, total)")
    for name in ("cadence", "greedy", "greedy_exact", "joint"):
        if name not in result:
            continue
        r = result[name]
        gap = "" if r["gap"] is None else f"{100 * r['gap']:.2f}%"
        print(f"  {name:<13}{r['visits']:>7}{r['surrogate']:>11.2f}{r['exact']:>12.2f}"
              f"{r['stderr']:>6.2f}{r['runtime_s']:>8.1f}{gap:>8}  "
              f"{100 * r['err_median']:.1f}%, {100 * r['err_total']:+.1f}%")
    j = result["joint"]
    print(f"  joint: status {j['status']}, bound {j['bound']:.2f} (CP-SAT best objective bound)")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small instances, short limits")
    parser.add_argument("--scale", choices=("demo", "large", "both"), default="demo")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--no-calibration", action="store_true",
                        help="surrogate without the exact calibration of its largest pattern")
    parser.add_argument("--keep", type=int, default=None,
                        help="joint: best candidates kept per (star, night, option) + greedy's")
    args = parser.parse_args(argv)
    print("note: timings on a shared 2-core machine; rerun on a quiet one for final figures")
    configs = []
    if args.scale in ("demo", "both"):
        if args.quick:
            configs += [(12, 3, s, 10.0, 300, True) for s in (1, 2)]
        else:
            configs += [(40, 5, s, 60.0, 500, True) for s in (1, 2, 3)]
    if args.scale in ("large", "both"):
        if args.quick:
            configs += [(60, 6, 1, 30.0, 200, False)]
        else:
            configs += [(200, 10, 1, 240.0, 300, True)]
    results = []
    for n_t, n_n, seed, limit, n_samples, exact in configs:
        result = run(n_t, n_n, seed, limit, args.workers, n_samples, exact, args.keep,
                     args.no_calibration)
        show(result)
        results.append(result)
    for size in sorted({r["instance"].split()[0] for r in results}):
        group = [r for r in results if r["instance"].split()[0] == size]
        greedy_best = [max(r["greedy"]["exact"],
                           r.get("greedy_exact", r["greedy"])["exact"]) for r in group]
        ratio = [r["joint"]["exact"] / g for r, g in zip(group, greedy_best, strict=True)]
        cad = [r["joint"]["exact"] / r["cadence"]["exact"] for r in group]
        gaps = [r["joint"]["gap"] for r in group]
        runs = [r["joint"]["runtime_s"] for r in group]
        print(f"\n{size}: over {len(group)} instances, medians: joint/greedy exact "
              f"{statistics.median(ratio):.3f}, joint/cadence {statistics.median(cad):.3f}, "
              f"gap {100 * statistics.median(gaps):.2f}%, "
              f"joint run {statistics.median(runs):.0f} s")


if __name__ == "__main__":
    main()
