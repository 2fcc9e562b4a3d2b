"""Posterior sampling of one star's orbit: multimodal start, emcee, complete samples.

The ensemble sampler (Foreman-Mackey et al. 2013) moves the nonlinear parameters with a mix of
differential-evolution moves (ter Braak 2006; ter Braak & Vrugt 2008) and the affine-invariant
stretch move (Goodman & Weare 2010). After convergence the chain is thinned to about
``n_samples`` effectively independent samples and the linear parameters are drawn from their
conditional Gaussian, so every output sample holds every parameter.
"""

import logging
import time

import numpy as np

from inference.diagnostics import Diagnostics
from inference.posterior import Posterior, predict_matrix
from inference.settings import SamplerSettings

from .errors import ModelError
from .likelihood import linear_conditional, log_marginal, log_prior, prepare
from .model import check_enough_points
from .start import multimodal_start

__all__ = ["SAMPLER_VERSION", "fit", "integrated_time"]

logger = logging.getLogger(__name__)

#: Version of the sampling algorithm (start, moves, convergence rule, thinning, completion).
#: It is part of every cache key (:func:`inference.cache.cache_key`): raise it whenever a change
#: to this module or the ones it calls gives different samples for the same data, model,
#: settings and seed, so that older fits are refitted instead of silently reused.
SAMPLER_VERSION = "1"


def integrated_time(chain, c=5.0):
    """Integrated autocorrelation time of each parameter of an ensemble chain.

    Parameters
    ----------
    chain : ndarray, shape (n_steps, n_walkers, n_dim)
        The kept chain.
    c : float, optional
        Window constant of the automatic windowing (Sokal 1989).

    Returns
    -------
    tau : ndarray, shape (n_dim,)
        tau [steps]; ``inf`` for a parameter that no walker moved.

    Notes
    -----
    The autocovariance of each walker (about its own mean) is computed by FFT and averaged
    over walkers before normalising, then summed up to the smallest window M >= c tau(M)
    (Sokal 1989; the walker-averaged form of Goodman & Weare 2010). Averaging covariances
    rather than normalised correlations keeps a walker that never moved from dividing by zero.
    """
    n = chain.shape[0]
    x = chain - chain.mean(axis=0)
    size = 1 << int(np.ceil(np.log2(max(2 * n, 2))))
    f = np.fft.rfft(x, n=size, axis=0)
    acov = np.fft.irfft(f * np.conjugate(f), n=size, axis=0)[:n].real.mean(axis=1)
    tau = np.full(chain.shape[2], np.inf)
    for d in range(chain.shape[2]):
        if acov[0, d] <= 0.0:
            continue
        taus = 2.0 * np.cumsum(acov[:, d] / acov[0, d]) - 1.0
        window = np.flatnonzero(np.arange(n) >= c * taus)
        tau[d] = taus[window[0]] if window.size else taus[-1]
    return tau


def _log_probability(prep):
    def fn(theta):
        lp = log_prior(theta, prep)
        ok = np.isfinite(lp)
        if np.any(ok):
            lp[ok] += log_marginal(theta[ok], prep)
        return lp

    return fn


def _moves(settings):
    from emcee import moves

    pairs = [
        (moves.DEMove(), settings.de_weight),
        (moves.DESnookerMove(), settings.snooker_weight),
        (moves.DEMove(gamma0=1.0), settings.jump_weight),
        (moves.StretchMove(), settings.stretch_weight),
    ]
    return [(m, w) for m, w in pairs if w > 0]


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


def _check_model_dimension(model, settings):
    n_dim = len(model.sampled_names())
    if settings.n_walkers < 2 * n_dim:
        raise ModelError(
            f"n_walkers = {settings.n_walkers} is fewer than twice the {n_dim} sampled "
            f"parameters: use at least {2 * n_dim + (2 * n_dim) % 2} walkers."
        )
    return n_dim


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
    import emcee

    started = time.perf_counter()
    settings = settings or SamplerSettings()
    check_enough_points(data, model)
    n_dim = _check_model_dimension(model, settings)
    if isinstance(rng, int | np.integer):
        seed = int(rng)
    else:
        seed = int((rng or np.random.default_rng()).integers(0, 2**62))
    gen = np.random.default_rng(seed)
    prep = prepare(data, model)
    start = multimodal_start(prep, settings, gen)
    sampler = emcee.EnsembleSampler(
        settings.n_walkers, n_dim, _log_probability(prep), moves=_moves(settings), vectorize=True
    )
    sampler.random_state = np.random.RandomState(int(gen.integers(0, 2**32))).get_state()
    state = start.positions
    converged, tau, burn, message = False, np.full(n_dim, np.inf), 0, ""
    while sampler.iteration < settings.max_steps:
        # Checks every check_every steps at first, then every 20% of the chain so far, so the
        # cost of the autocorrelation estimates stays a small share of a long run.
        stride = max(settings.check_every, int(0.2 * sampler.iteration))
        stride = min(stride, settings.max_steps - sampler.iteration)
        state = sampler.run_mcmc(state, stride, progress=False)
        steps = sampler.iteration
        chain = sampler.get_chain()
        tau = integrated_time(chain[steps // 3 :])
        tau_max = float(np.max(tau))
        burn = int(min(settings.burn_factor * tau_max, steps // 2))
        kept = steps - burn
        ess = settings.n_walkers * kept / tau_max
        if kept >= settings.tau_factor * tau_max and ess >= settings.n_samples:
            converged = True
            break
    tau_max = float(np.max(tau))
    kept = sampler.iteration - burn
    ess = settings.n_walkers * kept / tau_max
    if not converged:
        message = (
            f"not converged after {sampler.iteration} steps: kept chain {kept} steps, "
            f"max autocorrelation time {tau_max:.1f} steps, effective samples {ess:.0f} "
            f"(need {settings.tau_factor:g} tau and {settings.n_samples})"
        )
        logger.warning("target %r: %s; raise max_steps or check the model.", target, message)
    thin = max(1, int(np.floor(tau_max))) if np.isfinite(tau_max) else 1
    flat = sampler.get_chain(discard=burn, thin=thin, flat=True)
    if flat.shape[0] > settings.n_samples:
        flat = flat[np.sort(gen.choice(flat.shape[0], settings.n_samples, replace=False))]
    samples = _complete_samples(flat, prep, model, gen)
    diagnostics = Diagnostics(
        converged=converged,
        n_steps=int(sampler.iteration),
        burn_in=int(burn),
        thin=int(thin),
        tau=tuple(float(x) for x in tau),
        ess=float(ess),
        acceptance=float(np.mean(sampler.acceptance_fraction)),
        n_evaluations=int(start.n_evaluations + sampler.iteration * settings.n_walkers),
        start_modes=start.mode_periods,
        start_weights=start.mode_weights,
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
