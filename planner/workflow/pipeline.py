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
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from planner.errors import PlanError
from planner.workflow.fitting import (
    ModelFits,
    cache_folder,
    fit_jobs,
    fit_models,
    fit_posteriors,
    sampler_settings,
    scheduler_address,
)
from planner.workflow.outputs import check_out_folder
from planner.workflow.plan_file import build_plan_file, exact_marginals
from planner.workflow.prepared import PreparedRun, prepare
from planner.workflow.rungrid import RunGrid, physical_setup, run_grid
from planner.workflow.saved_curves import curves_bytes, load_curves, save_curves
from planner.workflow.scenario import Scenario, load_scenario

#: The joint strategy first solves the problem reduced to the best starts per (star, night,
#: exposure option) for half its time limit, then the whole problem hinted with that plan, so
#: the reported bound holds for the whole problem. Measured on the demo (cached posteriors,
#: 25 s): the reduced model with 12 starts per group solved to optimality in 11 s with 109.22
#: exact bits, where the whole model alone kept greedy's plan (108.49) at a 20-24 % gap.
JOINT_FOCUS_PER_GROUP = 12

#: Simulated outcomes per target of the exact score of a plan (plan.json and compare alike).
EXACT_OUTCOMES = 2048

__all__ = [
    "ComparisonReport",
    "ModelFits",
    "PlanResult",
    "PreparedRun",
    "RunGrid",
    "build_plan_file",
    "cache_folder",
    "check_out_folder",
    "compare",
    "curves_bytes",
    "demo_scenario_path",
    "exact_marginals",
    "fit_jobs",
    "fit_models",
    "fit_posteriors",
    "load",
    "limit_note",
    "load_curves",
    "make_plan",
    "pack",
    "physical_setup",
    "prepare",
    "require_room",
    "run_grid",
    "run_strategy",
    "sampler_settings",
    "search_limit",
    "save_curves",
    "scheduler_address",
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


def search_limit(scenario: Scenario, time_limit_s: float | None = None,
                 work_limit: float | None = None, replan: bool = False):
    """Return the joint search limit of a command: work, unless wall-clock time is asked for.

    ``time_limit_s`` (``--time-limit``) asks for wall-clock mode, ``work_limit``
    (``--work-limit``) for another work limit; without either, the scenario's
    ``solver.time_limit_s`` (``replan_time_limit_s`` when re-planning) if it sets one, else its
    ``solver.work_limit`` (``replan_work_limit``).

    Returns
    -------
    planner.allocation.joint.SearchLimit

    Raises
    ------
    PlanError
        If both limits are given or one is not a positive number.
    """
    from planner.allocation.joint import SearchLimit

    if time_limit_s is not None and work_limit is not None:
        raise PlanError("give either --time-limit (wall clock) or --work-limit (reproducible), "
                        "not both.")
    for name, value in (("--time-limit", time_limit_s), ("--work-limit", work_limit)):
        if value is not None and not (math.isfinite(value) and value > 0):
            raise PlanError(f"{name} {value:g}: the solver limit must be a positive number.")
    solver = scenario.solver
    if work_limit is not None:
        return SearchLimit(work=float(work_limit))
    if time_limit_s is not None:
        return SearchLimit(seconds=float(time_limit_s))
    seconds = solver.replan_time_limit_s if replan else solver.time_limit_s
    if seconds is not None:
        return SearchLimit(seconds=float(seconds))
    return SearchLimit(work=float(solver.replan_work_limit if replan else solver.work_limit))


def _as_limit(scenario: Scenario, limit):
    """Return a SearchLimit from a SearchLimit, wall-clock seconds or None (the default)."""
    from planner.allocation.joint import SearchLimit

    if isinstance(limit, SearchLimit):
        return limit
    return search_limit(scenario, time_limit_s=limit)


def run_strategy(run: PreparedRun, strategy: str, time_limit_s=None, candidates=None,
                 hint=None):
    """Solve the run's problem with one strategy (``joint``, ``greedy`` or ``cadence``).

    ``time_limit_s`` is a :class:`planner.allocation.joint.SearchLimit`, a wall-clock limit in
    seconds, or None for the scenario's default (:func:`search_limit`). ``candidates`` (indices
    into ``run.problem``) restricts the search to those candidate visits, for the re-plan at
    the telescope (:func:`planner.workflow.replan.focus_candidates`); the returned plan indexes
    the whole problem, and it has no bound, since the solver's bound would hold for the
    restricted problem only. ``hint`` (joint on the whole problem only): the greedy plan of the
    run, when the caller has it already.
    """
    from planner.allocation.cadence import cadence_plan
    from planner.allocation.greedy import greedy_plan
    from planner.allocation.joint import FOCUS_GAP_LIMIT, joint_plan
    from planner.allocation.plan import assemble_plan

    solver = run.scenario.solver
    if strategy not in ("joint", "greedy", "cadence"):
        raise PlanError(f"unknown strategy {strategy!r}; use joint, greedy or cadence.")
    problem, surrogate = run.problem, run.surrogate
    keep = None
    if candidates is not None:
        keep = np.unique(np.asarray(candidates, dtype=np.int64))
        problem, surrogate = problem.restrict(keep), surrogate.restrict(keep)
    if strategy == "joint":
        focus = JOINT_FOCUS_PER_GROUP if keep is None else None
        plan = joint_plan(problem, surrogate, limit=_as_limit(run.scenario, time_limit_s),
                          seed=solver.seed, workers=solver.workers, focus_per_group=focus,
                          gap_limit=0.0 if keep is None else FOCUS_GAP_LIMIT,
                          hint=hint if keep is None else None)
    elif strategy == "greedy":
        plan = greedy_plan(problem, surrogate)
    else:
        plan = cadence_plan(problem, surrogate)
    if keep is None:
        return plan
    return assemble_plan(
        run.problem, keep[plan.candidates], strategy=plan.strategy, objective=plan.objective,
        marginal_bits=[v.bits for v in plan.visits], bound=None, status=plan.status,
        runtime_s=plan.runtime_s, seed=plan.seed,
        stats=plan.stats + (("restricted_candidates", float(keep.size)),))


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
    closed = tuple(run.lost_jd)
    if run.now_jd is not None:
        closed += ((min(n.dark_start_jd for n in run.aligned), run.now_jd),)
    left = sum(uncovered_d(n.dark_start_jd, n.dark_end_jd, closed) for n in run.aligned)
    if left <= 0.0:
        raise PlanError("nothing left to plan: every night of the run is lost or already past "
                        "(--lost, --now), so no new plan was made and the old plan stands.")
    raise PlanError(f"{scenario.path.name}: no target can be observed in the dark time that is "
                    "left; check the lost time, the targets' windows and the constraints.")


def make_plan(run: PreparedRun, strategy: str | None = None,
              time_limit_s=None, notes=(), candidates=None, progress=None) -> PlanResult:
    """Plan the run with one strategy, pack it, verify it, score it exactly, build its file.

    ``run.now_jd`` (a re-plan at the telescope) marks the part of each night already past in
    the plan file, so the schedule counts it as executed or idle rather than lost.
    ``candidates`` restricts the search (:func:`run_strategy`); ``progress`` is called with the
    name of each later step.

    ``time_limit_s`` is the joint search limit: a
    :class:`planner.allocation.joint.SearchLimit`, a wall-clock limit in seconds, or None for
    the scenario's default (:func:`search_limit`). The plan file records what reproduces the
    plan (:func:`planner.workflow.provenance.plan_provenance`).

    ``candidates`` restricts the strategy to those candidate visits (see :func:`run_strategy`);
    the plan is still verified and scored on the whole run. ``progress(label)`` is called
    once the strategy is done, before the check and the exact score.

    Raises
    ------
    PlanError
        If nothing can be planned (:func:`require_room`) or the plan fails the independent
        feasibility check.
    """
    from planner.allocation.verify import require_valid
    from planner.workflow.fitting import posterior_keys
    from planner.workflow.provenance import plan_provenance

    require_room(run)
    strategy = strategy or run.scenario.solver.strategy
    from planner.allocation.greedy import greedy_plan

    limit = _as_limit(run.scenario, time_limit_s)
    hint = (greedy_plan(run.problem, run.surrogate)
            if strategy == "joint" and candidates is None else None)
    packing = pack(run, run_strategy(run, strategy, limit, candidates=candidates, hint=hint),
                   hint=hint)
    run = dataclasses.replace(run, problem=packing.problem, surrogate=packing.surrogate)
    plan = packing.plan
    if progress is not None:
        progress("checking and scoring")
    verification = verify(run, plan)
    require_valid(verification)
    marginals, target_bits = exact_marginals(run, plan)
    total = float(sum(target_bits.values()))
    status = [f"strategy {strategy}: {len(plan.visits)} exposures, status {plan.status}, "
              f"{plan.runtime_s:.1f} s; independent feasibility check passed "
              f"({verification.n_checked} exposures)."]
    if strategy == "joint":
        status.append(limit_note(limit))
    provenance = plan_provenance(run.scenario, posterior_keys(run.scenario), strategy, limit,
                                 focus_per_group=JOINT_FOCUS_PER_GROUP)
    plan_file = build_plan_file(run, plan, marginals, target_bits, total,
                                notes=tuple(status) + tuple(notes), now_jd=run.now_jd,
                                provenance=provenance)
    return PlanResult(plan=plan, plan_file=plan_file, verification=verification, run=run)


def limit_note(limit) -> str:
    """Return one line: how the joint search was limited, whether a rerun gives the same plan."""
    if limit.deterministic:
        return (f"search limited by work ({limit.work:g} units of CP-SAT deterministic time): "
                "the same inputs, seed and workers give the same plan.")
    return (f"search limited by wall clock ({limit.seconds:g} s): the plan may differ between "
            "runs; leave out --time-limit for a reproducible plan.")


@dataclass(frozen=True)
class ComparisonReport:
    """The three strategies on one exact score, with the printed table.

    Attributes
    ----------
    comparison : planner.allocation.compare.Comparison
        Rows per strategy (cadence, greedy, joint), per-target bits and the plans.
    text : str
        The printed table.
    limit : planner.allocation.joint.SearchLimit
        The joint search limit it was made with.
    provenance : dict
        What reproduces it (:func:`planner.workflow.provenance.plan_provenance` of the joint
        strategy).
    """

    comparison: object
    text: str
    left_out: tuple = ()
    limit: object = None
    provenance: dict | None = None

    def document(self) -> dict:
        """Return the ``compare.json`` document: the comparison and the targets left out."""
        from dataclasses import asdict

        return {**self.comparison.document(), "left_out": [asdict(e) for e in self.left_out]}


def compare(run: PreparedRun, time_limit_s=None) -> ComparisonReport:
    """Plan with cadence, greedy and joint, verify each and score them on the exact score.

    Greedy here is the same strategy as ``nightbits plan --strategy greedy`` (gains from the
    surrogate), so a row of the table is the plan that command would print; with the same
    limit, the joint row is the plan ``nightbits plan`` makes, with the same exact bits
    (each target's score has its own Monte Carlo stream of the solver seed).
    ``time_limit_s`` is as in :func:`make_plan`.
    """
    from planner.allocation.compare import compare_strategies
    from planner.information.streams import Streams
    from planner.workflow.accounting import left_out
    from planner.workflow.fitting import posterior_keys
    from planner.workflow.provenance import plan_provenance
    from planner.workflow.report import left_out_lines

    require_room(run)
    solver = run.scenario.solver
    limit = _as_limit(run.scenario, time_limit_s)
    comparison = compare_strategies(
        run.problem, run.surrogate, run.predictors, rng=np.random.default_rng(solver.seed),
        limit=limit, seed=solver.seed, workers=solver.workers, exact_greedy=False,
        focus_per_group=JOINT_FOCUS_PER_GROUP, streams=Streams(solver.seed),
        n_outcomes=EXACT_OUTCOMES, pack=lambda plan: pack(run, plan),
        verify=lambda plan: verify(run, plan))
    excluded = left_out(run)
    lines = left_out_lines(excluded)
    lines.append(f"{'strategy':<9} {'exposures':>9} {'stars':>5} {'exact bits':>15} "
                 f"{'bits/dark h':>11} {'slew h':>6} {'idle h':>6} {'runtime s':>9}  verified")
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
    lines.append(limit_note(limit))
    provenance = plan_provenance(run.scenario, posterior_keys(run.scenario), "joint", limit,
                                 focus_per_group=JOINT_FOCUS_PER_GROUP)
    return ComparisonReport(comparison=comparison, text="\n".join(lines) + "\n",
                            left_out=excluded, limit=limit, provenance=provenance)
