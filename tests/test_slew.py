"""The slew and overhead model: closed forms, symmetry, cable wrap."""

import numpy as np
import pytest

from planner.errors import ScenarioError
from planner.sky.slew import Mount, axis_seconds, max_slew_seconds, slew_seconds


def _bare(**kwargs):
    """A mount without fixed overheads, so results are pure motion."""
    return Mount(settle_s=0, acquisition_s=0, readout_s=0, **kwargs)


def test_symmetric_and_zero_to_itself_apart_from_overheads(rng):
    mount = Mount(rate1_deg_s=2.0, rate2_deg_s=2.0, accel_deg_s2=0.5, az_wrap_deg=(-270.0, 270.0))
    alt = rng.uniform(20, 85, 50)
    az = rng.uniform(0, 360, 50)
    pairs = slew_seconds(mount, alt[:, None], az[:, None], alt[None, :], az[None, :])
    assert pairs.shape == (50, 50)
    np.testing.assert_allclose(pairs, pairs.T, rtol=0, atol=1e-9)
    np.testing.assert_allclose(np.diag(pairs), mount.overhead_s(), atol=1e-12)
    assert mount.overhead_s() == mount.readout_s + mount.settle_s + mount.acquisition_s
    motion = slew_seconds(
        mount, alt[:, None], az[:, None], alt[None, :], az[None, :], include_overhead=False
    )
    np.testing.assert_allclose(pairs - motion, mount.overhead_s())


def test_axis_profile_closed_forms():
    # Kinematics: trapezoid d / v + v / a above the ramp distance v^2 / a, triangle 2 sqrt(d / a)
    # below it, continuous at the ramp; no acceleration gives d / v.
    assert axis_seconds(90.0, 2.0, 0.5) == pytest.approx(45.0 + 4.0)
    assert axis_seconds(2.0, 2.0, 0.5) == pytest.approx(2 * np.sqrt(4.0))
    assert axis_seconds(8.0, 2.0, 0.5) == pytest.approx(8.0)
    assert axis_seconds(8.0 - 1e-9, 2.0, 0.5) == pytest.approx(8.0, abs=1e-6)
    assert axis_seconds(-30.0, 3.0, None) == pytest.approx(10.0)


def test_slower_axis_sets_the_time():
    mount = _bare(rate1_deg_s=3.0, rate2_deg_s=1.0)
    assert slew_seconds(mount, 30.0, 100.0, 60.0, 130.0) == pytest.approx(30.0)  # altitude: 30 s
    assert slew_seconds(mount, 30.0, 100.0, 35.0, 190.0) == pytest.approx(30.0)  # azimuth: 30 s
    # Without a wrap the short way round is taken: 350 -> 10 deg is 20 deg.
    assert slew_seconds(mount, 40.0, 350.0, 40.0, 10.0) == pytest.approx(20.0 / 3.0)


def test_cable_wrap_forces_the_long_way_round():
    # Wrap range (-180, 180): the limit is at azimuth 180 (south). From 170 to 190 deg the
    # short way (20 deg) crosses it, so the mount turns 340 deg the other way.
    free = _bare(rate1_deg_s=2.0, rate2_deg_s=2.0)
    wrapped = _bare(rate1_deg_s=2.0, rate2_deg_s=2.0, az_wrap_deg=(-180.0, 180.0))
    assert slew_seconds(free, 50.0, 170.0, 50.0, 190.0) == pytest.approx(10.0)
    assert slew_seconds(wrapped, 50.0, 170.0, 50.0, 190.0) == pytest.approx(170.0)
    # Away from the limit the wrap changes nothing.
    assert slew_seconds(wrapped, 50.0, 350.0, 50.0, 10.0) == pytest.approx(10.0)
    # A wide range (-270, 270) has its canonical window centred on north: limit at south.
    wide = _bare(rate1_deg_s=2.0, rate2_deg_s=2.0, az_wrap_deg=(-270.0, 270.0))
    assert slew_seconds(wide, 50.0, 175.0, 50.0, 185.0) > slew_seconds(
        free, 50.0, 175.0, 50.0, 185.0
    )


def test_equatorial_mount_moves_in_hour_angle_and_declination():
    mount = Mount(
        kind="equatorial",
        rate1_deg_s=1.0,
        rate2_deg_s=1.0,
        settle_s=5,
        acquisition_s=0,
        readout_s=0,
    )
    # Hour angle 170 -> -170 deg is 20 deg the short way; declination 10 deg.
    t = slew_seconds(
        mount, 0, 0, 0, 0, ha1_deg=170.0, dec1_deg=-20.0, ha2_deg=-170.0, dec2_deg=-10.0
    )
    assert t == pytest.approx(25.0)
    with pytest.raises(ScenarioError, match="equatorial mount needs"):
        slew_seconds(mount, 0, 0, 0, 0)


def test_bad_mounts_get_a_sentence():
    with pytest.raises(ScenarioError, match="kind"):
        Mount(kind="fork")
    with pytest.raises(ScenarioError, match="rate1_deg_s"):
        Mount(rate1_deg_s=0.0)
    with pytest.raises(ScenarioError, match="360"):
        Mount(az_wrap_deg=(-90.0, 180.0))
    with pytest.raises(ScenarioError, match="altaz"):
        Mount(kind="equatorial", az_wrap_deg=(-270.0, 270.0))


@pytest.mark.parametrize("wrap", [None, (-270.0, 270.0), (0.0, 450.0)])
@pytest.mark.parametrize("accel", [None, 0.8])
def test_largest_slew_over_pairs_matches_brute_force(wrap, accel):
    # Reference: the maximum of slew_seconds over the full pair matrix (brute force), on
    # random end and start positions, including azimuths straddling north and the wrap limit.
    rng = np.random.default_rng(11)
    mount = Mount(rate1_deg_s=2.0, rate2_deg_s=1.5, accel_deg_s2=accel, az_wrap_deg=wrap)
    for n1, n2 in ((1, 1), (7, 300), (250, 40)):
        alt1, alt2 = rng.uniform(20, 88, n1), rng.uniform(20, 88, n2)
        az1, az2 = rng.uniform(-720, 720, n1), rng.uniform(0, 360, n2)
        brute = slew_seconds(mount, alt1[:, None], az1[:, None], alt2[None, :], az2[None, :])
        assert max_slew_seconds(mount, alt1, az1, alt2, az2) == pytest.approx(brute.max(),
                                                                                rel=1e-12)
    # Clustered azimuths (a far pair is rare): the antipode search must still find it.
    az1 = np.array([10.0, 11.0, 195.5])
    az2 = np.array([12.0, 13.0, 14.0])
    brute = slew_seconds(mount, 45.0, az1[:, None], 45.0, az2[None, :], include_overhead=False)
    assert max_slew_seconds(mount, np.full(3, 45.0), az1, np.full(3, 45.0), az2,
                            include_overhead=False) == pytest.approx(brute.max(), rel=1e-12)


def test_problem_largest_gap_is_the_brute_force_over_pairs():
    # Reference: the same problem with the mount's model hidden behind a plain function, whose
    # largest gap conflicts.max_changeover_min finds pair by pair (all pairs of each night).
    from planner.allocation.conflicts import max_changeover_min
    from planner.allocation.problem import mount_slew
    from tests.benchmarks.instances import grid_instance

    mount = Mount(rate1_deg_s=0.5, rate2_deg_s=0.4, accel_deg_s2=0.3, az_wrap_deg=(-270, 270))
    model = mount_slew(mount)
    for seed in (1, 2):
        fast = grid_instance(14, 2, rng=np.random.default_rng(seed), slew=model, overhead_s=40.0)
        plain = grid_instance(14, 2, rng=np.random.default_rng(seed), overhead_s=40.0,
                              slew=lambda a1, z1, a2, z2: model(a1, z1, a2, z2))
        assert max_changeover_min(fast) == max_changeover_min(plain) > fast.min_changeover_min
