"""What reproduces a plan: solver settings, seeds, posterior keys, version and input fingerprints.

A plan made with the default work limit is reproduced, visit for visit and bit for bit, by the
same nightbits version from the same scenario and RV files with the same seeds and number of
search workers (``docs/reproducibility.md``). :func:`plan_provenance` records all of that in
plan.json; :func:`differences` names, in words, what differs between two such records, so that
``nightbits replan`` and ``nightbits compare`` can say when a plan was made under other settings.
"""

from __future__ import annotations

import hashlib
from importlib import metadata
from pathlib import Path

__all__ = [
    "differences",
    "file_digest",
    "nightbits_version",
    "other_settings_note",
    "plan_provenance",
]


def nightbits_version() -> str:
    """Return the installed nightbits version (``unknown`` in an uninstalled tree)."""
    try:
        return metadata.version("nightbits")
    except metadata.PackageNotFoundError:
        return "unknown"


def file_digest(path: str | Path) -> str:
    """Hex SHA-256 of a file's bytes (``missing`` if it cannot be read)."""
    try:
        return hashlib.sha256(Path(path).read_bytes()).hexdigest()
    except OSError:
        return "missing"


def plan_provenance(scenario, posterior_keys: dict, strategy: str, limit, *,
                    focus_per_group: int | None = None) -> dict:
    """Return the record of what reproduces a plan (plan.json's ``provenance``).

    Parameters
    ----------
    scenario : planner.workflow.scenario.Scenario
    posterior_keys : dict of str to str
        The posterior cache key of each target
        (:func:`planner.workflow.fitting.posterior_keys`).
    strategy : str
        ``joint``, ``greedy`` or ``cadence``.
    limit : planner.allocation.joint.SearchLimit
        The joint search limit (recorded for every strategy; only joint searches).
    focus_per_group : int, optional
        Candidates per group of the joint strategy's first stage.

    Returns
    -------
    dict
        JSON-ready: ``nightbits_version``, ``ortools_version``, ``solver`` (strategy, mode,
        work_limit or time_limit_s, workers, seed, interleaved search, focus), ``seeds``
        (solver and Monte Carlo streams, sampler), ``posterior_cache_keys`` per target,
        ``inputs`` (SHA-256 of the scenario file and of each RV file, and one fingerprint over
        them all) and ``reproducible`` (False in wall-clock mode).
    """
    from ortools import __version__ as ortools_version

    solver = scenario.solver
    files = {"scenario": file_digest(scenario.path)}
    files.update({f"rv:{t.id}": file_digest(t.rv_file) for t in scenario.targets})
    fingerprint = hashlib.sha256(
        "\n".join(f"{k}={v}" for k, v in sorted(files.items())).encode("utf-8")).hexdigest()
    joint = strategy == "joint"
    return {
        "nightbits_version": nightbits_version(),
        "ortools_version": str(ortools_version),
        "solver": {
            "strategy": strategy,
            "mode": "work" if limit.deterministic else "wall-clock",
            "work_limit": limit.work,
            "time_limit_s": limit.seconds,
            "workers": int(solver.workers),
            "seed": int(solver.seed),
            "interleaved_search": bool(limit.deterministic and solver.workers > 1),
            "focus_per_group": focus_per_group if joint else None,
        },
        "seeds": {"solver": int(solver.seed), "monte_carlo": int(solver.seed),
                  "sampler": int(scenario.sampler.seed)},
        "posterior_cache_keys": {t.id: posterior_keys.get(t.id) for t in scenario.targets},
        "inputs": {"fingerprint": fingerprint, "files": files},
        "reproducible": bool(limit.deterministic or not joint),
    }


#: What a difference in each recorded setting is called, in the order they are reported.
_LABELS = (
    (("nightbits_version",), "nightbits version"),
    (("ortools_version",), "OR-Tools version"),
    (("solver", "mode"), "solver mode"),
    (("solver", "work_limit"), "work limit"),
    (("solver", "time_limit_s"), "wall-clock limit [s]"),
    (("solver", "workers"), "search workers"),
    (("solver", "seed"), "solver seed"),
    (("seeds", "monte_carlo"), "Monte Carlo seed"),
    (("seeds", "sampler"), "sampler seed"),
)


def _get(record: dict, keys: tuple):
    for key in keys:
        record = record.get(key) if isinstance(record, dict) else None
    return record


def differences(recorded: dict | None, current: dict, *, skip=()) -> list[str]:
    """Name in words what differs between a plan's recorded provenance and the current one.

    Parameters
    ----------
    recorded : dict or None
        The ``provenance`` of an earlier plan file (None: it has none).
    current : dict
        :func:`plan_provenance` of the current run.
    skip : sequence of str
        Labels not to report (for example the limits, which a re-plan sets on purpose).

    Returns
    -------
    list of str
        One phrase per difference (``"work limit 25 -> 8"``, ``"RV file of Gamur-7"``); empty
        when the plan was made under the same settings from the same inputs.
    """
    if not isinstance(recorded, dict):
        return ["no record of its settings (made by an older nightbits)"]
    found = []
    for keys, label in _LABELS:
        before, now = _get(recorded, keys), _get(current, keys)
        if label not in skip and before != now:
            found.append(f"{label} {_text(before)} -> {_text(now)}")
    files_before = _get(recorded, ("inputs", "files")) or {}
    files_now = _get(current, ("inputs", "files")) or {}
    for name in sorted(set(files_before) | set(files_now)):
        if files_before.get(name) != files_now.get(name):
            found.append("the scenario file's content" if name == "scenario"
                         else f"the RV file of {name.removeprefix('rv:')}")
    keys_before = recorded.get("posterior_cache_keys") or {}
    keys_now = current.get("posterior_cache_keys") or {}
    changed = sorted(t for t in set(keys_before) | set(keys_now)
                     if keys_before.get(t) != keys_now.get(t))
    if changed and "posteriors" not in skip:
        found.append(f"the posterior of {', '.join(changed[:3])}"
                     + (f" and {len(changed) - 3} more" if len(changed) > 3 else ""))
    return found


def _text(value) -> str:
    if value is None:
        return "none"
    return f"{value:g}" if isinstance(value, float) else str(value)


def other_settings_note(what: str, recorded: dict | None, current: dict, *, skip=()) -> str:
    """Return one line saying that ``what`` was made under other settings, or an empty string.

    Parameters
    ----------
    what : str
        What was made, for the sentence (``"the old plan"``, ``"out/plan.json"``).
    recorded, current, skip
        As in :func:`differences`.
    """
    found = differences(recorded, current, skip=skip)
    if not found:
        return ""
    return (f"note: {what} was made under other settings or inputs ({'; '.join(found)}), so "
            "its bits and visits are not comparable one to one.\n")
