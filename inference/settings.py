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
    n_samples : int
        Number of equal-weight output samples.
    min_ess : int
        Effective sample size the final importance draws must reach.
    max_log_z_se : float
        Largest standard error of ln Z accepted.
    draws : int
        Importance draws per adaptation round (a round that only lacks effective samples
        draws more, enough to reach ``min_ess``).
    rounds : int
        Largest number of rounds.
    max_draws : int
        Largest number of importance draws in all (rounds stop at the first whose weights
        meet the targets: Pareto k-hat at most 0.7, ``min_ess`` effective samples and a
        standard error of ln Z of at most ``max_log_z_se``).
    defensive : float
        Share of the prior in the importance mixture, in (0, 1).
    dof : float
        Degrees of freedom of the mixture's Student-t components.
    move_steps : int
        Resample-move sweeps after resampling (each an independence Metropolis-Hastings step
        with the mixture as proposal and an ensemble step of emcee).
    grid_oversample : float
        Frequency-grid oversampling of the period scan (grid step 1 / (q x span)).
    max_grid : int
        Largest number of grid frequencies.
    max_modes : int
        Peaks kept from each of the scan's periodograms.
    max_candidates : int
        Largest number of candidate periods per planet sent to the importance step.
    harmonics : int
        Harmonics of each trial frequency in the scan's periodogram (1 = circular orbits).
    mode_window : float
        Grid peaks within this many ln-likelihood units of the best are candidates.
    """

    n_samples: int = 2000
    min_ess: int = 500
    max_log_z_se: float = 0.05
    draws: int = 4000
    rounds: int = 30
    max_draws: int = 200000
    defensive: float = 0.15
    dof: float = 5.0
    move_steps: int = 6
    grid_oversample: float = 5.0
    max_grid: int = 60000
    max_modes: int = 6
    max_candidates: int = 16
    harmonics: int = 3
    mode_window: float = 25.0

    def __post_init__(self):
        ints = ("n_samples", "min_ess", "draws", "rounds", "max_draws", "max_grid")
        ints += ("max_modes", "harmonics", "max_candidates")
        for name in ints:
            value = getattr(self, name)
            if not (isinstance(value, int | np.integer) and value >= 1):
                raise ModelError(f"sampler setting {name} = {value!r} must be a whole number >= 1.")
        if not (isinstance(self.move_steps, int | np.integer) and self.move_steps >= 0):
            raise ModelError(
                f"sampler setting move_steps = {self.move_steps!r} must be a whole number >= 0."
            )
        if self.max_draws < self.draws:
            raise ModelError(
                f"sampler setting max_draws = {self.max_draws} is below draws = "
                f"{self.draws}: raise max_draws."
            )
        if not 0.0 < self.defensive < 1.0:
            raise ModelError(f"sampler setting defensive = {self.defensive!r} must be in (0, 1).")
        for name in ("dof", "grid_oversample", "mode_window", "max_log_z_se"):
            if not getattr(self, name) > 0:
                raise ModelError(f"sampler setting {name} must be positive.")

    def to_dict(self):
        """Return the settings as a JSON-ready dict."""
        return asdict(self)
