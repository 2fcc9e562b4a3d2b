"""The workflow glue: scenario, posteriors, sky, limits, noise, curves, Problem, plans.

Every command of :mod:`planner.cli.main` is a few calls into this module, so all wiring between the
packages is reached from here:

1. :func:`load` a scenario (the bundled demo when none is given);
2. :func:`fit_posteriors` (:mod:`planner.workflow.fitting`): one fit job per target through
   :func:`inference.batch.fit_many`, cached by content;
3. :func:`prepare` (:mod:`planner.workflow.prepared`): dark windows, the sky on the run grid
   (:mod:`planner.workflow.rungrid`), the observable starts of every exposure option, the
   measurement
   noise, the information curves, the candidate visits
   (:class:`planner.allocation.problem.Problem`) and
   the solver's surrogate objective;
4. :func:`make_plan` with one strategy, or :func:`compare` with all three; every plan is checked
   by the independent verifier and scored exactly before it is turned into a
   :class:`planner.workflow.outputs.PlanFile` (:mod:`planner.workflow.plan_file`).

The curves saved beside a plan for re-planning are in :mod:`planner.workflow.saved_curves`.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from planner.errors import PlanError
from planner.workflow.fitting import cache_folder, fit_jobs, fit_posteriors, sampler_settings
from planner.workflow.outputs import check_out_folder
from planner.workflow.plan_file import build_plan_file, exact_marginals
from planner.workflow.prepared import PreparedRun, prepare
from planner.workflow.rungrid import RunGrid, physical_setup, run_grid
from planner.workflow.saved_curves import load_curves, save_curves
from planner.workflow.scenario import Scenario, load_scenario

#: The joint strategy first solves the problem reduced to the best starts per (star, night,
#: exposure option) for half its time limit, then the whole problem hinted with that plan, so
#: the reported bound holds for the whole problem. Measured on the demo (cached posteriors,
#: 25 s): the reduced model with 12 starts per group solved to optimality in 11 s with 109.22
#: exact bits, where the whole model alone kept greedy's plan (108.49) at a 20-24 % gap.
JOINT_FOCUS_PER_GROUP = 12

__all__ = [
    "ComparisonReport",
    "PlanResult",
    "PreparedRun",
    "RunGrid",
    "build_plan_file",
    "cache_folder",
    "check_out_folder",
    "compare",
    "demo_scenario_path",
    "exact_marginals",
    "fit_jobs",
    "fit_posteriors",
    "load",
    "load_curves",
    "make_plan",
    "pack",
    "physical_setup",
    "prepare",
    "require_room",
    "run_grid",
    "run_strategy",
    "sampler_settings",
    "save_curves",
    "uncovered_d",
    "verify",
]

def demo_scenario_path() -> Path:
    """Path of the bundled demo scenario (installed package data, or the source tree)."""
    from importlib import resources

    try:
        return Path(str(resources.files("planner.demo").joinpath("demo.yaml")))
    except ModuleNotFoundError:  # running from a source checkout without installing
        return Path(__file__).resolve().parents[2] / "scenarios" / "demo" / "demo.yaml"


def load(path: str | Path | None) -> Scenario:
    """Load and validate a scenario; ``None`` loads the bundled demo run."""
    return load_scenario(demo_scenario_path() if path is None else path)


@dataclass(frozen=True)
class PlanResult:
    """One strategy's plan, checked and scored.

    Attributes
    ----------
    plan : planner.allocation.plan.Plan
    plan_file : planner.workflow.outputs.PlanFile
    verification : planner.allocation.verify.Verification
    run : PreparedRun
    """

    plan: object
    plan_file: object
    verification: object
    run: PreparedRun


def run_strategy(run: PreparedRun, strategy: str, time_limit_s: float | None = None,
                 hint=None):
    """Solve the run's problem with one strategy (``joint``, ``greedy`` or ``cadence``).

    ``hint`` (joint only): the greedy plan of the run, when the caller has it already.
    """
    from planner.allocation.cadence import cadence_plan
    from planner.allocation.greedy import greedy_plan
    from planner.allocation.joint import joint_plan

    solver = run.scenario.solver
    if strategy == "joint":
        limit = solver.time_limit_s if time_limit_s is None else float(time_limit_s)
        if not limit > 0:
            raise PlanError(f"the solver time limit must be positive seconds, got {limit}.")
        return joint_plan(run.problem, run.surrogate, time_limit_s=limit, seed=solver.seed,
                          workers=solver.workers, focus_per_group=JOINT_FOCUS_PER_GROUP,
                          hint=hint)
    if strategy == "greedy":
        return greedy_plan(run.problem, run.surrogate)
    if strategy == "cadence":
        return cadence_plan(run.problem, run.surrogate)
    raise PlanError(f"unknown strategy {strategy!r}; use joint, greedy or cadence.")


def pack(run: PreparedRun, plan, hint=None):
    """Pack a strategy's plan back to back and refill the freed time (same for every strategy).

    The refill values visits by the surrogate's marginal gain
    (:func:`planner.allocation.packing.surrogate_refill_gain`; the exact conditional gain was
    measured too, docs/decisions.md); the cadence plan refills with its own exposure option and
    at most one visit per target and night. The joint plan stays at least its greedy hint after
    packing: the greedy plan is packed too and the better of the two on the surrogate is kept
    (greedy's plan leaves more room to refill).

    ``hint``: the run's greedy plan, when the caller has it already.

    Returns
    -------
    planner.allocation.packing.Packing
    """
    from planner.allocation.greedy import greedy_plan
    from planner.allocation.packing import Packing, pack_plan, surrogate_refill_gain

    gain = surrogate_refill_gain(run.problem, run.surrogate)
    cadence = plan.strategy == "cadence"
    packing = pack_plan(run.problem, run.surrogate, plan, gain=gain,
                        options=[run.problem.default_option] if cadence else None,
                        max_per_night=1 if cadence else None)
    if plan.strategy != "joint":
        return packing
    hint = greedy_plan(run.problem, run.surrogate) if hint is None else hint
    hint = dataclasses.replace(hint, strategy="joint",
                               bound=plan.bound, gap=plan.gap, status=plan.status,
                               runtime_s=plan.runtime_s, seed=plan.seed, stats=plan.stats)
    other = pack_plan(run.problem, run.surrogate, hint, gain=gain)
    if other.plan.objective <= packing.plan.objective:
        return packing
    stats = other.plan.stats + (("packed_from_greedy", 1.0),)
    return Packing(other.problem, other.surrogate,
                   dataclasses.replace(other.plan, stats=stats),
                   other.moved, other.added)


def verify(run: PreparedRun, plan):
    """Check a plan from scratch against the true nights, sky, mount and rules."""
    from planner.allocation.verify import verify_plan

    targets = run.scenario.targets
    return verify_plan(plan, run.problem, site=run.site, nights=run.nights,
                       ra_deg=[t.ra_deg for t in targets], dec_deg=[t.dec_deg for t in targets],
                       constraints=run.constraints, mount=run.mount)


def uncovered_d(start_jd: float, end_jd: float, spans) -> float:
    """Length of ``[start_jd, end_jd]`` not covered by any of the ``(lo, hi)`` spans [d]."""
    cuts = sorted((max(lo, start_jd), min(hi, end_jd)) for lo, hi in spans
                  if lo < end_jd and hi > start_jd)
    covered, reach = 0.0, start_jd
    for lo, hi in cuts:
        if hi > reach:
            covered += hi - max(lo, reach)
            reach = hi
    return max(0.0, (end_jd - start_jd) - covered)


def require_room(run: PreparedRun) -> None:
    """Fail with one sentence when the run leaves nothing that could be planned.

    Raises
    ------
    PlanError
        If every target has ``max_visits: 0``, every night is lost or past, or no target can
        be observed in the dark time that is left.
    """
    scenario = run.scenario
    if all(t.max_visits == 0 for t in scenario.targets):
        raise PlanError(f"{scenario.path.name}: every target has max_visits: 0, so there is "
                        "nothing to plan; give at least one target max_visits: 1 or more.")
    if run.problem.n_candidates > 0:
        return
    left = sum(uncovered_d(n.dark_start_jd, n.dark_end_jd, run.lost_jd) for n in run.aligned)
    if left <= 0.0:
        raise PlanError("nothing left to plan: every night of the run is lost or already past "
                        "(--lost, --now), so no new plan was made and the old plan stands.")
    raise PlanError(f"{scenario.path.name}: no target can be observed in the dark time that is "
                    "left; check the lost time, the targets' windows and the constraints.")


def make_plan(run: PreparedRun, strategy: str | None = None,
              time_limit_s: float | None = None, notes=(), now_jd: float | None = None
              ) -> PlanResult:
    """Plan the run with one strategy, pack it, verify it, score it exactly, build its file.

    ``now_jd`` (a re-plan at the telescope) marks the part of each night already past in the
    plan file, so the schedule counts it as executed or idle rather than lost.

    Raises
    ------
    PlanError
        If nothing can be planned (:func:`require_room`) or the plan fails the independent
        feasibility check.
    """
    from planner.allocation.verify import require_valid

    require_room(run)
    strategy = strategy or run.scenario.solver.strategy
    from planner.allocation.greedy import greedy_plan

    hint = greedy_plan(run.problem, run.surrogate) if strategy == "joint" else None
    packing = pack(run, run_strategy(run, strategy, time_limit_s, hint=hint), hint=hint)
    run = dataclasses.replace(run, problem=packing.problem, surrogate=packing.surrogate)
    plan = packing.plan
    verification = verify(run, plan)
    require_valid(verification)
    marginals, target_bits = exact_marginals(run, plan)
    total = float(sum(target_bits.values()))
    status = [f"strategy {strategy}: {len(plan.visits)} exposures, status {plan.status}, "
              f"{plan.runtime_s:.1f} s; independent feasibility check passed "
              f"({verification.n_checked} exposures)."]
    plan_file = build_plan_file(run, plan, marginals, target_bits, total,
                                notes=tuple(status) + tuple(notes), now_jd=now_jd)
    return PlanResult(plan=plan, plan_file=plan_file, verification=verification, run=run)


@dataclass(frozen=True)
class ComparisonReport:
    """The three strategies on one exact score, with the printed table.

    Attributes
    ----------
    comparison : planner.allocation.compare.Comparison
        Rows per strategy (cadence, greedy, joint), per-target bits and the plans.
    text : str
        The printed table.
    """

    comparison: object
    text: str


def compare(run: PreparedRun, time_limit_s: float | None = None) -> ComparisonReport:
    """Plan with cadence, greedy and joint, verify each and score them on the exact score.

    Greedy here is the same strategy as ``nightbits plan --strategy greedy`` (gains from the
    surrogate), so a row of the table is the plan that command would print.
    """
    from planner.allocation.compare import compare_strategies

    require_room(run)
    solver = run.scenario.solver
    limit = solver.time_limit_s if time_limit_s is None else float(time_limit_s)
    comparison = compare_strategies(
        run.problem, run.surrogate, run.predictors, rng=np.random.default_rng(solver.seed),
        time_limit_s=limit, seed=solver.seed, workers=solver.workers, exact_greedy=False,
        focus_per_group=JOINT_FOCUS_PER_GROUP, pack=lambda plan: pack(run, plan),
        verify=lambda plan: verify(run, plan))
    lines = [f"{'strategy':<9} {'exposures':>9} {'stars':>5} {'exact bits':>15} "
             f"{'bits/dark h':>11} {'slew h':>6} {'idle h':>6} {'runtime s':>9}  verified"]
    for r in comparison.rows:
        lines.append(f"{r.strategy:<9} {r.visits:>9} {r.stars_observed:>5} "
                     f"{r.total_bits:>8.2f} +-{r.stderr:>4.2f} {r.bits_per_dark_hour:>11.3f} "
                     f"{r.slew_s / 3600:>6.2f} {r.idle_s / 3600:>6.2f} {r.runtime_s:>9.1f}  "
                     f"{'yes' if r.verified else 'no'}")
    bits = {r.strategy: r.total_bits for r in comparison.rows}
    for name in ("greedy", "cadence"):
        base = bits[name]
        share = "" if base <= 0 else f" ({100.0 * (bits['joint'] - base) / base:+.1f}%)"
        lines.append(f"joint against {name}: {bits['joint'] - base:+.2f} bits{share}")
    lines.append("exact bits: per target the joint expected information of all its visits")
    lines.append("(not a sum of single visits), weighted and summed over targets.")
    return ComparisonReport(comparison=comparison, text="\n".join(lines) + "\n")
