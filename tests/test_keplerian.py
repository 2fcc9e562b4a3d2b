"""The Keplerian RV curve and the mass/semi-amplitude conversions."""

import numpy as np
import pytest
from astropy import constants as const
from scipy.optimize import brentq

from inference.errors import ModelError
from inference.keplerian import (
    keplerian_basis,
    mean_anomaly,
    minimum_mass,
    radial_velocity,
    semi_amplitude,
    time_periastron_from_mean_anomaly,
    true_anomaly,
)


def test_circular_orbit_is_a_pure_sine():
    # Closed form: with e = 0, nu = M and v = K cos(2 pi (t - tp) / P + omega).
    t = np.linspace(0.0, 30.0, 200)
    v = radial_velocity(t, 7.3, 12.0, 0.0, 0.7, 1.1)
    np.testing.assert_allclose(v, 12.0 * np.cos(2 * np.pi * (t - 1.1) / 7.3 + 0.7), atol=1e-12)


def test_against_independent_solution():
    # Independent reference: scipy brentq for E, then the half-angle relation for nu
    # (Murray & Dermott 1999, eq. 2.46), then v = K [cos(nu + w) + e cos w].
    p, k, e, w, tp = 11.0, 30.0, 0.6, 2.1, 3.0
    t = np.linspace(0.0, 25.0, 40)
    ref = []
    for tt in t:
        m = np.mod(2 * np.pi * (tt - tp) / p, 2 * np.pi)
        big_e = brentq(lambda x, m=m: x - e * np.sin(x) - m, 0.0, 2 * np.pi, xtol=1e-15)
        nu = 2 * np.arctan(np.sqrt((1 + e) / (1 - e)) * np.tan(big_e / 2))
        ref.append(k * (np.cos(nu + w) + e * np.cos(w)))
    np.testing.assert_allclose(radial_velocity(t, p, k, e, w, tp), ref, rtol=0, atol=1e-9)


def test_time_average_over_one_period_is_zero():
    # Closed form: the time average of cos(nu) over an orbit is -e and of sin(nu) is 0, so
    # the Keplerian velocity (with its + e cos omega term) averages to zero.
    n = 200_000
    t = (np.arange(n) + 0.5) / n * 5.0
    v = radial_velocity(t, 5.0, 40.0, np.array([[0.0], [0.3], [0.8]]), 1.3, 0.4)
    assert v.shape == (3, n)
    np.testing.assert_allclose(v.mean(axis=1), 0.0, atol=1e-6)


def test_basis_recombines_to_velocity():
    # v = A cos_term - B sin_term with A = K cos w, B = K sin w (definition of the basis).
    t = np.linspace(0.0, 9.0, 31)
    c, s = keplerian_basis(t, 4.0, 0.45, 0.2)
    k, w = 17.0, -2.2
    np.testing.assert_allclose(
        k * np.cos(w) * c - k * np.sin(w) * s, radial_velocity(t, 4.0, k, 0.45, w, 0.2), atol=1e-12
    )


def test_true_anomaly_relations():
    # cos nu = (cos E - e) / (1 - e cos E) (textbook relation), and nu = E at e = 0.
    big_e = np.linspace(-10.0, 10.0, 101)
    nu = true_anomaly(big_e, 0.7)
    np.testing.assert_allclose(
        np.cos(nu), (np.cos(big_e) - 0.7) / (1 - 0.7 * np.cos(big_e)), atol=1e-12
    )
    assert np.all(np.abs(nu - big_e) < np.pi)
    np.testing.assert_allclose(true_anomaly(big_e, 0.0), big_e, atol=1e-12)


def test_sun_reflex_due_to_jupiter():
    # Common practice / handbook: the Sun's reflex velocity due to Jupiter is about 12.5 m/s
    # (Jupiter: 1 M_jup, P = 4332.59 d, e = 0.0489; periods and e from memory; IAU nominal
    # masses via astropy).
    k = semi_amplitude(1.0, 1.0, 4332.59, 0.0489)
    assert k == pytest.approx(12.5, abs=0.05)


def test_sun_reflex_due_to_earth():
    # Handbook: the Sun's reflex velocity due to the Earth is about 0.09 m/s
    # (P = 365.256 d, e = 0.0167 from memory; Earth mass from astropy).
    m_earth = (const.M_earth / const.M_jup).value
    k = semi_amplitude(m_earth, 1.0, 365.256, 0.0167)
    assert k == pytest.approx(0.0894, abs=0.0005)


def test_minimum_mass_inverts_semi_amplitude():
    m = np.array([0.003, 1.0, 13.0, 80.0, 300.0])
    p = np.array([3.0, 365.0, 1000.0, 10.0, 50.0])
    e = np.array([0.0, 0.3, 0.7, 0.1, 0.5])
    k = semi_amplitude(m, 1.1, p, e)
    np.testing.assert_allclose(minimum_mass(k, 1.1, p, e), m, rtol=1e-12)
    # Small-mass limit (closed form, companion mass negligible in the total):
    # m sin i = K sqrt(1 - e^2) (P / (2 pi G))^(1/3) M_star^(2/3).
    g = const.G.si.value
    approx = 5.0 * (4.0 * 86400 / (2 * np.pi * g)) ** (1 / 3) * (const.M_sun.si.value) ** (2 / 3)
    assert minimum_mass(5.0, 1.0, 4.0) == pytest.approx(approx / const.M_jup.si.value, rel=1e-4)
    with pytest.raises(ModelError, match="negative"):
        minimum_mass(-1.0, 1.0, 4.0)


def test_periastron_and_mean_anomaly_round_trip():
    tp = time_periastron_from_mean_anomaly(np.array([-3.0, 0.0, 2.5]), 12.0, 2460000.0)
    np.testing.assert_allclose(mean_anomaly(2460000.0, 12.0, tp), [-3.0, 0.0, 2.5], atol=1e-9)
