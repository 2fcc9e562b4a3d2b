"""Stage 3, allocation: candidate visits, the solver objective, the plans and their score.

Takes candidate visits on the integer time grid (Problem) and the one-visit curves; gives Plans
from the joint (CP-SAT), greedy and cadence strategies, their exact joint score and an
independent feasibility check. Imports only the sky and information stages.
"""

from planner.allocation.cadence import cadence_plan
from planner.allocation.compare import Comparison, compare_strategies
from planner.allocation.greedy import greedy_plan
from planner.allocation.joint import joint_plan
from planner.allocation.plan import Plan, SearchStatus, Visit
from planner.allocation.problem import Problem, build_problem
from planner.allocation.rules import TargetRules
from planner.allocation.score import PlanScore, score_plan
from planner.allocation.surrogate import Surrogate, build_surrogate
from planner.allocation.verify import Verification, verify_plan

__all__ = [
    "build_problem",
    "build_surrogate",
    "cadence_plan",
    "compare_strategies",
    "Comparison",
    "greedy_plan",
    "joint_plan",
    "Plan",
    "SearchStatus",
    "PlanScore",
    "Problem",
    "score_plan",
    "Surrogate",
    "TargetRules",
    "Verification",
    "verify_plan",
    "Visit",
]
