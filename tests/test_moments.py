"""Moments typed at the telescope: UTC, offsets and the site's local time."""

import datetime as dt

import pytest

from planner.errors import PlanError
from planner.workflow.moments import offset_text, parse_moment, zone_offsets
from planner.workflow.outputs import parse_utc

SANTIAGO = "America/Santiago"


def test_utc_offset_and_local_forms_agree():
    # Chile keeps UTC-03:00 in October (summer time from the first Sunday of September; a fact
    # of the zone, from memory, checked against the tz database below).
    expected = parse_utc("2027-10-06T02:00:00Z")
    assert parse_moment("2027-10-06T02:00Z", SANTIAGO, "--now") == expected
    assert parse_moment("2027-10-05T23:00-03:00", SANTIAGO, "--now") == expected
    assert parse_moment("2027-10-05 23:00 local", SANTIAGO, "--now") == expected
    assert parse_moment("2027-10-05T23:00 LOCAL", SANTIAGO, "--now") == expected
    # The reference: the standard library's tz database conversion.
    from zoneinfo import ZoneInfo

    moment = dt.datetime(2027, 10, 5, 23, 0, tzinfo=ZoneInfo(SANTIAGO))
    assert moment.utcoffset() == dt.timedelta(hours=-3)
    assert zone_offsets(SANTIAGO, [expected]) == ["UTC-03:00"]
    assert offset_text(dt.timedelta(hours=5, minutes=30)) == "UTC+05:30"


@pytest.mark.parametrize("text, words", [
    ("2027-10-05T23:00", "does not say its time zone"),
    ("2027-10-05T23:00-03:00 local", "both an offset and 'local'"),
    ("tonight at eleven", "is not a date-time"),
])
def test_ambiguous_or_bad_times_are_refused(text, words):
    with pytest.raises(PlanError, match=words) as info:
        parse_moment(text, SANTIAGO, "--now")
    assert "local" in str(info.value) or words in str(info.value)


def test_clock_changes_are_refused_with_both_offsets():
    # US daylight saving time, 2027 (common practice, from memory: second Sunday of March at
    # 02:00 clocks go to 03:00; first Sunday of November at 02:00 back to 01:00).
    zone = "America/New_York"
    with pytest.raises(PlanError, match="skipped by a clock change") as info:
        parse_moment("2027-03-14 02:30 local", zone, "--now")
    assert "UTC-05:00" in str(info.value) and "UTC-04:00" in str(info.value)
    with pytest.raises(PlanError, match="happens twice"):
        parse_moment("2027-11-07 01:30 local", zone, "--now")
    assert parse_moment("2027-11-07 03:30 local", zone, "--now") == parse_utc(
        "2027-11-07T08:30:00Z")
