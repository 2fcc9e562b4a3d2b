"""planets: auto through the scenario, the fits and `nightbits fit --json`."""

import json
import shutil
from pathlib import Path

import numpy as np
import pytest
import yaml

from planner.cli.main import main
from planner.errors import ScenarioError
from planner.workflow import pipeline
from planner.workflow.fitting import model_prior
from planner.workflow.scenario import parse_scenario

TINY = Path(__file__).resolve().parent / "data" / "tiny" / "tiny.yaml"


def _scenario(tmp_path, **target):
    shutil.copytree(TINY.parent, tmp_path / "run", dirs_exist_ok=True)
    doc = yaml.safe_load(TINY.read_text())
    doc["targets"][2].update(target)
    path = tmp_path / "run" / "auto.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


def test_auto_parses_with_its_default_prior(tmp_path):
    path = _scenario(tmp_path, planets="auto")
    scenario = parse_scenario(path.read_text(), path)
    target = scenario.targets[2]
    assert (target.planets, target.max_planets) == ("auto", 2)
    assert model_prior(target) == pytest.approx((1 / 3, 1 / 3, 1 / 3))
    assert scenario.targets[0].planets == 1  # the default is unchanged


def test_settable_prior_is_normalised(tmp_path):
    path = _scenario(tmp_path, planets="auto", max_planets=1, model_prior=[3, 1])
    assert model_prior(parse_scenario(path.read_text(), path).targets[2]) == (0.75, 0.25)


@pytest.mark.parametrize(("change", "words"), [
    ({"planets": "many"}, "targets[2].planets: expected a whole number from 0 to 4 or auto"),
    ({"planets": "auto", "model_prior": [1, 1]}, "expected 3 weights"),
    ({"planets": 1, "model_prior": [1, 1]}, "applies to planets: auto only"),
    ({"planets": "auto", "model_prior": [0, 0, 0]}, "the weights are all zero"),
    ({"planets": "auto", "model_prior": [1, -1, 1]}, "targets[2].model_prior"),
])
def test_bad_model_settings_are_one_sentence(tmp_path, change, words):
    path = _scenario(tmp_path, **change)
    with pytest.raises(ScenarioError) as info:
        parse_scenario(path.read_text(), path)
    assert words in str(info.value)
    assert "\n" not in str(info.value)


def test_fit_json_holds_probabilities_that_follow_the_evidences(tmp_path, capsys):
    path = _scenario(tmp_path, planets="auto", max_planets=1)
    out = tmp_path / "models.json"
    cache = tmp_path / "cache"
    assert main(["fit", str(path), "--cache", str(cache), "--jobs", "1",
                 "--json", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "P(0)" in printed and "P(1)" in printed
    rows = {row["target"]: row for row in json.loads(out.read_text())["targets"]}
    auto = rows["Quidra-7"]
    assert auto["auto"] is True and set(auto["model_probabilities"]) == {"0", "1"}
    # Bayes' theorem over models with the equal default prior (Kass & Raftery 1995)
    z = np.array([auto["log_evidence"]["0"], auto["log_evidence"]["1"]])
    p = np.exp(z - z.max()) / np.exp(z - z.max()).sum()
    assert [auto["model_probabilities"][k] for k in "01"] == pytest.approx(p, rel=1e-9)
    assert auto["log_evidence_stderr"]["0"] == 0.0  # by quadrature
    assert rows["Gamur-7"]["auto"] is False and rows["Gamur-7"]["model_probabilities"] == {"1": 1.0}
    # the one-planet fit under auto is the same cached fit as planets: 1
    fixed = pipeline.fit_posteriors(pipeline.load(TINY), cache=cache, jobs=1)["Quidra-7"]
    assert auto["log_evidence"]["1"] == fixed.diagnostics.log_evidence


def test_fit_json_into_a_missing_folder_is_refused_before_fitting(tmp_path, capsys):
    path = _scenario(tmp_path, planets="auto")
    target = tmp_path / "nowhere" / "models.json"
    assert main(["fit", str(path), "--no-cache", "--json", str(target)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "does not exist" in err[0]
    assert not target.parent.exists()
