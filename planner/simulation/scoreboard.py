"""The scoreboard of a strategy experiment: each strategy summarised over seeds.

Means and spreads of expected bits, realised bits and volume shrink, and the cost to reach the
cadence plan's realised information (:func:`planner.simulation.realised.cost_to_reach`), from the
per-seed records of :mod:`planner.simulation.experiment`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner.errors import PlanError
from planner.simulation.realised import cost_to_reach

__all__ = ["Experiment", "StrategySummary", "summarise"]


@dataclass(frozen=True)
class StrategySummary:
    """One strategy over all seeds.

    Attributes
    ----------
    strategy : str
        Strategy name.
    expected_bits : float
        Mean over seeds of the expected bits of its planned visits [bits].
    realised_bits_mean, realised_bits_std : float
        Mean and sample standard deviation over seeds of the realised bits [bits].
    shrink_bits_mean, shrink_bits_std : float
        The same for the volume shrink [bits].
    exposures : float
        Mean number of executed exposures.
    hours : float
        Mean telescope hours of the executed exposures [h].
    reach_exposures : float or None
        Mean exposures needed to reach cadence's realised bits, over the seeds that reach it.
    reach_hours : float or None
        The same in hours [h].
    reach_fraction : float
        Fraction of seeds in which it reaches cadence's realised bits.
    per_star : tuple of (str, float, float)
        ``(target, mean realised bits, mean shrink bits)``, over seeds (0 where unvisited).
    """

    strategy: str
    expected_bits: float
    realised_bits_mean: float
    realised_bits_std: float
    shrink_bits_mean: float
    shrink_bits_std: float
    exposures: float
    hours: float
    reach_exposures: float | None
    reach_hours: float | None
    reach_fraction: float
    per_star: tuple


@dataclass(frozen=True)
class Experiment:
    """The comparison: every strategy in every seed, and the summaries.

    Attributes
    ----------
    seeds : tuple of int
        Seeds run.
    runs : tuple of StrategyRun
        Every strategy in every seed.
    summaries : tuple of StrategySummary
        One per strategy, in the order asked.
    """

    seeds: tuple
    runs: tuple
    summaries: tuple

    def summary(self, strategy) -> StrategySummary:
        """Return the summary of one strategy."""
        for s in self.summaries:
            if s.strategy == strategy:
                return s
        raise PlanError(f"strategy {strategy!r} was not run; run it with --strategies.")


def _mean_std(values):
    x = np.asarray(values, dtype=float)
    return float(x.mean()), float(x.std(ddof=1)) if x.size > 1 else 0.0


def summarise(runs, strategies, targets):
    """Summaries per strategy over seeds, with the cost to reach cadence's realised bits.

    Parameters
    ----------
    runs : sequence of StrategyRun
        Every strategy in every seed.
    strategies : sequence of str
        Strategies to summarise, in order.
    targets : sequence of str
        All targets (for the per-star table).

    Returns
    -------
    tuple of StrategySummary
        Cost-to-reach fields are None when cadence was not run.
    """
    goal = {r.seed: r.curve_bits[-1] if r.curve_bits.size else 0.0
            for r in runs if r.strategy == "cadence"}
    out = []
    for name in strategies:
        mine = [r for r in runs if r.strategy == name]
        if not mine:
            continue
        reach = [cost_to_reach(r.curve_bits, r.curve_hours, goal[r.seed])
                 for r in mine if r.seed in goal]
        hit = [x for x in reach if x[0] is not None]
        per_star = []
        for t in targets:
            b = [sum(s.bits for s in r.stars if s.target == t) for r in mine]
            v = [sum(s.shrink_bits for s in r.stars if s.target == t) for r in mine]
            per_star.append((t, float(np.mean(b)), float(np.mean(v))))
        real, shrink = _mean_std([r.realised_bits for r in mine]), _mean_std(
            [r.shrink_bits for r in mine])
        out.append(StrategySummary(
            strategy=name, expected_bits=float(np.mean([r.expected_bits for r in mine])),
            realised_bits_mean=real[0], realised_bits_std=real[1],
            shrink_bits_mean=shrink[0], shrink_bits_std=shrink[1],
            exposures=float(np.mean([r.exposures for r in mine])),
            hours=float(np.mean([r.hours for r in mine])),
            reach_exposures=float(np.mean([x[0] for x in hit])) if hit else None,
            reach_hours=float(np.mean([x[1] for x in hit])) if hit else None,
            reach_fraction=len(hit) / len(reach) if reach else 0.0,
            per_star=tuple(per_star),
        ))
    return tuple(out)
