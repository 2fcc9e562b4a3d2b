"""The observable-start mask: brute force on synthetic skies, exact times on a real one."""

import logging

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.errors import ScenarioError
from planner.sky.observability import (
    Constraints,
    binding_constraints,
    blocking_limits,
    instantaneous_ok,
    never_observable,
    observable_hours,
    observable_starts,
)
from planner.sky.site import Night, Site, dark_windows, run_dates
from planner.sky.tracks import Sky, compute_sky, pointing_at

SITE = Site(-29.3, -70.7, 2400.0, "America/Santiago", min_altitude_deg=20.0, max_altitude_deg=87.0)
STEP_S = 120.0


def synthetic_sky(altitude, moon_sep=None, moon_alt=None, illum=None, n_nights=1):
    """A Sky built by hand: n_nights equal nights, each with the given per-night columns."""
    altitude = np.asarray(altitude, dtype=float)
    n_targets, n_per = altitude.shape[0], altitude.shape[1] // n_nights
    step_d = STEP_S / 86400
    nights, times, index = [], [], []
    for k in range(n_nights):
        start = 2461500.5 + k
        end = start + (n_per - 1) * step_d - 0.3 * step_d  # last grid point overshoots the end
        nights.append(
            Night(f"2027-01-{k + 1:02d}", start - 0.04, start, end, end + 0.04, -12.0, 0.5, ())
        )
        times.append(start + step_d * np.arange(n_per))
        index.append(np.full(n_per, k))
    n = altitude.shape[1]
    from planner.sky.airmass import airmass_kasten_young

    return Sky(
        times_jd=np.concatenate(times),
        night_index=np.concatenate(index),
        step_s=STEP_S,
        site=SITE,
        nights=tuple(nights),
        names=tuple(f"s{k}" for k in range(n_targets)),
        altitude_deg=altitude,
        azimuth_deg=np.zeros_like(altitude),
        hour_angle_deg=np.zeros_like(altitude),
        airmass=airmass_kasten_young(altitude),
        moon_separation_deg=np.full_like(altitude, 90.0)
        if moon_sep is None
        else np.asarray(moon_sep, float),
        bjd_tdb=np.zeros_like(altitude),
        sun_altitude_deg=np.full(n, -20.0),
        moon_altitude_deg=np.full(n, -10.0) if moon_alt is None else np.asarray(moon_alt, float),
        moon_illumination=np.full(n, 0.5) if illum is None else np.asarray(illum, float),
    )


@settings(max_examples=60, deadline=None)
@given(
    ok=st.lists(st.lists(st.booleans(), min_size=24, max_size=24), min_size=1, max_size=3),
    exposure=st.floats(0.0, 1000.0),
)
def test_starts_equal_brute_force(ok, exposure):
    # Closed-form reference: a start is good iff every grid point from it through the first one
    # at or after its end is good and the end lies inside the dark window (direct loops).
    ok = np.array(ok)
    altitude = np.where(ok, 50.0, 10.0)  # 10 deg is below the site's 20 deg limit
    sky = synthetic_sky(np.tile(altitude, (1, 2)), n_nights=2)
    got = observable_starts(sky, Constraints(max_airmass=3.0), exposure)
    good = np.tile(ok, (1, 2))
    m = int(np.ceil(exposure / STEP_S - 1e-9))
    want = np.zeros_like(got)
    for k in range(good.shape[0]):
        for i, t in enumerate(sky.times_jd):
            night = sky.nights[sky.night_index[i]]
            same = [
                j
                for j in range(i, min(i + m + 1, good.shape[1]))
                if sky.night_index[j] == sky.night_index[i]
            ]
            want[k, i] = (
                t + exposure / 86400 <= night.dark_end_jd + 1e-9
                and len(same) == m + 1
                and all(good[k, same])
            )
    np.testing.assert_array_equal(got, want)


def test_airmass_altitude_and_moon_table():
    alt = np.array([[60.0, 60.0, 60.0, 60.0, 30.0, 88.0]])
    sep = np.array([[10.0, 20.0, 30.0, 40.0, 90.0, 90.0]])
    illum = np.array([0.2, 0.5, 0.5, 0.9, 0.9, 0.9])
    moon_up = np.full(6, 30.0)
    sky = synthetic_sky(alt, sep, moon_up, illum)
    c = Constraints(max_airmass=1.8, moon_table=((0.25, 15.0), (0.6, 25.0), (1.0, 35.0)))
    # 10 < 15 deg (dim Moon), 20 < 25, 30 >= 25, 40 >= 35; airmass(30 deg) = 1.99 > 1.8;
    # 88 deg is above the site's 87 deg limit.
    np.testing.assert_array_equal(
        instantaneous_ok(sky, c)[0], [False, False, True, True, False, False]
    )
    np.testing.assert_array_equal(
        c.min_moon_separation([0.0, 0.25, 0.2501, 0.6, 1.0]), [15, 15, 25, 25, 35]
    )
    # A Moon below the horizon requires no separation.
    down = synthetic_sky(alt, sep, np.full(6, -1.0), illum)
    assert instantaneous_ok(down, c)[0, :2].all()
    # Per-target airmass limits.
    two = synthetic_sky(np.array([[30.0] * 6, [30.0] * 6]))
    assert observable_starts(two, Constraints(max_airmass=(1.8, 2.5)), 0.0).any(
        axis=1
    ).tolist() == [False, True]


def test_blackouts_and_target_windows_are_exact():
    sky = synthetic_sky(np.full((2, 30), 60.0))
    t = sky.times_jd
    black = (t[10] + 1e-6, t[12])  # opens just after grid point 10
    c = Constraints(blackouts=(black,), target_windows=(None, ((t[3], t[8] + 1e-9),)))
    got = observable_starts(sky, c, 2 * STEP_S)
    # Target 0: a 2-step exposure starting at 9 ends at 11 > blackout start: refused; 12 ok.
    assert got[0, 8] and not got[0, 9] and not got[0, 11] and got[0, 12]
    # Target 1: only starts 3..6 keep the exposure inside [t3, t8].
    np.testing.assert_array_equal(np.flatnonzero(got[1]), [3, 4, 5, 6])


def test_observable_hours_and_binding_sentences(caplog):
    alt = np.vstack([np.full(40, 60.0), np.full(40, 10.0), np.full(40, 25.0)])
    sky = synthetic_sky(alt)
    c = Constraints(max_airmass=2.0)
    hours = observable_hours(sky, c)
    # Target 0 is always fine: every grid point up to the dark end counts one step.
    n_dark = np.sum(sky.times_jd <= sky.nights[0].dark_end_jd)
    assert hours[0, 0] == pytest.approx(n_dark * STEP_S / 3600)
    assert hours[1, 0] == 0 and hours[2, 0] == 0
    with caplog.at_level(logging.WARNING, logger="planner.sky.observability"):
        why = binding_constraints(sky, c)
    assert why[0] is None
    assert "'s1'" in why[1] and "altitude" in why[1] and "highest 10.0" in why[1]
    assert "'s2'" in why[2] and "airmass" in why[2] and "2" in why[2]
    # The sentence reaches the user once, from the caller (schedule or --strict error): the
    # library does not also log it as a warning.
    assert not [r for r in caplog.records if r.levelno >= logging.WARNING]


def test_real_sky_starts_hold_at_exact_start_and_end_times():
    # Independent check: astropy's full AltAz (via pointing_at) at the exact start and end of
    # every permitted exposure must satisfy the limits (0.01 deg / 0.1 % grid tolerance).
    nights = dark_windows(SITE, run_dates("2027-08-03", 2), "nautical")
    gen = np.random.default_rng(3)
    ra, dec = gen.uniform(0, 360, 25), gen.uniform(-80, 30, 25)
    sky = compute_sky(SITE, nights, ra, dec, step_s=STEP_S)
    c = Constraints(max_airmass=1.6)
    exposure = 900.0
    starts = observable_starts(sky, c, exposure)
    assert starts.any()
    k, i = np.nonzero(starts)
    pick = gen.choice(k.size, size=min(300, k.size), replace=False)
    k, i = k[pick], i[pick]
    t0 = sky.times_jd[i]
    t1 = t0 + exposure / 86400
    for t in (t0, t0 + 0.5 * exposure / 86400, t1):
        p = pointing_at(SITE, ra[k], dec[k], t)
        assert np.all(p.altitude_deg >= SITE.min_altitude_deg - 0.01)
        assert np.all(p.altitude_deg <= SITE.max_altitude_deg + 0.01)
        assert np.all(p.airmass <= 1.6 * 1.001)
    dark_end = np.array([n.dark_end_jd for n in nights])[sky.night_index[i]]
    assert np.all(t1 <= dark_end + 1e-9)


def test_never_rising_target_on_a_real_sky():
    nights = dark_windows(SITE, ["2027-08-03"], "nautical")
    sky = compute_sky(SITE, nights, [10.0, 150.0], [80.0, -60.0], names=["polar north", "south"])
    why = binding_constraints(sky, Constraints())
    assert why[1] is None
    assert "'polar north'" in why[0] and "altitude" in why[0]


def test_bad_constraints_get_a_sentence():
    with pytest.raises(ScenarioError, match="max_airmass"):
        Constraints(max_airmass=0.5)
    with pytest.raises(ScenarioError, match="moon_table"):
        Constraints(moon_table=((0.5, 10.0),))
    with pytest.raises(ScenarioError, match="start before end"):
        Constraints(blackouts=((2461500.6, 2461500.5),))
    sky = synthetic_sky(np.full((2, 5), 60.0))
    with pytest.raises(ScenarioError, match="one value or one per target"):
        observable_starts(sky, Constraints(max_airmass=(2.0, 2.0, 2.0)), 0.0)
    with pytest.raises(ScenarioError, match="one entry"):
        observable_starts(sky, Constraints(target_windows=(None,)), 0.0)
    with pytest.raises(ScenarioError, match="exposure_s"):
        observable_starts(sky, Constraints(), -5.0)


# ---- which limit keeps a target out (blocking_limits / never_observable) --------------------
# Exact results on hand-built skies: each case switches on one limit (or two) and checks that
# the answer names it, and that relaxing the named limit really opens the target.


def test_blocking_limits_name_each_limit_alone():
    n = 40
    alt = np.vstack([np.full(n, 60.0), np.full(n, 10.0), np.full(n, 25.0), np.full(n, 60.0)])
    moon_sep = np.vstack([np.full(n, 90.0), np.full(n, 90.0), np.full(n, 90.0),
                          np.full(n, 24.8)])  # target 3: 24.8 deg from the Moon, 25 needed
    sky = synthetic_sky(alt, moon_sep=moon_sep, moon_alt=np.full(n, 30.0), illum=np.full(n, 0.5))
    c = Constraints(max_airmass=2.0)
    got = blocking_limits(sky, c, 0.0)
    assert list(got) == ["", "altitude", "airmass", "moon"]
    why = never_observable(sky, c)
    assert why[0] is None
    assert why[3].limit == "moon" and "24.8 deg from it, 25 deg needed" in why[3].reason
    # Relaxing the named limit opens the target: the Moon rule cut to 20 deg at half phase.
    looser = Constraints(max_airmass=2.0, moon_table=((1.0, 20.0),))
    assert observable_starts(sky, looser, 0.0)[3].any()


def test_blocking_limits_windows_dark_time_and_pairs():
    n = 40
    sky = synthetic_sky(np.full((3, n), 60.0))
    t = sky.times_jd
    outside = ((t[-1] + 1.0, t[-1] + 1.1),)  # an allowed window after the run
    c = Constraints(target_windows=(None, outside, None))
    assert list(blocking_limits(sky, c, 0.0)) == ["", "window", ""]
    closed = Constraints(blackouts=((t[0] - 1.0, t[-1] + 1.0),))
    assert set(blocking_limits(sky, closed, 0.0)) == {"dark_time"}
    # Altitude fine only in the first half, the Moon far only in the second (airmass loose
    # enough to pass at 10 deg): neither limit alone shuts the target out, relaxing either
    # lets it in.
    alt = np.where(np.arange(n) < n // 2, 60.0, 10.0)[None, :]
    sep = np.where(np.arange(n) < n // 2, 5.0, 90.0)[None, :]
    sky = synthetic_sky(alt, moon_sep=sep, moon_alt=np.full(n, 30.0))
    (why,) = never_observable(sky, Constraints(max_airmass=10.0))
    assert why.limit == "altitude+moon"
    assert "altitude and Moon limits together" in why.reason


def test_blocking_limits_per_night_and_exposure_length():
    n = 20  # two nights of 20 grid points
    sep = np.concatenate([np.full(n, 5.0), np.full(n, 90.0)])[None, :]
    sky = synthetic_sky(np.full((1, 2 * n), 60.0), moon_sep=sep, moon_alt=np.full(2 * n, 30.0),
                        n_nights=2)
    per_night = blocking_limits(sky, Constraints(), 0.0, per_night=True)
    assert per_night.shape == (1, 2) and list(per_night[0]) == ["moon", ""]
    # Airmass met for three grid steps only: a 2-step exposure fits, a 5-step one does not,
    # and then the airmass limit is named (relaxing it alone lets the long exposure in).
    alt = np.full((1, 40), 25.0)
    alt[0, 10:13] = 60.0
    sky = synthetic_sky(alt)
    assert blocking_limits(sky, Constraints(), 2 * STEP_S)[0] == ""
    assert blocking_limits(sky, Constraints(), 5 * STEP_S)[0] == "airmass"
