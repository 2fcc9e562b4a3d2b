"""The fits on a real Dask distributed cluster (a LocalCluster on this machine's loopback).

Skipped when dask.distributed is not installed; the test extra installs it, so CI runs it.
"""

import contextlib
import io
from pathlib import Path

import numpy as np
import pytest
import yaml

from planner.cli.main import main
from planner.workflow import pipeline

distributed = pytest.importorskip("distributed")

TINY = Path(__file__).resolve().parent / "data" / "tiny" / "tiny.yaml"


@pytest.fixture(scope="module")
def cluster():
    """One scheduler and one worker process, listening on 127.0.0.1 only."""
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", scheduler_port=0,
                                  dashboard_address="127.0.0.1:0",
                                  worker_dashboard_address=None) as local:
        yield local


@pytest.fixture(scope="module")
def one_star(tmp_path_factory):
    """The tiny run cut to its first star, so one fit runs on the cluster."""
    folder = tmp_path_factory.mktemp("one")
    doc = yaml.safe_load(TINY.read_text())
    doc["targets"] = doc["targets"][:1]
    doc["targets"][0]["rv_file"] = str(TINY.parent / doc["targets"][0]["rv_file"])
    path = folder / "one.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


def test_fits_on_the_cluster_match_the_local_fits(cluster, one_star, monkeypatch):
    scenario = pipeline.load(one_star)
    monkeypatch.setenv("NIGHTBITS_SCHEDULER", cluster.scheduler_address)
    address = pipeline.scheduler_address(None)
    assert address == cluster.scheduler_address
    remote = pipeline.fit_posteriors(scenario, cache=None, scheduler=address)
    # The scheduler ran the job (task names start with the submitted function's name).
    assert "run_job" in cluster.scheduler.task_prefixes
    local = pipeline.fit_posteriors(scenario, cache=None, jobs=1)
    # Same job, same seed: the worker's fit is the local fit, sample for sample.
    for name in local:
        np.testing.assert_array_equal(remote[name].samples, local[name].samples)


def test_fit_command_takes_scheduler_and_the_environment(cluster, one_star, tmp_path,
                                                        monkeypatch):
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(["fit", str(one_star), "--cache", str(tmp_path / "c"), "--scheduler",
                     cluster.scheduler_address])
    assert code == 0 and "Gamur-7" in out.getvalue()
    assert list((tmp_path / "c").rglob("*.npz"))  # the cluster's fit was cached here
    monkeypatch.setenv("NIGHTBITS_SCHEDULER", cluster.scheduler_address)
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["fit", str(one_star), "--no-cache"]) == 0


def test_unreachable_scheduler_is_one_sentence(one_star, capsys):
    # Port 9 on the loopback (discard) has no scheduler: the client gives up after its timeout.
    code = main(["fit", str(one_star), "--no-cache", "--scheduler", "tcp://127.0.0.1:9"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "cannot reach the Dask scheduler at 'tcp://127.0.0.1:9'" in err[0]
