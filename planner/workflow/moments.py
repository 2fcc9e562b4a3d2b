"""Moments typed by an observer: UTC, an explicit offset, or the site's local time.

``--now`` and ``--lost`` take an ISO date-time in one of three forms:

* UTC with ``Z``: ``2027-10-06T02:00Z``;
* an explicit UTC offset: ``2027-10-05T23:00-03:00``;
* the site's local time, with the word ``local``: ``"2027-10-05 23:00 local"`` (the time zone
  is the plan's site zone, daylight saving time included).

A time with none of these is refused: three hours of difference between UTC and local time is
an easy mistake at the telescope, so nightbits never guesses. A local time that a clock change
skips or repeats is refused too, with the two offsets to choose from.
"""

from __future__ import annotations

import datetime as _dt
import re
from zoneinfo import ZoneInfo

from planner.clock import datetime_from_jd, jd_from_datetime
from planner.errors import PlanError

__all__ = ["offset_text", "parse_moment", "zone_offsets"]

_LOCAL = re.compile(r"\s*\blocal\s*$", re.IGNORECASE)


def offset_text(offset: _dt.timedelta) -> str:
    """``UTC-03:00`` for an offset of minus three hours."""
    minutes = int(round(offset.total_seconds() / 60.0))
    sign = "+" if minutes >= 0 else "-"
    return f"UTC{sign}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"


def zone_offsets(zone_name: str, jds) -> list[str]:
    """Return the zone's UTC offset (``UTC-03:00``) at each of the instants ``jds`` (JD UTC)."""
    zone = ZoneInfo(zone_name)
    return [offset_text(datetime_from_jd(jd).astimezone(zone).utcoffset()) for jd in jds]


def parse_moment(text: str, zone_name: str, where: str) -> float:
    """JD (UTC scale) of a moment given as UTC, with an offset, or as the site's local time.

    Parameters
    ----------
    text : str
        The moment (module notes for the forms).
    zone_name : str
        IANA name of the site's time zone, for ``local`` times.
    where : str
        The option, for the message (``--now``).

    Returns
    -------
    float

    Raises
    ------
    PlanError
        If the text is not a date-time, carries no zone, or names a local time that does not
        exist or happens twice.
    """
    raw = str(text).strip()
    local = bool(_LOCAL.search(raw))
    body = _LOCAL.sub("", raw).strip().replace("Z", "+00:00").replace("z", "+00:00")
    forms = (f"give it as UTC (2027-10-06T02:00Z), with an offset (2027-10-05T23:00-03:00) or "
             f"as the site's local time ('2027-10-05 23:00 local', {zone_name})")
    try:
        moment = _dt.datetime.fromisoformat(body)
    except ValueError:
        raise PlanError(f"{where} {raw!r} is not a date-time; {forms}.") from None
    if local and moment.tzinfo is not None:
        raise PlanError(f"{where} {raw!r} gives both an offset and 'local'; keep one of them.")
    if not local and moment.tzinfo is None:
        raise PlanError(f"{where} {raw!r} does not say its time zone; {forms}.")
    if local:
        zone = ZoneInfo(zone_name)
        early = moment.replace(tzinfo=zone, fold=0)
        late = moment.replace(tzinfo=zone, fold=1)
        if early.utcoffset() != late.utcoffset():
            back = early.astimezone(_dt.timezone.utc).astimezone(zone).replace(tzinfo=None)
            what = "is skipped by" if back != moment else "happens twice at"
            raise PlanError(
                f"{where} {raw!r}: that local time {what} a clock change in {zone_name}; give "
                f"it with an offset instead ({offset_text(early.utcoffset())} or "
                f"{offset_text(late.utcoffset())}).")
        moment = early
    return jd_from_datetime(moment.astimezone(_dt.timezone.utc))
