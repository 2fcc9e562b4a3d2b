"""Altitude/azimuth geometry and the airmass formula against published values."""

import numpy as np
import pytest

from planner.sky.airmass import (
    airmass_kasten_young,
    altaz_from_hadec,
    hadec_from_altaz,
    wrap_degrees,
)


def test_meeus_example_13b_altitude_azimuth():
    # Meeus (1998), Astronomical Algorithms, Example 13.b: Venus seen from the US Naval
    # Observatory (phi = +38 55' 17"), 1987 April 10, 19:21 UT, hour angle H = 64.352133 deg,
    # apparent dec = -6 43' 11.61"; result h = 15.1249 deg, A = 68.0337 deg measured from the
    # south (values from memory of the worked example). Our azimuth counts from the north.
    phi = 38 + 55 / 60 + 17 / 3600
    dec = -(6 + 43 / 60 + 11.61 / 3600)
    alt, az = altaz_from_hadec(64.352133, dec, phi)
    assert alt == pytest.approx(15.1249, abs=1e-4)
    assert az - 180.0 == pytest.approx(68.0337, abs=1e-4)


def test_meridian_and_pole_closed_forms():
    # Closed forms: on the meridian h = 90 - |phi - dec| (azimuth 0 or 180); the celestial
    # pole stands at altitude phi, azimuth 0, at every hour angle.
    alt, az = altaz_from_hadec(0.0, 10.0, -30.0)
    assert alt == pytest.approx(50.0, abs=1e-12) and az == pytest.approx(0.0, abs=1e-9)
    alt, az = altaz_from_hadec(0.0, -60.0, -30.0)
    assert alt == pytest.approx(60.0, abs=1e-12) and az == pytest.approx(180.0, abs=1e-9)
    alt, az = altaz_from_hadec(np.linspace(-180, 180, 7), 90.0, 40.0)
    np.testing.assert_allclose(alt, 40.0, atol=1e-9)
    # Rising in the east: a star on the equator at H = -90 deg is on the horizon due east.
    alt, az = altaz_from_hadec(-90.0, 0.0, 25.0)
    assert alt == pytest.approx(0.0, abs=1e-12) and az == pytest.approx(90.0, abs=1e-9)


def test_inverse_round_trip(rng):
    # Closed form: hadec_from_altaz inverts altaz_from_hadec.
    ha = rng.uniform(-180, 180, 500)
    dec = rng.uniform(-89, 89, 500)
    phi = -24.6
    alt, az = altaz_from_hadec(ha, dec, phi)
    ha2, dec2 = hadec_from_altaz(alt, az, phi)
    np.testing.assert_allclose(dec2, dec, atol=1e-8)
    np.testing.assert_allclose(wrap_degrees(ha2 - ha), 0.0, atol=1e-7)


def test_kasten_young_against_the_papers_table():
    # Kasten and Young (1989), Applied Optics 28, 4735, table of relative optical airmass for
    # the ISO standard atmosphere (values from memory): 1.0000 at the zenith, about 1.994 at
    # z = 60 deg, about 5.60 at z = 80 deg, 38.0868 at the horizon; the paper quotes its
    # formula as matching the table to within about half a percent (from memory).
    z = np.array([0.0, 60.0, 80.0, 90.0])
    table = np.array([1.0000, 1.994, 5.60, 38.0868])
    got = airmass_kasten_young(90.0 - z)
    np.testing.assert_allclose(got, table, rtol=5e-3)
    # The formula's own value at the zenith (closed form: 1 / (1 + 0.50572 * 96.07995**-1.6364)).
    assert got[0] == pytest.approx(1.0 / (1.0 + 0.50572 * 96.07995**-1.6364), rel=1e-12)


def test_airmass_close_to_sec_z_high_up_and_to_spherical_shell_lower():
    # Handbook closed forms: plane-parallel sec z within 0.2 percent above 45 deg altitude
    # (the curvature and refraction correction is about 0.1 percent at z = 45 deg);
    # homogeneous spherical atmosphere of scale height 8 km on a 6371 km Earth,
    # X = sqrt((r cos z)^2 + 2 r + 1) - r cos z with r = R / H, within 2 percent to z = 80 deg.
    z = np.radians(np.linspace(0.0, 45.0, 10))
    np.testing.assert_allclose(airmass_kasten_young(90 - np.degrees(z)), 1 / np.cos(z), rtol=2e-3)
    z = np.radians(np.linspace(0.0, 80.0, 17))
    r = 6371.0 / 8.0
    shell = np.sqrt((r * np.cos(z)) ** 2 + 2 * r + 1) - r * np.cos(z)
    np.testing.assert_allclose(airmass_kasten_young(90 - np.degrees(z)), shell, rtol=2e-2)


def test_airmass_finite_and_monotone_to_the_horizon():
    alt = np.linspace(89.0, 0.0, 8901)
    x = airmass_kasten_young(alt)
    assert np.all(np.isfinite(x))
    assert np.all(np.diff(x) > 0)
    # Within a degree of the zenith the formula is flat: its published form even rises by
    # dips by about 1e-7 just below the zenith (derivative of the correction term), no more.
    top = airmass_kasten_young(np.linspace(90.0, 89.0, 1001))
    assert np.ptp(top) < 2e-4 and top[0] - np.min(top) < 1e-6
    assert x[-1] < 40.0
    assert np.isfinite(airmass_kasten_young(-5.0))
