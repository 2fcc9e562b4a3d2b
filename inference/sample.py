"""Posterior sampling of one star's orbit: period scan, adaptive importance sampling, moves.

1. A dense frequency scan of the marginal likelihood finds the candidate period modes
   (:mod:`inference.start`).
2. Population Monte Carlo adapts a defensive Student-t mixture to the posterior and draws a
   weighted sample, with the evidence, the effective sample size and the Pareto k-hat
   (:mod:`inference.importance`). Mode shares come from these independent weighted draws.
3. The weighted draws are resampled to ``n_samples`` equal-weight samples (systematic
   resampling) and moved by Metropolis-Hastings kernels that leave the posterior invariant
   (resample-move, Gilks & Berzuini 2001, JRSS B 63, 127): an independence sampler with the
   mixture as proposal, which can jump between modes, and an ensemble step of emcee
   (Foreman-Mackey et al. 2013; differential-evolution moves, ter Braak 2006) inside modes.
4. The linear parameters are drawn from their conditional Gaussian, so every output sample
   holds every parameter.
"""

import logging
import time

import numpy as np

from inference.diagnostics import Diagnostics
from inference.posterior import Posterior, predict_matrix
from inference.settings import SamplerSettings

from .errors import ModelError
from .importance import population_monte_carlo
from .likelihood import linear_conditional, log_joint, prepare
from .mixture import mixture_draw, mixture_log_density
from .model import check_enough_points
from .modes import period_modes
from .psis import K_HAT_LIMIT
from .start import find_modes

__all__ = ["SAMPLER_VERSION", "fit"]

logger = logging.getLogger(__name__)

#: Version of the sampling algorithm (scan, importance mixture, moves, completion).
#: It is part of every cache key (:func:`inference.cache.cache_key`): raise it whenever a change
#: to this module or the ones it calls gives different samples for the same data, model,
#: settings and seed, so that older fits are refitted instead of silently reused.
#: 2: population Monte Carlo over a defensive Student-t mixture, then resample-move.
SAMPLER_VERSION = "2.1"


def _systematic(weights, n, rng):
    """Return n systematic-resampling picks (Kitagawa 1996) from normalised weights."""
    edges = np.cumsum(weights)
    edges[-1] = 1.0
    return np.searchsorted(edges, (rng.uniform() + np.arange(n)) / n)


def _resample_move(imp, prep, settings, rng):
    """Equal-weight samples from the weighted draws: resample, then posterior-invariant moves.

    Returns the samples, the mean acceptance of the moves and the evaluations spent.
    """
    import emcee

    n = settings.n_samples
    mix = imp.mixture
    theta = imp.theta[_systematic(imp.normalised_weights(), n, rng)]
    log_t = log_joint(theta, prep)
    log_w = log_t - mixture_log_density(mix, prep, theta)[0]
    d = theta.shape[1]
    ensemble = None
    if n >= 2 * d:
        moves = [(emcee.moves.DEMove(), 0.7), (emcee.moves.DEMove(gamma0=1.0), 0.1),
                 (emcee.moves.StretchMove(), 0.2)]
        ensemble = emcee.EnsembleSampler(n, d, lambda x: log_joint(x, prep), moves=moves,
                                         vectorize=True)
        ensemble.random_state = np.random.RandomState(int(rng.integers(0, 2**32))).get_state()
    accepted, tried, n_eval = 0.0, 0, n
    for _ in range(settings.move_steps):
        # Independence Metropolis-Hastings: accept a mixture draw with min(1, w' / w).
        prop = mixture_draw(mix, prep, rng, n)[0]
        prop_t = log_joint(prop, prep)
        prop_w = prop_t - mixture_log_density(mix, prep, prop)[0]
        take = np.log(rng.uniform(size=n)) < np.where(np.isfinite(prop_t), prop_w - log_w, -np.inf)
        theta[take], log_t[take], log_w[take] = prop[take], prop_t[take], prop_w[take]
        accepted += take.mean()
        tried += 1
        n_eval += n
        if ensemble is not None:
            state = ensemble.run_mcmc(emcee.State(theta, log_prob=log_t), 1, progress=False,
                                      skip_initial_state_check=True)
            moved = np.any(state.coords != theta, axis=1)
            theta, log_t = np.array(state.coords), np.array(state.log_prob)
            log_w = log_t - mixture_log_density(mix, prep, theta)[0]
            accepted += moved.mean()
            tried += 1
            n_eval += n
    return theta, (accepted / tried if tried else 0.0), n_eval


def _complete_samples(theta, prep, model, rng):
    """Draw the linear parameters for each sampled vector and assemble complete samples."""
    lin = linear_conditional(theta, prep).draw(rng)
    npl = model.n_planets
    cols = []
    for k in range(npl):
        period = np.exp(theta[:, 3 * k])
        x, y = theta[:, 3 * k + 1], theta[:, 3 * k + 2]
        ecc = x * x + y * y
        m0 = np.arctan2(y, x)
        a, b = lin[:, 2 * k], lin[:, 2 * k + 1]
        t_p = model.t_ref - m0 * period / (2.0 * np.pi)
        cols += [period, np.hypot(a, b), ecc, np.arctan2(b, a), t_p]
    n_inst = len(model.instruments)
    cols += [lin[:, 2 * npl + i] for i in range(n_inst)]
    cols += [np.exp(theta[:, 3 * npl + i]) for i in range(n_inst)]
    if model.trend:
        cols.append(lin[:, 2 * npl + n_inst])
    return np.column_stack(cols)


def _full_log_likelihood(samples, data, model):
    """Gaussian log-likelihood of the data for each complete sample."""
    pred = predict_matrix(samples, model, data.time, data.instrument)
    jit = samples[:, [model.parameter_names().index(f"jitter_{i}") for i in model.instruments]]
    lookup = {name: k for k, name in enumerate(model.instruments)}
    idx = np.array([lookup[n] for n in data.instrument])
    var = data.rv_err**2 + jit[:, idx] ** 2
    r = data.rv - pred
    return -0.5 * np.sum(r * r / var + np.log(2.0 * np.pi * var), axis=1)


def fit(data, model, settings=None, rng=None, target=""):
    """Sample the orbit posterior of one star.

    Parameters
    ----------
    data : RVData
        The star's velocities.
    model : ModelSpec
        The model (built for these data, e.g. ``ModelSpec.for_data(data)``).
    settings : SamplerSettings, optional
        Sampler settings (defaults when omitted).
    rng : numpy.random.Generator or int, optional
        Randomness; an int is used as the seed itself. The seed actually used is recorded on
        the result, and ``fit(..., rng=posterior.seed)`` reproduces it exactly.
    target : str, optional
        Name of the star (kept on the result).

    Returns
    -------
    Posterior
        Equal-weight complete samples, their log-likelihoods and the diagnostics.

    Raises
    ------
    RVDataError, ModelError
        If the data cannot be fitted with this model or the settings are unusable.
    """
    started = time.perf_counter()
    settings = settings or SamplerSettings()
    check_enough_points(data, model)
    if isinstance(rng, int | np.integer):
        seed = int(rng)
    else:
        seed = int((rng or np.random.default_rng()).integers(0, 2**62))
    gen = np.random.default_rng(seed)
    prep = prepare(data, model)
    span = max(float(np.ptp(data.time)), 1.0)
    start = find_modes(prep, settings)
    imp = population_monte_carlo(prep, settings, gen, start.seeds, span, start.frequencies)
    if not np.isfinite(imp.log_z):
        raise ModelError(
            f"target {target!r}: no importance draw has a finite posterior density; check the "
            "velocities and the period range."
        )
    modes = period_modes(imp.theta, imp.normalised_weights(), prep, span)
    flat, acceptance, n_move = _resample_move(imp, prep, settings, gen)
    message = ""
    if imp.k_hat > K_HAT_LIMIT or imp.ess < settings.min_ess:
        message = (
            f"the importance weights fell short (Pareto k-hat {imp.k_hat:.2f}, limit "
            f"{K_HAT_LIMIT}; effective samples {imp.ess:.0f} of {settings.min_ess} wanted "
            f"from {imp.theta.shape[0]} draws)"
        )
    elif imp.log_z_se > settings.max_log_z_se:
        message = (
            f"the evidence is imprecise (ln Z standard error {imp.log_z_se:.3f}, wanted "
            f"{settings.max_log_z_se:g}, from {imp.theta.shape[0]} draws)"
        )
    if message:
        logger.warning(
            "target %r: %s; raise max_draws (now %d; the scenario key sampler.max_draws) or "
            "check the model.", target, message, settings.max_draws,
        )
    samples = _complete_samples(flat, prep, model, gen)
    diagnostics = Diagnostics(
        ok=not message,
        ess=float(imp.ess),
        n_draws=int(imp.theta.shape[0]),
        k_hat=float(imp.k_hat),
        log_evidence=float(imp.log_z),
        log_evidence_se=float(imp.log_z_se),
        modes=tuple(m.to_dict() for m in modes),
        rounds=int(imp.rounds),
        n_components=int(imp.mixture.n_components),
        move_acceptance=float(acceptance),
        unique_fraction=float(np.unique(flat, axis=0).shape[0] / flat.shape[0]),
        n_evaluations=int(start.n_evaluations + imp.n_evaluations + n_move),
        start_modes=start.mode_periods,
        seconds=float(time.perf_counter() - started),
        message=message,
    )
    return Posterior(
        target=str(target),
        model=model,
        names=model.parameter_names(),
        samples=samples,
        log_likelihood=_full_log_likelihood(samples, data, model),
        data_digest=data.digest,
        seed=seed,
        diagnostics=diagnostics,
        settings=settings,
    )
