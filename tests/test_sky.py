"""The vectorised sky grid against astropy's full transforms and published Moon values."""

import datetime as dt

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import AltAz, HADec, SkyCoord, get_body
from astropy.time import Time

from planner.errors import ScenarioError
from planner.sky.ephemeris import illuminated_fraction, node_ephemeris
from planner.sky.offline import quiet_astropy
from planner.sky.site import Site, dark_windows, night_span_start_jd, run_dates
from planner.sky.tracks import compute_sky, pointing_at

# An invented site (numbers only, no real observatory).
SITE = Site(-29.3, -70.7, 2400.0, "America/Santiago", min_altitude_deg=20.0)
YEAR_AHEAD = (dt.date.today() + dt.timedelta(days=365)).isoformat()


@pytest.fixture(scope="module")
def targets():
    gen = np.random.default_rng(7)
    return gen.uniform(0, 360, 40), gen.uniform(-85, 55, 40)


@pytest.fixture(scope="module")
def sky(targets):
    nights = dark_windows(SITE, run_dates(YEAR_AHEAD, 3), "nautical")
    return compute_sky(SITE, nights, *targets, step_s=300.0)


@pytest.fixture(scope="module")
def sample(sky):
    gen = np.random.default_rng(11)
    return gen.integers(0, sky.n_targets, 400), gen.integers(0, sky.times_jd.size, 400)


@pytest.fixture(scope="module")
def reference(sky, targets, sample):
    """astropy's full transforms at the sampled (target, time) pairs."""
    ra, dec = targets
    i, j = sample
    loc = SITE.location()
    with quiet_astropy():
        t = Time(sky.times_jd[j], format="jd", scale="utc")
        star = SkyCoord(ra[i] * u.deg, dec[i] * u.deg)
        horiz = star.transform_to(AltAz(obstime=t, location=loc, pressure=0 * u.hPa))
        hadec = star.transform_to(HADec(obstime=t, location=loc, pressure=0 * u.hPa))
        moon = get_body("moon", t, loc)
        moon_h = moon.transform_to(AltAz(obstime=t, location=loc, pressure=0 * u.hPa))
        sun_h = get_body("sun", t, loc).transform_to(
            AltAz(obstime=t, location=loc, pressure=0 * u.hPa)
        )
        bjd = (t.tdb + t.light_travel_time(star, location=loc)).jd
    return horiz, hadec, moon_h, sun_h, bjd


def test_grid_matches_astropy_altaz_a_year_ahead(sky, reference, sample):
    # Reference: astropy's full AltAz and HADec transforms (general-purpose library), a year
    # ahead of today so the bundled Earth-orientation predictions have expired; 0.01 deg.
    horiz, hadec, moon_h, sun_h, _ = reference
    i, j = sample
    np.testing.assert_allclose(sky.altitude_deg[i, j], horiz.alt.deg, atol=0.01)
    daz = (sky.azimuth_deg[i, j] - horiz.az.deg + 180) % 360 - 180
    assert np.max(np.abs(daz) * np.cos(horiz.alt.rad)) < 0.01
    dha = (sky.hour_angle_deg[i, j] - hadec.ha.deg + 180) % 360 - 180
    assert np.max(np.abs(dha) * np.cos(hadec.dec.rad)) < 0.01
    np.testing.assert_allclose(sky.moon_altitude_deg[j], moon_h.alt.deg, atol=0.01)
    np.testing.assert_allclose(sky.sun_altitude_deg[j], sun_h.alt.deg, atol=0.01)


def test_moon_separation_matches_astropy(sky, reference, sample):
    # Reference: angle between astropy's AltAz directions of the star and the topocentric Moon.
    horiz, _, moon_h, _, _ = reference
    i, j = sample
    a1, z1, a2, z2 = horiz.alt.rad, horiz.az.rad, moon_h.alt.rad, moon_h.az.rad
    cos_sep = np.sin(a1) * np.sin(a2) + np.cos(a1) * np.cos(a2) * np.cos(z1 - z2)
    np.testing.assert_allclose(
        sky.moon_separation_deg[i, j], np.degrees(np.arccos(np.clip(cos_sep, -1, 1))), atol=0.01
    )


def test_bjd_tdb_matches_astropy_light_travel_time(sky, reference, sample):
    # Reference: astropy Time.tdb plus Time.light_travel_time (barycentric); 1 ms.
    _, _, _, _, bjd = reference
    i, j = sample
    np.testing.assert_allclose(sky.bjd_tdb[i, j], bjd, rtol=0, atol=1e-3 / 86400)


def test_pointing_at_agrees_with_grid(sky, targets, sample):
    ra, dec = targets
    i, j = sample
    p = pointing_at(SITE, ra[i], dec[i], sky.times_jd[j])
    np.testing.assert_allclose(p.altitude_deg, sky.altitude_deg[i, j], atol=0.01)
    np.testing.assert_allclose(
        p.airmass[p.altitude_deg > 5], sky.airmass[i, j][p.altitude_deg > 5], rtol=1e-3
    )
    np.testing.assert_allclose(p.moon_separation_deg, sky.moon_separation_deg[i, j], atol=0.01)
    dha = (p.hour_angle_deg - sky.hour_angle_deg[i, j] + 180) % 360 - 180
    assert np.max(np.abs(dha) * np.cos(np.radians(dec[i]))) < 0.01


def test_grid_layout(sky):
    step_d = sky.step_s / 86400
    for k, night in enumerate(sky.nights):
        t = sky.times_jd[sky.night_index == k]
        assert t[0] == night.dark_start_jd
        np.testing.assert_allclose(np.diff(t), step_d, rtol=1e-6)
        assert night.dark_end_jd <= t[-1] < night.dark_end_jd + step_d
    assert np.all(np.diff(sky.night_index) >= 0)
    n = sky.times_jd.size
    for field in ("altitude_deg", "azimuth_deg", "airmass", "moon_separation_deg", "bjd_tdb"):
        assert getattr(sky, field).shape == (sky.n_targets, n)
    assert sky.moon_illumination.shape == (n,)
    with pytest.raises(ValueError, match="read-only"):
        sky.altitude_deg[0, 0] = 0.0
    assert np.all((sky.moon_illumination >= 0) & (sky.moon_illumination <= 1))


def test_meeus_example_48a_illuminated_fraction():
    # Meeus (1998), Astronomical Algorithms, Example 48.a: 1992 April 12, 0h TD, k = 0.6786
    # (from memory). Positions from astropy's built-in ephemeris; both the direct vector
    # formula and the interpolated ephemeris path used on the grid.
    with quiet_astropy():
        t = Time("1992-04-12 00:00:00", scale="tt")
        sun = get_body("sun", t).cartesian.xyz.to_value("km")
        moon = get_body("moon", t).cartesian.xyz.to_value("km")
        utc_jd = t.utc.jd
    assert illuminated_fraction(sun, moon) == pytest.approx(0.6786, abs=0.005)
    eph = node_ephemeris(SITE.location(), [utc_jd - 0.3])
    assert eph.at(0, [utc_jd]).moon_illumination[0] == pytest.approx(0.6786, abs=0.005)


def test_dates_past_the_leap_second_table_run_quietly():
    # pytest turns every warning into an error: this run five years past the bundled tables
    # must neither warn nor fail, and still agree with astropy's AltAz to 0.01 deg.
    date = (dt.date.today() + dt.timedelta(days=5 * 365)).isoformat()
    nights = dark_windows(SITE, [date], "astronomical")
    sky = compute_sky(SITE, nights, [83.0], [-5.0], step_s=600.0)
    p = pointing_at(SITE, 83.0, -5.0, sky.times_jd)
    np.testing.assert_allclose(sky.altitude_deg[0], p.altitude_deg, atol=0.01)


def test_non_consecutive_nights_months_apart():
    nights = dark_windows(SITE, ["2027-03-01", "2027-09-15"], "nautical")
    sky = compute_sky(SITE, nights, [10.0, 200.0], [-40.0, 5.0], step_s=600.0)
    assert set(np.unique(sky.night_index)) == {0, 1}
    assert sky.times_jd[sky.night_index == 1][0] - sky.times_jd[sky.night_index == 0][-1] > 190


def test_bad_targets_and_step_get_one_sentence():
    nights = dark_windows(SITE, ["2027-03-01"], "nautical")
    with pytest.raises(ScenarioError, match="target 1"):
        compute_sky(SITE, nights, [10.0, 20.0], [0.0, 95.0])
    with pytest.raises(ScenarioError, match="equal-length"):
        compute_sky(SITE, nights, [10.0, 20.0], [0.0])
    with pytest.raises(ScenarioError, match="step_s"):
        compute_sky(SITE, nights, [10.0], [0.0], step_s=1.0)
    assert night_span_start_jd(SITE, "2027-03-01") < nights[0].sunset_jd
