"""Regression: min_visits together with a must-do window, on every strategy (issue 13)."""

import numpy as np
import pytest

from planner.allocation.cadence import cadence_plan
from planner.allocation.greedy import greedy_plan
from planner.allocation.joint import joint_plan
from planner.allocation.plan import assemble_plan
from planner.allocation.problem import build_problem
from planner.allocation.rules import TargetRules
from planner.allocation.surrogate import additive_surrogate
from planner.errors import PlanError

T0 = 2461000.5
STEP = 5 / 1440.0


def _problem(min_visits=2):
    """Two 4-hour nights; 'needy' must visit twice, once in a must-do window at night 1's
    start, where its one-visit bits are lowest; 'rival' is worth more at every start."""
    per_night = 49
    times = np.concatenate([T0 + np.arange(per_night) * STEP,
                            T0 + 1 + np.arange(per_night) * STEP])
    n = times.size
    night = np.repeat([0, 1], per_night)
    dark = [[T0, T0 + 4 / 24], [T0 + 1, T0 + 1 + 4 / 24]]
    ramp = np.tile(np.linspace(0.2, 1.0, per_night), 2)  # needy is best late in the night
    bits = np.stack([ramp, np.full(n, 2.0)])[None]
    window = ((T0 + 0.2 / 24, T0 + 0.6 / 24),)  # 24 minutes after night 1's dark start
    rules = [TargetRules(min_visits=min_visits, max_per_night=1, must_windows_jd=window),
             TargetRules(max_per_night=3, min_spacing_min=30)]
    return build_problem(
        times_jd=times, night_index=night, dark_jd=dark, night_dates=["2027-01-01", "2027-01-02"],
        target_names=["needy", "rival"], rules=rules, exposure_s=[600.0],
        observable=np.ones((1, 2, n), bool), bits=bits, sigma=np.ones((1, 2, n)),
        airmass=np.full((2, n), 1.2), altitude_deg=np.full((2, n), 60.0),
        azimuth_deg=np.zeros((2, n)), bjd_tdb=np.broadcast_to(times, (2, n)).copy(),
        overhead_s=60.0, keep_per_night=40, thin_spacing_min=5)


def _meets_rules(problem, plan):
    """The rules from their definitions: visit count and the must-do window."""
    mine = [v for v in plan.visits if v.target == "needy"]
    (lo, hi), = problem.rules[0].must_windows_jd
    return (len(mine) >= problem.rules[0].min_visits
            and any(lo <= v.start_jd and v.end_jd <= hi for v in mine))


def test_joint_meets_min_visits_with_a_must_do_window():
    # Before: the first (reduced) stage kept only the best starts of each night, none inside
    # the window, and the solver answered "No plan meets every rule".
    problem = _problem()
    surrogate = additive_surrogate(problem)
    plan = joint_plan(problem, surrogate, time_limit_s=5, workers=1, focus_per_group=3)
    assert _meets_rules(problem, plan)


def test_a_reduced_first_stage_without_room_for_a_rule_falls_back_to_the_whole_problem():
    # One night; needy's best three starts lie within 10 minutes of its peak, so a reduced
    # model of three starts per group cannot hold two visits an hour apart; the whole can. The
    # hint is an empty plan, so it adds no start of its own to the reduced model.
    times = T0 + np.arange(49) * STEP
    n = times.size
    peak = np.exp(-0.5 * ((np.arange(n) - 24) / 2.0) ** 2)
    problem = build_problem(
        times_jd=times, night_index=np.zeros(n, int), dark_jd=[[T0, T0 + 4 / 24]],
        night_dates=["2027-01-01"], target_names=["needy", "rival"],
        rules=[TargetRules(min_visits=2, max_per_night=2, min_spacing_min=60), TargetRules()],
        exposure_s=[600.0], observable=np.ones((1, 2, n), bool),
        bits=np.stack([0.1 + peak, np.full(n, 0.5)])[None], sigma=np.ones((1, 2, n)),
        airmass=np.full((2, n), 1.2), altitude_deg=np.full((2, n), 60.0),
        azimuth_deg=np.zeros((2, n)), bjd_tdb=np.broadcast_to(times, (2, n)).copy(),
        overhead_s=60.0, keep_per_night=40, thin_spacing_min=5)
    surrogate = additive_surrogate(problem)
    empty = assemble_plan(problem, [], strategy="greedy", objective=0.0)
    plan = joint_plan(problem, surrogate, time_limit_s=5, workers=1, focus_per_group=3,
                      hint=empty)
    starts = sorted(v.start_jd for v in plan.visits if v.target == "needy")
    assert len(starts) == 2 and (starts[1] - starts[0]) * 1440.0 >= 60 - 1e-6


def test_greedy_and_cadence_serve_the_must_do_window():
    # Before: greedy spent needy's night-1 visit at its best start (late), and the nightly
    # maximum then closed the window.
    problem = _problem()
    surrogate = additive_surrogate(problem)
    assert _meets_rules(problem, greedy_plan(problem, surrogate))
    assert _meets_rules(problem, cadence_plan(problem, surrogate))


def test_a_rule_no_plan_can_meet_names_its_target_and_rule():
    # Three visits at one a night over two nights cannot be.
    problem = _problem(min_visits=3)
    surrogate = additive_surrogate(problem)
    with pytest.raises(PlanError, match=r"target 'needy': its min_visits 3 with 1 must-do window"
                                        r" cannot be met .* max_visits_per_night 1"):
        joint_plan(problem, surrogate, time_limit_s=5, workers=1)


@pytest.mark.slow
def test_the_reported_northern_scenario_plans_with_every_strategy(tmp_path):
    # The case as reported: five northern stars, one with min_visits: 2 and a must-do window.
    # Before, joint refused it ("No plan meets every rule") and greedy and cadence missed the
    # window; every strategy's plan must now pass the independent feasibility check.
    from pathlib import Path

    from planner.workflow import pipeline

    scenario = pipeline.load(Path(__file__).parent / "data" / "north" / "north.yaml")
    posteriors = pipeline.fit_posteriors(scenario, tmp_path / "cache", jobs=1)
    run = pipeline.prepare(scenario, posteriors)
    for strategy in ("joint", "greedy", "cadence"):
        result = pipeline.make_plan(run, strategy)  # raises unless verified
        mine = [v for v in result.plan.visits if v.target == "Quidra-7"]
        (lo, hi), = scenario.target("Quidra-7").must_windows
        assert len(mine) >= 2
        assert any(lo <= v.start_jd and v.end_jd <= hi for v in mine)
