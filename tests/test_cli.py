"""The nightbits command: help, exit codes, one sentence per user error, nothing written."""

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest
import yaml

from planner.cli.main import COMMANDS, build_parser, main

TINY = Path(__file__).resolve().parent / "data" / "tiny" / "tiny.yaml"
ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def scenario_dir(tmp_path):
    """A copy of the tiny scenario and its RV files, for editing."""
    shutil.copytree(TINY.parent, tmp_path / "run")
    return tmp_path / "run"


def _edit(folder: Path, change) -> Path:
    doc = yaml.safe_load((folder / "tiny.yaml").read_text())
    change(doc)
    path = folder / "edited.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


def _user_error(capsys, argv) -> str:
    code = main(argv)
    captured = capsys.readouterr()
    assert code == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err  # one sentence, no traceback
    assert "Traceback" not in captured.err
    return lines[0]


def test_help_is_instant_and_lists_the_commands():
    start = time.perf_counter()
    result = subprocess.run([sys.executable, "-m", "planner", "--help"], cwd=ROOT,
                            capture_output=True, text=True, timeout=60)
    elapsed = time.perf_counter() - start
    assert result.returncode == 0
    for name in ("fit", "curves", "plan", "compare", "replan"):
        assert name in result.stdout
    # Heavy packages stay unimported for --help (checked directly below); the wall time is only
    # a loose guard, the machine may be busy.
    assert elapsed < 20


def test_help_imports_no_heavy_package():
    code = ("import sys; from planner.cli.main import build_parser; build_parser(); "
            "print(','.join(m for m in ('numpy', 'astropy', 'ortools', 'emcee', 'scipy') "
            "if m in sys.modules))")
    result = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True,
                            text=True, timeout=60)
    assert result.returncode == 0 and result.stdout.strip() == ""


def test_every_command_has_help(capsys):
    parser = build_parser()
    assert len(COMMANDS) >= 5
    for name in ("fit", "curves", "plan", "compare", "replan"):
        with pytest.raises(SystemExit) as info:
            parser.parse_args([name, "--help"])
        assert info.value.code == 0
        assert "usage: nightbits" in capsys.readouterr().out


def test_bad_arguments_exit_2(capsys):
    assert main(["plan", "--strategy", "best"]) == 2
    assert "invalid choice" in capsys.readouterr().err
    assert main([]) == 2


def test_misspelt_key(scenario_dir, capsys, tmp_path):
    path = _edit(scenario_dir, lambda d: d["site"].update(latitude=d["site"].pop("latitude_deg")))
    line = _user_error(capsys, ["plan", str(path), "--out", str(tmp_path / "out")])
    assert "edited.yaml: site.latitude: unknown key (did you mean 'latitude_deg'?)" in line
    assert not (tmp_path / "out").exists()


def test_wrong_type(scenario_dir, capsys):
    path = _edit(scenario_dir, lambda d: d["targets"][1].update(v_mag="bright"))
    line = _user_error(capsys, ["fit", str(path)])
    assert "targets[1].v_mag: expected a number from -2 to 20" in line


def test_missing_rv_file(scenario_dir, capsys):
    (scenario_dir / "rv" / "lundra-15.csv").unlink()
    line = _user_error(capsys, ["fit", str(scenario_dir / "tiny.yaml")])
    assert "targets[1].rv_file: the file" in line and "does not exist" in line


def test_impossible_dates(scenario_dir, capsys):
    path = _edit(scenario_dir, lambda d: d["run"].update(first_night="2027-09-31"))
    line = _user_error(capsys, ["plan", str(path)])
    assert "run.first_night: expected a date YYYY-MM-DD" in line


def test_empty_target_list(scenario_dir, capsys):
    path = _edit(scenario_dir, lambda d: d.update(targets=[]))
    assert "targets: the target list is empty" in _user_error(capsys, ["compare", str(path)])


def test_missing_scenario_file(capsys, tmp_path):
    line = _user_error(capsys, ["curves", str(tmp_path / "none.yaml")])
    assert "does not exist" in line


def test_unknown_target_for_curves(capsys):
    line = _user_error(capsys, ["curves", str(TINY), "--target", "Gamur7"])
    assert "there is no target 'Gamur7' (did you mean 'Gamur-7'?)" in line


def test_bad_rv_file_content(scenario_dir, capsys):
    (scenario_dir / "rv" / "quidra-7.csv").write_text("time,rv,rv_err\n1.0,abc,1.0\n")
    line = _user_error(capsys, ["fit", str(scenario_dir / "tiny.yaml"), "--no-cache"])
    assert "quidra-7.csv" in line


def test_existing_plan_is_kept_without_force(capsys, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "plan.json").write_text("previous plan\n")
    line = _user_error(capsys, ["plan", str(TINY), "--out", str(out)])
    assert "already exists; pass --force" in line
    assert (out / "plan.json").read_text() == "previous plan\n"


def test_replan_with_a_bad_lost_night(capsys, tmp_path):
    line = _user_error(capsys, ["replan", str(TINY), "--plan", str(tmp_path / "plan.json"),
                                "--lost", "2027-10-09", "--out", str(tmp_path / "o")])
    assert "plan file" in line and "does not exist" in line


def test_debug_shows_the_traceback_and_keeps_exit_2(capsys):
    # The docs: exit 2 for a user mistake, with or without --debug.
    assert main(["--debug", "fit", "/nonexistent/run.yaml"]) == 2
    err = capsys.readouterr().err
    assert "Traceback (most recent call last)" in err
    assert err.strip().splitlines()[-1].startswith("nightbits fit: scenario file")


def test_outputs_and_cache_entries_get_the_umask_mode(tmp_path, monkeypatch, capsys):
    # POSIX: a new file's mode is 0666 less the umask (common practice: 022 gives 0644);
    # mkstemp's 0600 must not leak into plan files or cache entries.
    import stat

    monkeypatch.setenv("NIGHTBITS_CACHE", str(tmp_path / "cache"))
    old = os.umask(0o022)
    try:
        assert main(["plan", str(TINY), "--out", str(tmp_path / "p")]) == 0
    finally:
        os.umask(old)
    capsys.readouterr()
    files = [tmp_path / "p" / n for n in ("plan.json", "plan.csv", "curves.npz")]
    files += sorted((tmp_path / "cache").glob("*.npz"))
    assert len(files) == 6
    for path in files:
        assert stat.S_IMODE(path.stat().st_mode) == 0o644, path


def test_a_cache_or_out_path_that_is_a_file_is_one_sentence(tmp_path, capsys):
    taken = tmp_path / "taken"
    taken.write_text("not a folder\n")
    line = _user_error(capsys, ["fit", str(TINY), "--cache", str(taken)])
    assert line == (f"nightbits fit: --cache {taken}: {taken} is a file, not a folder; give a "
                    "folder for the posterior cache (or --no-cache).")
    line = _user_error(capsys, ["compare", str(TINY), "--out", str(taken)])
    assert line == (f"nightbits compare: --out {taken}: {taken} is a file, not a folder; choose "
                    "a folder with --out.")
    line = _user_error(capsys, ["plan", str(TINY), "--out", str(taken / "sub")])
    assert f"{taken} is a file, not a folder" in line
    assert taken.read_text() == "not a folder\n"


def test_plot_and_jobs_problems_fail_before_any_fitting(tmp_path, capsys, monkeypatch):
    cache = tmp_path / "cache"
    monkeypatch.setenv("NIGHTBITS_CACHE", str(cache))
    line = _user_error(capsys, ["plan", str(TINY), "--out", str(tmp_path / "p"),
                                "--plot", str(tmp_path / "nights.gif")])
    assert "--plot" in line and "use a .png, .pdf or .svg file name" in line
    line = _user_error(capsys, ["curves", str(TINY), "--plot",
                                str(tmp_path / "missing" / "c.png")])
    assert f"the folder {tmp_path / 'missing'} does not exist" in line
    line = _user_error(capsys, ["compare", str(TINY), "--plot", str(tmp_path)])
    assert "that is a folder; give a file name" in line
    assert main(["fit", str(TINY), "--jobs", "0"]) == 2
    assert "--jobs: 0 is not at least 1" in capsys.readouterr().err
    assert not cache.exists() and not (tmp_path / "p").exists()  # nothing fitted or written
