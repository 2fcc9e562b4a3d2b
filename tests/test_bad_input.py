"""Input that used to be taken silently, or crashed: now one sentence, exit 2, nothing written."""

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from inference.data import RVData, read_rv_csv
from inference.errors import RVDataError
from planner.cli.main import main
from planner.errors import PlanError
from planner.workflow import pipeline, replan
from planner.workflow.outputs import write_plan

TINY = Path(__file__).resolve().parent / "data" / "tiny" / "tiny.yaml"


@pytest.fixture(scope="module")
def planned(tmp_path_factory):
    """The tiny run planned once: (scenario, posteriors, plan.json path)."""
    cache = tmp_path_factory.getbasetemp() / "nightbits-cache"
    scenario = pipeline.load(TINY)
    posteriors = pipeline.fit_posteriors(scenario, cache)
    result = pipeline.make_plan(pipeline.prepare(scenario, posteriors))
    json_path, _ = write_plan(tmp_path_factory.mktemp("planned"), result.plan_file)
    return scenario, posteriors, json_path, cache


def _edited_tiny(tmp_path, old: str, new: str, name: str) -> Path:
    """A copy of the tiny run whose scenario text has ``old`` replaced by ``new``."""
    shutil.copytree(TINY.parent, tmp_path / "run")
    text = (tmp_path / "run" / "tiny.yaml").read_text()
    assert old in text
    (tmp_path / "run" / name).write_text(text.replace(old, new))
    return tmp_path / "run" / name


def _one_sentence(capsys, argv) -> str:
    assert main(argv) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in lines[0], lines
    return lines[0]


# Reference for the offsets: MJD = JD - 2400000.5 (IAU 1997 resolution B1, common practice);
# "JD - 2450000" is the reduced date many RV tables print.
@pytest.mark.parametrize("time, kind", [(61289.261128, "MJD"), (11289.761128, "JD-2450000")])
def test_rv_times_with_an_offset_taken_off_are_refused(tmp_path, time, kind):
    path = tmp_path / "star.csv"
    path.write_text(f"time,rv,rv_err\n2461288.5,1.0,0.5\n{time},2.0,0.5\n")
    with pytest.raises(RVDataError) as info:
        read_rv_csv(path)
    message = str(info.value)
    assert f"{path}, line 3, column 'time' holds {time!r}, not a full Julian date" in message
    assert "add 2400000.5 to an MJD or 2450000 to a JD-2450000" in message


def test_an_rv_file_saved_with_a_byte_order_mark_is_read(tmp_path):
    path = tmp_path / "star.csv"
    path.write_bytes("time,rv,rv_err\n2461288.5,1.0,0.5\n".encode("utf-8-sig"))
    assert read_rv_csv(path).rv.tolist() == [1.0]


def test_new_velocities_with_mjd_times_or_bad_bytes_are_refused(planned, tmp_path, capsys):
    scenario, _, plan, _ = planned
    rvs = tmp_path / "new.csv"
    rvs.write_text("target,time,rv,rv_err\nGamur-7,61290.7,3.0,0.7\n")
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), "--rvs", str(rvs),
                                  "--out", str(tmp_path / "o")])
    assert f"--rvs {rvs} (Gamur-7, row 1) holds 61290.7, not a full Julian date" in line
    rvs.write_bytes(b"target,time,rv,rv_err\nGamur-7,2461290.7,3.0,0.7\xff\n")
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), "--rvs", str(rvs),
                                  "--out", str(tmp_path / "o")])
    assert line.endswith(f"--rvs {rvs}: is not UTF-8 text; save it as a plain UTF-8 CSV file.")
    done = tmp_path / "done.csv"
    done.write_bytes(b"target,start_utc\n\xe9\n")
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), "--done", str(done),
                                  "--out", str(tmp_path / "o")])
    assert f"--done {done}: is not UTF-8 text" in line
    assert not (tmp_path / "o").exists()


def test_a_velocity_far_outside_its_prediction_is_refused(planned):
    scenario, posteriors, _, _ = planned
    from planner.information.predict import Predictor

    post = posteriors["Gamur-7"]
    t = np.array([2461300.5])
    mean = Predictor.from_posterior(post, "ridge-echelle").velocities(t).mean(axis=0)
    near = RVData.from_arrays(t, mean + 1.0, [0.7], ["ridge-echelle"], source="new.csv")
    replan.check_new_velocities(posteriors, {"Gamur-7": near})  # a plausible value passes
    far = RVData.from_arrays(t, mean + 50_000.0, [0.7], ["ridge-echelle"], source="new.csv")
    with pytest.raises(PlanError) as info:  # 50 km/s: a unit or zero-point slip
        replan.check_new_velocities(posteriors, {"Gamur-7": far})
    assert "standard deviations from the" in str(info.value)
    assert "check its units (m/s) and its zero point" in str(info.value)


def test_a_duplicate_yaml_key_is_refused(tmp_path, capsys):
    path = _edited_tiny(tmp_path, "  max_airmass: 2.0\n",
                        "  max_airmass: 2.0\n  max_airmass: 1.2\n", "dup.yaml")
    line = _one_sentence(capsys, ["fit", str(path)])
    first = path.read_text().splitlines().index("  max_airmass: 2.0") + 1
    assert (f"dup.yaml: the key 'max_airmass' appears twice, at lines {first} and "
            f"{first + 1}; keep one of them") in line


def test_a_lost_interval_outside_the_run_is_refused(planned, tmp_path, capsys):
    _, _, plan, _ = planned
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), "--lost",
                                  "2027-11-20T02:00Z/2027-11-20T04:00Z",
                                  "--out", str(tmp_path / "o")])
    assert "the interval overlaps no night of this plan" in line
    assert "so it would change nothing" in line


@pytest.mark.parametrize("change, message", [
    (lambda v: v.update(target="Nobody-1"), "'Nobody-1' is not one of the plan's targets"),
    (lambda v: v.update(status="bogus"), ".status: 'bogus' is not one of planned, done"),
    (lambda v: v.update(ra_deg=999), ".ra_deg: 999 is outside 0 to 360"),
    (lambda v: v.update(target=7), ": target must be text, got 7"),
    (lambda v: v.update(end_utc=v["start_utc"]), "before it starts"),
])
def test_a_tampered_plan_file_is_refused(planned, tmp_path, capsys, change, message):
    _, _, plan, _ = planned
    raw = json.loads(plan.read_text())
    change(raw["visits"][0])
    edited = tmp_path / "plan.json"
    edited.write_text(json.dumps(raw))
    line = _one_sentence(capsys, ["replan", "--plan", str(edited), "--lost", "2027-10-05",
                                  "--out", str(tmp_path / "o")])
    assert "plan.json: visits[0]" in line and message in line
    assert not (tmp_path / "o").exists()


def test_a_semicolon_separated_rv_file_gets_a_hint(tmp_path):
    path = tmp_path / "star.csv"
    path.write_text("time;rv;rv_err\n2461288,5;1,0;0,5\n")
    with pytest.raises(RVDataError, match="the header looks semicolon-separated: save the file "
                                          "with commas between the columns"):
        read_rv_csv(path)


def test_velocities_beyond_any_star_are_refused(tmp_path):
    path = tmp_path / "star.csv"
    path.write_text("time,rv,rv_err\n2461288.5,1e300,0.5\n")
    with pytest.raises(RVDataError, match=r"line 2, column 'rv' holds 1e\+300: more than 1e\+06"):
        read_rv_csv(path)


def test_a_bad_item_of_a_list_is_named_by_its_index(tmp_path, capsys):
    path = _edited_tiny(tmp_path, "  options_s: [600, 1200]\n", "  options_s: [-300, 600]\n",
                        "neg.yaml")
    line = _one_sentence(capsys, ["fit", str(path)])
    assert ("neg.yaml: exposures.options_s[0]: expected a number from 10 to 14400 (exposure "
            "times [s]), got -300") in line


def test_now_before_the_run_is_named_in_utc(planned, tmp_path, capsys):
    _, _, plan, _ = planned
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), "--now", "2027-09-01T00:00Z",
                                  "--out", str(tmp_path / "o")])
    assert "--now 2027-09-01T00:00Z: 2027-09-01T00:00:00Z is before the run's first sunset" in line


def test_a_time_zone_from_the_other_side_of_the_world_is_named(tmp_path, capsys):
    # The site lies at 69.95 deg W: solar time UTC-4.7 h; Asia/Tokyo is UTC+9 (zoneinfo).
    path = _edited_tiny(tmp_path, "America/Santiago", "Asia/Tokyo", "tz.yaml")
    line = _one_sentence(capsys, ["fit", str(path)])
    assert "site.timezone: 'Asia/Tokyo' is UTC+9 h on the first night" in line
    assert "check the sign of longitude_deg (east is positive)" in line


# Sizes are bounded (docs/scenario.md, "Sizes"): refused from the file's size or the count of
# its items, before the parse or the fits, in well under the seconds and memory a full read
# would take.
def test_a_huge_scenario_file_is_refused_before_it_is_parsed(tmp_path, capsys):
    import time

    from planner.workflow.scenario import MAX_SCENARIO_BYTES

    path = _edited_tiny(tmp_path, "targets:\n", "targets:\n", "huge.yaml")
    block = ("  - id: Star-{i}\n    ra_deg: 10\n    dec_deg: -20\n    v_mag: 7\n"
             "    rv_file: rv/gamur-7.csv\n")
    with path.open("a") as handle:  # about 60 MB: 50,000 targets of about 1.2 kB
        chunk = "".join(block.format(i=i) + "#" + "x" * 1100 + "\n" for i in range(1000))
        for _ in range(50):
            handle.write(chunk)
    assert path.stat().st_size > 50e6
    start = time.perf_counter()
    line = _one_sentence(capsys, ["fit", str(path)])
    assert time.perf_counter() - start < 2.0
    assert f"more than the {MAX_SCENARIO_BYTES / 1e6:g} MB a scenario may be" in line


def test_a_scenario_with_too_many_targets_is_refused_by_count(tmp_path, capsys):
    from planner.workflow.scenario import MAX_TARGETS

    # 50,000 targets in a small file: YAML aliases repeat one target (and give one id, but the
    # count is checked first, before any target is built).
    path = _edited_tiny(tmp_path, "  - id: Gamur-7\n", "  - &one\n    id: Gamur-7\n", "many.yaml")
    text = path.read_text() + "".join("  - *one\n" for _ in range(50_000))
    path.write_text(text)
    assert path.stat().st_size < 1e6
    line = _one_sentence(capsys, ["fit", str(path), "--no-cache"])
    assert (f"targets: {50_000 + 3} targets, more than the {MAX_TARGETS} one scenario may "
            "hold; split the run") in line


def test_a_huge_rv_file_is_refused_before_it_is_read(tmp_path):
    from inference.data import MAX_RV_FILE_BYTES

    path = tmp_path / "survey.csv"
    with path.open("w") as handle:
        handle.write("time,rv,rv_err\n")
        handle.write("2461288.5,1.0,0.5\n" * (MAX_RV_FILE_BYTES // 18 + 10))
    with pytest.raises(RVDataError) as info:
        read_rv_csv(path)
    assert "MB allowed for an RV file: give one star's velocities per file" in str(info.value)


def test_an_rv_file_with_too_many_velocities_is_refused_by_count(tmp_path):
    from inference.data import MAX_VELOCITIES

    path = tmp_path / "many.csv"
    n = MAX_VELOCITIES + 1
    rows = "".join(f"{2461288.5 + i * 0.01:.4f},1,1\n" for i in range(n))
    path.write_text("time,rv,rv_err\n" + rows)
    with pytest.raises(RVDataError) as info:
        read_rv_csv(path)
    assert f"holds {n} velocities, more than the {MAX_VELOCITIES} allowed" in str(info.value)


def test_a_huge_done_file_is_refused(planned, tmp_path, capsys):
    from inference.data import MAX_RV_FILE_BYTES

    _, _, plan, _ = planned
    done = tmp_path / "done.csv"
    done.write_bytes(b"target,start_utc\n" + b"#" * (MAX_RV_FILE_BYTES + 1))
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), "--done", str(done),
                                  "--out", str(tmp_path / "o")])
    assert f"--done {done} is" in line and "MB allowed for --done files" in line


# A new user's slips, found by running the catalogue of faults again: each one sentence.
def test_a_folder_given_for_the_scenario_or_the_plan_is_named_as_a_folder(tmp_path, capsys):
    line = _one_sentence(capsys, ["fit", str(tmp_path)])
    assert line == (f"nightbits fit: scenario file {tmp_path} is a folder; give the scenario's "
                    "YAML file itself.")
    line = _one_sentence(capsys, ["replan", "--plan", str(tmp_path), "--out", str(tmp_path / "o")])
    assert line == (f"nightbits replan: plan file {tmp_path} is a folder; give the plan.json in "
                    f"it ({tmp_path / 'plan.json'}).")


def test_a_scenario_that_is_not_utf8_names_the_byte(tmp_path, capsys):
    path = _edited_tiny(tmp_path, "name: tiny test run", "name: cafe run", "l1.yaml")
    path.write_bytes(path.read_bytes().replace(b"cafe", b"caf\xe9"))  # a Latin-1 e-acute
    line = _one_sentence(capsys, ["fit", str(path)])
    offset = path.read_bytes().index(b"\xe9")
    assert line.endswith(f"is not UTF-8 text (byte 0xe9 at offset {offset}); save it as UTF-8.")


def test_an_rv_file_that_is_a_folder_is_named_as_a_folder(tmp_path, capsys):
    path = _edited_tiny(tmp_path, "rv/gamur-7.csv", "rv", "folder.yaml")
    line = _one_sentence(capsys, ["fit", str(path)])
    assert f"targets[0].rv_file: {path.parent / 'rv'} is a folder; give the file itself" in line


def test_a_zero_error_is_printed_as_a_plain_number(tmp_path):
    path = tmp_path / "star.csv"
    path.write_text("time,rv,rv_err\n2461288.5,1.0,0.5\n2461289.5,2.0,0\n")
    with pytest.raises(RVDataError) as info:
        read_rv_csv(path)
    assert str(info.value) == (
        f"{path}, line 3, column 'rv_err' holds 0.0, but measurement errors must be positive: "
        "give the velocity's 1-sigma uncertainty in m/s.")


@pytest.mark.parametrize("option, header", [("--done", "target;start_utc"),
                                            ("--rvs", "target;time;rv;rv_err")])
def test_a_semicolon_separated_done_or_rvs_file_gets_a_hint(planned, tmp_path, capsys, option,
                                                            header):
    _, _, plan, _ = planned
    path = tmp_path / "log.csv"
    path.write_text(f"{header}\nGamur-7;2027-10-05T01:00:00Z\n")
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), option, str(path),
                                  "--out", str(tmp_path / "o")])
    assert line.startswith(f"nightbits replan: {option} {path}: needs")
    assert line.endswith("(the header looks semicolon-separated: save the file with commas "
                         "between the columns and points as decimal marks).")


def test_an_unknown_target_in_rvs_names_the_file_and_line(planned, tmp_path, capsys):
    _, _, plan, _ = planned
    path = tmp_path / "new.csv"
    path.write_text("target,time,rv,rv_err\nGamur-7,2461390.1,5,1\nGamur7,2461390.2,5,1\n")
    line = _one_sentence(capsys, ["replan", "--plan", str(plan), "--rvs", str(path),
                                  "--out", str(tmp_path / "o")])
    assert line == (f"nightbits replan: --rvs {path} line 3: there is no target 'Gamur7' (did "
                    "you mean 'Gamur-7'?); use one of the ids under targets.")
