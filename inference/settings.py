"""How a target is sampled: the :class:`SamplerSettings` record, every field with a default."""

from dataclasses import asdict, dataclass

import numpy as np

from inference.errors import ModelError

__all__ = ["SamplerSettings"]


@dataclass(frozen=True)
class SamplerSettings:
    """How a target is sampled; every field has a default.

    Attributes
    ----------
    n_walkers : int
        Ensemble size (even, at least twice the number of sampled parameters).
    n_samples : int
        Target number of effectively independent output samples.
    max_steps : int
        Largest number of ensemble steps before giving up on convergence.
    check_every : int
        Steps between the first convergence checks (later ones come every 20% of the chain).
    tau_factor : float
        Convergence needs the kept chain to be at least this many autocorrelation times long.
    burn_factor : float
        Steps discarded as burn-in, in autocorrelation times.
    grid_oversample : float
        Frequency-grid oversampling of the multimodal start (grid step 1 / (q x span)).
    max_grid : int
        Largest number of grid frequencies.
    max_modes : int
        Peaks kept from each of the start's periodograms.
    max_candidates : int
        Largest number of candidate periods per planet sent to the importance step.
    harmonics : int
        Harmonics of each trial frequency in the start's periodogram (1 = circular orbits).
    mode_window : float
        Grid peaks within this many ln-likelihood units of the best are candidates.
    start_draws : int
        Importance draws per candidate mode and round.
    start_rounds : int
        Importance rounds (the first from the prior, then adaptive).
    de_weight, snooker_weight, jump_weight, stretch_weight : float
        Relative weights of the DE move, the DE snooker move, the DE mode-jump move
        (gamma = 1) and the stretch move.
    """

    n_walkers: int = 128
    n_samples: int = 2000
    max_steps: int = 10000
    check_every: int = 25
    tau_factor: float = 20.0
    burn_factor: float = 3.0
    grid_oversample: float = 5.0
    max_grid: int = 60000
    max_modes: int = 6
    max_candidates: int = 16
    harmonics: int = 3
    mode_window: float = 25.0
    start_draws: int = 1024
    start_rounds: int = 5
    de_weight: float = 0.8
    snooker_weight: float = 0.05
    jump_weight: float = 0.0
    stretch_weight: float = 0.15

    def __post_init__(self):
        ints = ("n_walkers", "n_samples", "max_steps", "check_every", "max_grid", "max_modes")
        ints += ("harmonics", "max_candidates")
        for name in ints + ("start_draws", "start_rounds"):
            value = getattr(self, name)
            if not (isinstance(value, int | np.integer) and value >= 1):
                raise ModelError(f"sampler setting {name} = {value!r} must be a whole number >= 1.")
        if self.n_walkers % 2:
            raise ModelError(
                f"sampler setting n_walkers = {self.n_walkers} must be even: use "
                f"{self.n_walkers + 1}."
            )
        for name in ("tau_factor", "burn_factor", "grid_oversample", "mode_window"):
            if not getattr(self, name) > 0:
                raise ModelError(f"sampler setting {name} must be positive.")
        weights = (self.de_weight, self.snooker_weight, self.jump_weight, self.stretch_weight)
        if min(weights) < 0 or sum(weights) <= 0:
            raise ModelError("move weights must be non-negative with a positive sum.")

    def to_dict(self):
        """Return the settings as a JSON-ready dict."""
        return asdict(self)
