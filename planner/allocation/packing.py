"""Packing: every exposure as soon as the slew and overheads after the previous one allow.

The strategies choose among exposures that start on the run grid (5 minutes on the demo), so a
10-minute exposure and its 2-3 minute slew take 15 minutes of grid. :func:`pack_plan` takes any
strategy's plan and, night by night, in seconds rather than grid steps:

1. **Compaction (left shift).** Each exposure, in time order, starts at the earliest whole
   second at which the slew from the previous exposure (from where it ended to where this
   target is then), the fixed overheads and the safety margin are done and the exposure is
   allowed (:class:`planner.allocation.timeline.Timeline`), never later than the strategy put
   it. It keeps its target's spacing from the target's earlier visit and stays inside a must-do
   window it alone serves.
2. **Refill.** The time freed collects where a chain of exposures waits (a window opening, the
   end of the night). Into every such opening the packer puts, greedily, the visit with the largest
   exact conditional gain per second of telescope time it takes
   (:func:`planner.information.gain.conditional_bits` given the target's visits in the plan,
   Lindley's expected information), at the earliest second it fits, as long as the target's
   rules allow it and the surrogate can represent it.
3. Both steps repeat until a round adds nothing.

A visit moved or added becomes a new candidate, appended to the problem
(:func:`extend_problem`) with its values interpolated from the timeline, so every downstream
step (score, verification, plan file) reads it like any other. The same packer runs after all
three strategies, so their comparison stays fair; the cadence plan refills with its own option
and one visit per target and night.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from planner.allocation.plan import Plan, assemble_plan
from planner.allocation.problem import Problem
from planner.allocation.surrogate import Surrogate, slot_bit
from planner.clock import J2000_JD

__all__ = ["Packing", "exact_refill_gain", "extend_problem", "extend_surrogate", "pack_plan",
           "surrogate_refill_gain"]

_FIELDS = ("target", "night", "option", "start", "start_jd_grid", "duration", "bits", "sigma",
           "airmass", "alt_start", "az_start", "alt_end", "az_end", "bjd_mid")
_SECOND = 1.0 / 86400.0
#: Smallest gain a refill visit must bring [weighted bit].
MIN_GAIN_BITS = 1e-3
#: Safety margin added to every slew while packing [s]: the slews are computed from positions
#: interpolated on the run grid, within about 0.1 s of astropy's exact transforms on the demo;
#: the independent check allows 1 s. (The solver's grid keeps its own, larger margin.)
PACK_MARGIN_S = 2.0
#: Largest share of its one-visit bits a visit may lose by moving (a better airmass or phase
#: later is worth waiting for).
MOVE_LOSS = 0.02
#: Rounds of compaction and refill at most.
MAX_ROUNDS = 4

#: Refill gain: (target, new, planned) -> weighted bits of each new visit given the target's
#: planned ones; ``new`` and ``planned`` map ``bits``, ``bjd_mid``, ``sigma`` and ``night`` to
#: arrays of shape (m,) and (k,).
RefillGain = Callable[[int, dict, dict], np.ndarray]


@dataclass(frozen=True, eq=False)
class Packing:
    """A packed plan and the problem and surrogate its candidate indices refer to.

    Attributes
    ----------
    problem : Problem
        The input problem with the moved and added visits appended as candidates.
    surrogate : Surrogate
        The input surrogate on that problem.
    plan : Plan
        The packed plan (candidate indices into ``problem``).
    moved, added : int
        Visits that start earlier than the strategy put them, and visits added by refilling.
    """

    problem: Problem
    surrogate: Surrogate
    plan: Plan
    moved: int
    added: int


def extend_problem(problem: Problem, target, night, option, start_jd) -> Problem:
    """Append candidates starting at ``start_jd`` (off the grid) to a problem.

    Parameters
    ----------
    problem : Problem
        With a timeline.
    target, night, option : array_like of int, shape (m,)
    start_jd : array_like, shape (m,)
        Exposure starts, JD UTC [d]; each must be an allowed start of the timeline.

    Returns
    -------
    Problem
        The same problem with ``m`` more candidates at its end.
    """
    target = np.asarray(target, dtype=np.int64).reshape(-1)
    option = np.asarray(option, dtype=np.int64).reshape(-1)
    start_jd = np.asarray(start_jd, dtype=float).reshape(-1)
    new = problem.timeline.sample(option, target, start_jd)
    new.update(target=target, night=np.asarray(night, dtype=np.int64).reshape(-1), option=option,
               start_jd_grid=start_jd,
               duration=np.ceil(problem.exposure_s[option] / 60.0 - 1e-9).astype(np.int64))
    grown = {name: np.concatenate([getattr(problem, name), np.asarray(new[name])])
             for name in _FIELDS}
    return dataclasses.replace(problem, **grown)


def extend_surrogate(surrogate: Surrogate, problem: Problem, n_old: int) -> Surrogate:
    """Return the surrogate on ``problem`` whose candidates from ``n_old`` on were appended.

    A new candidate's value alone follows the surrogate's rule,
    ``w (rho b_c + (1 - rho) b_{r_n0})`` (:mod:`planner.allocation.surrogate`).
    """
    idx = np.arange(n_old, problem.n_candidates)
    s, n = problem.target[idx], problem.night[idx]
    w = problem.weights[s] * surrogate.scale
    rho = np.ones(idx.size) if surrogate.rho is None else np.asarray(surrogate.rho)[s]
    value = rho * w * problem.bits[idx] + (1.0 - rho) * surrogate.slots[s, n, 0]
    unary = np.concatenate([surrogate.unary, np.rint(value).astype(np.int64)])
    return Surrogate(surrogate.scale, unary, surrogate.slots, surrogate.patterns, surrogate.rho)


def exact_refill_gain(problem: Problem, predictors, *, rng: np.random.Generator,
                      n_outcomes: int = 64) -> RefillGain:
    """Exact conditional gain of new visits given a target's planned ones [weighted bit].

    With no planned visit the gain is the one-visit information of the curve.
    """
    from planner.information.gain import conditional_bits

    def gain(s, new, planned):
        weight = problem.rules[s].weight
        if len(planned["bjd_mid"]) == 0:
            return weight * np.asarray(new["bits"], float)
        pred = predictors[s]
        jitter = np.asarray(pred.jitter, dtype=float)[:, None]
        v_new = pred.velocities(np.asarray(new["bjd_mid"], float))
        s_new = np.sqrt(np.asarray(new["sigma"], float)[None, :] ** 2 + jitter**2)
        v_set = pred.velocities(np.asarray(planned["bjd_mid"], float))
        s_set = np.sqrt(np.asarray(planned["sigma"], float)[None, :] ** 2 + jitter**2)
        return weight * conditional_bits(v_set, s_set, v_new, s_new, rng, n_outcomes)

    return gain


def surrogate_refill_gain(problem: Problem, surrogate: Surrogate) -> RefillGain:
    """Return the surrogate's marginal gain of new visits given planned ones [weighted bit].

    A visit the surrogate cannot represent (past its patterns) is worth nothing.
    """
    n_slots = surrogate.slots.shape[2]
    rho = np.ones(problem.n_targets) if surrogate.rho is None else np.asarray(surrogate.rho)

    def gain(s, new, planned):
        nights, counts = np.unique(np.asarray(planned["night"], dtype=np.int64),
                                   return_counts=True)
        key = surrogate.key(problem, nights, counts)
        base = surrogate.patterns[s].get(key, 0)
        per_night = dict(zip(nights.tolist(), counts.tolist(), strict=True))
        w = problem.rules[s].weight * surrogate.scale
        out = np.zeros(len(new["bits"]))
        for k, (b, n) in enumerate(zip(new["bits"], new["night"], strict=True)):
            slot = per_night.get(int(n), 0)
            grown = (None if slot >= n_slots else
                     surrogate.patterns[s].get(key | slot_bit(n, slot, problem.n_nights)))
            if grown is None:
                continue
            unary = rho[s] * w * b + (1.0 - rho[s]) * surrogate.slots[s, n, 0]
            out[k] = grown - base + unary - surrogate.slots[s, n, slot]
        return out / surrogate.scale

    return gain


@dataclass(eq=False)
class _Visit:
    """Working record of one exposure while packing (internal, mutable)."""

    target: int
    night: int
    option: int
    start: float  # JD
    end: float
    alt_start: float
    az_start: float
    alt_end: float
    az_end: float
    bjd_mid: float
    sigma: float
    bits: float
    source: int  # candidate of the input problem, or -1 when moved or added
    added: bool = False


def _whole_second(jd: float) -> float:
    """Return the first whole UTC second at or after ``jd``."""
    return J2000_JD + math.ceil((jd - J2000_JD) * 86400.0 - 1e-4) / 86400.0


def _whole_second_before(jd: float) -> float:
    """Return the last whole UTC second at or before ``jd``."""
    return J2000_JD + math.floor((jd - J2000_JD) * 86400.0 + 1e-4) / 86400.0


class _Packer:
    """Packing state of one plan."""

    def __init__(self, problem: Problem, gain: RefillGain | None, options, cap):
        self.p = problem
        self.tl = problem.timeline
        self.gain = gain
        self.options = list(range(problem.exposure_s.size)) if options is None else list(options)
        self.cap = cap
        self.margin_s = min(PACK_MARGIN_S, problem.slew_margin_s) if problem.slew is not None \
            else 0.0
        self.dark = problem.dark_jd
        self.reserved = problem.reserved_jd

    # -- geometry ------------------------------------------------------------------------
    def changeover_s(self, alt1, az1, alt2, az2) -> float:
        """Slew, overheads and margin between two pointings [s]."""
        moved = 0.0 if self.p.slew is None else float(
            np.asarray(self.p.slew(np.float64(alt1), np.float64(az1), np.float64(alt2),
                                   np.float64(az2))))
        return self.p.overhead_s + moved + self.margin_s

    def visit_at(self, s: int, o: int, n: int, t: float, source: int = -1) -> _Visit:
        f = self.tl.sample1(o, s, t)
        return _Visit(s, n, o, t, t + self.p.exposure_s[o] * _SECOND, float(f["alt_start"]),
                      float(f["az_start"]), float(f["alt_end"]), float(f["az_end"]),
                      float(f["bjd_mid"]), float(f["sigma"]), float(f["bits"]), source)

    def exact_ok(self, s: int, o: int, n: int, t: float, lead_s: float) -> bool:
        """Dark window, fixed windows and reserved blocks, checked exactly."""
        end = t + self.p.exposure_s[o] * _SECOND
        if t < self.dark[n, 0] - 1e-9 or end > self.dark[n, 1] + 1e-9:
            return False
        wins = self.p.rules[s].windows_jd
        if wins and not any(a <= t + 1e-9 and end <= b + 1e-9 for a, b in wins):
            return False
        early = t - lead_s * _SECOND
        return not any(early < b and end > a for a, b in self.reserved)

    def earliest(self, s: int, o: int, n: int, lo: float, prev: _Visit | None) -> float:
        """Earliest whole second >= ``lo`` at which (s, o) may start after ``prev`` (inf: none).

        The slew depends on where the target is at the start, which moves by about a quarter
        of a degree a minute, so the fixed point ``t = need(t)`` is found from below, starting
        where the fixed overheads alone would allow, and then tightened from above.
        """
        if prev is not None:
            lo = max(lo, prev.end + (self.p.overhead_s + self.margin_s) * _SECOND)
        t = _whole_second(lo)
        for _ in range(8):
            t = self.tl.next_allowed(o, s, t)
            if not math.isfinite(t) or t > self.dark[n, 1]:
                return math.inf
            t = _whole_second(t)
            need = self._need(s, o, t, prev)
            if need <= t + 1e-9 and self.tl.allowed1(o, s, t):
                while True:  # tighten: an earlier second may satisfy its own need
                    earlier = max(_whole_second(need), _whole_second(lo))
                    if earlier >= t - 0.5 * _SECOND or not self.tl.allowed1(o, s, earlier):
                        return t
                    need_earlier = self._need(s, o, earlier, prev)
                    if need_earlier > earlier + 1e-9:
                        return t
                    t, need = earlier, need_earlier
            t = max(t, _whole_second(need))
        return math.inf

    def _need(self, s: int, o: int, t: float, prev: _Visit | None) -> float:
        """When the slew and overheads from ``prev`` to (s, o) starting at ``t`` are done."""
        if prev is None:
            return t
        alt, az = self.tl.position1(s, t)
        return prev.end + self.changeover_s(prev.alt_end, prev.az_end, alt, az) * _SECOND

    def latest(self, s: int, o: int, n: int, hi: float, nxt: _Visit | None) -> float:
        """Latest whole second <= ``hi`` at which (s, o) may start before ``nxt`` (-inf: none)."""
        exp_d = self.p.exposure_s[o] * _SECOND
        t = _whole_second_before(min(hi, self.dark[n, 1] - exp_d))
        for _ in range(8):
            t = self.tl.last_allowed(o, s, t)
            if not math.isfinite(t) or t < self.dark[n, 0]:
                return -math.inf
            t = _whole_second_before(t)
            limit = self.dark[n, 1] - exp_d
            if nxt is not None:
                v = self.visit_at(s, o, n, t)
                limit = nxt.start - self.changeover_s(v.alt_end, v.az_end, nxt.alt_start,
                                               nxt.az_start) * _SECOND - exp_d
            if t <= limit + 1e-9 and self.tl.allowed1(o, s, t):
                return t
            t = min(t, _whole_second_before(limit))
        return -math.inf

    def lead_s(self, prev: _Visit | None, v: _Visit) -> float:
        if prev is None:
            return self.p.overhead_s
        return self.changeover_s(prev.alt_end, prev.az_end, v.alt_start, v.az_start)

    def fits_before(self, v: _Visit, nxt: _Visit | None) -> bool:
        if nxt is None:
            return v.end <= self.dark[v.night, 1] + 1e-9
        need = v.end + self.changeover_s(v.alt_end, v.az_end, nxt.alt_start, nxt.az_start) * _SECOND
        return need <= nxt.start + 1e-9


def _worth(old: _Visit, new: _Visit) -> bool:
    """Whether moving a visit keeps its one-visit value (within :data:`MOVE_LOSS`)."""
    return new.bits >= (1.0 - MOVE_LOSS) * old.bits - 1e-12


def _lower_bound(pk: _Packer, v: _Visit, night_visits: list, placed: dict) -> float:
    """Earliest start the rules leave ``v``: dark start, spacing, a must-do window it serves."""
    rule = pk.p.rules[v.target]
    lo = pk.dark[v.night, 0]
    before = placed.get(v.target)
    if before is not None and rule.min_spacing_min > 0:
        lo = max(lo, before + rule.min_spacing_min / 1440.0)
    for a, b in rule.must_windows_jd:
        if a <= v.start + 1e-9 and v.end <= b + 1e-9:
            others = [w for w in night_visits if w is not v and w.target == v.target
                      and a <= w.start + 1e-9 and w.end <= b + 1e-9]
            if not others:
                lo = max(lo, a)
    return lo


def _compact(pk: _Packer, nights: list[list[_Visit]], everyone: list[_Visit]) -> int:
    """Left-shift every night's exposures; return how many moved."""
    moved = 0
    placed: dict[int, float] = {}
    for seq in nights:
        prev = None
        for k, v in enumerate(seq):
            lo = _lower_bound(pk, v, everyone, placed)
            t = pk.earliest(v.target, v.option, v.night, lo, prev)
            if t < v.start - 0.5 * _SECOND:
                w = pk.visit_at(v.target, v.option, v.night, t)
                w.added = v.added
                if _worth(v, w) and pk.exact_ok(v.target, v.option, v.night, t,
                                                pk.lead_s(prev, w)) and (
                        k + 1 == len(seq) or pk.fits_before(w, seq[k + 1])):
                    seq[k] = w
                    everyone[everyone.index(v)] = w
                    v = w
                    moved += 1
            placed[v.target] = v.start
            prev = v
    return moved


def _upper_bound(pk: _Packer, v: _Visit, everyone: list, placed: dict) -> float:
    """Latest start the rules leave ``v``: spacing before a later visit, a must-do window."""
    rule = pk.p.rules[v.target]
    exp_d = pk.p.exposure_s[v.option] * _SECOND
    hi = pk.dark[v.night, 1] - exp_d
    after = placed.get(v.target)
    if after is not None and rule.min_spacing_min > 0:
        hi = min(hi, after - rule.min_spacing_min / 1440.0)
    for a, b in rule.must_windows_jd:
        if a <= v.start + 1e-9 and v.end <= b + 1e-9:
            others = [w for w in everyone if w is not v and w.target == v.target
                      and a <= w.start + 1e-9 and w.end <= b + 1e-9]
            if not others:
                hi = min(hi, b - exp_d)
    return hi


def _justify_right(pk: _Packer, nights: list[list[_Visit]], everyone: list[_Visit]) -> None:
    """Right-shift every night's exposures as late as they may go (slack moves to the front)."""
    placed: dict[int, float] = {}
    for seq in reversed(nights):
        nxt = None
        for k in range(len(seq) - 1, -1, -1):
            v = seq[k]
            hi = _upper_bound(pk, v, everyone, placed)
            t = pk.latest(v.target, v.option, v.night, hi, nxt)
            if math.isfinite(t) and t > v.start + 0.5 * _SECOND:
                w = pk.visit_at(v.target, v.option, v.night, t)
                w.added = v.added
                prev = seq[k - 1] if k > 0 else None
                if _worth(v, w) and pk.exact_ok(v.target, v.option, v.night, t,
                                                pk.lead_s(prev, w)) and (
                        prev is None or pk.fits_before(prev, w)) and pk.fits_before(w, nxt):
                    seq[k] = w
                    everyone[everyone.index(v)] = w
                    v = w
            placed[v.target] = v.start
            nxt = v


def _refill(pk: _Packer, nights: list[list[_Visit]], surrogate_ok) -> int:
    """Insert visits into the free time greedily by gain per second; return how many.

    An opening's fits are kept until the opening or the target's visits change, and the gains of a
    target's new fits are computed in one call, so each insertion costs a few evaluations.
    """
    p = pk.p
    added = 0
    version = np.zeros(p.n_targets, dtype=np.int64)
    fits: dict = {}
    gains: dict = {}
    shortest = p.exposure_s[pk.options].min() + p.overhead_s
    while True:
        everyone = [v for seq in nights for v in seq]
        count = np.bincount([v.target for v in everyone], minlength=p.n_targets)
        options = []
        for n, seq in enumerate(nights):
            tonight = np.bincount([v.target for v in seq], minlength=p.n_targets)
            bounds = [None, *seq, None]
            for prev, nxt in zip(bounds[:-1], bounds[1:], strict=True):
                start = pk.dark[n, 0] if prev is None else prev.end
                stop = pk.dark[n, 1] if nxt is None else nxt.start
                if (stop - start) * 86400.0 < shortest:
                    continue
                # Targets with an allowed grid start in the opening (or just before it, whose
                # bracket reaches in), per option: the others cannot fit, whatever the slews.
                k0, _ = pk.tl.bracket(start)
                k1, _ = pk.tl.bracket(stop)
                up = pk.tl.allowed[:, :, int(k0):int(k1) + 1].any(axis=2)
                for s in range(p.n_targets):
                    rule = p.rules[s]
                    if rule.max_visits is not None and count[s] >= rule.max_visits:
                        continue
                    if tonight[s] >= min(rule.max_per_night, pk.cap or rule.max_per_night):
                        continue
                    for o in pk.options:
                        if not up[o, s]:
                            continue
                        key = (id(prev), id(nxt), n, s, o, int(version[s]))
                        if key not in fits:
                            fits[key] = _fit(pk, s, o, n, start, prev, nxt, everyone)
                        if fits[key] is not None:
                            options.append((key, n))
        pending: dict[int, list] = {}
        for key, _ in options:
            v = fits[key][0]
            if key not in gains:
                pending.setdefault(v.target, []).append(key)
        for s, keys in pending.items():
            found = pk.gain(s, _columns([fits[k][0] for k in keys]),
                            _columns([w for w in everyone if w.target == s]))
            for k, g in zip(keys, np.asarray(found, dtype=float), strict=True):
                gains[k] = float(g)
        best = None
        for key, n in sorted(options, key=lambda item: -gains[item[0]] / fits[item[0]][1]):
            v, cost = fits[key]
            if gains[key] <= MIN_GAIN_BITS:
                continue
            if surrogate_ok(v, everyone):
                best = (v, n)
                break
        if best is None:
            return added
        v, n = best
        v.added = True
        nights[n].append(v)
        nights[n].sort(key=lambda w: w.start)
        version[v.target] += 1
        added += 1


def _columns(visits) -> dict:
    """Return the gain model's view of visits: arrays of bits, bjd_mid, sigma, night."""
    return {"bits": np.array([v.bits for v in visits], dtype=float),
            "bjd_mid": np.array([v.bjd_mid for v in visits], dtype=float),
            "sigma": np.array([v.sigma for v in visits], dtype=float),
            "night": np.array([v.night for v in visits], dtype=np.int64)}


def _fit(pk: _Packer, s, o, n, start, prev, nxt, everyone):
    """Return the earliest visit of (s, o) in an opening and the telescope seconds it takes."""
    rule = pk.p.rules[s]
    t = pk.earliest(s, o, n, start, prev)
    if not math.isfinite(t):
        return None
    v = pk.visit_at(s, o, n, t)
    if not pk.fits_before(v, nxt) or not pk.exact_ok(s, o, n, t, pk.lead_s(prev, v)):
        return None
    if rule.min_spacing_min > 0 and any(
            w.target == s and abs(w.start - t) * 1440.0 < rule.min_spacing_min - 1e-6
            for w in everyone):
        return None
    end_of_gap = v.end if nxt is None else v.end + pk.changeover_s(
        v.alt_end, v.az_end, nxt.alt_start, nxt.az_start) * _SECOND
    freed = 0.0 if (prev is None or nxt is None) else pk.changeover_s(
        prev.alt_end, prev.az_end, nxt.alt_start, nxt.az_start)
    base = start if prev is not None else max(start, t - pk.p.overhead_s * _SECOND)
    return v, max((end_of_gap - base) * 86400.0 - freed, 1.0)


def pack_plan(
    problem: Problem,
    surrogate: Surrogate,
    plan: Plan,
    *,
    gain: RefillGain | None = None,
    options: Sequence[int] | None = None,
    max_per_night: int | None = None,
    refill: bool = True,
) -> Packing:
    """Pack a plan's exposures back to back and refill the time freed.

    Parameters
    ----------
    problem : Problem
        The problem the plan was made for (with a timeline).
    surrogate : Surrogate
        Its surrogate; the packed plan's ``objective`` is this surrogate's value.
    plan : Plan
        Any strategy's plan of ``problem``.
    gain : callable, optional
        Refill gain model (:func:`exact_refill_gain`); None: no refill.
    options : sequence of int, optional
        Exposure options refill may use (default: all).
    max_per_night : int, optional
        Visits per target and night refill may reach, besides the rules' own limit.
    refill : bool
        Refill the freed time (needs ``gain``); False: compaction only.

    Returns
    -------
    Packing
        The packed plan with its extended problem and surrogate. The plan keeps the input's
        bound only where the packed objective does not exceed it (the bound is proven over
        plans with grid starts only).
    """
    t0 = time.perf_counter()
    if problem.timeline is None or not plan.visits:
        return Packing(problem, surrogate, plan, 0, 0)
    pk = _Packer(problem, gain, options, max_per_night)
    nights: list[list[_Visit]] = [[] for _ in range(problem.n_nights)]
    for c in plan.candidates:
        c = int(c)
        nights[problem.night[c]].append(_Visit(
            int(problem.target[c]), int(problem.night[c]), int(problem.option[c]),
            float(problem.start_jd(c)), float(problem.end_jd(c)), float(problem.alt_start[c]),
            float(problem.az_start[c]), float(problem.alt_end[c]), float(problem.az_end[c]),
            float(problem.bjd_mid[c]), float(problem.sigma[c]), float(problem.bits[c]), c))
    for seq in nights:
        seq.sort(key=lambda v: v.start)
    surrogate_ok = _surrogate_check(problem, surrogate)
    added = 0
    fill = refill and gain is not None
    for _ in range(MAX_ROUNDS):
        _compact(pk, nights, [v for seq in nights for v in seq])
        new = _refill(pk, nights, surrogate_ok) if fill else 0
        _justify_right(pk, nights, [v for seq in nights for v in seq])
        new += _refill(pk, nights, surrogate_ok) if fill else 0
        added += new
        if new == 0:
            break
    _compact(pk, nights, [v for seq in nights for v in seq])
    final = [v for seq in nights for v in seq]
    fresh = [v for v in final if v.source < 0]
    ext = problem
    if fresh:
        ext = extend_problem(problem, [v.target for v in fresh], [v.night for v in fresh],
                             [v.option for v in fresh], [v.start for v in fresh])
    ext_surrogate = extend_surrogate(surrogate, ext, problem.n_candidates)
    chosen, k = [], problem.n_candidates
    for v in final:
        if v.source >= 0:
            chosen.append(v.source)
        else:
            chosen.append(k)
            k += 1
    chosen = np.array(chosen, dtype=np.int64)
    order = np.argsort(ext.start_jd_grid[chosen], kind="stable")
    marginal = _marginals(ext, ext_surrogate, chosen[order])
    objective = ext_surrogate.bits(ext, chosen)
    if objective < plan.objective - 1e-9:  # waiting was worth more: keep the strategy's plan
        return Packing(problem, surrogate, plan, 0, 0)
    bound = plan.bound if plan.bound is not None and plan.bound >= objective else None
    moved_now = sum(1 for v in final if v.source < 0 and not v.added)
    packed = assemble_plan(
        ext, chosen[order], strategy=plan.strategy, objective=objective, marginal_bits=marginal,
        bound=bound, status=plan.status, runtime_s=plan.runtime_s + time.perf_counter() - t0,
        seed=plan.seed,
        stats=plan.stats + (("packing_moved", moved_now), ("packing_added", added),
                            ("packing_s", time.perf_counter() - t0)))
    return Packing(ext, ext_surrogate, packed, moved_now, added)


def _surrogate_check(problem: Problem, surrogate: Surrogate):
    """Whether the surrogate can value a target's visits with one more in a night."""
    caps = surrogate.slots.shape[2]

    def ok(v: _Visit, everyone) -> bool:
        mine = [w for w in everyone if w.target == v.target]
        nights, counts = np.unique(np.array([w.night for w in mine] + [v.night], dtype=np.int64),
                                   return_counts=True)
        if counts.max() > caps:
            return False
        key = surrogate.key(problem, nights, counts)
        return key in surrogate.patterns[v.target]

    return ok


def _marginals(problem: Problem, surrogate: Surrogate, chosen: np.ndarray) -> np.ndarray:
    """Surrogate marginal bits of each visit given the earlier ones of its target."""
    out = np.zeros(chosen.size)
    for k, c in enumerate(chosen):
        earlier = chosen[:k][problem.target[chosen[:k]] == problem.target[c]]
        out[k] = surrogate.marginal(problem, [c], earlier)[0] / surrogate.scale
    return out
