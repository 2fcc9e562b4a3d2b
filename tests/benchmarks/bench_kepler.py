"""Benchmark: Kepler solves per second on one core, worst residual, ratio to numpy.sin.

Run as ``python tests/benchmarks/bench_kepler.py [--quick]``. Prints medians over repeats.
"""

import argparse
import time

import numpy as np

from inference.kepler import ECCENTRICITY_MAX, eccentric_anomaly, kepler_residual


def _median_seconds(fn, repeats):
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return float(np.median(times))


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="1 million pairs, 3 repeats")
    args = parser.parse_args()
    n = 1_000_000 if args.quick else 10_000_000
    repeats = 3 if args.quick else 5
    rng = np.random.default_rng(1)
    m = rng.uniform(-50.0, 50.0, n)
    e = rng.uniform(0.0, ECCENTRICITY_MAX, n)
    out = np.empty(n)
    t_kepler = _median_seconds(lambda: eccentric_anomaly(m, e), repeats)
    t_sin = _median_seconds(lambda: np.sin(m, out=out), repeats)
    worst = float(np.max(np.abs(kepler_residual(eccentric_anomaly(m, e), m, e))))
    t_scalar_e = _median_seconds(lambda: eccentric_anomaly(m, 0.5), repeats)
    print(f"pairs: {n:,}  repeats: {repeats} (medians)")
    print(f"kepler (M, e arrays): {n / t_kepler / 1e6:.2f} million solves/s")
    print(f"kepler (scalar e):    {n / t_scalar_e / 1e6:.2f} million solves/s")
    print(f"numpy.sin:            {n / t_sin / 1e6:.2f} million values/s")
    print(f"time ratio kepler / sin: {t_kepler / t_sin:.2f}")
    print(f"worst residual |E - e sin E - M| (M reduced): {worst:.2e} rad")


if __name__ == "__main__":
    main()
