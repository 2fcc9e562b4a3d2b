"""Fitting many targets: failures kept apart, cache hits not refitted, progress reported."""

from concurrent.futures import Executor, ThreadPoolExecutor

import numpy as np
import pytest

from inference.batch import FitFailure, FitJob, dask_executor, fit_many
from inference.cache import FitCache, cache_key
from inference.data import RVData
from inference.errors import InferenceError, ModelError
from inference.keplerian import radial_velocity
from inference.model import ModelSpec
from inference.settings import SamplerSettings

SETTINGS = SamplerSettings(n_samples=100, draws=2000, min_ess=200)


def _star(seed, n=18):
    rng = np.random.default_rng(seed)
    t = np.sort(2460000.0 + rng.uniform(0.0, 80.0, n))
    rv = radial_velocity(t, 5.0 + seed, 20.0, 0.1, 0.3, 2460001.0) + rng.normal(0, 1.5, n)
    return RVData.from_arrays(t, rv, np.full(n, 1.5), ["east"] * n, source=f"invented-{seed}")


def _job(name, data, seed=0):
    return FitJob(name, data, ModelSpec.for_data(data, period_range=(2.0, 40.0)), SETTINGS, seed)


class RefusingExecutor(Executor):
    """An executor that must not be used (every target should come from the cache)."""

    def submit(self, fn, /, *args, **kwargs):
        raise AssertionError("a cached target was refitted")


def test_failure_does_not_lose_others_and_cache_is_reused(tmp_path):
    few = RVData.from_arrays(
        [1.0, 2.0, 3.0], [1.0, 2.0, 3.0], [1.0] * 3, ["east"] * 3, source="three-points.csv"
    )
    jobs = [_job("alpha", _star(1)), _job("bad", few), _job("beta", _star(2))]
    calls = []
    cache = FitCache(tmp_path / "cache")
    with ThreadPoolExecutor(max_workers=2) as pool:
        out = fit_many(
            jobs,
            executor=pool,
            cache=cache,
            progress=lambda d, t, label: calls.append((d, t, label)),
        )
    assert list(out) == ["alpha", "bad", "beta"]
    assert isinstance(out["bad"], FitFailure)
    assert "three-points.csv has 3 measurements" in out["bad"].message
    assert out["alpha"].target == "alpha" and out["beta"].n_samples > 0
    assert sorted(c[0] for c in calls) == [1, 2, 3] and all(c[1] == 3 for c in calls)
    # Unchanged targets come back from the cache without running anything.
    again = fit_many(jobs[::2], executor=RefusingExecutor(), cache=cache)
    np.testing.assert_array_equal(again["alpha"].samples, out["alpha"].samples)
    # A change of seed is a new key.
    key = cache_key(jobs[0].data.digest, jobs[0].model, SETTINGS, 0, target="alpha")
    assert key != cache_key(jobs[0].data.digest, jobs[0].model, SETTINGS, 1, target="alpha")
    assert cache.path(key).exists()


def test_default_process_pool_matches_direct_fit():
    from inference.sample import fit

    job = _job("gamma", _star(3), seed=4)
    out = fit_many([job])
    direct = fit(job.data, job.model, SETTINGS, rng=4, target="gamma")
    np.testing.assert_array_equal(out["gamma"].samples, direct.samples)


def test_duplicate_names_and_missing_dask(monkeypatch):
    data = _star(1)
    with pytest.raises(ModelError, match="appears twice"):
        fit_many([_job("a", data), _job("a", data)], executor=RefusingExecutor())
    # Without dask.distributed (hidden here when it is installed: a None entry in sys.modules
    # makes its import fail) the address gets the install sentence.
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(InferenceError, match="not installed"):
        dask_executor("tcp://127.0.0.1:8786")
