"""How many planets: posterior model probabilities from evidences, and the no-planet evidence.

The probability of the model with n planets given the data is
``p(n | y) = pi_n Z_n / sum_m pi_m Z_m`` (Bayes' theorem over models; Kass & Raftery 1995,
JASA 90, 773), with ``pi`` the prior over models and ``Z_n`` the evidence of each fit
(:attr:`inference.diagnostics.Diagnostics.log_evidence`). The Monte Carlo error of each
``ln Z_n`` carries into the probabilities by the delta method.

A model with no planet has only the offset (and trend) as linear parameters, marginalised in
closed form, and one jitter per instrument: with one instrument its evidence is a
one-dimensional integral over ln jitter, done here by quadrature without Monte Carlo error.
"""

from dataclasses import dataclass

import numpy as np

from .errors import ModelError
from .likelihood import log_joint, prepare

__all__ = [
    "ModelProbabilities",
    "compare_fits",
    "default_model_prior",
    "model_probabilities",
    "no_planet_log_evidence",
]

#: Quadrature nodes over ln jitter: the sampled span is about 16 e-folds (from 1e-4 of the
#: knee to the maximum), so the step is about 0.004 in ln s, far below the width of the
#: likelihood in ln s (about 1 / sqrt(n_obs / 2) for the noise-dominated case).
_NODES = 4001


@dataclass(frozen=True)
class ModelProbabilities:
    """Posterior probabilities of 0..N planets for one star.

    Attributes
    ----------
    counts : tuple of int
        Numbers of planets compared, increasing.
    prior : tuple of float
        Prior probability of each count (sums to one).
    log_evidence : tuple of float
        ln Z of each count [ln units].
    log_evidence_se : tuple of float
        Standard error of each ln Z (0 for an evidence by quadrature).
    probabilities : tuple of float
        Posterior probability of each count (sums to one).
    probabilities_se : tuple of float
        Standard error of each probability from the ln Z errors (delta method).
    """

    counts: tuple
    prior: tuple
    log_evidence: tuple
    log_evidence_se: tuple
    probabilities: tuple
    probabilities_se: tuple

    def probability(self, count):
        """Float: posterior probability of `count` planets."""
        return self.probabilities[self.counts.index(count)]

    def to_dict(self):
        """Return a JSON-ready dict keyed by the count as text ("0", "1", ...)."""
        def keyed(values):
            return {str(n): float(v) for n, v in zip(self.counts, values, strict=True)}

        return {
            "model_prior": keyed(self.prior),
            "model_probabilities": keyed(self.probabilities),
            "model_probabilities_stderr": keyed(self.probabilities_se),
            "log_evidence": keyed(self.log_evidence),
            "log_evidence_stderr": keyed(self.log_evidence_se),
        }


def default_model_prior(max_planets):
    """Return the default prior over 0..max_planets planets: equal for every count.

    The reason is in docs/priors.md.

    Parameters
    ----------
    max_planets : int
        Largest number of planets compared (at least 1).

    Returns
    -------
    tuple of float
        ``max_planets + 1`` equal probabilities.
    """
    if max_planets < 1:
        raise ModelError(f"max_planets {max_planets!r} must be at least 1 to compare models.")
    return tuple([1.0 / (max_planets + 1)] * (max_planets + 1))


def model_probabilities(counts, log_evidence, log_evidence_se, prior):
    """Turn evidences into posterior model probabilities.

    Parameters
    ----------
    counts : sequence of int
        Numbers of planets, one per model.
    log_evidence, log_evidence_se : sequence of float
        ln Z of each model and its standard error.
    prior : sequence of float
        Prior weight of each model (non-negative, normalised here).

    Returns
    -------
    ModelProbabilities

    Notes
    -----
    ``p_m = pi_m Z_m / sum_j pi_j Z_j``; with independent errors in ``ln Z_j``,
    ``d p_m / d ln Z_j = p_m (delta_mj - p_j)``, so
    ``var p_m = sum_j p_m^2 (delta_mj - p_j)^2 se_j^2`` (first-order delta method).
    """
    log_z = np.asarray(log_evidence, dtype=float)
    se = np.asarray(log_evidence_se, dtype=float)
    pi = np.asarray(prior, dtype=float)
    if not (log_z.shape == se.shape == pi.shape == (len(counts),)):
        raise ModelError("give one evidence, one standard error and one prior weight per model.")
    if np.any(pi < 0.0) or not np.isfinite(pi).all() or pi.sum() <= 0.0:
        raise ModelError(f"model prior {list(pi)} must be non-negative weights that do not all "
                         "vanish: fix the model prior.")
    if not np.isfinite(log_z).any():
        raise ModelError("no model has a finite evidence: check the velocities.")
    pi = pi / pi.sum()
    with np.errstate(divide="ignore"):
        log_post = np.where(pi > 0.0, np.log(pi), -np.inf) + np.where(np.isfinite(log_z), log_z,
                                                                     -np.inf)
    p = np.exp(log_post - np.max(log_post))
    p /= p.sum()
    jac = p[:, None] * (np.eye(p.size) - p[None, :])
    p_se = np.sqrt(np.sum((jac * se[None, :]) ** 2, axis=1))
    return ModelProbabilities(
        counts=tuple(int(n) for n in counts),
        prior=tuple(float(v) for v in pi),
        log_evidence=tuple(float(v) for v in log_z),
        log_evidence_se=tuple(float(v) for v in se),
        probabilities=tuple(float(v) for v in p),
        probabilities_se=tuple(float(v) for v in p_se),
    )


def no_planet_log_evidence(data, model):
    """Return ln Z of a model with no planet and one instrument, by quadrature over ln jitter.

    Parameters
    ----------
    data : RVData
        The star's velocities (one instrument).
    model : ModelSpec
        A model with ``n_planets == 0`` and one instrument.

    Returns
    -------
    float
        ln of the integral of p(y | s) p(s) ds over the jitter prior's sampled range, the
        offset (and trend) marginalised in closed form.

    Raises
    ------
    ModelError
        If the model has planets or more than one instrument.
    """
    if model.n_planets != 0 or len(model.instruments) != 1:
        raise ModelError("the no-planet evidence by quadrature needs a model with no planet "
                         "and one instrument.")
    prep = prepare(data, model)
    lo, hi = prep.jit_log_range[0]
    grid = np.linspace(lo, hi, _NODES)
    log_f = log_joint(grid[:, None], prep)  # density in ln s, prior included
    top = np.max(log_f)
    weights = np.full(_NODES, grid[1] - grid[0])
    weights[[0, -1]] *= 0.5  # trapezoid rule
    return float(top + np.log(np.sum(weights * np.exp(log_f - top))))


def compare_fits(posteriors, prior, data=None):
    """Posterior model probabilities of one star's fits with different numbers of planets.

    Parameters
    ----------
    posteriors : dict of int to Posterior
        The star's fit for each number of planets (same data, same priors otherwise).
    prior : sequence of float
        Prior weight of each count, in increasing order of the counts.
    data : RVData, optional
        The velocities: when given and the no-planet model has one instrument, its evidence
        is computed by quadrature (:func:`no_planet_log_evidence`, no Monte Carlo error)
        instead of taken from its sampling run.

    Returns
    -------
    ModelProbabilities
    """
    counts = sorted(posteriors)
    log_z, se = [], []
    for n in counts:
        post = posteriors[n]
        if n == 0 and data is not None and len(post.model.instruments) == 1:
            log_z.append(no_planet_log_evidence(data, post.model))
            se.append(0.0)
        else:
            log_z.append(post.diagnostics.log_evidence)
            se.append(post.diagnostics.log_evidence_se)
    return model_probabilities(counts, log_z, se, prior)
