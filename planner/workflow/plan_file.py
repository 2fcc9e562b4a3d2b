"""Plan-file assembly: exact per-visit marginal bits and the plan file.

The plan file is :class:`planner.workflow.outputs.PlanFile`.
Every plan, whatever made it, is scored by the one exact score
(:func:`planner.allocation.score.score_plan`);
its visits get their marginal bits by the chain rule in time order, and the plan file carries
the exact pointing of every exposure at its start and end.
"""

from __future__ import annotations

import numpy as np

from planner.workflow.outputs import VisitStatus
from planner.workflow.prepared import PreparedRun, visit_predictions

__all__ = ["build_plan_file", "exact_marginals"]


def exact_marginals(run: PreparedRun, plan, n_outcomes: int = 2048):
    """Per-visit marginal bits (chain rule in time order) and per-target weighted joint bits.

    For each target, the visits ``v_1 .. v_k`` in time order get
    ``I(v_1..v_j) - I(v_1..v_{j-1})``, so they add up to the joint information of all its
    visits, ``I(v_1..v_k)`` [bits], which is taken from the one exact score
    (:func:`planner.allocation.score.score_plan`). Where executed visits without velocities precede
    them,
    the chain starts after those visits, so the new visits add up to ``I(new | executed)``.
    Values are multiplied by the target's weight. Each target's outcomes come from its own
    streams of the solver seed (:class:`planner.information.streams.Streams`), so the values
    are the same on every run, whatever the other targets' visits.

    Returns
    -------
    marginals : ndarray, shape (n_visits,)
        In the order of ``plan.visits`` [bits].
    target_bits : dict of str to float
        Weighted joint bits of the new visits per target (given the executed ones).
    """
    from planner.allocation.score import score_plan
    from planner.information.gain import joint_bits
    from planner.information.streams import Streams
    from planner.workflow.outputs import parse_utc

    problem, scenario = run.problem, run.scenario
    streams = Streams(scenario.solver.seed)
    score = score_plan(plan, problem, run.predictors, streams=streams, n_outcomes=n_outcomes)
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
        pending = [v for v in run.done if v.target == target.id and v.status == VisitStatus.DONE]
        if pending:
            p0, s0 = visit_predictions(scenario, run.sky, run.instrument, predictor, s,
                                        pending, parse_utc)
            pred, sig = np.hstack([p0, pred]), np.hstack([s0, sig])
        first, last = len(pending), pred.shape[1]
        rng = streams.star("marginals", target.id)
        prefix = [joint_bits(pred[:, :j], sig[:, :j], rng, n_outcomes).bits
                  for j in range(first, last + (1 if pending else 0))]
        if not pending:
            prefix.append(score.per_target_bits[s] / target.weight)
        gains = np.diff(prefix) * target.weight
        marginals[mine] = gains
        target_bits[target.id] = float(gains.sum())
    return marginals, target_bits


def _night_spans(run: PreparedRun, night, now_jd):
    """Lost and past spans of one night, clipped to its dark window (UTC text pairs).

    The past (``now_jd``, a re-plan at the telescope) is closed like lost time when planning,
    but it is not lost: what happened there is executed or idle.
    """
    from planner.workflow.outputs import format_utc

    a0, b0 = night.dark_start_jd, night.dark_end_jd
    past = () if now_jd is None or now_jd <= a0 else ((a0, min(now_jd, b0)),)
    lost = []
    for a, b in run.lost_jd:
        if now_jd is not None and b == now_jd and a < a0:
            continue  # the span re-planning closed as the past
        if a < b0 and b > a0:
            lost.append((max(a, a0), min(b, b0)))
    text = lambda spans: tuple((format_utc(a), format_utc(b)) for a, b in spans)  # noqa: E731
    return text(lost), text(past)


def _idle_by_night(run: PreparedRun, plan, idle_stretches) -> dict:
    """Idle stretches with their reasons per night, stretched to the true dark window.

    The plan uses each night's dark window shrunk to the whole-minute run grid; the minute or
    two at either edge is a window the planner cannot use, and joins the stretch next to it.
    """
    from planner.workflow.outputs import format_utc

    cap = 1 if plan.strategy == "cadence" else None
    gaps: dict = {}
    for gap in idle_stretches(run.problem, plan, max_per_night=cap):
        gaps.setdefault(gap.night, []).append([gap.start_jd, gap.end_jd, gap.reason])
    out = {}
    for true, grid in zip(run.nights, run.aligned, strict=True):
        mine = gaps.get(true.date, [])
        if grid.dark_start_jd > true.dark_start_jd:
            if mine and abs(mine[0][0] - grid.dark_start_jd) < 1e-9:
                mine[0][0] = true.dark_start_jd
            else:
                mine.insert(0, [true.dark_start_jd, grid.dark_start_jd, "window"])
        if grid.dark_end_jd < true.dark_end_jd:
            if mine and abs(mine[-1][1] - grid.dark_end_jd) < 1e-9:
                mine[-1][1] = true.dark_end_jd
            else:
                mine.append([grid.dark_end_jd, true.dark_end_jd, "window"])
        out[true.date] = [(format_utc(a), format_utc(b), why) for a, b, why in mine]
    return out


def build_plan_file(run: PreparedRun, plan, marginals, target_bits, total_bits, notes=(),
                    now_jd=None, provenance=None):
    """Turn a plan into the plan file, with the exact pointing at start and end.

    The record is :class:`planner.workflow.outputs.PlanFile`; each night carries its idle
    stretches with their reasons (:func:`planner.allocation.idle.idle_stretches`, on the planned
    part of the night) and, after a re-plan at ``now_jd``, the part already past;
    ``provenance`` is what reproduces it (:func:`planner.workflow.provenance.plan_provenance`).
    """
    from planner.allocation.idle import idle_stretches
    from planner.sky.tracks import pointing_at
    from planner.workflow.accounting import account_targets, left_out
    from planner.workflow.outputs import NightSummary, PlanFile, ScheduledVisit, format_utc

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
    idle = _idle_by_night(run, plan, idle_stretches)
    nights = []
    for n in run.nights:
        lost, past = _night_spans(run, n, now_jd)
        nights.append(NightSummary(
            date=n.date, sunset_utc=format_utc(n.sunset_jd),
            dark_start_utc=format_utc(n.dark_start_jd), dark_end_utc=format_utc(n.dark_end_jd),
            sunrise_utc=format_utc(n.sunrise_jd),
            moon_illumination=round(float(n.moon_illumination), 3),
            moon_up=tuple((format_utc(a), format_utc(b)) for a, b in n.moon_up),
            lost=lost, idle=tuple(idle.get(n.date, ())), past=past))
    nights = tuple(nights)
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
        objective_bits=round(float(plan.objective), 5), left_out=left_out(run),
        target_summary=account_targets(run, plan, marginals, target_bits),
        provenance=provenance, now_utc=None if now_jd is None else format_utc(now_jd))
