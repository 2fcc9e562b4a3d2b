"""Sun, Moon, sidereal time and barycentric terms: astropy at hourly nodes, splines between.

astropy's transforms cost about a millisecond per time, far too much for a 2-minute
grid over many nights. Everything they provide here changes smoothly over hours,
so :func:`node_ephemeris` evaluates it once per hour of each night span (local noon
to the next local noon) and :meth:`NodeEphemeris.at` carries it to any time in a
span with cubic splines. The topocentric correction (observer position) is applied
exactly at each requested time, so the Moon's diurnal parallax is not interpolated.

Frame: true equator and equinox of date (astropy ``TETE``), geocentric apparent
places. Diurnal aberration (under 0.33 arcsec) and polar motion in the observer
vector (under 0.5 arcsec) are neglected.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import CubicSpline

from planner.sky import offline

__all__ = [
    "EphemerisAt",
    "NodeEphemeris",
    "illuminated_fraction",
    "node_ephemeris",
    "radec_from_unit",
    "unit_from_radec",
]

#: Spacing of the astropy evaluations [d] (one hour).
NODE_STEP_D = 1.0 / 24.0
_C_KM_S = 299792.458


def unit_from_radec(ra_deg: ArrayLike, dec_deg: ArrayLike) -> NDArray[np.float64]:
    """Return unit vectors, shape (..., 3), from right ascension and declination [deg]."""
    a = np.radians(ra_deg)
    d = np.radians(dec_deg)
    return np.stack(
        np.broadcast_arrays(np.cos(d) * np.cos(a), np.cos(d) * np.sin(a), np.sin(d)), -1
    )


def radec_from_unit(vec: ArrayLike) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Return right ascension in ``[0, 360)`` and declination [deg] of (..., 3) vectors."""
    v = np.asarray(vec, dtype=float)
    ra = np.mod(np.degrees(np.arctan2(v[..., 1], v[..., 0])), 360.0)
    dec = np.degrees(np.arctan2(v[..., 2], np.hypot(v[..., 0], v[..., 1])))
    return ra, dec


def illuminated_fraction(sun_geo: ArrayLike, moon_geo: ArrayLike) -> NDArray[np.float64]:
    """Illuminated fraction of the Moon from geocentric Sun and Moon position vectors.

    Parameters
    ----------
    sun_geo, moon_geo : array_like, shape (..., 3)
        Geocentric positions of the Sun and the Moon, same frame and unit.

    Returns
    -------
    ndarray, shape (...)
        ``k = (1 + cos i) / 2``, ``i`` the Sun-Moon-Earth phase angle.

    Notes
    -----
    Meeus (1998), *Astronomical Algorithms*, eq. 48.1, with the phase angle taken
    from the vectors instead of from elongation (eq. 48.3).
    """
    m = np.asarray(moon_geo, dtype=float)
    to_sun = np.asarray(sun_geo, dtype=float) - m
    cos_i = -np.sum(to_sun * m, -1) / (np.linalg.norm(to_sun, axis=-1) * np.linalg.norm(m, axis=-1))
    return 0.5 * (1.0 + np.clip(cos_i, -1.0, 1.0))


@dataclass(frozen=True)
class EphemerisAt:
    """Sun, Moon and time terms at a set of times (all shape (n,) or (n, 3)).

    Attributes
    ----------
    times_jd : ndarray, shape (n,)
        Times, JD (UTC scale) [d].
    last_deg : ndarray, shape (n,)
        Local apparent sidereal time [deg], in ``[0, 360)``.
    sun_unit, moon_unit : ndarray, shape (n, 3)
        Topocentric apparent unit vectors (true equator and equinox of date).
    moon_illumination : ndarray, shape (n,)
        Geocentric illuminated fraction of the Moon.
    tdb_jd : ndarray, shape (n,)
        The same instants on the TDB scale, JD [d].
    observer_bary_ls : ndarray, shape (n, 3)
        Observer's barycentric position (ICRS axes) [light-seconds].
    """

    times_jd: NDArray[np.float64]
    last_deg: NDArray[np.float64]
    sun_unit: NDArray[np.float64]
    moon_unit: NDArray[np.float64]
    moon_illumination: NDArray[np.float64]
    tdb_jd: NDArray[np.float64]
    observer_bary_ls: NDArray[np.float64]


@dataclass(frozen=True)
class NodeEphemeris:
    """Hourly astropy values over a set of spans, ready for interpolation.

    Attributes
    ----------
    span_start_jd : ndarray, shape (n_spans,)
        First node of each span, JD UTC [d]; nodes follow every ``NODE_STEP_D``.
    n_nodes : int
        Nodes per span.
    values : ndarray, shape (n_spans, n_nodes, 12)
        Columns: unwrapped apparent sidereal time at Greenwich [deg], Sun geocentric
        (3) and Moon geocentric (3) apparent positions [km], TDB - UTC [s],
        observer barycentric position (3) [light-seconds], unused padding (1).
    observer_itrs_km : ndarray, shape (3,)
        Site position, Earth-fixed [km].
    longitude_deg : float
        East longitude of the site [deg].
    """

    span_start_jd: NDArray[np.float64]
    n_nodes: int
    values: NDArray[np.float64]
    observer_itrs_km: NDArray[np.float64]
    longitude_deg: float

    def at(self, span: int, times_jd: ArrayLike) -> EphemerisAt:
        """Interpolate span ``span`` to ``times_jd`` (inside the span) and add parallax."""
        t = np.asarray(times_jd, dtype=float)
        nodes = self.span_start_jd[span] + NODE_STEP_D * np.arange(self.n_nodes)
        if t.size and (t.min() < nodes[0] - 1e-9 or t.max() > nodes[-1] + 1e-9):
            raise ValueError("times lie outside the ephemeris span; this is a nightbits bug.")
        v = CubicSpline(nodes, self.values[span])(t)
        last = np.mod(v[:, 0] + self.longitude_deg, 360.0)
        rho = np.hypot(self.observer_itrs_km[0], self.observer_itrs_km[1])
        lr = np.radians(last)
        observer = np.stack(
            [rho * np.cos(lr), rho * np.sin(lr), np.full_like(lr, self.observer_itrs_km[2])], -1
        )
        sun, moon = v[:, 1:4], v[:, 4:7]
        sun_top = sun - observer
        moon_top = moon - observer
        return EphemerisAt(
            times_jd=t,
            last_deg=last,
            sun_unit=sun_top / np.linalg.norm(sun_top, axis=-1, keepdims=True),
            moon_unit=moon_top / np.linalg.norm(moon_top, axis=-1, keepdims=True),
            moon_illumination=illuminated_fraction(sun, moon),
            tdb_jd=t + v[:, 7] / 86400.0,
            observer_bary_ls=v[:, 8:11],
        )


def node_ephemeris(location, span_start_jd: ArrayLike, span_days: float = 1.0) -> NodeEphemeris:
    """Evaluate astropy at hourly nodes over spans ``[start, start + span_days]``.

    The last few results are kept (keyed by site and spans), so computing the
    nights and then the sky of the same run evaluates astropy once.

    Parameters
    ----------
    location : astropy.coordinates.EarthLocation
        The site.
    span_start_jd : array_like, shape (n_spans,)
        Start of each span, JD UTC [d].
    span_days : float
        Length of every span [d].

    Returns
    -------
    NodeEphemeris
    """
    starts = np.atleast_1d(np.asarray(span_start_jd, dtype=float))
    key = (
        float(location.lon.deg),
        float(location.lat.deg),
        float(location.height.to_value("m")),
        tuple(starts.tolist()),
        float(span_days),
    )
    return _cached_nodes(key)


@functools.lru_cache(maxsize=8)
def _cached_nodes(key) -> NodeEphemeris:
    import astropy.units as u
    from astropy.coordinates import TETE, EarthLocation, get_body, get_body_barycentric
    from astropy.time import Time

    lon, lat, height, starts, span_days = key
    location = EarthLocation.from_geodetic(lon * u.deg, lat * u.deg, height * u.m)
    starts = np.array(starts)
    n_nodes = int(np.ceil(span_days / NODE_STEP_D - 1e-9)) + 1
    jd = (starts[:, None] + NODE_STEP_D * np.arange(n_nodes)).ravel()
    with offline.quiet_astropy():
        t = Time(jd, format="jd", scale="utc")
        gast = t.sidereal_time("apparent", longitude=0.0).deg
        frame = TETE(obstime=t)
        sun = get_body("sun", t).transform_to(frame).cartesian.xyz.to_value("km").T
        moon = get_body("moon", t).transform_to(frame).cartesian.xyz.to_value("km").T
        tdb = t.tdb
        tdb_minus_utc = (tdb.jd1 - t.jd1 + (tdb.jd2 - t.jd2)) * 86400.0
        earth = get_body_barycentric("earth", tdb).xyz.to_value("km").T
        obs_gcrs = location.get_gcrs_posvel(t)[0].xyz.to_value("km").T
    values = np.zeros((len(jd), 12))
    values[:, 0] = gast
    values[:, 1:4] = sun
    values[:, 4:7] = moon
    values[:, 7] = tdb_minus_utc
    values[:, 8:11] = (earth + obs_gcrs) / _C_KM_S
    values = values.reshape(len(starts), n_nodes, 12)
    values[:, :, 0] = np.degrees(np.unwrap(np.radians(values[:, :, 0]), axis=1))
    itrs = np.array(
        [location.x.to_value("km"), location.y.to_value("km"), location.z.to_value("km")]
    )
    return NodeEphemeris(starts, n_nodes, values, itrs, float(location.lon.deg))
