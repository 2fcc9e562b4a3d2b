"""Fit many targets through a :class:`concurrent.futures.Executor`, with a cache.

One failing target gives a :class:`FitFailure` and does not lose the others. The default
executor is a process pool with two workers; any Executor works, and :func:`dask_executor`
builds one from a Dask distributed scheduler address.
"""

import logging
from concurrent.futures import Executor, ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass

from .errors import InferenceError, ModelError
from .model import ModelSpec
from .sample import fit
from .settings import SamplerSettings

__all__ = ["FitFailure", "FitJob", "dask_executor", "fit_many", "run_job"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class FitJob:
    """One target to fit.

    Attributes
    ----------
    target : str
        Name of the star (unique within a batch).
    data : RVData
        Its velocities.
    model : ModelSpec or None
        The model; None builds ``ModelSpec.for_data(data)`` (one planet, default priors).
    settings : SamplerSettings or None
        Sampler settings; None uses the defaults.
    seed : int
        Seed of the fit (same seed, same posterior).
    """

    target: str
    data: object
    model: ModelSpec | None = None
    settings: SamplerSettings | None = None
    seed: int = 0

    def resolved(self):
        """Return a copy with the model and settings filled in."""
        return FitJob(
            self.target,
            self.data,
            self.model or ModelSpec.for_data(self.data),
            self.settings or SamplerSettings(),
            int(self.seed),
        )


@dataclass(frozen=True)
class FitFailure:
    """A target that could not be fitted.

    Attributes
    ----------
    target : str
        Name of the star.
    message : str
        One sentence saying why.
    """

    target: str
    message: str


def run_job(job):
    """Fit one resolved job (the function sent to the executor)."""
    return fit(job.data, job.model, job.settings, rng=job.seed, target=job.target)


class _DaskExecutor(Executor):
    """A Dask client's executor that closes its client on shutdown."""

    def __init__(self, client) -> None:
        self._client = client
        self._executor = client.get_executor()

    def submit(self, fn, /, *args, **kwargs):
        """Submit ``fn(*args, **kwargs)`` to the cluster."""
        return self._executor.submit(fn, *args, **kwargs)

    def shutdown(self, wait=True, *, cancel_futures=False):
        """Wait for (or cancel) the submitted work, then close the client."""
        try:
            self._executor.shutdown(wait=wait and not cancel_futures)
        finally:
            self._client.close()


def dask_executor(address, timeout_s=10.0):
    """Build an Executor that runs on a Dask distributed cluster.

    Parameters
    ----------
    address : str
        Scheduler address, e.g. ``"tcp://10.0.0.5:8786"``.
    timeout_s : float
        How long to wait for the scheduler to answer [s].

    Returns
    -------
    concurrent.futures.Executor
        Submits to ``Client(address)``; ``shutdown()`` also closes the client. Every worker
        needs nightbits (and its dependencies) installed.

    Raises
    ------
    InferenceError
        If dask.distributed is not installed or the scheduler cannot be reached.
    """
    try:
        from distributed import Client
    except ImportError:
        raise InferenceError(
            "a Dask scheduler address was given but dask.distributed is not installed: "
            "install it with pip install 'nightbits[dask]' or drop the address."
        ) from None
    try:
        client = Client(address, timeout=timeout_s)
    except (OSError, ValueError, TypeError) as exc:
        raise InferenceError(
            f"cannot reach the Dask scheduler at {address!r} ({type(exc).__name__}: {exc}); "
            "start one with `dask scheduler` and workers with `dask worker ADDRESS`, or drop "
            "the address."
        ) from None
    return _DaskExecutor(client)


def _failure(job, exc):
    if isinstance(exc, InferenceError):
        message = str(exc)
    elif isinstance(exc, BrokenProcessPool):
        message = "the worker process running this fit died (out of memory or killed)."
    else:
        message = f"the fit stopped with an unexpected {type(exc).__name__}: {exc}."
        logger.error("target %r failed: %r", job.target, exc)
    return FitFailure(job.target, message)


def fit_many(jobs, executor=None, cache=None, progress=None):
    """Fit every job, reusing cached posteriors.

    Parameters
    ----------
    jobs : iterable of FitJob
        Targets to fit; names must be unique.
    executor : concurrent.futures.Executor, optional
        Where fits run; default a ProcessPoolExecutor with 2 workers (shut down afterwards).
        A passed executor is left running.
    cache : FitCache, optional
        Cached posteriors are returned without refitting; new ones are stored. A damaged or
        foreign entry is refitted and overwritten; when the folder cannot be written the new
        fits are still returned, with one logged warning naming the folder.
    progress : callable, optional
        ``progress(done, total, label)`` after each target (label is the target name).

    Returns
    -------
    dict of str to Posterior or FitFailure
        In the order of `jobs`.

    Raises
    ------
    ModelError
        If two jobs share a target name.
    """
    from .cache import cache_key

    jobs = [job.resolved() for job in jobs]
    names = [job.target for job in jobs]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise ModelError(f"target {dupes[0]!r} appears twice in the batch: give each a name.")
    total = len(jobs)
    results, keys, todo = {}, {}, []
    done = 0
    for job in jobs:
        if cache is not None:
            keys[job.target] = cache_key(
                job.data.digest, job.model, job.settings, job.seed, target=job.target
            )
            hit = cache.get(keys[job.target], target=job.target)
            if hit is not None:
                results[job.target] = hit
                done += 1
                if progress:
                    progress(done, total, job.target)
                continue
        todo.append(job)
    unsaved = []  # (target, OSError) of new fits the cache folder refused
    own = executor is None and todo
    if own:
        executor = ProcessPoolExecutor(max_workers=2)
    try:
        futures = {}
        for job in todo:
            try:
                futures[executor.submit(run_job, job)] = job
            except (BrokenProcessPool, RuntimeError) as exc:
                results[job.target] = _failure(job, exc)
        for future in as_completed(futures):
            job = futures[future]
            try:
                posterior = future.result()
            except Exception as exc:  # one target's failure must not lose the others
                results[job.target] = _failure(job, exc)
            else:
                results[job.target] = posterior
                if cache is not None:
                    try:
                        cache.put(keys[job.target], posterior)
                    except OSError as exc:  # e.g. a read-only folder: keep the fit, warn once
                        unsaved.append((job.target, exc))
            done += 1
            if progress:
                progress(done, total, job.target)
    finally:
        if own:
            executor.shutdown(wait=True, cancel_futures=True)
    if unsaved:
        logger.warning(
            "could not cache %d new fit(s) (%s) in %s: %s; they are used for this run only and "
            "will be fitted again next time",
            len(unsaved), ", ".join(t for t, _ in unsaved), cache.directory, unsaved[0][1],
        )
    return {name: results[name] for name in names}
