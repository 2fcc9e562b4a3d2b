"""Injection and recovery: credible intervals cover invented truths at their nominal rates."""

import numpy as np
import pytest
from scipy import stats

from inference.data import RVData
from inference.keplerian import radial_velocity
from inference.model import EccentricityPrior, GaussianPrior, JitterPrior, ModelSpec, PeriodPrior
from inference.sample import fit
from inference.settings import SamplerSettings

N_DATASETS = 60
AMPLITUDE = 12.0  # m/s, prior sigma of A and B


def _model(t_ref):
    return ModelSpec(
        n_planets=1,
        instruments=("east",),
        trend=False,
        t_ref=t_ref,
        period=PeriodPrior(2.0, 60.0),
        eccentricity=EccentricityPrior("uniform", 0.6),
        amplitude=AMPLITUDE,
        offsets=(GaussianPrior(0.0, 20.0),),
        jitters=(JitterPrior(1.0, 10.0),),
    )


def _truth_and_data(rng):
    """Draw a truth from the model's own prior (so coverage is exact) and invent its data."""
    t = np.sort(2460000.0 + rng.uniform(0.0, 150.0, 40))
    model = _model(float(0.5 * (t[0] + t[-1])))
    period = float(np.exp(rng.uniform(np.log(2.0), np.log(60.0))))
    e = float(rng.uniform(0.0, 0.6))
    m0 = float(rng.uniform(-np.pi, np.pi))
    a, b = rng.normal(0.0, AMPLITUDE, 2)
    k, omega = float(np.hypot(a, b)), float(np.arctan2(b, a))
    u = rng.uniform(np.log(1e-4 + 1.0), np.log(10.0 + 1.0))  # ln(s + knee) uniform
    jitter = float(np.exp(u) - 1.0)
    offset = float(rng.normal(0.0, 20.0))
    err = np.full(t.size, 2.0)
    tp = model.t_ref - m0 * period / (2 * np.pi)
    rv = radial_velocity(t, period, k, e, omega, tp) + offset
    rv = rv + rng.normal(0.0, 1.0, t.size) * np.hypot(err, jitter)
    data = RVData.from_arrays(t, rv, err, ["east"] * t.size, source="invented injection")
    return {"period_1": period, "semi_amplitude_1": k}, data, model


@pytest.mark.slow
def test_interval_coverage_of_period_and_amplitude():
    # Statistical check: with truths drawn from the prior, central 68% and 95% credible
    # intervals contain the truth with probability 0.68 and 0.95 exactly (Cook, Gelman &
    # Rubin 2006). Over N datasets the count is binomial; accept counts inside the central
    # 99.8% binomial range (false-failure budget about 0.4% for the four checks together).
    rng = np.random.default_rng(20261201)
    settings = SamplerSettings(n_samples=1000)
    hits = {(name, level): 0 for name in ("period_1", "semi_amplitude_1") for level in (68, 95)}
    for i in range(N_DATASETS):
        truth, data, model = _truth_and_data(rng)
        post = fit(data, model, settings, rng=i)
        for (name, level), _ in hits.items():
            lo, hi = np.percentile(post.param(name), [50 - level / 2, 50 + level / 2])
            hits[(name, level)] += int(lo <= truth[name] <= hi)
    for (name, level), count in hits.items():
        lo, hi = stats.binom(N_DATASETS, level / 100).interval(0.998)
        assert lo <= count <= hi, f"{name} {level}%: {count} of {N_DATASETS}"
