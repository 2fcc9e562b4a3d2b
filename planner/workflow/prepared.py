"""Everything between the posteriors and the strategies: the :class:`PreparedRun` of a scenario.

:func:`prepare` computes, once per run, the dark windows, the sky on the run grid
(:mod:`planner.workflow.rungrid`), the observable starts of every exposure option, the measurement
noise,
the information curves (in worker processes), the candidate visits
(:class:`planner.allocation.problem.Problem`) and the solver's surrogate objective.
"""

from __future__ import annotations

import logging
import os
from dataclasses import dataclass

import numpy as np

from planner.errors import ScenarioError
from planner.sky.tracks import mid_exposure_columns
from planner.workflow.outputs import VisitStatus
from planner.workflow.rungrid import RunGrid, fill_bjd, physical_setup, run_grid
from planner.workflow.saved_curves import reusable_curves
from planner.workflow.scenario import Scenario

__all__ = ["PreparedRun", "prepare", "shortest_exposures", "visit_predictions"]

log = logging.getLogger(__name__)

#: Candidate starts kept per (target, night, exposure option), and their least spacing [min].
#: Measured on the demo (docs/architecture.md, Decisions): 8 starts 20 minutes apart left
#: 2 to 8 minutes idle before most exposures; 40 starts 5 minutes apart let the plans pack
#: exposures back to back at the cost of about 5 times as many candidates.
CANDIDATE_STARTS = 40
CANDIDATE_SPACING_MIN = 5

#: Times per star, and simulated outcomes, at which the share of a star's one-visit bits left
#: by executed visits without velocities is computed exactly to calibrate the Gaussian share
#: (:func:`planner.information.pending.calibrate_share`; docs/decisions.md).
CALIBRATION_TIMES = 4
CALIBRATION_OUTCOMES = 32


@dataclass(frozen=True)
class PreparedRun:
    """Everything between the posteriors and the strategies, computed once per run.

    Attributes
    ----------
    scenario : Scenario
    site : planner.sky.site.Site
    nights : tuple of planner.sky.site.Night
        The true nights (for the schedule's headers).
    aligned : tuple of planner.sky.site.Night
        The nights with dark windows shrunk to the run grid (what the plan may use).
    sky : planner.sky.tracks.Sky
        Sky on the aligned nights' grid.
    grid : RunGrid
    constraints : planner.sky.observability.Constraints
    moon_table : tuple of (float, float)
    instrument : planner.sky.exposure.Instrument
    mount : planner.sky.slew.Mount
    posteriors : dict of str to inference.posterior.Posterior
    predictors : tuple of planner.information.predict.Predictor
        In scenario target order.
    exposures : tuple of float
        The exposure options of the run [s] (union of every target's).
    observable, bits, sigma : ndarray, shape (n_options, n_targets, n_sky)
        On the sky grid: observable starts, one-visit expected bits (given executed visits
        without velocities, by the linear-Gaussian share, :mod:`planner.information.pending`),
        measurement noise [m/s].
    problem : planner.allocation.problem.Problem
    surrogate : planner.allocation.surrogate.Surrogate
    lost_jd : tuple of (float, float)
        Time given up (JD UTC pairs).
    done : tuple of planner.workflow.outputs.ScheduledVisit
        Executed visits kept from an earlier plan.
    excluded : tuple of planner.sky.observability.Exclusion
        The targets that can never be observed in this run (each with its binding limit), in
        scenario order; they get no candidate visit and the plan goes on without them.
    exact_bits : ndarray, shape (n_options, n_targets, n_sky), optional
        The exact one-visit bits ignoring executed visits (``bits`` before their share is
        taken off; what :func:`planner.workflow.saved_curves.save_curves` keeps). None: as
        ``bits``.
    now_jd : float or None
        The present of a re-plan, JD UTC: time before it is past (executed or idle), closed
        but not lost.
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
    excluded: tuple = ()
    exact_bits: np.ndarray | None = None
    now_jd: float | None = None


def shortest_exposures(scenario: Scenario) -> np.ndarray:
    """Each target's shortest exposure option [s], shape (n_targets,)."""
    return np.array([min(scenario.target_exposures(t)) for t in scenario.targets], dtype=float)


def prepare(scenario: Scenario, posteriors: dict, *, lost_jd=(), done=(), strict: bool = False,
            seed: int | None = None, jobs: int | None = None, reuse=None,
            now_jd: float | None = None, progress=None) -> PreparedRun:
    """Compute the sky, limits, noise, information and candidate visits of a run.

    Parameters
    ----------
    scenario : Scenario
    posteriors : dict of str to Posterior
        One per target.
    lost_jd : sequence of (float, float)
        Time given up (weather, engineering, the past), JD UTC pairs.
    done : sequence of planner.workflow.outputs.ScheduledVisit
        Executed visits: their telescope time is closed, and for targets whose velocities from
        them are not yet in the posterior, new visits are valued given them.
    strict : bool
        Raise a :class:`planner.errors.ScenarioError` if a target is never observable (the
        command line's ``--strict``); by default such targets are left out, listed in
        ``PreparedRun.excluded`` with the limit that keeps them out.
    seed : int, optional
        Seed of the Monte Carlo streams behind conditional values and the surrogate
        (:class:`planner.information.streams.Streams`; default: the solver seed).
    jobs : int, optional
        Worker processes for the information curves (None: every core; 1: this process).
    now_jd : float, optional
        The present (a re-plan): nothing may start before it; the past is not lost time.
    progress : callable, optional
        ``progress(done, total, label)`` before each step.
    reuse : dict, optional
        Curves saved with an earlier plan (:func:`planner.workflow.saved_curves.load_curves`): a
        target whose posterior and grid are unchanged, and whose observable starts are a subset
        of the saved ones, keeps its saved bits instead of recomputing them.

    Returns
    -------
    PreparedRun
    """
    from planner.allocation.problem import build_problem, mount_slew
    from planner.allocation.surrogate import build_surrogate
    from planner.information.predict import Predictor
    from planner.information.streams import Streams
    from planner.sky.exposure import grid_sigma
    from planner.sky.observability import Constraints
    from planner.sky.tracks import compute_sky

    report = progress or (lambda done, total, label: None)
    report(0, 4, "sky and limits")
    site, nights, aligned, moon_table, instrument, mount = physical_setup(scenario)
    targets = scenario.targets
    sky = compute_sky(site, aligned, [t.ra_deg for t in targets], [t.dec_deg for t in targets],
                      step_s=scenario.sky.step_s, names=[t.id for t in targets])
    grid = run_grid(sky, aligned)
    closed = _closed_time(scenario, nights, lost_jd, done, now_jd)
    constraints = Constraints(
        max_airmass=tuple(t.max_airmass or scenario.constraints.max_airmass for t in targets),
        moon_table=moon_table, blackouts=closed,
        target_windows=tuple(t.windows or None for t in targets))
    exposures, observable = _observable(scenario, sky, constraints)
    excluded = _excluded(scenario, sky, constraints, strict)
    v_mag = np.array([t.v_mag for t in targets])
    sigma = grid_sigma(instrument, sky, v_mag, exposures)
    predictors = tuple(Predictor.from_posterior(posteriors[t.id], scenario.instrument.name)
                       for t in targets)
    streams = Streams(scenario.solver.seed if seed is None else seed)
    report(1, 4, "information curves")
    saved = reusable_curves(reuse, scenario, sky, exposures, observable, posteriors)
    bits, exact_bits = _bits(scenario, sky, instrument, predictors, exposures, observable, sigma,
                             done, streams, jobs, saved)
    rules = _run_rules(targets, done)
    report(2, 4, "candidate visits")
    default = scenario.exposures.options_s[0]
    problem = build_problem(
        times_jd=grid.times_jd, night_index=grid.night_index,
        dark_jd=np.array([(n.dark_start_jd, n.dark_end_jd) for n in aligned]),
        night_dates=[n.date for n in aligned], target_names=[t.id for t in targets],
        rules=rules, exposure_s=exposures, observable=grid.scatter(observable, False),
        bits=grid.scatter(bits, 0.0), sigma=grid.scatter(sigma, 1e3),
        airmass=grid.scatter(sky.airmass, 99.0), altitude_deg=grid.scatter(sky.altitude_deg, -90.0),
        azimuth_deg=grid.scatter(sky.azimuth_deg, 0.0),
        bjd_tdb=fill_bjd(grid, sky), reserved_jd=closed,
        slew=mount_slew(mount),
        overhead_s=mount.overhead_s(), default_option=exposures.index(default),
        keep_per_night=CANDIDATE_STARTS, thin_spacing_min=CANDIDATE_SPACING_MIN)
    report(3, 4, "the solver's objective")
    surrogate = build_surrogate(problem, predictors, streams=streams)
    log.info("prepared %d targets, %d nights, %d candidate visits", len(targets), len(aligned),
             problem.n_candidates)
    return PreparedRun(scenario=scenario, site=site, nights=nights, aligned=aligned, sky=sky,
                       grid=grid, constraints=constraints, moon_table=moon_table,
                       instrument=instrument, mount=mount, posteriors=dict(posteriors),
                       predictors=predictors, exposures=exposures, observable=observable,
                       bits=bits, sigma=sigma, problem=problem, surrogate=surrogate,
                       lost_jd=tuple(lost_jd), done=tuple(done), excluded=excluded,
                       exact_bits=exact_bits, now_jd=None if now_jd is None else float(now_jd))


def _closed_time(scenario, nights, lost_jd, done, now_jd) -> tuple:
    """Telescope time closed to new visits: blackouts, lost time, the past, executed visits."""
    from planner.workflow.outputs import parse_utc

    busy = [(parse_utc(v.start_utc) - v.slew_s / 86400.0, parse_utc(v.end_utc)) for v in done]
    past = () if now_jd is None else ((min(n.sunset_jd for n in nights) - 1.0, float(now_jd)),)
    return tuple(scenario.constraints.blackouts) + tuple(lost_jd) + past + tuple(busy)


def _observable(scenario, sky, constraints):
    """Return the exposure options and where each target may start the ones it offers.

    Returns (exposures [s], observable of shape (n_options, n_targets, n_sky_times)).
    """
    from planner.sky.observability import observable_starts

    targets = scenario.targets
    exposures = tuple(sorted({e for t in targets for e in scenario.target_exposures(t)}))
    offered = np.array([[e in scenario.target_exposures(t) for t in targets] for e in exposures])
    observable = np.stack([observable_starts(sky, constraints, e) for e in exposures])
    return exposures, observable & offered[:, :, None]


def _run_rules(targets, done) -> tuple:
    """Return each target's rules for the rest of the run.

    Executed visits count against a star's visits in the run (not against its visits per
    night: the rule has one limit for every night).
    """
    from planner.allocation.rules import TargetRules

    kept = {t.id: 0 for t in targets}
    for visit in done:
        kept[visit.target] = kept.get(visit.target, 0) + 1
    return tuple(TargetRules(
        min_visits=max(0, t.min_visits - kept[t.id]),
        max_visits=None if t.max_visits is None else max(0, t.max_visits - kept[t.id]),
        max_per_night=t.max_visits_per_night,
        min_spacing_min=int(round(t.min_gap_h * 60.0)), weight=t.weight,
        windows_jd=tuple(t.windows), must_windows_jd=tuple(t.must_windows)) for t in targets)


def _excluded(scenario, sky, constraints, strict: bool) -> tuple:
    """Find the never-observable targets; with ``strict``, the first is a scenario error."""
    from planner.sky.observability import never_observable

    excluded = tuple(e for e in never_observable(sky, constraints, shortest_exposures(scenario))
                     if e is not None)
    if strict and excluded:
        first = excluded[0]
        more = f" ({len(excluded) - 1} more targets likewise)" if len(excluded) > 1 else ""
        raise ScenarioError(f"{scenario.path.name}: targets[{first.index}]: "
                            f"{first.sentence.rstrip('.')}{more}, or leave out --strict to plan "
                            "without it.")
    for e in excluded:
        log.info("left out %s: %s", e.target, e.reason)
    return excluded


def _curve_bits(args) -> np.ndarray:
    """One target's information curve (all options), NaN (not observable) as 0 bits."""
    from planner.information.curves import build_curve

    predictor, bjd, sigma, observable, exposures, times_jd, target = args
    curve = build_curve(predictor, bjd, sigma, observable, exposures, times_jd=times_jd,
                        target=target)
    return np.nan_to_num(curve.bits, nan=0.0)


def _bits(scenario, sky, instrument, predictors, exposures, observable, sigma, done,
          streams, jobs=None, saved=None) -> np.ndarray:
    """One-visit expected bits on the sky grid, given executed visits without data.

    The exact curves of the targets are independent and computed in ``jobs`` worker processes
    (None: every core), or taken from ``saved``. For a target with executed visits whose
    velocities are not yet in its posterior, the curve is scaled by the linear-Gaussian share
    of it those visits leave (:mod:`planner.information.pending`): measured on the demo, the
    exact Monte Carlo conditional curves took 240 s of a 270 s re-plan (docs/decisions.md).
    The share is calibrated on the exact Monte Carlo value at ``CALIBRATION_TIMES`` times per
    star (each star's stream of ``streams`` draws its outcomes).
    """
    from concurrent.futures import ProcessPoolExecutor

    from planner.information.gain import conditional_bits
    from planner.information.pending import calibrate_share, gaussian_share
    from planner.workflow.outputs import parse_utc

    bits = np.zeros(observable.shape)
    pending = {}
    for visit in done:
        if visit.status == VisitStatus.DONE:
            pending.setdefault(visit.target, []).append(visit)
    saved = saved or {}
    for s, target_bits in saved.items():
        bits[:, s] = np.where(observable[:, s], target_bits, 0.0)
    plain = [s for s in range(len(scenario.targets)) if s not in saved]
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
    exact = bits.copy()
    for s, target in enumerate(scenario.targets):
        if target.id not in pending:
            continue
        predictor = predictors[s]
        jitter2 = float(np.mean(predictor.jitter ** 2))
        rng = streams.star("conditional", target.id)
        set_pred, set_sigma = visit_predictions(scenario, sky, instrument, predictor, s,
                                                 pending[target.id], parse_utc)
        set_var = np.mean(set_sigma ** 2, axis=0)
        shares, factor = [], None
        for o, e in enumerate(exposures):
            cols = np.flatnonzero(observable[o, s])
            if cols.size == 0:
                continue
            mid = mid_exposure_columns(sky, e)[cols]
            predicted = predictor.velocities(sky.bjd_tdb[s, mid])
            noise = sigma[o, s, mid] ** 2 + jitter2
            share = gaussian_share(set_pred, set_var, predicted, noise)
            if factor is None:  # calibrated once per star, on its first option
                at = _calibration_columns(bits[o, s, cols])
                plain_at = bits[o, s, cols[at]]
                total = np.sqrt(sigma[o, s, mid[at]][None, :] ** 2
                                + predictor.jitter[:, None] ** 2)
                given = conditional_bits(set_pred, set_sigma, predicted[:, at], total, rng,
                                         CALIBRATION_OUTCOMES)
                exact_at = np.divide(given, plain_at, out=np.ones(at.size),
                                     where=plain_at > 1e-9)
                factor = (share[at], exact_at)
            shares.append((o, cols, calibrate_share(share, *factor)))
        for o, cols, share in shares:
            bits[o, s, cols] = bits[o, s, cols] * share
    return bits, exact


def _calibration_columns(bits: np.ndarray) -> np.ndarray:
    """Up to ``CALIBRATION_TIMES`` positions among ``bits``: the best, then lower quantiles."""
    order = np.argsort(-bits, kind="stable")
    ranks = np.unique((np.arange(CALIBRATION_TIMES) * order.size) // CALIBRATION_TIMES)
    picked = order[ranks]
    return np.sort(picked[bits[picked] > 1e-9]) if np.any(bits[picked] > 1e-9) else picked[:1]


def visit_predictions(scenario, sky, instrument, predictor, s, visits, parse_utc):
    """Predicted velocities and total noise of a target's visits (mid-exposure, nearest column)."""
    mids = np.array([0.5 * (parse_utc(v.start_utc) + parse_utc(v.end_utc)) for v in visits])
    cols = np.clip(np.searchsorted(sky.times_jd, mids), 0, sky.times_jd.size - 1)
    bjd = sky.bjd_tdb[s, cols] + (mids - sky.times_jd[cols])
    predicted = predictor.velocities(bjd)
    from planner.sky.exposure import rv_sigma


    airmass = np.array([0.5 * (v.airmass_start + v.airmass_end) for v in visits])
    noise = rv_sigma(instrument, scenario.targets[s].v_mag,
                     np.array([v.exposure_s for v in visits]), airmass)
    return predicted, np.sqrt(noise[None, :] ** 2 + predictor.jitter[:, None] ** 2)
