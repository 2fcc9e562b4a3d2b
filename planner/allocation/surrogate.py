"""The redundancy-aware integer objective the allocation strategies optimise.

For one target, give each night ``n`` a few *slots*: its best candidate ``r_n0``, then the best
candidate at least the rule's spacing (and an hour) from it ``r_n1``, and so on up to the
target's visits per night. A *visit pattern* ``P`` says how many visits each night holds
(slot ``k`` of night ``n`` is used when the night holds more than ``k``); with ``S`` the chosen
visits and ``P(S)`` their pattern the surrogate is

    f(S) = V(P(S)) + rho sum_{(n, k) in P(S)} (b_{c_nk} - b_{r_nk}),

where ``c_nk`` is the visit filling slot ``k`` of night ``n``, ``b`` the exact one-visit
information, ``V(P)`` the joint information of the slot representatives of ``P`` and ``rho``
the target's saturation, ``V / sum of one-visit bits`` on its largest pattern: a visit's change
of one-visit bits against its representative moves the joint information by that share. (On
the demo, counting it in full, ``rho = 1``, put the cadence plan 9 % and the others 4-5 % low.)
A visit alone is worth ``rho b_c + (1 - rho) b_{r_n0}``, exact when it is the night's best.

``V`` is the exact expected information of the representatives (Lindley 1956) on the sample
posterior, every pattern of a target estimated on the same simulated outcomes (common random
numbers, :func:`planner.information.visit_sets.pattern_bits`), so that differences between
patterns, which
are what the solver trades, carry little Monte Carlo noise. Without a generator (or past a work
budget) ``V`` is the linearised Gaussian information ``0.5 log2 det(I + N^-1/2 C_P N^-1/2)``
(``C`` the sample covariance of the predicted velocities, ``N`` the noise variance) rescaled so
that single visits carry their exact bits. Mutual information is submodular for conditionally
independent noise (Krause and Guestrin 2005), so ``V`` is, over slots.

Counting patterns rather than sets of nights makes a second visit in a night worth its
conditional gain given the whole pattern: on the demo, where stars near the sample posterior's
ceiling (log2 of the sample count) could take two visits a night, a pairwise same-night term
valued those visits at several bits each where they brought a few tenths (docs/allocation.md).

Everything is weighted by the target's science weight and held in integer units (``scale`` per
bit, millibits by default). The joint model gives each target one Boolean per pattern, at most
one chosen, and ties each night's visit count to the patterns, so its linear relaxation is the
convex hull of ``V``.
"""

from __future__ import annotations

import itertools
import logging
import os
from collections.abc import Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

from planner.allocation.problem import Problem
from planner.errors import PlanError
from planner.information.visit_sets import enumerate_visit_sets, pattern_bits

__all__ = ["CountValues", "Surrogate", "additive_surrogate", "build_surrogate",
           "gaussian_redundancy", "slot_bit"]

log = logging.getLogger(__name__)

#: Largest number of visit patterns per target valued one by one; past it the target's
#: patterns are valued by their visit counts per slot (:class:`CountValues`).
MAX_PATTERNS = 2000
#: Random patterns drawn per visit count in the count form (their mean exact information).
COUNT_DRAWS = 12
#: Largest exact-pattern work per target (patterns x outcomes x samples); beyond it the
#: Gaussian patterns are used, calibrated on the largest pattern of first slots.
EXACT_BUDGET = 3e8


def slot_bit(night, slot, n_nights: int) -> int:
    """Bit of slot ``slot`` (0: first visit) of night ``night`` in a pattern key."""
    return 1 << (int(night) + int(slot) * int(n_nights))


class CountValues:
    """Pattern values of one target from its visit counts per slot, for long runs.

    Past ``MAX_PATTERNS`` patterns a target's patterns are not enumerated. A pattern ``P`` with
    ``t_k`` visits in slot ``k`` (``t_0`` nights visited, ``t_1`` of them twice, ...) is worth

        V(P) = G(t) + rho sum_{(n, k) in P} b_{r_nk} + sum_{nights i < j of P} q_ij,
        G(t) = g(t) - rho sbar(t),

    with ``g(t)`` the mean joint information of random patterns of counts ``t`` and ``sbar(t)``
    the mean of their representatives' one-visit bits. With the surrogate's per-visit terms a
    plan is then worth ``G(t) + rho sum_c b_c``: a value of the counts, concave as the
    information saturates, each visit's own bits as the timing correction within its night,
    and ``q_ij`` (``pairs``) for which nights go together (see ``docs/allocation.md``).

    Parameters
    ----------
    table : dict of tuple to int
        ``G(t)`` [integer units] by counts ``t`` (length n_slots, non-increasing).
    reps : ndarray of int, shape (n_nights, n_slots)
        ``rho b_{r_nk}`` [integer units], weighted; used only where ``present``.
    present : ndarray of bool, shape (n_nights, n_slots)
        Slots that have a representative.
    pairs : ndarray of int, shape (n_nights, n_nights), optional
        Upper triangle: the term added when both nights are visited [integer units],
        ``-kappa (R_ij - mean R)`` with ``R_ij`` the redundancy of the two nights' first slots
        (their one-visit bits less their joint information) and ``kappa`` fitted on the random
        patterns: which nights complement each other (phase coverage) and which repeat.
    """

    def __init__(self, table: dict, reps: np.ndarray, present: np.ndarray,
                 pairs: np.ndarray | None = None) -> None:
        self.table = dict(table)
        n_n = np.shape(present)[0]
        self.pairs = (np.zeros((n_n, n_n), dtype=np.int64) if pairs is None
                      else np.triu(np.asarray(pairs, dtype=np.int64), 1))
        self.reps = np.asarray(reps, dtype=np.int64)
        self.present = np.asarray(present, dtype=bool)
        n_n = self.present.shape[0]
        self._avail = [sum(1 << n for n in np.flatnonzero(self.present[:, k]).tolist())
                       for k in range(self.present.shape[1])]
        self._full = (1 << n_n) - 1

    def counts(self, key: int):
        """Return the counts per slot of a pattern key (None: no allowed pattern)."""
        n_n = self.present.shape[0]
        out, below = [], self._full
        for k, avail in enumerate(self._avail):
            bits = key >> (k * n_n) & self._full
            if bits & ~avail or bits & ~below:
                return None
            out.append(bits.bit_count())
            below = bits
        if key >> (len(self._avail) * n_n):
            return None
        return tuple(out) if tuple(out) in self.table else None

    def __contains__(self, key) -> bool:
        return self.counts(int(key)) is not None

    def __getitem__(self, key) -> int:
        t = self.counts(int(key))
        if t is None:
            raise KeyError(key)
        n_n = self.present.shape[0]
        value = self.table[t]
        nights = [n for n in range(n_n) if int(key) >> n & 1]
        if len(nights) >= 2:
            value += int(self.pairs[np.ix_(nights, nights)].sum())
        for k in range(self.present.shape[1]):
            bits = int(key) >> (k * n_n) & self._full
            while bits:
                n = (bits & -bits).bit_length() - 1
                value += int(self.reps[n, k])
                bits &= bits - 1
        return int(value)

    def get(self, key, default=None):
        """``self[key]``, or ``default`` when the key is no allowed pattern."""
        return self[key] if key in self else default


@dataclass(frozen=True, eq=False)
class Surrogate:
    """Integer surrogate objective of one problem (units of ``1 / scale`` weighted bit).

    Attributes
    ----------
    scale : int
        Integer units per weighted bit.
    unary : ndarray of int, shape (n_candidates,)
        Weighted value of each candidate alone, ``w (rho b_c + (1 - rho) b_{r_n0})``.
    slots : ndarray of int, shape (n_targets, n_nights, n_slots)
        Weighted value taken off for each slot of a pattern (0 where none): ``w b_{r_n0}`` for
        the first slot, ``w ((1 - rho) b_{r_n0} + rho b_{r_nk})`` for slot ``k``.
    patterns : tuple of dict or CountValues, length n_targets
        Per target, pattern key (bit ``n + k n_nights`` for slot ``k`` of night ``n``, see
        :func:`slot_bit`; first slots alone give the plain bitmask of nights) to weighted value
        ``w V``; a :class:`CountValues` for a target with more than ``MAX_PATTERNS``.
    rho : ndarray, shape (n_targets,), optional
        Per target, the share of a visit's own change of one-visit bits that the surrogate
        counts (``V / sum of one-visit bits`` of its largest pattern; None: all).
    """

    scale: int
    unary: np.ndarray
    slots: np.ndarray
    patterns: tuple
    rho: np.ndarray | None = None

    @property
    def best(self) -> np.ndarray:
        """Weighted one-visit value of each target's best candidate per night.

        Shape (n_targets, n_nights).
        """
        return self.slots[:, :, 0]

    def restrict(self, idx) -> Surrogate:
        """Return the same objective on ``Problem.restrict(idx)`` (only candidate values move)."""
        return Surrogate(self.scale, self.unary[np.asarray(idx, dtype=np.int64)], self.slots,
                         self.patterns, self.rho)

    def key(self, problem: Problem, nights: np.ndarray, counts: np.ndarray) -> int:
        """Pattern key of ``counts[j]`` visits in night ``nights[j]``."""
        return sum(slot_bit(n, k, problem.n_nights)
                   for n, c in zip(nights.tolist(), counts.tolist(), strict=True)
                   for k in range(c))

    def net(self, problem: Problem, s: int, key: int) -> int:
        """``w V(P)`` less the weighted bits of the pattern's slot representatives."""
        value = self.patterns[s][key]
        n_n = problem.n_nights
        for k in range(self.slots.shape[2]):
            for n in range(n_n):
                if key >> (n + k * n_n) & 1:
                    value -= int(self.slots[s, n, k])
        return value

    def target_value(self, problem: Problem, s: int, chosen: Sequence[int]) -> int:
        """Surrogate of target ``s``'s visits among ``chosen``, integer units."""
        chosen = np.asarray(chosen, dtype=np.int64)
        mine = chosen[problem.target[chosen] == s]
        if mine.size == 0:
            return 0
        key = self.key(problem, *np.unique(problem.night[mine], return_counts=True))
        if key not in self.patterns[s]:
            raise PlanError(
                f"Target {problem.target_names[s]!r} has more visits than its max_visits or "
                "max_visits_per_night allow; the plan breaks its rules."
            )
        return int(self.net(problem, s, key) + self.unary[mine].sum())

    def value(self, problem: Problem, chosen: Sequence[int]) -> int:
        """Surrogate of a set of candidates, integer units."""
        chosen = np.asarray(chosen, dtype=np.int64)
        return sum(self.target_value(problem, int(s), chosen)
                   for s in np.unique(problem.target[chosen]))

    def bits(self, problem: Problem, chosen: Sequence[int]) -> float:
        """Surrogate of a set of candidates [weighted bit]."""
        return self.value(problem, chosen) / self.scale

    def per_target(self, problem: Problem, chosen: Sequence[int]) -> np.ndarray:
        """Surrogate of each target's share of the set [weighted bit], shape (n_targets,)."""
        return np.array([self.target_value(problem, s, chosen) / self.scale
                         for s in range(problem.n_targets)])

    def marginal(self, problem: Problem, candidates, chosen: Sequence[int]) -> np.ndarray:
        """Gain of adding each of ``candidates`` alone to ``chosen``, integer units.

        A candidate that would take its target past its pattern limits gets a very negative gain.
        """
        candidates = np.asarray(candidates, dtype=np.int64)
        chosen = np.asarray(chosen, dtype=np.int64)
        out = np.empty(candidates.size, dtype=np.int64)
        n_slots = self.slots.shape[2]
        for s in np.unique(problem.target[candidates]):
            here = np.flatnonzero(problem.target[candidates] == s)
            mine = chosen[problem.target[chosen] == s]
            nights, counts = np.unique(problem.night[mine], return_counts=True)
            key = self.key(problem, nights, counts)
            base = self.patterns[s].get(key, 0)
            per_night = dict(zip(nights.tolist(), counts.tolist(), strict=True))
            for k in here:
                c = candidates[k]
                n = int(problem.night[c])
                slot = per_night.get(n, 0)
                grown = (None if slot >= n_slots
                         else self.patterns[s].get(key | slot_bit(n, slot, problem.n_nights)))
                out[k] = (-(1 << 40) if grown is None
                          else grown - base + self.unary[c] - self.slots[s, n, slot])
        return out


def gaussian_redundancy(predicted: np.ndarray, noise_var: np.ndarray) -> np.ndarray:
    """Pairwise redundancy of Gaussian-approximated visits [bit].

    Parameters
    ----------
    predicted : ndarray, shape (n_samples, n_visits)
        Predicted velocities of the posterior samples at the visits [m/s].
    noise_var : ndarray, shape (n_visits,)
        Noise variance of each visit (measurement and mean jitter) [m^2/s^2].

    Returns
    -------
    ndarray, shape (n_visits, n_visits)
        ``I_G(a) + I_G(b) - I_G(a, b)``; zero on the diagonal. Together with the one-visit values
        ``I_G(a) = 0.5 log2(1 + C_aa / N_a)`` it is exact for a Gaussian predictive.

    Notes
    -----
    ``I_G(S) = 0.5 log2 det(I + N^-1/2 C_S N^-1/2)`` is the information of a linear-Gaussian
    measurement (Lindley 1956); for two visits the determinant is
    ``(1 + u_a)(1 + u_b) - k_ab^2`` with ``u = C_aa / N_a`` and ``k_ab = C_ab / sqrt(N_a N_b)``.
    """
    cov = np.atleast_2d(np.cov(predicted, rowvar=False))
    scale = 1.0 / np.sqrt(noise_var)
    k = cov * scale[:, None] * scale[None, :]
    u = np.diag(k)
    det = (1 + u)[:, None] * (1 + u)[None, :] - k**2
    red = 0.5 * np.log2((1 + u)[:, None] * (1 + u)[None, :] / np.maximum(det, 1e-300))
    np.fill_diagonal(red, 0.0)
    return np.maximum(red, 0.0)


def _pattern_values(k_white: np.ndarray, exact: np.ndarray, top: int, requires=None) -> dict:
    """Rescaled Gaussian information of every allowed subset of columns (bitmask keys).

    Subsets of at most ``top`` columns, closed under ``requires`` (all subsets when None);
    ``exact`` holds the columns' exact one-visit bits, which single columns take.
    """
    n = exact.size
    requires = [-1] * n if requires is None else list(requires)
    single = 0.5 * np.log2(1.0 + np.diag(k_white))
    values = {0: 0.0}
    by_size = {}
    for mask, cols in enumerate_visit_sets(requires, top):
        if cols:
            by_size.setdefault(len(cols), []).append((mask, cols))
    for size, group in by_size.items():
        subsets = np.array([cols for _, cols in group], dtype=np.int64)
        block = k_white[subsets[:, :, None], subsets[:, None, :]]
        _, logdet = np.linalg.slogdet(np.eye(size) + block)
        gauss = 0.5 * logdet / np.log(2.0)
        ratio = exact[subsets].sum(axis=1) / np.maximum(single[subsets].sum(axis=1), 1e-12)
        for (mask, _), v in zip(group, gauss * ratio, strict=True):
            values[mask] = float(v)
    return values


def _calibrate(values, pred, sigma, single, first, top, rng, n_outcomes) -> None:
    """Match the pattern of the ``top`` best first slots to the exact joint information.

    Patterns of ``k`` visits are multiplied by ``1 + (f - 1) (k - 1) / (top - 1)``, where ``f``
    is exact / surrogate on that pattern: singles stay exact, that pattern becomes exact. The
    fallback when exact patterns would cost more than ``EXACT_BUDGET``.
    """
    from planner.information.gain import joint_bits

    best = np.sort(np.asarray(first)[np.argsort(-single[first])[:top]])
    mask = int(np.sum(1 << best))
    if values.get(mask, 0.0) <= 0:
        return
    factor = joint_bits(pred[:, best], sigma[:, best], rng, n_outcomes).bits / values[mask]
    for key in values:
        k = bin(key).count("1")
        if k >= 2:
            values[key] *= 1.0 + (factor - 1.0) * (k - 1) / (top - 1)


def _slot_representatives(problem: Problem, s: int, apart_min: int, cap: int) -> dict:
    """Per night, up to ``cap`` representatives of target ``s``: best first, then spaced out.

    Each further slot takes the best remaining candidate at least ``apart_min`` from every
    earlier one, or, if none is that far, the best remaining one.
    """
    mine = np.flatnonzero(problem.target == s)
    reps = {}
    for n in np.unique(problem.night[mine]).tolist():
        here = mine[problem.night[mine] == n]
        here = here[np.argsort(-problem.bits[here], kind="stable")]
        start = problem.start[here].astype(np.int64)
        free = np.ones(here.size, dtype=bool)
        far = np.ones(here.size, dtype=bool)
        chosen = []
        while len(chosen) < min(cap, here.size):
            pick = int(np.argmax(far & free)) if (far & free).any() else int(np.argmax(free))
            chosen.append(int(here[pick]))
            free[pick] = False
            far &= np.abs(start - start[pick]) >= apart_min
        reps[n] = chosen
    return reps


def _best_per_night(problem: Problem, s: int, apart_min: int):
    """Best candidate of target ``s`` per night, and a second one at least ``apart_min`` away."""
    reps = _slot_representatives(problem, s, apart_min, 2)
    first = {n: r[0] for n, r in reps.items()}
    second = {n: r[1] for n, r in reps.items()
              if len(r) > 1 and abs(int(problem.start[r[1]]) - int(problem.start[r[0]]))
              >= apart_min}
    return first, second


def _columns(problem: Problem, s: int, reps: dict, cap: int):
    """Slot columns of target ``s``: every night's first slot, then every second slot, ...

    Returns the candidates, their pattern-key bits, the column each requires (-1: none), the
    largest pattern size and the number of patterns.

    The number of patterns is None past ``MAX_PATTERNS``: the target then takes the count
    form (:class:`CountValues`).
    """
    rule = problem.rules[s]
    cols, keys, requires = [], [], []
    for k in range(cap):
        for n in sorted(reps):
            if len(reps[n]) > k:
                requires.append(-1 if k == 0 else cols.index(reps[n][k - 1]))
                cols.append(reps[n][k])
                keys.append(slot_bit(n, k, problem.n_nights))
    top = len(cols) if rule.max_visits is None else min(len(cols), rule.max_visits)
    count = sum(1 for _ in itertools.islice(enumerate_visit_sets(requires, top), MAX_PATTERNS + 1))
    if count > MAX_PATTERNS:
        count = None
    return np.array(cols, dtype=np.int64), keys, requires, top, count


def _caps(problem: Problem) -> list:
    """Slots per night of each target: its visits per night, bounded by its visits in the run."""
    return [max(1, min(r.max_per_night, r.max_visits or r.max_per_night)) for r in problem.rules]


def build_surrogate(problem: Problem, predictors: Sequence, *, scale: int = 1000,
                    rng: np.random.Generator | None = None, n_outcomes: int = 256,
                    workers: int | None = None, streams=None) -> Surrogate:
    """Build the visit-pattern surrogate from each target's posterior predictions.

    Parameters
    ----------
    problem : Problem
        Candidate visits.
    predictors : sequence, length n_targets
        One object per target (problem order) with ``velocities(bjd) -> (n_samples, n_times)``
        [m/s] and ``jitter`` ``(n_samples,)`` [m/s], e.g.
        :class:`planner.information.predict.Predictor`.
    scale : int
        Integer units per bit (1000: millibits).
    rng : numpy.random.Generator, optional
        When given, every pattern of two or more visits is valued by its exact joint information
        (:func:`planner.information.visit_sets.pattern_bits`, ``n_outcomes`` shared outcomes per
        target);
        without it, by the rescaled Gaussian information.
    n_outcomes : int
        Simulated outcomes per target (each target draws from its own child of ``rng``).
    streams : planner.information.streams.Streams, optional
        Instead of ``rng``: each target draws from its own stream (stage ``surrogate``, keyed
        by its name), so its values do not depend on the order or number of targets.
    workers : int, optional
        Threads for the exact pattern values (None: one per core). The result does not
        depend on it.

    Returns
    -------
    Surrogate

    Raises
    ------
    PlanError
        If a target would need more than ``MAX_PATTERNS`` visit patterns (give it max_visits).
    """
    weights = problem.weights
    n_n = problem.n_nights
    caps = _caps(problem)
    slots = np.zeros((problem.n_targets, n_n, max(caps, default=1)))
    rho = np.ones(problem.n_targets)
    streams = _star_streams(problem, rng, streams)
    jobs, layout = [], []
    for s in range(problem.n_targets):
        rule = problem.rules[s]
        reps = _slot_representatives(problem, s, max(rule.min_spacing_min, 60), caps[s])
        if not reps:
            layout.append(None)
            continue
        cols, keys, requires, top, count = _columns(problem, s, reps, caps[s])
        pred = np.asarray(predictors[s].velocities(problem.bjd_mid[cols]), dtype=float)
        jitter = np.asarray(predictors[s].jitter, dtype=float)
        jobs.append((pred, problem.sigma[cols], jitter, problem.bits[cols], requires, top, count,
                     streams[s], n_outcomes, problem.target_names[s],
                     None if count is not None else _count_layout(reps, cols, caps[s])))
        layout.append((reps, cols, keys))
    found = iter(_run_values(jobs, workers))
    patterns = []
    for s, here in enumerate(layout):
        if here is None:
            patterns.append({0: 0})
            continue
        reps, cols, keys = here
        values = next(found)
        for n, r in reps.items():
            slots[s, n, :len(r)] = problem.bits[r]
        if isinstance(values, tuple):
            patterns.append(_count_values(values, slots[s], _present(reps, slots.shape[1:]),
                                          weights[s] * scale, rho, s))
            continue
        remap = {}
        for mask, v in values.items():
            full = sum(keys[j] for j in range(len(cols)) if mask >> j & 1)
            remap[full] = int(round(v * weights[s] * scale))
        patterns.append(remap)
        rho[s] = _saturation(values, problem.bits[cols])
    # A visit away from its slot representative changes V by rho times its change of one-visit
    # bits; alone it is worth rho b_c + (1 - rho) b_{n0}, and slot k takes the rest.
    first = slots[problem.target, problem.night, 0]
    r = rho[problem.target]
    unary = r * problem.bits + (1.0 - r) * first
    slots[:, :, 1:] = ((1.0 - rho)[:, None, None] * slots[:, :, :1]
                       + rho[:, None, None] * slots[:, :, 1:]) * (slots[:, :, 1:] > 0)
    return Surrogate(
        scale=int(scale),
        unary=np.rint(unary * weights[problem.target] * scale).astype(np.int64),
        slots=np.rint(slots * weights[:, None, None] * scale).astype(np.int64),
        patterns=tuple(patterns),
        rho=rho,
    )


def _star_streams(problem: Problem, rng, streams) -> list:
    """One random source per target: from the run's streams, spawned from ``rng``, or None."""
    if rng is not None and streams is not None:
        raise ValueError("give at most one of rng and streams.")
    if streams is not None:
        return [streams.star("surrogate", name) for name in problem.target_names]
    return [None] * problem.n_targets if rng is None else rng.spawn(problem.n_targets)


def _run_values(jobs: list, workers) -> list:
    """Return each target's pattern values, one thread per core.

    The patterns' sums and exponentials run in numpy without the GIL.
    """
    threads = max(1, min(workers or os.cpu_count() or 1, len(jobs)))
    if threads > 1:
        with ThreadPoolExecutor(threads) as pool:
            return list(pool.map(_target_values, jobs))
    return [_target_values(job) for job in jobs]


def _count_layout(reps: dict, cols: np.ndarray, cap: int) -> list:
    """Per slot ``k``, ``(night, column)`` of every night that has a slot-``k`` representative."""
    where = {int(c): j for j, c in enumerate(cols.tolist())}
    return [[(n, where[r[k]]) for n, r in sorted(reps.items()) if len(r) > k]
            for k in range(cap)]


def _count_tuples(sizes: list, top: int):
    """Visit counts per slot: non-increasing, ``t_k <= sizes[k]``, at most ``top`` in all."""
    out = []

    def grow(prefix, left):
        out.append(tuple(prefix) + (0,) * (len(sizes) - len(prefix)))
        k = len(prefix)
        if k == len(sizes):
            return
        limit = min(sizes[k], left, prefix[-1] if prefix else sizes[k])
        for t in range(1, limit + 1):
            grow(prefix + [t], left - t)

    grow([], top)
    return sorted(set(out))


def _draw_pattern(layout: list, t: tuple, rng: np.random.Generator) -> list:
    """Columns of a random pattern with ``t[k]`` visits in slot ``k``.

    Chosen from the deepest slot up, so each slot's nights hold every deeper one (the nights
    with a slot-``k`` representative hold those with a slot-``k+1`` one).
    """
    chosen, cols = set(), []
    for k in range(len(t) - 1, -1, -1):
        here = dict(layout[k])
        fresh = [n for n in here if n not in chosen]
        extra = t[k] - len([n for n in chosen if n in here])
        if extra > 0:
            chosen.update(rng.choice(fresh, size=extra, replace=False).tolist())
        cols.extend(here[n] for n in sorted(chosen) if n in here)
    return sorted(cols)


def _count_table(job) -> tuple:
    """Mean information ``g(t)`` and representatives' bits ``sbar(t)`` of random patterns.

    ``COUNT_DRAWS`` patterns per count ``t``; draw ``d`` of every ``t`` takes the outcomes of
    one generator seed (common random numbers), so differences between counts carry less
    noise. Exact joint information with a generator, the rescaled Gaussian one without.
    Returns ``({t: (g, sbar)}, None)`` [bit].
    """
    from planner.information.gain import joint_bits

    pred, sig_meas, jitter, exact, _, top, _, rng, n_outcomes, _, layout = job
    sigma = np.sqrt(sig_meas[None, :] ** 2 + jitter[:, None] ** 2)
    noise = sig_meas**2 + np.mean(jitter**2)
    cov = np.atleast_2d(np.cov(pred, rowvar=False))
    k_white = cov / np.sqrt(noise[:, None] * noise[None, :])
    single = 0.5 * np.log2(1.0 + np.diag(k_white))
    draw_rng = np.random.default_rng(0) if rng is None else rng
    seed = int(draw_rng.integers(2**62))

    def info(cols, d):
        b = float(exact[cols].sum())
        if len(cols) == 1:
            return b
        if rng is not None:
            return joint_bits(pred[:, cols], sigma[:, cols], np.random.default_rng([seed, d]),
                              n_outcomes).bits
        _, logdet = np.linalg.slogdet(np.eye(len(cols)) + k_white[np.ix_(cols, cols)])
        return 0.5 * logdet / np.log(2.0) * b / max(float(single[cols].sum()), 1e-12)

    # Redundancy of each pair of nights' first slots, less its mean.
    first = [j for _, j in layout[0]]
    red = np.zeros((pred.shape[1], pred.shape[1]))
    pairs = list(itertools.combinations(first, 2))
    for i, j in pairs:
        red[i, j] = red[j, i] = exact[i] + exact[j] - info([i, j], COUNT_DRAWS)
    mean_red = float(np.mean([red[i, j] for i, j in pairs])) if pairs else 0.0
    table, draws = {}, []
    for t in _count_tuples([len(level) for level in layout], top):
        if sum(t) == 0:
            table[t] = (0.0, 0.0)
            continue
        g, sbar, here = [], [], []
        for d in range(COUNT_DRAWS):
            cols = _draw_pattern(layout, t, draw_rng)
            g.append(info(cols, d))
            sbar.append(float(exact[cols].sum()))
            firsts = [j for j in cols if j in first]
            here.append(-sum(red[i, j] - mean_red for i, j in itertools.combinations(firsts, 2)))
        table[t] = (float(np.mean(g)), float(np.mean(sbar)))
        # What the pairs' redundancy explains of each draw beyond its counts' mean.
        draws.extend(zip(np.asarray(here) - np.mean(here), np.asarray(g) - np.mean(g),
                         strict=True))
    x, r = np.array(draws).reshape(-1, 2).T
    kappa = float(np.clip(x @ r / (x @ x), 0.0, 1.0)) if x @ x > 0 else 0.0
    pair = np.zeros((len(layout[0]), len(layout[0])))
    for a, (_, i) in enumerate(layout[0]):
        for b, (_, j) in enumerate(layout[0]):
            if a < b:
                pair[a, b] = -kappa * (red[i, j] - mean_red)
    return table, ([n for n, _ in layout[0]], pair)


def _present(reps: dict, shape: tuple) -> np.ndarray:
    """Which (night, slot) pairs have a representative, shape (n_nights, n_slots)."""
    out = np.zeros(shape, dtype=bool)
    for n, r in reps.items():
        out[n, :len(r)] = True
    return out


def _count_values(found: tuple, bits: np.ndarray, present: np.ndarray, unit: float,
                  rho: np.ndarray, s: int) -> CountValues:
    """Build the count form of target ``s`` from its table; set ``rho[s]`` (largest count).

    ``bits`` (n_nights, n_slots) holds the representatives' one-visit bits.
    """
    table, (nights, pair) = found
    _, g, sbar = max((sum(t), g, b) for t, (g, b) in table.items())
    rho[s] = float(np.clip(g / sbar, 0.0, 1.0)) if sbar > 0 and g > 0 else 1.0
    values = {t: int(round((g - rho[s] * b) * unit)) for t, (g, b) in table.items()}
    pairs = np.zeros((bits.shape[0], bits.shape[0]), dtype=np.int64)
    pairs[np.ix_(nights, nights)] = np.rint(pair * unit).astype(np.int64)
    return CountValues(values, np.rint(rho[s] * bits * unit).astype(np.int64), present, pairs)


def _target_values(job):
    """One target's pattern values [bit] by column bitmask: exact, or Gaussian past the budget.

    A target past ``MAX_PATTERNS`` gets its count table instead (:func:`_count_table`).
    """
    pred, sig_meas, jitter, exact, requires, top, count, rng, n_outcomes, name, _ = job
    if count is None:
        return _count_table(job)
    sigma = np.sqrt(sig_meas[None, :] ** 2 + jitter[:, None] ** 2)
    if rng is not None and count * n_outcomes * pred.shape[0] <= EXACT_BUDGET:
        found = pattern_bits(pred, sigma, requires, top, rng, n_outcomes)
        return {mask: (float(exact[_cols_of(mask)].sum()) if bin(mask).count("1") <= 1
                       else bits) for mask, (bits, _) in found.items()}
    noise = sig_meas**2 + np.mean(jitter**2)
    cov = np.atleast_2d(np.cov(pred, rowvar=False))
    values = _pattern_values(cov / np.sqrt(noise[:, None] * noise[None, :]), exact, top,
                             requires)
    first = [j for j, r in enumerate(requires) if r < 0]
    if rng is not None and top >= 2 and len(first) >= 2:
        log.info("target %s: %d patterns, Gaussian values calibrated on one", name, count)
        _calibrate(values, pred, sigma, exact, first, min(top, len(first)), rng, n_outcomes)
    return values


def _saturation(values: dict, exact: np.ndarray) -> float:
    """``V / sum of one-visit bits`` of the largest pattern (most visits, then most V), in [0, 1].

    How much a visit's own bits still count once the star has its other visits: 1 for
    independent visits, small for a star whose visits mostly repeat each other.
    """
    size, value, mask = max((bin(k).count("1"), v, k) for k, v in values.items())
    total = float(exact[_cols_of(mask)].sum())
    return float(np.clip(value / total, 0.0, 1.0)) if size >= 2 and total > 0 else 1.0


def _cols_of(mask: int) -> list:
    """Column indices of a column bitmask."""
    return [j for j in range(mask.bit_length()) if mask >> j & 1]
def additive_surrogate(problem: Problem, *, scale: int = 1000) -> Surrogate:
    """Build the surrogate without redundancy: weighted one-visit bits simply added.

    Parameters
    ----------
    problem : Problem
        Candidate visits.
    scale : int
        Integer units per bit.

    Returns
    -------
    Surrogate
        Every visit pattern worth the sum of its slot representatives' bits, so every visit is
        worth its own one-visit bits.
    """
    weights = problem.weights
    unary = np.rint(problem.bits * weights[problem.target] * scale).astype(np.int64)
    caps = _caps(problem)
    slots = np.zeros((problem.n_targets, problem.n_nights, max(caps, default=1)), np.int64)
    patterns = []
    for s in range(problem.n_targets):
        reps = _slot_representatives(problem, s, 0, caps[s])
        for n, r in reps.items():
            slots[s, n, :len(r)] = unary[r]
        cols, keys, requires, top, count = _columns(problem, s, reps, caps[s])
        if count is None:
            present = _present(reps, slots.shape[1:])
            sizes = [int(present[:, k].sum()) for k in range(present.shape[1])]
            patterns.append(CountValues(dict.fromkeys(_count_tuples(sizes, top), 0), slots[s],
                                        present))
            continue
        table = {}
        for _, members in enumerate_visit_sets(requires, top):
            table[sum(keys[j] for j in members)] = int(unary[cols[list(members)]].sum())
        patterns.append(table)
    return Surrogate(scale=int(scale), unary=unary, slots=slots, patterns=tuple(patterns))
