"""Posteriors of every target: the fit jobs of a scenario, where they are cached, and the fits.

One fit job per target goes through :func:`inference.batch.fit_many`, in worker processes, and
every posterior is cached by content, so a second run of the same scenario loads instead of
sampling. A target with ``planets: auto`` is fitted with 0, 1, ..., ``max_planets`` planets,
each fit cached alike, and its evidences give the posterior model probabilities
(:func:`inference.evidence.compare_fits`).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from planner.errors import PlanError, ScenarioError
from planner.workflow.scenario import Scenario

__all__ = [
    "SCHEDULER_ENV",
    "ModelFits",
    "cache_folder",
    "fit_jobs",
    "fit_models",
    "model_counts",
    "model_jobs",
    "model_prior",
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


def model_counts(target) -> tuple[int, ...]:
    """Numbers of planets fitted for a target: its ``planets``, or 0..max_planets under auto."""
    if target.planets == "auto":
        return tuple(range(target.max_planets + 1))
    return (int(target.planets),)


def model_prior(target) -> tuple[float, ...]:
    """Prior over a target's numbers of planets: its ``model_prior``, else the default.

    The default gives every count 0..max_planets the same probability (docs/priors.md).
    """
    from inference.evidence import default_model_prior

    if target.model_prior:
        total = float(sum(target.model_prior))
        return tuple(float(w) / total for w in target.model_prior)
    return default_model_prior(target.max_planets)


def model_jobs(scenario: Scenario) -> list:
    """Fit jobs of every target and number of planets, in batches.

    Returns
    -------
    list of list of inference.batch.FitJob
        Batch k holds each target's k-th model (``job.model.n_planets`` is its number of
        planets; ids are unique within a batch): without ``planets: auto`` there is one batch
        of one job per target. A target's seed does not depend on the number of planets.
        Under ``planets: auto`` a count whose model has more free parameters than the target
        has velocities is not fitted (nor any larger one).

    Raises
    ------
    ScenarioError
        If a target's RV file has no velocity from the scenario's instrument.
    """
    from inference.batch import FitJob
    from inference.data import read_rv_csv
    from inference.model import ModelSpec

    settings = sampler_settings(scenario)
    batches = []
    for i, target in enumerate(scenario.targets):
        data = read_rv_csv(target.rv_file)
        if scenario.instrument.name not in data.instruments:
            raise ScenarioError(
                f"{scenario.path.name}: targets[{i}].rv_file ({target.rv_file.name}) has no "
                f"velocity from the instrument {scenario.instrument.name!r} (it has "
                f"{', '.join(data.instruments)}); name the instrument in instrument.name.")
        seed = _target_seed(scenario.sampler.seed, target.id)
        for k, n in enumerate(model_counts(target)):
            model = ModelSpec.for_data(
                data, n_planets=n, trend=target.trend,
                period_range=(scenario.sampler.min_period_d, scenario.sampler.max_period_d))
            if target.planets == "auto" and k > 0 and len(data) < model.n_free:
                break  # more parameters than velocities: this and larger counts are not compared
            if k == len(batches):
                batches.append([])
            batches[k].append(FitJob(target=target.id, data=data, model=model,
                                     settings=settings, seed=seed))
    return batches


def fit_jobs(scenario: Scenario) -> list:
    """One fit job per target: its velocities, its model and the sampler settings.

    A target with ``planets: auto`` is represented by its job with the most planets (the same
    velocities; :func:`model_jobs` has every model).

    Raises
    ------
    ScenarioError
        If a target's RV file has no velocity from the scenario's instrument.
    """
    widest = {}
    for batch in model_jobs(scenario):
        for job in batch:
            widest[job.target] = job
    return [widest[t.id] for t in scenario.targets]


def posterior_keys(scenario: Scenario, jobs=None) -> dict:
    """Return the posterior cache key of every target (:func:`inference.cache.cache_key`), by id.

    The key is a digest of the target's data, model, sampler settings, seed and the sampler
    version, so equal keys mean equal posteriors whether they were fitted or loaded. For a
    target with ``planets: auto`` it is the digest of the keys of all its models, in order.
    """
    import hashlib

    from inference.cache import cache_key

    if jobs is None:
        jobs = [job for batch in model_jobs(scenario) for job in batch]
    keys = {}
    for job in jobs:
        job = job.resolved()
        keys.setdefault(job.target, []).append(
            cache_key(job.data.digest, job.model, job.settings, job.seed, target=job.target))
    return {name: k[0] if len(k) == 1 else hashlib.sha256(":".join(k).encode()).hexdigest()
            for name, k in keys.items()}


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


@dataclass(frozen=True, eq=False)
class ModelFits:
    """One target's fits, one per number of planets, and how probable each model is.

    Attributes
    ----------
    target : str
        The target's id.
    posteriors : dict of int to inference.posterior.Posterior
        The fit of each number of planets compared (one entry unless ``planets: auto``).
    probabilities : inference.evidence.ModelProbabilities or None
        Posterior model probabilities under ``planets: auto``, else None.
    """

    target: str
    posteriors: dict
    probabilities: object = None

    @property
    def chosen(self):
        """inference.posterior.Posterior: the fit of the most probable number of planets.

        Until the stages after fitting average over models, they use this one; ties go to the
        fewer planets.
        """
        if self.probabilities is None:
            return next(iter(self.posteriors.values()))
        probs = self.probabilities
        best = max(range(len(probs.counts)), key=lambda k: (probs.probabilities[k], -k))
        return self.posteriors[probs.counts[best]]


def fit_posteriors(scenario: Scenario, cache: Path | None = None, jobs: int | None = None,
                   progress=None, scheduler: str | None = None) -> dict:
    """Sample (or load from the cache) the posterior of every target.

    A target with ``planets: auto`` gets the fit of its most probable number of planets
    (:attr:`ModelFits.chosen`); :func:`fit_models` has all of them.

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
    fits = fit_models(scenario, cache=cache, jobs=jobs, progress=progress, scheduler=scheduler)
    return {name: f.chosen for name, f in fits.items()}


def fit_models(scenario: Scenario, cache: Path | None = None, jobs: int | None = None,
               progress=None, scheduler: str | None = None) -> dict:
    """Sample (or load from the cache) every model of every target, with model probabilities.

    Parameters are those of :func:`fit_posteriors`; ``progress`` counts every model's fit.

    Returns
    -------
    dict of str to ModelFits
        In scenario order.

    Raises
    ------
    PlanError
        If a fit failed; the sentence names the target and the reason.
    """
    from concurrent.futures import ProcessPoolExecutor, ThreadPoolExecutor

    from inference.batch import FitFailure, dask_executor, fit_many
    from inference.cache import FitCache
    from inference.evidence import compare_fits

    batches = model_jobs(scenario)
    store = None if cache is None else FitCache(cache)
    total = sum(len(b) for b in batches)
    auto = {t.id for t in scenario.targets if t.planets == "auto"}
    widest = max(len(b) for b in batches)
    workers = max(1, min(jobs or os.cpu_count() or 1, widest))
    if scheduler:
        executor = dask_executor(scheduler)
    elif workers == 1:  # one worker fits in this process (a thread)
        executor = ThreadPoolExecutor(1)
    else:  # more fit in worker processes
        executor = ProcessPoolExecutor(workers)
    results = {}
    try:
        offset = 0
        for batch in batches:
            counts = {job.target: job.model.n_planets for job in batch}

            def step(done, _total, label, offset=offset, counts=counts):
                if progress is not None:
                    progress(offset + done, total, f"{label} ({counts[label]} planets)"
                             if label in auto else label)

            for name, r in fit_many(batch, executor=executor, cache=store,
                                    progress=step).items():
                results[(name, counts[name])] = r
            offset += len(batch)
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
    failed = [(key, r) for key, r in results.items() if isinstance(r, FitFailure)]
    if failed:
        (name, n), failure = failed[0]
        what = f"target {name!r}" + (f" with {n} planets" if name in auto else "")
        raise PlanError(f"the fit of {what} failed ({failure.message}); fix its RV file "
                        "or its model settings.")
    data = {job.target: job.data for job in batches[0]}
    out = {}
    for t in scenario.targets:
        posts = {n: results[(t.id, n)] for n in model_counts(t) if (t.id, n) in results}
        prior = model_prior(t)
        probs = (compare_fits(posts, [prior[n] for n in posts], data[t.id])
                 if t.planets == "auto" else None)
        out[t.id] = ModelFits(target=t.id, posteriors=posts, probabilities=probs)
    return out
