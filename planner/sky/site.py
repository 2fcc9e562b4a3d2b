"""The observing site, the run's dates, and each night's twilight and dark window.

A night is named by its local evening date. Its boundaries are computed, not
assumed: the Sun's geometric altitude is evaluated every five minutes from local
noon to the next local noon (from hourly astropy nodes, see
:mod:`planner.sky.ephemeris`) and the crossings are found as roots of a cubic spline
through those samples. Sunset and sunrise use the conventional altitude of the
Sun's centre, -0.833 deg (refraction plus semi-diameter; Meeus 1998, ch. 15).
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
from scipy.interpolate import CubicSpline

from planner.clock import jd_from_datetime
from planner.errors import ScenarioError, SkyError
from planner.sky.airmass import altaz_from_hadec
from planner.sky.ephemeris import EphemerisAt, NodeEphemeris, node_ephemeris, radec_from_unit

__all__ = [
    "Night",
    "SUNSET_ALTITUDE_DEG",
    "Site",
    "TWILIGHT_ALTITUDES_DEG",
    "dark_windows",
    "night_span_start_jd",
    "run_dates",
    "twilight_altitude",
]

#: Sun altitude defining each named twilight [deg] (standard definitions, common practice).
TWILIGHT_ALTITUDES_DEG = {"civil": -6.0, "nautical": -12.0, "astronomical": -18.0}
#: Altitude of the Sun's centre at sunset and sunrise [deg] (Meeus 1998, ch. 15).
SUNSET_ALTITUDE_DEG = -0.8333
_SAMPLE_D = 5.0 / 1440.0


@dataclass(frozen=True)
class Site:
    """An observatory site and its telescope's pointing limits.

    Attributes
    ----------
    latitude_deg : float
        Geodetic latitude [deg], north positive.
    longitude_deg : float
        Longitude [deg], east positive.
    elevation_m : float
        Height above the reference ellipsoid [m].
    timezone : str
        IANA time-zone name (for local dates and printing), e.g. ``"Atlantic/Canary"``.
    min_altitude_deg, max_altitude_deg : float
        Lowest and highest altitude the telescope may point at [deg].
    """

    latitude_deg: float
    longitude_deg: float
    elevation_m: float
    timezone: str
    min_altitude_deg: float = 15.0
    max_altitude_deg: float = 89.0

    def __post_init__(self) -> None:
        checks = [
            (-90.0 <= self.latitude_deg <= 90.0, "latitude_deg must lie in [-90, 90]"),
            (-180.0 <= self.longitude_deg <= 360.0, "longitude_deg must lie in [-180, 360]"),
            (-500.0 <= self.elevation_m <= 9000.0, "elevation_m must lie in [-500, 9000] m"),
            (
                0.0 <= self.min_altitude_deg < self.max_altitude_deg <= 90.0,
                "altitude limits need 0 <= min_altitude_deg < max_altitude_deg <= 90",
            ),
        ]
        for ok, message in checks:
            if not ok:
                raise ScenarioError(f"Site: {message}; fix the site section of the scenario.")
        try:
            ZoneInfo(self.timezone)
        except (ZoneInfoNotFoundError, ValueError) as exc:
            raise ScenarioError(
                f"Site: time zone {self.timezone!r} is not an IANA name; use one such as "
                "'America/Santiago'."
            ) from exc

    def location(self):
        """Return the site as an astropy ``EarthLocation`` (from the numbers, no registry)."""
        import astropy.units as u
        from astropy.coordinates import EarthLocation

        return EarthLocation.from_geodetic(
            self.longitude_deg * u.deg, self.latitude_deg * u.deg, self.elevation_m * u.m
        )


@dataclass(frozen=True)
class Night:
    """One night of the run: Sun and Moon events, all JD on the UTC scale [d].

    Attributes
    ----------
    date : str
        Local evening date, ``YYYY-MM-DD``.
    sunset_jd, sunrise_jd : float
        Sun's centre at -0.833 deg going down / coming up (where the Sun does not
        rise that day, the ends of the dark window).
    dark_start_jd, dark_end_jd : float
        Sun at the twilight altitude going down / coming up: the usable window
        (in polar night, when the Sun stays below it, local noon to local noon).
    twilight_altitude_deg : float
        The Sun altitude that defines the dark window [deg].
    moon_illumination : float
        Moon's illuminated fraction at the middle of the dark window.
    moon_up : tuple of (float, float)
        Intervals inside the dark window with the Moon's centre above the
        geometric horizon (JD UTC pairs); empty when it stays down.
    """

    date: str
    sunset_jd: float
    dark_start_jd: float
    dark_end_jd: float
    sunrise_jd: float
    twilight_altitude_deg: float
    moon_illumination: float
    moon_up: tuple[tuple[float, float], ...]

    @property
    def dark_hours(self) -> float:
        """Length of the dark window [h]."""
        return (self.dark_end_jd - self.dark_start_jd) * 24.0


def run_dates(first_date: str, n_nights: int) -> tuple[str, ...]:
    """Local evening dates of ``n_nights`` consecutive nights starting at ``first_date``.

    Parameters
    ----------
    first_date : str
        ``YYYY-MM-DD``.
    n_nights : int
        Number of nights, at least 1.

    Returns
    -------
    tuple of str
    """
    day = _parse_date(first_date, "run_dates")
    if isinstance(n_nights, bool) or not isinstance(n_nights, (int, np.integer)) or n_nights < 1:
        raise ScenarioError(f"run_dates: n_nights must be a positive integer, got {n_nights!r}.")
    return tuple((day + _dt.timedelta(days=k)).isoformat() for k in range(int(n_nights)))


def twilight_altitude(twilight: str | float) -> float:
    """Return the Sun altitude [deg] of a twilight name or number, checked."""
    if isinstance(twilight, str):
        if twilight not in TWILIGHT_ALTITUDES_DEG:
            raise ScenarioError(
                f"twilight {twilight!r} is unknown; use 'civil', 'nautical', 'astronomical' or a "
                "Sun altitude in degrees such as -15."
            )
        return TWILIGHT_ALTITUDES_DEG[twilight]
    value = float(twilight)
    if not (math.isfinite(value) and -30.0 <= value <= 0.0):
        raise ScenarioError(
            f"twilight altitude {twilight!r} deg is outside [-30, 0]; give the Sun's altitude "
            "at the start of the dark window, such as -15."
        )
    return value


def night_span_start_jd(site: Site, date: str) -> float:
    """Return the JD UTC of local noon on ``date`` at the site (start of its night's span)."""
    day = _parse_date(date, "night date")
    noon = _dt.datetime(day.year, day.month, day.day, 12, tzinfo=ZoneInfo(site.timezone))
    return jd_from_datetime(noon)


def dark_windows(
    site: Site, dates, twilight: str | float = "nautical", ephemeris: NodeEphemeris | None = None
) -> tuple[Night, ...]:
    """Compute each night's sunset, dark window, sunrise and Moon summary.

    Parameters
    ----------
    site : Site
    dates : sequence of str
        Local evening dates ``YYYY-MM-DD``.
    twilight : {'civil', 'nautical', 'astronomical'} or float
        Definition of the dark window (Sun altitude -6, -12, -18 deg, or a number).
    ephemeris : NodeEphemeris, optional
        Nodes for these dates' spans (from :func:`node_ephemeris` with
        :func:`night_span_start_jd`); computed when omitted.

    Returns
    -------
    tuple of Night

    Raises
    ------
    SkyError
        Where the Sun never gets as low as the twilight altitude (or never sets).
    """
    h_dark = twilight_altitude(twilight)
    dates = tuple(dates)
    if not dates:
        raise ScenarioError("dark_windows: the run has no dates; give at least one night.")
    starts = np.array([night_span_start_jd(site, d) for d in dates])
    if ephemeris is None:
        ephemeris = node_ephemeris(site.location(), starts)
    nights = []
    for k, date in enumerate(dates):
        t = starts[k] + np.arange(int(round(1.0 / _SAMPLE_D)) + 1) * _SAMPLE_D
        eph = ephemeris.at(k, t)
        sun_alt = _body_altitude(eph, eph.sun_unit, site.latitude_deg)
        sunset, sunrise = _crossings(t, sun_alt, SUNSET_ALTITUDE_DEG)
        dark_start, dark_end = _crossings(t, sun_alt, h_dark)
        name = twilight if isinstance(twilight, str) else f"Sun altitude {h_dark:g} deg"
        if dark_start is None:
            raise SkyError(
                f"Night {date}: at latitude {site.latitude_deg:g} deg the Sun never gets down to "
                f"{h_dark:g} deg ({name} twilight), so there is no dark window; choose a lighter "
                "twilight or other dates."
            )
        moon_alt = _body_altitude(eph, eph.moon_unit, site.latitude_deg)
        mid = 0.5 * (dark_start + dark_end)
        nights.append(
            Night(
                date=date,
                sunset_jd=sunset if sunset is not None else dark_start,
                dark_start_jd=dark_start,
                dark_end_jd=dark_end,
                sunrise_jd=sunrise if sunrise is not None else dark_end,
                twilight_altitude_deg=h_dark,
                moon_illumination=float(np.interp(mid, t, eph.moon_illumination)),
                moon_up=_up_intervals(dark_start, dark_end, t, moon_alt),
            )
        )
    return tuple(nights)


def _parse_date(text: str, where: str) -> _dt.date:
    try:
        return _dt.date.fromisoformat(str(text))
    except ValueError as exc:
        raise ScenarioError(f"{where}: {text!r} is not a date; write it as YYYY-MM-DD.") from exc


def _body_altitude(eph: EphemerisAt, unit, latitude_deg: float):
    ra, dec = radec_from_unit(unit)
    return altaz_from_hadec(eph.last_deg - ra, dec, latitude_deg)[0]


def _crossings(t, alt, level):
    """First downward and last upward crossing of ``level``; (None, None) if never below.

    When the Sun stays below ``level`` for the whole span, the span itself is
    returned (polar night: dark from noon to noon).
    """
    below = alt < level
    if not below.any():
        return None, None
    if below.all():
        return float(t[0]), float(t[-1])
    roots = CubicSpline(t, alt - level).roots(extrapolate=False)
    roots = np.sort(roots[np.isfinite(roots)])
    down = [r for r in roots if np.interp(r + 1e-3, t, alt) < level]
    up = [r for r in roots if np.interp(r + 1e-3, t, alt) > level]
    start = float(down[0]) if down and not below[0] else float(t[0])
    end = float(up[-1]) if up and not below[-1] else float(t[-1])
    return start, end


def _up_intervals(start, end, t, alt):
    """Intervals of ``[start, end]`` with ``alt > 0`` (roots from a spline over the span)."""
    roots = CubicSpline(t, alt).roots(extrapolate=False)
    edges = np.concatenate([[start], np.sort(roots[(roots > start) & (roots < end)]), [end]])
    out = []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        if np.interp(0.5 * (a + b), t, alt) > 0.0:
            out.append((float(a), float(b)))
    return tuple(out)
