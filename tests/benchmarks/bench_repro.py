"""Benchmark the reproducible (work-limited) joint search against the wall-clock search.

On the demo run (posteriors from the cache), for each repeat:

* the joint plan with a work limit (CP-SAT deterministic time, the default mode): its time, the
  CPU time of the process during the search, the exact bits, and whether its visits are the
  same as the first repeat's;
* the joint plan with a wall-clock limit (the former default, 25 s), and with a wall-clock
  limit equal to the deterministic plan's own search time: time and exact bits.

Exact bits are :func:`planner.allocation.score.score_plan` with the run's Monte Carlo streams
(one seed, one stream per star), 2048 outcomes, so two equal plans have equal bits.

The machine is shared and noisy: the wall times depend on its load (printed). The CPU time of
the search divided by the workers is what a quiet machine with that many cores would take
(every worker thread busy all the time), which is how the default work limit is calibrated.

Usage::

    python tests/benchmarks/bench_repro.py [--work W] [--repeats N] [--cache DIR]
    python tests/benchmarks/bench_repro.py --quick     # the tiny test run, one repeat
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
TINY = ROOT / "tests" / "data" / "tiny" / "tiny.yaml"
#: This tree's demo (``pipeline.load(None)`` would take the installed package's).
DEMO = ROOT / "scenarios" / "demo" / "demo.yaml"


def _cpu_s() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def _solve(run, limit):
    from planner.allocation.joint import joint_plan
    from planner.allocation.score import score_plan
    from planner.information.streams import Streams
    from planner.workflow.pipeline import JOINT_FOCUS_PER_GROUP

    solver = run.scenario.solver
    cpu0, t0 = _cpu_s(), time.perf_counter()
    plan = joint_plan(run.problem, run.surrogate, limit=limit, seed=solver.seed,
                      workers=solver.workers, focus_per_group=JOINT_FOCUS_PER_GROUP)
    wall, cpu = time.perf_counter() - t0, _cpu_s() - cpu0
    score = score_plan(plan, run.problem, run.predictors, streams=Streams(solver.seed),
                       n_outcomes=2048)
    return plan, wall, cpu, score.total_bits


def main() -> None:
    """Run the benchmark and print medians and ratios."""
    from planner.allocation.joint import SearchLimit
    from planner.workflow import pipeline

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny run, one repeat")
    parser.add_argument("--work", type=float, default=None,
                        help="work limit (default: the scenario's solver.work_limit)")
    parser.add_argument("--wall", type=float, default=25.0,
                        help="wall-clock limit of the former default [s]")
    parser.add_argument("--repeats", type=int, default=None)
    parser.add_argument("--cache", default=None, help="posterior cache folder")
    args = parser.parse_args()
    scenario = pipeline.load(TINY if args.quick else DEMO)
    repeats = args.repeats or (1 if args.quick else 3)
    cache = pipeline.cache_folder(scenario, args.cache, False)
    posteriors = pipeline.fit_posteriors(scenario, cache=cache)
    run = pipeline.prepare(scenario, posteriors)
    work = args.work or scenario.solver.work_limit
    workers = scenario.solver.workers
    print(f"{scenario.name}: {run.problem.n_candidates} candidates, {workers} workers, "
          f"{os.cpu_count()} cores; load average at start {os.getloadavg()[0]:.1f}")
    rows = {"work": [], "wall": [], "wall_same": []}
    first = None
    for _ in range(repeats):
        plan, wall, cpu, bits = _solve(run, SearchLimit(work=work))
        same = first is None or tuple(plan.candidates) == tuple(first.candidates)
        first = first or plan
        rows["work"].append((wall, cpu, bits, same))
        print(f"work {work:g}: {wall:6.1f} s, CPU {cpu:6.1f} s, {bits:.3f} exact bits, "
              f"{len(plan.visits)} exposures, same plan as repeat 1: {same}, "
              f"load {os.getloadavg()[0]:.1f}", flush=True)
        plan, wall2, cpu2, bits2 = _solve(run, SearchLimit(seconds=args.wall))
        rows["wall"].append((wall2, cpu2, bits2, True))
        print(f"wall {args.wall:g} s: {wall2:6.1f} s, CPU {cpu2:6.1f} s, {bits2:.3f} exact bits, "
              f"{len(plan.visits)} exposures", flush=True)
        plan, wall3, cpu3, bits3 = _solve(run, SearchLimit(seconds=max(wall - 2.0, 1.0)))
        rows["wall_same"].append((wall3, cpu3, bits3, True))
        print(f"wall {max(wall - 2.0, 1.0):.1f} s (the work run's time less the build): "
              f"{wall3:6.1f} s, {bits3:.3f} exact bits", flush=True)
    med = {name: [statistics.median(r[i] for r in v) for i in range(3)]
           for name, v in rows.items()}
    print(f"\nmedians over {repeats} repeat(s):")
    for name, (wall, cpu, bits) in med.items():
        print(f"  {name:<9} {wall:6.1f} s  CPU {cpu:6.1f} s  {bits:.3f} exact bits")
    print(f"deterministic / wall-clock {args.wall:g} s time: "
          f"{med['work'][0] / med['wall'][0]:.2f}; quiet-machine estimate of the work run "
          f"(CPU / {workers} workers): {med['work'][1] / workers:.1f} s")
    print(f"exact bits, work - wall {args.wall:g} s: {med['work'][2] - med['wall'][2]:+.3f}; "
          f"work - wall of the same time: {med['work'][2] - med['wall_same'][2]:+.3f}")
    print(f"every work-limited repeat gave the same plan: {all(r[3] for r in rows['work'])}")


if __name__ == "__main__":
    main()
