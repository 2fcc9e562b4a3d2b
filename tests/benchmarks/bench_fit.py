"""Benchmark: fitting one 1-planet target (30 velocities) and 40 targets with 2 processes.

Run as ``python tests/benchmarks/bench_fit.py [--quick]``. The data are invented here: orbits
drawn at random, velocities from :func:`inference.keplerian.radial_velocity` plus noise.
Prints medians over repeats.
"""

import argparse
import time
from concurrent.futures import ProcessPoolExecutor

import numpy as np

from inference.batch import FitJob, fit_many
from inference.data import RVData
from inference.keplerian import radial_velocity
from inference.model import ModelSpec
from inference.sample import fit
from inference.settings import SamplerSettings


def invented_target(rng, n_obs=30):
    """An invented 1-planet star: random orbit, 30 velocities over about 300 nights."""
    period = float(np.exp(rng.uniform(np.log(3.0), np.log(150.0))))
    k = float(rng.uniform(8.0, 60.0))
    e = float(rng.uniform(0.0, 0.6))
    t = np.sort(2460000.0 + rng.uniform(0.0, 300.0, n_obs)).round(4)
    err = rng.uniform(1.0, 2.5, n_obs)
    v = radial_velocity(t, period, k, e, rng.uniform(-np.pi, np.pi), t[0] + rng.uniform(0, period))
    rv = v + 15.0 + rng.normal(0.0, 1.0, n_obs) * np.hypot(err, 1.5)
    return RVData.from_arrays(t, rv, err, ["bench-spectrograph"] * n_obs, source="invented")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="3 repeats and 8 batch targets")
    args = parser.parse_args()
    repeats = 3 if args.quick else 7
    n_batch = 8 if args.quick else 40
    rng = np.random.default_rng(7)
    settings = SamplerSettings()
    times, cpu, ess, k_hat = [], [], [], []
    data = invented_target(rng)
    model = ModelSpec.for_data(data, period_range=(1.0, 1000.0))
    fit(data, model, settings, rng=0)  # warm-up: imports and first-call costs
    for r in range(repeats):
        start, cpu_start = time.perf_counter(), time.process_time()
        post = fit(data, model, settings, rng=r)
        times.append(time.perf_counter() - start)
        cpu.append(time.process_time() - cpu_start)
        ess.append(post.diagnostics.ess)
        k_hat.append(post.diagnostics.k_hat)
    print(
        f"one target, 30 velocities, n_samples={settings.n_samples} "
        f"({repeats} repeats, medians):"
    )
    print(f"  wall time {np.median(times):.2f} s (min {min(times):.2f}, max {max(times):.2f})")
    print(f"  CPU time {np.median(cpu):.2f} s (wall above CPU means a loaded machine)")
    print(f"  effective samples {np.median(ess):.0f}, Pareto k-hat {np.median(k_hat):.2f}")
    jobs = []
    for i in range(n_batch):
        d = invented_target(rng)
        jobs.append(
            FitJob(
                f"star-{i:02d}",
                d,
                ModelSpec.for_data(d, period_range=(1.0, 1000.0)),
                settings,
                seed=i,
            )
        )
    start = time.perf_counter()
    with ProcessPoolExecutor(max_workers=2) as pool:
        results = fit_many(jobs, executor=pool)
    wall = time.perf_counter() - start
    failed = sum(1 for r in results.values() if not hasattr(r, "samples"))
    print(
        f"{n_batch} targets, 2 processes: wall time {wall:.1f} s "
        f"({wall / n_batch:.2f} s per target, process start-up included), failures {failed}"
    )


if __name__ == "__main__":
    main()
