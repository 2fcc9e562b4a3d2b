"""Sky geometry of every target on the run's time grid, vectorised over targets.

The grid of each night runs from its dark start in steps of ``step_s``, the last
point being the first one at or after the dark end (so the grid overshoots the
dark window by less than one step; :mod:`planner.sky.observability` checks the exact
window). Per night, astropy gives each target's apparent place (true equator and
equinox of date, at the middle of the night) in one call; hour angles then follow
from the local apparent sidereal time with numpy. The Sun, the Moon, sidereal
time and the barycentric terms come from hourly nodes (:mod:`planner.sky.ephemeris`).
Measured accuracy against astropy's full AltAz transform: see ``docs/sky.md``.

:func:`pointing_at` evaluates arbitrary (target, time) pairs with astropy's own
AltAz transform, independently of the grid path, for exact exposure start and end
times.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from planner.errors import ScenarioError
from planner.sky import offline
from planner.sky.airmass import airmass_kasten_young, altaz_from_hadec, wrap_degrees
from planner.sky.ephemeris import node_ephemeris, radec_from_unit, unit_from_radec
from planner.sky.site import Night, Site, night_span_start_jd

__all__ = ["Pointing", "Sky", "compute_sky", "mid_exposure_columns", "pointing_at"]


@dataclass(frozen=True)
class Sky:
    """Where every target and the Sun and Moon stand at every grid time of the run.

    Attributes
    ----------
    times_jd : ndarray, shape (n_times,)
        Grid times, JD (UTC scale) [d], increasing; nights follow one another.
    night_index : ndarray of int, shape (n_times,)
        Index into ``nights`` of each grid time.
    step_s : float
        Grid step inside a night [s].
    site : Site
        The site (its altitude limits are used by :mod:`planner.sky.observability`).
    nights : tuple of Night
        The nights the grid covers.
    names : tuple of str
        Target names, length ``n_targets``.
    altitude_deg, azimuth_deg : ndarray, shape (n_targets, n_times)
        Geometric altitude [deg]; azimuth from north through east [deg].
    hour_angle_deg : ndarray, shape (n_targets, n_times)
        Local apparent hour angle in ``[-180, 180)`` [deg], positive west.
    airmass : ndarray, shape (n_targets, n_times)
        Kasten and Young (1989) airmass of the geometric altitude.
    moon_separation_deg : ndarray, shape (n_targets, n_times)
        Angle between the target and the topocentric Moon [deg].
    bjd_tdb : ndarray, shape (n_targets, n_times)
        Barycentric (TDB) Julian date of each grid instant for each target [d]
        (Roemer delay to the solar-system barycentre, proper motion neglected).
    sun_altitude_deg, moon_altitude_deg : ndarray, shape (n_times,)
        Geometric altitudes of the Sun's and the Moon's centres [deg].
    moon_illumination : ndarray, shape (n_times,)
        Moon's illuminated fraction, 0 to 1.

    The arrays made by :func:`compute_sky` are read-only.
    """

    times_jd: NDArray[np.float64]
    night_index: NDArray[np.int64]
    step_s: float
    site: Site
    nights: tuple[Night, ...]
    names: tuple[str, ...]
    altitude_deg: NDArray[np.float64]
    azimuth_deg: NDArray[np.float64]
    hour_angle_deg: NDArray[np.float64]
    airmass: NDArray[np.float64]
    moon_separation_deg: NDArray[np.float64]
    bjd_tdb: NDArray[np.float64]
    sun_altitude_deg: NDArray[np.float64]
    moon_altitude_deg: NDArray[np.float64]
    moon_illumination: NDArray[np.float64]

    @property
    def n_targets(self) -> int:
        """Number of targets."""
        return self.altitude_deg.shape[0]


@dataclass(frozen=True)
class Pointing:
    """Exact positions for (target, time) pairs (all arrays of the broadcast shape).

    Attributes
    ----------
    altitude_deg, azimuth_deg, hour_angle_deg, airmass, moon_separation_deg : ndarray
        As in :class:`Sky`, from astropy's full transforms.
    """

    altitude_deg: NDArray[np.float64]
    azimuth_deg: NDArray[np.float64]
    hour_angle_deg: NDArray[np.float64]
    airmass: NDArray[np.float64]
    moon_separation_deg: NDArray[np.float64]


def _check_targets(ra_deg, dec_deg, names):
    ra = np.atleast_1d(np.asarray(ra_deg, dtype=float))
    dec = np.atleast_1d(np.asarray(dec_deg, dtype=float))
    if ra.ndim != 1 or ra.shape != dec.shape or ra.size == 0:
        raise ScenarioError(
            f"compute_sky: ra_deg and dec_deg must be equal-length 1-D lists of at least one "
            f"target, got shapes {ra.shape} and {dec.shape}."
        )
    bad = np.flatnonzero(~(np.isfinite(ra) & np.isfinite(dec) & (np.abs(dec) <= 90.0)))
    if bad.size:
        raise ScenarioError(
            f"compute_sky: target {bad[0]} has ra={ra[bad[0]]!r}, dec={dec[bad[0]]!r}; give finite "
            "ICRS degrees with |dec| <= 90."
        )
    if names is None:
        names = tuple(f"target {k}" for k in range(ra.size))
    names = tuple(str(n) for n in names)
    if len(names) != ra.size:
        raise ScenarioError(f"compute_sky: {len(names)} names given for {ra.size} targets.")
    return ra, dec, names


def compute_sky(
    site: Site,
    nights: tuple[Night, ...],
    ra_deg: ArrayLike,
    dec_deg: ArrayLike,
    step_s: float = 120.0,
    names=None,
) -> Sky:
    """Compute the sky geometry of all targets over all nights on one grid.

    Parameters
    ----------
    site : Site
    nights : sequence of Night
        From :func:`planner.sky.site.dark_windows`.
    ra_deg, dec_deg : array_like, shape (n_targets,)
        ICRS coordinates [deg] (epoch of the run; proper motion is not applied).
    step_s : float
        Grid step [s], between 10 and 1800.
    names : sequence of str, optional
        Target names for messages; default ``"target k"``.

    Returns
    -------
    Sky
    """
    ra, dec, names = _check_targets(ra_deg, dec_deg, names)
    nights = tuple(nights)
    if not nights:
        raise ScenarioError("compute_sky: no nights given; compute them with dark_windows first.")
    if not (10.0 <= float(step_s) <= 1800.0):
        raise ScenarioError(f"compute_sky: step_s={step_s!r} s is outside [10, 1800] s.")
    step_d = float(step_s) / 86400.0
    starts = np.array([night_span_start_jd(site, n.date) for n in nights])
    location = site.location()
    eph = node_ephemeris(location, starts, span_days=1.0)
    mids = np.array([0.5 * (n.dark_start_jd + n.dark_end_jd) for n in nights])
    app_ra, app_dec = _apparent_places(ra, dec, mids)  # (n_targets, n_nights)
    icrs_unit = unit_from_radec(ra, dec)  # (n_targets, 3)

    parts = {k: [] for k in ("t", "i", "alt", "az", "ha", "sep", "bjd", "sun", "moon", "ill")}
    for k, night in enumerate(nights):
        n_steps = int(np.ceil((night.dark_end_jd - night.dark_start_jd) / step_d - 1e-9))
        t = night.dark_start_jd + step_d * np.arange(n_steps + 1)
        e = eph.at(k, t)
        ha = wrap_degrees(e.last_deg[None, :] - app_ra[:, k : k + 1])
        alt, az = altaz_from_hadec(ha, app_dec[:, k : k + 1], site.latitude_deg)
        target_unit = unit_from_radec(app_ra[:, k], app_dec[:, k])
        cos_sep = np.clip(target_unit @ e.moon_unit.T, -1.0, 1.0)
        parts["t"].append(t)
        parts["i"].append(np.full(t.size, k))
        parts["alt"].append(alt)
        parts["az"].append(az)
        parts["ha"].append(ha)
        parts["sep"].append(np.degrees(np.arccos(cos_sep)))
        parts["bjd"].append(e.tdb_jd[None, :] + (icrs_unit @ e.observer_bary_ls.T) / 86400.0)
        for key, unit in (("sun", e.sun_unit), ("moon", e.moon_unit)):
            b_ra, b_dec = radec_from_unit(unit)
            parts[key].append(altaz_from_hadec(e.last_deg - b_ra, b_dec, site.latitude_deg)[0])
        parts["ill"].append(e.moon_illumination)
    alt = np.concatenate(parts["alt"], axis=1)
    sky = Sky(
        times_jd=np.concatenate(parts["t"]),
        night_index=np.concatenate(parts["i"]).astype(np.int64),
        step_s=float(step_s),
        site=site,
        nights=nights,
        names=names,
        altitude_deg=alt,
        azimuth_deg=np.concatenate(parts["az"], axis=1),
        hour_angle_deg=np.concatenate(parts["ha"], axis=1),
        airmass=airmass_kasten_young(alt),
        moon_separation_deg=np.concatenate(parts["sep"], axis=1),
        bjd_tdb=np.concatenate(parts["bjd"], axis=1),
        sun_altitude_deg=np.concatenate(parts["sun"]),
        moon_altitude_deg=np.concatenate(parts["moon"]),
        moon_illumination=np.concatenate(parts["ill"]),
    )
    for value in vars(sky).values():
        if isinstance(value, np.ndarray):
            value.flags.writeable = False
    return sky


def _apparent_places(ra, dec, times_jd):
    """Apparent (TETE, geocentric) RA and Dec [deg], shape (n_targets, n_times), one call."""
    import astropy.units as u
    from astropy.coordinates import TETE, SkyCoord
    from astropy.time import Time

    with offline.quiet_astropy():
        t = Time(np.asarray(times_jd, dtype=float), format="jd", scale="utc")
        coords = SkyCoord(ra[:, None] * u.deg, dec[:, None] * u.deg, frame="icrs")
        app = coords.transform_to(TETE(obstime=t[None, :]))
        return app.ra.deg, app.dec.deg


def pointing_at(site: Site, ra_deg: ArrayLike, dec_deg: ArrayLike, times_jd: ArrayLike,
                moon: bool = True) -> Pointing:
    """Exact altitude, azimuth, hour angle, airmass and Moon separation for given pairs.

    Parameters
    ----------
    site : Site
    ra_deg, dec_deg : array_like
        ICRS coordinates [deg], broadcastable with ``times_jd``.
    times_jd : array_like
        JD (UTC scale) [d].
    moon : bool, optional
        Compute the Moon separation (the costliest part: astropy's Moon ephemeris); when False
        ``moon_separation_deg`` is NaN.

    Returns
    -------
    Pointing
        Arrays of the broadcast shape; from astropy's AltAz transform without
        refraction (pressure 0) and its topocentric Moon.
    """
    import astropy.units as u
    from astropy.coordinates import TETE, AltAz, SkyCoord, get_body
    from astropy.time import Time

    ra, dec, jd = np.broadcast_arrays(
        np.asarray(ra_deg, dtype=float),
        np.asarray(dec_deg, dtype=float),
        np.asarray(times_jd, dtype=float),
    )
    shape = jd.shape
    location = site.location()
    with offline.quiet_astropy():
        t = Time(jd.ravel(), format="jd", scale="utc")
        star = SkyCoord(ra.ravel() * u.deg, dec.ravel() * u.deg, frame="icrs")
        horiz = star.transform_to(AltAz(obstime=t, location=location, pressure=0.0 * u.hPa))
        tete = TETE(obstime=t, location=location)
        star_app = star.transform_to(tete)
        moon_app = get_body("moon", t, location).transform_to(tete) if moon else None
        last = t.sidereal_time("apparent", longitude=location.lon).deg
    sep = np.full(star_app.ra.shape, np.nan)
    if moon_app is not None:
        s = unit_from_radec(star_app.ra.deg, star_app.dec.deg)
        m = unit_from_radec(moon_app.ra.deg, moon_app.dec.deg)
        sep = np.degrees(np.arccos(np.clip(np.sum(s * m, -1), -1.0, 1.0)))
    alt = horiz.alt.deg
    return Pointing(
        altitude_deg=alt.reshape(shape),
        azimuth_deg=horiz.az.deg.reshape(shape),
        hour_angle_deg=wrap_degrees(last - star_app.ra.deg).reshape(shape),
        airmass=airmass_kasten_young(alt).reshape(shape),
        moon_separation_deg=sep.reshape(shape),
    )


def mid_exposure_columns(sky, exposure_s: float) -> np.ndarray:
    """Sky-grid column nearest the middle of an exposure starting at each column (same night)."""
    shift = int(round(0.5 * exposure_s / sky.step_s))
    cols = np.arange(sky.times_jd.size)
    mid = np.minimum(cols + shift, cols.size - 1)
    same = sky.night_index[mid] == sky.night_index
    while not same.all():  # near a night's end: step back into the night
        mid = np.where(same, mid, mid - 1)
        same = sky.night_index[mid] == sky.night_index
    return mid
