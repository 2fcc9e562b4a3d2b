"""The redundancy-aware integer objective the allocation strategies optimise.

For one target, let ``S`` be its chosen visits, ``P`` the set of nights they fall in, ``S_n``
the visits in night ``n`` and ``c*_n`` the target's best candidate of night ``n``. The surrogate is

    f(S) = V(P) + sum_{c in S} b_c - sum_{n in P} b_{c*_n} - sum_n r_n C(|S_n|, 2),

where ``b_c`` is the exact one-visit information of candidate ``c``, ``V(P)`` the value of the
night pattern ``P`` and ``r_n`` the redundancy of a second visit in the same night. ``V`` is the
linearised Gaussian information of the best candidates of the pattern's nights (Lindley 1956),

    I_G(P) = 0.5 log2 det(I + N^-1/2 C_P N^-1/2),

with ``C`` the sample covariance of the posterior's predicted velocities at those times and ``N``
the noise variance (measurement and mean jitter), rescaled so that single nights carry their exact
bits: ``V(P) = I_G(P) * sum_{n in P} b_{c*_n} / sum_{n in P} I_G({n})``. The log-det is
submodular in the pattern (Krause and Guestrin 2005), so is ``f`` up to that rescaling, and unlike
a sum of pair terms it saturates correctly when a star is visited many times.

Everything is weighted by the target's science weight and held in integer units (``scale`` per
bit, millibits by default). The joint model gives each target one Boolean per night pattern of at
most ``max_visits`` nights, whose linear relaxation is the convex hull of ``V``.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from planner.errors import PlanError
from planner.problem import Problem

__all__ = ["Surrogate", "additive_surrogate", "build_surrogate", "gaussian_redundancy"]

#: Largest number of night patterns per target (all subsets of its nights up to max_visits).
MAX_PATTERNS = 20000


@dataclass(frozen=True, eq=False)
class Surrogate:
    """Integer surrogate objective of one problem (units of ``1 / scale`` weighted bit).

    Attributes
    ----------
    scale : int
        Integer units per weighted bit.
    unary : ndarray of int, shape (n_candidates,)
        Weighted one-visit value ``w b_c`` of each candidate.
    best : ndarray of int, shape (n_targets, n_nights)
        Weighted one-visit value of each target's best candidate of each night (0 if none).
    within : ndarray of int, shape (n_targets, n_nights)
        Weighted redundancy ``w r_n`` of each further pair of visits in one night.
    patterns : tuple of dict, length n_targets
        Per target, night-pattern bitmask (bit ``n`` for night ``n``) to weighted value ``w V``.
    """

    scale: int
    unary: np.ndarray
    best: np.ndarray
    within: np.ndarray
    patterns: tuple

    def subset(self, idx) -> Surrogate:
        """Return the same objective on ``Problem.subset(idx)`` (only candidate values move)."""
        return Surrogate(self.scale, self.unary[np.asarray(idx, dtype=np.int64)], self.best,
                         self.within, self.patterns)

    def _pattern(self, s: int, mask: int) -> int:
        try:
            return self.patterns[s][mask]
        except KeyError:
            raise PlanError(
                f"Target {s} has visits in more nights than its max_visits allows; the plan "
                "breaks its rules."
            ) from None

    def target_value(self, problem: Problem, s: int, chosen: Sequence[int]) -> int:
        """Surrogate of target ``s``'s visits among ``chosen``, integer units."""
        chosen = np.asarray(chosen, dtype=np.int64)
        mine = chosen[problem.target[chosen] == s]
        if mine.size == 0:
            return 0
        nights, counts = np.unique(problem.night[mine], return_counts=True)
        mask = sum(1 << int(n) for n in nights)
        return int(self._pattern(s, mask) + self.unary[mine].sum() - self.best[s, nights].sum()
                   - (self.within[s, nights] * counts * (counts - 1) // 2).sum())

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

        A candidate that would take its target past its pattern limit gets a very negative gain.
        """
        candidates = np.asarray(candidates, dtype=np.int64)
        chosen = np.asarray(chosen, dtype=np.int64)
        out = np.empty(candidates.size, dtype=np.int64)
        for s in np.unique(problem.target[candidates]):
            here = np.flatnonzero(problem.target[candidates] == s)
            mine = chosen[problem.target[chosen] == s]
            nights, counts = np.unique(problem.night[mine], return_counts=True)
            mask = sum(1 << int(n) for n in nights)
            base = self.patterns[s].get(mask, 0)
            per_night = dict(zip(nights.tolist(), counts.tolist(), strict=True))
            for k in here:
                c = candidates[k]
                n = int(problem.night[c])
                if n in per_night:
                    out[k] = self.unary[c] - self.within[s, n] * per_night[n]
                else:
                    grown = self.patterns[s].get(mask | (1 << n))
                    out[k] = (-(1 << 40) if grown is None
                              else grown - base + self.unary[c] - self.best[s, n])
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
        ``I_G(a)`` (returned by :func:`numpy.diag` of ``C / N``-based formula) it is exact for a
        Gaussian predictive.

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


def _best_per_night(problem: Problem, s: int, apart_min: int):
    """Best candidate of target ``s`` per night, and a second one at least ``apart_min`` away."""
    first, second = {}, {}
    mine = np.flatnonzero(problem.target == s)
    for c in mine:
        n = int(problem.night[c])
        if n not in first or problem.bits[c] > problem.bits[first[n]]:
            first[n] = c
    for c in mine:
        n = int(problem.night[c])
        if abs(int(problem.start[c]) - int(problem.start[first[n]])) >= apart_min and (
            n not in second or problem.bits[c] > problem.bits[second[n]]
        ):
            second[n] = c
    return first, second


def _pattern_values(k_white: np.ndarray, exact: np.ndarray, top: int) -> dict:
    """Rescaled Gaussian information of every subset of up to ``top`` nights (bitmask keys)."""
    n = exact.size
    single = 0.5 * np.log2(1.0 + np.diag(k_white))
    values = {0: 0.0}
    for size in range(1, top + 1):
        subsets = np.array(list(itertools.combinations(range(n), size)), dtype=np.int64)
        if subsets.size == 0:
            break
        block = k_white[subsets[:, :, None], subsets[:, None, :]]
        _, logdet = np.linalg.slogdet(np.eye(size) + block)
        gauss = 0.5 * logdet / np.log(2.0)
        ratio = exact[subsets].sum(axis=1) / np.maximum(single[subsets].sum(axis=1), 1e-12)
        for sub, v in zip(subsets, gauss * ratio, strict=True):
            values[int(np.sum(1 << sub))] = float(v)
    return values


def _calibrate(values, pred, sigma, single, top, rng, n_outcomes) -> None:
    """Match the pattern of the ``top`` best nights to the exact joint information, in place.

    Patterns of ``k`` nights are multiplied by ``1 + (f - 1) (k - 1) / (top - 1)``, where ``f``
    is exact / surrogate on that pattern: singles stay exact, the largest pattern becomes exact.
    """
    from planner.information import joint_bits

    best = np.sort(np.argsort(-single)[:top])
    mask = int(np.sum(1 << best))
    if values.get(mask, 0.0) <= 0:
        return
    factor = joint_bits(pred[:, best], sigma[:, best], rng, n_outcomes).bits / values[mask]
    for key in values:
        k = bin(key).count("1")
        if k >= 2:
            values[key] *= 1.0 + (factor - 1.0) * (k - 1) / (top - 1)


def build_surrogate(problem: Problem, predictors: Sequence, *, scale: int = 1000,
                    rng: np.random.Generator | None = None, n_outcomes: int = 256) -> Surrogate:
    """Build the night-pattern surrogate from each target's posterior predictions.

    Parameters
    ----------
    problem : Problem
        Candidate visits.
    predictors : sequence, length n_targets
        One object per target (problem order) with ``velocities(bjd) -> (n_samples, n_times)``
        [m/s] and ``jitter`` ``(n_samples,)`` [m/s], e.g. :class:`planner.predict.Predictor`.
    scale : int
        Integer units per bit (1000: millibits).
    rng : numpy.random.Generator, optional
        When given, each target's largest pattern of its best nights is matched to the exact
        joint information (:func:`planner.information.joint_bits`, ``n_outcomes`` outcomes) and
        the patterns in between are interpolated by size; without it, no calibration.
    n_outcomes : int
        Simulated outcomes of that calibration.

    Returns
    -------
    Surrogate

    Raises
    ------
    PlanError
        If a target would need more than ``MAX_PATTERNS`` night patterns (give it max_visits).
    """
    weights = problem.weights
    best = np.zeros((problem.n_targets, problem.n_nights))
    within = np.zeros((problem.n_targets, problem.n_nights))
    patterns = []
    for s in range(problem.n_targets):
        rule = problem.rules[s]
        first, second = _best_per_night(problem, s, max(rule.min_spacing_min, 60))
        nights = sorted(first)
        if not nights:
            patterns.append({0: 0})
            continue
        top = len(nights) if rule.max_visits is None else min(len(nights), rule.max_visits)
        count = sum(math.comb(len(nights), k) for k in range(top + 1))
        if count > MAX_PATTERNS:
            raise PlanError(
                f"Target {problem.target_names[s]!r} could be visited in {count} patterns of "
                f"nights; give it a max_visits of {rule.max_visits or len(nights)} or fewer."
            )
        reps = np.array([first[n] for n in nights] + [second[n] for n in nights if n in second])
        pred = np.asarray(predictors[s].velocities(problem.bjd_mid[reps]), dtype=float)
        jitter = np.asarray(predictors[s].jitter, dtype=float)
        noise = problem.sigma[reps] ** 2 + np.mean(jitter**2)
        cov = np.atleast_2d(np.cov(pred, rowvar=False))
        k_white = cov / np.sqrt(noise[:, None] * noise[None, :])
        m = len(nights)
        values = _pattern_values(k_white[:m, :m], problem.bits[reps[:m]], top)
        if rng is not None and top >= 2:
            _calibrate(values, pred[:, :m], np.sqrt(problem.sigma[reps[:m]][None, :] ** 2
                                                     + jitter[:, None] ** 2),
                       problem.bits[reps[:m]], top, rng, n_outcomes)
        remap = {}
        for mask, v in values.items():
            full = sum(1 << nights[j] for j in range(m) if mask >> j & 1)
            remap[full] = int(round(v * weights[s] * scale))
        patterns.append(remap)
        best[s, nights] = problem.bits[reps[:m]]
        if len(reps) > m:
            red = gaussian_redundancy(pred, noise)
            u = np.diag(k_white)
            rho = np.clip(problem.bits[reps] / np.maximum(0.5 * np.log2(1 + u), 1e-12), 0, 1)
            red = red * np.sqrt(rho[:, None] * rho[None, :])
            for k, n in enumerate(n for n in nights if n in second):
                within[s, n] = red[nights.index(n), m + k]
    unary = np.rint(problem.bits * weights[problem.target] * scale).astype(np.int64)
    return Surrogate(
        scale=int(scale),
        unary=unary,
        best=np.rint(best * weights[:, None] * scale).astype(np.int64),
        within=np.rint(within * weights[:, None] * scale).astype(np.int64),
        patterns=tuple(patterns),
    )


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
        Every night pattern worth the sum of its best singles; no same-night redundancy.
    """
    weights = problem.weights
    unary = np.rint(problem.bits * weights[problem.target] * scale).astype(np.int64)
    best = np.zeros((problem.n_targets, problem.n_nights), dtype=np.int64)
    np.maximum.at(best, (problem.target, problem.night), unary)
    patterns = []
    for s, rule in enumerate(problem.rules):
        nights = np.unique(problem.night[problem.target == s])
        top = len(nights) if rule.max_visits is None else min(len(nights), rule.max_visits)
        table = {}
        for size in range(top + 1):
            for sub in itertools.combinations(nights.tolist(), size):
                table[sum(1 << n for n in sub)] = int(best[s, list(sub)].sum())
        patterns.append(table)
    return Surrogate(scale=int(scale), unary=unary, best=best,
                     within=np.zeros_like(best), patterns=tuple(patterns))
