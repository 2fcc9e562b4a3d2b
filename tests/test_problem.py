"""Candidate visits: inside the limits, thinned with spacing, exact slews, clear errors."""

import math

import numpy as np
import pytest

from planner.allocation.problem import build_problem
from planner.allocation.rules import TargetRules
from planner.errors import PlanError
from planner.sky.slew import Mount, slew_seconds
from tests.benchmarks.instances import grid_instance


def _arrays(n_targets=2, n_times=30, step_min=2):
    times = 2461000.5 + np.arange(n_times) * step_min / 1440
    rng = np.random.default_rng(0)
    return dict(
        times_jd=times, night_index=np.zeros(n_times, int), dark_jd=[[times[0], times[-1]]],
        night_dates=["2027-01-01"], target_names=[f"T{k}" for k in range(n_targets)],
        rules=[TargetRules() for _ in range(n_targets)], exposure_s=[300.0],
        observable=np.ones((1, n_targets, n_times), bool),
        bits=rng.uniform(0, 2, (1, n_targets, n_times)), sigma=np.ones((1, n_targets, n_times)),
        airmass=np.full((n_targets, n_times), 1.3),
        altitude_deg=np.full((n_targets, n_times), 50.0),
        azimuth_deg=np.tile(np.linspace(0, 10, n_times), (n_targets, 1)) + 90 * np.arange(
            n_targets)[:, None],
        bjd_tdb=np.tile(times, (n_targets, 1)),
    )


def test_candidates_lie_inside_the_dark_window_and_the_mask():
    # Property from the definition of a candidate: start observable, exposure inside the night.
    rng = np.random.default_rng(1)
    p = grid_instance(5, 3, rng=rng, hours=3.0, step_min=5, exposure_s=(600.0, 900.0),
                      keep_per_night=4)
    assert p.n_candidates > 0
    assert np.all(p.start_jd_grid >= p.dark_jd[p.night, 0] - 1e-9)
    assert np.all(p.end_jd(np.arange(p.n_candidates)) <= p.dark_jd[p.night, 1] + 1e-9)
    assert np.all(p.duration * 60 >= p.exposure_s[p.option])
    # Starts keep their exact separations on the integer clock inside a night.
    same = p.night[:, None] == p.night[None, :]
    minutes = (p.start_jd_grid[:, None] - p.start_jd_grid[None, :]) * 1440
    assert np.allclose((p.start[:, None] - p.start[None, :])[same], minutes[same], atol=1e-6)


def test_thinning_keeps_spaced_starts_not_adjacent_ones():
    # The trap: the k best starts of a smooth curve are k adjacent starts.
    args = _arrays(n_targets=1, n_times=60)
    args["bits"] = np.exp(-0.5 * ((np.arange(60) - 30) / 10.0) ** 2)[None, None, :]
    args["airmass"] = np.full((1, 60), 1.0) + np.abs(np.arange(60) - 30)[None] * 0.01
    p = build_problem(**args, keep_per_night=4, thin_spacing_min=20)
    starts = np.sort(p.start)
    assert starts.size == 4  # the lowest-airmass start coincides with the best one
    assert np.all(np.diff(starts) >= 20)


def test_gaps_are_the_mount_slew_plus_overhead_rounded_up():
    # Reference: planner.sky.slew.slew_seconds (the physical model) plus overhead and margin.
    mount = Mount()
    args = _arrays()
    p = build_problem(**args, slew=lambda a1, z1, a2, z2: slew_seconds(
        mount, a1, z1, a2, z2, include_overhead=False), overhead_s=mount.overhead_s(),
        keep_per_night=3, thin_spacing_min=10, slew_margin_s=5.0)
    i, j = np.meshgrid(np.arange(p.n_candidates), np.arange(p.n_candidates), indexing="ij")
    expect = np.ceil((slew_seconds(mount, p.alt_end[i], p.az_end[i], p.alt_start[j],
                                   p.az_start[j]) + 5.0) / 60.0 - 1e-9)
    assert np.array_equal(p.changeover_min(i, j), expect.astype(int))
    assert p.min_changeover_min == math.ceil((mount.overhead_s() + 5.0) / 60.0)


def test_reserved_blocks_and_fixed_windows_remove_candidates():
    args = _arrays()
    t = args["times_jd"]
    block = (t[10], t[15])
    args["rules"] = [TargetRules(windows_jd=((t[0], t[12]),)), TargetRules()]
    p = build_problem(**args, reserved_jd=[block], overhead_s=60.0, keep_per_night=30,
                      thin_spacing_min=1)
    start, end = p.start_jd_grid, p.end_jd(np.arange(p.n_candidates))
    assert not np.any((start - 60 / 86400 < block[1]) & (end > block[0]))
    first = p.target == 0
    assert np.all(end[first] <= t[12] + 1e-9)


def test_bad_inputs_get_one_clear_sentence():
    args = _arrays()
    args["bits"] = args["bits"][:, :1]
    with pytest.raises(PlanError, match="bits has shape"):
        build_problem(**args)
    args = _arrays()
    args["rules"] = [TargetRules(min_visits=3, max_visits=1), TargetRules()]
    with pytest.raises(PlanError, match="max_visits .* is below min_visits"):
        build_problem(**args)
    args = _arrays()
    args["times_jd"] = args["times_jd"] + np.r_[0, np.full(29, 30 / 86400)]
    with pytest.raises(PlanError, match="whole number of minutes"):
        build_problem(**args)


def test_problem_arrays_are_read_only():
    # Problem is a frozen record: its arrays must refuse writes too (numpy's writeable flag),
    # since the slew-gap cache is keyed on the record.
    import dataclasses

    problem = build_problem(**_arrays())
    arrays = [f.name for f in dataclasses.fields(problem)
              if isinstance(getattr(problem, f.name), np.ndarray)]
    assert arrays
    for name in arrays:
        with pytest.raises(ValueError):
            getattr(problem, name)[...] = 0
