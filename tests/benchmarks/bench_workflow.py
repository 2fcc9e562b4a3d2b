"""Benchmark the observer's workflow: `nightbits plan` fresh and cached, and `nightbits replan`.

Each figure is the wall time of the command as an observer runs it (a new process, so the
astropy and solver start-up is included), median over repeats:

* plan, fresh: an empty posterior cache, so every target is fitted (goal: under 120 s on the
  demo, 2 cores);
* plan, cached: posteriors from the cache, default solver time limit (goal: under 45 s);
* replan: after losing the second night, posteriors cached (goal: under 20 s).

Usage::

    python tests/benchmarks/bench_workflow.py           # the demo run (about 40 targets)
    python tests/benchmarks/bench_workflow.py --quick   # the tiny test run, one repeat each
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
TINY = ROOT / "tests" / "data" / "tiny" / "tiny.yaml"


def _run(args, cache: Path, cwd: Path) -> float:
    env = dict(os.environ, NIGHTBITS_CACHE=str(cache), PYTHONPATH=str(ROOT))
    start = time.perf_counter()
    result = subprocess.run([sys.executable, "-m", "planner", *args], cwd=cwd, env=env,
                            capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    if result.returncode != 0:
        raise SystemExit(f"nightbits {' '.join(args)} failed:\n{result.stderr}")
    return elapsed


def main() -> None:
    """Run the benchmark and print the medians."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="tiny run, one repeat")
    parser.add_argument("--repeats", type=int, default=None, help="repeats of the cached runs")
    args = parser.parse_args()
    scenario = [str(TINY)] if args.quick else []
    repeats = args.repeats or (1 if args.quick else 3)
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        cache = work / "cache"
        fresh = _run(["plan", *scenario, "--out", str(work / "p0")], cache, work)
        cached = [_run(["plan", *scenario, "--out", str(work / f"p{k + 1}")], cache, work)
                  for k in range(repeats)]
        plan = json.loads((work / "p0" / "plan.json").read_text())
        night = plan["nights"][1]["date"]
        replans = [_run(["replan", *scenario, "--plan", str(work / "p0" / "plan.json"),
                         "--lost", night, "--out", str(work / f"r{k}")], cache, work)
                   for k in range(repeats)]
    label = "tiny run" if args.quick else "demo run"
    print(f"bench_workflow ({label}, {len(plan['target_bits'])} targets, "
          f"{len(plan['nights'])} nights, {os.cpu_count()} cores)")
    print(f"  plan, fresh cache        : {fresh:7.1f} s  (goal 120 s)")
    print(f"  plan, cached posteriors  : {statistics.median(cached):7.1f} s median of "
          f"{len(cached)}  (goal 45 s)")
    print(f"  replan, one night lost   : {statistics.median(replans):7.1f} s median of "
          f"{len(replans)}  (goal 20 s)")
    print(f"  cached / fresh           : {statistics.median(cached) / fresh:7.2f}")


if __name__ == "__main__":
    main()
