"""Interrupts end cleanly: "interrupted", exit 130, no temporaries, the old or the new set whole.

Each case runs the command in a child process (signals are process-wide) and interrupts it at
one step of the writer, by wrapping that step so that it sends the signal to its own process.
"""

import contextlib
import json
import os
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
TINY = ROOT / "tests" / "data" / "tiny" / "tiny.yaml"

#: Run ``nightbits ARGS`` with one writer step wrapped to send a signal to this process.
_CHILD = """
import os, signal, sys
import planner.workflow.file_set as file_set
step, kind, after = sys.argv[1], getattr(signal, sys.argv[2]), int(sys.argv[3])
calls = []
if step == "temporary":
    real = file_set.write_temporary
    def wrapped(path, data):
        made = real(path, data)
        calls.append(path)
        if len(calls) == after:
            os.kill(os.getpid(), kind)
        return made
    file_set.write_temporary = wrapped
else:
    real = os.replace
    def wrapped(src, dst):
        real(src, dst)
        calls.append(dst)
        if len(calls) == after:
            os.kill(os.getpid(), kind)
    file_set.os.replace = wrapped
from planner.cli.main import main
sys.exit(main(sys.argv[4:]))
"""


@pytest.fixture(scope="module")
def old_plan(tmp_path_factory):
    """A plan folder written once (the 'old outputs' every interrupted run must keep)."""
    base = tmp_path_factory.mktemp("interrupts")
    env = dict(os.environ, NIGHTBITS_CACHE=str(base / "cache"), PYTHONPATH=str(ROOT))
    result = subprocess.run([sys.executable, "-m", "planner", "plan", str(TINY), "--out",
                             str(base / "old")], cwd=ROOT, env=env, capture_output=True,
                            text=True, timeout=600)
    assert result.returncode == 0, result.stderr
    return base


def _interrupted(base, tmp_path, step, kind, after, extra=()):
    out = tmp_path / "out"
    shutil.copytree(base / "old", out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    env = dict(os.environ, NIGHTBITS_CACHE=str(base / "cache"), PYTHONPATH=str(ROOT))
    # Another work limit than the old plan's, so the new plan file differs from the old one.
    argv = ["plan", str(TINY), "--out", str(out), "--force", "--work-limit", "2", *extra]
    result = subprocess.run([sys.executable, "-c", _CHILD, step, kind, str(after), *argv],
                            cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
    return result, out, before


@pytest.mark.parametrize("kind", ["SIGINT", "SIGTERM"])
def test_an_interrupt_while_writing_keeps_the_old_plan(old_plan, tmp_path, kind):
    result, out, before = _interrupted(old_plan, tmp_path, "temporary", kind, 2)
    assert result.returncode == 130, result.stderr
    lines = result.stderr.strip().splitlines()
    assert lines[-1] == ("nightbits plan: interrupted; nothing was written and earlier outputs "
                         "are as they were.")
    assert "Traceback" not in result.stderr
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before  # no .tmp left either


@pytest.mark.parametrize("kind", ["SIGINT", "SIGTERM"])
def test_an_interrupt_between_the_renames_still_completes_the_new_set(old_plan, tmp_path,
                                                                      kind):
    result, out, before = _interrupted(old_plan, tmp_path, "rename", kind, 1)
    assert result.returncode == 130, result.stderr
    assert result.stderr.strip().splitlines()[-1] == (
        f"nightbits plan: interrupted; only the new plan in {out} had been written.")
    names = sorted(p.name for p in out.iterdir())
    assert names == ["curves.npz", "plan.csv", "plan.ecsv", "plan.json"]
    plan = json.loads((out / "plan.json").read_text())
    assert plan["provenance"]["solver"]["work_limit"] == 2.0  # the new plan.json ...
    rows = (out / "plan.csv").read_text().strip().splitlines()[1:]
    assert len(rows) == len(plan["visits"])  # ... with its own plan.csv, not the old one
    assert [r.split(",")[2] for r in rows] == [v["start_utc"] for v in plan["visits"]]


def test_stale_temporaries_of_a_killed_writer_are_removed(old_plan, tmp_path):
    out = tmp_path / "out"
    shutil.copytree(old_plan / "old", out)
    (out / ".plan.json.abc123.tmp").write_text("half a plan")
    env = dict(os.environ, NIGHTBITS_CACHE=str(old_plan / "cache"), PYTHONPATH=str(ROOT))
    result = subprocess.run([sys.executable, "-m", "planner", "plan", str(TINY), "--out",
                             str(out), "--force"], cwd=ROOT, env=env, capture_output=True,
                            text=True, timeout=600)
    assert result.returncode == 0, result.stderr
    names = sorted(p.name for p in out.iterdir())
    assert names == ["curves.npz", "plan.csv", "plan.ecsv", "plan.json"]


@contextlib.contextmanager
def _lock_held_elsewhere(out):
    """Hold ``out``'s OutLock in another process (flock locks belong to the open file)."""
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys, time; from planner.workflow.file_set import OutLock;"
         f" lock = OutLock({str(out)!r}); print('locked', flush=True); time.sleep(60)"],
        cwd=ROOT, env=dict(os.environ, PYTHONPATH=str(ROOT)), stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "locked"
        yield
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()


def _refused_as_locked(capsys, out):
    err = capsys.readouterr().err.strip().splitlines()
    assert err == [f"nightbits plan: another nightbits command is writing into {out}; "
                   "wait for it to finish or choose another folder with --out."]


def test_a_second_writer_into_a_locked_folder_is_refused(old_plan, tmp_path, capsys):
    from planner.cli.main import main
    from planner.workflow.file_set import OutLock

    out = tmp_path / "out"
    shutil.copytree(old_plan / "old", out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    with _lock_held_elsewhere(out):
        assert main(["plan", str(TINY), "--out", str(out), "--force"]) == 2
        _refused_as_locked(capsys, out)
        assert {p.name: p.read_bytes() for p in out.iterdir()} == before
    lock = OutLock(out)  # free again once the holder has gone
    lock.release()


def test_a_second_run_into_one_new_folder_is_refused_at_its_start(tmp_path, capsys,
                                                                   monkeypatch):
    from planner.cli.main import main
    from planner.workflow import pipeline

    out = tmp_path / "new" / "plans"  # neither folder exists yet: the first run creates them
    fitted = []
    monkeypatch.setattr(pipeline, "fit_posteriors", lambda *a, **k: fitted.append(1))
    with _lock_held_elsewhere(out):
        assert main(["plan", str(TINY), "--out", str(out), "--no-cache"]) == 2
        _refused_as_locked(capsys, out)
    assert not fitted  # refused before any work


def test_a_run_that_fails_leaves_no_empty_folder_behind(tmp_path, capsys):
    from planner.cli.main import main

    out = tmp_path / "new" / "plans"
    # The lock (and its folder) is taken before --plot is checked; a bad suffix fails after it.
    assert main(["plan", str(TINY), "--out", str(out), "--plot", str(tmp_path / "a.txt")]) == 2
    assert "use a .png, .pdf or .svg file name" in capsys.readouterr().err
    assert not (tmp_path / "new").exists()


_SOLVE = """
import sys
from ortools.sat.python import cp_model
from planner.allocation.joint import SearchLimit, joint_plan
from planner.allocation.surrogate import build_surrogate
from tests.benchmarks.instances import sky_instance
inst = sky_instance(30, 5, seed=5, n_samples=200)
surrogate = build_surrogate(inst.problem, inst.predictors)
real = cp_model.CpSolver.Solve
def announced(self, model, *args):
    print("searching", flush=True)
    return real(self, model, *args)
cp_model.CpSolver.Solve = announced
try:
    plan = joint_plan(inst.problem, surrogate, limit=SearchLimit(work=1000), workers=2)
except KeyboardInterrupt:
    print("interrupted", flush=True)
    sys.exit(130)
print("plan", plan.status, flush=True)
"""


def test_ctrl_c_inside_the_cp_sat_search_is_an_interrupt_not_a_plan():
    # CP-SAT catches SIGINT itself unless told not to, and returns its best plan as if its
    # limit were reached; the search must instead stop and raise KeyboardInterrupt.
    child = subprocess.Popen([sys.executable, "-c", _SOLVE], cwd=ROOT, text=True,
                             env=dict(os.environ, PYTHONPATH=str(ROOT)),
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        assert child.stdout.readline().strip() == "searching"
        child.send_signal(signal.SIGINT)
        out, err = child.communicate(timeout=120)
    finally:
        child.kill()
        child.wait()
    assert child.returncode == 130, err
    assert out.strip() == "interrupted"
    assert "terminate called" not in err  # the search's threads ended before the process


#: Run ``nightbits ARGS``, saying on stdout when the fitting starts.
_FITTING = """
import sys
from planner.workflow import pipeline
real = pipeline.fit_posteriors
def announced(*args, **kwargs):
    print("fitting", flush=True)
    return real(*args, **kwargs)
pipeline.fit_posteriors = announced
from planner.cli.main import main
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.parametrize("jobs", ["1", "2"])
def test_ctrl_c_during_fitting_is_interrupted_exit_130_and_the_old_plan_kept(old_plan, tmp_path,
                                                                             jobs):
    import time

    out = tmp_path / "out"
    shutil.copytree(old_plan / "old", out)
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    argv = ["plan", str(TINY), "--out", str(out), "--force", "--no-cache", "--jobs", jobs]
    # Its own session, so the SIGINT goes to the whole group like a terminal's Ctrl-C
    # (the fitting worker processes get it too).
    child = subprocess.Popen([sys.executable, "-c", _FITTING, *argv], cwd=ROOT, env=env,
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                             start_new_session=True)
    try:
        assert child.stdout.readline().strip() == "fitting"
        time.sleep(1.0)  # inside the fits (the tiny run takes several seconds to fit)
        assert child.poll() is None
        os.killpg(child.pid, signal.SIGINT)
        stdout, stderr = child.communicate(timeout=60)
    finally:
        if child.poll() is None:
            os.killpg(child.pid, signal.SIGKILL)
        child.wait()
    assert child.returncode == 130, stderr
    assert stderr.strip().splitlines()[-1] == (
        "nightbits plan: interrupted; nothing was written and earlier outputs are as they were.")
    assert "Traceback" not in stderr
    assert stdout == ""  # after "fitting": no schedule was printed
    time.sleep(0.5)
    with pytest.raises(ProcessLookupError):  # no fitting worker outlives the command
        os.killpg(child.pid, 0)
    assert {p.name: p.read_bytes() for p in out.iterdir()} == before
