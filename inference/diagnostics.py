"""How a sampling run went: the :class:`Diagnostics` record kept with every posterior."""

from dataclasses import asdict, dataclass

__all__ = ["Diagnostics"]


@dataclass(frozen=True)
class Diagnostics:
    """How a sampling run went.

    Attributes
    ----------
    ok : bool
        True when the importance weights met their targets: Pareto k-hat at most 0.7 and an
        effective sample size of at least ``min_ess``.
    ess : float
        Kish effective sample size of the final importance draws.
    n_draws : int
        Final importance draws.
    k_hat : float
        Pareto k-hat of their weights (:func:`inference.psis.pareto_k_hat`).
    log_evidence : float
        ln Z, the evidence of the model (prior-weighted mean likelihood) [ln units].
    log_evidence_se : float
        Monte Carlo standard error of `log_evidence`.
    modes : tuple of dict
        Period modes holding at least 1% (:class:`inference.modes.PeriodMode` as dicts).
    rounds : int
        Adaptation rounds of the importance mixture.
    n_components : int
        Student-t components of the final mixture.
    move_acceptance : float
        Mean acceptance of the resample-move sweeps.
    unique_fraction : float
        Share of distinct output samples after the moves.
    n_evaluations : int
        Likelihood evaluations, period scan included.
    start_modes : tuple of tuple of float
        Periods [d] of the candidate modes the period scan found.
    seconds : float
        Wall time of the fit [s].
    message : str
        Empty when `ok`, else what fell short and which setting to change.
    """

    ok: bool
    ess: float
    n_draws: int
    k_hat: float
    log_evidence: float
    log_evidence_se: float
    modes: tuple
    rounds: int
    n_components: int
    move_acceptance: float
    unique_fraction: float
    n_evaluations: int
    start_modes: tuple
    seconds: float
    message: str = ""

    def to_dict(self):
        """Return the diagnostics as a JSON-ready dict."""
        d = asdict(self)
        d["modes"] = [dict(m) for m in self.modes]
        return d

    @classmethod
    def from_dict(cls, d):
        """Rebuild diagnostics written by :meth:`to_dict`."""
        d = dict(d)
        d["modes"] = tuple(dict(m) for m in d["modes"])
        d["start_modes"] = tuple(tuple(m) for m in d["start_modes"])
        return cls(**d)
