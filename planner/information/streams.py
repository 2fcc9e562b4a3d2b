"""Random streams of the Monte Carlo estimates: one recorded seed, one child per stage and star.

Every Monte Carlo estimate of a run (the exact score, the marginal bits in the plan file, the
surrogate's pattern values, conditional curves, posterior updates, the simulator) draws from its
own generator, made from one recorded seed through numpy's :class:`numpy.random.SeedSequence`:
the child of the seed for a stage, and within it the child for a star. The star's child index
is derived from its id (not from its position), so an estimate of one star depends on the seed,
the stage and that star only: not on the order of the stars, on how many other stars there are,
on what other stages drew, or on which thread ran it.

``SeedSequence(seed, spawn_key=(stage, star))`` is exactly the grandchild that
``SeedSequence(seed).spawn`` would hand out at those indices (numpy's documented spawn scheme),
so the streams are statistically independent children of the one seed.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np

__all__ = ["STAGES", "Streams", "star_index"]

#: The stages that draw random numbers, each with its fixed child index of the seed. Add new
#: stages at the end: an index, once given, never changes meaning (plans record the seed).
STAGES = {
    "score": 0,        # planner.allocation.score: the exact joint score of a plan
    "marginals": 1,    # planner.workflow.plan_file: chain-rule marginal bits of the visits
    "surrogate": 2,    # planner.allocation.surrogate: exact values of visit patterns
    "conditional": 3,  # planner.workflow.prepared: curves given executed visits without data
    "update": 4,       # planner.workflow.replan: posteriors updated with new velocities
    "expected": 5,     # planner.simulation.experiment: expected bits of executed plans
}


def star_index(star: str) -> int:
    """Child index of a star: the first 32 bits of the SHA-256 of its id (stable everywhere)."""
    return int.from_bytes(hashlib.sha256(str(star).encode("utf-8")).digest()[:4], "little")


@dataclass(frozen=True)
class Streams:
    """The random streams of a run, all derived from one seed.

    Attributes
    ----------
    seed : int
        The recorded root seed (non-negative).
    """

    seed: int

    def __post_init__(self) -> None:
        if int(self.seed) < 0:
            raise ValueError(f"a stream seed must be non-negative, got {self.seed}.")

    def sequence(self, stage: str, star: str) -> np.random.SeedSequence:
        """Return the seed sequence of one stage and one star."""
        if stage not in STAGES:
            raise ValueError(f"unknown random stage {stage!r}; known: {', '.join(STAGES)}.")
        return np.random.SeedSequence(int(self.seed), spawn_key=(STAGES[stage], star_index(star)))

    def star(self, stage: str, star: str) -> np.random.Generator:
        """Return a fresh generator for one stage and one star (the same on every call)."""
        return np.random.default_rng(self.sequence(stage, star))
