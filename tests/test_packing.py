"""Packing: exposures back to back to the second, against brute force with continuous starts."""

import itertools
import math

import numpy as np
import pytest

from planner.allocation.greedy import greedy_plan
from planner.allocation.idle import idle_stretches
from planner.allocation.joint import joint_plan
from planner.allocation.packing import (
    PACK_MARGIN_S,
    pack_plan,
    surrogate_refill_gain,
)
from planner.allocation.problem import build_problem
from planner.allocation.rules import TargetRules
from planner.allocation.surrogate import additive_surrogate, build_surrogate
from planner.allocation.verify import verify_plan
from tests.test_verify import case  # noqa: F401  (the shared instance and its three plans)

DAY_S = 86400.0
T0 = 2461000.5


def _azimuth_slew(rate_deg_s):
    """Motion-only slew model: azimuth difference over a rate (the altitude is fixed)."""
    return lambda alt1, az1, alt2, az2: np.abs(np.asarray(az2) - np.asarray(az1)) / rate_deg_s


def _night(dark_min, bits, az, overhead_s, rate, max_per_night=2, step_min=5):
    """One night of ``dark_min`` minutes, a 10-minute exposure, targets fixed in the sky."""
    n_t = len(bits)
    times = T0 + np.arange(0, dark_min + 1, step_min) / 1440.0
    n = times.size
    return build_problem(
        times_jd=times, night_index=np.zeros(n, int), dark_jd=[[T0, T0 + dark_min / 1440.0]],
        night_dates=["2027-01-01"], target_names=[f"star-{k}" for k in range(n_t)],
        rules=[TargetRules(max_visits=max_per_night, max_per_night=max_per_night)] * n_t,
        exposure_s=[600.0], observable=np.ones((1, n_t, n), bool),
        bits=np.broadcast_to(np.asarray(bits, float)[None, :, None], (1, n_t, n)).copy(),
        sigma=np.ones((1, n_t, n)), airmass=np.full((n_t, n), 1.2),
        altitude_deg=np.full((n_t, n), 60.0),
        azimuth_deg=np.asarray(az, float)[:, None] + np.zeros((n_t, n)),
        bjd_tdb=np.broadcast_to(times, (n_t, n)).copy(), slew=_azimuth_slew(rate),
        overhead_s=overhead_s, thin_spacing_min=1, keep_per_night=100)


def _continuous_optimum(bits, az, overhead_s, rate, dark_min, max_per_night):
    """Best total bits over every sequence of visits with continuous (to the second) starts.

    Reference: the definition, enumerated. Every sequence of targets (each at most
    ``max_per_night`` times) starts its first exposure at the dark start and each next one at
    the earliest whole second after the previous end plus the overhead, the slew (azimuth
    difference over the rate) and the packing margin; it is feasible when its last exposure
    ends inside the dark window.
    """
    best = 0.0
    pool = [k for k in range(len(bits)) for _ in range(max_per_night)]
    for length in range(1, len(pool) + 1):
        for seq in set(itertools.permutations(pool, length)):
            t, prev = 0.0, None
            for k in seq:
                if prev is not None:
                    t = math.ceil(t + overhead_s + abs(az[k] - az[prev]) / rate + PACK_MARGIN_S)
                t += 600.0
                prev = k
            if t <= dark_min * 60.0 + 1e-9:
                best = max(best, sum(bits[k] for k in seq))
    return best


@pytest.mark.parametrize("bits, az, overhead_s, rate, dark_min", [
    ((1.0, 0.8, 0.6), (0.0, 90.0, 180.0), 60.0, 2.0, 62),
    ((0.5, 0.9, 0.7), (0.0, 40.0, 200.0), 100.0, 1.0, 75),
    ((1.0, 1.0, 0.3), (10.0, 300.0, 150.0), 30.0, 4.0, 48),
])
def test_packed_plans_reach_the_continuous_optimum(bits, az, overhead_s, rate, dark_min):
    problem = _night(dark_min, bits, az, overhead_s, rate)
    surrogate = additive_surrogate(problem)
    best = _continuous_optimum(bits, az, overhead_s, rate, dark_min, 2)
    for plan in (greedy_plan(problem, surrogate),
                 joint_plan(problem, surrogate, time_limit_s=5, workers=1)):
        packed = pack_plan(problem, surrogate, plan,
                           gain=surrogate_refill_gain(problem, surrogate)).plan
        assert packed.objective == pytest.approx(best, abs=1e-3)
        assert plan.objective <= packed.objective + 1e-9
        visits = sorted(packed.visits, key=lambda v: v.start_jd)
        for a, b in zip(visits, visits[1:], strict=False):
            need = overhead_s + abs(az[int(b.target[-1])] - az[int(a.target[-1])]) / rate
            gap = (b.start_jd - a.end_jd) * DAY_S
            assert need <= gap <= need + PACK_MARGIN_S + 1.0  # back to back, to the second


def test_grid_starts_lose_a_visit_that_packing_recovers():
    # 62 minutes: on the 5-minute grid each 10-minute exposure with its 1-2 minute slew takes a
    # 15-minute slot (4 visits); back to back, 5 fit.
    problem = _night(62, (1.0, 0.8, 0.6), (0.0, 90.0, 180.0), 60.0, 2.0)
    surrogate = additive_surrogate(problem)
    plan = greedy_plan(problem, surrogate)
    assert len(plan.visits) == 4
    packing = pack_plan(problem, surrogate, plan, gain=surrogate_refill_gain(problem, surrogate))
    assert len(packing.plan.visits) == 5 and packing.added == 1
    assert packing.problem.n_candidates > problem.n_candidates  # moved visits appended
    # Without refill the visits only move earlier and the freed time ends the night idle.
    moved = pack_plan(problem, surrogate, plan, refill=False).plan
    assert [v.start_jd <= w.start_jd + 1e-9 for v, w in
            zip(moved.visits, plan.visits, strict=True)] == [True] * 4
    gaps = idle_stretches(packing.problem, moved)
    assert gaps[-1].reason == "waiting for a better moment"  # a visit would still fit there


def test_every_packed_plan_passes_the_independent_check(case):  # noqa: F811
    # The verifier recomputes every position with astropy at the exact (off-grid) times.
    inst, plans = case
    surrogate = build_surrogate(inst.problem, inst.predictors)  # as the plans were made
    for name, plan in plans.items():
        cadence = name == "cadence"
        packing = pack_plan(inst.problem, surrogate, plan,
                            gain=surrogate_refill_gain(inst.problem, surrogate),
                            options=[inst.problem.default_option] if cadence else None,
                            max_per_night=1 if cadence else None)
        result = verify_plan(packing.plan, packing.problem, site=inst.sky.site,
                             nights=inst.sky.nights, ra_deg=inst.ra_deg, dec_deg=inst.dec_deg,
                             constraints=inst.constraints, mount=inst.mount)
        assert result.ok, (name, result.problems)
        assert packing.plan.objective >= plan.objective - 1e-6
        if cadence:  # its own rule: one visit a target and night, its own option
            keys = [(v.target, v.night) for v in packing.plan.visits]
            assert len(keys) == len(set(keys))
            assert {v.option for v in packing.plan.visits} == {inst.problem.default_option}
