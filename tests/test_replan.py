"""Re-planning: lost nights, executed visits and new velocities."""

import contextlib
import dataclasses
import io
import json
import re
from pathlib import Path

import numpy as np
import pytest

from inference.keplerian import radial_velocity
from planner.cli.main import main
from planner.errors import PlanError
from planner.workflow import pipeline, replan
from planner.workflow.outputs import format_utc, parse_utc, read_plan

TINY = Path(__file__).resolve().parent / "data" / "tiny" / "tiny.yaml"
TRUTH = Path(__file__).resolve().parents[1] / "scenarios" / "demo" / "truth" / "gamur-7.json"


@pytest.fixture(scope="session")
def base(tmp_path_factory, cache_dir):
    """The tiny run planned once: (scenario, posteriors, plan file, plan.json path)."""
    scenario = pipeline.load(TINY)
    posteriors = pipeline.fit_posteriors(scenario, cache_dir)
    result = pipeline.make_plan(pipeline.prepare(scenario, posteriors))
    out = tmp_path_factory.mktemp("base")
    from planner.workflow.outputs import write_plan

    json_path, _ = write_plan(out, result.plan_file)
    return scenario, posteriors, result.plan_file, json_path


@pytest.fixture(scope="session")
def after_night_one(base):
    """The tiny run re-planned once night 1 is over (no new velocities)."""
    scenario, posteriors, old, _ = base
    request = replan.parse_request(old, scenario, now=old.nights[1].sunset_utc)
    return request, replan.replan(scenario, posteriors, old, request)


def _overlaps(visit, a, b):
    return parse_utc(visit.start_utc) < b and parse_utc(visit.end_utc) > a


def test_losing_night_two(base, tmp_path, cache_dir):
    scenario, posteriors, old, json_path = base
    lost_night = old.nights[1]
    out = tmp_path / "replan"
    buffer = io.StringIO()
    with contextlib.redirect_stdout(buffer):
        code = main(["replan", str(TINY), "--plan", str(json_path), "--lost", lost_night.date,
                     "--cache", str(cache_dir), "--out", str(out)])
    assert code == 0
    new = read_plan(out / "plan.json")
    a, b = parse_utc(lost_night.sunset_utc), parse_utc(lost_night.sunrise_utc)
    assert new.visits and not any(_overlaps(v, a, b) for v in new.visits)
    assert new.nights[1].lost  # the loss is recorded for the next re-plan
    # The plan restricted to night 1 is still feasible, so the new plan is worth at least as
    # much as night 1 was (its marginals come first in time, so they sum to its joint value).
    night_one = sum(v.expected_bits for v in old.visits if v.night == old.nights[0].date)
    assert new.total_bits >= night_one - 0.05
    assert new.total_bits <= old.total_bits + 0.05  # less telescope time cannot be worth more
    text = buffer.getvalue()
    assert f"lost: the night of {lost_night.date}." in text
    assert "lost " in text  # the schedule shows the lost hours


def test_replanned_plan_is_verified_against_the_lost_time(base):
    scenario, posteriors, old, _ = base
    request = replan.parse_request(old, scenario, lost=[old.nights[1].date])
    result = replan.replan(scenario, posteriors, old, request)
    check = pipeline.verify(result.run, result.plan)
    assert check.ok, check.problems
    for a, b in request.lost_jd:
        assert not any(v.start_jd < b and v.end_jd > a for v in result.plan.visits)


def test_lost_interval_and_bad_lost_values(base):
    scenario, _, old, _ = base
    night = old.nights[0]
    start, end = night.dark_start_utc, night.dark_end_utc
    request = replan.parse_request(old, scenario, lost=[f"{start}/{end}"])
    assert request.lost_jd[0] == (parse_utc(start), parse_utc(end))
    with pytest.raises(PlanError, match="not a night of this plan"):
        replan.parse_request(old, scenario, lost=["2027-11-30"])
    with pytest.raises(PlanError, match="ends before it starts"):
        replan.parse_request(old, scenario, lost=[f"{end}/{start}"])
    with pytest.raises(PlanError, match="nothing to re-plan"):
        replan.parse_request(old, scenario)


def test_now_keeps_the_past_as_executed(base, after_night_one):
    old = base[2]
    now = old.nights[1].sunset_utc  # night 1 is over
    request, result = after_night_one
    night_one = [v for v in old.visits if v.night == old.nights[0].date]
    assert [(v.target, v.start_utc) for v in request.done] == [
        (v.target, v.start_utc) for v in night_one]
    kept = [v for v in result.plan_file.visits if v.status == "done"]
    assert len(kept) == len(night_one)
    assert all(v.start_jd >= parse_utc(now) for v in result.plan.visits)


def _new_velocities(old, path):
    """Three velocities of Gamur-7 on night 1, from its invented true orbit with seeded noise."""
    truth = json.loads(TRUTH.read_text())
    planet = truth["planets"][0]
    rng = np.random.default_rng(7)
    night = old.nights[0]
    # Mid-night times; UTC JD stands in for BJD_TDB here (the difference, under 10 minutes,
    # does not matter for a test of the workflow).
    t = np.linspace(parse_utc(night.dark_start_utc), parse_utc(night.dark_end_utc), 5)[1:4]
    v = truth["offset_ms"] + radial_velocity(t, planet["period_d"], planet["semi_amplitude_ms"],
                                             planet["eccentricity"], planet["omega_rad"],
                                             planet["time_periastron_bjd"])
    v = v + rng.normal(0.0, np.hypot(0.8, truth["jitter_ms"]), t.size)
    lines = ["target,time,rv,rv_err,instrument"]
    lines += [f"Gamur-7,{a:.6f},{b:.3f},0.80,ridge-echelle" for a, b in zip(t, v, strict=True)]
    path.write_text("\n".join(lines) + "\n")
    return t


def test_new_velocities_change_the_posterior_and_later_visits(base, after_night_one, tmp_path):
    scenario, posteriors, old, _ = base
    rvs = tmp_path / "new.csv"
    _new_velocities(old, rvs)
    now = old.nights[1].sunset_utc
    request = replan.parse_request(old, scenario, rv_files=[rvs], now=now)
    assert len(request.new_data["Gamur-7"]) == 3
    result = replan.replan(scenario, posteriors, old, request)
    before = posteriors["Gamur-7"].param("period_1")
    after = result.updates["Gamur-7"].posterior.param("period_1")
    assert not np.array_equal(np.sort(before), np.sort(after))
    assert result.updates["Gamur-7"].ess_fraction < 1.0  # the weights are no longer equal
    # Its later visits are valued under the new posterior: the one-visit curve changed.
    plain = after_night_one[1]
    s = [t.id for t in scenario.targets].index("Gamur-7")
    assert np.max(np.abs(result.run.bits[:, s] - plain.run.bits[:, s])) > 0.05
    later = [(v.start_utc, v.expected_bits) for v in result.plan_file.visits
             if v.target == "Gamur-7" and v.status == "planned"]
    plain_later = [(v.start_utc, v.expected_bits) for v in plain.plan_file.visits
                   if v.target == "Gamur-7" and v.status == "planned"]
    assert later != plain_later
    assert "new velocities for Gamur-7: 3 folded in" in result.changes


def test_done_file_rows_must_match_the_plan(base, tmp_path):
    scenario, _, old, _ = base
    visit = old.visits[0]
    good = tmp_path / "done.csv"
    good.write_text(f"target,start_utc\n{visit.target},{visit.start_utc}\n")
    request = replan.parse_request(old, scenario, done_file=good)
    assert [v.start_utc for v in request.done] == [visit.start_utc]
    bad = tmp_path / "bad.csv"
    bad.write_text(f"target,start_utc\n{visit.target},2027-10-04T12:00:00Z\n")
    with pytest.raises(PlanError, match=r"bad.csv line 2: the plan has no visit"):
        replan.parse_request(old, scenario, done_file=bad)


def test_saved_curves_are_reused_only_where_they_still_hold(base, tmp_path):
    scenario, posteriors, old, _ = base
    first = pipeline.prepare(scenario, posteriors, jobs=1)
    pipeline.save_curves(first, tmp_path / "curves.npz")
    saved = pipeline.load_curves(tmp_path / "curves.npz")
    night = old.nights[1]
    lost = ((parse_utc(night.sunset_utc), parse_utc(night.sunrise_utc)),)
    fresh = pipeline.prepare(scenario, posteriors, lost_jd=lost, strict=False, jobs=1)
    reused = pipeline.prepare(scenario, posteriors, lost_jd=lost, strict=False, jobs=1,
                              reuse=saved)
    # The same numbers as computing the curves again: the curve at a start depends on that
    # start only, up to the entropy core's batching (measured 2.4e-7 bit here; its stated
    # accuracy against quadrature is 1e-3 bit, docs/information.md). The lost night is empty.
    assert np.allclose(reused.bits, fresh.bits, rtol=0, atol=1e-5)
    in_lost = (first.sky.times_jd >= lost[0][0]) & (first.sky.times_jd < lost[0][1])
    assert not reused.bits[:, :, in_lost].any()
    # A changed posterior is never served from the file.
    moved = dict(posteriors)
    moved["Gamur-7"] = dataclasses.replace(posteriors["Gamur-7"], data_digest="changed")
    from planner.workflow.saved_curves import reusable_curves

    assert 0 not in reusable_curves(saved, scenario, first.sky, first.exposures,
                                    first.observable, moved)
    assert pipeline.load_curves(tmp_path / "missing.npz") is None


# Which scenario a re-plan uses, and the runs that leave nothing to plan.


def _replan_cli(capsys, argv, out):
    """Run ``nightbits replan``; return (exit code, stderr lines) after checking nothing was
    written when it fails."""
    code = main(["replan", *argv, "--out", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    if code != 0:
        assert not out.exists()  # nothing written
        assert len(err) == 1 and "Traceback" not in err[0] and "internal error" not in err[0]
    return code, err


def _tiny_copy(tmp_path, change) -> Path:
    """A copy of the tiny scenario folder with ``change`` applied to its YAML."""
    import shutil

    import yaml

    folder = tmp_path / "run"
    shutil.copytree(TINY.parent, folder)
    doc = yaml.safe_load(TINY.read_text())
    change(doc)
    path = folder / "edited.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


def _plan_recording(tmp_path, old, scenario_text) -> Path:
    """A copy of the plan file recording ``scenario_text`` as its scenario."""
    path = tmp_path / "old" / "plan.json"
    path.parent.mkdir()
    data = json.loads(old.to_json())
    data["scenario"] = scenario_text
    path.write_text(json.dumps(data))
    return path


def test_replan_without_scenario_uses_the_one_in_the_plan(base, tmp_path, cache_dir, capsys):
    scenario, _, old, json_path = base
    out = tmp_path / "again"
    code, _ = _replan_cli(capsys, ["--plan", str(json_path), "--lost", old.nights[1].date,
                                   "--cache", str(cache_dir)], out)
    assert code == 0
    new = read_plan(out / "plan.json")
    assert new.scenario == str(TINY) and new.site == old.site
    assert set(new.target_bits) == {t.id for t in scenario.targets}  # not the 40-star demo
    night = old.nights[1]
    a, b = parse_utc(night.sunset_utc), parse_utc(night.sunrise_utc)
    assert new.visits and not any(_overlaps(v, a, b) for v in new.visits)


@pytest.mark.parametrize("recorded", ["", "gone/run.yaml", "/nonexistent/run.yaml"])
def test_replan_asks_for_the_scenario_when_the_plan_has_none(base, tmp_path, capsys, recorded):
    plan_json = _plan_recording(tmp_path, base[2], recorded)
    code, err = _replan_cli(capsys, ["--plan", str(plan_json), "--lost", base[2].nights[1].date],
                            tmp_path / "o")
    assert code == 2
    assert "SCENARIO" in err[0] and str(plan_json) in err[0]
    # Given on the command line, the same plan file is accepted (and checked).
    replan.check_scenario_matches(read_plan(plan_json), base[0], plan_json)


def test_a_scenario_with_other_targets_is_refused(base, tmp_path, capsys):
    old, json_path = base[2], base[3]
    demo = pipeline.demo_scenario_path()
    code, err = _replan_cli(capsys, [str(demo), "--plan", str(json_path), "--lost",
                                     old.nights[1].date], tmp_path / "o")
    assert code == 2
    assert f"{demo.name} does not match" in err[0] and "targets" in err[0]
    assert str(TINY) in err[0]  # how to fix: the scenario the plan was made from

    def rename(doc):
        doc["targets"][0]["id"] = "Gamur-8"

    code, err = _replan_cli(capsys, [str(_tiny_copy(tmp_path, rename)), "--plan",
                                     str(json_path), "--lost", old.nights[1].date],
                            tmp_path / "o")
    assert code == 2 and "Gamur-7" in err[0] and "Gamur-8" in err[0]


@pytest.mark.parametrize("key, value", [("latitude_deg", -30.0), ("timezone", "UTC"),
                                        ("name", "Another Ridge (invented)")])
def test_a_scenario_at_another_site_is_refused(base, tmp_path, capsys, key, value):
    old, json_path = base[2], base[3]

    def move(doc):
        doc["site"][key] = value

    edited = _tiny_copy(tmp_path, move)
    code, err = _replan_cli(capsys, [str(edited), "--plan", str(json_path), "--lost",
                                     old.nights[1].date], tmp_path / "o")
    assert code == 2 and "site differs" in err[0] and key in err[0]
    with pytest.raises(PlanError, match="site differs"):
        replan.check_scenario_matches(old, pipeline.load(edited), json_path)


def test_the_same_scenario_elsewhere_is_accepted(base, tmp_path):
    copy = _tiny_copy(tmp_path, lambda doc: None)
    replan.check_scenario_matches(base[2], pipeline.load(copy), base[3])  # no error


def test_every_night_lost_or_past_leaves_nothing_to_plan(base, tmp_path, cache_dir, capsys):
    old, json_path = base[2], base[3]
    every_night = [arg for n in old.nights for arg in ("--lost", n.date)]
    after_run = parse_utc(old.nights[-1].sunrise_utc) + 1.0
    for extra in (every_night, ["--now", format_utc(after_run)]):
        code, err = _replan_cli(capsys, ["--plan", str(json_path), "--cache", str(cache_dir),
                                         *extra], tmp_path / "o")
        assert code == 2 and "nothing left to plan" in err[0]


def test_every_target_at_max_visits_zero(base, tmp_path, cache_dir, capsys):
    old, json_path = base[2], base[3]

    def none_allowed(doc):
        for target in doc["targets"]:
            target["max_visits"] = 0
            target.pop("min_visits", None)

    edited = _tiny_copy(tmp_path, none_allowed)
    for argv in (["replan", str(edited), "--plan", str(json_path), "--lost", old.nights[1].date],
                 ["plan", str(edited)]):
        out = tmp_path / argv[0]
        code = main([*argv, "--cache", str(cache_dir), "--out", str(out)])
        err = capsys.readouterr().err.strip().splitlines()
        assert code == 2 and not out.exists()
        assert len(err) == 1 and "max_visits: 0" in err[0] and "nothing to plan" in err[0]


def test_nothing_left_to_plan_is_found_before_any_fitting_or_solving(base):
    scenario, posteriors, old, _ = base
    with pytest.raises(PlanError, match="nothing left to plan"):
        replan.parse_request(old, scenario, lost=[n.date for n in old.nights])
    later = parse_utc(old.nights[-1].dark_end_utc) + 0.01
    with pytest.raises(PlanError, match="nothing left to plan"):
        replan.parse_request(old, scenario, now=format_utc(later))
    # One dark minute left is still something to plan.
    last = old.nights[-1]
    cut = format_utc(parse_utc(last.dark_end_utc) - 60.0 / 86400.0)
    request = replan.parse_request(
        old, scenario, lost=[old.nights[0].date, f"{last.sunset_utc}/{cut}"])
    assert len(request.lost_jd) == 2  # accepted: no error
    # The library refuses the same run when it is prepared directly.
    lost = tuple((parse_utc(n.sunset_utc), parse_utc(n.sunrise_utc)) for n in old.nights)
    run = pipeline.prepare(scenario, posteriors, lost_jd=lost, strict=False, jobs=1)
    with pytest.raises(PlanError, match="nothing left to plan"):
        pipeline.make_plan(run)
    spans = [(0.2, 0.5), (0.4, 0.6), (2.0, 3.0)]  # overlapping and outside
    assert pipeline.uncovered_d(0.0, 1.0, spans) == pytest.approx(0.6)


def _night_parts(night, visits):
    """Seconds of one night's dark window that are executed, lost, planned or idle.

    Reference: the definition, by a one-second sweep of the dark window (each second counted
    once: a visit's overheads and exposure, then lost time, then idle).
    """
    a0, b0 = parse_utc(night.dark_start_utc), parse_utc(night.dark_end_utc)
    seconds = np.arange(int(round((b0 - a0) * 86400.0))) + 0.5
    label = np.full(seconds.size, "idle", dtype=object)
    for lo, hi in night.lost:
        label[(seconds >= (parse_utc(lo) - a0) * 86400) & (seconds < (parse_utc(hi) - a0) * 86400)
              ] = "lost"
    for v in visits:
        lo = (parse_utc(v.start_utc) - v.slew_s / 86400.0 - a0) * 86400.0
        hi = (parse_utc(v.end_utc) - a0) * 86400.0
        label[(seconds >= lo) & (seconds < hi)] = "planned" if v.status == "planned" else "done"
    return {k: int(np.sum(label == k)) for k in ("done", "lost", "planned", "idle")}


def test_a_mid_night_replan_accounts_for_the_whole_dark_window(base):
    # --now in the middle of night 1 with its second half lost: every night's executed + lost +
    # planned + idle is its dark window, in the schedule as in the plan file; the time between
    # executed visits is idle, not lost.
    import re

    from planner.workflow.report import render_schedule

    scenario, posteriors, old, _ = base
    night = old.nights[0]
    a0, b0 = parse_utc(night.dark_start_utc), parse_utc(night.dark_end_utc)
    now = format_utc(a0 + 0.5 * (b0 - a0))
    lost = f"{format_utc(a0 + 0.6 * (b0 - a0))}/{format_utc(b0)}"
    request = replan.parse_request(old, scenario, now=now, lost=[lost])
    new = replan.replan(scenario, posteriors, old, request).plan_file
    text = render_schedule(new)
    joined = re.sub(r"\n    (?=\S)", " ", text)  # a night total's wrapped lines
    totals = re.findall(r"^ +dark (\d+)h(\d\d)m = (.*)$", joined, flags=re.M)
    assert len(totals) == len(new.nights)
    for night, (hours, minutes, parts) in zip(new.nights, totals, strict=True):
        visits = [v for v in new.visits if v.night == night.date]
        sweep = _night_parts(night, visits)
        window = (parse_utc(night.dark_end_utc) - parse_utc(night.dark_start_utc)) * 86400.0
        assert abs(sum(sweep.values()) - window) <= 1.0
        shown = [60 * int(h) + int(m) for h, m in re.findall(r"(\d+)h(\d\d)m", parts)]
        assert sum(shown) == 60 * int(hours) + int(minutes) == round(window / 60.0)
    first = text.split("== night 2")[0].split("== night 1")[1]
    executed = [k for k, line in enumerate(first.splitlines()) if line.startswith("*")]
    if len(executed) >= 2:
        between = first.splitlines()[executed[0]:executed[-1]]
        assert not any(" lost " in line for line in between)
    assert new.nights[0].past and new.nights[0].lost  # the past is kept apart from lost time

# At the telescope: what "now" is, the past, local times, the observing log, the bound.


def test_past_nights_are_executed_not_lost_and_not_replanned(base, after_night_one):
    from planner.workflow.report import render_schedule

    old = base[2]
    request, result = after_night_one
    new = result.plan_file
    assert new.now_utc == old.nights[1].sunset_utc
    assert new.nights[0].lost == ()  # the past is not lost time
    night_one = [v for v in new.visits if v.night == old.nights[0].date]
    assert night_one and all(v.status == "done" for v in night_one)
    text = render_schedule(new)
    assert "evening of Mon 2027-10-04 (past: executed, not re-planned)" in text
    assert "times local (America/Santiago, UTC-03:00) and UTC" in text
    assert not re.search(r"^ +\S+ +\S+ +lost \d", text, flags=re.M)  # no lost lines


def test_lost_alone_does_not_replan_the_past_when_the_clock_is_in_the_run(base):
    scenario, _, old, _ = base
    night_two = old.nights[1]
    during_two = parse_utc(night_two.sunset_utc) + 0.01
    a = parse_utc(night_two.dark_start_utc) + 1.0 / 24.0
    clouds = f"{format_utc(a)}/{format_utc(a + 1.0 / 24.0)}"  # an hour of night 2
    request = replan.parse_request(old, scenario, lost=[clouds], clock_jd=during_two)
    assert request.now_from_clock and request.now_jd == during_two
    night_one = {(v.target, v.start_utc) for v in old.visits if v.night == old.nights[0].date}
    assert {(v.target, v.start_utc) for v in request.done} == night_one
    # Before the run the clock closes nothing.
    before = parse_utc(old.nights[0].sunset_utc) - 30.0
    request = replan.parse_request(old, scenario, lost=[clouds], clock_jd=before)
    assert request.now_jd is None and not request.done
    # After the run the clock leaves nothing, and says so in the sentence.
    after = parse_utc(old.nights[-1].sunrise_utc) + 1.0
    with pytest.raises(PlanError, match="the time of this command; give --now"):
        replan.parse_request(old, scenario, lost=[clouds], clock_jd=after)


def test_cli_takes_the_clock_as_now(base, tmp_path, cache_dir, capsys, monkeypatch):
    import importlib

    cli = importlib.import_module("planner.cli.main")

    old, json_path = base[2], base[3]
    monkeypatch.setattr(cli, "_clock_jd", lambda: parse_utc(old.nights[1].sunset_utc) + 0.01)
    out = tmp_path / "clock"
    a = parse_utc(old.nights[1].dark_start_utc) + 1.0 / 24.0
    code, _ = _replan_cli(capsys, ["--plan", str(json_path), "--lost",
                                   f"{format_utc(a)}/{format_utc(a + 1.0 / 24.0)}",
                                   "--cache", str(cache_dir)], out)
    assert code == 0
    new = read_plan(out / "plan.json")
    night_one = [v for v in new.visits if v.night == old.nights[0].date]
    assert night_one and all(v.status == "done" for v in night_one)


def test_now_and_lost_in_local_time(base):
    scenario, _, old, _ = base
    night = old.nights[0]
    start = parse_utc(night.dark_start_utc) + 0.1
    from planner.workflow.moments import parse_moment

    utc = format_utc(start)
    as_local = _local_text(start, old.site["timezone"])
    by_utc = replan.parse_request(old, scenario, now=utc)
    by_local = replan.parse_request(old, scenario, now=as_local)
    assert by_local.now_jd == pytest.approx(by_utc.now_jd, abs=1e-9)
    span = f"{as_local}/{_local_text(start + 0.05, old.site['timezone'])}"
    request = replan.parse_request(old, scenario, lost=[span])
    assert request.lost_jd[0][0] == pytest.approx(parse_moment(utc, "UTC", "x"), abs=1e-9)
    with pytest.raises(PlanError, match="does not say its time zone"):
        replan.parse_request(old, scenario, now=utc.replace("Z", ""))


def _local_text(jd, zone):
    import datetime as dt
    from zoneinfo import ZoneInfo

    moment = dt.datetime(2000, 1, 1, 12, tzinfo=dt.timezone.utc) + dt.timedelta(
        seconds=round((jd - 2451545.0) * 86400.0))
    return moment.astimezone(ZoneInfo(zone)).strftime("%Y-%m-%d %H:%M:%S") + " local"


def test_a_replan_never_schedules_into_the_past_or_lost_time(base):
    scenario, posteriors, old, _ = base
    night = old.nights[0]
    now = parse_utc(night.dark_start_utc) + 0.08
    lost = (now + 0.03, now + 0.09)
    request = replan.parse_request(old, scenario, now=format_utc(now),
                                   lost=[f"{format_utc(lost[0])}/{format_utc(lost[1])}"])
    result = replan.replan(scenario, posteriors, old, request)
    check = pipeline.verify(result.run, result.plan)  # the independent feasibility check
    assert check.ok, check.problems
    assert result.plan.visits
    for visit in result.plan.visits:
        assert visit.start_jd - visit.slew_s / 86400.0 >= now - 1e-9
        assert not (visit.start_jd < lost[1] and visit.end_jd > lost[0])
    # At the telescope the later night is searched among fewer candidates; tonight in full.
    focus = replan.focus_candidates(result.run, old, now)
    problem = result.run.problem
    assert np.array_equal(np.flatnonzero(problem.night == 0),
                          focus[problem.night[focus] == 0])
    assert np.sum(problem.night[focus] == 1) < np.sum(problem.night == 1)


def test_replanning_with_no_change_keeps_the_plan_value(base):
    from planner.allocation.score import score_plan

    scenario, posteriors, old, _ = base
    # --now at the first sunset: before any dark time, so nothing is executed or past.
    request = replan.parse_request(old, scenario, now=old.nights[0].sunset_utc)
    assert not request.done and not request.lost_jd
    result = replan.replan(scenario, posteriors, old, request,
                           time_limit_s=scenario.solver.time_limit_s)
    score = score_plan(result.plan, result.run.problem, result.run.predictors,
                       rng=np.random.default_rng(11), n_outcomes=2048)
    # Within three standard errors of the exact score's Monte Carlo error (a 0.3 % false
    # failure budget for a Gaussian error).
    assert abs(result.plan_file.total_bits - old.total_bits) <= 3.0 * score.stderr + 1e-6


def test_observing_log_feeds_done_and_rvs(base, tmp_path):
    from planner.sky.barycentric import bjd_tdb_from_utc

    scenario, _, old, _ = base
    visits = [v for v in old.visits if v.night == old.nights[0].date][:3]
    assert len(visits) == 3
    mids = [0.5 * (parse_utc(v.start_utc) + parse_utc(v.end_utc)) for v in visits]
    lines = ["target,start_utc,end_utc,mid_utc,rv,rv_err,instrument"]
    lines.append(f"{visits[0].target},{visits[0].start_utc},{visits[0].end_utc},"
                 f"{format_utc(mids[0])},12.5,0.9,ridge-echelle")
    lines.append(f"{visits[1].target},{visits[1].start_utc},{visits[1].end_utc},"
                 f"{_local_text(mids[1], old.site['timezone'])},-3.0,1.1,ridge-echelle")
    lines.append(f"{visits[2].target},{visits[2].start_utc},{visits[2].end_utc},,,,")
    log = tmp_path / "log.csv"
    log.write_text("\n".join(lines) + "\n")
    request = replan.parse_request(old, scenario, done_file=log, rv_files=[log])
    assert [v.start_utc for v in request.done] == [v.start_utc for v in visits]
    assert sum(len(d) for d in request.new_data.values()) == 2  # the third has no velocity
    import astropy.units as u
    from astropy.coordinates import EarthLocation

    site = scenario.site
    location = EarthLocation.from_geodetic(site.longitude_deg * u.deg,
                                           site.latitude_deg * u.deg, site.elevation_m * u.m)
    for k in (0, 1):
        target = scenario.target(visits[k].target)
        data = request.new_data[target.id]
        expected = bjd_tdb_from_utc(location, target.ra_deg, target.dec_deg, [mids[k]])[0]
        assert np.any(np.abs(data.time - expected) < 1e-6)
    empty = tmp_path / "empty.csv"
    empty.write_text("target,start_utc,mid_utc,rv,rv_err\n"
                     f"{visits[2].target},{visits[2].start_utc},,,\n")
    with pytest.raises(PlanError, match="no row has a velocity"):
        replan.parse_request(old, scenario, rv_files=[empty])


@pytest.mark.parametrize("method, share, words", [
    ("reweight", 0.62, "still stand for 62% of the samples"),
    ("refit", 0.004, "rule out most of its earlier orbit samples"),
])
def test_new_velocities_are_explained_in_plain_words(method, share, words):
    from planner.information.update import PosteriorUpdate

    update = PosteriorUpdate(None, method, share * 1000, share, np.zeros(1000))
    text = replan.update_sentence("Gamur-7", 3, update)
    assert words in text and "effective samples" in text and "later visits" in text
    assert "%" in text.split("(")[0] or "0.4%" in text


def test_replan_reports_its_steps_in_order(base):
    scenario, posteriors, old, _ = base
    seen = []
    request = replan.parse_request(old, scenario, lost=[old.nights[1].date])
    replan.replan(scenario, posteriors, old, request,
                  progress=lambda done, total, label: seen.append((done, total, label)))
    assert [d for d, _, _ in seen] == sorted(d for d, _, _ in seen)  # never backwards
    assert seen[-1][0] == seen[-1][1] and len({t for _, t, _ in seen}) == 1
    labels = [label for _, _, label in seen]
    for step in ("information curves", "candidate visits", "checking and scoring"):
        assert step in labels
    assert any(label.startswith("solving (work limit") for label in labels)
