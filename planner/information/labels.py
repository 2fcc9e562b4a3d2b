"""Discrete labels of posterior samples: period modes, or intervals of one parameter.

A label is a function of the parameters, so the information a velocity brings about it is at
most the information about the parameter itself (data processing; Cover and Thomas 2006):
:mod:`planner.information.partial` computes that information. Labels are in increasing order of the
labelled parameter, and equal values always share a label (MCMC chains repeat states).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from planner.information.entropy import InformationError

__all__ = [
    "MIN_MODE_SHARE",
    "MODE_VOID",
    "PARAMETERS",
    "Labelling",
    "default_label_count",
    "interval_labels",
    "parameter_values",
    "period_modes",
]

#: Gap in ln(period) between neighbouring sorted samples that separates two period modes.
MODE_VOID = 0.02
#: Least share of the samples a period mode keeps; smaller runs join their nearer neighbour.
MIN_MODE_SHARE = 0.01
#: Orbit parameters that can be labelled (per Keplerian signal unless per instrument).
PARAMETERS = ("period", "semi_amplitude", "eccentricity", "omega", "time_periastron",
              "offset", "jitter", "trend")


def default_label_count(n_samples):
    """Return the default number of labels for `n_samples` samples: round(sqrt(n / 2)), >= 1.

    Fewer labels lose information (a coarser function of the parameter), more labels leave
    fewer samples per label and a larger finite-sample error; this count did best on the
    linear-Gaussian cases measured in ``docs/information.md`` at 200 and 2,000 samples (10 and
    32 labels).
    """
    return max(1, int(round(math.sqrt(int(n_samples) / 2.0))))


@dataclass(frozen=True, eq=False)
class Labelling:
    """A discrete label of every posterior sample.

    Attributes
    ----------
    labels : ndarray of int, shape (n_samples,)
        Label of each sample, 0 .. n_labels - 1, in increasing order of the parameter.
    edges : ndarray, shape (n_labels, 2)
        Smallest and largest parameter value of each label's samples (parameter units).
    parameter : str
        The labelled parameter.
    """

    labels: np.ndarray
    edges: np.ndarray
    parameter: str

    @property
    def n_labels(self):
        """Number of labels."""
        return self.edges.shape[0]

    @property
    def shares(self):
        """Share of the samples under each label, shape (n_labels,)."""
        return np.bincount(self.labels, minlength=self.n_labels) / self.labels.size


def _labelling(values, labels, parameter):
    _, labels = np.unique(labels, return_inverse=True)
    n = int(labels.max()) + 1
    lo = np.full(n, np.inf)
    hi = np.full(n, -np.inf)
    np.minimum.at(lo, labels, values)
    np.maximum.at(hi, labels, values)
    return Labelling(labels.astype(np.int64), np.column_stack([lo, hi]), parameter)


def _values(values, what):
    x = np.asarray(values, dtype=float)
    if x.ndim != 1 or x.size == 0 or not np.all(np.isfinite(x)):
        raise InformationError(f"{what} must be a non-empty 1-D array of finite values.")
    return x


def period_modes(period, void=MODE_VOID, min_share=MIN_MODE_SHARE, max_modes=None):
    """Label the samples by period mode: runs of sorted ln(period) split at wide voids.

    Parameters
    ----------
    period : array_like, shape (n_samples,)
        Period of each sample [d], > 0.
    void : float, optional
        A void in ln(period) wider than this between neighbouring sorted samples ends a mode
        (0.02: periods 2 % apart).
    min_share : float, optional
        A run holding fewer than this share of the samples joins the neighbour across its
        narrower void, smallest run first (sparse tails of one broad mode stay in it).
    max_modes : int, optional
        Runs are also joined, smallest first, until at most this many remain; default
        :func:`default_label_count`. The finite-sample error of the information grows with
        the number of labels (``docs/information.md``), not with the smallness of one mode.

    Returns
    -------
    Labelling
        Modes numbered by increasing period; `edges` in days.
    """
    p = _values(period, "period")
    if np.any(p <= 0):
        raise InformationError("period must be positive [d]; check the posterior samples.")
    order = np.argsort(p, kind="stable")
    lp = np.log(p[order])
    voids = np.diff(lp)
    cuts = list(np.flatnonzero(voids > void) + 1)
    need = max(1, math.ceil(min_share * p.size))
    most = default_label_count(p.size) if max_modes is None else max(1, int(max_modes))
    while cuts:
        bounds = [0, *cuts, p.size]
        counts = np.diff(bounds)
        small = int(np.argmin(counts))
        if counts[small] >= need and counts.size <= most:
            break
        left = voids[bounds[small] - 1] if small > 0 else np.inf
        right = voids[bounds[small + 1] - 1] if small < len(counts) - 1 else np.inf
        del cuts[small - 1 if left <= right else small]
    sorted_labels = np.zeros(p.size, dtype=np.int64)
    sorted_labels[cuts] = 1
    labels = np.empty(p.size, dtype=np.int64)
    labels[order] = np.cumsum(sorted_labels)
    return _labelling(p, labels, "period")


def interval_labels(values, n_intervals=None, parameter="value"):
    """Label the samples by equal-count intervals of one parameter.

    Parameters
    ----------
    values : array_like, shape (n_samples,)
        The parameter of each sample (any unit).
    n_intervals : int, optional
        Number of intervals; default :func:`default_label_count` of the sample count.
    parameter : str, optional
        Name stored in the result.

    Returns
    -------
    Labelling
        Intervals in increasing order of the value. Equal values always share a label (the
        label is a function of the parameter), so counts may differ slightly where values tie.
    """
    x = _values(values, "values")
    k = default_label_count(x.size) if n_intervals is None else int(n_intervals)
    if k < 1:
        raise InformationError(f"n_intervals is {n_intervals}; pass 1 or more.")
    k = max(1, min(k, x.size))
    inner = np.sort(x)[(np.arange(1, k) * x.size) // k]
    return _labelling(x, np.searchsorted(inner, x, side="right"), parameter)


def parameter_values(predictor, name, planet=0):
    """One parameter of every sample of a :class:`planner.information.predict.Predictor`.

    Parameters
    ----------
    predictor : planner.information.predict.Predictor
    name : str
        One of :data:`PARAMETERS`.
    planet : int, optional
        Keplerian signal (for the orbital parameters), 0 first.

    Returns
    -------
    ndarray, shape (n_samples,)
        The values, in the predictor's units (d, m/s, rad, BJD_TDB, m/s/d).
    """
    if name not in PARAMETERS:
        raise InformationError(
            f"unknown parameter {name!r}; choose one of {', '.join(PARAMETERS)}.")
    value = np.asarray(getattr(predictor, name), dtype=float)
    if value.ndim == 1:
        return value
    if not 0 <= planet < value.shape[1]:
        raise InformationError(
            f"signal {planet} does not exist; this posterior has {value.shape[1]} signal(s).")
    return value[:, planet]
