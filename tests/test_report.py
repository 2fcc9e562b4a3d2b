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
        # The slew starts slew_s before the shutter opens; both local, then the opening in UTC.
        opening = dt.datetime.fromisoformat(visit.start_utc.replace("Z", "+00:00"))
        slew = opening - dt.timedelta(seconds=visit.slew_s)
        assert fields[0] == slew.astimezone(ZONE).strftime("%H:%M:%S")
        assert fields[1] == opening.astimezone(ZONE).strftime("%H:%M:%S")
        assert fields[2] == visit.start_utc[11:19]
        assert fields[3] == visit.target
        assert float(fields[4]) == visit.exposure_s
        assert fields[5] == f"{visit.airmass_start:.2f}>{visit.airmass_end:.2f}"
        assert float(fields[7]) == visit.slew_s
        assert float(fields[8]) == round(visit.expected_bits, 3)
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


_TOTAL = re.compile(r"night total: (\d+) planned exposures?(?:, (\d+) executed)?; ([\d.]+) bits\n"
                    r" +dark (\S+) = exposing (\S+) \+ overheads (\S+) \+ idle (\S+)"
                    r"(?: \+ lost (\S+))?"
                    r"(?:\s+\+ executed (\S+) exposing\s+and\s+(\S+)\s+overheads)?")


def _totals(text):
    return [tuple(x or "" for x in m.groups()) for m in _TOTAL.finditer(text)]


def test_night_totals_add_up_to_the_dark_time():
    plan = make_plan()
    totals = _totals(render_schedule(plan))
    assert len(totals) == 2
    for night, (planned, executed, bits, dark, exposing, overheads, idle, lost, done_exp,
                done_ovh) in zip(plan.nights, totals, strict=True):
        window = (parse_utc(night.dark_end_utc) - parse_utc(night.dark_start_utc)) * 1440.0
        assert _minutes(dark) == round(window)
        parts = (exposing, overheads, idle, lost, done_exp, done_ovh)
        assert sum(_minutes(x) for x in parts if x) == _minutes(dark)  # exactly, by design
        visits = [v for v in plan.visits if v.night == night.date]
        mine = [v for v in visits if v.status == "planned"]
        assert int(planned) == len(mine)
        assert int(executed or 0) == len(visits) - len(mine)
        assert abs(_minutes(exposing) - sum(v.exposure_s for v in mine) / 60.0) < 1.0
        assert float(bits) == round(sum(v.expected_bits for v in visits), 3)
    assert totals[1][7] == "2h30m"  # the lost interval of night 2
    assert totals[0][8] == "0h20m" and totals[0][9] == "0h03m"  # the executed visit


def test_lost_time_overlapping_visits_and_the_past_never_exceeds_the_dark_window():
    # A re-plan at the telescope closes the past; executed visits lie inside it, and lost time
    # may overlap them. Every instant of the dark window is counted once.
    plan = make_plan()
    first = plan.nights[0]
    night = replace(first, lost=((first.dark_start_utc, first.dark_end_utc),),
                    past=((first.dark_start_utc, "2027-10-05T01:00:00Z"),))
    text = render_schedule(replace(plan, nights=(night, plan.nights[1])))
    totals = _totals(text)[0]
    assert sum(_minutes(x) for x in totals[4:] if x) == _minutes(totals[3])
    assert _minutes(totals[7]) == _minutes(totals[3]) - 12 - 20 - 3  # all but the visits


def test_gaps_between_executed_visits_in_the_past_are_idle_not_lost():
    plan = make_plan()
    first = plan.nights[0]
    night = replace(first, past=((first.dark_start_utc, "2027-10-05T01:00:00Z"),))
    text = render_schedule(replace(plan, nights=(night, plan.nights[1])))
    first_night = text.split("== night 2")[0].split("== night 1")[1]
    assert "lost" not in first_night
    assert re.search(r"idle 0h40m00s until 22:00:00: not observed", first_night)


def test_lost_and_idle_lines():
    text = render_schedule(make_plan())
    lost = re.findall(r"^ +\S+ +\S+ +lost (\d+h\d\dm)\d\ds until", text, flags=re.M)
    assert sum(_minutes(x) for x in lost) == 150
    assert re.search(r"^ +\S+ +\S+ +idle \dh\d\dm\d\ds until \d\d:\d\d:\d\d$", text,
                     flags=re.M)


def test_idle_lines_carry_their_reason_and_short_gaps_are_shown():
    plan = make_plan()
    second = plan.nights[1]
    extra = replace(plan.visits[0], night=second.date, start_utc="2027-10-06T00:47:20Z",
                    end_utc="2027-10-06T00:57:20Z", slew_s=100.0)
    night = replace(second, idle=(("2027-10-05T23:46:00Z", "2027-10-06T00:45:40Z", "window"),
                                  ("2027-10-06T00:57:20Z", "2027-10-06T00:58:50Z",
                                   "waiting for a better moment")))
    visits = tuple(sorted((*plan.visits, extra), key=lambda v: v.start_utc))
    text = render_schedule(replace(plan, nights=(plan.nights[0], night), visits=visits))
    # The stretch from the dark start is cut at the local hour; each piece keeps the reason.
    assert re.search(r"20:46:00 +23:46:00  idle 0h14m00s until 21:00:00: window$", text, re.M)
    assert re.search(r"21:00:00 +00:00:00  idle 0h45m40s until 21:45:40: window$", text, re.M)
    # 90 s between the extra visit's end and the next slew: over a minute, so it has a line.
    assert re.search(r"21:57:20 +00:57:20  idle 0h01m30s until 21:58:50: waiting for a better "
                     r"moment$", text, re.M)
    assert "idle 0h00m" not in text  # nothing of a minute or less gets a line


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
