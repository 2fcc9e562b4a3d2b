"""Domain exceptions of the planner.

Every exception is a :class:`ValueError` carrying one sentence that says what was
wrong, where, and how to fix it.
"""

from __future__ import annotations

__all__ = ["PlanError", "PlannerError", "ScenarioError", "SkyError"]


class PlannerError(ValueError):
    """Base class of every planner error shown to a user."""


class ScenarioError(PlannerError):
    """A scenario (site, run, instrument, targets, settings) is invalid."""


class SkyError(PlannerError):
    """Sky geometry cannot be computed as asked (e.g. a night never gets dark)."""


class PlanError(PlannerError):
    """A plan cannot be built, solved or verified as asked."""
