"""The Keplerian radial-velocity curve and its conversions.

v(t) = K [cos(nu + omega) + e cos omega], with nu the true anomaly and omega the star's
argument of periastron. Everything broadcasts: pass parameters of shape ``(n_samples, 1)`` and
times of shape ``(n_times,)`` to get ``(n_samples, n_times)``.
"""

import numpy as np

from .errors import ModelError
from .kepler import eccentric_anomaly

__all__ = [
    "keplerian_basis",
    "mean_anomaly",
    "minimum_mass",
    "radial_velocity",
    "semi_amplitude",
    "time_periastron_from_mean_anomaly",
    "true_anomaly",
]

_DAY_S = 86400.0


def _constants():
    """G, the solar and Jovian masses [SI] from astropy (imported here: astropy is slow)."""
    from astropy import constants as const

    # IAU 2015 nominal mass parameters divided by the CODATA G, as astropy defines them.
    return const.G.si.value, const.M_sun.si.value, const.M_jup.si.value


def mean_anomaly(t, period, time_periastron):
    """Mean anomaly at times `t`.

    Parameters
    ----------
    t : array_like, broadcastable
        Times, BJD_TDB [d].
    period : array_like, broadcastable
        Orbital period [d].
    time_periastron : array_like, broadcastable
        Time of periastron passage, BJD_TDB [d].

    Returns
    -------
    M : ndarray
        Mean anomaly 2 pi (t - t_p) / P [rad], not reduced.
    """
    t = np.asarray(t, dtype=float)
    return (2.0 * np.pi) * (t - time_periastron) / period


def time_periastron_from_mean_anomaly(mean_anomaly_ref, period, t_ref):
    """Time of periastron from the mean anomaly at a reference epoch.

    Parameters
    ----------
    mean_anomaly_ref : array_like, broadcastable
        Mean anomaly at `t_ref` [rad].
    period : array_like, broadcastable
        Orbital period [d].
    t_ref : float or array_like, broadcastable
        Reference epoch, BJD_TDB [d].

    Returns
    -------
    time_periastron : ndarray
        t_p = t_ref - M_ref P / (2 pi), BJD_TDB [d] (the passage nearest `t_ref` when M_ref is
        in [-pi, pi]).
    """
    m = np.asarray(mean_anomaly_ref, dtype=float)
    return t_ref - m * period / (2.0 * np.pi)


def true_anomaly(eccentric, eccentricity):
    """Return the true anomaly for given eccentric anomalies.

    Parameters
    ----------
    eccentric : array_like, broadcastable
        Eccentric anomaly E [rad].
    eccentricity : array_like, broadcastable
        Eccentricity e, 0 <= e < 1.

    Returns
    -------
    nu : ndarray
        True anomaly [rad] on the same revolution as E.

    Notes
    -----
    tan(nu / 2) = sqrt((1 + e) / (1 - e)) tan(E / 2), evaluated with ``arctan2`` so it is
    exact at E = pi (the textbook relation, e.g. Murray & Dermott 1999, eq. 2.46).
    """
    big_e = np.asarray(eccentric, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    turns = np.rint(big_e / (2.0 * np.pi)) * (2.0 * np.pi)
    half = 0.5 * (big_e - turns)
    nu = 2.0 * np.arctan2(np.sqrt(1.0 + e) * np.sin(half), np.sqrt(1.0 - e) * np.cos(half))
    return nu + turns


def keplerian_basis(t, period, eccentricity, time_periastron):
    """Return the two curves whose linear combination is a planet's velocity.

    Parameters
    ----------
    t : array_like, broadcastable
        Times, BJD_TDB [d].
    period, eccentricity, time_periastron : array_like, broadcastable
        Period [d], eccentricity, time of periastron BJD_TDB [d].

    Returns
    -------
    cos_term : ndarray
        cos(nu) + e, the curve multiplying A = K cos omega.
    sin_term : ndarray
        sin(nu), the curve multiplying -B = -K sin omega; v = A cos_term - B sin_term.
    """
    e = np.asarray(eccentricity, dtype=float)
    big_e = eccentric_anomaly(mean_anomaly(t, period, time_periastron), e)
    cos_e = np.cos(big_e)
    sin_e = np.sin(big_e)
    inv = 1.0 / (1.0 - e * cos_e)
    cos_term = (cos_e - e) * inv + e
    sin_term = np.sqrt(1.0 - e * e) * sin_e * inv
    return cos_term, sin_term


def radial_velocity(t, period, semi_amplitude, eccentricity, omega, time_periastron):
    """Stellar radial velocity of one Keplerian orbit.

    Parameters
    ----------
    t : array_like, shape (n_times,) or broadcastable
        Times, BJD_TDB [d].
    period : array_like, broadcastable (e.g. shape (n_samples, 1))
        Orbital period [d].
    semi_amplitude : array_like, broadcastable
        Velocity semi-amplitude K [m/s].
    eccentricity : array_like, broadcastable
        Eccentricity e, 0 <= e < 1.
    omega : array_like, broadcastable
        Argument of periastron of the star's orbit [rad].
    time_periastron : array_like, broadcastable
        Time of periastron passage, BJD_TDB [d].

    Returns
    -------
    v : ndarray, broadcast shape (e.g. (n_samples, n_times))
        Radial velocity K [cos(nu + omega) + e cos omega] [m/s], no offset.
    """
    cos_term, sin_term = keplerian_basis(t, period, eccentricity, time_periastron)
    k = np.asarray(semi_amplitude, dtype=float)
    return k * (np.cos(omega) * cos_term - np.sin(omega) * sin_term)


def semi_amplitude(m_sin_i, m_star, period, eccentricity=0.0):
    """Reflex velocity semi-amplitude of a star with one companion.

    Parameters
    ----------
    m_sin_i : array_like, broadcastable
        Companion minimum mass m sin i [Jupiter masses, IAU nominal].
    m_star : array_like, broadcastable
        Stellar mass [solar masses, IAU nominal].
    period : array_like, broadcastable
        Orbital period [d].
    eccentricity : array_like, broadcastable, optional
        Eccentricity e.

    Returns
    -------
    K : ndarray
        Semi-amplitude [m/s].

    Notes
    -----
    K = (2 pi G / P)^(1/3) m sin i / (M_star + m)^(2/3) / sqrt(1 - e^2), with the companion's
    mass in the total (e.g. Lovis & Fischer 2010, in *Exoplanets*, ed. Seager, eq. 14), taking
    sin i = 1 in the total mass.
    """
    g, m_sun, m_jup = _constants()
    m_p = np.asarray(m_sin_i, dtype=float) * m_jup
    m_s = np.asarray(m_star, dtype=float) * m_sun
    p = np.asarray(period, dtype=float) * _DAY_S
    e = np.asarray(eccentricity, dtype=float)
    return (
        (2.0 * np.pi * g / p) ** (1.0 / 3.0)
        * m_p
        / (m_s + m_p) ** (2.0 / 3.0)
        / np.sqrt(1.0 - e * e)
    )


def minimum_mass(semi_amplitude, m_star, period, eccentricity=0.0):
    """Companion minimum mass from the semi-amplitude (the inverse of :func:`semi_amplitude`).

    Parameters
    ----------
    semi_amplitude : array_like, broadcastable
        K [m/s], non-negative.
    m_star : array_like, broadcastable
        Stellar mass [solar masses].
    period : array_like, broadcastable
        Orbital period [d].
    eccentricity : array_like, broadcastable, optional
        Eccentricity e.

    Returns
    -------
    m_sin_i : ndarray
        Minimum mass [Jupiter masses].

    Notes
    -----
    Solves m^3 / (M + m)^2 = f, with the mass function f = K^3 (1 - e^2)^(3/2) P / (2 pi G),
    by the fixed-point iteration m <- (f (M + m)^2)^(1/3), which contracts by at most 2/3 per
    step and converges to rounding error.
    """
    k = np.asarray(semi_amplitude, dtype=float)
    if np.any(k < 0):
        raise ModelError(
            "a semi-amplitude passed to minimum_mass is negative: K is an amplitude, so pass "
            "its absolute value."
        )
    g, m_sun, m_jup = _constants()
    m_s = np.asarray(m_star, dtype=float) * m_sun
    p = np.asarray(period, dtype=float) * _DAY_S
    e = np.asarray(eccentricity, dtype=float)
    f = k**3 * (1.0 - e * e) ** 1.5 * p / (2.0 * np.pi * g)
    m = np.cbrt(f * m_s * m_s)
    for _ in range(200):
        new = np.cbrt(f * (m_s + m) ** 2)
        done = np.all(np.abs(new - m) <= 1e-15 * np.maximum(new, 1e-300))
        m = new
        if done:
            break
    return m / m_jup
