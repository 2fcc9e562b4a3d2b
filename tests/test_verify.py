"""Independent feasibility check: every strategy passes, every kind of violation is caught."""

import dataclasses

import numpy as np
import pytest

from planner.allocation.cadence import cadence_plan
from planner.allocation.greedy import greedy_plan
from planner.allocation.joint import joint_plan
from planner.allocation.surrogate import build_surrogate
from planner.allocation.verify import require_valid, verify_plan
from planner.errors import PlanError
from planner.sky.observability import Constraints
from tests.benchmarks.instances import shared_sky_instance


@pytest.fixture(scope="module")
def case():
    inst = shared_sky_instance(8, 2, 3)
    s = build_surrogate(inst.problem, inst.predictors)
    plans = {
        "greedy": greedy_plan(inst.problem, s),
        "cadence": cadence_plan(inst.problem, s),
        "joint": joint_plan(inst.problem, s, time_limit_s=10, workers=2, seed=0),
    }
    return inst, plans


def _check(inst, plan, constraints=None):
    return verify_plan(plan, inst.problem, site=inst.sky.site, nights=inst.sky.nights,
                       ra_deg=inst.ra_deg, dec_deg=inst.dec_deg,
                       constraints=constraints or inst.constraints, mount=inst.mount)


def _replace(plan, k, **changes):
    visits = list(plan.visits)
    visits[k] = dataclasses.replace(visits[k], **changes)
    return dataclasses.replace(plan, visits=tuple(visits))


def test_every_strategy_passes(case):
    # Positions recomputed with astropy's full transforms (planner.sky.tracks.pointing_at) at exact
    # times, slews with planner.sky.slew.slew_seconds: independent of the strategies' tables.
    inst, plans = case
    for plan in plans.values():
        result = _check(inst, plan)
        assert result.ok, result.problems
        assert result.n_checked == len(plan.visits) > 0


def test_violations_are_caught(case):
    inst, plans = case
    plan = plans["joint"]
    pairs = [k for k in range(1, len(plan.visits))
             if plan.visits[k].night == plan.visits[k - 1].night]
    assert len(pairs) >= 3
    k_rush, k_twice = pairs[0], pairs[-1]
    first = min(set(range(len(plan.visits))) - {k_rush, k_rush - 1, k_twice, k_twice - 1})
    v0 = plan.visits[first]
    night = next(n for n in inst.sky.nights if n.date == v0.night)
    length = v0.end_jd - v0.start_jd
    bad = _replace(plan, first, start_jd=night.dark_end_jd + 0.05,
                   end_jd=night.dark_end_jd + 0.05 + length)
    prev, nxt = plan.visits[k_rush - 1], plan.visits[k_rush]
    span = nxt.end_jd - nxt.start_jd
    bad = _replace(bad, k_rush, start_jd=prev.end_jd + 10 / 86400,
                   end_jd=prev.end_jd + 10 / 86400 + span)
    bad = _replace(bad, k_twice, target=plan.visits[k_twice - 1].target)
    problems = _check(inst, bad).problems
    assert any("dark window" in p for p in problems)
    assert any("slew and overhead" in p for p in problems)
    assert any("above its nightly maximum" in p for p in problems)
    with pytest.raises(PlanError, match="failed its feasibility check"):
        require_valid(_check(inst, bad))

    prev, nxt = plan.visits[k_rush - 1], plan.visits[k_rush]
    overlap = _replace(plan, k_rush, start_jd=prev.start_jd + 60 / 86400,
                       end_jd=prev.start_jd + 60 / 86400 + span)
    problems = _check(inst, overlap, Constraints(max_airmass=1.0001)).problems
    assert any("overlaps the previous" in p for p in problems)
    assert any("airmass limit" in p for p in problems)


def test_exact_sky_matches_pointing_at():
    # Reference: planner.sky.tracks.pointing_at (astropy, the Moon separation in the TETE frame,
    # itself
    # checked against the sky grid in tests/test_sky.py). The verifier takes the target and the
    # Moon both to AltAz in one pass; the two must give the same angles.
    from planner.allocation.verify import _exact_sky
    from planner.sky.site import Site
    from planner.sky.tracks import pointing_at

    site = Site(latitude_deg=-27.45, longitude_deg=-69.95, elevation_m=2400.0,
                timezone="America/Santiago")
    rng = np.random.default_rng(3)
    t = 2461683.6 + rng.uniform(0, 5, 200)
    ra, dec = rng.uniform(0, 360, 200), rng.uniform(-80, 40, 200)
    p = pointing_at(site, ra, dec, t)
    alt, az, sep, moon_alt, moon_ill = _exact_sky(site, ra, dec, t)
    np.testing.assert_allclose(alt, p.altitude_deg, atol=1e-6)
    np.testing.assert_allclose(np.cos(np.radians(az - p.azimuth_deg)), 1.0, atol=1e-10)
    np.testing.assert_allclose(sep, p.moon_separation_deg, atol=1e-4 / 3600)
    assert np.all((moon_ill >= 0) & (moon_ill <= 1)) and np.all(np.abs(moon_alt) <= 90)
    assert np.all(np.isnan(pointing_at(site, ra[:3], dec[:3], t[:3], moon=False)
                           .moon_separation_deg))


def _rules(problem, s, **changes):
    rules = list(problem.rules)
    rules[s] = dataclasses.replace(rules[s], **changes)
    return dataclasses.replace(problem, rules=tuple(rules))


def test_each_check_is_triggered_by_a_plan_built_to_break_it(case):
    # One plan, each limit or rule tightened until it breaks: the verifier must name each one.
    inst, plans = case
    plan = plans["joint"]
    site, nights = inst.sky.site, inst.sky.nights

    def problems(problem=inst.problem, site=site, constraints=inst.constraints):
        return verify_plan(plan, problem, site=site, nights=nights, ra_deg=inst.ra_deg,
                           dec_deg=inst.dec_deg, constraints=constraints,
                           mount=inst.mount).problems

    assert not problems()
    # Altitude: a ceiling of 0.1 deg, which every target of the plan stands above.
    assert any("altitude limit" in p for p in problems(site=dataclasses.replace(
        site, min_altitude_deg=0.0, max_altitude_deg=0.1)))
    # Moon: a separation of 180 deg can never be kept while the Moon is up.
    moon_up = [v for v in plan.visits
               if any(a <= v.start_jd <= b for n in nights for a, b in n.moon_up)]
    assert moon_up, "the instance needs a visit with the Moon up"
    moon = dataclasses.replace(inst.constraints, moon_table=((1.0, 180.0),))
    assert any("Moon limit" in p for p in problems(constraints=moon))
    # Blackout over the middle of one exposure.
    v = plan.visits[0]
    mid = 0.5 * (v.start_jd + v.end_jd)
    closed = dataclasses.replace(inst.constraints, blackouts=((mid, mid + 1e-3),))
    assert any("blackout or reserved" in p for p in problems(constraints=closed))
    # Visit counts, spacing and windows of the first visit's target.
    s = inst.problem.target_names.index(v.target)
    mine = sorted(w.start_jd for w in plan.visits if w.target == v.target)
    assert len(mine) >= 2, "the instance needs a target with two visits"
    text = problems(_rules(inst.problem, s, min_visits=len(mine) + 1,
                           max_visits=len(mine) + 1))
    assert any("below its minimum" in p for p in text)
    text = problems(_rules(inst.problem, s, max_visits=len(mine) - 1))
    assert any("above its maximum" in p for p in text)
    spacing_min = int(np.ceil((mine[1] - mine[0]) * 1440.0)) + 1
    assert any("closer than" in p for p in problems(_rules(inst.problem, s,
                                                           min_spacing_min=spacing_min)))
    outside = ((v.end_jd + 0.01, v.end_jd + 0.02),)
    assert any("outside the target's fixed windows" in p
               for p in problems(_rules(inst.problem, s, windows_jd=outside)))
    text = [p for p in problems(_rules(inst.problem, s, must_windows_jd=outside))
            if "must-do window" in p]
    assert text
    # The user wrote UTC times: the message gives UTC and local times, never a Julian date.
    assert "UTC" in text[0] and "local" in text[0] and "JD" not in text[0]
