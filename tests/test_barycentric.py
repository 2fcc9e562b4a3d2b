"""UTC mid-exposure to BJD_TDB, against astropy's own light-travel-time computation."""

import astropy.units as u
import numpy as np
from astropy.coordinates import EarthLocation, SkyCoord
from astropy.time import Time

from planner.sky import offline
from planner.sky.barycentric import bjd_tdb_from_utc


def test_bjd_tdb_matches_astropy_light_travel_time():
    # Reference: astropy, Time.tdb plus Time.light_travel_time(kind="barycentric") for the
    # same site and target (invented site of the demo, an invented star's position).
    location = EarthLocation.from_geodetic(-69.95 * u.deg, -27.45 * u.deg, 2410 * u.m)
    jd = 2461683.6 + np.linspace(0.0, 4.3, 9)
    for ra, dec in ((6.9238, -21.5732), (210.0, 40.0)):
        with offline.quiet_astropy():
            t = Time(jd, format="jd", scale="utc", location=location)
            delay = t.light_travel_time(SkyCoord(ra * u.deg, dec * u.deg), kind="barycentric")
            reference = (t.tdb + delay).jd
        ours = bjd_tdb_from_utc(location, ra, dec, jd)
        # 1 ms is far below what matters for velocities (a 1 s error moves a Keplerian by at
        # most K 2 pi / P x 1 s, micrometres per second) and above float64 JD resolution.
        assert np.max(np.abs(ours - reference)) * 86400.0 < 1e-3
        # The barycentric correction itself is minutes: the conversion is not a no-op.
        assert np.min(np.abs(ours - jd)) * 86400.0 > 60.0
