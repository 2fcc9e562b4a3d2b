"""Benchmark: fresh fits of every demo star with the demo's sampler settings, 2 processes.

Run as ``python tests/benchmarks/bench_demo_fits.py [--repeats N]``. Prints the wall time of
all fits, the median and worst time per star, every fit that fell short of its targets, and
per star its period modes of at least 5%, effective sample size, k-hat and ln Z.
"""

import argparse
import os
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np

from inference.batch import fit_many
from planner.workflow.fitting import fit_jobs
from planner.workflow.scenario import load_scenario


def _warm(_index=0):
    import emcee  # noqa: F401  (import cost paid once per worker, as in a real run)

    return os.getpid()


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=1)
    parser.add_argument("--table", action="store_true", help="print every star's modes")
    args = parser.parse_args()
    scenario = load_scenario(os.path.join(os.path.dirname(__file__), "..", "..", "scenarios",
                                          "demo", "demo.yaml"))
    jobs = fit_jobs(scenario)
    walls = []
    for _ in range(args.repeats):
        with ProcessPoolExecutor(max_workers=2) as pool:
            list(pool.map(_warm, range(2)))
            start = time.perf_counter()
            results = fit_many(jobs, executor=pool)
            walls.append(time.perf_counter() - start)
    seconds = np.array([r.diagnostics.seconds for r in results.values()])
    short = [(t, r.diagnostics.message) for t, r in results.items() if not r.diagnostics.ok]
    print(f"{len(jobs)} demo stars, 2 processes, load average at start "
          f"{os.getloadavg()[0]:.1f}: wall {np.median(walls):.1f} s (median of {len(walls)}); "
          f"per star median {np.median(seconds):.2f} s, worst {seconds.max():.2f} s "
          f"({max(results, key=lambda t: results[t].diagnostics.seconds)})")
    print(f"fits short of their targets: {len(short)}")
    for target, message in short:
        print(f"  {target}: {message}")
    if args.table:
        for target, post in results.items():
            d = post.diagnostics
            modes = ", ".join(f"P{m['planet']} {m['period_mid']:.4g} d {m['share']:.0%}"
                              for m in d.modes if m["share"] >= 0.05)
            print(f"  {target:<12} ESS {d.ess:6.0f}  k-hat {d.k_hat:5.2f}  "
                  f"ln Z {d.log_evidence:8.2f} +- {d.log_evidence_se:.2f}  {d.seconds:5.2f} s  "
                  f"{modes}")


if __name__ == "__main__":
    main()
