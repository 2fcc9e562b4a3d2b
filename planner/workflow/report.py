"""The hour-by-hour schedule: a plan file rendered as plain text an observer can follow.

Layout, at most 100 columns, no colour:

* a run header: title, strategy, site, limits and the safety caution;
* per night a header with the local evening date, sunset, the dark window (start and end),
  sunrise and the Moon (illuminated fraction and when it is up), every time local then UTC;
* one line per exposure in time order: local and UTC start, target, exposure, airmass at start
  and end, Moon separation, slew before it, marginal expected bits and the running total;
  idle gaps and lost time as lines of their own; a separator at every local hour;
* a total per night and for the run.

Only the plan file is read, so a schedule prints the same from plan.json as from the planner.
"""

from __future__ import annotations

import datetime as _dt
from zoneinfo import ZoneInfo

import numpy as np

from planner.workflow.outputs import PlanFile, ScheduledVisit, parse_utc

__all__ = ["CAUTION", "WIDTH", "bound_sentence", "curves_summary", "fit_summary",
           "render_schedule"]

#: Widest line of the schedule [characters].
WIDTH = 100

#: The caution printed at the top of every schedule.
CAUTION = ("CAUTION: this schedule does not replace the observatory's own safety rules (sun "
           "avoidance, wind and humidity limits, instrument limits); they always take precedence.")

#: Idle stretches shorter than this are not shown as lines of their own [min].
MIN_IDLE_MIN = 3.0

_COLUMNS = (f"{'':1}{'local':>5}  {'UTC':>5}  {'target':<16} {'exp s':>6}  {'airmass':>11}  "
            f"{'moon':>5}  {'slew s':>6}  {'bits':>7}  {'total':>8}")



_J2000 = _dt.datetime(2000, 1, 1, 12, tzinfo=_dt.timezone.utc)  # JD 2451545.0 (UTC scale)


def _moment_jd(jd: float) -> _dt.datetime:
    return _J2000 + _dt.timedelta(seconds=round((jd - 2451545.0) * 86400.0))


def _moment(text: str) -> _dt.datetime:
    return _moment_jd(parse_utc(text))


def _hm(moment: _dt.datetime, zone: ZoneInfo) -> str:
    return moment.astimezone(zone).strftime("%H:%M")


def _both(text: str, zone: ZoneInfo) -> str:
    moment = _moment(text)
    return f"{_hm(moment, zone)} ({moment.strftime('%H:%M')} UTC)"


def _span(start: str, end: str, zone: ZoneInfo) -> str:
    a, b = _moment(start), _moment(end)
    return f"{_hm(a, zone)}-{_hm(b, zone)} ({a.strftime('%H:%M')}-{b.strftime('%H:%M')} UTC)"


def _duration(seconds: float) -> str:
    minutes = int(round(seconds / 60.0))
    return f"{minutes // 60}h{minutes % 60:02d}m"


def _wrap(text: str, indent: str = "") -> list[str]:
    lines, line = [], ""
    for word in text.split():
        if line and len(line) + 1 + len(word) > WIDTH:
            lines.append(line)
            line = indent + word
        else:
            line = f"{line} {word}" if line else word
    return lines + [line] if line else lines


def _moon_rule(table) -> str:
    rows = [(float(a), float(b)) for a, b in table]
    if len(rows) == 1:
        return f"Moon at least {rows[0][1]:.0f} deg away while up"
    parts = [f"{b:.0f} deg up to {a:.0%} lit" for a, b in rows]
    return "Moon separation while up: " + ", ".join(parts)


def render_schedule(plan: PlanFile) -> str:
    """Render a plan as the hour-by-hour text schedule.

    Parameters
    ----------
    plan : PlanFile
        The plan (from the planner or read back from plan.json).

    Returns
    -------
    str
        The schedule, lines at most :data:`WIDTH` characters, ending with a newline.
    """
    zone = ZoneInfo(plan.site["timezone"])
    site = plan.site
    out = [f"nightbits schedule: {plan.run_name}"[:WIDTH],
           (f"strategy {plan.strategy}; times local ({site['timezone']}, "
            f"{_offsets(plan)}) and UTC")[:WIDTH],
           (f"site {site.get('name', '')}: latitude {site['latitude_deg']:.3f} deg, longitude "
            f"{site['longitude_deg']:.3f} deg, {site['elevation_m']:.0f} m")[:WIDTH],
           *_wrap(f"limits: airmass up to {plan.max_airmass:.2f}; dark while the Sun is below "
                  f"{plan.twilight_sun_altitude_deg:.0f} deg; {_moon_rule(plan.moon_table)}",
                  "  "),
           *_wrap("columns: exposure [s], airmass at start>end, Moon separation [deg], slew and "
                  "acquisition before the exposure [s], marginal expected bits, running total; "
                  "idle and lost time on lines of their own", "  "),
           *_wrap(CAUTION, "  "), ""]
    by_night: dict[str, list[ScheduledVisit]] = {n.date: [] for n in plan.nights}
    for visit in plan.visits:
        by_night.setdefault(visit.night, []).append(visit)
    running = 0.0
    n_nights = len(plan.nights)
    for index, night in enumerate(plan.nights, start=1):
        visits = sorted(by_night.get(night.date, []), key=lambda v: parse_utc(v.start_utc))
        body, running = _night_body(night, visits, running, zone)
        day = _dt.date.fromisoformat(night.date).strftime("%a %Y-%m-%d")
        out.append(f"== night {index} of {n_nights}: evening of {day} {_past(plan, night, zone)}"
                   .ljust(WIDTH, "="))
        out.append(f"sunset {_both(night.sunset_utc, zone)}   sunrise "
                   f"{_both(night.sunrise_utc, zone)}")
        out.append(f"dark {_span(night.dark_start_utc, night.dark_end_utc, zone)}")
        if night.moon_up:
            ups = ", ".join(_span(a, b, zone) for a, b in night.moon_up)
            moon = f"Moon {night.moon_illumination:.0%} lit, up {ups}"
        else:
            moon = f"Moon {night.moon_illumination:.0%} lit, below the horizon all dark time"
        out.extend(_wrap(moon, "     "))
        out.extend(body)
        out.append("")
    done = sum(v.status != "planned" for v in plan.visits)
    bound = f"; {bound_sentence(plan)}"
    summary = (f"run total: {len(plan.visits)} exposures over {n_nights} nights"
               f"{f' ({done} executed)' if done else ''}, {running:.2f} bits by the visit "
               f"marginals; exact joint score {plan.total_bits:.2f} bits{bound}")
    out.extend(_wrap(summary, "  "))
    if done:
        out.append("lines marked * were executed and are kept as they were observed.")
    for note in plan.notes:
        out.extend(_wrap(note, "  "))
    return "\n".join(line.rstrip() for line in out) + "\n"


def _offsets(plan: PlanFile) -> str:
    """Give the zone's UTC offset over the run: one, or each from the first night it holds."""
    from planner.workflow.moments import zone_offsets

    starts = [parse_utc(n.dark_start_utc) for n in plan.nights]
    offsets = zone_offsets(plan.site["timezone"], starts)
    if len(set(offsets)) <= 1:
        return offsets[0] if offsets else "UTC+00:00"
    parts = [offsets[0]]
    for k in range(1, len(offsets)):
        if offsets[k] != offsets[k - 1]:
            parts.append(f"{offsets[k]} from the night of {plan.nights[k].date}")
    return ", ".join(parts)


def _past(plan: PlanFile, night, zone: ZoneInfo) -> str:
    """Mark a night before the plan's present: executed, or executed up to now."""
    if not plan.now_utc:
        return ""
    now = parse_utc(plan.now_utc)
    if now >= parse_utc(night.dark_end_utc):
        return "(past: executed, not re-planned) "
    if now > parse_utc(night.dark_start_utc):
        moment = _moment(plan.now_utc)
        return f"(executed up to now, {_hm(moment, zone)} = {moment.strftime('%H:%M')} UTC) "
    return ""


def bound_sentence(plan: PlanFile) -> str:
    """Say in one sentence what the solver proved about how far the plan is from the best.

    The solver's bound is on its own objective (the redundancy-aware surrogate of the new
    visits), not on the exact score, so it is given as a share of that objective: never a
    number that could read as below the plan's value.
    """
    bound, objective = plan.bound_bits, plan.objective_bits
    if bound is None or objective is None:
        return ("the solver proved no bound on how much better another plan could be (it "
                "stopped before proving one, searched part of the candidates only, or does "
                "not search).")
    if objective <= 0:
        return "the solver's objective is zero for this plan, so no share can be given."
    gain = max(bound - objective, 0.0) / objective
    if gain < 0.0005:
        return "the solver proved this plan the best on its own objective."
    if gain > 1.0:
        return ("the solver's bound is too weak to say how close this plan is to the best "
                f"(it allows a plan {gain:.0%} better on its own objective).")
    return (f"the solver proved that no plan is more than {gain:.1%} better on its own "
            "objective (the surrogate it optimises).")


def _night_body(night, visits, running, zone):
    """Lines of one night between its header and its total, and the new running total."""
    lines = [_COLUMNS, "-" * len(_COLUMNS)]
    events = [(parse_utc(a), parse_utc(b), "lost") for a, b in night.lost]
    cursor = parse_utc(night.dark_start_utc)
    last_hour = None
    exposing = slewing = bits = 0.0

    def separator(jd: float) -> None:
        nonlocal last_hour
        local = _moment_jd(jd).astimezone(zone)
        hour = local.replace(minute=0, second=0, microsecond=0)
        if last_hour is None or hour > last_hour:
            lines.append(f"{'':1}{'-' * 4} {hour.strftime('%H:00')} {'-' * 40}")
        last_hour = hour

    def gap(start: float, end: float) -> None:
        """Idle and lost lines from ``start`` to ``end``, cut at every local hour."""
        cuts = {start, end}
        hour = _moment_jd(start).astimezone(zone).replace(minute=0, second=0, microsecond=0)
        while True:
            hour += _dt.timedelta(hours=1)
            jd = 2451545.0 + (hour - _J2000).total_seconds() / 86400.0
            if jd >= end:
                break
            cuts.add(jd)
        cuts.update(t for a, b, _ in events for t in (a, b) if start < t < end)
        edges = sorted(cuts)
        for a, b in zip(edges[:-1], edges[1:], strict=True):
            lost = any(la <= a and b <= lb for la, lb, _ in events)
            if not lost and b - a < MIN_IDLE_MIN / 1440.0:
                continue
            separator(a)
            moment = _moment_jd(a)
            lines.append(f"{'':1}{_hm(moment, zone):>5}  {moment.strftime('%H:%M'):>5}  "
                         f"{'lost' if lost else 'idle'} {_duration((b - a) * 86400.0)}")

    for visit in visits:
        start = parse_utc(visit.start_utc)
        gap(cursor, start - visit.slew_s / 86400.0)
        separator(start)
        running += visit.expected_bits
        bits += visit.expected_bits
        exposing += visit.exposure_s
        slewing += visit.slew_s
        mark = " " if visit.status == "planned" else "*"
        moment = _moment_jd(start)
        airmass = f"{visit.airmass_start:.2f}>{visit.airmass_end:.2f}"
        lines.append(f"{mark}{_hm(moment, zone):>5}  {moment.strftime('%H:%M'):>5}  "
                     f"{visit.target[:16]:<16} {visit.exposure_s:>6.0f}  {airmass:>11}  "
                     f"{visit.moon_separation_deg:>5.0f}  {visit.slew_s:>6.0f}  "
                     f"{visit.expected_bits:>7.3f}  {running:>8.3f}")
        cursor = max(cursor, parse_utc(visit.end_utc))
    gap(cursor, parse_utc(night.dark_end_utc))
    dark_s = (parse_utc(night.dark_end_utc) - parse_utc(night.dark_start_utc)) * 86400.0
    lost_s = sum((b - a) * 86400.0 for a, b, _ in events)
    idle_s = max(dark_s - exposing - slewing - lost_s, 0.0)
    lines.append("-" * len(_COLUMNS))
    plural = 's' if len(visits) != 1 else ''
    lines.append(f"night total: {len(visits)} exposure{plural}, exposing {_duration(exposing)}, "
                 f"slewing {_duration(slewing)}, idle {_duration(idle_s)}"
                 f"{f', lost {_duration(lost_s)}' if lost_s else ''}; {bits:.3f} bits")
    return lines, running


def fit_summary(scenario, posteriors: dict) -> str:
    """Tabulate the fitted posteriors: size, convergence, period and semi-amplitude."""
    lines = [f"{'target':<16} {'RVs':>4} {'pl':>2} {'samples':>7} {'conv':>4}  "
             f"{'period_1 [d] (16-50-84%)':<30} {'K_1 [m/s]':>14}"]
    for target in scenario.targets:
        post = posteriors[target.id]
        n_rv = int(getattr(post.diagnostics, "n_data", 0)) or len(_read(target.rv_file))
        conv = "yes" if getattr(post.diagnostics, "converged", False) else "no"
        period = k_text = ""
        if post.model.n_planets:
            lo, mid, hi = np.percentile(post.param("period_1"), [16, 50, 84])
            period = f"{lo:.4g} {mid:.4g} {hi:.4g}"
            k_text = f"{np.median(post.param('semi_amplitude_1')):.3g}"
        lines.append(f"{target.id[:16]:<16} {n_rv:>4} {post.model.n_planets:>2} "
                     f"{post.samples.shape[0]:>7} {conv:>4}  {period:<30} {k_text:>14}")
    return "\n".join(lines) + "\n"


def _read(path):
    from inference.data import read_rv_csv

    return read_rv_csv(path)


def curves_summary(run, targets=None) -> str:
    """Tabulate the best one-visit bits per target and night, and the local time of each."""
    zone = ZoneInfo(run.site.timezone)
    wanted = set(targets or [t.id for t in run.scenario.targets])
    head = f"{'target':<16}" + "".join(f" {n.date[5:]:>13}" for n in run.nights)
    lines = ["best expected bits of one more velocity per night (local time of the best start)",
             head]
    for s, target in enumerate(run.scenario.targets):
        if target.id not in wanted:
            continue
        cells = []
        best = run.bits[:, s].max(axis=0)
        for k in range(len(run.nights)):
            cols = np.flatnonzero((run.sky.night_index == k) & run.observable[:, s].any(axis=0))
            if cols.size == 0:
                cells.append(f" {'not up':>13}")
                continue
            c = cols[np.argmax(best[cols])]
            moment = _hm(_moment_jd(run.sky.times_jd[c]), zone)
            cells.append(f" {best[c]:>6.3f}@{moment}")
        lines.append(f"{target.id[:16]:<16}" + "".join(cells))
    return "\n".join(lines) + "\n"
