"""Plan files: round trip, atomic writes, refusal to overwrite, one sentence on bad input."""

import json
import os
from dataclasses import replace

import pytest
from astropy.time import Time

from planner.errors import PlanError
from planner.workflow.outputs import (
    NightSummary,
    PlanFile,
    ScheduledVisit,
    atomic_write_text,
    format_utc,
    parse_utc,
    read_plan,
    write_plan,
)


def make_plan(**changes) -> PlanFile:
    """A small hand-made plan: two nights, three visits, one lost interval."""
    nights = (
        NightSummary("2027-10-04", "2027-10-04T22:50:00Z", "2027-10-04T23:45:00Z",
                     "2027-10-05T08:10:00Z", "2027-10-05T09:05:00Z", 0.19,
                     (("2027-10-04T23:45:00Z", "2027-10-05T00:40:00Z"),)),
        NightSummary("2027-10-05", "2027-10-05T22:51:00Z", "2027-10-05T23:46:00Z",
                     "2027-10-06T08:09:00Z", "2027-10-06T09:04:00Z", 0.27, (),
                     (("2027-10-06T02:00:00Z", "2027-10-06T04:30:00Z"),)),
    )
    visits = (
        ScheduledVisit("Star-1", "2027-10-04", "2027-10-04T23:47:00Z", "2027-10-04T23:57:00Z",
                       600.0, 120.0, 1.31, 1.28, 85.2, 1.25, 10.0, -20.0),
        ScheduledVisit("Star-2", "2027-10-04", "2027-10-05T00:00:00Z", "2027-10-05T00:20:00Z",
                       1200.0, 170.0, 1.11, 1.10, 45.0, 0.5, 11.0, -30.0, "done"),
        ScheduledVisit("Star-2", "2027-10-05", "2027-10-06T01:00:00Z", "2027-10-06T01:20:00Z",
                       1200.0, 70.0, 1.12, 1.09, 47.0, 0.25, 11.0, -30.0),
    )
    plan = PlanFile("joint", 2.0, 2.5, "/runs/run.yaml", "Test run",
                    {"name": "Test site", "latitude_deg": -27.45, "longitude_deg": -69.95,
                     "elevation_m": 2410.0, "timezone": "America/Santiago"},
                    -12.0, 2.0, ((0.5, 20.0), (1.0, 30.0)), {"Star-1": 1.25, "Star-2": 0.75},
                    nights, visits,
                    ("solver status OPTIMAL",), objective_bits=2.2)
    return replace(plan, **changes)


def test_round_trip(tmp_path):
    plan = make_plan()
    json_path, csv_path = write_plan(tmp_path / "out", plan)
    assert read_plan(json_path) == plan
    rows = csv_path.read_text().splitlines()
    assert rows[0].startswith("target,night,start_utc,end_utc,exposure_s,slew_s")
    assert len(rows) == 1 + len(plan.visits)


def test_plan_json_has_the_required_fields(tmp_path):
    json_path, _ = write_plan(tmp_path, make_plan())
    data = json.loads(json_path.read_text())
    for key in ("strategy", "total_bits", "bound_bits", "scenario", "site",
                "twilight_sun_altitude_deg", "max_airmass"):
        assert key in data
    assert set(data["site"]) >= {"latitude_deg", "longitude_deg", "elevation_m"}
    for key in ("target", "night", "start_utc", "end_utc", "exposure_s", "slew_s",
                "airmass_start", "airmass_end", "moon_separation_deg", "expected_bits",
                "ra_deg", "dec_deg"):
        assert key in data["visits"][0]


def test_bound_may_be_null(tmp_path):
    json_path, _ = write_plan(tmp_path, make_plan(bound_bits=None))
    assert json.loads(json_path.read_text())["bound_bits"] is None
    assert read_plan(json_path).bound_bits is None


def test_refuses_to_overwrite_without_force(tmp_path):
    write_plan(tmp_path, make_plan())
    before = (tmp_path / "plan.json").read_bytes()
    with pytest.raises(PlanError, match="already exists; pass --force"):
        write_plan(tmp_path, make_plan(total_bits=9.0))
    assert (tmp_path / "plan.json").read_bytes() == before
    write_plan(tmp_path, make_plan(total_bits=9.0), force=True)
    assert read_plan(tmp_path / "plan.json").total_bits == 9.0


def test_failed_write_keeps_previous_plan_and_leaves_no_temporaries(tmp_path):
    write_plan(tmp_path, make_plan())
    before = sorted(p.name for p in tmp_path.iterdir())
    old = (tmp_path / "plan.json").read_bytes()
    bad = make_plan(total_bits=float("nan"))  # JSON has no NaN: serialisation fails
    with pytest.raises(ValueError):
        write_plan(tmp_path, bad, force=True)
    assert (tmp_path / "plan.json").read_bytes() == old
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def test_crash_between_temporary_and_rename_keeps_old_file(tmp_path, monkeypatch):
    target = tmp_path / "file.txt"
    atomic_write_text(target, "old")

    def boom(src, dst):
        raise OSError("simulated crash")

    monkeypatch.setattr(os, "replace", boom)
    with pytest.raises(OSError):
        atomic_write_text(target, "new")
    assert target.read_text() == "old"


def test_unwritable_folder_is_a_sentence(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    with pytest.raises(PlanError, match="file is a file, not a folder; choose a folder"):
        write_plan(blocker / "sub", make_plan())


@pytest.mark.parametrize("text, message", [
    ("not json", "is not readable JSON"),
    ('{"format_version": 99}', "not a nightbits plan file"),
])
def test_read_bad_files(tmp_path, text, message):
    path = tmp_path / "plan.json"
    path.write_text(text)
    with pytest.raises(PlanError, match=message):
        read_plan(path)


def test_read_missing_field_names_it(tmp_path):
    json_path, _ = write_plan(tmp_path, make_plan())
    data = json.loads(json_path.read_text())
    del data["visits"][1]["start_utc"]
    json_path.write_text(json.dumps(data))
    with pytest.raises(PlanError, match=r"visits\[1\]: the field 'start_utc' is missing"):
        read_plan(json_path)


def test_read_missing_file(tmp_path):
    with pytest.raises(PlanError, match="does not exist"):
        read_plan(tmp_path / "plan.json")


def test_utc_text_and_jd():
    # JD 2451545.0 is 2000-01-01 12:00 UTC-scale noon (the J2000 epoch; Meeus 1998, ch. 7).
    assert format_utc(2451545.0) == "2000-01-01T12:00:00Z"
    # Reference library: astropy's UTC Julian date of the same moment.
    reference = Time("2027-10-05T02:14:00", scale="utc").jd
    assert parse_utc("2027-10-05T02:14:00Z") == pytest.approx(reference, abs=1e-8)
    assert parse_utc("2027-10-04T23:14:00-03:00") == parse_utc("2027-10-05T02:14:00Z")
    assert format_utc(parse_utc("2027-10-05T02:14:00Z")) == "2027-10-05T02:14:00Z"
    with pytest.raises(PlanError, match="not an ISO date-time"):
        parse_utc("tonight")


def test_a_pair_field_of_the_wrong_kind_is_one_sentence(tmp_path):
    # Found by tests/test_fuzz_readers.py: nights[0].moon_up = true was a TypeError.
    doc = json.loads(make_plan().to_json())
    doc["nights"][0]["moon_up"] = True
    path = tmp_path / "plan.json"
    path.write_text(json.dumps(doc))
    with pytest.raises(PlanError, match="moon_up must be a list"):
        read_plan(path)
