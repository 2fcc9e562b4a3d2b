"""The hour-by-hour schedule: layout, times, totals and the safety caution."""

import datetime as dt
import re
from dataclasses import replace
from zoneinfo import ZoneInfo

import pytest
from test_outputs import make_plan

from planner.workflow.outputs import parse_utc
from planner.workflow.report import WIDTH, render_schedule

ZONE = ZoneInfo("America/Santiago")


def _local(text: str) -> str:
    """Local clock time of a UTC text, by the IANA time zone database (Python's zoneinfo)."""
    moment = dt.datetime.fromisoformat(text.replace("Z", "+00:00"))
    return moment.astimezone(ZONE).strftime("%H:%M")


def _minutes(text: str) -> int:
    hours, minutes = re.fullmatch(r"(\d+)h(\d\d)m", text).groups()
    return 60 * int(hours) + int(minutes)


def test_width_and_plain_text():
    text = render_schedule(make_plan())
    assert all(len(line) <= WIDTH for line in text.splitlines())
    assert "\x1b" not in text  # no colour codes
    assert text.isascii()


def test_caution_is_printed():
    text = " ".join(render_schedule(make_plan()).split())
    assert "does not replace the observatory's own safety rules" in text
    for rule in ("sun avoidance", "wind and humidity limits", "instrument limits"):
        assert rule in text


def test_night_headers_with_local_and_utc_times():
    plan = make_plan()
    text = render_schedule(plan)
    # Gregorian calendar: 2027-10-04 is a Monday.
    assert "== night 1 of 2: evening of Mon 2027-10-04 " in text
    assert "== night 2 of 2: evening of Tue 2027-10-05 " in text
    night = plan.nights[0]
    # In October 2027 Chile keeps summer time, UTC-3 (IANA tz database; from memory, and the
    # local times below are computed by zoneinfo, not typed in).
    assert _local(night.sunset_utc) == "19:50"
    assert f"sunset {_local(night.sunset_utc)} (22:50 UTC)" in text
    dark = f"{_local(night.dark_start_utc)}-{_local(night.dark_end_utc)}"
    assert f"dark {dark} (23:45-08:10 UTC)" in text
    assert "Moon 19% lit, up 20:45-21:40 (23:45-00:40 UTC)" in text
    assert "Moon 27% lit, below the horizon all dark time" in text


def test_visit_lines_in_time_order_with_running_total():
    plan = make_plan()
    lines = [line for line in render_schedule(plan).splitlines() if "Star-" in line]
    assert len(lines) == len(plan.visits)
    for line, visit in zip(lines, plan.visits, strict=True):
        fields = line[1:].split()
        assert fields[0] == _local(visit.start_utc) and fields[1] == visit.start_utc[11:16]
        assert fields[2] == visit.target
        assert float(fields[3]) == visit.exposure_s
        assert fields[4] == f"{visit.airmass_start:.2f}>{visit.airmass_end:.2f}"
        assert float(fields[6]) == visit.slew_s
        assert float(fields[7]) == round(visit.expected_bits, 3)
    running = [float(line.split()[-1]) for line in lines]
    assert running == sorted(running)
    assert running[-1] == sum(v.expected_bits for v in plan.visits)
    assert lines[1].startswith("*")  # the executed visit is marked
    assert not lines[0].startswith("*")


def test_hour_separators_cover_the_dark_window():
    plan = make_plan()
    text = render_schedule(plan)
    night_text = text.split("== night 2")[0]
    separators = re.findall(r"^ ---- (\d\d):00 -", night_text, flags=re.M)
    start = dt.datetime.fromisoformat(plan.nights[0].dark_start_utc.replace("Z", "+00:00"))
    end = dt.datetime.fromisoformat(plan.nights[0].dark_end_utc.replace("Z", "+00:00"))
    expected, hour = [], start.astimezone(ZONE).replace(minute=0)
    while hour < end:
        expected.append(hour.strftime("%H"))
        hour += dt.timedelta(hours=1)
    assert separators == expected


def test_night_totals_add_up_to_the_dark_time():
    plan = make_plan()
    text = render_schedule(plan)
    totals = re.findall(r"night total: (\d+) exposures?, exposing (\S+), slewing (\S+), "
                        r"idle (\S+?)(?:, lost (\S+))?; ([\d.]+) bits", text)
    assert len(totals) == 2
    for night, (count, exposing, slewing, idle, lost, bits) in zip(plan.nights, totals,
                                                                   strict=True):
        dark = (parse_utc(night.dark_end_utc) - parse_utc(night.dark_start_utc)) * 1440.0
        used = sum(_minutes(x) for x in (exposing, slewing, idle) if x)
        used += _minutes(lost) if lost else 0
        assert abs(used - dark) <= 2  # each figure is rounded to the minute
        visits = [v for v in plan.visits if v.night == night.date]
        assert int(count) == len(visits)
        assert float(bits) == round(sum(v.expected_bits for v in visits), 3)
    assert totals[1][4] == "2h30m"  # the lost interval of night 2


def test_lost_and_idle_lines():
    text = render_schedule(make_plan())
    lost = re.findall(r"^ +\S+ +\S+ +lost (\S+)$", text, flags=re.M)
    assert sum(_minutes(x) for x in lost) == 150
    assert re.search(r"^ +\S+ +\S+ +idle \dh\d\dm$", text, flags=re.M)


def test_run_total_and_notes():
    plan = make_plan()
    text = " ".join(render_schedule(plan).split())
    assert "run total: 3 exposures over 2 nights (1 executed)" in text
    assert "exact joint score 2.00 bits" in text
    # objective 2.20, bound 2.50: (2.50 - 2.20) / 2.20 = 13.6 % (the share, never a bound
    # in bits that could read as below the plan's exact value).
    assert "no plan is more than 13.6% better on its own objective" in text
    assert "solver status OPTIMAL" in text
    text = " ".join(render_schedule(replace(plan, bound_bits=None)).split())
    assert "the solver proved no bound on how much better another plan could be" in text


@pytest.mark.parametrize("bound, words", [
    (2.20, "proved this plan the best"),
    (155.14, "too weak to say how close"),  # a trivial bound, far above the objective
])
def test_bound_sentence_extremes(bound, words):
    from planner.workflow.report import bound_sentence

    assert words in bound_sentence(replace(make_plan(), bound_bits=bound))


def test_moon_rule_in_header():
    text = " ".join(render_schedule(make_plan()).split())
    assert "Moon separation while up: 20 deg up to 50% lit, 30 deg up to 100% lit" in text
    single = replace(make_plan(), moon_table=((1.0, 30.0),))
    assert "Moon at least 30 deg away while up" in render_schedule(single)
