"""Barycentric times of observed exposures: UTC mid-exposure to BJD_TDB.

Velocities from an observing log may carry the UTC instant of mid-exposure instead of a
barycentric time. The conversion is the one the planner's sky grid uses (:mod:`planner.sky.tracks`):
the instant on the TDB scale plus the Roemer delay ``r_obs . n / c``, with ``r_obs`` the
observer's barycentric position from astropy (Earth from its built-in ephemeris, the site from
its geodetic position) and ``n`` the target's ICRS direction (proper motion not applied), taken
from the hourly nodes of :mod:`planner.sky.ephemeris`. The Shapiro delay (under 0.1 ms) is left
out, as in astropy's own ``Time.light_travel_time``.
"""

from __future__ import annotations

import numpy as np

from planner.sky.ephemeris import NODE_STEP_D, node_ephemeris, unit_from_radec

__all__ = ["bjd_tdb_from_utc"]


def bjd_tdb_from_utc(location, ra_deg: float, dec_deg: float, jd_utc) -> np.ndarray:
    """BJD_TDB of instants given in UTC, for one target seen from one site.

    Parameters
    ----------
    location : astropy.coordinates.EarthLocation
        The site.
    ra_deg, dec_deg : float
        Target position, ICRS [deg].
    jd_utc : array_like, shape (n,)
        Instants, JD (UTC scale) [d], e.g. mid-exposure.

    Returns
    -------
    ndarray, shape (n,)
        BJD_TDB [d].
    """
    t = np.atleast_1d(np.asarray(jd_utc, dtype=float))
    if t.size == 0:
        return t.copy()
    start = np.floor(t.min() / NODE_STEP_D) * NODE_STEP_D - NODE_STEP_D
    span = max(float(t.max() - start) + NODE_STEP_D, 2.0 * NODE_STEP_D)
    eph = node_ephemeris(location, [start], span_days=span).at(0, t)
    direction = unit_from_radec(np.array([ra_deg]), np.array([dec_deg]))[0]
    return eph.tdb_jd + (eph.observer_bary_ls @ direction) / 86400.0
