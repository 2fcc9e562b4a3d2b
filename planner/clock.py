"""UTC Julian dates and datetimes: the one place nightbits converts between them.

Inside the planner, instants are JD on the UTC scale (days, float64; docs/architecture.md,
units). Python datetimes appear only at the edges: parsing a scenario or a typed moment, and
printing a schedule. JD 2451545.0 is 2000-01-01 12:00 UTC and Unix time counts UTC seconds from
JD 2440587.5 (both standard definitions, common practice); leap seconds do not enter, as in
every UTC calendar count.
"""

from __future__ import annotations

import datetime as _dt
import time

import numpy as np

__all__ = ["J2000_JD", "datetime64_from_jd", "datetime_from_jd", "jd_from_datetime", "jd_now"]

#: JD (UTC scale) of 2000-01-01 12:00 UTC.
J2000_JD = 2451545.0
#: JD (UTC scale) of the Unix epoch, 1970-01-01 00:00 UTC.
UNIX_EPOCH_JD = 2440587.5
_J2000 = _dt.datetime(2000, 1, 1, 12, tzinfo=_dt.timezone.utc)


def jd_from_datetime(moment: _dt.datetime) -> float:
    """JD (UTC scale) of a datetime; a naive datetime is taken as UTC."""
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=_dt.timezone.utc)
    return J2000_JD + (moment - _J2000).total_seconds() / 86400.0


def datetime_from_jd(jd: float) -> _dt.datetime:
    """Aware UTC datetime of a JD (UTC scale), rounded to the whole second."""
    return _J2000 + _dt.timedelta(seconds=round((float(jd) - J2000_JD) * 86400.0))


def datetime64_from_jd(times_jd) -> np.ndarray:
    """JD (UTC scale) to ``numpy.datetime64[ms]`` (UTC), rounded to the millisecond."""
    ms = np.round((np.asarray(times_jd, dtype=float) - UNIX_EPOCH_JD) * 86400000.0)
    return ms.astype("int64").astype("datetime64[ms]")


def jd_now() -> float:
    """JD (UTC scale) of the system clock's present."""
    return UNIX_EPOCH_JD + time.time() / 86400.0
