"""Re-planning: give up lost time, keep what was executed, fold in new velocities, plan the rest.

A re-plan starts from a plan file and a request:

* lost time, as whole nights (``--lost 2027-10-05``, the night's local evening date) or UTC
  intervals (``--lost 2027-10-06T02:00Z/2027-10-06T04:30Z``), added to whatever the plan file
  already lists as lost;
* executed visits, from a CSV of plan.csv rows (``--done``) and/or every planned visit that
  started before ``--now`` outside lost time; the past itself is closed;
* new velocities (``--rvs``, a CSV with a ``target`` column), folded into each star's posterior
  by :func:`planner.information.update.update_posterior` (reweighting, or a refit when too few
  samples
  carry the weight).

Executed visits keep their telescope time and their recorded expected bits. For a star whose
executed visits have no velocities yet, new visits are valued given those visits (their outcomes
unknown); once its velocities are folded in, the updated posterior already holds them. The new
plan is made, verified and scored like any other (:func:`planner.workflow.pipeline.make_plan`), and
the
differences from the old plan are listed in plain text.
"""

from __future__ import annotations

import csv
import dataclasses
import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from inference.data import separator_hint
from planner.errors import PlanError, ScenarioError
from planner.workflow.outputs import PlanFile, ScheduledVisit, VisitStatus, format_utc, parse_utc

__all__ = ["LATER_PER_GROUP", "ReplanRequest", "ReplanResult", "check_scenario_matches",
           "focus_candidates", "parse_request", "read_new_velocities", "recorded_scenario",
           "replan", "tonight_index", "update_sentence"]

log = logging.getLogger(__name__)

_MATCH_D = 61.0 / 86400.0  # a --done row matches a planned visit starting within a minute

#: At the telescope (``--now`` between a night's sunset and sunrise) the rest of tonight is
#: searched over every candidate visit, and each later night over the old plan's visits and
#: the best ``LATER_PER_GROUP`` starts per (star, night, exposure option); in daytime the
#: whole rest of the run is searched. Measured on the demo (docs/decisions.md): the re-plan at
#: 03:00 UTC of night 1 took 22.7 s with the whole search, under half a cached plan with this.
LATER_PER_GROUP = 3


@dataclass(frozen=True)
class ReplanRequest:
    """What happened since the plan was made.

    Attributes
    ----------
    lost_jd : tuple of (float, float)
        Lost time, JD UTC pairs (whole nights from sunset to sunrise), old and new.
    lost_labels : tuple of str
        The lost time as given, for the change list.
    done : tuple of ScheduledVisit
        Executed visits (status ``done``), in time order.
    now_jd : float or None
        The present, JD UTC; nothing may be planned before it (:func:`parse_request` says
        what it is when ``--now`` is not given).
    new_data : dict of str to inference.data.RVData
        New velocities per target.
    now_from_clock : bool
        True when ``now_jd`` is the time the command ran, not a ``--now``.
    """

    lost_jd: tuple
    lost_labels: tuple
    done: tuple
    now_jd: float | None
    new_data: dict
    now_from_clock: bool = False


@dataclass(frozen=True)
class ReplanResult:
    """A re-plan: the new plan and what changed.

    Attributes
    ----------
    plan_file : PlanFile
    changes : str
        Plain-text list of the changes from the old plan.
    plan : planner.allocation.plan.Plan
        The new visits only.
    run : planner.workflow.pipeline.PreparedRun
    updates : dict of str to planner.information.update.PosteriorUpdate
        Per target with new velocities.
    """

    plan_file: PlanFile
    changes: str
    plan: object
    run: object
    updates: dict


def recorded_scenario(old: PlanFile, plan_path: str | Path) -> Path:
    """Return the scenario file a plan file records, checked to exist.

    Parameters
    ----------
    old : PlanFile
        The plan read from ``plan_path``.
    plan_path : str or pathlib.Path
        Where the plan file is; a relative recorded path is taken relative to its folder.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    PlanError
        If the plan records no scenario path or the file is no longer there.
    """
    plan_path = Path(plan_path)
    how = f"give it as SCENARIO: nightbits replan SCENARIO --plan {plan_path} ..."
    recorded = (old.scenario or "").strip()
    if not recorded:
        raise PlanError(f"{plan_path} does not record the scenario file it was made from; {how}")
    path = Path(recorded).expanduser()
    if not path.is_absolute():
        path = plan_path.parent / path
    if not path.is_file():
        raise PlanError(f"{plan_path} was made from the scenario file {path}, which no longer "
                        f"exists; {how}")
    return path


def _site_differences(old: PlanFile, site) -> list[str]:
    recorded = old.site or {}
    wrong = []
    for key in ("latitude_deg", "longitude_deg", "elevation_m"):
        try:
            same = abs(float(recorded[key]) - float(getattr(site, key))) <= 1e-6
        except (KeyError, TypeError, ValueError):
            same = False
        if not same:
            wrong.append(f"{key} {recorded.get(key)} in the plan, {getattr(site, key)} here")
    for key in ("name", "timezone"):
        if recorded.get(key) != getattr(site, key):
            wrong.append(f"{key} {recorded.get(key)!r} in the plan, {getattr(site, key)!r} here")
    return wrong


def _names(ids, most: int = 4) -> str:
    ids = sorted(ids)
    shown = ", ".join(ids[:most])
    return shown if len(ids) <= most else f"{shown} and {len(ids) - most} more"


def check_scenario_matches(old: PlanFile, scenario, plan_path: str | Path) -> None:
    """Refuse a scenario whose targets or site are not those of the plan.

    Parameters
    ----------
    old : PlanFile
    scenario : planner.workflow.scenario.Scenario
    plan_path : str or pathlib.Path
        Where the plan file is, for the message.

    Raises
    ------
    PlanError
        If the target ids (as a set) or the site (name, position, time zone) differ.
    """
    where = f"{scenario.path.name} does not match {plan_path}"
    fix = f"give the scenario the plan was made from ({old.scenario or 'not recorded'})."
    plan_ids = set(old.target_bits) | {v.target for v in old.visits}
    ids = {t.id for t in scenario.targets}
    if plan_ids != ids:
        parts = []
        if plan_ids - ids:
            parts.append(f"the plan's targets {_names(plan_ids - ids)} are not in the scenario")
        if ids - plan_ids:
            parts.append(f"the scenario's targets {_names(ids - plan_ids)} are not in the plan")
        raise PlanError(f"{where}: {' and '.join(parts)}; {fix}")
    wrong = _site_differences(old, scenario.site)
    if wrong:
        raise PlanError(f"{where}: the site differs ({'; '.join(wrong)}); {fix}")


def _lost_items(old: PlanFile, lost) -> tuple[list, list]:
    from planner.workflow.moments import parse_moment

    nights = {n.date: n for n in old.nights}
    zone = (old.site or {}).get("timezone") or "UTC"
    spans, labels = [], []
    for item in lost:
        text = str(item).strip()
        if "/" in text:
            start_text, end_text = text.split("/", 1)
            a = parse_moment(start_text, zone, f"--lost {text}: the start")
            b = parse_moment(end_text, zone, f"--lost {text}: the end")
            if b <= a:
                raise PlanError(f"--lost {text}: the interval ends before it starts; give "
                                "START/END with the start first.")
            if not any(a < parse_utc(n.sunrise_utc) and b > parse_utc(n.sunset_utc)
                       for n in old.nights):
                raise PlanError(f"--lost {text}: the interval overlaps no night of this plan "
                                f"({old.nights[0].sunset_utc} to {old.nights[-1].sunrise_utc}, "
                                "UTC), so it would change nothing; check the date and the UTC "
                                "time.")
            spans.append((a, b))
            labels.append(f"{format_utc(a)} to {format_utc(b)}")
        elif text in nights:
            night = nights[text]
            spans.append((parse_utc(night.sunset_utc), parse_utc(night.sunrise_utc)))
            labels.append(f"the night of {text}")
        else:
            dates = ", ".join(nights)
            raise PlanError(f"--lost {text}: not a night of this plan ({dates}) nor an interval "
                            "START/END such as 2027-10-06T02:00Z/2027-10-06T04:30Z or "
                            "'2027-10-05 23:00 local/2027-10-06 01:30 local'.")
    for night in old.nights:  # what the plan file already gave up, and what is already past
        spans.extend((parse_utc(a), parse_utc(b)) for a, b in night.lost + night.past)
    return spans, labels


def _in_lost(visit: ScheduledVisit, spans) -> bool:
    a, b = parse_utc(visit.start_utc), parse_utc(visit.end_utc)
    return any(a < hi and b > lo for lo, hi in spans)


def _done_rows(path: Path, old: PlanFile) -> list[ScheduledVisit]:
    rows = _csv_rows(path, "--done")
    if rows and not {"target", "start_utc"} <= set(rows[0]):
        raise PlanError(f"--done {path}: needs the columns target and start_utc (copy the rows "
                        f"of plan.csv that were observed){separator_hint(rows[0])}.")
    done = []
    for line, row in enumerate(rows, start=2):
        t = parse_utc(row["start_utc"], f"--done {path} line {line}")
        match = [v for v in old.visits if v.target == row["target"]
                 and abs(parse_utc(v.start_utc) - t) <= _MATCH_D]
        if not match:
            raise PlanError(f"--done {path} line {line}: the plan has no visit of "
                            f"{row['target']!r} starting at {row['start_utc']}; copy the row "
                            "from plan.csv.")
        done.append(match[0])
    return done


def read_new_velocities(path: str | Path, scenario) -> dict:
    """Read new velocities per target from a CSV, an observing log or a list of velocities.

    Columns: ``target``, ``rv`` and ``rv_err`` [m/s], ``instrument`` (optional) and the time,
    either ``time`` (BJD_TDB) or ``mid_utc`` (the UTC instant of mid-exposure, ISO with ``Z``
    or an offset, or local to the site with ``local``), converted to BJD_TDB for the target
    (:func:`planner.sky.barycentric.bjd_tdb_from_utc`). Rows with an empty ``rv`` are
    exposures whose velocity is not reduced yet, and are skipped, so the same observing log
    can be given to ``--done`` (which reads ``target`` and ``start_utc``) and to ``--rvs``.

    Raises
    ------
    PlanError
        If the file is unreadable, lacks a column, holds no velocity, or names an unknown
        target.
    """
    from inference.data import RVData, check_bjd
    from planner.workflow.moments import parse_moment

    path = Path(path)
    rows = _csv_rows(path, "--rvs")
    columns = set(rows[0]) if rows else set()
    if not ({"target", "rv", "rv_err"} <= columns and columns & {"time", "mid_utc"}):
        raise PlanError(f"--rvs {path}: needs a header with the columns target, rv and rv_err "
                        "(m/s) and a time, either time (BJD_TDB) or mid_utc (UTC mid-exposure), "
                        f"and at least one row{separator_hint(rows[0] if rows else {})}.")
    zone = scenario.site.timezone
    groups: dict[str, list] = {}
    for line, row in enumerate(rows, start=2):
        if not (row.get("rv") or "").strip():
            continue  # an exposure without a velocity yet (an observing-log row)
        try:
            target = scenario.target(row["target"])
        except ScenarioError as exc:  # the file and line, then the scenario's did-you-mean
            raise PlanError(f"--rvs {path} line {line}: {str(exc).split(': ', 1)[-1]}") from None
        try:
            rv, err = float(row["rv"]), float(row["rv_err"])
            bjd = float(row["time"]) if (row.get("time") or "").strip() else None
        except (TypeError, ValueError):
            raise PlanError(f"--rvs {path} line {line}: time, rv and rv_err must be "
                            "numbers.") from None
        if bjd is None:
            if not (row.get("mid_utc") or "").strip():
                raise PlanError(f"--rvs {path} line {line}: give the velocity's time, as time "
                                "(BJD_TDB) or mid_utc (UTC mid-exposure).")
            mid = parse_moment(row["mid_utc"], zone, f"--rvs {path} line {line}: mid_utc")
            bjd = float(_bjd_tdb(scenario, target, mid))
        instrument = (row.get("instrument") or scenario.instrument.name).strip()
        groups.setdefault(target.id, []).append((bjd, rv, err, instrument))
    if not groups:
        raise PlanError(f"--rvs {path}: no row has a velocity (the rv column is empty "
                        "everywhere); fill in rv and rv_err of the reduced exposures.")
    data = {}
    for target, items in groups.items():
        time, rv, err, inst = zip(*items, strict=True)
        check_bjd(np.array(time), lambda i, t=target, n=groups[target]: (
            f"--rvs {path} ({t}, row {i + 1})"))
        data[target] = RVData.from_arrays(np.array(time), np.array(rv), np.array(err),
                                          np.array(inst, dtype=object),
                                          source=f"{path} ({target})")
    return data


def _csv_rows(path: Path, option: str) -> list:
    """Return the rows of a CSV given on the command line (UTF-8, a byte-order mark allowed)."""
    from inference.data import MAX_RV_FILE_BYTES, check_file_size
    from inference.errors import RVDataError

    try:
        check_file_size(path, MAX_RV_FILE_BYTES, f"{option} files",
                        "give only this run's visits or velocities")
    except RVDataError as exc:
        raise PlanError(f"{option} {exc}") from None
    try:
        with path.open(newline="", encoding="utf-8-sig") as handle:
            return list(csv.DictReader(handle))
    except OSError as exc:
        raise PlanError(f"{option} {path}: cannot be read ({exc.strerror or exc}).") from None
    except UnicodeDecodeError:
        raise PlanError(f"{option} {path}: is not UTF-8 text; save it as a plain UTF-8 CSV "
                        "file.") from None


#: A new velocity further than this many standard deviations from its posterior prediction
#: (the prediction's spread, the measurement error and the jitter added in quadrature) is
#: refused as a unit or zero-point mistake. A Gaussian tail past 20 sigma has a probability
#: below 1e-80 (scipy.stats.norm.sf(20) = 2.8e-89), so no real measurement of a model that
#: fits is refused.
OUTLIER_SIGMA = 20.0


def check_new_velocities(posteriors: dict, new_data: dict) -> None:
    """Refuse a new velocity that its target's posterior puts out of all reach.

    Raises
    ------
    PlanError
        Naming the file, the target, the time and how far off it is, for the first velocity
        more than :data:`OUTLIER_SIGMA` standard deviations from its prediction. Velocities of
        an instrument the posterior does not know are not checked (their offset is unknown).
    """
    from planner.information.predict import Predictor

    for target, data in new_data.items():
        posterior = posteriors[target]
        for name in data.instruments:
            if f"offset_{name}" not in posterior.names:
                continue
            rows = np.flatnonzero(data.instrument == name)
            predictor = Predictor.from_posterior(posterior, name)
            predicted, jitter = predictor.velocities(data.time[rows]), predictor.jitter
            centre = predicted.mean(axis=0)
            spread = np.sqrt(predicted.var(axis=0) + data.rv_err[rows] ** 2
                             + np.mean(jitter ** 2))
            z = np.abs(data.rv[rows] - centre) / spread
            if np.any(z > OUTLIER_SIGMA):
                k = int(np.argmax(z))
                raise PlanError(
                    f"--rvs {data.source}: the velocity {data.rv[rows][k]:g} m/s at BJD "
                    f"{data.time[rows][k]:.5f} is {z[k]:.0f} standard deviations from the "
                    f"{centre[k]:.1f} +- {spread[k]:.1f} m/s its orbit predicts; check its units "
                    "(m/s) and its zero point (the RV file's instrument offset), or leave the "
                    "row out.")


def _bjd_tdb(scenario, target, mid_jd: float) -> float:
    import astropy.units as u
    from astropy.coordinates import EarthLocation

    from planner.sky.barycentric import bjd_tdb_from_utc

    site = scenario.site
    location = EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg,
                                           site.elevation_m * u.m)
    return bjd_tdb_from_utc(location, target.ra_deg, target.dec_deg, [mid_jd])[0]


def parse_request(old: PlanFile, scenario, *, lost=(), done_file=None, rv_files=(),
                  now=None, clock_jd: float | None = None) -> ReplanRequest:
    """Turn the command's options into a :class:`ReplanRequest` (checked against the old plan).

    What "now" is: the ``now`` given (``--now``: UTC, an offset or the site's local time,
    :mod:`planner.workflow.moments`); else ``clock_jd``, the time the command runs (the CLI
    passes the system clock), when it falls after the run's first sunset; else there is no
    past. The plan's own ``now_utc`` (an earlier re-plan) is the earliest now allowed. Planned
    visits that started before now outside lost time count as executed, and nothing new starts
    before it; the past is not lost time.

    Raises
    ------
    PlanError
        If an option is malformed or does not fit the plan, if nothing is asked, or if the
        lost and past time leave no dark time to plan.
    """
    from planner.workflow.moments import parse_moment

    spans, labels = _lost_items(old, lost)
    zone = (old.site or {}).get("timezone") or "UTC"
    first_sunset = min(parse_utc(n.sunset_utc) for n in old.nights)
    now_jd = None if now is None else parse_moment(now, zone, "--now")
    if now_jd is not None and now_jd < first_sunset:
        raise PlanError(f"--now {now}: {format_utc(now_jd)} is before the run's first sunset "
                        f"({format_utc(first_sunset)}), so nothing can have been executed; "
                        "check the date, or leave out --now.")
    from_clock = now_jd is None and clock_jd is not None and clock_jd > first_sunset
    if from_clock:
        now_jd = float(clock_jd)
    if old.now_utc:
        before = parse_utc(old.now_utc)
        if now_jd is not None and now_jd < before - _MATCH_D and not from_clock:
            raise PlanError(f"--now {now}: the plan was already re-planned as of "
                            f"{old.now_utc}; give a later time.")
        now_jd = before if now_jd is None else max(now_jd, before)
    done = [v for v in old.visits if v.status != VisitStatus.PLANNED]
    if done_file:
        done += _done_rows(Path(done_file), old)
    if now_jd is not None:
        done += [v for v in old.visits if parse_utc(v.start_utc) < now_jd]
    unique = {(v.target, v.start_utc): v for v in done}
    kept = sorted((v for v in unique.values() if not _in_lost(v, spans)),
                  key=lambda v: v.start_utc)
    kept = tuple(dataclasses.replace(v, status=VisitStatus.DONE)
                 if v.status == VisitStatus.PLANNED else v for v in kept)
    new_data = {}
    for path in rv_files:
        for target, data in read_new_velocities(path, scenario).items():
            new_data[target] = data if target not in new_data else new_data[target].concat(data)
    if not (spans or kept or new_data or now_jd is not None):
        raise PlanError("nothing to re-plan: give lost time (--lost), executed visits (--done "
                        "or --now) or new velocities (--rvs).")
    from planner.workflow.pipeline import uncovered_d

    closed = list(spans) + ([] if now_jd is None else [(first_sunset, now_jd)])
    if not any(uncovered_d(parse_utc(n.dark_start_utc), parse_utc(n.dark_end_utc), closed) > 0
               for n in old.nights):
        clock = (f" (now is {format_utc(now_jd)}, the time of this command; give --now to "
                 "re-plan as of another time)") if from_clock else ""
        raise PlanError("nothing left to plan: every night of the run is lost or already past "
                        f"(--lost, --now){clock}, so no new plan was made and the old plan "
                        "stands.")
    return ReplanRequest(lost_jd=tuple(spans), lost_labels=tuple(labels), done=kept,
                         now_jd=now_jd, new_data=new_data, now_from_clock=from_clock)


def replan(scenario, posteriors: dict, old: PlanFile, request: ReplanRequest, *,
           strategy: str | None = None, time_limit_s: float | None = None,
           reuse=None, progress=None) -> ReplanResult:
    """Plan the rest of the run after lost time, executed visits and new velocities.

    Parameters
    ----------
    scenario : planner.workflow.scenario.Scenario
    posteriors : dict of str to Posterior
        The posteriors the old plan was made from (fitted on the scenario's RV files).
    old : PlanFile
    request : ReplanRequest
    strategy : str, optional
        Default: the old plan's strategy.
    reuse : dict, optional
        Curves saved with the old plan (:func:`planner.workflow.pipeline.load_curves`), reused for
        the
        targets they still describe.
    time_limit_s : float or planner.allocation.joint.SearchLimit, optional
        Solver limit: wall-clock seconds or a SearchLimit (default: the scenario's re-plan
        limit, :func:`planner.workflow.pipeline.search_limit` with ``replan=True``, shorter
        than the planning limit because observers re-plan at the telescope).
    progress : callable, optional
        ``progress(done, total, label)`` before each step (7 steps).

    Returns
    -------
    ReplanResult
    """
    from inference.data import read_rv_csv
    from planner.information.streams import Streams
    from planner.information.update import update_posterior
    from planner.workflow import pipeline

    check_new_velocities(posteriors, request.new_data)
    streams = Streams(scenario.solver.seed)
    report = progress or (lambda done, total, label: None)
    steps = 7
    report(0, steps, "new velocities" if request.new_data else "executed visits")
    posteriors, updates = dict(posteriors), {}
    for target_id, data in request.new_data.items():
        target = scenario.target(target_id)
        update = update_posterior(posteriors[target_id], read_rv_csv(target.rv_file), data,
                                  streams.star("update", target_id),
                                  settings=pipeline.sampler_settings(scenario))
        posteriors[target_id], updates[target_id] = update.posterior, update
    done = tuple(dataclasses.replace(v, status=VisitStatus.MEASURED) if v.target in request.new_data
                 else v for v in request.done)
    run = pipeline.prepare(scenario, posteriors, lost_jd=request.lost_jd, done=done,
                           strict=False, reuse=reuse, now_jd=request.now_jd,
                           progress=lambda done, total, label: report(1 + done, steps, label))
    limit = (pipeline.search_limit(scenario, replan=True) if time_limit_s is None
             else time_limit_s)
    pipeline.require_room(run)
    focus = focus_candidates(run, old, request.now_jd)
    notes = ()
    if focus is not None:
        notes = (f"at the telescope: the rest of tonight was searched over every candidate "
                 f"visit, later nights among the old plan's visits and the {LATER_PER_GROUP} "
                 "best starts per star, night and exposure; a daytime re-plan (--now between "
                 "nights) searches them all.",)
    searched = pipeline.search_limit(scenario, time_limit_s=limit) if not hasattr(
        limit, "deterministic") else limit
    report(5, steps, "solving (" + (f"work limit {searched.work:g}" if searched.deterministic
                                    else f"at most {searched.seconds:g} s") + ")")
    result = pipeline.make_plan(run, strategy or old.strategy, limit, notes=notes,
                                candidates=focus,
                                progress=lambda label: report(6, steps, label))
    report(steps, steps, "done")
    changes = describe_changes(old, result.plan_file, request, updates)
    changes += settings_note(old, result.plan_file)
    return ReplanResult(plan_file=result.plan_file, changes=changes, plan=result.plan, run=run,
                        updates=updates)


def tonight_index(nights, now_jd: float | None) -> int | None:
    """Index of the night whose sunset-to-sunrise span holds ``now_jd`` (None: daytime or none).

    Parameters
    ----------
    nights : sequence of planner.sky.site.Night
        The run's nights (true sunset and sunrise, JD UTC).
    now_jd : float or None
        The present, JD UTC.
    """
    if now_jd is None:
        return None
    for k, night in enumerate(nights):
        if night.sunset_jd <= now_jd < night.sunrise_jd:
            return k
    return None


def focus_candidates(run, old: PlanFile, now_jd: float | None,
                     per_group: int = LATER_PER_GROUP):
    """Candidate visits of the re-plan at the telescope, or None to search them all.

    Every candidate of tonight (the night holding ``now_jd``) is kept; of each later night, the
    candidates of the old plan's visits (same star and exposure, start within a minute) and the
    ``per_group`` best by the solver's objective per (star, night, exposure option).

    Returns
    -------
    ndarray of int or None
        Indices into ``run.problem``; None when ``now_jd`` is not inside a night.
    """
    tonight = tonight_index(run.nights, now_jd)
    if tonight is None:
        return None
    problem, surrogate = run.problem, run.surrogate
    keep = problem.night == tonight
    later = np.flatnonzero(problem.night > tonight)
    if later.size:
        group = ((problem.target[later] * problem.n_nights + problem.night[later])
                 * problem.exposure_s.size + problem.option[later])
        order = np.lexsort((-surrogate.unary[later], group))
        first = np.r_[0, np.flatnonzero(np.diff(group[order])) + 1]
        rank = np.arange(order.size) - np.repeat(first, np.diff(np.r_[first, order.size]))
        keep[later[order[rank < per_group]]] = True
    index = {name: s for s, name in enumerate(problem.target_names)}
    for visit in old.visits:
        if visit.status != VisitStatus.PLANNED or visit.target not in index:
            continue
        start = parse_utc(visit.start_utc)
        match = np.flatnonzero((problem.target == index[visit.target])
                               & (problem.night > tonight)
                               & (np.abs(problem.start_jd_grid - start) <= _MATCH_D)
                               & (problem.exposure_s[problem.option] == visit.exposure_s))
        keep[match] = True
    return np.flatnonzero(keep)


def update_sentence(target: str, n_new: int, update) -> str:
    """Say in plain words how new velocities changed a star's posterior and what it means.

    The effective sample size (Kish 1965) is the number of equally weighted samples the
    reweighted ones are worth; as a share of the samples it says how much of the old posterior
    the new velocities left standing.
    """
    share = update.ess_fraction
    shown = f"{share:.0%}" if share >= 0.01 else f"{share:.1%}"
    if update.method == "refit":
        return (f"new velocities for {target}: {n_new} folded in; they rule out most of its "
                f"earlier orbit samples (the rest are worth {shown} of them, effective samples), "
                "so its orbit was sampled again from all its velocities and its later visits "
                "are valued under the new fit.")
    return (f"new velocities for {target}: {n_new} folded in by reweighting its orbit samples; "
            f"they still stand for {shown} of the samples (effective samples), enough to value "
            "its later visits without a new fit.")


def describe_changes(old: PlanFile, new: PlanFile, request: ReplanRequest, updates) -> str:
    """List, in plain text, what the re-plan changed."""
    lines = [f"re-planned: {len(old.visits)} exposures and {old.total_bits:.2f} bits before, "
             f"{len(new.visits)} exposures and {new.total_bits:.2f} bits now."]
    if request.lost_labels:
        lines.append("lost: " + "; ".join(request.lost_labels) + ".")
    if request.now_jd is not None:
        source = " (the time of this command)" if request.now_from_clock else ""
        lines.append(f"now: {format_utc(request.now_jd)}{source}; planned visits before it "
                     "count as executed, nothing new starts before it.")
    if request.done:
        lines.append(f"executed and kept: {len(request.done)} exposures.")
    for target, update in updates.items():
        lines.append(update_sentence(target, len(request.new_data[target]), update))
    old_keys = {(v.target, v.start_utc) for v in old.visits}
    new_keys = {(v.target, v.start_utc) for v in new.visits}
    dropped = sorted(old_keys - new_keys, key=lambda k: k[1])
    added = sorted(new_keys - old_keys, key=lambda k: k[1])
    lines.append(f"dropped {len(dropped)} planned exposures, added {len(added)}.")
    width = max([len(t) for t in new.target_bits] + [6])
    header = f"  {'target':<{width}}  visits before -> now   bits before -> now"
    rows = []
    for target in new.target_bits:
        nb = sum(v.target == target for v in old.visits)
        na = sum(v.target == target for v in new.visits)
        bb, ba = old.target_bits.get(target, 0.0), new.target_bits[target]
        if nb != na or abs(bb - ba) > 0.005:
            rows.append(f"  {target:<{width}}  {nb:>6} -> {na:<6}      {bb:>6.2f} -> {ba:.2f}")
    import textwrap

    lines = [textwrap.fill(line, width=100, subsequent_indent="  ") for line in lines]
    if rows:
        lines += ["changed targets:", header, *rows]
    return "\n".join(lines) + "\n"


def settings_note(old: PlanFile, new: PlanFile) -> str:
    """Return a line naming what differs between the old and the new plan's settings and inputs.

    The limits are left out (a re-plan uses its own, shorter one on purpose), and so are the
    posteriors of targets with new velocities. Empty when nothing else differs.
    """
    from planner.workflow.provenance import other_settings_note

    return other_settings_note("the old plan", old.provenance, new.provenance,
                               skip=("work limit", "wall-clock limit [s]", "posteriors"))
