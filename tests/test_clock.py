"""planner.clock against astropy's Time (an outside reference for UTC Julian dates)."""

import datetime as dt

import numpy as np
from astropy.time import Time

from planner.clock import datetime64_from_jd, datetime_from_jd, jd_from_datetime, jd_now
from planner.sky.offline import quiet_astropy  # ERFA calls years past its table "dubious"


def test_jd_from_datetime_matches_astropy_utc():
    # astropy.time.Time(..., scale="utc").jd is the reference; astropy counts a leap-second day
    # as 86401 s, so the check avoids the instants inside a leap second.
    moments = [dt.datetime(2027, 10, 5, 23, 17, 41, tzinfo=dt.timezone.utc),
               dt.datetime(1999, 12, 31, 23, 59, 59, tzinfo=dt.timezone.utc),
               dt.datetime(2031, 6, 1, 4, 0, tzinfo=dt.timezone(dt.timedelta(hours=-3)))]
    for moment in moments:
        with quiet_astropy():
            ref = Time(moment.astimezone(dt.timezone.utc).replace(tzinfo=None), scale="utc").jd
        assert abs(jd_from_datetime(moment) - ref) * 86400.0 < 1e-3
    naive = dt.datetime(2027, 10, 5, 23, 17, 41)  # naive: taken as UTC
    assert jd_from_datetime(naive) == jd_from_datetime(moments[0])
    assert jd_from_datetime(dt.datetime(2000, 1, 1, 12)) == 2451545.0  # J2000 (definition)


def test_datetime_from_jd_round_trips_to_the_second():
    with quiet_astropy():
        jd = Time("2027-10-06T02:03:04.4", scale="utc").jd
    moment = datetime_from_jd(jd)
    assert moment == dt.datetime(2027, 10, 6, 2, 3, 4, tzinfo=dt.timezone.utc)
    assert abs(jd_from_datetime(moment) - jd) * 86400.0 <= 0.5 + 1e-3


def test_datetime64_and_now_match_astropy():
    with quiet_astropy():
        jds = Time(["2027-10-06T02:03:04.250", "2030-01-01T00:00:00"], scale="utc").jd
    got = datetime64_from_jd(jds)
    assert got.dtype == np.dtype("datetime64[ms]")
    assert got.astype(str).tolist() == ["2027-10-06T02:03:04.250", "2030-01-01T00:00:00.000"]
    assert abs(jd_now() - Time.now().utc.jd) * 86400.0 < 5.0
