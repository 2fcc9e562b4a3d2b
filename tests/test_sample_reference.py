"""The sampler against an independent brute-force posterior on six invented sparse datasets.

The reference (tests/brute_force.py) draws 10^7 parameter vectors from the priors of
docs/priors.md and weights each by the marginal likelihood, both written from that page alone
(Kepler's equation by Newton's method, the Gaussian on the full n x n covariance). Weighted
prior draws are exact posterior draws, so every mode gets its right share, up to the
reference's own Monte Carlo error. Checks, for each dataset:

- every reference mode holding at least 3% of the mass holds, in the fit's samples, a mass
  within max(0.05, 3 reference standard errors) of the reference's;
- the total-variation distance between the two log-period histograms is at most 0.08;
- ln Z agrees with the reference's within three combined standard errors.

Run with ``pytest -m slow tests/test_sample_reference.py``; ``python
tests/test_sample_reference.py`` prints the comparison table.
"""

import numpy as np
import pytest
from brute_force import brute_force

from inference.data import RVData
from inference.keplerian import radial_velocity
from inference.model import ModelSpec
from inference.sample import fit
from inference.settings import SamplerSettings

N_DRAWS = 10_000_000
SETTINGS = SamplerSettings(n_samples=4000)


def _data(name, t, period, k, e, omega, err, seed, jitter=0.0):
    rng = np.random.default_rng(seed)
    t = np.asarray(t, dtype=float)
    err = np.full(t.size, err)
    tp = t[0] + 0.3 * period
    rv = radial_velocity(t, period, k, e, omega, tp) + 12.0
    rv = rv + rng.normal(0.0, 1.0, t.size) * np.hypot(err, jitter)
    return RVData.from_arrays(t, rv, err, ["east"] * t.size, source=f"invented {name}")


def _datasets():
    """Six invented sparse datasets of different shapes (7-15 velocities), with their priors."""
    rng = np.random.default_rng(2026)
    t0 = 2460000.0
    sets = []
    # 1. Daily alias: one velocity a night at nearly the same clock time, P = 1.6 d.
    nights = np.sort(rng.choice(np.arange(60), 10, replace=False))
    sets.append(("daily alias", _data("daily alias", t0 + nights + rng.normal(0, 0.02, 10),
                                      1.6, 14.0, 0.1, 0.5, 2.5, 1), (1.05, 12.0)))
    # 2. Eccentric: e = 0.6 at P = 45 d, 9 velocities over 300 d.
    t = np.sort(t0 + rng.uniform(0, 300, 9))
    sets.append(("eccentric", _data("eccentric", t, 45.0, 20.0, 0.6, 2.0, 2.0, 2), (5.0, 400.0)))
    # 3. Longer than the baseline: P = 900 d seen over 400 d, 8 velocities.
    t = np.sort(t0 + rng.uniform(0, 400, 8))
    sets.append(("longer than baseline", _data("long", t, 900.0, 25.0, 0.2, 1.0, 2.0, 3),
                 (50.0, 5000.0)))
    # 4. Yearly alias: three seasons of four velocities, P = 120 d.
    t = np.sort(np.concatenate([t0 + 365.25 * y + rng.uniform(0, 60, 4) for y in range(3)]))
    sets.append(("yearly alias", _data("yearly", t, 120.0, 12.0, 0.1, 0.3, 2.0, 4),
                 (20.0, 1000.0)))
    # 5. Weak signal: K = 4 m/s against 2.5 m/s errors and 2 m/s jitter, 15 velocities.
    t = np.sort(t0 + rng.uniform(0, 500, 15))
    sets.append(("weak signal", _data("weak", t, 30.0, 4.0, 0.1, 0.0, 2.5, 5, jitter=2.0),
                 (5.0, 300.0)))
    # 6. Seven velocities: P = 14 d over 80 d.
    t = np.sort(t0 + rng.uniform(0, 80, 7))
    sets.append(("seven points", _data("seven", t, 14.0, 18.0, 0.2, 2.5, 2.0, 6), (2.0, 100.0)))
    return sets


def _modes(ref, n_bins=300, level=1e-4):
    """Reference modes: runs of log-period bins with mass above `level`, as (lo, hi) periods."""
    log_p = np.log(ref.period[:, 0])
    edges = np.linspace(log_p.min(), log_p.max() + 1e-12, n_bins + 1)
    mass = np.histogram(log_p, bins=edges, weights=ref.weights)[0]
    runs, start = [], None
    for i, m in enumerate(np.append(mass, 0.0)):
        if m > level and start is None:
            start = i
        elif m <= level and start is not None:
            runs.append((np.exp(edges[start]), np.exp(edges[i])))
            start = None
    return runs


def compare(name, data, period_range, seed=0, n_draws=N_DRAWS, ref=None):
    """Fit one dataset and its reference (or the one given); return the comparison."""
    model = ModelSpec.for_data(data, period_range=period_range)
    if ref is None:
        ref = brute_force(data, model, n_draws, np.random.default_rng(seed))
    post = fit(data, model, SETTINGS, rng=seed + 1)
    period = post.param("period_1")
    rows = []
    for lo, hi in _modes(ref):
        share, se = ref.mass(lo, hi)
        if share >= 0.03:
            got = float(np.mean((period >= lo) & (period < hi)))
            rows.append((lo, hi, share, se, got))
    edges = np.linspace(np.log(period_range[0]), np.log(period_range[1]), 41)
    h_ref = np.histogram(np.log(ref.period[:, 0]), bins=edges, weights=ref.weights)[0]
    h_fit = np.histogram(np.log(period), bins=edges)[0] / period.size
    tv = 0.5 * float(np.abs(h_ref - h_fit).sum())
    return rows, tv, ref, post


@pytest.mark.slow
@pytest.mark.parametrize("index", range(6))
def test_mode_masses_match_brute_force(index):
    name, data, period_range = _datasets()[index]
    rows, tv, ref, post = compare(name, data, period_range, seed=index)
    assert rows, "the reference has no mode of 3% or more"
    for lo, hi, share, se, got in rows:
        assert abs(got - share) <= max(0.05, 3 * se), (name, lo, hi, share, se, got)
    assert tv <= 0.08, (name, tv)
    d = post.diagnostics
    assert abs(d.log_evidence - ref.log_z) <= 3 * np.hypot(d.log_evidence_se, ref.log_z_se)


if __name__ == "__main__":
    import argparse
    import pickle
    from pathlib import Path

    parser = argparse.ArgumentParser(description="Print the reference comparison table.")
    parser.add_argument("--draws", type=float, default=N_DRAWS)
    parser.add_argument("--keep", type=Path, help="folder to keep and reuse the references in")
    args = parser.parse_args()
    for i, (name, data, period_range) in enumerate(_datasets()):
        kept = args.keep / f"reference-{i}-{int(args.draws)}.pickle" if args.keep else None
        ref = pickle.loads(kept.read_bytes()) if kept and kept.exists() else None
        rows, tv, ref, post = compare(name, data, period_range, seed=i,
                                      n_draws=int(args.draws), ref=ref)
        if kept and not kept.exists():
            kept.parent.mkdir(parents=True, exist_ok=True)
            kept.write_bytes(pickle.dumps(ref))
        d = post.diagnostics
        print(f"{name} ({data.time.size} velocities, P prior {period_range[0]:g}-"
              f"{period_range[1]:g} d): reference ESS {ref.ess:.0f}, ln Z {ref.log_z:.2f} +- "
              f"{ref.log_z_se:.2f}; nightbits ln Z {d.log_evidence:.2f} +- "
              f"{d.log_evidence_se:.2f}, ESS {d.ess:.0f}, k-hat {d.k_hat:.2f}; TV {tv:.3f}")
        for lo, hi, share, se, got in rows:
            print(f"    {lo:9.3f} - {hi:9.3f} d   reference {share:6.1%} +- {se:5.1%}   "
                  f"nightbits {got:6.1%}")
