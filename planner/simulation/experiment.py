"""Strategies compared against known true orbits: realised information, spread over seeds.

Fixed strategies (``joint``, ``greedy``, ``cadence``) are planned once, before the run, from
the current posteriors; ``adaptive`` re-plans the remaining nights with the joint strategy after
every night, with that night's simulated velocities folded into the posteriors. Every strategy
of one seed meets the same weather (common random numbers). What was learnt is measured
against the posteriors before the run (:mod:`planner.simulation.realised`), and the cost to reach
is the
number of exposures, in time order, each strategy needs to reach the realised information the
cadence plan reaches with its whole run. Method and sources: ``docs/simulation.md``.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

import numpy as np

from planner.errors import PlanError
from planner.information.gain import joint_bits
from planner.information.update import MIN_ESS_FRACTION, update_posterior
from planner.simulation.realised import measure_execution, support_curve
from planner.simulation.scoreboard import Experiment, summarise
from planner.simulation.simulate import Execution, execute, visit_conditions
from planner.simulation.weather import LostTime, Weather, draw_weather

__all__ = [
    "STRATEGIES",
    "Setup",
    "StrategyRun",
    "Experiment",
    "build_setup",
    "expected_bits",
    "run_strategy",
    "run_experiment",
]

logger = logging.getLogger(__name__)

#: Strategies the experiment knows, in report order.
STRATEGIES = ("joint", "greedy", "cadence", "adaptive")


@dataclass(frozen=True)
class Setup:
    """Everything fixed before the simulated run.

    Attributes
    ----------
    posteriors : mapping of str to inference.posterior.Posterior
        Posterior of every target before the run.
    past : mapping of str to inference.data.RVData
        The velocities each posterior was fitted to (for refits).
    truths : mapping of str to planner.simulation.truth.TrueOrbit
        True orbit of every target.
    stars : mapping of str to object with ``ra_deg``, ``dec_deg``, ``v_mag``, ``weight``
        Scenario target records.
    site : planner.sky.site.Site
        The observatory.
    sky : planner.sky.tracks.Sky
        The planner's sky of the run.
    instrument : planner.sky.exposure.Instrument
        The noise model's instrument.
    instrument_name : str
        Name of the instrument in the velocity files.
    night_dates : tuple of str
        Nights of the run, ``YYYY-MM-DD``.
    windows_jd : ndarray, shape (n_nights, 2)
        Dark window of each night, JD (UTC) [d] (the weather is drawn over these).
    plan_fixed : callable
        ``plan_fixed(strategy) -> planner.allocation.plan.Plan`` from the posteriors before the run.
    plan_rest : callable
        ``plan_rest(posteriors, first_night) -> Plan``: the joint plan of nights
        ``first_night ..`` from updated posteriors (the adaptive strategy).
    fit_settings : object, optional
        Sampler settings for refits (None: the sampler's defaults).
    prepared : planner.workflow.pipeline.PreparedRun, optional
        The pipeline's prepared run, when built by :func:`build_setup`.
    """

    posteriors: Mapping
    past: Mapping
    truths: Mapping
    stars: Mapping
    site: object
    sky: object
    instrument: object
    instrument_name: str
    night_dates: tuple
    windows_jd: np.ndarray
    plan_fixed: Callable
    plan_rest: Callable
    fit_settings: object = None
    prepared: object = None

    def weight(self, target) -> float:
        """Weight of a target's bits in totals (the plan score's weight)."""
        return float(getattr(self.stars[target], "weight", 1.0))


@dataclass(frozen=True)
class StrategyRun:
    """One strategy executed in one seed.

    Attributes
    ----------
    strategy : str
        Strategy name.
    seed : int
        Seed of the noise and the weather.
    expected_bits : float
        Expected bits of the planned visits (before weather) under the posteriors before the
        run, at the simulator's exact mid-exposure noise, weighted (:func:`expected_bits`).
    stars : tuple of StarRealised
        What each visited target learnt.
    realised_bits : float
        Weighted total of the stars' realised bits [bits].
    shrink_bits : float
        Weighted total of the stars' volume shrink [bits].
    exposures : int
        Exposures executed (not lost).
    planned : int
        Exposures planned.
    hours : float
        Exposure plus slew and overhead time of the executed visits [h].
    curve_bits : ndarray, shape (exposures,)
        On-support realised bits of the whole run after each executed exposure, in time order.
    curve_hours : ndarray, shape (exposures,)
        Telescope hours used up to and including each exposure.
    execution : planner.simulation.simulate.Execution
        The simulated velocities (for plots of a star's posterior before and after).
    """

    strategy: str
    seed: int
    expected_bits: float
    stars: tuple
    realised_bits: float
    shrink_bits: float
    exposures: int
    planned: int
    hours: float
    curve_bits: np.ndarray = field(repr=False)
    curve_hours: np.ndarray = field(repr=False)
    execution: Execution = field(repr=False, default=None)


#: Simulated outcomes behind each target's expected joint bits (as the plan score uses).
EXPECTED_OUTCOMES = 2048


def expected_bits(setup, conditions, seed=0, return_stderr=False):
    """Compute the expected information of visits under the posteriors before the run.

    Parameters
    ----------
    setup : Setup
        Posteriors and target weights.
    conditions : planner.simulation.simulate.Conditions
        The visits with their mid-exposure times and noise.
    seed : int
        Seed of the simulated outcomes (fixed, so one set of visits has one value); each
        target draws from its own stream (:class:`planner.information.streams.Streams`, stage
        ``expected``), so its value does not depend on the other targets' visits.
    return_stderr : bool
        Also return the Monte Carlo standard error.

    Returns
    -------
    bits : float
        Weighted sum over targets of the joint information of each target's visits
        (:func:`planner.information.gain.joint_bits`, not a sum of single visits) [bits].
    stderr : float
        Only with `return_stderr`: its standard error [bits].
    """
    from planner.information.streams import Streams

    streams = Streams(seed)
    total, var = 0.0, 0.0
    for target in dict.fromkeys(v.target for v in conditions.visits):
        rows = [k for k, v in enumerate(conditions.visits) if v.target == target]
        post = setup.posteriors[target]
        pred = post.predict(conditions.bjd_tdb[rows], setup.instrument_name)
        jit = post.jitter(setup.instrument_name)
        sigma = np.sqrt(conditions.sigma_ms[rows][None, :] ** 2 + jit[:, None] ** 2)
        est = joint_bits(pred, sigma, streams.star("expected", target), EXPECTED_OUTCOMES)
        total += setup.weight(target) * est.bits
        var += (setup.weight(target) * est.stderr) ** 2
    return (float(total), float(np.sqrt(var))) if return_stderr else float(total)


def _hours(visits):
    return np.cumsum([(v.exposure_s + v.slew_s) / 3600.0 for v in visits])


def _finish(setup, strategy, seed, planned, expected, execution, rng, refit):
    """Measure one executed strategy; ``planned`` are the Conditions of all planned visits."""
    weights = {t: setup.weight(t) for t in setup.posteriors}
    stars = measure_execution(setup.posteriors, execution, rng, past=setup.past, refit=refit,
                              fit_settings=setup.fit_settings)
    curve = support_curve(setup.posteriors, execution, weights)
    hours = _hours(execution.visits)
    return StrategyRun(
        strategy=strategy, seed=int(seed), expected_bits=expected,
        stars=stars,
        realised_bits=float(sum(setup.weight(s.target) * s.bits for s in stars)),
        shrink_bits=float(sum(setup.weight(s.target) * s.shrink_bits for s in stars)),
        exposures=len(execution.visits), planned=len(planned.visits),
        hours=float(hours[-1]) if hours.size else 0.0, curve_bits=curve, curve_hours=hours,
        execution=execution,
    )


def _merge(parts, instrument_name):
    """One Execution from the executions of successive nights."""
    def cat(name):
        return np.concatenate([getattr(p, name) for p in parts]) if parts else np.zeros(0)

    return Execution(visits=tuple(v for p in parts for v in p.visits),
                     lost=tuple(v for p in parts for v in p.lost), bjd_tdb=cat("bjd_tdb"),
                     rv=cat("rv"), rv_err=cat("rv_err"), airmass=cat("airmass"),
                     instrument=instrument_name)


def _seed_generators(seed):
    """Independent generators for the weather, the noise and the refits of one seed."""
    weather, noise, fits = np.random.SeedSequence([int(seed), 7]).spawn(3)
    return (np.random.default_rng(weather), np.random.default_rng(noise),
            np.random.default_rng(fits))


def run_strategy(setup, strategy, seed, weather=None, refit=False, fixed_plans=None,
                 progress=None):
    """Execute one strategy in one seed and measure what it taught.

    Parameters
    ----------
    setup : Setup
        The run before it starts.
    strategy : str
        One of :data:`STRATEGIES`.
    seed : int
        Seed of the weather and the noise (the same weather for every strategy).
    weather : planner.simulation.weather.Weather, optional
        Loss probabilities; None loses nothing.
    refit : bool
        Refit posteriors whose importance weights degenerate (see :func:`measure_execution`);
        in the adaptive loop, False makes every nightly update a reweighting.
    fixed_plans : dict, optional
        Cache ``strategy -> (Plan, Conditions, expected bits)`` of fixed plans (they do not
        depend on the seed); filled on first use.
    progress : callable, optional
        ``progress(done, total, label)`` after each adaptive night.

    Returns
    -------
    StrategyRun
    """
    if strategy not in STRATEGIES:
        raise PlanError(f"unknown strategy {strategy!r}; use one of {', '.join(STRATEGIES)}.")
    rng_weather, rng_noise, rng_fit = _seed_generators(seed)
    lost = draw_weather(setup.windows_jd, weather or Weather(), rng_weather)
    if strategy != "adaptive":
        cache = fixed_plans if fixed_plans is not None else {}
        if strategy not in cache:  # a fixed plan, its conditions and its value do not change
            plan = setup.plan_fixed(strategy)
            cond = visit_conditions(plan.visits, setup.stars, setup.site, setup.sky,
                                    setup.instrument)
            cache[strategy] = (plan, cond, expected_bits(setup, cond))
        _, cond, expected = cache[strategy]
        execution = execute(cond, setup.truths, setup.instrument_name, rng_noise, lost)
        return _finish(setup, strategy, seed, cond, expected, execution, rng_fit, refit)
    return _run_adaptive(setup, seed, lost, rng_noise, rng_fit, refit, progress)


def _run_adaptive(setup, seed, lost: LostTime, rng_noise, rng_fit, refit, progress):
    posts = dict(setup.posteriors)
    past = dict(setup.past)
    parts, planned = [], []
    n_nights = len(setup.night_dates)
    # Never refit in the loop unless asked: an ESS of one sample still passes.
    min_ess = MIN_ESS_FRACTION if refit else 1.0 / max(p.n_samples for p in posts.values())
    for k, date in enumerate(setup.night_dates):
        plan = setup.plan_rest(posts, k)
        tonight = [v for v in plan.visits if v.night == date]
        planned += tonight
        cond = visit_conditions(tonight, setup.stars, setup.site, setup.sky, setup.instrument)
        night = execute(cond, setup.truths, setup.instrument_name, rng_noise, lost)
        parts.append(night)
        for target in night.targets():
            data = night.data(target)
            upd = update_posterior(posts[target], past[target], data, rng_fit,
                                   settings=setup.fit_settings, min_ess_fraction=min_ess)
            posts[target] = upd.posterior
            past[target] = past[target].concat(data)
        if progress is not None:
            progress(k + 1, n_nights, f"seed {seed} night {date}")
    everything = visit_conditions(planned, setup.stars, setup.site, setup.sky, setup.instrument)
    return _finish(setup, "adaptive", seed, everything, expected_bits(setup, everything),
                   _merge(parts, setup.instrument_name), rng_fit, refit)


def run_experiment(setup, strategies=STRATEGIES, seeds=(0,), weather=None, refit=False,
                   progress=None):
    """Run every strategy in every seed.

    Parameters
    ----------
    setup : Setup
        The run before it starts.
    strategies : sequence of str
        Strategies from :data:`STRATEGIES`.
    seeds : sequence of int
        Seeds of the weather and the noise.
    weather : planner.simulation.weather.Weather, optional
        Loss probabilities; None loses nothing.
    refit : bool
        See :func:`run_strategy`.
    progress : callable, optional
        ``progress(done, total, label)`` after each strategy and seed.

    Returns
    -------
    Experiment
    """
    strategies = tuple(strategies)
    unknown = [s for s in strategies if s not in STRATEGIES]
    if unknown or not strategies:
        raise PlanError(f"unknown strategy {unknown[0] if unknown else '(none)'!r}; use some of "
                        f"{', '.join(STRATEGIES)}.")
    seeds = tuple(int(s) for s in seeds)
    if not seeds:
        raise PlanError("no seeds given; run at least one seed.")
    fixed = {}
    runs = []
    total = len(strategies) * len(seeds)
    for seed in seeds:
        for name in strategies:
            runs.append(run_strategy(setup, name, seed, weather, refit, fixed_plans=fixed))
            logger.info("%s seed %d: realised %.2f bits", name, seed, runs[-1].realised_bits)
            if progress is not None:
                progress(len(runs), total, f"{name} seed {seed}")
    return Experiment(seeds=seeds, runs=tuple(runs),
                      summaries=summarise(runs, strategies, tuple(setup.posteriors)))


def build_setup(scenario, posteriors, truths, time_limit_s=None, strict=False):
    """Build the Setup of a scenario: its sky, noise and the pipeline's strategies as planners.

    Parameters
    ----------
    scenario : planner.workflow.scenario.Scenario
        The run.
    posteriors : dict of str to inference.posterior.Posterior
        Every target's posterior before the run (``planner.workflow.pipeline.fit_posteriors``).
    truths : mapping of str to planner.simulation.truth.TrueOrbit
        True orbit of every target.
    time_limit_s : float, optional
        Solver limit of every joint plan, the adaptive re-plans included (default the
        scenario's).
    strict : bool
        Stop on a never-observable target instead of leaving it out
        (:func:`planner.workflow.pipeline.prepare`).

    Returns
    -------
    Setup
        ``plan_fixed`` is :func:`planner.workflow.pipeline.make_plan` (verified plans);
        ``plan_rest(posteriors, k)`` prepares the run again from updated posteriors with the
        nights before ``k`` closed, and plans it with the joint strategy.
    """
    from planner.workflow import pipeline

    missing = [t.id for t in scenario.targets if t.id not in truths]
    if missing:
        raise PlanError(f"target {missing[0]!r} has no true orbit; add its truth file (see "
                        "docs/simulation.md) or pass the right folder with --truth.")
    run = pipeline.prepare(scenario, posteriors, strict=strict)
    jobs = pipeline.fit_jobs(scenario)
    past = {job.target: job.data for job in jobs}
    aligned = run.aligned

    made = {}

    def plan_fixed(strategy):
        if strategy not in made:  # each fixed plan is solved once
            made[strategy] = pipeline.make_plan(run, strategy, time_limit_s).plan
        return made[strategy]

    def plan_rest(updated, first):
        if first == 0 and all(updated[k] is posteriors[k] for k in posteriors):
            return plan_fixed("joint")
        closed = ((aligned[0].dark_start_jd - 1.0, aligned[first].dark_start_jd),)
        rest = pipeline.prepare(scenario, updated, lost_jd=closed, strict=False)
        return pipeline.make_plan(rest, "joint", time_limit_s).plan

    return Setup(posteriors=dict(posteriors), past=past, truths=dict(truths),
                 stars={t.id: t for t in scenario.targets}, site=run.site, sky=run.sky,
                 instrument=run.instrument, instrument_name=scenario.instrument.name,
                 night_dates=tuple(n.date for n in aligned),
                 windows_jd=np.array([(n.dark_start_jd, n.dark_end_jd) for n in aligned]),
                 plan_fixed=plan_fixed, plan_rest=plan_rest, prepared=run,
                 fit_settings=jobs[0].settings if jobs else None)
