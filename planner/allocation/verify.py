"""Independent feasibility check of a plan, from the plan and the physical inputs alone.

Nothing here reads the strategies' candidate tables or the run grid: every position is
recomputed at the exact visit times with astropy's full transforms (the target and the Moon in
astropy's AltAz frame, the Moon's phase from astropy's ephemeris; slews from
:func:`planner.sky.tracks.pointing_at`) and
every slew with :func:`planner.sky.slew.slew_seconds`. A plan passes when

* each exposure lies inside its night's dark window, lasts its exposure time, and keeps its
  target inside the altitude, airmass and Moon limits at every sampled instant (start, end, and
  at most ``sample_s`` apart in between);
* no two exposures overlap, the time before each exposure covers the slew and overhead from the
  previous one of the night, and no exposure or overhead falls in a blackout or reserved block;
* the per-target rules hold (visit counts per run and per night, spacing, fixed and must-do
  windows).

Small tolerances absorb rounding only: ``time_tol_s`` for times and ``angle_tol_deg`` for
angles (the grid geometry the strategies used is itself exact to far better than that).
"""

from __future__ import annotations

from collections import Counter, defaultdict
from dataclasses import dataclass

import numpy as np

from planner.allocation.plan import Plan
from planner.allocation.problem import Problem
from planner.clock import datetime_from_jd
from planner.errors import PlanError

__all__ = ["Verification", "require_valid", "verify_plan", "when"]


@dataclass(frozen=True)
class Verification:
    """Outcome of :func:`verify_plan`.

    Attributes
    ----------
    ok : bool
        True when no problem was found.
    problems : tuple of str
        One sentence per violation, naming the visit (target, night, UTC and local time).
    n_checked : int
        Number of visits checked.
    """

    ok: bool
    problems: tuple[str, ...]
    n_checked: int


def _exact_sky(site, ra_deg, dec_deg, times_jd):
    """Target altitude and azimuth, Moon separation, Moon altitude and phase at exact times.

    One pass of astropy's full transforms (no refraction): the target and the topocentric Moon
    both go to AltAz, so the Moon is computed once and the separation is the angle between
    their two directions there. The phase uses the topocentric Moon and the geocentric Sun; the
    Moon's parallax (about 1 deg) changes the illuminated fraction by less than 0.01.

    Returns
    -------
    altitude, azimuth, moon_separation, moon_altitude : ndarray [deg]
    moon_illuminated : ndarray
    """
    import astropy.units as u
    from astropy.coordinates import AltAz, SkyCoord, get_body
    from astropy.time import Time

    from planner.sky import offline
    from planner.sky.ephemeris import illuminated_fraction

    with offline.quiet_astropy():
        t = Time(np.asarray(times_jd, float), format="jd", scale="utc")
        frame = AltAz(obstime=t, location=site.location(), pressure=0.0 * u.hPa)
        star = SkyCoord(np.asarray(ra_deg, float) * u.deg, np.asarray(dec_deg, float) * u.deg,
                        frame="icrs").transform_to(frame)
        moon = get_body("moon", t, site.location())
        moon_h = moon.transform_to(frame)
        sun_geo = get_body("sun", t).cartesian.xyz.to_value(u.au).T
        moon_geo = moon.cartesian.xyz.to_value(u.au).T
    sep = star.separation(moon_h).deg
    return (star.alt.deg, star.az.deg, sep, moon_h.alt.deg,
            illuminated_fraction(sun_geo, moon_geo))


def when(jd: float, timezone: str | None = None) -> str:
    """Return a JD (UTC) as ``2027-10-05 01:00:00 UTC (03:00:00 local)``, to the second.

    Parameters
    ----------
    jd : float
        JD, UTC scale [d].
    timezone : str, optional
        IANA zone of the site; without it only UTC is given.
    """
    from zoneinfo import ZoneInfo

    moment = datetime_from_jd(jd)
    text = f"{moment:%Y-%m-%d %H:%M:%S} UTC"
    if timezone:
        local = moment.astimezone(ZoneInfo(timezone))
        day = "" if local.date() == moment.date() else f"{local:%Y-%m-%d} "
        text += f" ({day}{local:%H:%M:%S} local)"
    return text


def _label(v, timezone: str | None = None) -> str:
    return f"visit of {v.target!r} on {v.night} at {when(v.start_jd, timezone)}"


def verify_plan(
    plan: Plan,
    problem: Problem,
    *,
    site,
    nights,
    ra_deg,
    dec_deg,
    constraints,
    mount=None,
    sample_s: float = 60.0,
    time_tol_s: float = 1.0,
    angle_tol_deg: float = 0.01,
) -> Verification:
    """Check a plan against the sky, the mount and the rules, from scratch.

    Parameters
    ----------
    plan : Plan
        The plan to check.
    problem : Problem
        Only its target names, rules, reserved blocks and exposure options are used.
    site : planner.sky.site.Site
        Observing site (altitude limits).
    nights : sequence of planner.sky.site.Night
        The run's nights (dark windows), e.g. from :func:`planner.sky.site.dark_windows`.
    ra_deg, dec_deg : array_like, shape (n_targets,)
        Target coordinates [deg], problem order.
    constraints : planner.sky.observability.Constraints
        Airmass, Moon and blackout limits.
    mount : planner.sky.slew.Mount or None
        Slew model; None checks only that exposures do not overlap.
    sample_s : float
        Largest spacing of the instants checked inside an exposure [s].
    time_tol_s, angle_tol_deg : float
        Rounding tolerances [s], [deg].

    Returns
    -------
    Verification
    """
    zone = getattr(site, "timezone", None)
    label = lambda v: _label(v, zone)  # noqa: E731
    index = {name: k for k, name in enumerate(problem.target_names)}
    night_of = {n.date: n for n in nights}
    visits = sorted(plan.visits, key=lambda v: v.start_jd)
    problems = [f"{label(v)}: the target is not in the problem." if v.target not in index
                else f"{label(v)}: the night is not in the run."
                for v in visits if v.target not in index or v.night not in night_of]
    if problems:
        return Verification(False, tuple(problems), len(visits))
    if not visits:  # an empty plan breaks no rule
        return Verification(True, (), 0)
    check = _Check(site, problem, constraints, mount, index, night_of, label,
                   np.asarray(ra_deg, float), np.asarray(dec_deg, float), time_tol_s,
                   angle_tol_deg)
    problems = (_exposure_problems(check, visits, sample_s) + _changeover_problems(check, visits)
                + _rule_problems(visits, problem, zone))
    return Verification(not problems, tuple(problems), len(visits))


@dataclass(frozen=True)
class _Check:
    """What every step of :func:`verify_plan` reads."""

    site: object
    problem: Problem
    constraints: object
    mount: object
    index: dict
    night_of: dict
    label: object
    ra: np.ndarray
    dec: np.ndarray
    time_tol_s: float
    angle_tol_deg: float


def _exposure_problems(check: _Check, visits, sample_s: float) -> list[str]:
    """Dark window, length, altitude, airmass, Moon and blocks over each whole exposure."""
    from planner.sky.airmass import airmass_kasten_young

    problem, constraints, label = check.problem, check.constraints, check.label
    angle_tol_deg, tol_d = check.angle_tol_deg, check.time_tol_s / 86400.0
    limits = constraints.airmass_limits(problem.n_targets)
    overhead = 0.0 if check.mount is None else check.mount.overhead_s()
    blocks = list(constraints.blackouts) + [tuple(b) for b in problem.reserved_jd]
    # Limits over each whole exposure, at exact instants.
    inst_t, inst_v = [], []
    for k, v in enumerate(visits):
        n = max(1, int(np.ceil((v.end_jd - v.start_jd) * 86400.0 / sample_s)))
        inst_t.append(np.linspace(v.start_jd, v.end_jd, n + 1))
        inst_v.append(np.full(n + 1, k))
    t_all, v_all = np.concatenate(inst_t), np.concatenate(inst_v)
    tgt = np.array([check.index[v.target] for v in visits])
    alt, _, moon_sep, moon_alt, moon_ill = _exact_sky(check.site, check.ra[tgt[v_all]],
                                                     check.dec[tgt[v_all]], t_all)
    need = constraints.min_moon_separation(moon_ill)
    bad_alt = (alt < check.site.min_altitude_deg - angle_tol_deg) | (
        alt > check.site.max_altitude_deg + angle_tol_deg)
    bad_am = airmass_kasten_young(alt) > limits[tgt[v_all]] * (1 + 1e-4)
    bad_moon = (moon_alt > angle_tol_deg) & (moon_sep < need - angle_tol_deg)
    problems = []
    for k, v in enumerate(visits):
        here = v_all == k
        night = check.night_of[v.night]
        if v.start_jd < night.dark_start_jd - tol_d or v.end_jd > night.dark_end_jd + tol_d:
            problems.append(f"{label(v)}: the exposure is not inside the night's dark window.")
        opt_ok = 0 <= v.option < problem.exposure_s.size
        want = problem.exposure_s[v.option] if opt_ok else np.nan
        if not (abs((v.end_jd - v.start_jd) * 86400.0 - v.exposure_s) <= check.time_tol_s
                and abs(v.exposure_s - want) <= 1e-6):
            problems.append(f"{label(v)}: its length does not match its exposure option.")
        for mask, what in ((bad_alt, "altitude"), (bad_am, "airmass"), (bad_moon, "Moon")):
            if np.any(mask[here]):
                problems.append(f"{label(v)}: the {what} limit is broken during the exposure.")
        for a, b in blocks:
            if v.start_jd - overhead / 86400.0 < b - tol_d and v.end_jd > a + tol_d:
                problems.append(f"{label(v)}: it overlaps a blackout or reserved block.")
    return problems


def _changeover_problems(check: _Check, visits) -> list[str]:
    """Order, overlaps and slews between neighbours of the same night."""
    from planner.sky.slew import slew_seconds
    from planner.sky.tracks import pointing_at

    pairs = [(a, b) for a, b in zip(visits, visits[1:], strict=False) if a.night == b.night]
    waits = np.array([(b.start_jd - a.end_jd) * 86400.0 for a, b in pairs])
    need_s = np.zeros(len(pairs))
    if check.mount is not None and pairs:
        first = np.array([check.index[a.target] for a, _ in pairs])
        second = np.array([check.index[b.target] for _, b in pairs])
        both = np.r_[first, second]
        ends = pointing_at(check.site, check.ra[both], check.dec[both],
                           [a.end_jd for a, _ in pairs] + [b.start_jd for _, b in pairs],
                           moon=False)
        m = len(pairs)
        need_s = slew_seconds(check.mount, ends.altitude_deg[:m], ends.azimuth_deg[:m],
                              ends.altitude_deg[m:], ends.azimuth_deg[m:])
    problems = []
    for (prev, nxt), wait, need in zip(pairs, waits, need_s, strict=True):
        if wait < -check.time_tol_s:
            problems.append(f"{check.label(nxt)}: it overlaps the previous exposure.")
        elif wait < need - check.time_tol_s:
            problems.append(
                f"{check.label(nxt)}: the time before it is {wait:.0f} s but the slew and "
                f"overhead from {prev.target!r} need {need:.0f} s."
            )
    return problems


def _rule_problems(visits, problem: Problem, timezone: str | None = None) -> list[str]:
    """Violations of the per-target rules."""
    out = []
    by_target = defaultdict(list)
    for v in visits:
        by_target[v.target].append(v)
    for name, rule in zip(problem.target_names, problem.rules, strict=True):
        mine = by_target.get(name, [])
        if len(mine) < rule.min_visits:
            out.append(f"target {name!r}: {len(mine)} visits, below its minimum {rule.min_visits}.")
        if rule.max_visits is not None and len(mine) > rule.max_visits:
            out.append(f"target {name!r}: {len(mine)} visits, above its maximum {rule.max_visits}.")
        for night, count in Counter(v.night for v in mine).items():
            if count > rule.max_per_night:
                out.append(f"target {name!r}: {count} visits on {night}, above its nightly "
                           f"maximum {rule.max_per_night}.")
        starts = sorted(v.start_jd for v in mine)
        close = np.flatnonzero(np.diff(starts) * 1440.0 < rule.min_spacing_min - 1e-6)
        if rule.min_spacing_min > 0 and close.size:
            k = int(close[0])
            out.append(f"target {name!r}: the visits at {when(starts[k], timezone)} and "
                       f"{when(starts[k + 1], timezone)} are closer than its min_gap_h "
                       f"({rule.min_spacing_min} min).")
        for v in mine:
            if rule.windows_jd and not any(a <= v.start_jd and v.end_jd <= b
                                           for a, b in rule.windows_jd):
                out.append(f"{_label(v, timezone)}: outside the target's fixed windows.")
        for a, b in rule.must_windows_jd:
            if not any(a <= v.start_jd and v.end_jd <= b for v in mine):
                out.append(f"target {name!r}: no visit inside its must-do window "
                           f"{when(a, timezone)} to {when(b, timezone)}.")
    return out


def require_valid(verification: Verification) -> None:
    """Raise :class:`PlanError` with the first problem if a plan failed verification."""
    if not verification.ok:
        more = len(verification.problems) - 1
        tail = f" ({more} more problems)" if more else ""
        raise PlanError(f"The plan failed its feasibility check: {verification.problems[0]}{tail}")
