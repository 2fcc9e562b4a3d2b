"""Expected information about part of the orbit parameters: a discrete label of the samples.

For a discrete function Q of the parameters (the period alias a sample lies in, or the index
of an interval of one parameter) the expected information of a velocity y is

    I(Q; y) = H(y) - sum_m w_m H(y | Q = m),

where H(y | Q = m) is the entropy of the predictive mixture of the samples labelled m and w_m
their share. For the sample posterior this is exact for one visit (the same deterministic
mixture-entropy core as :func:`planner.information.gain.one_visit_bits`); for a set of visits it is
H(Q) - E_d H(Q | d), averaged over simulated outcomes with exact class posteriors. For a
continuous parameter cut into intervals it is a lower bound on the information about the
parameter itself (data processing; Cover and Thomas 2006). A label with few samples makes the
sample value too high; by default the same computation for the labels dealt to the samples at
random (true value zero) is subtracted. See "Information about part of the parameters" in
``docs/information.md`` for the measured trade-off behind the defaults.

Layers: the functions on arrays are the core; :func:`run_label_bits` is the orchestration on
a prepared run that ``nightbits curves --about`` prints.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np

from planner.information.entropy import InformationError, mixture_entropy_bits
from planner.information.gain import (
    check_predictions,
    mean_log_shifted,
    noise_entropy_bits,
    outcome_log_likelihoods,
    simulate_outcomes,
)
from planner.information.labels import interval_labels, parameter_values, period_modes

__all__ = [
    "ABOUT",
    "LabelEstimate",
    "label_bits",
    "label_joint_bits",
    "run_label_bits",
]

#: What `run_label_bits` can be asked about: period intervals, or period modes (aliases).
ABOUT = ("period", "alias")


@dataclass(frozen=True)
class LabelEstimate:
    """Monte Carlo estimate of the information a set of visits brings about a label.

    Attributes
    ----------
    bits : float
        Estimated I(Q; d_S) [bits].
    stderr : float
        One-sigma Monte Carlo standard error of `bits` [bits].
    prior_bits : float
        H(Q), the most any set of visits can bring about the label [bits].
    n_outcomes : int
        Number of simulated outcomes used.
    """

    bits: float
    stderr: float
    prior_bits: float
    n_outcomes: int


def _label_index(labels, n_samples):
    lab = np.asarray(getattr(labels, "labels", labels))
    if lab.shape != (n_samples,) or not np.issubdtype(lab.dtype, np.integer) or lab.min() < 0:
        raise InformationError(
            f"labels must be {n_samples} non-negative integers, one per sample (a Labelling "
            "from period_modes or interval_labels)."
        )
    return np.unique(lab, return_inverse=True)[1]


def _shuffled(lab, seed):
    """Return the same labels dealt to the samples in a seeded random order (same shares)."""
    return lab[np.random.default_rng(seed).permutation(lab.size)]


def _noise_rows(var, extra):
    """Mean noise entropy [bits] of components `var` plus each row of `extra`, (n_x, n_cols)."""
    if extra is None:
        return noise_entropy_bits(np.sqrt(var), (var.shape[0], var.shape[1]))[None, :]
    out = np.full(extra.shape, np.nan)
    wanted = np.isfinite(extra)
    out[wanted] = (mean_log_shifted(var[:, 0], extra[wanted]) + math.log(2 * math.pi * math.e)
                   ) / (2 * math.log(2.0))
    return out


def _conditional_entropy_bits(v, var, extra, lab):
    """sum_m w_m H(y | Q = m), (n_x, n_cols); each term held at or above its noise entropy."""
    h_cond = 0.0
    for m in range(int(lab.max()) + 1):
        mine = lab == m
        var_m = var[mine] if var.shape[0] > 1 else var
        h_m = mixture_entropy_bits(v[mine], var_m, extra)
        h_cond = h_cond + mine.mean() * np.fmax(h_m, _noise_rows(var_m, extra))
    return h_cond


def _label_table(v, var, extra, lab, baseline, seed):
    """Bits about the labels per row of `extra` and column, (n_x, n_cols); NaN where unwanted.

    `var` is the component variance, (1, n_cols) or (n_samples, n_cols) when `extra` is None,
    else (n_samples, 1) (each sample's jitter squared), and `extra` (n_x, n_cols) the
    measurement variance of each row (NaN where not wanted).
    """
    h_all = mixture_entropy_bits(v, var, extra)
    bits = np.maximum(h_all - _conditional_entropy_bits(v, var, extra, lab), 0.0)
    if baseline and lab.max() > 0:
        excess = h_all - _conditional_entropy_bits(v, var, extra, _shuffled(lab, seed))
        bits = np.maximum(bits - np.maximum(excess, 0.0), 0.0)
    return bits


def label_bits(predicted, sigma, labels, baseline=True, seed=0):
    """Return the expected information about a discrete label of one velocity at each time.

    Parameters
    ----------
    predicted : ndarray, shape (n_samples, n_times)
        Predicted velocity of every sample at every time [m/s].
    sigma : array_like, broadcastable to (n_samples, n_times)
        Total noise standard deviation [m/s]: measurement noise and jitter in quadrature.
    labels : Labelling or array_like of int, shape (n_samples,)
        The label of each sample.
    baseline : bool, optional
        Subtract the information the same computation finds about the labels dealt to the
        samples at random (same shares), whose true value is zero: an estimate of the
        finite-sample excess. False gives the value of the sample posterior itself.
    seed : int, optional
        Seed of the random deal (the result is deterministic for a given seed).

    Returns
    -------
    bits : ndarray, shape (n_times,)
        I(Q; y) = H(y) - sum_m w_m H(y | Q = m) [bits], less the baseline when asked. Never
        negative, and never above ``one_visit_bits(predicted, sigma)``: each H(y | Q = m) is
        held at or above its mean noise entropy, which a mixture's entropy can only undershoot
        by rounding (1e-4 bit).

    Notes
    -----
    Without the baseline the value is exact for the sample posterior up to the entropy core's
    accuracy (Lindley 1956 expected information of the label; chain rule and grouping
    property of entropy, Cover and Thomas 2006). A label's few samples make each H(y | Q = m)
    low (a lumpy mixture), so the sample value overstates the information about the label of
    the posterior the samples come from; the random deal measures that excess for groups of
    the same sizes. Its groups spread as widely as the whole predictive, wider than a label's,
    so it errs towards subtracting too much: the result stays a lower bound (measured in
    ``docs/information.md``).
    """
    v, s = check_predictions(predicted, sigma, "predicted")
    lab = _label_index(labels, v.shape[0])
    if v.shape[1] == 0:
        return np.zeros(0)
    var = np.broadcast_to(s * s, np.broadcast_shapes(s.shape, (1, v.shape[1])))
    return _label_table(v, var, None, lab, baseline, seed)[0]


def _label_gains(log_l, lab, shares):
    """H(Q) - H(Q | d) per outcome, from the log-likelihoods (n_outcomes, n_samples) [bits]."""
    like = np.exp(log_l)
    onehot = np.zeros((lab.size, shares.size))
    onehot[np.arange(lab.size), lab] = 1.0
    post = like @ onehot
    post /= post.sum(axis=1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        h_post = -np.sum(np.where(post > 0, post * np.log2(post), 0.0), axis=1)
    return float(-np.sum(shares * np.log2(shares))) - h_post


def label_joint_bits(predicted, sigma, labels, rng, n_outcomes=512, baseline=True, seed=0):
    """Return the expected information about a discrete label of a set of visits of one star.

    Parameters
    ----------
    predicted : ndarray, shape (n_samples, n_visits)
        Velocity [m/s] each sample predicts at each visit of the set.
    sigma : array_like, broadcastable to (n_samples, n_visits)
        Noise of each visit [m/s], measurement and jitter in quadrature.
    labels : Labelling or array_like of int, shape (n_samples,)
        The label of each sample.
    rng : numpy.random.Generator
        Draws the simulated outcomes.
    n_outcomes : int, optional
        Simulated outcomes; the standard error falls as 1 / sqrt(n_outcomes).
    baseline, seed : bool, int, optional
        As in :func:`label_bits`: subtract the information about a seeded random deal of the
        labels, computed on the same outcomes (its error is in `stderr`).

    Returns
    -------
    LabelEstimate

    Notes
    -----
    I(Q; d) = H(Q) - E_d H(Q | d). Outcomes are drawn from the sample-posterior predictive
    (as :func:`planner.information.gain.joint_bits` draws them) and for each the class posterior
    p(Q | d) is exact (sums of the likelihoods of every sample), so the mean is unbiased for
    the sample posterior: no nested Monte Carlo. Each outcome's term H(Q) - H(Q | d) lies in
    [H(Q) - log2 n_labels, H(Q)], so the error bar ``std / sqrt(n_outcomes)`` is reliable.
    """
    v, s = check_predictions(predicted, sigma, "predicted")
    lab = _label_index(labels, v.shape[0])
    shares = np.bincount(lab) / lab.size
    prior = float(-np.sum(shares * np.log2(shares)))
    if v.shape[1] == 0 or shares.size == 1:
        return LabelEstimate(0.0, 0.0, prior, 0)
    if int(n_outcomes) < 2:
        raise InformationError("n_outcomes must be at least 2 to give an error bar.")
    y = simulate_outcomes(v, s, rng, int(n_outcomes))
    log_l = outcome_log_likelihoods(y, v, s)
    log_l -= log_l.max(axis=1, keepdims=True)
    gain = _label_gains(log_l, lab, shares)
    if baseline:
        gain = gain - _label_gains(log_l, _shuffled(lab, seed), shares)
    return LabelEstimate(float(gain.mean()), float(gain.std(ddof=1) / math.sqrt(gain.size)),
                         prior, int(gain.size))


def _target_labelling(predictor, about):
    period = parameter_values(predictor, "period")
    if about == "alias":
        return period_modes(period)
    return interval_labels(period, parameter="period")


def _target_table(work):
    """Bits about one target's labels at its observable starts, per exposure option."""
    predictor, about, starts, mids, sigma, bjd = work
    columns = np.unique(np.concatenate(mids))
    where = [np.searchsorted(columns, mid) for mid in mids]
    extra = np.full((len(starts), columns.size), np.nan)
    for o, cols in enumerate(starts):
        extra[o, where[o]] = sigma[o, cols] ** 2
    table = _label_table(predictor.velocities(bjd[columns]), predictor.jitter[:, None] ** 2,
                         extra, _target_labelling(predictor, about).labels, True, 0)
    return [table[o, where[o]] for o in range(len(starts))]


def run_label_bits(run, about="period", targets=None, jobs=1):
    """One-visit bits about the period of the first signal, on a prepared run's sky grid.

    Parameters
    ----------
    run : planner.workflow.prepared.PreparedRun
    about : str, optional
        ``"period"``: equal-count intervals of the period (a lower bound on the information
        about the period); ``"alias"``: the period modes of :func:`period_modes`.
    targets : sequence of str, optional
        Only these targets (others get zeros); default all.
    jobs : int or None, optional
        Worker processes over targets (None: every core; 1: this process).

    Returns
    -------
    bits : ndarray, shape (n_options, n_targets, n_sky)
        Like ``run.bits``: zero where a start is not observable, and for a star whose
        posterior has no planet (there is no period to learn about). Velocities are predicted at
        the sky-grid time nearest mid-exposure within the night (as the full curves are), all
        exposure options of a target in one pass; no executed visits are conditioned on.
    """
    from concurrent.futures import ProcessPoolExecutor

    from planner.sky.tracks import mid_exposure_columns

    if about not in ABOUT:
        raise InformationError(
            f"unknown parameter group {about!r}; choose one of {', '.join(ABOUT)}.")
    wanted = set(targets or [t.id for t in run.scenario.targets])
    chosen = [s for s, t in enumerate(run.scenario.targets)  # a star without planet: no period
              if t.id in wanted and run.observable[:, s].any()
              and run.predictors[s].period.shape[1] > 0]
    work = []
    for s in chosen:
        starts = [np.flatnonzero(run.observable[o, s]) for o in range(len(run.exposures))]
        mids = [mid_exposure_columns(run.sky, e)[cols]
                for cols, e in zip(starts, run.exposures, strict=True)]
        work.append((run.predictors[s], about, starts, mids, run.sigma[:, s],
                     run.sky.bjd_tdb[s]))
    workers = max(1, min(jobs or os.cpu_count() or 1, len(work)))
    if workers > 1:
        with ProcessPoolExecutor(workers) as pool:
            tables = list(pool.map(_target_table, work))
    else:
        tables = [_target_table(item) for item in work]
    bits = np.zeros(run.observable.shape)
    for s, item, table in zip(chosen, work, tables, strict=True):
        for o, cols in enumerate(item[2]):
            bits[o, s, cols] = table[o]
    return bits
