"""Benchmark: information about part of the parameters against its closed form, and its cost.

Run as ``python tests/benchmarks/bench_subset.py [--quick]``. The reference is the
linear-Gaussian case y = a P + b Z + noise with P, Z standard normal, where
I(P; y) = 0.5 log2(1 + a^2 / (b^2 + sigma^2)) (Lindley 1956). Prints:

* the trade-off table of ``docs/information.md``: mean error of ``label_bits`` on equal-count
  period intervals against the closed form, without and with the random-deal baseline, by
  samples per interval, for N = 2,000 (10 sample sets) and N = 200 (40 sample sets);
* the same at the default label count round(sqrt(N / 2));
* the cost of ``label_bits`` against ``one_visit_bits`` on 2,000 samples x 500 times.
"""

import argparse
import math
import statistics
import time

import numpy as np

from planner.information.gain import one_visit_bits
from planner.information.labels import default_label_count, interval_labels
from planner.information.partial import label_bits

#: (a, b, sigma) of the linear-Gaussian cases.
CASES = ((2.0, 1.0, 1.0), (5.0, 0.5, 0.5), (1.0, 2.0, 0.5), (1.0, 4.0, 0.5), (3.0, 6.0, 0.5))


def closed_form(a, b, sigma):
    """I(P; y) for y = a P + b Z + noise, P and Z standard normal [bits]."""
    return 0.5 * math.log2(1.0 + a * a / (b * b + sigma * sigma))


def errors(n, n_sets, a, b, sigma, n_intervals):
    """Mean error [bits] of the raw and the baseline-corrected interval bits over sample sets."""
    exact = closed_form(a, b, sigma)
    raw, corrected = [], []
    for seed in range(n_sets):
        rng = np.random.default_rng(1000 + seed)
        p, z = rng.standard_normal(n), rng.standard_normal(n)
        v = (a * p + b * z)[:, None]
        labels = interval_labels(p, n_intervals)
        raw.append(label_bits(v, sigma, labels, baseline=False)[0] - exact)
        corrected.append(label_bits(v, sigma, labels)[0] - exact)
    return float(np.mean(raw)), float(np.mean(corrected))


def trade_off(n, n_sets, per_interval):
    print(f"N = {n}, {n_sets} sample sets: mean error raw / with baseline [bits], by samples "
          "per interval")
    print("| a, b, sigma | I(P; y) | " + " | ".join(f"{k} per" for k in per_interval) + " |")
    for a, b, sigma in CASES:
        cells = [errors(n, n_sets, a, b, sigma, n // k) for k in per_interval]
        print(f"| {a:g}, {b:g}, {sigma:g} | {closed_form(a, b, sigma):.3f} | "
              + " | ".join(f"{r:+.3f} / {c:+.3f}" for r, c in cells) + " |", flush=True)


def defaults(n, n_sets):
    k = default_label_count(n)
    print(f"N = {n}, default {k} labels, {n_sets} sample sets:")
    for a, b, sigma in CASES:
        r, c = errors(n, n_sets, a, b, sigma, None)
        print(f"  a, b, sigma = {a:g}, {b:g}, {sigma:g}: I(P; y) {closed_form(a, b, sigma):.3f}; "
              f"error raw {r:+.3f}, with baseline {c:+.3f}", flush=True)


def cost(repeats):
    rng = np.random.default_rng(7)
    n, n_t = 2000, 500
    period = rng.standard_normal(n)
    v = 3.0 * period[:, None] * np.sin(np.linspace(0, 6, n_t))[None, :] \
        + 2.0 * rng.standard_normal((n, 1))
    labels = interval_labels(period)
    times = {}
    for name, fn in (("one_visit_bits", lambda: one_visit_bits(v, 1.0)),
                     ("label_bits", lambda: label_bits(v, 1.0, labels)),
                     ("label_bits, no baseline", lambda: label_bits(v, 1.0, labels,
                                                                    baseline=False))):
        runs = []
        for _ in range(repeats):
            t0 = time.process_time()
            fn()
            runs.append(time.process_time() - t0)
        times[name] = statistics.median(runs)
    base = times["one_visit_bits"]
    print(f"cost, {n} samples x {n_t} times, {labels.n_labels} labels (median CPU of {repeats}):")
    for name, t in times.items():
        print(f"  {name:24s} {t:6.3f} s  ({t / base:4.1f}x one_visit_bits)")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer sample sets, one size")
    args = parser.parse_args()
    if args.quick:
        trade_off(2000, 2, (20, 100))
        defaults(200, 5)
        cost(1)
        return
    trade_off(2000, 10, (20, 50, 100, 200))
    trade_off(200, 40, (10, 20, 50, 100))
    defaults(2000, 10)
    defaults(200, 40)
    cost(3)


if __name__ == "__main__":
    main()
