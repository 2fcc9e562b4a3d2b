"""The redundancy-aware integer objective the allocation strategies optimise.

For one target with chosen visits S the surrogate is

    f(S) = sum_{c in S} b_c - sum_{c < d in S} r(n_c, n_d),

the candidates' one-visit bits ``b_c`` minus a redundancy ``r >= 0`` for every pair of chosen
visits, which depends on the pair's nights ``n_c, n_d`` only. A quadratic set function with
non-negative pair terms is submodular (each visit's marginal gain, ``b_c`` minus the redundancy
with what is already chosen, can only shrink as the set grows), the shape the exact mutual
information has for conditionally independent noise (Krause and Guestrin 2005).

The redundancy of two nights comes from the Gaussian (linearised) information of the predicted
velocities at the target's best candidate of each night,
``I_G(a) + I_G(b) - I_G(a, b)`` with ``I_G(S) = 0.5 log2 det(I + N^-1/2 C_S N^-1/2)``, ``C`` the
sample covariance of the predictions and ``N`` the mean noise variance (Lindley 1956), rescaled
by ``sqrt(rho_a rho_b)`` where ``rho = b / I_G`` matches it to the exact one-visit bits.
Everything is weighted by the target's science weight and held in integer units
(``scale`` per bit, millibits by default) so CP-SAT can optimise it exactly.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from planner.problem import Problem

__all__ = ["Surrogate", "additive_surrogate", "build_surrogate", "gaussian_redundancy"]


@dataclass(frozen=True, eq=False)
class Surrogate:
    """Integer surrogate objective of one problem.

    Attributes
    ----------
    scale : int
        Integer units per (weighted) bit.
    unary : ndarray of int, shape (n_candidates,)
        Weighted one-visit value of each candidate [1/scale bit].
    redundancy : ndarray of int, shape (n_targets, n_nights, n_nights)
        Weighted redundancy of a pair of visits of a target in two nights (symmetric; the
        diagonal is for two visits in the same night) [1/scale bit].
    """

    scale: int
    unary: np.ndarray
    redundancy: np.ndarray

    def value(self, problem: Problem, chosen: Sequence[int]) -> int:
        """Surrogate of a set of candidates, integer units."""
        chosen = np.asarray(chosen, dtype=np.int64)
        total = int(self.unary[chosen].sum())
        tgt, nig = problem.target[chosen], problem.night[chosen]
        pair = self.redundancy[tgt[:, None], nig[:, None], nig[None, :]]
        same = tgt[:, None] == tgt[None, :]
        upper = np.triu(np.ones((chosen.size, chosen.size), dtype=bool), 1)
        return total - int(pair[same & upper].sum())

    def bits(self, problem: Problem, chosen: Sequence[int]) -> float:
        """Surrogate of a set of candidates [weighted bit]."""
        return self.value(problem, chosen) / self.scale

    def per_target(self, problem: Problem, chosen: Sequence[int]) -> np.ndarray:
        """Surrogate of each target's share of the set [weighted bit], shape (n_targets,)."""
        chosen = np.asarray(chosen, dtype=np.int64)
        out = np.zeros(problem.n_targets)
        for s in np.unique(problem.target[chosen]):
            out[s] = self.bits(problem, chosen[problem.target[chosen] == s])
        return out

    def marginal(self, problem: Problem, candidates: np.ndarray, chosen: Sequence[int]) -> np.ndarray:
        """Gain of adding each of ``candidates`` alone to ``chosen``, integer units.

        Only chosen visits of the same target reduce a candidate's gain.
        """
        candidates = np.asarray(candidates, dtype=np.int64)
        chosen = np.asarray(chosen, dtype=np.int64)
        gain = self.unary[candidates].astype(np.int64)
        if chosen.size:
            pair = self.redundancy[problem.target[candidates][:, None],
                                   problem.night[candidates][:, None],
                                   problem.night[chosen][None, :]]
            same = problem.target[candidates][:, None] == problem.target[chosen][None, :]
            gain = gain - np.where(same, pair, 0).sum(axis=1)
        return gain


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
    for c in np.flatnonzero(problem.target == s):
        n = int(problem.night[c])
        if n not in first or problem.bits[c] > problem.bits[first[n]]:
            first[n] = c
    for c in np.flatnonzero(problem.target == s):
        n = int(problem.night[c])
        if abs(int(problem.start[c]) - int(problem.start[first[n]])) >= apart_min and (
            n not in second or problem.bits[c] > problem.bits[second[n]]
        ):
            second[n] = c
    return first, second


def build_surrogate(problem: Problem, predictors: Sequence, *, scale: int = 1000) -> Surrogate:
    """Build the pairwise-redundancy surrogate from each target's posterior predictions.

    Parameters
    ----------
    problem : Problem
        Candidate visits.
    predictors : sequence, length n_targets
        One object per target (problem order) with ``velocities(bjd) -> (n_samples, n_times)``
        [m/s] and ``jitter`` ``(n_samples,)`` [m/s], e.g. :class:`planner.predict.Predictor`.
    scale : int
        Integer units per bit (1000: millibits).

    Returns
    -------
    Surrogate
        Unary values from ``problem.bits`` and pair redundancies per (target, night, night).
    """
    weights = problem.weights
    red = np.zeros((problem.n_targets, problem.n_nights, problem.n_nights))
    for s in np.unique(problem.target):
        rule = problem.rules[s]
        first, second = _best_per_night(problem, s, max(rule.min_spacing_min, 60))
        nights = sorted(first)
        reps = [first[n] for n in nights] + [second[n] for n in nights if n in second]
        reps = np.array(reps, dtype=np.int64)
        pred = np.asarray(predictors[s].velocities(problem.bjd_mid[reps]), dtype=float)
        jitter = np.asarray(predictors[s].jitter, dtype=float)
        noise = problem.sigma[reps] ** 2 + np.mean(jitter**2)
        r = gaussian_redundancy(pred, noise)
        u = np.var(pred, axis=0, ddof=1) / noise
        rho = np.clip(problem.bits[reps] / np.maximum(0.5 * np.log2(1 + u), 1e-12), 0.0, 1.0)
        r = r * np.sqrt(rho[:, None] * rho[None, :])
        pos = {n: k for k, n in enumerate(nights)}
        for a in nights:
            for b in nights:
                if a != b:
                    red[s, a, b] = r[pos[a], pos[b]]
        for k, n in enumerate(n for n in nights if n in second):
            red[s, n, n] = r[pos[n], len(nights) + k]
    weighted = red * weights[:, None, None]
    return Surrogate(
        scale=int(scale),
        unary=np.rint(problem.bits * weights[problem.target] * scale).astype(np.int64),
        redundancy=np.rint(weighted * scale).astype(np.int64),
    )


def additive_surrogate(problem: Problem, *, scale: int = 1000) -> Surrogate:
    """The surrogate without redundancy: weighted one-visit bits simply added.

    Parameters
    ----------
    problem : Problem
        Candidate visits.
    scale : int
        Integer units per bit.

    Returns
    -------
    Surrogate
        Zero redundancy everywhere.
    """
    weights = problem.weights
    return Surrogate(
        scale=int(scale),
        unary=np.rint(problem.bits * weights[problem.target] * scale).astype(np.int64),
        redundancy=np.zeros((problem.n_targets, problem.n_nights, problem.n_nights), np.int64),
    )
