"""The hour-by-hour schedule: a plan file rendered as plain text an observer can follow.

Layout, at most 100 columns, no colour:

* a run header: title, strategy, site, limits and the safety caution;
* per night a header with the local evening date, sunset, the dark window (start and end),
  sunrise and the Moon (illuminated fraction and when it is up), every time local then UTC;
* one line per exposure in time order: local time the slew starts, local and UTC time the
  shutter opens (to the second), target, exposure, airmass at start and end, Moon separation,
  overheads before it (slew, settling, acquisition and the previous exposure's readout),
  marginal expected bits and the running total; every idle stretch over a minute and lost
  time as lines of their own, idle with its reason; a separator at every local hour;
* a total per night splitting its dark window into exposing, overheads and idle (and lost,
  and executed after a re-plan), the parts adding up to the dark window; a total for the run;
* the targets left out (never observable, each with its limit) right under the run header, and
  after the schedule a per-target summary: visits, nights, expected bits and the limit or rule
  that bound each star (:mod:`planner.workflow.accounting`).

Only the plan file is read, so a schedule prints the same from plan.json as from the planner.
"""

from __future__ import annotations

import datetime as _dt
from zoneinfo import ZoneInfo

import numpy as np

from planner.clock import datetime_from_jd, jd_from_datetime
from planner.workflow.outputs import PlanFile, ScheduledVisit, VisitStatus, parse_utc

__all__ = [
    "CAUTION",
    "WIDTH",
    "bound_sentence",
    "curves_summary",
    "fit_summary",
    "left_out_lines",
    "limit_words",
    "model_summary",
    "render_schedule",
    "target_summary_lines",
]

#: Widest line of the schedule [characters].
WIDTH = 100

#: The caution printed at the top of every schedule.
CAUTION = ("CAUTION: this schedule does not replace the observatory's own safety rules (sun "
           "avoidance, wind and humidity limits, instrument limits); they always take precedence.")

#: Idle stretches shorter than this are not shown as lines of their own [min].
MIN_IDLE_MIN = 1.0

_COLUMNS = (f"{'':1}{'slew':>8} {'open':>8} {'open UTC':>8}  {'target':<16} {'exp s':>5}  "
            f"{'airmass':>9}  {'moon':>4}  {'ovh s':>5}  {'bits':>7}  {'total':>8}")



def _moment(text: str) -> _dt.datetime:
    return datetime_from_jd(parse_utc(text))


def _hm(moment: _dt.datetime, zone: ZoneInfo) -> str:
    return moment.astimezone(zone).strftime("%H:%M")


def _both(text: str, zone: ZoneInfo) -> str:
    moment = _moment(text)
    return f"{_hm(moment, zone)} ({moment.strftime('%H:%M')} UTC)"


def _span(start: str, end: str, zone: ZoneInfo) -> str:
    a, b = _moment(start), _moment(end)
    return f"{_hm(a, zone)}-{_hm(b, zone)} ({a.strftime('%H:%M')}-{b.strftime('%H:%M')} UTC)"


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
           *_wrap("columns: local time the slew starts, local and UTC time the shutter opens, "
                  "exposure [s], airmass at start>end, Moon separation [deg], overheads before "
                  "the exposure [s] (slew, settling, acquisition and the previous exposure's "
                  "readout), marginal expected bits, running total; idle stretches over a minute "
                  "(with their reason) and lost time on lines of their own", "  "),
           *_wrap(CAUTION, "  "), "", *left_out_lines(plan.left_out)]
    by_night: dict[str, list[ScheduledVisit]] = {n.date: [] for n in plan.nights}
    for visit in plan.visits:
        by_night.setdefault(visit.night, []).append(visit)
    running = 0.0
    n_nights = len(plan.nights)
    for index, night in enumerate(plan.nights, start=1):
        visits = sorted(by_night.get(night.date, []), key=lambda v: parse_utc(v.start_utc))
        body, running = _night_body(night, visits, running, zone)
        date = _dt.date.fromisoformat(night.date)
        day = date.strftime("%a %Y-%m-%d")
        before = _dt.date.fromisoformat(plan.nights[index - 2].date) if index > 1 else None
        after = 1 if before is None else (date - before).days
        apart = f"{after} days after the previous night " if after > 1 else ""
        out.append(f"== night {index} of {n_nights}: evening of {day} {apart}"
                   f"{_past(plan, night, zone)}".ljust(WIDTH, "="))
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
    done = sum(v.status != VisitStatus.PLANNED for v in plan.visits)
    bound = f"; {bound_sentence(plan)}"
    summary = (f"run total: {len(plan.visits)} exposures over {n_nights} nights"
               f"{f' ({done} executed)' if done else ''}, {running:.2f} bits by the visit "
               f"marginals; exact joint score {plan.total_bits:.2f} bits{bound}")
    out.extend(_wrap(summary, "  "))
    if done:
        out.append("lines marked * were executed and are kept as they were observed.")
    for note in plan.notes:
        out.extend(_wrap(note, "  "))
    out.extend(target_summary_lines(plan))
    return "\n".join(line.rstrip() for line in out) + "\n"


def _hms(moment: _dt.datetime, zone: ZoneInfo | None = None) -> str:
    return (moment.astimezone(zone) if zone else moment).strftime("%H:%M:%S")


def _spans(pairs) -> list[tuple[float, float]]:
    return [(parse_utc(a), parse_utc(b)) for a, b in pairs]


def _account(night, visits) -> dict[str, float]:
    """Seconds of the dark window per part; the parts add up to the dark window exactly.

    Each instant counts once, in the first part that covers it: exposing, then overheads (the
    telescope time before each shutter opening), of executed visits apart from planned ones;
    then lost time; the rest is idle.
    """
    d0, d1 = parse_utc(night.dark_start_utc), parse_utc(night.dark_end_utc)
    layers: list[tuple[str, list]] = [(key, []) for key in (
        "executed exposing", "executed overheads", "exposing", "overheads")]
    named = dict(layers)
    for v in visits:
        start, end = parse_utc(v.start_utc), parse_utc(v.end_utc)
        done = "executed " if v.status != VisitStatus.PLANNED else ""
        named[done + "exposing"].append((start, end))
        named[done + "overheads"].append((start - v.slew_s / 86400.0, start))
    layers.append(("lost", _spans(night.lost)))
    cuts = sorted({d0, d1, *(t for _, spans in layers for span in spans for t in span
                             if d0 < t < d1)})
    out = {key: 0.0 for key, _ in layers} | {"idle": 0.0}
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        mid = 0.5 * (a + b)
        key = next((key for key, spans in layers if any(lo <= mid < hi for lo, hi in spans)),
                   "idle")
        out[key] += (b - a) * 86400.0
    return out


def _split_minutes(parts: dict[str, float]) -> dict[str, int]:
    """Whole minutes per part that add up to the rounded whole (largest remainders)."""
    total = int(round(sum(parts.values()) / 60.0))
    floors = {k: int(v // 60.0) for k, v in parts.items()}
    order = sorted(parts, key=lambda k: -(parts[k] / 60.0 - floors[k]))
    for k in order[:max(0, total - sum(floors.values()))]:
        floors[k] += 1
    return floors


def _hm_min(minutes: int) -> str:
    return f"{minutes // 60}h{minutes % 60:02d}m"


def _night_total(night, visits, bits: float) -> list[str]:
    """Return the night's total lines: count and bits, then the dark window's parts."""
    parts = _account(night, visits)
    minutes = _split_minutes(parts)
    planned = [v for v in visits if v.status == VisitStatus.PLANNED]
    executed = len(visits) - len(planned)
    plural = "s" if len(planned) != 1 else ""
    head = f"night total: {len(planned)} planned exposure{plural}"
    if executed:
        head += f", {executed} executed"
    split = (f"dark {_hm_min(sum(minutes.values()))} = exposing {_hm_min(minutes['exposing'])}"
             f" + overheads {_hm_min(minutes['overheads'])} + idle {_hm_min(minutes['idle'])}")
    if minutes["lost"]:
        split += f" + lost {_hm_min(minutes['lost'])}"
    if executed:
        split += (f" + executed {_hm_min(minutes['executed exposing'])} exposing and "
                  f"{_hm_min(minutes['executed overheads'])} overheads")
    return [f"{head}; {bits:.3f} bits", *("  " + line for line in _wrap(split, "  "))]


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
    lost = _spans(night.lost)
    past = _spans(night.past)
    reasons = {parse_utc(a): why for a, _, why in night.idle}
    cursor = parse_utc(night.dark_start_utc)
    last_hour = None
    bits = 0.0

    def separator(jd: float) -> None:
        nonlocal last_hour
        local = datetime_from_jd(jd).astimezone(zone)
        hour = local.replace(minute=0, second=0, microsecond=0)
        if last_hour is None or hour > last_hour:
            lines.append(f"{'':1}{'-' * 4} {hour.strftime('%H:00')} {'-' * 40}")
        last_hour = hour

    def hours(start: float, end: float) -> list[float]:
        """Local hour boundaries strictly inside ``(start, end)``."""
        out = []
        hour = datetime_from_jd(start).astimezone(zone).replace(minute=0, second=0, microsecond=0)
        while True:
            hour += _dt.timedelta(hours=1)
            jd = jd_from_datetime(hour)
            if jd >= end:
                return out
            out.append(jd)

    def stretch(a: float, b: float, label: str, why: str | None = None) -> None:
        separator(a)
        moment = datetime_from_jd(a)
        seconds = int(round((b - a) * 86400.0))
        length = f"{seconds // 3600}h{seconds % 3600 // 60:02d}m{seconds % 60:02d}s"
        tail = f": {why}" if why else ""
        lines.append(f"{'':1}{_hms(moment, zone):>8} {'':>8} {_hms(moment):>8}  {label} {length}"
                     f" until {_hms(datetime_from_jd(b), zone)}{tail}")

    def lost_or_idle(start: float, end: float) -> None:
        """Lost and idle lines from ``start`` to ``end`` (lost cut at every local hour)."""
        cuts = sorted({start, end, *(t for a, b in lost + past for t in (a, b) if start < t < end)})
        for a, b in zip(cuts[:-1], cuts[1:], strict=True):
            if any(la <= a and b <= lb for la, lb in lost):
                edges = [a, *hours(a, b), b]
                for x, y in zip(edges[:-1], edges[1:], strict=True):
                    stretch(x, y, "lost")
                continue
            if b - a <= MIN_IDLE_MIN / 1440.0:
                continue
            why = reasons.get(a)
            if why is None:
                why = ("not observed" if any(pa <= a and b <= pb for pa, pb in past)
                       else next((r for t, r in reasons.items() if a <= t < b), None))
            edges = [a, *hours(a, b), b]
            for x, y in zip(edges[:-1], edges[1:], strict=True):
                stretch(x, y, "idle", why)

    for visit in visits:
        start = parse_utc(visit.start_utc)
        slew_start = start - visit.slew_s / 86400.0
        lost_or_idle(cursor, slew_start)
        separator(slew_start)
        running += visit.expected_bits
        bits += visit.expected_bits
        mark = " " if visit.status == VisitStatus.PLANNED else "*"
        moment = datetime_from_jd(start)
        airmass = f"{visit.airmass_start:.2f}>{visit.airmass_end:.2f}"
        lines.append(f"{mark}{_hms(datetime_from_jd(slew_start), zone):>8} {_hms(moment, zone):>8} "
                     f"{_hms(moment):>8}  {visit.target[:16]:<16} {visit.exposure_s:>5.0f}  "
                     f"{airmass:>9}  {visit.moon_separation_deg:>4.0f}  {visit.slew_s:>5.0f}  "
                     f"{visit.expected_bits:>7.3f}  {running:>8.3f}")
        cursor = max(cursor, parse_utc(visit.end_utc))
    lost_or_idle(cursor, parse_utc(night.dark_end_utc))
    lines.append("-" * len(_COLUMNS))
    lines.extend(_night_total(night, visits, bits))
    return lines, running


def _percentiles(values, digits=3):
    lo, mid, hi = np.percentile(values, [16, 50, 84])
    return f"{lo:.{digits}g} {mid:.{digits}g} {hi:.{digits}g}"


_FIT_NOTE = (
    "period modes: where each planet's period lies, with its probability (modes under 5% not\n"
    "shown). ESS: how many independent draws the weighted sample is worth. k-hat: at most 0.7\n"
    "when the importance weights can be trusted. ln Z: the evidence (log marginal likelihood)\n"
    "of the model. ! marks a fit that fell short of these targets (see its warning).\n"
)


def fit_summary(scenario, posteriors: dict) -> str:
    """Tabulate the fits: modes of every planet's period, K and e percentiles, ESS, k-hat, ln Z."""
    head = (f"{'target':<16} {'RVs':>4} {'pl':>2} {'ESS':>6} {'k-hat':>5} {'ln Z':>9} "
            f"{'+-':>4}  {'planet':>6}  {'period modes [d] (share)':<36} "
            f"{'K [m/s] 16-50-84%':<18} {'e 16-50-84%':<15}")
    lines = [head]
    for target in scenario.targets:
        post = posteriors[target.id]
        d = post.diagnostics
        n_rv = len(_read(target.rv_file))
        flag = " " if getattr(d, "ok", True) else "!"
        star = (f"{target.id[:15] + flag:<16} {n_rv:>4} {post.model.n_planets:>2} "
                f"{d.ess:>6.0f} {d.k_hat:>5.2f} {d.log_evidence:>9.2f} "
                f"{d.log_evidence_se:>4.2f}")
        if not post.model.n_planets:
            lines.append(star)
        for k in range(1, post.model.n_planets + 1):
            modes = [m for m in d.modes if m["planet"] == k and m["share"] >= 0.05]
            text = " ".join(f"{m['period_mid']:.4g} ({m['share']:.0%})" for m in modes[:3])
            if len(modes) > 3:
                text += f" +{len(modes) - 3}"
            k_text = _percentiles(post.param(f"semi_amplitude_{k}"))
            e_text = _percentiles(post.param(f"eccentricity_{k}"), 2)
            lead = star if k == 1 else " " * len(star)
            lines.append(f"{lead}  {k:>6}  {text or 'no mode of 5%':<36} {k_text:<18} {e_text:<15}")
    return "\n".join(lines) + "\n\n" + _FIT_NOTE


def model_summary(scenario, fits: dict) -> str:
    """Tabulate P(0), P(1), ... planets for every target with ``planets: auto``.

    Returns an empty string when no target has ``planets: auto``.
    """
    auto = [t for t in scenario.targets if fits[t.id].probabilities is not None]
    if not auto:
        return ""
    top = max(t.max_planets for t in auto)
    head = f"{'target':<16} " + " ".join(f"{f'P({n})':>13}" for n in range(top + 1))
    lines = [head + "  used"]
    for target in auto:
        fit = fits[target.id]
        probs = fit.probabilities
        cells = []
        for n in range(top + 1):
            if n in probs.counts:
                k = probs.counts.index(n)
                cells.append(f"{probs.probabilities[k]:>6.3f} +-{probs.probabilities_se[k]:.3f}")
            else:
                cells.append(f"{'':>13}")
        lines.append(f"{target.id[:15]:<16} " + " ".join(cells)
                     + f"  {fit.chosen.model.n_planets:>4}")
    return "\n".join(lines) + "\n\n" + _MODEL_NOTE


_MODEL_NOTE = (
    "P(n): posterior probability that the star has n planets, from the evidences of the fits\n"
    "with 0..max_planets planets and the prior over models (model_prior; default equal), with\n"
    "its Monte Carlo standard error. used: the number of planets of the fit shown above and\n"
    "used by the later stages (the most probable).\n"
)


def _read(path):
    from inference.data import read_rv_csv

    return read_rv_csv(path)


def curves_summary(run, targets=None) -> str:
    """Tabulate the best one-visit bits per target and night, and the local time of each.

    A night on which the target cannot be observed shows the limit that keeps it out
    (:func:`planner.sky.observability.blocking_limits`): ``no: Moon``, ``no: airmass``.
    """
    from planner.sky.observability import blocking_limits
    from planner.workflow.prepared import shortest_exposures

    blocked = blocking_limits(run.sky, run.constraints, shortest_exposures(run.scenario),
                              per_night=True)
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
                why = limit_words(blocked[s, k]) if blocked[s, k] else "no start"
                cells.append(f" {'no: ' + why:>13}"[:14])
                continue
            c = cols[np.argmax(best[cols])]
            moment = _hm(datetime_from_jd(run.sky.times_jd[c]), zone)
            cells.append(f" {best[c]:>6.3f}@{moment}")
        lines.append(f"{target.id[:16]:<16}" + "".join(cells))
    lines.extend(_wrap("no: LIMIT - no exposure can start that night; LIMIT keeps the target out "
                       "(altitude, airmass, Moon, its window, or dark time left after blackouts "
                       "and lost time; a+b: either relaxed alone would let it in).", "  "))
    return "\n".join(lines) + "\n"


# ---- every star accounted for: targets left out and the per-target summary -------------------


def limit_words(limit: str) -> str:
    """Words for a limit key of :data:`planner.sky.observability.LIMIT_WORDS` (``a+b`` too)."""
    from planner.sky.observability import LIMIT_WORDS

    return "+".join(LIMIT_WORDS.get(key, key) for key in limit.split("+"))


def _hang(prefix: str, text: str) -> list[str]:
    """``text`` wrapped to :data:`WIDTH` after ``prefix``, later lines indented to match."""
    import textwrap

    return textwrap.wrap(text, WIDTH, initial_indent=prefix,
                         subsequent_indent=" " * len(prefix), break_on_hyphens=False)


def left_out_lines(items) -> list[str]:
    """Return lines naming the targets left out, each with its limit (none left out: no lines).

    Parameters
    ----------
    items : sequence of planner.workflow.accounting.LeftOut
        ``PlanFile.left_out``, or :func:`planner.workflow.accounting.left_out` of a run.
    """
    if not items:
        return []
    n = len(items)
    lines = _wrap(f"left out: {n} target{'s' if n != 1 else ''} can never be observed in this "
                  "run; the plan goes on without them:", "  ")
    for item in items:
        lines.extend(_hang(f"  {item.target[:16]:<16} {limit_words(item.limit):<9} ",
                           item.reason))
    return lines + [""]


def target_summary_lines(plan: PlanFile) -> list[str]:
    """Return the per-target summary printed after the schedule (none in older plan files)."""
    if not plan.target_summary:
        return []
    lines = ["", "per-target summary: visits, nights, expected bits, and what bound each star",
             f"{'target':<16} {'visits':>6} {'nights':>6} {'bits':>8}  bound",
             "-" * WIDTH]
    for row in plan.target_summary:
        lines.extend(_hang(f"{row.target[:16]:<16} {row.visits:>6} {row.nights:>6} "
                           f"{row.expected_bits:>8.3f}  ", row.reason))
    if any(row.last_bits_per_min is not None for row in plan.target_summary):
        lines.extend(_wrap("bits/tel. min: expected bits per telescope minute. A star's next "
                           "visit is valued given its planned visits (the solver's surrogate), "
                           "over exposure plus the "
                           "mount's fixed overhead; the last visit taken is the plan's lowest "
                           "marginal bits per minute of exposure and slew. 'in time': the "
                           "visit is worth more than that, but its open times went to visits "
                           "worth more.", "  "))
        planned = [v for v in plan.visits
                   if v.status == VisitStatus.PLANNED and v.exposure_s + v.slew_s]
        if planned:
            last = min(planned, key=lambda v: v.expected_bits / (v.exposure_s + v.slew_s))
            zone = ZoneInfo(plan.site["timezone"])
            lines.extend(_wrap(f"the last visit taken: {last.target} at "
                               f"{_hm(_moment(last.start_utc), zone)} local on the night of "
                               f"{last.night}, {last.expected_bits:.4f} bits in "
                               f"{(last.exposure_s + last.slew_s) / 60.0:.1f} min.", "  "))
    return lines
