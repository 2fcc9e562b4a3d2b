"""Posteriors of every target: the fit jobs of a scenario, where they are cached, and the fits.

One fit job per target goes through :func:`inference.batch.fit_many`, in worker processes, and
every posterior is cached by content, so a second run of the same scenario loads instead of
sampling.
"""

from __future__ import annotations

import os
from pathlib import Path

from planner.errors import PlanError, ScenarioError
from planner.workflow.scenario import Scenario

__all__ = [
    "SCHEDULER_ENV",
    "cache_folder",
    "fit_jobs",
    "fit_posteriors",
    "posterior_keys",
    "sampler_settings",
    "scheduler_address",
]

#: Environment variable naming a Dask scheduler for the fits when no address is given.
SCHEDULER_ENV = "NIGHTBITS_SCHEDULER"


def scheduler_address(override: str | None) -> str | None:
    """Return the Dask scheduler of the fits: ``override``, else ``$NIGHTBITS_SCHEDULER``."""
    address = override or os.environ.get(SCHEDULER_ENV, "")
    return address.strip() or None


def cache_folder(scenario: Scenario, override: str | None, disabled: bool) -> Path | None:
    """Where posteriors are cached: ``--cache``, else the scenario's ``cache``, else the user's.

    The user cache is ``$NIGHTBITS_CACHE`` or ``$XDG_CACHE_HOME/nightbits`` or
    ``~/.cache/nightbits``: never the installed package's folder.
    """
    if disabled:
        return None
    if override:
        return _usable(Path(override).expanduser().resolve(), "--cache")
    if scenario.cache_dir is not None:
        return _usable(scenario.cache_dir, f"{scenario.path.name}: cache")
    env = os.environ.get("NIGHTBITS_CACHE")
    if env:
        return _usable(Path(env).expanduser().resolve(), "$NIGHTBITS_CACHE")
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return _usable(Path(base).expanduser().resolve() / "nightbits", "the user cache")


def _usable(folder: Path, where: str) -> Path:
    """Return ``folder`` if it is, or could become, a folder: not a file nor under one."""
    from planner.workflow.outputs import nearest_existing

    probe = nearest_existing(folder)
    if probe.exists() and not probe.is_dir():
        raise PlanError(f"{where} {folder}: {probe} is a file, not a folder; give a folder for "
                        "the posterior cache (or --no-cache).")
    return folder


def fit_jobs(scenario: Scenario) -> list:
    """One fit job per target: its velocities, its model and the sampler settings.

    Raises
    ------
    ScenarioError
        If a target's RV file has no velocity from the scenario's instrument.
    """
    from inference.batch import FitJob
    from inference.data import read_rv_csv
    from inference.model import ModelSpec

    settings = sampler_settings(scenario)
    jobs = []
    for i, target in enumerate(scenario.targets):
        data = read_rv_csv(target.rv_file)
        if scenario.instrument.name not in data.instruments:
            raise ScenarioError(
                f"{scenario.path.name}: targets[{i}].rv_file ({target.rv_file.name}) has no "
                f"velocity from the instrument {scenario.instrument.name!r} (it has "
                f"{', '.join(data.instruments)}); name the instrument in instrument.name.")
        model = ModelSpec.for_data(
            data, n_planets=target.planets, trend=target.trend,
            period_range=(scenario.sampler.min_period_d, scenario.sampler.max_period_d))
        seed = _target_seed(scenario.sampler.seed, target.id)
        jobs.append(FitJob(target=target.id, data=data, model=model, settings=settings,
                           seed=seed))
    return jobs


def posterior_keys(scenario: Scenario, jobs=None) -> dict:
    """Return the posterior cache key of every target (:func:`inference.cache.cache_key`), by id.

    The key is a digest of the target's data, model, sampler settings, seed and the sampler
    version, so equal keys mean equal posteriors whether they were fitted or loaded.
    """
    from inference.cache import cache_key

    keys = {}
    for job in (fit_jobs(scenario) if jobs is None else jobs):
        job = job.resolved()
        keys[job.target] = cache_key(job.data.digest, job.model, job.settings, job.seed,
                                     target=job.target)
    return keys


def sampler_settings(scenario: Scenario):
    """Return the scenario's sampler section as :class:`inference.settings.SamplerSettings`."""
    from inference.settings import SamplerSettings

    return SamplerSettings(n_samples=scenario.sampler.samples,
                           max_draws=scenario.sampler.max_draws)


def _target_seed(seed: int, target_id: str) -> int:
    """Derive a target's seed from the scenario seed and its id (stable across machines)."""
    import hashlib

    digest = hashlib.sha256(f"{seed}:{target_id}".encode()).digest()
    return int.from_bytes(digest[:8], "little") >> 1


def fit_posteriors(scenario: Scenario, cache: Path | None = None, jobs: int | None = None,
                   progress=None, scheduler: str | None = None) -> dict:
    """Sample (or load from the cache) the posterior of every target.

    Parameters
    ----------
    scenario : Scenario
    cache : pathlib.Path or None
        Posterior cache folder; None fits everything again and keeps nothing.
    jobs : int or None
        Worker processes (None: every core; 1: in this process).
    progress : callable, optional
        ``progress(done, total, label)`` after each target.
    scheduler : str, optional
        Address of a Dask distributed scheduler (``tcp://host:8786``): the fits run on its
        workers (:func:`inference.batch.dask_executor`) instead of local processes, and
        ``jobs`` is not used. Cached posteriors are still read and written here.

    Returns
    -------
    dict of str to inference.posterior.Posterior
        In scenario order.

    Raises
    ------
    PlanError
        If a fit failed; the sentence names the target and the reason.
    """
    from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

    from inference.batch import FitFailure, fit_many
    from inference.cache import FitCache

    work = fit_jobs(scenario)
    store = None if cache is None else FitCache(cache)
    from inference.batch import dask_executor

    workers = max(1, min(jobs or os.cpu_count() or 1, len(work)))
    if scheduler:
        executor = dask_executor(scheduler)
    elif workers == 1:  # one worker fits in this process (a thread)
        executor = ThreadPoolExecutor(1)
    else:  # more fit in worker processes
        executor = ProcessPoolExecutor(workers)
    try:
        results = fit_many(work, executor=executor, cache=store, progress=progress)
    except KeyboardInterrupt:
        # Ctrl-C or SIGTERM: end the running fits now instead of waiting for them (the worker
        # processes do not get a SIGTERM sent to this process; the cache is written only here).
        executor.shutdown(wait=False, cancel_futures=True)
        if workers > 1:
            import multiprocessing

            for child in multiprocessing.active_children():
                child.kill()
        raise
    finally:
        executor.shutdown(cancel_futures=True)
    failed = [(name, r) for name, r in results.items() if isinstance(r, FitFailure)]
    if failed:
        name, failure = failed[0]
        raise PlanError(f"the fit of target {name!r} failed ({failure.message}); fix its RV file "
                        "or its model settings.")
    return {t.id: results[t.id] for t in scenario.targets}
