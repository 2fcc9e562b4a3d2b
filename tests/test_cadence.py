"""Cadence strategy: each target once a night, near its lowest airmass, by weight."""

import numpy as np

from planner.allocation.cadence import cadence_plan
from planner.allocation.rules import TargetRules
from planner.allocation.surrogate import additive_surrogate
from tests.benchmarks.instances import grid_instance


def test_once_per_night_default_option_and_best_airmass_first():
    # Common practice (not a published method): once per night, near the lowest airmass,
    # highest science weight first; the top target's pick is never blocked by anything.
    rng = np.random.default_rng(11)
    rules = [TargetRules(weight=w, max_per_night=3) for w in (1.0, 3.0, 2.0, 1.0, 0.5)]
    p = grid_instance(5, 3, rng=rng, hours=3.0, step_min=5, exposure_s=(600.0, 1200.0),
                      rules=rules, keep_per_night=4)
    plan = cadence_plan(p, additive_surrogate(p))
    nights = [(v.target, v.night) for v in plan.visits]
    assert len(nights) == len(set(nights))
    assert all(v.option == p.default_option for v in plan.visits)
    for n, date in enumerate(p.night_dates):
        mine = (p.target == 1) & (p.night == n) & (p.option == p.default_option)
        if not mine.any():
            continue
        chosen = [v.candidate for v in plan.visits if v.target == "T01" and v.night == date]
        assert p.airmass[chosen[0]] == p.airmass[mine].min()


def test_cadence_skips_what_no_longer_fits():
    # Ten targets all observable only in the same short window: at most one fits per slot.
    rng = np.random.default_rng(12)
    p = grid_instance(10, 1, rng=rng, hours=0.5, step_min=10, keep_per_night=4)
    plan = cadence_plan(p, additive_surrogate(p))
    ends = [(v.start_jd, v.end_jd) for v in plan.visits]
    assert len(plan.visits) < 10
    assert all(b[0] >= a[1] - 1e-9 for a, b in zip(ends, ends[1:], strict=False))
