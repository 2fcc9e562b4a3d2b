"""How a sampling run went: the :class:`Diagnostics` record kept with every posterior."""

from dataclasses import asdict, dataclass

__all__ = ["Diagnostics"]


@dataclass(frozen=True)
class Diagnostics:
    """How a sampling run went.

    Attributes
    ----------
    converged : bool
        True when the chain passed the autocorrelation checks within ``max_steps``.
    n_steps : int
        Ensemble steps run.
    burn_in : int
        Steps discarded.
    thin : int
        Thinning interval of the kept chain.
    tau : tuple of float
        Integrated autocorrelation time of each sampled parameter [steps].
    ess : float
        Effective sample size of the kept chain (walkers x kept steps / max tau).
    acceptance : float
        Mean acceptance fraction.
    n_evaluations : int
        Likelihood evaluations, start included.
    start_modes : tuple of tuple of float
        Periods [d] of the modes the start found.
    start_weights : tuple of float
        Their estimated probabilities.
    seconds : float
        Wall time of the fit [s].
    message : str
        Empty when converged, else why not.
    """

    converged: bool
    n_steps: int
    burn_in: int
    thin: int
    tau: tuple
    ess: float
    acceptance: float
    n_evaluations: int
    start_modes: tuple
    start_weights: tuple
    seconds: float
    message: str = ""

    def to_dict(self):
        """Return the diagnostics as a JSON-ready dict."""
        return asdict(self)

    @classmethod
    def from_dict(cls, d):
        """Rebuild diagnostics written by :meth:`to_dict`."""
        d = dict(d)
        d["tau"] = tuple(d["tau"])
        d["start_modes"] = tuple(tuple(m) for m in d["start_modes"])
        d["start_weights"] = tuple(d["start_weights"])
        return cls(**d)
