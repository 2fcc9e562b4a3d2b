"""Per-target allocation rules: visit counts, spacing, science weight and windows.

The rules are read from the scenario by the workflow layer and handed to
:func:`planner.allocation.problem.build_problem`; every strategy and the verifier obey them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from planner.errors import PlanError

__all__ = ["TargetRules", "validate_rules"]


@dataclass(frozen=True)
class TargetRules:
    """What the plan must and may do with one target.

    Attributes
    ----------
    min_visits : int
        Visits the run must contain at least (0: none required).
    max_visits : int or None
        Visits the run may contain at most (None: no limit).
    max_per_night : int
        Visits per night at most (default 1).
    min_spacing_min : int
        Minimum time between the starts of two visits of this target [min] (0: none).
    weight : float
        Science weight multiplying the target's bits (default 1).
    windows_jd : tuple of (float, float)
        Fixed windows (JD UTC, start and end): when given, every visit of the target must lie
        wholly inside one of them. Empty: anywhere the sky allows.
    must_windows_jd : tuple of (float, float)
        Must-do windows (JD UTC): the plan must hold at least one visit of the target wholly
        inside each of them.
    """

    min_visits: int = 0
    max_visits: int | None = None
    max_per_night: int = 1
    min_spacing_min: int = 0
    weight: float = 1.0
    windows_jd: tuple[tuple[float, float], ...] = ()
    must_windows_jd: tuple[tuple[float, float], ...] = ()


def _check_windows(windows: tuple, where: str, key: str) -> None:
    for k, window in enumerate(windows):
        if len(window) != 2 or not all(math.isfinite(float(w)) for w in window):
            raise PlanError(f"{where}: {key}[{k}] must be a pair of finite JD values (start, end).")
        if float(window[1]) <= float(window[0]):
            raise PlanError(
                f"{where}: {key}[{k}] ends before it starts ({window[0]} to {window[1]}); "
                "give the start first."
            )


def validate_rules(rules: TargetRules, target: str) -> TargetRules:
    """Check one target's rules and return them unchanged.

    Parameters
    ----------
    rules : TargetRules
        The rules to check.
    target : str
        Target name, used in the error message.

    Returns
    -------
    TargetRules
        The same record.

    Raises
    ------
    PlanError
        With one sentence naming the target, the rule and how to fix it.
    """
    where = f"target {target!r}"
    if rules.min_visits < 0:
        raise PlanError(f"{where}: min_visits is {rules.min_visits}; give 0 or more.")
    if rules.max_visits is not None and rules.max_visits < rules.min_visits:
        raise PlanError(
            f"{where}: max_visits ({rules.max_visits}) is below min_visits ({rules.min_visits}); "
            "raise max_visits or lower min_visits."
        )
    if rules.max_per_night < 1:
        raise PlanError(f"{where}: max_per_night is {rules.max_per_night}; give 1 or more.")
    if rules.min_spacing_min < 0:
        raise PlanError(f"{where}: min_spacing_min is {rules.min_spacing_min}; give 0 or more.")
    if not (math.isfinite(rules.weight) and rules.weight >= 0.0):
        raise PlanError(f"{where}: weight is {rules.weight}; give a finite number >= 0.")
    _check_windows(rules.windows_jd, where, "windows_jd")
    _check_windows(rules.must_windows_jd, where, "must_windows_jd")
    return rules
