"""Benchmark: information curves for 200 targets and the exact joint score of a 40-target plan.

Run as ``python tests/benchmarks/bench_information.py [--quick]``. Posteriors are invented here:
each target gets a random orbit and 2,000 samples scattered around it with
``Predictor.from_parameters`` (per-sample jitter included). Runs on one core; prints medians over
repeats. Figures:

* curves: 200 targets x 10 nights on a 2-minute grid x 2 exposure options, 2,000 samples each,
  at observable starts only (goal < 30 s), as built by default (every other grid time
  evaluated, the rest filled in under a 1e-4 bit error bound) and with every start evaluated,
  and the largest difference between the two;
* joint: the exact joint information of a 40-target plan with up to 6 visits per star
  (goal < 2 s);
* conditional: one greedy step, the gain of every candidate start of one star given 6 planned
  visits;
* accuracy: the curve's bits against the same entropies on a grid four times finer.
"""

import argparse
import statistics
import time

import numpy as np

from planner.information.curves import build_curve
from planner.information.entropy import mixture_entropy_bits
from planner.information.gain import conditional_bits, joint_bits
from planner.information.predict import Predictor

STEP_D = 120.0 / 86400.0
N_SAMPLES = 2000
EXPOSURES_S = (600.0, 1200.0)


def invented_posterior(rng, n=N_SAMPLES):
    """Samples around an invented orbit, with the spreads of a partly known star."""
    period = float(np.exp(rng.uniform(np.log(2.0), np.log(300.0))))
    k = float(rng.uniform(3.0, 80.0))
    e = float(rng.uniform(0.0, 0.6))
    frac = rng.uniform(0.002, 0.02)
    return Predictor.from_parameters(
        rng.normal(period, frac * period, n),
        np.abs(rng.normal(k, 0.1 * k, n)),
        np.clip(rng.normal(e, 0.05, n), 0.0, 0.9),
        rng.normal(rng.uniform(0, 2 * np.pi), 0.2, n),
        2460000.0 + rng.normal(rng.uniform(0, period), 0.03 * period, n),
        offset=rng.normal(0.0, 0.5, n),
        jitter=np.abs(rng.normal(rng.uniform(1.0, 3.0), 0.3, n)),
    )


def invented_run(rng, n_nights=10):
    """Grid of 10 nights (10 h each, 2-minute steps) and a target's observable starts."""
    t = np.concatenate([2460300.0 + d + np.arange(0.0, 10 / 24, STEP_D) for d in range(n_nights)])
    obs = np.zeros((len(EXPOSURES_S), t.size), bool)
    for d in range(n_nights):
        night = (t >= 2460300.0 + d) & (t < 2460300.0 + d + 10 / 24)
        start = 2460300.0 + d + rng.uniform(0.0, 4.5 / 24)
        for o, exp_s in enumerate(EXPOSURES_S):
            # Observable for about 5 h, the exposure ending inside the window.
            obs[o] |= night & (t >= start) & (t + exp_s / 86400 <= start + 5.2 / 24)
    sigma = np.stack([np.full(t.size, 1.6), np.full(t.size, 1.1)])
    sigma *= 1.0 + 0.2 * np.sin(np.linspace(0, 20 * np.pi, t.size))[None, :] ** 2  # airmass-like
    return t, obs, sigma


def _timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def _timed_cpu(fn):
    """Wall and CPU (process) time of one call: on a shared machine CPU time is steadier."""
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return time.perf_counter() - w0, time.process_time() - c0, out


def machine_reference():
    """Seconds for numpy.sin on 10 million floats: a yardstick to compare machines by."""
    x = np.linspace(0.0, 100.0, 10_000_000)
    return statistics.median(_timed_cpu(lambda: np.sin(x))[1] for _ in range(3))


def _time_curves(stars, runs, repeats, interpolate):
    walls, cpus, curves = [], [], []
    for _ in range(repeats):
        def run():
            return [build_curve(pred, t, sig, obs, EXPOSURES_S, interpolate=interpolate)
                    for pred, (t, obs, sig) in zip(stars, runs, strict=True)]
        wall, cpu, curves = _timed_cpu(run)
        walls.append(wall)
        cpus.append(cpu)
    return statistics.median(walls), statistics.median(cpus), curves


def bench_curves(n_targets, repeats):
    rng = np.random.default_rng(42)
    stars = [invented_posterior(rng) for _ in range(n_targets)]
    runs = [invented_run(rng) for _ in range(n_targets)]
    n_entropies = sum(int(r[1].sum()) for r in runs)
    scale = 200 / n_targets
    print(f"curves: {n_targets} targets x {runs[0][0].size} grid times x 2 options, "
          f"{N_SAMPLES} samples; {n_entropies} observable (option, start) pairs")
    results = {}
    for label, interpolate in (("default (filled in)", True), ("every start evaluated", False)):
        med, med_cpu, curves = _time_curves(stars, runs, repeats, interpolate)
        results[interpolate] = (med_cpu, curves)
        print(f"  {label:22s} median wall {med:6.2f} s, CPU {med_cpu:6.2f} s over {repeats} "
              f"repeats ({1e6 * med_cpu / n_entropies:5.1f} us CPU per start); CPU scaled to "
              f"200 targets {med_cpu * scale:6.2f} s (goal < 30 s)")
    diff = np.concatenate([np.abs(a.bits - b.bits)[np.isfinite(a.bits)] for a, b in zip(
        results[True][1], results[False][1], strict=True)])
    print(f"  filled in / every start: CPU ratio {results[True][0] / results[False][0]:.3f}; "
          f"|difference| median {np.median(diff):.1e}, max {diff.max():.1e} bit")
    pred_times = []
    for pred, (t, _, _) in zip(stars[:20], runs[:20], strict=True):
        pred_times.append(_timed(lambda p=pred, tt=t: p.velocities(tt))[0])
    build = [_timed(lambda i=i: invented_posterior(np.random.default_rng(i)))[0] for i in range(20)]
    print(f"  predictions of a whole grid per target: median "
          f"{statistics.median(pred_times) * 1e3:5.1f} ms; building a predictor (tables): "
          f"median {statistics.median(build) * 1e3:5.1f} ms")
    return stars, runs


def bench_accuracy(stars, runs):
    errs = []
    for pred, (t, obs, sig) in zip(stars[:5], runs[:5], strict=True):
        j = np.flatnonzero(obs[1])[::25]
        v = pred.velocities(t[j])
        jit2 = pred.jitter[:, None] ** 2
        fast = mixture_entropy_bits(v, jit2, sig[1, j][None, :] ** 2)
        fine = mixture_entropy_bits(v, jit2, sig[1, j][None, :] ** 2, bin_fraction=0.125)
        errs.append(np.abs(fast - fine).ravel())
    errs = np.concatenate(errs)
    print(f"accuracy: |default grid - 4x finer grid| over {errs.size} entropies: median "
          f"{np.median(errs):.1e} bit, max {errs.max():.1e} bit (goal < 0.01 bit)")


def bench_joint(stars, runs, repeats):
    rng = np.random.default_rng(3)
    n_t = min(40, len(stars))
    plans = []
    for i in range(n_t):
        t, obs, sig = runs[i]
        starts = np.sort(rng.choice(np.flatnonzero(obs[1]), size=int(rng.integers(1, 7)),
                                    replace=False))
        plans.append((stars[i], t[starts] + 0.5 * EXPOSURES_S[1] / 86400, sig[1, starts]))

    def score():
        total, var = 0.0, 0.0
        for pred, times, sig in plans:
            v = pred.velocities(times)
            s = np.sqrt(sig[None, :] ** 2 + pred.jitter[:, None] ** 2)
            est = joint_bits(v, s, rng)
            total += est.bits
            var += est.stderr**2
        return total, var**0.5

    walls, cpus = [], []
    for _ in range(repeats):
        wall, cpu, (total, err) = _timed_cpu(score)
        walls.append(wall)
        cpus.append(cpu)
    n_vis = sum(p[1].size for p in plans)
    print(f"joint: {n_t}-target plan, {n_vis} visits (1-6 per star), {N_SAMPLES} samples: "
          f"median wall {statistics.median(walls):.3f} s, CPU {statistics.median(cpus):.3f} s "
          f"(goal < 2 s); score {total:.2f} +- {err:.2f} bits")


def bench_conditional(stars, runs, repeats):
    rng = np.random.default_rng(5)
    pred = stars[0]
    t, obs, sig = runs[0]
    cand = np.flatnonzero(obs[1])
    planned = np.sort(rng.choice(cand, size=6, replace=False))
    jit2 = pred.jitter[:, None] ** 2
    vs = pred.velocities(t[planned])
    vn = pred.velocities(t[cand])
    walls, cpus = [], []
    for _ in range(repeats):
        wall, cpu, _ = _timed_cpu(lambda: conditional_bits(
            vs, np.sqrt(sig[1, planned] ** 2 + jit2), vn, np.sqrt(sig[1, cand] ** 2 + jit2), rng))
        walls.append(wall)
        cpus.append(cpu)
    print(f"conditional: {cand.size} candidate starts given 6 planned visits, 64 outcomes: "
          f"median wall {statistics.median(walls):.3f} s, CPU {statistics.median(cpus):.3f} s")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="20 targets, fewer repeats")
    args = parser.parse_args()
    n_targets = 20 if args.quick else 200
    repeats = 1 if args.quick else 3
    print(f"machine yardstick: numpy.sin on 1e7 floats {machine_reference():.3f} s CPU")
    stars, runs = bench_curves(n_targets, repeats)
    bench_accuracy(stars, runs)
    bench_joint(stars, runs, 3 if args.quick else 5)
    bench_conditional(stars, runs, 3)


if __name__ == "__main__":
    main()
