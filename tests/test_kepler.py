"""Kepler's equation solver against worked examples, an independent root finder and its residual."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from inference.errors import ModelError
from inference.kepler import (
    ECCENTRICITY_MAX,
    eccentric_anomaly,
    eccentric_anomaly_sincos,
    kepler_residual,
)


def test_meeus_example_30a():
    # Meeus, Astronomical Algorithms (2nd ed. 1998), Example 30.a: e = 0.100, M = 5 deg
    # gives E = 5.554589 deg (printed to 6 decimals).
    e_deg = np.degrees(eccentric_anomaly(np.radians(5.0), 0.100))
    assert e_deg == pytest.approx(5.554589, abs=5e-7)


def test_meeus_high_eccentricity_example():
    # Meeus, Astronomical Algorithms, chapter 30 (value from memory): e = 0.99, M = 2 deg
    # gives E = 32.361007 deg, the case where plain fixed-point iteration is very slow.
    e_deg = np.degrees(eccentric_anomaly(np.radians(2.0), 0.99))
    assert e_deg == pytest.approx(32.361007, abs=5e-7)


@pytest.mark.parametrize("ecc", [0.5, 0.9, 0.99, 0.999])
def test_matches_scipy_brentq(ecc):
    # Independent reference: scipy.optimize.brentq on f(E) = E - e sin E - M, bracketed in
    # [0, pi] for M in [0, pi] (f is monotonic there).
    m = np.concatenate([np.logspace(-9, 0, 25), np.linspace(1.0, np.pi, 25)])
    ref = np.array(
        [brentq(lambda x, mm=mm: x - ecc * np.sin(x) - mm, 0.0, np.pi, xtol=1e-15) for mm in m]
    )
    np.testing.assert_allclose(eccentric_anomaly(m, ecc), ref, rtol=0, atol=2e-12)


def test_residual_on_dense_grid_including_near_parabolic():
    # The closed-form requirement |E - e sin E - M| <= 1e-12 over a dense (M, e) grid,
    # with extra points for e -> 0.999 and M -> 0 (the hardest corner for starters).
    m = np.concatenate([np.linspace(-np.pi, np.pi, 2001), np.logspace(-14, 0, 300)])
    m = np.concatenate([m, -m])
    e = np.concatenate([np.linspace(0.0, ECCENTRICITY_MAX, 400), 1.0 - np.logspace(-3, -1, 100)])
    mm, ee = np.meshgrid(m, e)
    res = kepler_residual(eccentric_anomaly(mm, ee), mm, ee)
    assert np.max(np.abs(res)) <= 1e-12


@settings(max_examples=300, deadline=None)
@given(
    st.floats(min_value=-1e3, max_value=1e3, allow_nan=False),
    st.floats(min_value=0.0, max_value=ECCENTRICITY_MAX),
)
def test_residual_property_direct(m, e):
    # Property: for any M of moderate size the plain residual E - e sin E - M is tiny
    # (here |M| <= 1e3, so the rounding of M itself stays below ~2e-13).
    big_e = eccentric_anomaly(m, e)
    assert abs(big_e - e * np.sin(big_e) - m) <= 1e-12
    assert abs(big_e - m) <= np.pi + 1e-12


@settings(max_examples=200, deadline=None)
@given(
    st.floats(min_value=-1e12, max_value=1e12, allow_nan=False),
    st.floats(min_value=0.0, max_value=ECCENTRICITY_MAX),
)
def test_residual_property_any_real_m(m, e):
    # For any real M the residual is measured on the reduced angle, since M itself is only
    # known to its own rounding (ulp(1e12) is about 1e-4 rad).
    assert abs(kepler_residual(eccentric_anomaly(m, e), m, e)) <= 1e-12 + 4 * abs(np.spacing(m))


def test_identities_and_broadcasting():
    m = np.linspace(-20.0, 20.0, 101)
    # e = 0 is the identity E = M (closed form).
    np.testing.assert_allclose(eccentric_anomaly(m, 0.0), m, rtol=0, atol=1e-14)
    # Odd symmetry E(-M) = -E(M) and periodicity E(M + 2 pi) = E(M) + 2 pi (closed form).
    e = np.linspace(0.0, 0.95, 7)[:, None]
    got = eccentric_anomaly(m, e)
    assert got.shape == (7, 101)
    np.testing.assert_allclose(eccentric_anomaly(-m, e), -got, rtol=0, atol=1e-13)
    np.testing.assert_allclose(eccentric_anomaly(m + 2 * np.pi, e), got + 2 * np.pi, atol=1e-12)
    # A scalar gives a 0-d array; an empty input gives an empty output.
    assert np.ndim(eccentric_anomaly(1.0, 0.3)) == 0
    assert eccentric_anomaly(np.array([]), 0.3).shape == (0,)


@pytest.mark.parametrize("bad", [-0.1, 1.0, 1.5, np.nan])
def test_bad_eccentricity_is_refused(bad):
    with pytest.raises(ModelError, match=r"outside \[0, 1\)"):
        eccentric_anomaly(np.array([0.1, 0.2]), np.array([0.2, bad]))


def test_sincos_variant_matches_numpy():
    # sin E and cos E from the angle-addition series equal numpy's sin/cos of the returned E
    # to rounding error.
    rng = np.random.default_rng(5)
    m = rng.uniform(-30.0, 30.0, 50_000)
    e = rng.uniform(0.0, ECCENTRICITY_MAX, 50_000)
    big_e, s, c = eccentric_anomaly_sincos(m, e)
    np.testing.assert_array_equal(big_e, eccentric_anomaly(m, e))
    np.testing.assert_allclose(s, np.sin(big_e), rtol=0, atol=1e-14)
    np.testing.assert_allclose(c, np.cos(big_e), rtol=0, atol=1e-14)
