"""The posterior cache under damage: truncated, bit-flipped, foreign and unwritable entries."""

import logging
import os
import shutil
import stat
from concurrent.futures import Executor, Future

import numpy as np
import pytest

from inference import sample
from inference.batch import FitJob, fit_many
from inference.cache import FitCache, cache_key
from inference.data import RVData
from inference.errors import InferenceError
from inference.model import ModelSpec
from inference.posterior import Posterior
from inference.sample import Diagnostics, SamplerSettings

SETTINGS = SamplerSettings(n_samples=40, draws=2000, min_ess=200)


def _data(seed):
    rng = np.random.default_rng(seed)
    t = np.sort(2460000.0 + rng.uniform(0.0, 60.0, 12))
    rv = 10.0 * np.sin(2 * np.pi * t / (4.0 + seed)) + rng.normal(0.0, 1.0, 12)
    return RVData.from_arrays(t, rv, np.full(12, 1.0), ["east"] * 12, source=f"invented-{seed}")


def _job(target, seed):
    data = _data(seed)
    return FitJob(target, data, ModelSpec.for_data(data, period_range=(2.0, 30.0)), SETTINGS, seed)


def _posterior(job, shift=0.0):
    """A hand-made record standing in for ``fit(job...)`` (no sampling: fast tests)."""
    names = job.model.parameter_names()
    rng = np.random.default_rng(job.seed + 100)
    samples = rng.normal(size=(30, len(names))) + shift
    diag = Diagnostics(ok=True, ess=400.0, n_draws=4000, k_hat=0.3, log_evidence=-50.0,
                       log_evidence_se=0.01, modes=(), rounds=2, n_components=3,
                       move_acceptance=0.4, unique_fraction=1.0, n_evaluations=9000,
                       start_modes=((5.0,),), seconds=0.1)
    return Posterior(job.target, job.model, names, samples, rng.normal(size=30),
                     job.data.digest, job.seed, diag, job.settings)


def _key(job):
    return cache_key(job.data.digest, job.model, job.settings, job.seed, target=job.target)


class HandMadeExecutor(Executor):
    """Runs no sampler: each submitted job returns its hand-made record; counts the fits."""

    def __init__(self, shift=0.0):
        self.fitted, self.shift = [], shift

    def submit(self, fn, job, /):
        self.fitted.append(job.target)
        future = Future()
        future.set_result(_posterior(job, self.shift))
        return future


def _same(a, b):
    np.testing.assert_array_equal(a.samples, b.samples)
    np.testing.assert_array_equal(a.log_likelihood, b.log_likelihood)
    assert (a.target, a.names, a.seed, a.data_digest) == (b.target, b.names, b.seed, b.data_digest)


def _warnings(caplog):
    return [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]


@pytest.fixture
def stored(tmp_path):
    """A cache holding one entry: (cache, job, its posterior, its file)."""
    job = _job("star-a", 1)
    cache = FitCache(tmp_path / "cache")
    post = _posterior(job)
    path = cache.put(_key(job), post)
    _same(cache.get(_key(job), target="star-a"), post)
    return cache, job, post, path


def test_truncated_entry_is_a_logged_miss_then_refitted_and_overwritten(stored, caplog):
    cache, job, post, path = stored
    whole = path.read_bytes()
    for size in (0, 1, 30, len(whole) // 3, len(whole) // 2, len(whole) - 22, len(whole) - 1):
        path.write_bytes(whole[:size])
        with pytest.raises(InferenceError, match="not a readable posterior file") as err:
            Posterior.load(path)
        assert str(path) in str(err.value) and isinstance(err.value, ValueError)
        caplog.clear()
        with caplog.at_level(logging.WARNING, logger="inference"):
            assert cache.get(_key(job), target="star-a") is None
        (message,) = _warnings(caplog)
        assert str(path) in message
    # A run refits the damaged target, uses the fit and rewrites the entry atomically.
    pool = HandMadeExecutor(shift=5.0)
    with caplog.at_level(logging.WARNING, logger="inference"):
        out = fit_many([job], executor=pool, cache=cache)
    assert pool.fitted == ["star-a"]
    assert np.mean(out["star-a"].samples) > 4.0  # the new fit, not the old record
    _same(cache.get(_key(job), target="star-a"), out["star-a"])
    assert sorted(p.name for p in cache.directory.iterdir()) == [path.name]  # no temp file left
    # Next run: a hit, nothing refitted.
    again = HandMadeExecutor()
    _same(fit_many([job], executor=again, cache=cache)["star-a"], out["star-a"])
    assert again.fitted == []


def test_flipped_bytes_never_give_a_wrong_posterior_or_an_exception(stored, caplog):
    cache, job, post, path = stored
    whole = path.read_bytes()
    misses = 0
    for i in range(0, len(whole), 3):
        flipped = bytearray(whole)
        flipped[i] ^= 0x5A
        path.write_bytes(bytes(flipped))
        caplog.clear()
        with caplog.at_level(logging.WARNING, logger="inference"):
            got = cache.get(_key(job), target="star-a")
        if got is None:
            misses += 1
            (message,) = _warnings(caplog)
            assert str(path) in message, (i, message)
        else:  # a flip in bytes nothing reads (zip timestamps...) may leave the entry usable
            _same(got, post)
            assert got.model == post.model and got.settings == post.settings
            assert got.diagnostics == post.diagnostics
    assert misses > 0.8 * len(range(0, len(whole), 3))


def test_foreign_file_under_a_key_is_a_logged_miss(stored, caplog):
    cache, job, post, path = stored
    other = _job("star-b", 2)
    foreign = cache.put(_key(other), _posterior(other))
    shutil.copyfile(foreign, path)  # star-b's file copied in under star-a's key
    with caplog.at_level(logging.WARNING, logger="inference"):
        assert cache.get(_key(job), target="star-a") is None
    (message,) = _warnings(caplog)
    assert str(path) in message and _key(other) in message
    # The same target's own file under another key (an older fit, say) is a miss too.
    older = FitJob(job.target, job.data, job.model, job.settings, seed=99)
    shutil.copyfile(cache.put(_key(older), _posterior(older)), path)
    caplog.clear()
    with caplog.at_level(logging.WARNING, logger="inference"):
        assert cache.get(_key(job), target="star-a") is None
    assert str(path) in _warnings(caplog)[0]
    # A file with the right key but another target's name inside is refused by target.
    shutil.copyfile(foreign, path)
    renamed = Posterior.load(path)
    cache.put(_key(job), Posterior(**{**renamed.__dict__, "cache_key": None}))
    caplog.clear()
    with caplog.at_level(logging.WARNING, logger="inference"):
        assert cache.get(_key(job), target="star-a") is None
    (message,) = _warnings(caplog)
    assert str(path) in message and "star-b" in message
    # The run refits star-a and replaces the foreign entry.
    pool = HandMadeExecutor()
    out = fit_many([job], executor=pool, cache=cache)
    assert pool.fitted == ["star-a"] and out["star-a"].target == "star-a"
    assert cache.get(_key(job), target="star-a").target == "star-a"


def test_key_changes_with_sampler_version_target_and_seed(stored, monkeypatch):
    cache, job, post, path = stored
    base = _key(job)
    assert base == cache_key(job.data.digest, job.model, job.settings, job.seed,
                             target=job.target, sampler_version=sample.SAMPLER_VERSION)
    assert base != cache_key(job.data.digest, job.model, job.settings, job.seed,
                             target=job.target, sampler_version=sample.SAMPLER_VERSION + "-next")
    assert base != cache_key(job.data.digest, job.model, job.settings, job.seed, target="star-b")
    assert base != cache_key(job.data.digest, job.model, job.settings, job.seed + 1,
                             target=job.target)
    # After a change of sampler version the old fit is not reused: the target is refitted.
    monkeypatch.setattr(sample, "SAMPLER_VERSION", sample.SAMPLER_VERSION + "-next")
    assert _key(job) != base
    pool = HandMadeExecutor(shift=5.0)
    out = fit_many([job], executor=pool, cache=cache)
    assert pool.fitted == ["star-a"] and np.mean(out["star-a"].samples) > 4.0
    assert cache.path(_key(job)).exists() and cache.path(base).exists()


def test_read_only_folder_keeps_new_fits_with_one_warning(stored, caplog):
    cache, job, post, path = stored
    new = [_job("star-c", 3), _job("star-d", 4)]
    os.chmod(cache.directory, stat.S_IRUSR | stat.S_IXUSR)
    try:
        if os.access(cache.directory, os.W_OK):
            pytest.skip("the folder stays writable after chmod (running as root)")
        pool = HandMadeExecutor()
        with caplog.at_level(logging.WARNING, logger="inference"):
            out = fit_many([job, *new], executor=pool, cache=cache)
        assert sorted(pool.fitted) == ["star-c", "star-d"]  # star-a was still read back
        _same(out["star-a"], post)
        for j in new:
            _same(out[j.target], _posterior(j))
        (message,) = _warnings(caplog)
        assert str(cache.directory) in message
        assert "star-c" in message and "star-d" in message
        assert sorted(p.name for p in cache.directory.iterdir()) == [path.name]
    finally:
        os.chmod(cache.directory, stat.S_IRWXU)


def test_unwritable_new_folder_keeps_fits(tmp_path, caplog):
    parent = tmp_path / "locked"
    parent.mkdir()
    os.chmod(parent, stat.S_IRUSR | stat.S_IXUSR)
    try:
        if os.access(parent, os.W_OK):
            pytest.skip("the folder stays writable after chmod (running as root)")
        cache = FitCache(parent / "cache")  # does not exist and cannot be created
        job = _job("star-e", 5)
        with caplog.at_level(logging.WARNING, logger="inference"):
            out = fit_many([job], executor=HandMadeExecutor(), cache=cache)
        _same(out["star-e"], _posterior(job))
        (message,) = _warnings(caplog)
        assert str(cache.directory) in message
    finally:
        os.chmod(parent, stat.S_IRWXU)


def test_folder_that_cannot_exist_keeps_fits(tmp_path, caplog):
    # Also runs as root: a cache folder below a plain file can never be created.
    blocker = tmp_path / "plain-file"
    blocker.write_text("not a folder")
    cache = FitCache(blocker / "cache")
    jobs = [_job("star-g", 7), _job("star-h", 8)]
    with caplog.at_level(logging.WARNING, logger="inference"):
        out = fit_many(jobs, executor=HandMadeExecutor(), cache=cache)
    for j in jobs:
        _same(out[j.target], _posterior(j))
    (message,) = _warnings(caplog)
    assert str(cache.directory) in message and "star-g" in message and "star-h" in message


def test_real_fit_round_trips_through_a_damaged_cache(tmp_path, caplog):
    from inference.sample import fit

    job = _job("star-f", 6)
    cache = FitCache(tmp_path)
    first = fit_many([job], executor=None, cache=cache)["star-f"]
    direct = fit(job.data, job.model, SETTINGS, rng=job.seed, target="star-f")
    np.testing.assert_array_equal(first.samples, direct.samples)
    path = cache.path(_key(job))
    path.write_bytes(path.read_bytes()[:-40])
    with caplog.at_level(logging.WARNING, logger="inference"):
        again = fit_many([job], executor=None, cache=cache)["star-f"]
    np.testing.assert_array_equal(again.samples, direct.samples)
    assert any(str(path) in m for m in _warnings(caplog))
    _same(cache.get(_key(job), target="star-f"), direct)
