"""Where a star stands in the local sky: altitude, azimuth and airmass (pure array cores).

All functions broadcast over their inputs and work in degrees at the interface
(radians inside). Altitudes are geometric: no atmospheric refraction is applied,
because the airmass formula below already accounts for it and the telescope
limits of a site are usually quoted for the unrefracted position.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["airmass_kasten_young", "altaz_from_hadec", "hadec_from_altaz", "wrap_degrees"]


def wrap_degrees(angle_deg: ArrayLike, low: float = -180.0) -> NDArray[np.float64]:
    """Reduce angles to the interval ``[low, low + 360)``.

    Parameters
    ----------
    angle_deg : array_like
        Angles [deg].
    low : float
        Lower end of the output interval [deg].

    Returns
    -------
    ndarray
        The same angles in ``[low, low + 360)`` [deg].
    """
    return np.mod(np.asarray(angle_deg, dtype=float) - low, 360.0) + low


def altaz_from_hadec(
    hour_angle_deg: ArrayLike, dec_deg: ArrayLike, latitude_deg: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Altitude and azimuth from hour angle and declination.

    Parameters
    ----------
    hour_angle_deg : array_like
        Local hour angle [deg], positive west of the meridian.
    dec_deg : array_like
        Declination in the apparent frame (true equator and equinox of date) [deg].
    latitude_deg : float
        Geodetic latitude of the site [deg].

    Returns
    -------
    altitude_deg : ndarray
        Geometric altitude [deg], broadcast shape of the inputs.
    azimuth_deg : ndarray
        Azimuth measured from north through east, in ``[0, 360)`` [deg].

    Notes
    -----
    Spherical-astronomy transformation (Meeus 1998, *Astronomical Algorithms*,
    eqs. 13.5 and 13.6); Meeus counts azimuth from the south, this function from
    the north (azimuth + 180 deg).
    """
    h = np.radians(hour_angle_deg)
    d = np.radians(dec_deg)
    phi = np.radians(latitude_deg)
    sin_alt = np.sin(phi) * np.sin(d) + np.cos(phi) * np.cos(d) * np.cos(h)
    alt = np.degrees(np.arcsin(np.clip(sin_alt, -1.0, 1.0)))
    az = np.degrees(
        np.arctan2(
            -np.cos(d) * np.sin(h), np.sin(d) * np.cos(phi) - np.cos(d) * np.sin(phi) * np.cos(h)
        )
    )
    return alt, np.mod(az, 360.0)


def hadec_from_altaz(
    altitude_deg: ArrayLike, azimuth_deg: ArrayLike, latitude_deg: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Hour angle and declination from altitude and azimuth (inverse of :func:`altaz_from_hadec`).

    Parameters
    ----------
    altitude_deg : array_like
        Geometric altitude [deg].
    azimuth_deg : array_like
        Azimuth from north through east [deg].
    latitude_deg : float
        Geodetic latitude of the site [deg].

    Returns
    -------
    hour_angle_deg : ndarray
        Hour angle in ``[-180, 180)`` [deg], positive west.
    dec_deg : ndarray
        Declination [deg].
    """
    # The transformation is its own inverse with (H, dec) and (A, h) swapped
    # (Meeus 1998, eqs. 13.5 and 13.6 against their inversion).
    dec, ha = altaz_from_hadec(azimuth_deg, altitude_deg, latitude_deg)
    return wrap_degrees(ha), dec


def airmass_kasten_young(altitude_deg: ArrayLike) -> NDArray[np.float64]:
    """Relative optical airmass of Kasten and Young (1989), finite down to the horizon.

    Parameters
    ----------
    altitude_deg : array_like
        Geometric (unrefracted) altitude [deg].

    Returns
    -------
    ndarray
        Airmass, same shape; 1 at the zenith (to 3e-4), about 37.9 at the horizon.
        Altitudes below the horizon are clipped to 0 deg, so the result stays finite
        and monotone; masks, not this function, reject such positions.

    Notes
    -----
    ``X = 1 / (sin h + 0.50572 (h + 6.07995)^-1.6364)`` with ``h`` in degrees
    (Kasten, F. and Young, A. T. 1989, Applied Optics 28, 4735). It fits the
    paper's model-atmosphere table to better than about 0.5 percent everywhere
    above the horizon, unlike ``sec z`` which diverges there.
    """
    h = np.clip(np.asarray(altitude_deg, dtype=float), 0.0, 90.0)
    return 1.0 / (np.sin(np.radians(h)) + 0.50572 * (h + 6.07995) ** -1.6364)
