"""Joint strategy: all nights at once with OR-Tools CP-SAT.

The model is time-indexed: one Boolean per candidate visit (fixed start, option and target).
Visits of one night may not overlap and must leave each slew between them:

* one ``AtMostOne`` per instant clique, the candidates whose exposure plus the smallest
  possible changeover covers one start time (a clique formulation, whose linear relaxation is
  much stronger than one NoOverlap of optional intervals);
* one clause per remaining pair that conflicts only through its real, longer slew, so the
  returned schedule respects the exact slew between every pair of neighbours.

Per-target rules are linear constraints; the objective is the visit-pattern surrogate
(:mod:`planner.allocation.surrogate`, one Boolean per visit pattern of each target) in integer
units. The greedy plan is given as a complete hint, so the solver starts from a feasible plan
and never returns a worse one. CP-SAT's best objective bound is a proven upper bound on the
surrogate over every plan of the problem; the gap is reported against it (no bound when the
search found nothing in time).
"""

from __future__ import annotations

import contextlib
import dataclasses
import itertools
import os
import time
from dataclasses import dataclass

import numpy as np
from ortools.sat.python import cp_model

from planner.allocation.conflicts import (
    instant_cliques,
    max_changeover_min,
    slew_pairs,
    spacing_cliques,
)
from planner.allocation.greedy import greedy_plan
from planner.allocation.plan import Plan, assemble_plan
from planner.allocation.problem import Problem
from planner.allocation.surrogate import CountValues, Surrogate
from planner.errors import PlanError

__all__ = [
    "DEFAULT_WORK_LIMIT",
    "FOCUS_GAP_LIMIT",
    "JointHandles",
    "SearchLimit",
    "build_model",
    "joint_plan",
    "solve",
]

#: Relative gap at which the first (reduced) stage of a two-stage solve stops; the second stage
#: searches on from its plan. On the demo the reduced model reached 0.5 % in 5.3 s (114.88
#: surrogate bits; 115.13 after its whole 12.5 s). Giving the second stage the time the first
#: left made `nightbits plan` 16 % slower than with the previous surrogate (54.3 s against
#: 46.9 s) for no measurable gain (113.46 and 113.92 exact bits against 113.05 and 113.78).
FOCUS_GAP_LIMIT = 0.005

#: Work limit used when neither a work limit nor a wall-clock limit is given, in CP-SAT's
#: deterministic time units (the scenario's ``solver.work_limit`` is the calibrated default).
DEFAULT_WORK_LIMIT = 10.0


@dataclass(frozen=True)
class SearchLimit:
    """How long CP-SAT searches: a work limit (reproducible) or a wall-clock limit.

    Attributes
    ----------
    work : float or None
        CP-SAT deterministic time [its own units, about seconds of one core's work]. Given a
        model, seed and worker count, a search stopped by work alone returns the same solution
        on every run and machine load (the parallel search is interleaved in fixed batches).
    seconds : float or None
        Wall-clock limit [s]: the search stops wherever the machine's load has let it get, so
        the plan may differ between runs. Used only when ``work`` is None.
    """

    work: float | None = None
    seconds: float | None = None

    def __post_init__(self) -> None:
        if (self.work is None) == (self.seconds is None):
            raise ValueError("give exactly one of a work limit and a wall-clock limit.")
        value = self.work if self.work is not None else self.seconds
        if not value > 0:
            raise ValueError(f"a search limit must be positive, got {value}.")

    @property
    def deterministic(self) -> bool:
        """True for a work limit (the search is reproducible)."""
        return self.work is not None

    def share(self, fraction: float) -> SearchLimit:
        """Return the same kind of limit, ``fraction`` of this one."""
        if self.work is not None:
            return SearchLimit(work=self.work * fraction)
        return SearchLimit(seconds=self.seconds * fraction)

    def describe(self) -> str:
        """``work 12`` or ``wall-clock 25 s``, for messages."""
        return f"work {self.work:g}" if self.work is not None else f"wall-clock {self.seconds:g} s"


def _limit(limit: SearchLimit | None, time_limit_s: float | None) -> SearchLimit:
    """Return ``limit``, else a wall-clock ``time_limit_s``, else the default work limit."""
    if limit is not None:
        if time_limit_s is not None:
            raise ValueError("give either limit or time_limit_s, not both.")
        return limit
    if time_limit_s is not None:
        return SearchLimit(seconds=float(time_limit_s))
    return SearchLimit(work=DEFAULT_WORK_LIMIT)


def _set_parameters(solver: cp_model.CpSolver, limit: SearchLimit, seed: int, workers: int,
                    gap_limit: float) -> None:
    """Set CP-SAT's limit, seed, workers and the search settings these models need."""
    params = solver.parameters
    if limit.deterministic:
        params.max_deterministic_time = float(limit.work)
        # Interleaved search runs the workers' subsolvers in fixed batches of deterministic
        # time and shares solutions only between batches, so the result depends on the model,
        # the seed and the worker count, not on thread timing.
        params.interleave_search = workers > 1
    else:
        params.max_time_in_seconds = float(limit.seconds)
    params.random_seed = int(seed)
    params.num_workers = int(workers)
    # CP-SAT would catch Ctrl-C itself and return its best plan as if the limit were reached;
    # _search lets the interrupt reach Python instead.
    params.catch_sigint_signal = False
    # Probing in presolve adds about a million implications between the visit-pattern
    # Booleans and took the whole demo limit; without it the demo's reduced model reached a
    # 0.3 % gap in 12.5 s (docs/allocation.md).
    params.cp_model_probing_level = 0
    params.relative_gap_limit = float(gap_limit)
    if workers == 1:
        params.linearization_level = 2
    elif workers == 2:
        # CP-SAT's own two-worker portfolio leaves the bound at a weak value on these models;
        # two LP-based workers (full and default linearisation) close it (docs/allocation.md).
        params.subsolvers.extend(["max_lp", "default_lp"])


@dataclass(frozen=True, eq=False)
class JointHandles:
    """Variables of a joint model, for reading a solution back.

    Attributes
    ----------
    problem : Problem
        The problem the model was built from.
    surrogate : Surrogate
        Its objective.
    x : list of cp_model.IntVar
        One Boolean per candidate visit.
    hint : ndarray of int or None
        Candidate indices given as the solution hint.
    stats : tuple of (str, float)
        Model size figures.
    """

    problem: Problem
    surrogate: Surrogate
    x: list
    hint: np.ndarray | None
    stats: tuple[tuple[str, float], ...]


def build_model(
    problem: Problem, surrogate: Surrogate, *, hint: np.ndarray | None = None
) -> tuple[cp_model.CpModel, JointHandles]:
    """Build the CP-SAT model of a problem.

    Parameters
    ----------
    problem : Problem
        Candidate visits and rules.
    surrogate : Surrogate
        Integer objective.
    hint : ndarray of int, optional
        Candidate indices of a feasible plan, given as a full solution hint.

    Returns
    -------
    model : cp_model.CpModel
        The model (maximisation).
    handles : JointHandles
        Its variables.
    """
    model = cp_model.CpModel()
    x = [model.NewBoolVar(f"x_{c}") for c in range(problem.n_candidates)]
    cliques = instant_cliques(problem)
    for members in cliques:
        model.AddAtMostOne(x[c] for c in members)
    pairs = slew_pairs(problem, max_changeover_min(problem))
    for a, b in pairs:
        model.AddBoolOr([x[a].Not(), x[b].Not()])
    for members in spacing_cliques(problem):
        model.AddAtMostOne(x[c] for c in members)

    objective = [int(surrogate.unary[c]) * x[c] for c in range(problem.n_candidates)]
    hint_set = set() if hint is None else {int(c) for c in hint}
    n_patterns = 0
    for s, rule in enumerate(problem.rules):
        mine = np.flatnonzero(problem.target == s)
        if mine.size == 0:
            if rule.min_visits > 0 or rule.must_windows_jd:
                raise PlanError(
                    f"Target {problem.target_names[s]!r} has required visits but no observable "
                    "start in the run; relax its rules or its limits."
                )
            continue
        total = sum(x[c] for c in mine)
        model.Add(total >= rule.min_visits)
        if rule.max_visits is not None:
            model.Add(total <= rule.max_visits)
        for lo, hi in rule.must_windows_jd:
            inside = mine[(problem.start_jd(mine) >= lo) & (problem.end_jd(mine) <= hi)]
            model.Add(sum(x[c] for c in inside) >= 1)
        hinted = [c for c in hint_set if problem.target[c] == s]
        hinted_key = surrogate.key(problem, *np.unique(problem.night[hinted], return_counts=True))
        if isinstance(surrogate.patterns[s], CountValues):
            objective.extend(_count_terms(model, problem, surrogate, s, x, mine,
                                          None if hint is None else hinted_key))
            n_patterns += len(surrogate.patterns[s].table)
            continue
        # One Boolean per visit pattern (visits per night); each night's visit count is the
        # sum of the patterns' counts for it, so the relaxation is the convex hull of V.
        chooser = []
        per_night = {}
        for key in surrogate.patterns[s]:
            if key == 0:
                continue
            p = model.NewBoolVar(f"p_{s}_{key}")
            chooser.append(p)
            objective.append(int(surrogate.net(problem, s, key)) * p)
            for n in range(problem.n_nights):
                k = sum(key >> (n + j * problem.n_nights) & 1
                        for j in range(surrogate.slots.shape[2]))
                if k:
                    per_night.setdefault(n, []).append((k, p))
            if hint is not None:
                model.AddHint(p, int(key == hinted_key))
        n_patterns += len(chooser)
        model.AddAtMostOne(chooser)
        for n in np.unique(problem.night[mine]):
            members = mine[problem.night[mine] == n]
            model.Add(sum(x[c] for c in members)
                      == sum(k * p for k, p in per_night.get(int(n), [])))
    model.Maximize(sum(objective))
    if hint is not None:
        for c in range(problem.n_candidates):
            model.AddHint(x[c], int(c in hint_set))
    stats = (
        ("candidates", problem.n_candidates),
        ("instant_cliques", len(cliques)),
        ("slew_pairs", len(pairs)),
        ("night_patterns", n_patterns),
    )
    return model, JointHandles(problem, surrogate, x, None if hint is None else np.asarray(hint),
                               stats)


def _count_terms(model, problem: Problem, surrogate: Surrogate, s: int, x: list,
                 mine: np.ndarray, hinted_key: int | None) -> list:
    """Objective terms of a target in the count form (:class:`CountValues`).

    One Boolean ``z_nk`` per night and slot (the night holds more than ``k`` visits, so
    ``z_nk <= z_n(k-1)``), one Boolean per count ``t`` (at most one chosen) with
    ``sum_n z_nk = sum_t t_k y_t``: the relaxation is the convex hull of ``G`` over counts,
    and each slot adds ``rho b_{r_nk}`` less the slot's value.
    """
    values = surrogate.patterns[s]
    n_n = problem.n_nights
    n_slots = values.present.shape[1]
    terms = []
    level = [[] for _ in range(n_slots)]
    first = {}
    for n in np.unique(problem.night[mine]).tolist():
        members = mine[problem.night[mine] == n]
        zs = []
        for k in range(n_slots):
            if not values.present[n, k]:
                break
            z = model.NewBoolVar(f"z_{s}_{n}_{k}")
            if zs:
                model.AddImplication(z, zs[-1])
            zs.append(z)
            level[k].append(z)
            if k == 0:
                first[n] = z
            terms.append(int(values.reps[n, k] - surrogate.slots[s, n, k]) * z)
            if hinted_key is not None:
                model.AddHint(z, int(hinted_key >> (n + k * n_n) & 1))
        model.Add(sum(x[c] for c in members) == sum(zs))
    # Pairs of nights visited together: w <= both for a bonus, w >= their conjunction for a
    # cost, so w is their product wherever it matters.
    for a, b in itertools.combinations(sorted(first), 2):
        q = int(values.pairs[a, b])
        if q == 0:
            continue
        w = model.NewBoolVar(f"w_{s}_{a}_{b}")
        if q > 0:
            model.AddImplication(w, first[a])
            model.AddImplication(w, first[b])
        else:
            model.AddBoolOr([first[a].Not(), first[b].Not(), w])
        terms.append(q * w)
        if hinted_key is not None:
            model.AddHint(w, int(hinted_key >> a & 1 and hinted_key >> b & 1))
    hinted = None if hinted_key is None else values.counts(hinted_key)
    chooser = []
    for t, g in values.table.items():
        if sum(t) == 0:
            continue
        y = model.NewBoolVar(f"t_{s}_{'_'.join(map(str, t))}")
        chooser.append((t, y))
        terms.append(int(g) * y)
        if hinted_key is not None:
            model.AddHint(y, int(t == hinted))
    model.AddAtMostOne(y for _, y in chooser)
    for k in range(n_slots):
        model.Add(sum(level[k]) == sum(t[k] * y for t, y in chooser if t[k]))
    return terms


def solve(
    model: cp_model.CpModel,
    handles: JointHandles,
    *,
    time_limit_s: float | None = None,
    seed: int = 0,
    workers: int = 2,
    gap_limit: float = 0.0,
    limit: SearchLimit | None = None,
) -> Plan:
    """Solve a joint model and read the plan back.

    Parameters
    ----------
    model : cp_model.CpModel
        From :func:`build_model`.
    handles : JointHandles
        Its variables.
    time_limit_s : float, optional
        Wall-clock limit of the search [s] (the plan may then differ between runs).
    seed : int
        CP-SAT random seed.
    workers : int
        CP-SAT search workers.
    gap_limit : float
        Stop once the relative gap is at most this (0: search to the optimum or the limit); a
        plan stopped so has status ``WITHIN_GAP``.
    limit : SearchLimit, optional
        The search limit; default: wall clock ``time_limit_s`` if given, else the work limit
        ``DEFAULT_WORK_LIMIT`` (reproducible).

    Returns
    -------
    Plan
        The best plan found (the hint's plan if the solver found none in time), with the proven
        bound and the gap on the surrogate.

    Raises
    ------
    PlanError
        If the rules cannot all be met, or no plan was found and no hint was given.
    """
    problem, surrogate = handles.problem, handles.surrogate
    limit = _limit(limit, time_limit_s)
    solver = cp_model.CpSolver()
    _set_parameters(solver, limit, seed, workers, gap_limit)
    t0 = time.perf_counter()
    status = _search(solver, model)
    runtime = time.perf_counter() - t0
    name = solver.StatusName(status)
    if status == cp_model.INFEASIBLE:
        raise PlanError(_infeasible_rule(problem, surrogate))
    if status in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        chosen = np.array([c for c in range(problem.n_candidates) if solver.Value(handles.x[c])],
                          dtype=np.int64)
    elif handles.hint is not None:
        chosen, name = handles.hint, "HINT_ONLY"  # nothing proven either: no bound
    else:
        raise PlanError(
            f"The solver found no plan within its limit ({limit.describe()}); raise it."
        )
    value = surrogate.value(problem, chosen)
    bound = (max(solver.BestObjectiveBound(), value) / surrogate.scale
             if name != "HINT_ONLY" else None)
    if name == "OPTIMAL" and bound is not None and bound * surrogate.scale > value:
        name = "WITHIN_GAP"  # CP-SAT calls a search stopped by the gap limit optimal
    marginal = _marginals(problem, surrogate, chosen)
    stats = handles.stats + (
        ("branches", solver.NumBranches()),
        ("conflicts", solver.NumConflicts()),
        ("wall_time_s", solver.WallTime()),
        ("deterministic_time", solver.ResponseProto().deterministic_time),
    )
    return assemble_plan(
        problem, chosen, strategy="joint", objective=value / surrogate.scale,
        marginal_bits=marginal, bound=bound, status=name,
        runtime_s=runtime, seed=int(seed), stats=stats,
    )


def _infeasible_rule(problem: Problem, surrogate: Surrogate) -> str:
    """One sentence naming the target and the rule that no plan can meet.

    Each target with required visits is tried alone (its own candidates, time conflicts,
    spacing and visit rules, every other target's rules dropped); the first whose rules fail
    alone is named, with the must-do window that has no start inside it if there is one.
    """
    from planner.allocation.rules import TargetRules
    from planner.allocation.verify import when

    for s, rule in enumerate(problem.rules):
        if rule.min_visits == 0 and not rule.must_windows_jd:
            continue
        name = problem.target_names[s]
        mine = np.flatnonzero(problem.target == s)
        for lo, hi in rule.must_windows_jd:
            inside = (problem.start_jd(mine) >= lo) & (problem.end_jd(mine) <= hi)
            if not inside.any():
                return (f"target {name!r}: no exposure fits inside its must-do window "
                        f"{when(lo)} to {when(hi)} within the sky limits; widen the window or "
                        "drop it.")
        alone = dataclasses.replace(
            problem.restrict(mine),
            rules=tuple(r if k == s else TargetRules() for k, r in enumerate(problem.rules)))
        model, _ = build_model(alone, surrogate.restrict(mine))
        solver = cp_model.CpSolver()
        solver.parameters.max_time_in_seconds = 10.0
        solver.parameters.num_workers = 1
        if solver.Solve(model) == cp_model.INFEASIBLE:
            wants = [f"min_visits {rule.min_visits}"] if rule.min_visits else []
            wants += [f"{len(rule.must_windows_jd)} must-do window"
                      f"{'s' if len(rule.must_windows_jd) != 1 else ''}"] * bool(
                rule.must_windows_jd)
            return (f"target {name!r}: its {' with '.join(wants)} cannot be met within the "
                    f"sky limits, max_visits_per_night {rule.max_per_night} and min_gap_h "
                    f"{rule.min_spacing_min / 60:g}; relax one of these rules.")
    needy = [problem.target_names[s] for s, r in enumerate(problem.rules)
             if r.min_visits or r.must_windows_jd]
    return (f"No plan meets every rule: the required visits of {', '.join(map(repr, needy))} "
            "can each be met alone but not together (they need the same time); relax "
            "min_visits or must_windows of one of them.")
def _search(solver: cp_model.CpSolver, model: cp_model.CpModel):
    """Run the search in a worker thread, so that Ctrl-C stops it and is raised, not swallowed.

    The calling thread waits in short joins, where Python's signal handlers run; on an
    exception there (KeyboardInterrupt from SIGINT, or SIGTERM turned into one by the CLI) the
    search is stopped and the exception re-raised, so no plan is made from a cut search.
    """
    import threading

    outcome = {}

    def work() -> None:
        try:
            outcome["status"] = solver.Solve(model)
        except BaseException as exc:  # handed to the calling thread
            outcome["error"] = exc

    before = _threads()
    thread = threading.Thread(target=work, name="cp-sat-search", daemon=True)
    thread.start()
    try:
        while thread.is_alive():
            thread.join(0.05)
    except BaseException:
        solver.StopSearch()
        thread.join()
        # The search's own worker threads end shortly after Solve returns; a process that
        # exits before they have ended is aborted by the C++ runtime, so wait for them.
        with contextlib.suppress(KeyboardInterrupt):
            deadline = time.monotonic() + 2.0
            while _threads() > before and time.monotonic() < deadline:
                time.sleep(0.01)
        raise
    if "error" in outcome:
        raise outcome["error"]
    return outcome["status"]


def _threads() -> int:
    """Threads of this process (Linux ``/proc``; elsewhere 0, and the wait above is skipped)."""
    try:
        return len(os.listdir("/proc/self/task"))
    except OSError:
        return 0


def _marginals(problem: Problem, surrogate: Surrogate, chosen: np.ndarray) -> np.ndarray:
    """Surrogate marginal bits of each chosen visit given the earlier ones of its target."""
    chosen = np.asarray(chosen, dtype=np.int64)
    out = np.zeros(chosen.size)
    for k, c in enumerate(chosen):
        earlier = chosen[(problem.target[chosen] == problem.target[c])
                         & (problem.start[chosen] < problem.start[c])]
        out[k] = surrogate.marginal(problem, [c], earlier)[0] / surrogate.scale
    return out


def _must_window_candidates(problem: Problem) -> np.ndarray:
    """Candidates lying inside one of their target's must-do windows."""
    serve = np.zeros(problem.n_candidates, dtype=bool)
    start, end = problem.start_jd(slice(None)), problem.end_jd(slice(None))
    for s, rule in enumerate(problem.rules):
        for lo, hi in rule.must_windows_jd:
            serve |= (problem.target == s) & (start >= lo) & (end <= hi)
    return np.flatnonzero(serve)


def _best_per_group(problem: Problem, surrogate: Surrogate, keep: int, extra) -> np.ndarray:
    """Return the ``keep`` most valuable candidates per (target, night, option), plus extra.

    Every candidate inside a must-do window is kept too: the most valuable starts of a night
    need not include one inside the window, and without one the reduced model has no plan.
    """
    group = (problem.target * problem.n_nights + problem.night) * problem.exposure_s.size \
        + problem.option
    order = np.lexsort((-surrogate.unary, group))
    first = np.r_[0, np.flatnonzero(np.diff(group[order])) + 1]
    rank = np.arange(order.size) - np.repeat(first, np.diff(np.r_[first, order.size]))
    chosen = np.zeros(problem.n_candidates, dtype=bool)
    chosen[order[rank < keep]] = True
    chosen[np.asarray(extra, dtype=np.int64)] = True
    chosen[_must_window_candidates(problem)] = True
    return np.flatnonzero(chosen)


def joint_plan(
    problem: Problem,
    surrogate: Surrogate,
    *,
    time_limit_s: float | None = None,
    seed: int = 0,
    workers: int = 2,
    hint: Plan | None = None,
    keep_per_group: int | None = None,
    focus_per_group: int | None = None,
    focus_share: float = 0.5,
    gap_limit: float = 0.0,
    limit: SearchLimit | None = None,
) -> Plan:
    """Build and solve the joint model, hinted with ``hint`` (default: the greedy plan).

    Parameters
    ----------
    problem : Problem
        Candidate visits and rules.
    surrogate : Surrogate
        Integer objective.
    time_limit_s, seed, workers, limit
        Solver limits (see :func:`solve`); the limit covers the search only.
    hint : Plan, optional
        A feasible plan of this problem to start from; default: :func:`greedy_plan` on the
        surrogate.
    keep_per_group : int, optional
        Give the solver only the best ``keep_per_group`` candidates per (target, night, option)
        by value, plus the hint's; the bound then holds for that reduced problem only.
    focus_per_group : int, optional
        Solve in two stages: first the problem reduced to the best ``focus_per_group``
        candidates per group (plus the hint's) for at most ``focus_share`` of the limit
        (stopping at a gap of ``FOCUS_GAP_LIMIT``), then the whole problem, hinted with the
        first stage's plan, for the other share. The plan is at least the first stage's; the
        bound is the second stage's, so it holds for the whole problem.
    focus_share : float
        Share of the limit given to the first stage, in (0, 1).
    gap_limit : float
        Relative gap at which the search stops (see :func:`solve`); the first of two stages
        stops at ``FOCUS_GAP_LIMIT`` or less.

    Returns
    -------
    Plan
        The joint plan; its ``runtime_s`` includes building the hint and the model.
    """
    t0 = time.perf_counter()
    limit = _limit(limit, time_limit_s)
    hint = greedy_plan(problem, surrogate) if hint is None else hint
    if focus_per_group is not None:
        if not 0.0 < focus_share < 1.0:
            raise ValueError(f"focus_share must lie strictly between 0 and 1, got {focus_share}.")
        try:
            first = joint_plan(problem, surrogate, limit=limit.share(focus_share),
                               seed=seed, workers=workers, hint=hint,
                               keep_per_group=focus_per_group,
                               gap_limit=max(gap_limit, FOCUS_GAP_LIMIT))
        except PlanError:
            # The reduced model can lack starts a rule needs (the whole problem may still
            # have a plan): go on from the hint; the second stage decides, or names the rule.
            first = dataclasses.replace(hint, status="HINT_KEPT")
        plan = joint_plan(problem, surrogate, limit=limit.share(1.0 - focus_share),
                          seed=seed, workers=workers, hint=first, keep_per_group=keep_per_group,
                          gap_limit=gap_limit)
        status = plan.status
        if status == "HINT_KEPT" and first.status != "HINT_KEPT":
            status = "FOCUSED"  # the first stage's solution, unimproved by the second
        stats = plan.stats + (("focus_objective", float(first.objective)),
                              ("focus_optimal", float(first.status == "OPTIMAL")),
                              ("focus_deterministic_time",
                               float(dict(first.stats).get("deterministic_time", 0.0))))
        return Plan(**{**plan.__dict__, "status": status, "stats": stats,
                       "runtime_s": time.perf_counter() - t0})
    keep = np.arange(problem.n_candidates)
    if keep_per_group is not None:
        keep = _best_per_group(problem, surrogate, keep_per_group, hint.candidates)
    sub, sub_surrogate = problem.restrict(keep), surrogate.restrict(keep)
    position = {int(c): k for k, c in enumerate(keep)}
    model, handles = build_model(sub, sub_surrogate,
                                 hint=np.array([position[int(c)] for c in hint.candidates]))
    found = solve(model, handles, limit=limit, seed=seed, workers=workers, gap_limit=gap_limit)
    chosen = keep[found.candidates]
    plan = assemble_plan(
        problem, chosen, strategy="joint", objective=surrogate.bits(problem, chosen),
        marginal_bits=_marginals(problem, surrogate, chosen), bound=found.bound,
        status=found.status, runtime_s=found.runtime_s, seed=seed,
        stats=found.stats + (("kept_candidates", keep.size),),
    )
    if plan.objective < hint.objective:
        plan = assemble_plan(
            problem, hint.candidates, strategy="joint", objective=hint.objective,
            marginal_bits=_marginals(problem, surrogate, hint.candidates), bound=plan.bound,
            status="HINT_KEPT", runtime_s=plan.runtime_s, seed=seed, stats=plan.stats,
        )
    return Plan(**{**plan.__dict__, "runtime_s": time.perf_counter() - t0})
