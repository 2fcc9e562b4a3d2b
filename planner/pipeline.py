"""The workflow glue: scenario, posteriors, sky, limits, noise, curves, Problem, plans.

Every command of :mod:`planner.cli` is a few calls into this module, so all wiring between the
packages lives here and nowhere else:

1. :func:`load` a scenario (the bundled demo when none is given);
2. :func:`fit_posteriors`: one fit job per target through :func:`inference.batch.fit_many`,
   cached by content;
3. :func:`prepare`: dark windows, the sky on a run grid of whole minutes, the observable starts
   of every exposure option, the measurement noise, the information curves, the candidate visits
   (:class:`planner.problem.Problem`) and the solver's surrogate objective;
4. :func:`make_plan` with one strategy, or :func:`compare` with all three; every plan is checked
   by the independent verifier and scored exactly before it is turned into a
   :class:`planner.outputs.PlanFile`.

The run grid. The solver clock counts whole minutes from one epoch and needs one evenly spaced
grid over the whole run, while the sky is computed night by night from each dark start. The dark
window of every night is therefore shrunk inward to the nearest grid instants (by less than one
grid step at each end) before the sky is computed, so each night's sky grid lies exactly on the
run grid and no value is interpolated; instants between nights belong to no night.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from planner.errors import PlanError, ScenarioError
from planner.scenario import Scenario, load_scenario

__all__ = [
    "RunGrid",
    "cache_folder",
    "check_out_folder",
    "demo_scenario_path",
    "fit_jobs",
    "fit_posteriors",
    "load",
    "physical_setup",
    "run_grid",
    "sampler_settings",
    "load_curves",
    "save_curves",
]

log = logging.getLogger(__name__)

_MINUTE_D = 1.0 / 1440.0


def demo_scenario_path() -> Path:
    """Path of the bundled demo scenario (installed package data, or the source tree)."""
    from importlib import resources

    try:
        return Path(str(resources.files("planner.demo").joinpath("demo.yaml")))
    except ModuleNotFoundError:  # running from a source checkout without installing
        return Path(__file__).resolve().parents[1] / "scenarios" / "demo" / "demo.yaml"


def load(path: str | Path | None) -> Scenario:
    """Load and validate a scenario; ``None`` loads the bundled demo run."""
    return load_scenario(demo_scenario_path() if path is None else path)


def cache_folder(scenario: Scenario, override: str | None, disabled: bool) -> Path | None:
    """Where posteriors are cached: ``--cache``, else the scenario's ``cache``, else the user's.

    The user cache is ``$NIGHTBITS_CACHE`` or ``$XDG_CACHE_HOME/nightbits`` or
    ``~/.cache/nightbits``: never the installed package's folder.
    """
    if disabled:
        return None
    if override:
        return Path(override).expanduser().resolve()
    if scenario.cache_dir is not None:
        return scenario.cache_dir
    env = os.environ.get("NIGHTBITS_CACHE")
    if env:
        return Path(env).expanduser().resolve()
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base).expanduser().resolve() / "nightbits"


def check_out_folder(out: str | Path, force: bool) -> None:
    """Fail at once, before any work, if ``out`` already holds a plan and ``force`` is off."""
    existing = [p for p in (Path(out) / "plan.json", Path(out) / "plan.csv") if p.exists()]
    if existing and not force:
        raise PlanError(f"{existing[0]} already exists; pass --force to replace it or choose "
                        "another folder with --out.")


# ----------------------------------------------------------------------------- fitting


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


def sampler_settings(scenario: Scenario):
    """Return the scenario's sampler section as :class:`inference.sample.SamplerSettings`."""
    from inference.sample import SamplerSettings

    return SamplerSettings(n_walkers=scenario.sampler.walkers,
                           n_samples=scenario.sampler.samples,
                           max_steps=scenario.sampler.max_steps)


def _target_seed(seed: int, target_id: str) -> int:
    """Derive a target's seed from the scenario seed and its id (stable across machines)."""
    import hashlib

    digest = hashlib.sha256(f"{seed}:{target_id}".encode()).digest()
    return int.from_bytes(digest[:8], "little") >> 1


def fit_posteriors(scenario: Scenario, cache: Path | None = None, jobs: int | None = None,
                   progress=None) -> dict:
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
    workers = max(1, min(jobs or os.cpu_count() or 1, len(work)))
    # One worker fits in this process (a thread), more fit in worker processes.
    executor = ThreadPoolExecutor(1) if workers == 1 else ProcessPoolExecutor(workers)
    try:
        results = fit_many(work, executor=executor, cache=store, progress=progress)
    finally:
        executor.shutdown(cancel_futures=True)
    failed = [(name, r) for name, r in results.items() if isinstance(r, FitFailure)]
    if failed:
        name, failure = failed[0]
        raise PlanError(f"the fit of target {name!r} failed ({failure.message}); fix its RV file "
                        "or its model settings.")
    return {t.id: results[t.id] for t in scenario.targets}


# ----------------------------------------------------------------------------- the sky


@dataclass(frozen=True)
class RunGrid:
    """The run's evenly spaced grid of whole minutes, and every night's part of it.

    Attributes
    ----------
    times_jd : ndarray, shape (n_times,)
        Grid instants, JD UTC [d], from the first aligned dark start to the last dark end.
    night_index : ndarray of int, shape (n_times,)
        Night of each instant, -1 between nights.
    sky_index : ndarray of int, shape (n_times,)
        Column of the sky grid at each instant, -1 between nights.
    step_min : int
        Grid step [min].
    """

    times_jd: np.ndarray
    night_index: np.ndarray
    sky_index: np.ndarray
    step_min: int

    def scatter(self, values: np.ndarray, fill: float) -> np.ndarray:
        """Spread sky-grid values ``(..., n_sky)`` onto the run grid ``(..., n_times)``."""
        values = np.asarray(values)
        out = np.full(values.shape[:-1] + self.times_jd.shape, fill, dtype=values.dtype)
        inside = self.sky_index >= 0
        out[..., inside] = values[..., self.sky_index[inside]]
        return out


def physical_setup(scenario: Scenario):
    """Site, true nights, nights shrunk to the whole-minute grid, limits, instrument, mount."""
    from planner.exposure import Instrument
    from planner.observability import DEFAULT_MOON_TABLE
    from planner.site import Site, dark_windows
    from planner.slew import Mount

    s = scenario.site
    site = Site(latitude_deg=s.latitude_deg, longitude_deg=s.longitude_deg,
                elevation_m=s.elevation_m, timezone=s.timezone,
                min_altitude_deg=s.min_altitude_deg, max_altitude_deg=s.max_altitude_deg)
    nights = dark_windows(site, scenario.night_dates(), scenario.run.twilight)
    step_d = scenario.sky.step_s / 86400.0
    epoch = math.floor(nights[0].dark_start_jd / _MINUTE_D) * _MINUTE_D
    aligned = []
    for night in nights:
        start = epoch + math.ceil((night.dark_start_jd - epoch) / step_d - 1e-9) * step_d
        end = epoch + math.floor((night.dark_end_jd - epoch) / step_d + 1e-9) * step_d
        if end - start < step_d:
            raise ScenarioError(f"{scenario.path.name}: the night of {night.date} has less "
                                "than one grid step of dark time; use a lighter twilight.")
        aligned.append(dataclasses.replace(night, dark_start_jd=start, dark_end_jd=end))
    c = scenario.constraints
    if c.min_moon_separation_deg is not None:
        moon_table = ((1.0, c.min_moon_separation_deg),)
    else:
        moon_table = c.moon_table or DEFAULT_MOON_TABLE
    i, t = scenario.instrument, scenario.telescope
    instrument = Instrument(sigma_ref_ms=i.reference_sigma_ms, v_ref_mag=i.reference_v_mag,
                            t_ref_s=i.reference_exposure_s, floor_ms=i.floor_ms,
                            k_mag_per_airmass=i.extinction_mag_per_airmass,
                            aperture_arcsec2=i.aperture_arcsec2)
    mount = Mount(kind="altaz", rate1_deg_s=t.azimuth_rate_deg_s, rate2_deg_s=t.altitude_rate_deg_s,
                  accel_deg_s2=t.acceleration_deg_s2, settle_s=t.settle_s,
                  acquisition_s=t.acquisition_s, readout_s=i.readout_s,
                  az_wrap_deg=tuple(t.azimuth_range_deg) or None)
    return site, nights, tuple(aligned), moon_table, instrument, mount


def run_grid(sky, aligned) -> RunGrid:
    """Build the whole-minute run grid under a sky computed on aligned nights (module notes).

    Sky instants past a night's aligned dark end (the sky grid may overshoot by one step) are
    left out; every other sky instant must fall on the run grid to within a second.
    """
    step_min = int(round(sky.step_s / 60.0))
    step_d = step_min * _MINUTE_D
    epoch = aligned[0].dark_start_jd
    ends = np.array([n.dark_end_jd for n in aligned])[sky.night_index]
    keep = sky.times_jd <= ends + 1.0 / 86400.0
    position = np.rint((sky.times_jd - epoch) / step_d).astype(np.int64)
    if np.max(np.abs(sky.times_jd[keep] - epoch - position[keep] * step_d)) > 1.0 / 86400.0:
        raise PlanError("the sky grid does not fall on the run's whole-minute grid; use a sky "
                        "step_s that is a whole number of minutes.")
    n_times = int(position[keep].max()) + 1
    night_index = np.full(n_times, -1, dtype=np.int64)
    sky_index = np.full(n_times, -1, dtype=np.int64)
    night_index[position[keep]] = sky.night_index[keep]
    sky_index[position[keep]] = np.flatnonzero(keep)
    return RunGrid(times_jd=epoch + step_d * np.arange(n_times), night_index=night_index,
                   sky_index=sky_index, step_min=step_min)


# ----------------------------------------------------------------------------- preparing a run


@dataclass(frozen=True)
class PreparedRun:
    """Everything between the posteriors and the strategies, computed once per run.

    Attributes
    ----------
    scenario : Scenario
    site : planner.site.Site
    nights : tuple of planner.site.Night
        The true nights (for the schedule's headers).
    aligned : tuple of planner.site.Night
        The nights with dark windows shrunk to the run grid (what the plan may use).
    sky : planner.sky.Sky
        Sky on the aligned nights' grid.
    grid : RunGrid
    constraints : planner.observability.Constraints
    moon_table : tuple of (float, float)
    instrument : planner.exposure.Instrument
    mount : planner.slew.Mount
    posteriors : dict of str to inference.posterior.Posterior
    predictors : tuple of planner.predict.Predictor
        In scenario target order.
    exposures : tuple of float
        The exposure options of the run [s] (union of every target's).
    observable, bits, sigma : ndarray, shape (n_options, n_targets, n_sky)
        On the sky grid: observable starts, one-visit expected bits (conditional on executed
        visits without velocities), measurement noise [m/s].
    problem : planner.problem.Problem
    surrogate : planner.surrogate.Surrogate
    lost_jd : tuple of (float, float)
        Time given up (JD UTC pairs).
    done : tuple of planner.outputs.ScheduledVisit
        Executed visits kept from an earlier plan.
    """

    scenario: Scenario
    site: object
    nights: tuple
    aligned: tuple
    sky: object
    grid: RunGrid
    constraints: object
    moon_table: tuple
    instrument: object
    mount: object
    posteriors: dict
    predictors: tuple
    exposures: tuple
    observable: np.ndarray
    bits: np.ndarray
    sigma: np.ndarray
    problem: object
    surrogate: object
    lost_jd: tuple = ()
    done: tuple = ()


def prepare(scenario: Scenario, posteriors: dict, *, lost_jd=(), done=(), strict: bool = True,
            seed: int | None = None, jobs: int | None = None, reuse=None) -> PreparedRun:
    """Compute the sky, limits, noise, information and candidate visits of a run.

    Parameters
    ----------
    scenario : Scenario
    posteriors : dict of str to Posterior
        One per target.
    lost_jd : sequence of (float, float)
        Time given up (weather, engineering, the past), JD UTC pairs.
    done : sequence of planner.outputs.ScheduledVisit
        Executed visits: their telescope time is closed, and for targets whose velocities from
        them are not yet in the posterior, new visits are valued given them.
    strict : bool
        Raise if a target is never observable (a scenario error); off when re-planning, where
        lost time may legitimately leave a target out.
    seed : int, optional
        Seed of the simulated outcomes behind conditional values (default: the solver seed).
    jobs : int, optional
        Worker processes for the information curves (None: every core; 1: this process).
    reuse : dict, optional
        Curves saved with an earlier plan (:func:`load_curves`): a target whose posterior and
        grid are unchanged, and whose observable starts are a subset of the saved ones, keeps
        its saved bits instead of recomputing them.

    Returns
    -------
    PreparedRun
    """
    from planner.exposure import grid_sigma
    from planner.observability import Constraints, observable_starts
    from planner.outputs import parse_utc
    from planner.predict import Predictor
    from planner.problem import build_problem
    from planner.rules import TargetRules
    from planner.sky import compute_sky
    from planner.slew import slew_seconds
    from planner.surrogate import build_surrogate

    site, nights, aligned, moon_table, instrument, mount = physical_setup(scenario)
    targets = scenario.targets
    sky = compute_sky(site, aligned, [t.ra_deg for t in targets], [t.dec_deg for t in targets],
                      step_s=scenario.sky.step_s, names=[t.id for t in targets])
    grid = run_grid(sky, aligned)
    busy = [(parse_utc(v.start_utc) - v.slew_s / 86400.0, parse_utc(v.end_utc)) for v in done]
    closed = tuple(scenario.constraints.blackouts) + tuple(lost_jd) + tuple(busy)
    airmass_limits = tuple(t.max_airmass or scenario.constraints.max_airmass for t in targets)
    constraints = Constraints(max_airmass=airmass_limits, moon_table=moon_table,
                              blackouts=closed,
                              target_windows=tuple(t.windows or None for t in targets))
    exposures = tuple(sorted({e for t in targets for e in scenario.target_exposures(t)}))
    offered = np.array([[e in scenario.target_exposures(t) for t in targets] for e in exposures])
    observable = np.stack([observable_starts(sky, constraints, e) for e in exposures])
    observable &= offered[:, :, None]
    if strict:
        _check_observable(scenario, sky, constraints, observable)
    v_mag = np.array([t.v_mag for t in targets])
    sigma = np.moveaxis(grid_sigma(instrument, sky, v_mag, exposures), 1, 0)
    predictors = tuple(Predictor.from_posterior(posteriors[t.id], scenario.instrument.name)
                       for t in targets)
    rng = np.random.default_rng(scenario.solver.seed if seed is None else seed)
    saved = _reusable(reuse, scenario, sky, exposures, observable, posteriors)
    bits = _bits(scenario, sky, instrument, predictors, exposures, observable, sigma, done, rng,
                 jobs, saved)
    rules = tuple(TargetRules(
        min_visits=t.min_visits, max_visits=t.max_visits, max_per_night=t.max_visits_per_night,
        min_spacing_min=int(round(t.min_gap_h * 60.0)), weight=t.weight,
        windows_jd=tuple(t.windows), must_windows_jd=tuple(t.must_windows)) for t in targets)
    default = scenario.exposures.options_s[0]
    problem = build_problem(
        times_jd=grid.times_jd, night_index=grid.night_index,
        dark_jd=np.array([(n.dark_start_jd, n.dark_end_jd) for n in aligned]),
        night_dates=[n.date for n in aligned], target_names=[t.id for t in targets],
        rules=rules, exposure_s=exposures, observable=grid.scatter(observable, False),
        bits=grid.scatter(bits, 0.0), sigma=grid.scatter(sigma, 1e3),
        airmass=grid.scatter(sky.airmass, 99.0), altitude_deg=grid.scatter(sky.altitude_deg, -90.0),
        azimuth_deg=grid.scatter(sky.azimuth_deg, 0.0),
        bjd_tdb=_fill_bjd(grid, sky), reserved_jd=closed,
        slew=lambda a1, z1, a2, z2: slew_seconds(mount, a1, z1, a2, z2, include_overhead=False),
        overhead_s=mount.overhead_s(), default_option=exposures.index(default))
    surrogate = build_surrogate(problem, predictors)
    log.info("prepared %d targets, %d nights, %d candidate visits", len(targets), len(aligned),
             problem.n_candidates)
    return PreparedRun(scenario=scenario, site=site, nights=nights, aligned=aligned, sky=sky,
                       grid=grid, constraints=constraints, moon_table=moon_table,
                       instrument=instrument, mount=mount, posteriors=dict(posteriors),
                       predictors=predictors, exposures=exposures, observable=observable,
                       bits=bits, sigma=sigma, problem=problem, surrogate=surrogate,
                       lost_jd=tuple(lost_jd), done=tuple(done))


def _check_observable(scenario, sky, constraints, observable) -> None:
    from planner.observability import binding_constraints

    never = np.flatnonzero(~observable.any(axis=(0, 2)))
    if never.size:
        i = int(never[0])
        shortest = min(scenario.target_exposures(scenario.targets[i]))
        reasons = binding_constraints(sky, constraints, shortest)
        why = reasons[i] or f"Target {scenario.targets[i].id!r} is never observable in this run."
        raise ScenarioError(f"{scenario.path.name}: targets[{i}]: {why}")


def _mid_columns(sky, exposure_s: float) -> np.ndarray:
    """Sky-grid column nearest the middle of an exposure starting at each column (same night)."""
    shift = int(round(0.5 * exposure_s / sky.step_s))
    cols = np.arange(sky.times_jd.size)
    mid = np.minimum(cols + shift, cols.size - 1)
    same = sky.night_index[mid] == sky.night_index
    while not same.all():  # near a night's end: step back into the night
        mid = np.where(same, mid, mid - 1)
        same = sky.night_index[mid] == sky.night_index
    return mid


def _posterior_key(posterior) -> str:
    return f"{posterior.data_digest}:{posterior.seed}:{posterior.samples.shape[0]}"


def save_curves(run: PreparedRun, path: str | Path) -> None:
    """Keep a run's one-visit bits beside its plan (atomic ``curves.npz``) for re-planning."""
    import io

    from planner.outputs import atomic_write_bytes

    buffer = io.BytesIO()
    np.savez_compressed(
        buffer, times_jd=run.sky.times_jd, exposures=np.asarray(run.exposures),
        targets=np.array([t.id for t in run.scenario.targets]),
        keys=np.array([_posterior_key(run.posteriors[t.id]) for t in run.scenario.targets]),
        observable=run.observable, bits=run.bits)
    atomic_write_bytes(path, buffer.getvalue())


def load_curves(path: str | Path) -> dict | None:
    """Read curves saved by :func:`save_curves`; None if the file is missing or unreadable."""
    try:
        with np.load(Path(path), allow_pickle=False) as data:
            return {key: data[key] for key in data.files}
    except (OSError, ValueError, KeyError):
        return None


def _reusable(saved, scenario, sky, exposures, observable, posteriors) -> dict:
    """Targets whose saved bits still hold: same grid, options and posterior, fewer starts."""
    if not saved or saved["times_jd"].shape != sky.times_jd.shape:
        return {}
    if not (np.allclose(saved["times_jd"], sky.times_jd, rtol=0, atol=1e-9)
            and np.array_equal(saved["exposures"], np.asarray(exposures))):
        return {}
    index = {str(name): k for k, name in enumerate(saved["targets"])}
    out = {}
    for s, target in enumerate(scenario.targets):
        k = index.get(target.id)
        if k is None or str(saved["keys"][k]) != _posterior_key(posteriors[target.id]):
            continue
        if np.any(observable[:, s] & ~saved["observable"][:, k]):
            continue
        out[s] = saved["bits"][:, k]
    return out


def _curve_bits(args) -> np.ndarray:
    """One target's information curve (all options), NaN (not observable) as 0 bits."""
    from planner.curves import build_curve

    predictor, bjd, sigma, observable, exposures, times_jd, target = args
    curve = build_curve(predictor, bjd, sigma, observable, exposures, times_jd=times_jd,
                        target=target)
    return np.nan_to_num(curve.bits, nan=0.0)


def _bits(scenario, sky, instrument, predictors, exposures, observable, sigma, done,
          rng, jobs=None, saved=None) -> np.ndarray:
    """One-visit expected bits on the sky grid, conditional on executed visits without data.

    The unconditional curves of the targets are independent and computed in ``jobs`` worker
    processes (None: every core).
    """
    from concurrent.futures import ProcessPoolExecutor

    from planner.information import conditional_bits
    from planner.outputs import parse_utc

    bits = np.zeros(observable.shape)
    pending = {}
    for visit in done:
        if visit.status == "done":
            pending.setdefault(visit.target, []).append(visit)
    saved = saved or {}
    for s, target_bits in saved.items():
        if scenario.targets[s].id not in pending:
            bits[:, s] = np.where(observable[:, s], target_bits, 0.0)
    plain = [s for s, t in enumerate(scenario.targets) if t.id not in pending and s not in saved]
    work = [(predictors[s], sky.bjd_tdb[s], sigma[:, s], observable[:, s], exposures,
             sky.times_jd, scenario.targets[s].id) for s in plain]
    workers = max(1, min(jobs or os.cpu_count() or 1, len(work)))
    if workers > 1:
        with ProcessPoolExecutor(workers) as pool:
            curves = list(pool.map(_curve_bits, work, chunksize=4))
    else:
        curves = [_curve_bits(item) for item in work]
    for s, curve in zip(plain, curves, strict=True):
        bits[:, s] = curve
    for s, target in enumerate(scenario.targets):
        if target.id not in pending:
            continue
        predictor = predictors[s]
        jitter2 = predictor.jitter[:, None] ** 2
        for o, e in enumerate(exposures):
            cols = np.flatnonzero(observable[o, s])
            if cols.size == 0:
                continue
            mid = _mid_columns(sky, e)[cols]
            predicted = predictor.velocities(sky.bjd_tdb[s, mid])
            total = np.sqrt(sigma[o, s, mid][None, :] ** 2 + jitter2)
            set_pred, set_sigma = _visit_predictions(scenario, sky, instrument, predictor, s,
                                                     pending[target.id], parse_utc)
            bits[o, s, cols] = conditional_bits(set_pred, set_sigma, predicted, total, rng)
    return bits


def _visit_predictions(scenario, sky, instrument, predictor, s, visits, parse_utc):
    """Predicted velocities and total noise of a target's visits (mid-exposure, nearest column)."""
    mids = np.array([0.5 * (parse_utc(v.start_utc) + parse_utc(v.end_utc)) for v in visits])
    cols = np.clip(np.searchsorted(sky.times_jd, mids), 0, sky.times_jd.size - 1)
    bjd = sky.bjd_tdb[s, cols] + (mids - sky.times_jd[cols])
    predicted = predictor.velocities(bjd)
    from planner.exposure import rv_sigma


    airmass = np.array([0.5 * (v.airmass_start + v.airmass_end) for v in visits])
    noise = rv_sigma(instrument, scenario.targets[s].v_mag,
                     np.array([v.exposure_s for v in visits]), airmass)
    return predicted, np.sqrt(noise[None, :] ** 2 + predictor.jitter[:, None] ** 2)


def _fill_bjd(grid: RunGrid, sky) -> np.ndarray:
    """Barycentric times on the run grid; between nights, the UTC instant plus the mean offset."""
    offset = np.mean(sky.bjd_tdb - sky.times_jd[None, :], axis=1, keepdims=True)
    out = grid.times_jd[None, :] + offset
    inside = grid.sky_index >= 0
    out[:, inside] = sky.bjd_tdb[:, grid.sky_index[inside]]
    return out


# ----------------------------------------------------------------------------- plans


@dataclass(frozen=True)
class PlanResult:
    """One strategy's plan, checked and scored.

    Attributes
    ----------
    plan : planner.plan.Plan
    plan_file : planner.outputs.PlanFile
    verification : planner.verify.Verification
    run : PreparedRun
    """

    plan: object
    plan_file: object
    verification: object
    run: PreparedRun


def run_strategy(run: PreparedRun, strategy: str, time_limit_s: float | None = None):
    """Solve the run's problem with one strategy (``joint``, ``greedy`` or ``cadence``)."""
    from planner.allocate.cadence import cadence_plan
    from planner.allocate.greedy import greedy_plan
    from planner.allocate.joint import joint_plan

    solver = run.scenario.solver
    if strategy == "joint":
        limit = solver.time_limit_s if time_limit_s is None else float(time_limit_s)
        if not limit > 0:
            raise PlanError(f"the solver time limit must be positive seconds, got {limit}.")
        return joint_plan(run.problem, run.surrogate, time_limit_s=limit, seed=solver.seed,
                          workers=solver.workers)
    if strategy == "greedy":
        return greedy_plan(run.problem, run.surrogate)
    if strategy == "cadence":
        return cadence_plan(run.problem, run.surrogate)
    raise PlanError(f"unknown strategy {strategy!r}; use joint, greedy or cadence.")


def verify(run: PreparedRun, plan):
    """Check a plan from scratch against the true nights, sky, mount and rules."""
    from planner.verify import verify_plan

    targets = run.scenario.targets
    return verify_plan(plan, run.problem, site=run.site, nights=run.nights,
                       ra_deg=[t.ra_deg for t in targets], dec_deg=[t.dec_deg for t in targets],
                       constraints=run.constraints, mount=run.mount)


def make_plan(run: PreparedRun, strategy: str | None = None,
              time_limit_s: float | None = None, notes=()) -> PlanResult:
    """Plan the run with one strategy, verify it, score it exactly and build its plan file.

    Raises
    ------
    PlanError
        If the plan fails the independent feasibility check.
    """
    from planner.verify import require_valid

    strategy = strategy or run.scenario.solver.strategy
    plan = run_strategy(run, strategy, time_limit_s)
    verification = verify(run, plan)
    require_valid(verification)
    marginals, target_bits = exact_marginals(run, plan)
    total = float(sum(target_bits.values()))
    status = [f"strategy {strategy}: {len(plan.visits)} exposures, status {plan.status}, "
              f"{plan.runtime_s:.1f} s; independent feasibility check passed "
              f"({verification.n_checked} exposures)."]
    plan_file = build_plan_file(run, plan, marginals, target_bits, total,
                                notes=tuple(status) + tuple(notes))
    return PlanResult(plan=plan, plan_file=plan_file, verification=verification, run=run)


def exact_marginals(run: PreparedRun, plan, n_outcomes: int = 2048):
    """Per-visit marginal bits (chain rule in time order) and per-target weighted joint bits.

    For each target, the visits ``v_1 .. v_k`` in time order get
    ``I(v_1..v_j) - I(v_1..v_{j-1})``, so they add up to the joint information of all its
    visits, ``I(v_1..v_k)`` [bits], which is taken from the one exact score
    (:func:`planner.score.score_plan`). Where executed visits without velocities precede them,
    the chain starts after those visits, so the new visits add up to ``I(new | executed)``.
    Values are multiplied by the target's weight.

    Returns
    -------
    marginals : ndarray, shape (n_visits,)
        In the order of ``plan.visits`` [bits].
    target_bits : dict of str to float
        Weighted joint bits of the new visits per target (given the executed ones).
    """
    from planner.information import joint_bits
    from planner.outputs import parse_utc
    from planner.score import score_plan

    problem, scenario = run.problem, run.scenario
    rng = np.random.default_rng(scenario.solver.seed)
    score = score_plan(plan, problem, run.predictors, rng=rng, n_outcomes=n_outcomes)
    marginals = np.zeros(len(plan.visits))
    target_bits = {}
    for s, target in enumerate(scenario.targets):
        mine = [k for k, v in enumerate(plan.visits) if v.target == target.id]
        if not mine or target.weight == 0:
            target_bits[target.id] = 0.0
            continue
        predictor = run.predictors[s]
        cand = np.array([plan.visits[k].candidate for k in mine])
        pred = predictor.velocities(problem.bjd_mid[cand])
        sig = np.sqrt(problem.sigma[cand][None, :] ** 2 + predictor.jitter[:, None] ** 2)
        pending = [v for v in run.done if v.target == target.id and v.status == "done"]
        if pending:
            p0, s0 = _visit_predictions(scenario, run.sky, run.instrument, predictor, s,
                                        pending, parse_utc)
            pred, sig = np.hstack([p0, pred]), np.hstack([s0, sig])
        first, last = len(pending), pred.shape[1]
        prefix = [joint_bits(pred[:, :j], sig[:, :j], rng, n_outcomes).bits
                  for j in range(first, last + (1 if pending else 0))]
        if not pending:
            prefix.append(score.per_target_bits[s] / target.weight)
        gains = np.diff(prefix) * target.weight
        marginals[mine] = gains
        target_bits[target.id] = float(gains.sum())
    return marginals, target_bits


def build_plan_file(run: PreparedRun, plan, marginals, target_bits, total_bits, notes=()):
    """Turn a plan into the :class:`planner.outputs.PlanFile` (exact pointing at start and end)."""
    from planner.outputs import NightSummary, PlanFile, ScheduledVisit, format_utc
    from planner.sky import pointing_at

    scenario = run.scenario
    by_id = {t.id: t for t in scenario.targets}
    visits = []
    if plan.visits:
        ra = np.array([by_id[v.target].ra_deg for v in plan.visits])
        dec = np.array([by_id[v.target].dec_deg for v in plan.visits])
        start = pointing_at(run.site, ra, dec, np.array([v.start_jd for v in plan.visits]))
        end = pointing_at(run.site, ra, dec, np.array([v.end_jd for v in plan.visits]))
        for k, v in enumerate(plan.visits):
            visits.append(ScheduledVisit(
                target=v.target, night=v.night, start_utc=format_utc(v.start_jd),
                end_utc=format_utc(v.end_jd), exposure_s=float(v.exposure_s),
                slew_s=round(float(v.slew_s), 1), airmass_start=round(float(start.airmass[k]), 4),
                airmass_end=round(float(end.airmass[k]), 4),
                moon_separation_deg=round(float(start.moon_separation_deg[k]), 2),
                expected_bits=round(float(marginals[k]), 5), ra_deg=float(ra[k]),
                dec_deg=float(dec[k])))
    kept = [v for v in run.done]
    all_visits = sorted(kept + visits, key=lambda v: v.start_utc)
    nights = tuple(NightSummary(
        date=n.date, sunset_utc=format_utc(n.sunset_jd), dark_start_utc=format_utc(n.dark_start_jd),
        dark_end_utc=format_utc(n.dark_end_jd), sunrise_utc=format_utc(n.sunrise_jd),
        moon_illumination=round(float(n.moon_illumination), 3),
        moon_up=tuple((format_utc(a), format_utc(b)) for a, b in n.moon_up),
        lost=tuple((format_utc(max(a, n.dark_start_jd)), format_utc(min(b, n.dark_end_jd)))
                   for a, b in run.lost_jd if a < n.dark_end_jd and b > n.dark_start_jd))
        for n in run.nights)
    done_bits = {}
    for v in kept:
        done_bits[v.target] = done_bits.get(v.target, 0.0) + v.expected_bits
    per_target = {t.id: round(target_bits.get(t.id, 0.0) + done_bits.get(t.id, 0.0), 5)
                  for t in scenario.targets}
    site = run.site
    return PlanFile(
        strategy=plan.strategy,
        total_bits=round(float(total_bits) + sum(done_bits.values()), 5),
        bound_bits=None if plan.bound is None else round(float(plan.bound), 5),
        scenario=str(scenario.path), run_name=scenario.name,
        site={"name": scenario.site.name, "latitude_deg": site.latitude_deg,
              "longitude_deg": site.longitude_deg, "elevation_m": site.elevation_m,
              "timezone": site.timezone},
        twilight_sun_altitude_deg=float(run.nights[0].twilight_altitude_deg),
        max_airmass=float(scenario.constraints.max_airmass),
        moon_table=tuple(tuple(map(float, r)) for r in run.moon_table),
        target_bits=per_target, nights=nights, visits=tuple(all_visits), notes=tuple(notes),
        objective_bits=round(float(plan.objective), 5))


@dataclass(frozen=True)
class ComparisonReport:
    """The three strategies on one exact score, with the printed table.

    Attributes
    ----------
    comparison : planner.compare.Comparison
        Rows per strategy (cadence, greedy, joint), per-target bits and the plans.
    text : str
        The printed table.
    """

    comparison: object
    text: str


def compare(run: PreparedRun, time_limit_s: float | None = None) -> ComparisonReport:
    """Plan with cadence, greedy and joint, verify each and score them on the exact score.

    Greedy here is the same strategy as ``nightbits plan --strategy greedy`` (gains from the
    surrogate), so a row of the table is the plan that command would print.
    """
    from planner.compare import compare_strategies

    solver = run.scenario.solver
    limit = solver.time_limit_s if time_limit_s is None else float(time_limit_s)
    comparison = compare_strategies(
        run.problem, run.surrogate, run.predictors, rng=np.random.default_rng(solver.seed),
        time_limit_s=limit, seed=solver.seed, workers=solver.workers, exact_greedy=False,
        verify=lambda plan: verify(run, plan))
    lines = [f"{'strategy':<9} {'exposures':>9} {'stars':>5} {'exact bits':>15} "
             f"{'bits/dark h':>11} {'slew h':>6} {'idle h':>6} {'runtime s':>9}  verified"]
    for r in comparison.rows:
        lines.append(f"{r.strategy:<9} {r.visits:>9} {r.stars_observed:>5} "
                     f"{r.total_bits:>8.2f} +-{r.stderr:>4.2f} {r.bits_per_dark_hour:>11.3f} "
                     f"{r.slew_s / 3600:>6.2f} {r.idle_s / 3600:>6.2f} {r.runtime_s:>9.1f}  "
                     f"{'yes' if r.verified else 'no'}")
    bits = {r.strategy: r.total_bits for r in comparison.rows}
    for name in ("greedy", "cadence"):
        base = bits[name]
        share = "" if base <= 0 else f" ({100.0 * (bits['joint'] - base) / base:+.1f}%)"
        lines.append(f"joint against {name}: {bits['joint'] - base:+.2f} bits{share}")
    lines.append("exact bits: per target the joint expected information of all its visits")
    lines.append("(not a sum of single visits), weighted and summed over targets.")
    return ComparisonReport(comparison=comparison, text="\n".join(lines) + "\n")
