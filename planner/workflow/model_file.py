"""The model probabilities of every target: the document ``nightbits fit --json`` writes.

For each target, the numbers of planets compared with their prior and posterior probabilities
(the latter with standard errors), their evidences ln Z with standard errors, and the number
of planets the later stages use (:attr:`planner.workflow.fitting.ModelFits.chosen`). A target
with a fixed ``planets`` has one model, of probability one by its scenario.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from planner.errors import PlanError
from planner.workflow.outputs import atomic_write_text, nearest_existing

__all__ = ["check_models_file", "models_document", "write_models_json"]


def models_document(scenario, fits: dict) -> dict:
    """Return the JSON-ready model probabilities of every target, in scenario order.

    Parameters
    ----------
    scenario : planner.workflow.scenario.Scenario
    fits : dict of str to planner.workflow.fitting.ModelFits

    Returns
    -------
    dict
        ``{"targets": [{"target", "auto", "planets", "model_probabilities", "log_evidence",
        "log_evidence_stderr", ...}]}``; counts are keys "0", "1", ...
    """
    from inference.evidence import model_probabilities

    rows = []
    for target in scenario.targets:
        fit = fits[target.id]
        probs = fit.probabilities
        if probs is None:  # a fixed model: probability one by the scenario
            d = fit.chosen.diagnostics
            probs = model_probabilities((fit.chosen.model.n_planets,), (d.log_evidence,),
                                        (d.log_evidence_se,), (1.0,))
        rows.append({"target": target.id, "auto": probs is fit.probabilities,
                     "planets": int(fit.chosen.model.n_planets), **probs.to_dict()})
    return {"targets": rows}


def check_models_file(path: str | Path) -> Path:
    """Fail at once, before any fit, if the model file could not be written at ``path``.

    Raises
    ------
    PlanError
        If ``path`` is a folder, or its folder does not exist or cannot be written.
    """
    path = Path(path)
    if path.is_dir():
        raise PlanError(f"--json {path} is a folder; give a file name such as models.json.")
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        found = nearest_existing(folder)
        raise PlanError(f"--json {path}: the folder {folder} does not exist (nearest existing: "
                        f"{found}); create it or choose another file.")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise PlanError(f"--json {path}: the folder {folder} cannot be written; choose "
                        "another file.")
    return path


def write_models_json(scenario, fits: dict, path: str | Path) -> Path:
    """Write :func:`models_document` to ``path`` atomically and return the path."""
    path = Path(path)
    document = models_document(scenario, fits)
    atomic_write_text(path, json.dumps(document, indent=2, allow_nan=False) + "\n")
    return path
