"""Kepler's equation, E - e sin E = M, solved for the eccentric anomaly E.

The solver is a non-iterative starter followed by one fifth-order correction step, run
through cache-sized blocks of the flattened inputs so that every temporary stays in cache.
"""

import numpy as np

from .errors import ModelError

__all__ = [
    "ECCENTRICITY_MAX",
    "eccentric_anomaly",
    "eccentric_anomaly_sincos",
    "kepler_residual",
]

#: Largest eccentricity for which the residual bound of 1e-12 rad is guaranteed.
ECCENTRICITY_MAX = 0.999

_BLOCK = 8192
_PI = np.pi
_TWO_PI = 2.0 * np.pi
_INV_TWO_PI = 1.0 / _TWO_PI
_ALPHA_0 = 3.0 * _PI**2 / (_PI**2 - 6.0)
_ALPHA_1 = 1.6 * _PI / (_PI**2 - 6.0)


def _check_eccentricity(e):
    if e.size and not (np.all(e >= 0.0) and np.all(e < 1.0)):
        bad = e[~((e >= 0.0) & (e < 1.0))].ravel()[0]
        raise ModelError(
            f"eccentricity {bad!r} is outside [0, 1): Kepler's equation for bound orbits needs "
            "0 <= e < 1, so clip or fix the eccentricity values passed in."
        )


def _solve_block(m, e, out, out_sin=None, out_cos=None):
    """Solve one 1-D block in place; ``e`` is a scalar or an array of the block's length.

    When `out_sin` and `out_cos` are given, sin E and cos E are written there too, from the
    starter's sine and cosine and the angle-addition formulas (series in the tiny step).
    """
    k = np.rint(m * _INV_TWO_PI)
    x = m - k * _TWO_PI  # reduced mean anomaly in [-pi, pi]
    np.multiply(k, _TWO_PI, out=k)  # k now holds the whole turns, in radians
    sign = x.copy()
    np.abs(x, out=x)
    one_m_e = 1.0 - e
    # Markley (1995) cubic starter on |M| in [0, pi].
    alpha = _ALPHA_0 + _ALPHA_1 * (_PI - x) / (1.0 + e)
    d = 3.0 * one_m_e + alpha * e
    x2 = x * x
    q = 2.0 * alpha * d * one_m_e - x2
    r = 3.0 * alpha * d * (d - one_m_e) * x + x2 * x
    q2 = q * q
    w = q2 * q
    w += r * r
    np.maximum(w, 0.0, out=w)
    np.sqrt(w, out=w)
    w += r
    np.power(w, 2.0 / 3.0, out=w)
    den = w * w
    den += w * q
    den += q2
    big_e = 2.0 * r * w
    big_e /= den
    big_e += x
    big_e /= d
    # One fifth-order correction (Markley 1995, eq. 20-21).
    sin_1 = np.sin(big_e)
    cos_1 = np.cos(big_e)
    s = sin_1 * e
    c = cos_1 * e
    f0 = big_e - s
    f0 -= x
    f1 = 1.0 - c
    d3 = -f0 / (f1 - 0.5 * f0 * s / f1)
    d4 = -f0 / (f1 + d3 * (0.5 * s + d3 * c * (1.0 / 6.0)))
    d5 = -f0 / (f1 + d4 * (0.5 * s + d4 * (c * (1.0 / 6.0) - d4 * s * (1.0 / 24.0))))
    big_e += d5
    np.copysign(big_e, sign, out=big_e)
    np.add(big_e, k, out=out)
    if out_sin is not None:
        # |d5| < 1e-2, so the series below are exact to rounding (next terms d^6 / 720).
        d2 = d5 * d5
        sin_d = d5 * (1.0 - d2 * (1.0 / 6.0 - d2 * (1.0 / 120.0)))
        cos_d = 1.0 - d2 * (0.5 - d2 * (1.0 / 24.0 - d2 * (1.0 / 720.0)))
        np.copysign(sin_1 * cos_d + cos_1 * sin_d, sign, out=out_sin)
        np.subtract(cos_1 * cos_d, sin_1 * sin_d, out=out_cos)


def _run(mean_anomaly, eccentricity, with_sincos):
    m = np.asarray(mean_anomaly, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    _check_eccentricity(e)
    shape = np.broadcast_shapes(m.shape, e.shape)
    outs = [np.empty(shape) for _ in range(3 if with_sincos else 1)]
    flats = [o.reshape(-1) for o in outs]
    n = flats[0].size
    flat_m = np.broadcast_to(m, shape).reshape(-1)
    scalar_e = e.size == 1
    if scalar_e:
        e_value = float(e.reshape(-1)[0])
    else:
        flat_e = np.broadcast_to(e, shape).reshape(-1)
    for lo in range(0, n, _BLOCK):
        hi = min(lo + _BLOCK, n)
        e_block = e_value if scalar_e else flat_e[lo:hi]
        _solve_block(flat_m[lo:hi], e_block, *(f[lo:hi] for f in flats))
    return outs


def eccentric_anomaly_sincos(mean_anomaly, eccentricity):
    """Eccentric anomaly with its sine and cosine, saving two trigonometric calls.

    Parameters
    ----------
    mean_anomaly : array_like, any shape
        Mean anomaly M [rad].
    eccentricity : array_like, broadcastable with `mean_anomaly`
        Eccentricity, 0 <= e < 1.

    Returns
    -------
    E, sin_E, cos_E : ndarray, broadcast shape of the inputs
        As :func:`eccentric_anomaly`, plus sin E and cos E (to rounding error).
    """
    return tuple(_run(mean_anomaly, eccentricity, True))


def eccentric_anomaly(mean_anomaly, eccentricity):
    """Eccentric anomaly for given mean anomalies and eccentricities.

    Parameters
    ----------
    mean_anomaly : array_like, any shape
        Mean anomaly M [rad], any real value.
    eccentricity : array_like, broadcastable with `mean_anomaly`
        Orbital eccentricity e, 0 <= e < 1 (residual bound guaranteed up to 0.999).

    Returns
    -------
    E : ndarray, broadcast shape of the inputs
        Eccentric anomaly [rad], on the same revolution as M (``E - M`` lies in [-pi, pi]).

    Raises
    ------
    ModelError
        If an eccentricity lies outside [0, 1).

    Notes
    -----
    The starter is the cubic approximation of Markley (1995, Celestial Mechanics and
    Dynamical Astronomy 63, 101), followed by his fifth-order Householder-type correction.
    M is first reduced to [-pi, pi] and the odd symmetry E(-M) = -E(M) is used. The residual
    ``|E - e sin E - M|`` (with M reduced) stays below 1e-12 rad for 0 <= e <= 0.999.
    """
    return _run(mean_anomaly, eccentricity, False)[0]


def kepler_residual(eccentric, mean_anomaly, eccentricity):
    """Residual of Kepler's equation, with M reduced to E's revolution.

    Parameters
    ----------
    eccentric : array_like
        Eccentric anomaly E [rad].
    mean_anomaly : array_like, broadcastable with `eccentric`
        Mean anomaly M [rad].
    eccentricity : array_like, broadcastable with `eccentric`
        Eccentricity e.

    Returns
    -------
    residual : ndarray
        ``E' - e sin E' - M'`` [rad] where M' is M reduced to [-pi, pi] and E' is E shifted by
        the same whole number of turns, so the value is free of the rounding of large M.
    """
    big_e = np.asarray(eccentric, dtype=float)
    m = np.asarray(mean_anomaly, dtype=float)
    turns = np.rint(m * _INV_TWO_PI) * _TWO_PI
    e_red = big_e - turns
    return e_red - eccentricity * np.sin(e_red) - (m - turns)
