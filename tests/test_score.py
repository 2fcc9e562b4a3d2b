"""The exact plan score: closed forms of the linear-Gaussian case, weights, per-target sums."""

import numpy as np
import pytest

from planner.allocation.plan import assemble_plan
from planner.allocation.rules import TargetRules
from planner.allocation.score import score_plan
from tests.benchmarks.instances import grid_instance


class _Offsets:
    """A posterior whose only unknown is a constant offset ~ N(0, tau^2): Gaussian predictions."""

    def __init__(self, tau, n, rng, jitter=0.0):
        self.offset = rng.normal(0.0, tau, n)
        self.jitter = np.full(n, jitter)

    def velocities(self, bjd):
        return np.repeat(self.offset[:, None], np.size(bjd), axis=1)


def test_score_matches_the_linear_gaussian_closed_form():
    # Lindley (1956) / textbook Bayesian design: n visits of noise sigma measuring one
    # Gaussian offset of variance tau^2 give I = 0.5 log2(1 + n tau^2 / sigma^2) bits.
    rng = np.random.default_rng(21)
    rules = [TargetRules(weight=1.0, max_per_night=3), TargetRules(weight=2.0, max_per_night=3)]
    p = grid_instance(2, 1, rng=rng, hours=3.0, step_min=10, rules=rules, keep_per_night=6)
    # grid_instance's sigma is 1 m/s for its single option.
    chosen = [c for t in (0, 1) for c in np.flatnonzero(p.target == t)[:3]]
    plan = assemble_plan(p, chosen, strategy="hand", objective=0.0)
    tau = 3.0
    preds = [_Offsets(tau, 4000, rng), _Offsets(tau, 4000, rng)]
    score = score_plan(plan, p, preds, rng=np.random.default_rng(1), n_outcomes=2048)
    for t, w in ((0, 1.0), (1, 2.0)):
        n = score.per_target_visits[t]
        tau_hat = np.var(preds[t].offset)  # the samples' own variance is the prior here
        want = w * 0.5 * np.log2(1 + n * tau_hat / 1.0)
        # Tolerance: 0.02 bit per unit weight (finite sample mixture) plus 4 standard errors.
        assert score.per_target_bits[t] == pytest.approx(
            want, abs=0.02 * w + 4 * score.per_target_stderr[t])
    assert score.total_bits == pytest.approx(sum(score.per_target_bits))
    assert score.stderr == pytest.approx(np.hypot(*score.per_target_stderr))


def test_repeated_visits_are_not_additive():
    # Same closed form: three visits give 0.5 log2(1 + 3 tau^2) < 3 x 0.5 log2(1 + tau^2).
    rng = np.random.default_rng(22)
    p = grid_instance(1, 1, rng=rng, hours=3.0, step_min=10,
                      rules=[TargetRules(max_per_night=3)], keep_per_night=6)
    pred = [_Offsets(2.0, 3000, rng)]
    one = score_plan(assemble_plan(p, [0], strategy="x", objective=0.0), p, pred,
                     rng=np.random.default_rng(3))
    three = score_plan(assemble_plan(p, [0, 1, 2], strategy="x", objective=0.0), p, pred,
                       rng=np.random.default_rng(3))
    assert three.total_bits < 3 * one.total_bits - 1.0


def _three_target_plan():
    rng = np.random.default_rng(23)
    rules = [TargetRules(max_per_night=3) for _ in range(3)]
    p = grid_instance(3, 1, rng=rng, hours=3.0, step_min=10, rules=rules, keep_per_night=6)
    preds = [_Offsets(tau, 1500, rng) for tau in (1.0, 2.0, 3.0)]
    chosen = [c for t in range(3) for c in np.flatnonzero(p.target == t)[:2]]
    return p, preds, chosen


def test_with_streams_a_targets_score_depends_on_its_own_visits_only():
    from planner.information.streams import Streams

    p, preds, chosen = _three_target_plan()
    whole = score_plan(assemble_plan(p, chosen, strategy="x", objective=0.0), p, preds,
                       streams=Streams(5))
    again = score_plan(assemble_plan(p, chosen, strategy="x", objective=0.0), p, preds,
                       streams=Streams(5))
    assert whole == again  # the same plan, the same bits, to the last digit
    # Drop the first target's visits: the others keep their values exactly (their streams are
    # keyed by their names, not by what was drawn before them).
    rest = [c for c in chosen if p.target[c] != 0]
    part = score_plan(assemble_plan(p, rest, strategy="x", objective=0.0), p, preds,
                      streams=Streams(5))
    assert part.per_target_bits[1:] == whole.per_target_bits[1:]
    assert part.per_target_bits[0] == 0.0
    other = score_plan(assemble_plan(p, chosen, strategy="x", objective=0.0), p, preds,
                       streams=Streams(6))
    assert other.per_target_bits != whole.per_target_bits  # the seed does matter


def test_score_takes_exactly_one_source_of_randomness():
    from planner.information.streams import Streams

    p, preds, chosen = _three_target_plan()
    plan = assemble_plan(p, chosen, strategy="x", objective=0.0)
    with pytest.raises(ValueError, match="exactly one"):
        score_plan(plan, p, preds)
    with pytest.raises(ValueError, match="exactly one"):
        score_plan(plan, p, preds, rng=np.random.default_rng(0), streams=Streams(0))


def test_streams_are_numpys_spawned_children():
    # Reference: numpy's SeedSequence.spawn gives child i of a sequence the spawn key
    # parent.spawn_key + (i,); a grandchild (i, j) is therefore SeedSequence(seed,
    # spawn_key=(i, j)), which is how Streams builds a stage's star stream.
    import hashlib

    from planner.information.streams import STAGES, Streams, star_index

    spawned = np.random.SeedSequence(11).spawn(3)[2].spawn(2)[1]
    assert spawned.spawn_key == (2, 1)
    np.testing.assert_array_equal(spawned.generate_state(4),
                                  np.random.SeedSequence(11, spawn_key=(2, 1)).generate_state(4))
    ours = Streams(11).sequence("surrogate", "Gamur-7")
    want = int.from_bytes(hashlib.sha256(b"Gamur-7").digest()[:4], "little")
    assert star_index("Gamur-7") == want and ours.spawn_key == (STAGES["surrogate"], want)
    a = Streams(11).star("score", "Gamur-7").standard_normal(3)
    b = Streams(11).star("score", "Gamur-7").standard_normal(3)
    c = Streams(11).star("marginals", "Gamur-7").standard_normal(3)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)
