"""Allocation strategies: joint (CP-SAT), greedy and cadence."""

from planner.allocate.cadence import cadence_plan
from planner.allocate.greedy import exact_gain, greedy_plan
from planner.allocate.joint import build_model, joint_plan, solve

__all__ = ["build_model", "cadence_plan", "exact_gain", "greedy_plan", "joint_plan", "solve"]
