"""Same input, same plan: plan, compare and replan rerun in separate processes give the same files.

The default joint search is limited by work (CP-SAT deterministic time, interleaved parallel
search), and every Monte Carlo estimate draws from a stream of the one recorded seed per stage
and star, so nothing in the written files may depend on the run, the machine's load, thread
scheduling or BLAS threads. Only the timings in the status note may differ.
"""

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import yaml

ROOT = Path(__file__).resolve().parents[1]
TINY = ROOT / "tests" / "data" / "tiny" / "tiny.yaml"

#: plan, compare and replan of one scenario into one folder, in one process.
_SCRIPT = """
import sys
from planner.cli.main import main
scenario, out = sys.argv[1], sys.argv[2]
codes = [main(["plan", scenario, "--out", out + "/plan"]),
         main(["compare", scenario, "--out", out + "/compare"]),
         main(["replan", "--plan", out + "/plan/plan.json", "--lost", sys.argv[3],
               "--out", out + "/replan"])]
sys.exit(max(codes))
"""


def _timings_removed(text: str) -> str:
    """The file text without its run times (``, 0.3 s;`` in notes, ``runtime_s`` values)."""
    text = re.sub(r", [0-9.]+ s;", ", <time>;", text)
    return re.sub(r'"runtime_s": [0-9.eE+-]+', '"runtime_s": <time>', text)


def _run(scenario: Path, out: Path, cache: Path, lost: str, threads: str) -> None:
    env = dict(os.environ, NIGHTBITS_CACHE=str(cache), PYTHONPATH=str(ROOT),
               OPENBLAS_NUM_THREADS=threads, OMP_NUM_THREADS=threads)
    result = subprocess.run([sys.executable, "-c", _SCRIPT, str(scenario), str(out), lost],
                            cwd=ROOT, env=env, capture_output=True, text=True, timeout=600)
    assert result.returncode == 0, result.stderr


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    """The tiny run with two search workers (interleaved search), made twice."""
    base = tmp_path_factory.mktemp("repro")
    shutil.copytree(TINY.parent, base / "run")
    doc = yaml.safe_load((base / "run" / "tiny.yaml").read_text())
    doc["solver"]["workers"] = 2
    scenario = base / "run" / "two.yaml"
    scenario.write_text(yaml.safe_dump(doc, sort_keys=False))
    lost = "2027-10-05"  # the second night of the run
    # The first run fits the posteriors (fresh), the second loads them from the cache, with
    # another number of BLAS threads.
    _run(scenario, base / "a", base / "cache", lost, "2")
    _run(scenario, base / "b", base / "cache", lost, "1")
    return base / "a", base / "b"


@pytest.mark.parametrize("name", ["plan/plan.json", "plan/plan.csv", "compare/compare.json",
                                  "replan/plan.json", "replan/plan.csv"])
def test_two_runs_write_the_same_files(two_runs, name):
    first, second = (_timings_removed((run / name).read_text()) for run in two_runs)
    assert first == second


def test_saved_curves_are_the_same(two_runs):
    for sub in ("plan", "replan"):
        with np.load(two_runs[0] / sub / "curves.npz") as a, \
                np.load(two_runs[1] / sub / "curves.npz") as b:
            assert sorted(a.files) == sorted(b.files)
            for key in a.files:
                np.testing.assert_array_equal(a[key], b[key])


def test_the_plan_records_what_reproduces_it(two_runs):
    plan = json.loads((two_runs[0] / "plan" / "plan.json").read_text())
    record = plan["provenance"]
    assert record["solver"]["mode"] == "work" and record["reproducible"] is True
    assert record["solver"]["work_limit"] == 3.0 and record["solver"]["workers"] == 2
    assert record["solver"]["interleaved_search"] is True
    assert record["seeds"] == {"solver": 0, "monte_carlo": 0, "sampler": 3}
    assert set(record["posterior_cache_keys"]) == {"Gamur-7", "Lundra-15", "Quidra-7"}
    assert all(re.fullmatch(r"[0-9a-f]{64}", k) for k in record["posterior_cache_keys"].values())
    files = record["inputs"]["files"]
    # hashlib as the reference for the digests of the input files.
    import hashlib

    scenario = Path(plan["scenario"])
    assert files["scenario"] == hashlib.sha256(scenario.read_bytes()).hexdigest()
    rv = scenario.parent / "rv" / "gamur-7.csv"
    assert files["rv:Gamur-7"] == hashlib.sha256(rv.read_bytes()).hexdigest()
    compare = json.loads((two_runs[0] / "compare" / "compare.json").read_text())
    assert compare["provenance"]["solver"] == record["solver"]


def test_compare_scores_the_joint_plan_as_plan_does(two_runs):
    plan = json.loads((two_runs[0] / "plan" / "plan.json").read_text())
    compare = json.loads((two_runs[0] / "compare" / "compare.json").read_text())
    joint = next(r for r in compare["strategies"] if r["strategy"] == "joint")
    assert joint["total_bits"] == pytest.approx(plan["total_bits"], abs=1e-5)


#: A joint solve stopped by its work limit well before the optimum (20 stars, 4 nights).
_SOLVE = """
import sys
from planner.allocation.joint import SearchLimit, joint_plan
from planner.allocation.surrogate import build_surrogate
from tests.benchmarks.instances import sky_instance
inst = sky_instance(20, 4, seed=5, n_samples=200)
surrogate = build_surrogate(inst.problem, inst.predictors)
plan = joint_plan(inst.problem, surrogate, limit=SearchLimit(work=0.3), workers=2, seed=0)
print(plan.status, plan.objective, plan.bound, " ".join(map(str, plan.candidates)))
"""


def test_a_work_limited_search_stopped_early_is_the_same_in_two_processes():
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    runs = [subprocess.run([sys.executable, "-c", _SOLVE], cwd=ROOT, env=env,
                           capture_output=True, text=True, timeout=300) for _ in range(2)]
    assert all(r.returncode == 0 for r in runs), runs[0].stderr + runs[1].stderr
    first, second = (r.stdout.split() for r in runs)
    assert first[0] == "FEASIBLE"  # stopped by the work limit, not at a proven optimum
    assert first == second


def test_replan_and_compare_say_when_a_plan_was_made_under_other_settings(two_runs, tmp_path,
                                                                            capsys, monkeypatch):
    from planner.cli.main import main

    monkeypatch.setenv("NIGHTBITS_CACHE", str(two_runs[0].parent / "cache"))
    old = two_runs[0] / "plan" / "plan.json"
    scenario = Path(json.loads(old.read_text())["scenario"])
    doc = yaml.safe_load(scenario.read_text())
    doc["solver"]["seed"] = 1
    other = scenario.parent / "seed1.yaml"
    other.write_text(yaml.safe_dump(doc, sort_keys=False))
    assert main(["replan", str(other), "--plan", str(old), "--lost", "2027-10-05",
                 "--out", str(tmp_path / "r")]) == 0
    out = capsys.readouterr().out
    assert "note: the old plan was made under other settings or inputs (" in out
    assert "solver seed 0 -> 1" in out and "the scenario file's content" in out
    # The same scenario as the plan: nothing to say.
    assert main(["replan", "--plan", str(old), "--lost", "2027-10-05",
                 "--out", str(tmp_path / "same")]) == 0
    assert "other settings" not in capsys.readouterr().out
    # compare into the plan's folder names what differs from the plan there.
    shutil.copy(old, tmp_path / "plan.json")
    assert main(["compare", str(other), "--out", str(tmp_path), "--work-limit", "2"]) == 0
    err = capsys.readouterr().err
    assert f"note: {tmp_path / 'plan.json'} was made under other settings" in err
    assert "work limit 3 -> 2" in err


def test_wall_clock_mode_says_the_plan_may_differ(tmp_path, capsys, monkeypatch, two_runs):
    from planner.cli.main import main

    monkeypatch.setenv("NIGHTBITS_CACHE", str(two_runs[0].parent / "cache"))
    assert main(["plan", str(TINY), "--time-limit", "2", "--out", str(tmp_path / "p")]) == 0
    out = capsys.readouterr().out
    assert "search limited by wall clock (2 s): the plan may differ between runs" in out
    record = json.loads((tmp_path / "p" / "plan.json").read_text())["provenance"]
    assert record["solver"]["mode"] == "wall-clock" and record["reproducible"] is False
    assert record["solver"]["time_limit_s"] == 2.0 and record["solver"]["work_limit"] is None
    line = _one_error(capsys, ["plan", str(TINY), "--time-limit", "2", "--work-limit", "3",
                               "--out", str(tmp_path / "q")])
    assert "either --time-limit (wall clock) or --work-limit" in line
    line = _one_error(capsys, ["plan", str(TINY), "--work-limit", "-1",
                               "--out", str(tmp_path / "q")])
    assert "--work-limit -1: the solver limit must be a positive number" in line
    assert not (tmp_path / "q").exists()


def _one_error(capsys, argv) -> str:
    from planner.cli.main import main

    assert main(argv) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1, lines
    return lines[0]
