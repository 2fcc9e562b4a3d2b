"""Sites, run dates, twilight boundaries and the never-dark case."""

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import AltAz, get_body
from astropy.time import Time

from planner.errors import ScenarioError, SkyError
from planner.sky.offline import quiet_astropy
from planner.sky.site import SUNSET_ALTITUDE_DEG, Site, dark_windows, run_dates, twilight_altitude

# Invented sites (numbers only).
SOUTH = Site(-29.3, -70.7, 2400.0, "America/Santiago")
NORTH = Site(60.0, 10.0, 300.0, "Europe/Oslo")


def _sun_altitude(site, jd):
    loc = site.location()
    with quiet_astropy():
        t = Time(np.asarray(jd), format="jd", scale="utc")
        return (
            get_body("sun", t, loc)
            .transform_to(AltAz(obstime=t, location=loc, pressure=0 * u.hPa))
            .alt.deg
        )


@pytest.mark.parametrize("twilight", ["civil", "nautical", "astronomical", -15.0])
def test_twilight_boundaries_hit_the_definition(twilight):
    # Reference: astropy's full AltAz transform of the Sun (no refraction) at the computed
    # boundaries; definitions -6/-12/-18 deg are the standard ones (common practice); 0.05 deg.
    nights = dark_windows(SOUTH, run_dates("2027-05-10", 2), twilight)
    h = twilight_altitude(twilight)
    for n in nights:
        alt = _sun_altitude(SOUTH, [n.dark_start_jd, n.dark_end_jd, n.sunset_jd, n.sunrise_jd])
        np.testing.assert_allclose(alt[:2], h, atol=0.05)
        np.testing.assert_allclose(alt[2:], SUNSET_ALTITUDE_DEG, atol=0.05)
        assert n.sunset_jd < n.dark_start_jd < n.dark_end_jd < n.sunrise_jd
        # The Sun is below the twilight altitude in the middle of the window, above it outside.
        mid, before = _sun_altitude(
            SOUTH, [0.5 * (n.dark_start_jd + n.dark_end_jd), n.dark_start_jd - 0.01]
        )
        assert mid < h < before


def test_night_is_the_local_evening_date():
    # Local evening 2027-05-10 in Santiago (UTC-4): sunset falls in the evening of that date.
    (n,) = dark_windows(SOUTH, ["2027-05-10"], "nautical")
    sunset = Time(n.sunset_jd, format="jd", scale="utc").to_datetime()
    assert sunset.date().isoformat() == "2027-05-10" and 20 <= sunset.hour <= 23
    # Winter at 29 deg south: roughly 11 to 12 hours of nautical darkness (geometry of the
    # Sun's declination, -17.7 deg on this date).
    assert 10.5 < n.dark_hours < 12.5


def test_high_latitude_summer_never_dark_gives_a_sentence():
    # At 60 deg north near the June solstice the Sun gets down to about -6.5 deg only
    # (90 - 60 - 23.44 = 6.56 deg below the horizon at lower culmination): civil twilight
    # ends, nautical never does.
    (n,) = dark_windows(NORTH, ["2027-06-21"], "civil")
    assert _sun_altitude(NORTH, 0.5 * (n.dark_start_jd + n.dark_end_jd)) < -6.0
    with pytest.raises(SkyError) as info:
        dark_windows(NORTH, ["2027-06-20", "2027-06-21"], "nautical")
    message = str(info.value)
    assert "2027-06-20" in message and "60" in message and "nautical" in message
    assert message.count(".") <= 2  # one sentence (the decimal point of a number aside)


def test_midnight_sun_gives_a_sentence():
    polar = Site(75.0, 15.0, 10.0, "Europe/Oslo", min_altitude_deg=10.0)
    with pytest.raises(SkyError, match="never gets down"):
        dark_windows(polar, ["2027-06-21"], "civil")


def test_polar_night_is_dark_from_noon_to_noon():
    # At 75 deg north on the December solstice the Sun culminates at 90 - 75 - 23.44 = -8.4 deg
    # (closed form), so it stays below civil twilight all day: the window spans the whole day.
    polar = Site(75.0, 15.0, 10.0, "Europe/Oslo", min_altitude_deg=10.0)
    (n,) = dark_windows(polar, ["2027-12-21"], "civil")
    assert n.dark_hours == pytest.approx(24.0, abs=1e-6)
    assert n.sunset_jd == n.dark_start_jd and n.sunrise_jd == n.dark_end_jd
    assert _sun_altitude(polar, n.dark_start_jd + 0.5) < -6.0


def test_moon_up_intervals_end_on_the_horizon():
    # Reference: astropy's AltAz of the topocentric Moon at the interval edges (0.05 deg).
    nights = dark_windows(SOUTH, run_dates("2027-05-10", 6), "nautical")
    loc = SOUTH.location()
    edges = []
    for n in nights:
        for a, b in n.moon_up:
            assert n.dark_start_jd <= a < b <= n.dark_end_jd
            edges += [x for x in (a, b) if n.dark_start_jd < x < n.dark_end_jd]
    assert edges, "a six-night run has moonrises or moonsets inside the dark windows"
    with quiet_astropy():
        t = Time(edges, format="jd", scale="utc")
        alt = (
            get_body("moon", t, loc)
            .transform_to(AltAz(obstime=t, location=loc, pressure=0 * u.hPa))
            .alt.deg
        )
    np.testing.assert_allclose(alt, 0.0, atol=0.05)


def test_run_dates_and_bad_input():
    assert run_dates("2027-12-30", 3) == ("2027-12-30", "2027-12-31", "2028-01-01")
    with pytest.raises(ScenarioError, match="YYYY-MM-DD"):
        run_dates("30/12/2027", 3)
    with pytest.raises(ScenarioError, match="positive integer"):
        run_dates("2027-12-30", 0)
    with pytest.raises(ScenarioError, match="astronomical"):
        twilight_altitude("astronomic")
    with pytest.raises(ScenarioError, match="outside"):
        twilight_altitude(-45.0)
    with pytest.raises(ScenarioError, match="IANA"):
        Site(10.0, 10.0, 0.0, "Mars/Olympus")
    with pytest.raises(ScenarioError, match="latitude"):
        Site(95.0, 10.0, 0.0, "UTC")
    with pytest.raises(ScenarioError, match="altitude limits"):
        Site(10.0, 10.0, 0.0, "UTC", min_altitude_deg=50.0, max_altitude_deg=40.0)
