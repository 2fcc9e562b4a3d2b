"""The comparison: three verified plans, joint not below greedy on the exact score, compare.json."""

import json

import numpy as np
import pytest

from planner.allocation.compare import compare_strategies
from planner.allocation.surrogate import build_surrogate
from planner.allocation.verify import verify_plan
from planner.workflow.outputs import write_compare_json
from tests.benchmarks.instances import shared_sky_instance


@pytest.fixture(scope="module")
def comparison():
    inst = shared_sky_instance(10, 2, 5)
    p = inst.problem

    def verify(plan):
        return verify_plan(plan, p, site=inst.sky.site, nights=inst.sky.nights,
                           ra_deg=inst.ra_deg, dec_deg=inst.dec_deg,
                           constraints=inst.constraints, mount=inst.mount)

    return p, compare_strategies(p, build_surrogate(p, inst.predictors), inst.predictors,
                                 rng=np.random.default_rng(0), time_limit_s=10, workers=2,
                                 verify=verify)


def test_joint_not_below_greedy_and_all_verified(comparison):
    # The property: joint >= greedy on the exact score within the score's error
    # (3 combined standard errors), and every strategy's plan passes the independent check.
    problem, result = comparison
    rows = {r.strategy: r for r in result.rows}
    assert set(rows) == {"cadence", "greedy", "joint"}
    assert all(r.verified for r in result.rows)
    joint, greedy = rows["joint"], rows["greedy"]
    assert joint.total_bits >= greedy.total_bits - 3 * np.hypot(joint.stderr, greedy.stderr)
    assert joint.gap is not None and greedy.gap is None
    for r in result.rows:
        assert r.stars_observed == sum(v > 0 for v in result.per_target_visits[r.strategy])
        assert r.total_bits == pytest.approx(sum(result.per_target_bits[r.strategy]))
        dark_h = np.sum(problem.dark_jd[:, 1] - problem.dark_jd[:, 0]) * 24
        assert r.bits_per_dark_hour == pytest.approx(r.total_bits / dark_h)
        exposing = sum(v.exposure_s for v in result.plans[r.strategy].visits)
        assert r.idle_s == pytest.approx(dark_h * 3600 - exposing - r.slew_s)


def test_compare_json_has_the_required_fields(comparison, tmp_path):
    _, result = comparison
    path = write_compare_json(result, tmp_path / "compare.json")
    doc = json.loads(path.read_text())
    assert [r["strategy"] for r in doc["strategies"]] == ["cadence", "greedy", "joint"]
    for record in doc["strategies"]:
        assert {"strategy", "total_bits", "visits", "runtime_s", "gap"} <= set(record)
    assert list(tmp_path.iterdir()) == [path]  # no temporary file left behind
