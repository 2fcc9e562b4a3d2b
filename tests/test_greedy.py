"""Greedy strategy: its rule, its rules, its guarantee, and exact conditional gains."""

import numpy as np
import pytest

from planner.allocation.conflicts import Schedule
from planner.allocation.greedy import exact_gain, greedy_plan
from planner.allocation.joint import joint_plan
from planner.allocation.rules import TargetRules
from planner.allocation.surrogate import additive_surrogate, build_surrogate
from planner.information.predict import Predictor
from tests.benchmarks.instances import grid_instance


def _feasible(problem, chosen):
    schedule = Schedule(problem)
    for c in chosen:
        if not schedule.open[c]:
            return False
        schedule.add(c)
    return True


def test_first_pick_is_the_best_value_per_minute():
    # Definition of the greedy rule: largest gain per telescope minute (exposure + lead).
    rng = np.random.default_rng(5)
    p = grid_instance(6, 2, rng=rng, exposure_s=(600.0, 1200.0), keep_per_night=5,
                      overhead_s=60.0)
    s = additive_surrogate(p)
    plan = greedy_plan(p, s)
    ratio = s.unary / (p.duration + p.lead_min())
    assert ratio[plan.candidates].max() == pytest.approx(ratio.max())
    assert _feasible(p, plan.candidates)


def test_greedy_respects_visit_limits_and_spacing():
    rng = np.random.default_rng(6)
    rules = [TargetRules(max_visits=2, max_per_night=2, min_spacing_min=40) for _ in range(4)]
    p = grid_instance(4, 2, rng=rng, hours=4.0, step_min=10, rules=rules, keep_per_night=8)
    plan = greedy_plan(p, additive_surrogate(p))
    for s in range(p.n_targets):
        starts = np.sort(p.start[plan.candidates[p.target[plan.candidates] == s]])
        assert starts.size <= 2
        assert np.all(np.diff(starts) >= 40)
    assert _feasible(p, plan.candidates)


def test_greedy_within_one_minus_one_over_e_when_only_counts_bind():
    # Nemhauser, Wolsey and Fisher (1978): greedy on a monotone submodular function under a
    # cardinality limit reaches at least (1 - 1/e) of the optimum. Here time never binds (one
    # long night, short exposures, few visits allowed), so only max_visits limits the plan.
    rng = np.random.default_rng(8)
    rules = [TargetRules(max_visits=2) for _ in range(3)]
    p = grid_instance(3, 4, rng=rng, hours=8.0, step_min=20, rules=rules, keep_per_night=3,
                      exposure_s=(60.0,))
    preds = [Predictor.from_parameters(
        period=np.full(400, 3.0) * (1 + 0.02 * rng.standard_normal(400)),
        semi_amplitude=np.full(400, 10.0), eccentricity=np.zeros(400),
        omega=np.zeros(400), time_periastron=2461000.0 + 0.3 * rng.standard_normal(400),
        offset=np.zeros(400), jitter=np.ones(400)) for _ in range(3)]
    s = build_surrogate(p, preds)
    greedy = greedy_plan(p, s)
    joint = joint_plan(p, s, time_limit_s=20, workers=1)
    assert joint.status == "OPTIMAL"
    assert greedy.objective >= (1 - 1 / np.e) * joint.objective


def test_exact_gains_stop_on_a_star_that_teaches_nothing():
    # All samples predict the same velocity: zero information (Lindley 1956), so the exact
    # conditional greedy never schedules the star, while the informative one is scheduled.
    rng = np.random.default_rng(9)
    p = grid_instance(2, 2, rng=rng, hours=2.0, step_min=10, keep_per_night=3)
    n = 300
    flat = Predictor.from_parameters(period=np.full(n, 5.0), semi_amplitude=np.full(n, 5.0),
                                     eccentricity=np.zeros(n), omega=np.zeros(n),
                                     time_periastron=np.full(n, 2461000.0),
                                     offset=np.zeros(n), jitter=np.ones(n))
    lively = Predictor.from_parameters(period=5.0 * (1 + 0.05 * rng.standard_normal(n)),
                                       semi_amplitude=np.full(n, 20.0), eccentricity=np.zeros(n),
                                       omega=np.zeros(n),
                                       time_periastron=2461000.0 + rng.standard_normal(n),
                                       offset=np.zeros(n), jitter=np.ones(n))
    bits = p.bits.copy()
    bits[p.target == 0] = 0.0
    p = type(p)(**{**p.__dict__, "bits": bits})
    plan = greedy_plan(p, additive_surrogate(p),
                       gain=exact_gain([flat, lively], rng=np.random.default_rng(1)))
    targets = {v.target for v in plan.visits}
    assert targets == {"T01"}
    assert len(plan.visits) == 2
