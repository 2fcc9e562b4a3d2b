"""The RV model: which parameters exist, their priors, and how samples are named.

Per planet the sampler moves ``log_period_k`` (ln of the period in days) and the pair
``secos_phase_k, sesin_phase_k`` = sqrt(e) (cos M0, sin M0), where M0 is the mean anomaly at the
reference epoch ``t_ref``; per instrument it moves ``log_jitter_<inst>``. The linear parameters
(A_k = K cos omega, B_k = K sin omega, one offset per instrument, the optional trend) have
Gaussian priors and are marginalised analytically (see docs/priors.md).
"""

from dataclasses import asdict, dataclass, field

import numpy as np

from .errors import ModelError, RVDataError

__all__ = [
    "EccentricityPrior",
    "GaussianPrior",
    "JitterPrior",
    "ModelSpec",
    "PeriodPrior",
    "check_enough_points",
]

_ECC_KINDS = ("uniform", "beta")


@dataclass(frozen=True)
class PeriodPrior:
    """Log-uniform prior on every planet's period, with planets ordered by period.

    Attributes
    ----------
    minimum, maximum : float
        Period range [d], 0 < minimum < maximum.
    """

    minimum: float = 1.0
    maximum: float = 10000.0

    def __post_init__(self):
        if not (0.0 < self.minimum < self.maximum and np.isfinite(self.maximum)):
            raise ModelError(
                f"period range ({self.minimum!r}, {self.maximum!r}) d is not 0 < minimum < "
                "maximum: give a finite, increasing pair of positive periods in days."
            )


@dataclass(frozen=True)
class EccentricityPrior:
    """Prior on every planet's eccentricity (the phase M0 is uniform on the circle).

    Attributes
    ----------
    kind : {"uniform", "beta"}
        ``"uniform"``: e uniform on [0, maximum]; ``"beta"``: Beta(a, b) truncated at maximum.
    maximum : float
        Largest eccentricity allowed, 0 < maximum <= 0.999.
    a, b : float
        Beta shape parameters (used when kind is ``"beta"``).
    """

    kind: str = "uniform"
    maximum: float = 0.95
    a: float = 0.867
    b: float = 3.03

    def __post_init__(self):
        if self.kind not in _ECC_KINDS:
            raise ModelError(
                f"eccentricity prior kind {self.kind!r} is unknown: use one of {_ECC_KINDS}."
            )
        if not (0.0 < self.maximum <= 0.999):
            raise ModelError(
                f"eccentricity maximum {self.maximum!r} is outside (0, 0.999]: choose a value "
                "in that range."
            )
        if not (self.a > 0.0 and self.b > 0.0):
            raise ModelError(
                f"Beta shape parameters ({self.a!r}, {self.b!r}) must be positive: fix a and b."
            )


@dataclass(frozen=True)
class GaussianPrior:
    """Gaussian prior of one linear parameter.

    Attributes
    ----------
    mean : float
        Prior mean (m/s, or m/s/d for the trend).
    sigma : float
        Prior standard deviation, positive (same unit).
    """

    mean: float
    sigma: float

    def __post_init__(self):
        if not (np.isfinite(self.mean) and self.sigma > 0.0 and np.isfinite(self.sigma)):
            raise ModelError(
                f"Gaussian prior (mean {self.mean!r}, sigma {self.sigma!r}) needs a finite mean "
                "and a positive finite sigma: fix the prior settings."
            )


@dataclass(frozen=True)
class JitterPrior:
    """Modified-Jeffreys prior p(s) proportional to 1 / (s + knee) on [0, maximum].

    Attributes
    ----------
    knee : float
        Scale below which the prior flattens [m/s], positive.
    maximum : float
        Largest jitter allowed [m/s], above `knee`.
    """

    knee: float
    maximum: float

    def __post_init__(self):
        if not (0.0 < self.knee < self.maximum and np.isfinite(self.maximum)):
            raise ModelError(
                f"jitter prior (knee {self.knee!r}, maximum {self.maximum!r}) m/s needs "
                "0 < knee < maximum: fix the jitter prior settings."
            )

    @property
    def log_minimum(self):
        """Float: lower end of ln s sampled (ln of 1e-4 knee; the prior mass below is ~1e-8)."""
        return float(np.log(1e-4 * self.knee))


@dataclass(frozen=True)
class ModelSpec:
    """The model of one star's velocities.

    Attributes
    ----------
    n_planets : int
        Number of Keplerian signals (0 or more).
    instruments : tuple of str
        Instruments, each with its own offset and jitter.
    trend : bool
        Whether a linear trend in time is included.
    t_ref : float
        Reference epoch for the phases and the trend, BJD_TDB [d].
    period : PeriodPrior
        Period prior shared by all planets (ordered P_1 < P_2 < ...).
    eccentricity : EccentricityPrior
        Eccentricity prior shared by all planets.
    amplitude : float
        Standard deviation [m/s] of the Gaussian priors on A_k and B_k (K is then Rayleigh
        with this scale, omega uniform).
    offsets : tuple of GaussianPrior
        Prior of each instrument's offset [m/s], in the order of `instruments`.
    jitters : tuple of JitterPrior
        Prior of each instrument's jitter [m/s], in the order of `instruments`.
    trend_prior : GaussianPrior or None
        Prior of the trend [m/s/d] (required when `trend` is True).
    """

    n_planets: int
    instruments: tuple
    trend: bool
    t_ref: float
    period: PeriodPrior
    eccentricity: EccentricityPrior
    amplitude: float
    offsets: tuple
    jitters: tuple
    trend_prior: GaussianPrior | None = field(default=None)

    def __post_init__(self):
        if not (isinstance(self.n_planets, int | np.integer) and self.n_planets >= 0):
            raise ModelError(
                f"n_planets {self.n_planets!r} is not a whole number >= 0: give 0, 1, 2, ..."
            )
        if not self.instruments or len(set(self.instruments)) != len(self.instruments):
            raise ModelError(
                f"instruments {self.instruments!r} must be a non-empty list of distinct names."
            )
        if len(self.offsets) != len(self.instruments) or len(self.jitters) != len(self.instruments):
            raise ModelError(
                "the model needs exactly one offset prior and one jitter prior per instrument: "
                "give as many of each as there are instruments."
            )
        if self.trend and self.trend_prior is None:
            raise ModelError("the model has a trend but no trend prior: set trend_prior.")
        if not (self.amplitude > 0.0 and np.isfinite(self.amplitude)):
            raise ModelError(
                f"amplitude prior scale {self.amplitude!r} m/s must be positive and finite."
            )
        if not np.isfinite(self.t_ref):
            raise ModelError(f"reference epoch t_ref {self.t_ref!r} must be a finite BJD_TDB.")

    @classmethod
    def for_data(
        cls,
        data,
        n_planets=1,
        trend=False,
        period_range=(1.0, 10000.0),
        eccentricity=None,
        amplitude=None,
        t_ref=None,
    ):
        """Build a model with weak priors scaled to the data (see docs/priors.md).

        Parameters
        ----------
        data : RVData
            The star's velocities.
        n_planets : int, optional
            Number of planets.
        trend : bool, optional
            Include a linear trend.
        period_range : (float, float), optional
            Period prior range [d].
        eccentricity : EccentricityPrior, optional
            Defaults to uniform on [0, 0.95].
        amplitude : float, optional
            Prior scale of A_k, B_k [m/s]; default 2 x (largest instrument rv spread + median
            error).
        t_ref : float, optional
            Reference epoch [d]; default the midpoint of the observed time span.

        Returns
        -------
        ModelSpec
        """
        offsets, jitters, spreads = [], [], []
        for name in data.instruments:
            sel = data.instrument == name
            rv, err = data.rv[sel], data.rv_err[sel]
            spread = float(np.ptp(rv)) if rv.size > 1 else 0.0
            scale = spread + float(np.median(err))
            spreads.append(scale)
            offsets.append(GaussianPrior(float(np.mean(rv)), 10.0 * scale))
            jitters.append(JitterPrior(float(np.median(err)), 10.0 * scale))
        span = float(np.ptp(data.time))
        if t_ref is None:
            t_ref = float(0.5 * (data.time.min() + data.time.max()))
        trend_prior = GaussianPrior(0.0, 10.0 * max(spreads) / max(span, 1.0)) if trend else None
        return cls(
            n_planets=int(n_planets),
            instruments=tuple(data.instruments),
            trend=bool(trend),
            t_ref=float(t_ref),
            period=PeriodPrior(*map(float, period_range)),
            eccentricity=eccentricity or EccentricityPrior(),
            amplitude=float(amplitude) if amplitude is not None else 2.0 * max(spreads),
            offsets=tuple(offsets),
            jitters=tuple(jitters),
            trend_prior=trend_prior,
        )

    # ----- names -----------------------------------------------------------------------
    def parameter_names(self):
        """Names of a complete sample (the column order of ``Posterior.samples``)."""
        names = []
        for k in range(1, self.n_planets + 1):
            names += [
                f"period_{k}",
                f"semi_amplitude_{k}",
                f"eccentricity_{k}",
                f"omega_{k}",
                f"time_periastron_{k}",
            ]
        names += [f"offset_{i}" for i in self.instruments]
        names += [f"jitter_{i}" for i in self.instruments]
        if self.trend:
            names.append("trend")
        return tuple(names)

    def sampled_names(self):
        """Names of the nonlinear parameters the MCMC moves, in vector order."""
        names = []
        for k in range(1, self.n_planets + 1):
            names += [f"log_period_{k}", f"secos_phase_{k}", f"sesin_phase_{k}"]
        names += [f"log_jitter_{i}" for i in self.instruments]
        return tuple(names)

    def linear_names(self):
        """Names of the marginalised linear parameters, in design-matrix column order."""
        names = []
        for k in range(1, self.n_planets + 1):
            names += [f"amp_cos_{k}", f"amp_sin_{k}"]
        names += [f"offset_{i}" for i in self.instruments]
        if self.trend:
            names.append("trend")
        return tuple(names)

    @property
    def n_free(self):
        """Int: number of free parameters (sampled plus linear)."""
        return len(self.sampled_names()) + len(self.linear_names())

    # ----- serialisation ---------------------------------------------------------------
    def to_dict(self):
        """Return a JSON-ready dict that :meth:`from_dict` turns back into this model."""
        return asdict(self)

    @classmethod
    def from_dict(cls, d):
        """Rebuild a model written by :meth:`to_dict`."""
        return cls(
            n_planets=int(d["n_planets"]),
            instruments=tuple(d["instruments"]),
            trend=bool(d["trend"]),
            t_ref=float(d["t_ref"]),
            period=PeriodPrior(**d["period"]),
            eccentricity=EccentricityPrior(**d["eccentricity"]),
            amplitude=float(d["amplitude"]),
            offsets=tuple(GaussianPrior(**p) for p in d["offsets"]),
            jitters=tuple(JitterPrior(**p) for p in d["jitters"]),
            trend_prior=GaussianPrior(**d["trend_prior"]) if d.get("trend_prior") else None,
        )


def check_enough_points(data, model):
    """Refuse data that the model cannot be fitted to.

    Parameters
    ----------
    data : RVData
    model : ModelSpec

    Raises
    ------
    RVDataError
        If the data have fewer measurements than the model has free parameters, or fewer than
        two for an instrument (its offset and jitter need them).
    ModelError
        If the data name an instrument the model lacks.
    """
    missing = [name for name in data.instruments if name not in model.instruments]
    if missing:
        raise ModelError(
            f"{data.source} has instrument {missing[0]!r}, which the model does not list: "
            "build the model from these data or add the instrument."
        )
    if len(data) < model.n_free:
        raise RVDataError(
            f"{data.source} has {len(data)} measurements but the model has {model.n_free} free "
            "parameters: add velocities or fit fewer planets."
        )
    for name in model.instruments:
        count = int(np.count_nonzero(data.instrument == name))
        if count < 2:
            raise RVDataError(
                f"{data.source} has {count} measurement(s) from instrument {name!r}, fewer than "
                "the 2 its offset and jitter need: add data or drop that instrument."
            )
