"""Benchmark: the demo run executed against its true orbits, every strategy, many seeds.

Run as ``python tests/benchmarks/bench_simulate.py [--quick] [--seeds N] [--cache DIR]``.
Prints, per strategy, the expected bits, the realised bits (mean and standard deviation over
seeds), the volume shrink, the exposures, the exposures needed to reach the cadence plan's
whole-run realised information in the same seed (and the saving against cadence's whole run),
the joint-minus-greedy realised difference paired by seed, and the median wall time of one
strategy-seed run. The demo stars and their truths are invented (``scenarios/make_demo.py``).
"""

import argparse
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from planner.cli.simulate import render_tables  # noqa: E402
from planner.simulation.experiment import STRATEGIES, build_setup, run_strategy  # noqa: E402
from planner.simulation.scoreboard import Experiment, summarise  # noqa: E402
from planner.simulation.truth import read_truths  # noqa: E402
from planner.workflow import pipeline  # noqa: E402


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="3 seeds, 5 s solver limit")
    parser.add_argument("--seeds", type=int, default=None, help="seeds (default 10, quick 3)")
    parser.add_argument("--cache", default=str(Path.home() / ".cache" / "nightbits"),
                        help="posterior cache folder")
    parser.add_argument("--time-limit", type=float, default=None,
                        help="solver limit per joint plan [s] (default: scenario's; quick 5)")
    parser.add_argument("--jobs", type=int, default=2, help="fit processes")
    parser.add_argument("--strategies", nargs="+", choices=STRATEGIES, default=list(STRATEGIES),
                        help="strategies to run (cadence is needed for the cost to reach)")
    args = parser.parse_args()
    n_seeds = args.seeds or (3 if args.quick else 10)
    limit = args.time_limit if args.time_limit is not None else (5.0 if args.quick else None)

    scenario = pipeline.load(None)
    start = time.perf_counter()
    posteriors = pipeline.fit_posteriors(scenario, cache=Path(args.cache), jobs=args.jobs)
    print(f"posteriors: {len(posteriors)} targets in {time.perf_counter() - start:.0f} s "
          "(cached after the first run)")
    truths = read_truths(scenario.path.parent / "truth")
    start = time.perf_counter()
    setup = build_setup(scenario, posteriors, truths, time_limit_s=limit)
    print(f"prepared the run in {time.perf_counter() - start:.0f} s; solver limit "
          f"{limit if limit is not None else scenario.solver.time_limit_s} s per joint plan")

    strategies = [s for s in STRATEGIES if s in args.strategies]
    fixed, runs, wall = {}, [], {s: [] for s in strategies}
    # Strategy by strategy (adaptive, the slow one, last), so partial output is already useful.
    for name in strategies:
        for seed in range(n_seeds):
            t0 = time.perf_counter()
            runs.append(run_strategy(setup, name, seed, fixed_plans=fixed))
            wall[name].append(time.perf_counter() - t0)
            r = runs[-1]
            print(f"{name:<9} seed {seed}: expected {r.expected_bits:.2f}, realised "
                  f"{r.realised_bits:.2f}, shrink {r.shrink_bits:.2f}, {r.exposures} exposures, "
                  f"{wall[name][-1]:.1f} s", flush=True)

    exp = Experiment(seeds=tuple(range(n_seeds)), runs=tuple(runs),
                     summaries=summarise(runs, strategies, tuple(posteriors)))
    print()
    print(render_tables(exp))
    cadence = exp.summary("cadence") if "cadence" in strategies else None
    print("figures")
    for s in exp.summaries:
        if cadence is None:
            saving = "cadence not run"
        elif s.reach_exposures is None:
            saving = "never reaches it"
        else:
            fewer = 100 * (1 - s.reach_exposures / cadence.exposures)
            saving = (f"{s.reach_exposures:.1f} exposures ({fewer:+.0f}% against cadence's "
                      f"{cadence.exposures:.0f}), hours {s.reach_hours:.2f} vs "
                      f"{cadence.hours:.2f}, reached in {100 * s.reach_fraction:.0f}% of seeds")
        print(f"  {s.strategy:<9} realised {s.realised_bits_mean:6.2f} +- "
              f"{s.realised_bits_std:4.2f} bits (expected {s.expected_bits:6.2f}); "
              f"to reach cadence: {saving}; median wall {np.median(wall[s.strategy]):.1f} s")
    for name in [s for s in ("joint", "greedy", "cadence") if s in fixed]:
        plan, _, mine = fixed[name]
        _, per_target = pipeline.exact_marginals(setup.prepared, plan)
        print(f"  {name:<9} expected bits: {mine:.2f} at exact mid-exposure noise, "
              f"{sum(per_target.values()):.2f} by the plan score on the grid")
    by = {(r.strategy, r.seed): r.realised_bits for r in runs}
    for a, b in (("joint", "greedy"), ("adaptive", "joint"), ("adaptive", "cadence"),
                 ("joint", "cadence")):
        if a not in strategies or b not in strategies:
            continue
        diff = np.array([by[(a, k)] - by[(b, k)] for k in range(n_seeds)])
        se = diff.std(ddof=1) / np.sqrt(diff.size) if diff.size > 1 else float("nan")
        print(f"  {a} - {b} realised: {diff.mean():+.2f} +- {se:.2f} bits (paired over "
              f"{diff.size} seeds; {a} ahead in {int(np.sum(diff > 0))})")


if __name__ == "__main__":
    main()
