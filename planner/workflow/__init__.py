"""Stage 4, workflow: from a scenario file to a written, printed plan, and re-planning.

Takes a scenario YAML and its RV files; gives validated Scenario records, fitted posteriors
(cached), the prepared run, plans, plan files, the hour-by-hour schedule and re-plans. Imports
the stages below it and inference; files and formats live here, never below.
"""

from planner.workflow.outputs import PlanFile, read_plan, write_plan
from planner.workflow.pipeline import PlanResult, compare, load, make_plan, prepare
from planner.workflow.replan import ReplanRequest, ReplanResult
from planner.workflow.report import render_schedule
from planner.workflow.scenario import Scenario, load_scenario

__all__ = [
    "compare",
    "load",
    "load_scenario",
    "make_plan",
    "PlanFile",
    "PlanResult",
    "prepare",
    "read_plan",
    "render_schedule",
    "ReplanRequest",
    "ReplanResult",
    "Scenario",
    "write_plan",
]
