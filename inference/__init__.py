"""Orbit posteriors from past radial velocities."""

from .batch import FitFailure, FitJob, fit_many
from .cache import FitCache
from .data import RVData, read_rv_csv
from .diagnostics import Diagnostics
from .errors import InferenceError, ModelError, RVDataError
from .kepler import eccentric_anomaly
from .keplerian import radial_velocity, semi_amplitude
from .model import ModelSpec
from .posterior import Posterior
from .sample import fit
from .settings import SamplerSettings

__all__ = [
    "Diagnostics",
    "FitCache",
    "FitFailure",
    "FitJob",
    "InferenceError",
    "ModelError",
    "ModelSpec",
    "Posterior",
    "RVData",
    "RVDataError",
    "SamplerSettings",
    "eccentric_anomaly",
    "fit",
    "fit_many",
    "radial_velocity",
    "read_rv_csv",
    "semi_amplitude",
]
