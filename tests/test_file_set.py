"""Plan sets are all or nothing: a writer killed at any step leaves the old or the new set.

The writer runs in a forked child that ends with ``os._exit`` (like SIGKILL: no ``finally``,
no handler, no cleanup) just before its k-th step that touches the disk: a temporary file, a
rename or an unlink. The parent then reads the folder as any later command would and must find
every file of one set, old or new, plot included, and nothing of the other.
"""

import json
import os
from dataclasses import replace
from pathlib import Path

import pytest
from test_outputs import make_plan

import planner.workflow.file_set as file_set
from planner.errors import PlanError
from planner.workflow.outputs import read_plan, write_plan

OLD = make_plan()
NEW = replace(OLD, total_bits=3.0, notes=("the new plan",), visits=OLD.visits[:2])
assert NEW.to_csv() != OLD.to_csv()


def _write(out: Path, plot: Path, plan, tag: str) -> None:
    write_plan(out, plan, force=True, plot=(plot, f"{tag} png".encode()),
               extra={"plan.ecsv": f"{tag} ecsv\n", "curves.npz": f"{tag} npz".encode()})


def _steps_of_a_write(tmp_path) -> int:
    """Count the disk steps of one full write (temporaries, renames, unlinks)."""
    out, plot = tmp_path / "count", tmp_path / "count.png"
    _write(out, plot, OLD, "old")
    calls = []
    real = {name: getattr(os, name) for name in ("replace", "unlink")}
    real_tmp = file_set.write_temporary

    def counting(name):
        def step(*args, **kwargs):
            calls.append(name)
            return real[name](*args, **kwargs)
        return step

    def counting_tmp(*args):
        calls.append("temporary")
        return real_tmp(*args)

    try:
        os.replace, os.unlink = counting("replace"), counting("unlink")
        file_set.write_temporary = counting_tmp
        _write(out, plot, NEW, "new")
    finally:
        os.replace, os.unlink = real["replace"], real["unlink"]
        file_set.write_temporary = real_tmp
    return len(calls)


def _killed_at(out: Path, plot: Path, k: int) -> int:
    """Write NEW over OLD in a child killed just before its k-th disk step; its exit status."""
    pid = os.fork()
    if pid == 0:  # the child: never returns into pytest
        try:
            count = [0]

            def before(real):
                def step(*args, **kwargs):
                    count[0] += 1
                    if count[0] == k:
                        os._exit(9)
                    return real(*args, **kwargs)
                return step

            os.replace, os.unlink = before(os.replace), before(os.unlink)
            file_set.write_temporary = before(file_set.write_temporary)
            _write(out, plot, NEW, "new")
            os._exit(0)
        except BaseException:
            os._exit(3)
    _, status = os.waitpid(pid, 0)
    return os.waitstatus_to_exitcode(status)


def test_a_writer_killed_at_every_step_leaves_the_old_or_the_new_set(tmp_path):
    n = _steps_of_a_write(tmp_path)
    assert n == 5 + 1 + 1 + 5 + 1  # 5 temporaries and the journal's, its rename, 5 renames, unlink
    seen = set()
    for k in range(1, n + 2):  # k = n + 1: the writer is never stopped
        out, plot = tmp_path / f"out{k}", tmp_path / f"plot{k}.png"
        _write(out, plot, OLD, "old")
        status = _killed_at(out, plot, k)
        assert status == (0 if k == n + 1 else 9), k
        plan = read_plan(out / "plan.json")  # as the next command: finishes a committed set
        tag = "new" if plan.total_bits == 3.0 else "old"
        seen.add(tag)
        assert (out / "plan.ecsv").read_text() == f"{tag} ecsv\n", k
        assert (out / "curves.npz").read_bytes() == f"{tag} npz".encode(), k
        assert plot.read_bytes() == f"{tag} png".encode(), k
        expected = (NEW if tag == "new" else OLD).to_csv()
        assert (out / "plan.csv").read_text() == expected, k
        assert not (out / file_set.JOURNAL_NAME).exists()
        _write(out, plot, OLD, "old")  # the next writer removes what the killed one left
        assert sorted(p.name for p in out.iterdir()) == [
            "curves.npz", "plan.csv", "plan.ecsv", "plan.json"], k
        assert not list(tmp_path.glob(f".plot{k}.png.*.tmp")), k
    assert seen == {"old", "new"}  # killed before the journal: old; after it: new


def test_a_mixed_set_is_refused_on_read(tmp_path, capsys):
    out, plot = tmp_path / "out", tmp_path / "plot.png"
    _write(out, plot, OLD, "old")
    old_csv = (out / "plan.csv").read_bytes()
    _write(out, plot, NEW, "new")
    (out / "plan.csv").write_bytes(old_csv)  # an old plan.csv beside the new plan.json
    with pytest.raises(PlanError) as info:
        read_plan(out / "plan.json")
    assert str(info.value) == (
        f"{out / 'plan.csv'} is not the plan.csv written with plan.json (its digest differs): "
        "the folder holds a mixed set of plan files; make the plan again with --force.")
    manifest = json.loads((out / "plan.json").read_text())
    assert manifest["plot"]["path"] == str(plot.resolve())
    assert sorted(manifest["files"]) == ["curves.npz", "plan.csv", "plan.ecsv"]


def test_a_damaged_journal_is_one_sentence(tmp_path):
    out, plot = tmp_path / "out", tmp_path / "plot.png"
    _write(out, plot, OLD, "old")
    (out / file_set.JOURNAL_NAME).write_text("{not json")
    with pytest.raises(PlanError, match="is damaged, so the set of files in .* may be mixed"):
        read_plan(out / "plan.json")
