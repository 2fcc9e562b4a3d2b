"""Multimodal start for the sampler: a period grid, then an importance step per mode.

1. For each planet in turn, a dense frequency grid (uniform in 1/P, spacing 1/(oversample x
   span)) is scored with the circular (e = 0) marginal likelihood, the other planets held at
   their best grid period so far. Local maxima within `mode_window` (ln units) of the best are
   candidate modes.
2. Around each candidate, adaptive importance sampling (a defensive mixture of the prior
   restricted to the peak's frequency cell and a Gaussian fitted to the previous round) gives
   weighted draws of every sampled parameter and an estimate of the mode's evidence.
3. Walkers are shared among the modes in proportion to their evidence and seeded from each
   mode's weighted draws.
"""

from dataclasses import dataclass

import numpy as np

from .likelihood import log_marginal, log_marginal_design, log_prior

__all__ = ["StartResult", "multimodal_start"]

_CHUNK = 2048
_DEFENSIVE = 0.3  # share of the prior-in-cell component in the adaptive proposals


@dataclass(frozen=True)
class StartResult:
    """Initial walker positions and what the start found.

    Attributes
    ----------
    positions : ndarray, shape (n_walkers, n_sampled)
        Initial walker positions, all inside the prior support.
    mode_periods : tuple of tuple of float
        Grid periods [d] of each candidate mode (one per planet).
    mode_weights : tuple of float
        Estimated posterior probability of each candidate mode (sums to 1).
    walkers_per_mode : tuple of int
        Walkers seeded in each mode.
    n_evaluations : int
        Likelihood evaluations spent by the start.
    """

    positions: np.ndarray
    mode_periods: tuple
    mode_weights: tuple
    walkers_per_mode: tuple
    n_evaluations: int


def _batched(fn, theta, prep):
    out = np.empty(theta.shape[0])
    for lo in range(0, theta.shape[0], _CHUNK):
        out[lo : lo + _CHUNK] = fn(theta[lo : lo + _CHUNK], prep)
    return out


def _log_target(theta, prep):
    """Log prior plus log marginal likelihood, -inf outside the support."""
    lp = log_prior(theta, prep)
    ok = np.isfinite(lp)
    if np.any(ok):
        lp[ok] += _batched(log_marginal, theta[ok], prep)
    return lp


def _frequency_grid(prep, settings):
    span = max(float(np.ptp(prep.t)), 1.0)
    f_lo, f_hi = np.exp(-prep.log_p[1]), np.exp(-prep.log_p[0])
    step = 1.0 / (settings.grid_oversample * span)
    n = int(np.ceil((f_hi - f_lo) / step)) + 1
    if n > settings.max_grid:
        n = settings.max_grid
    return np.linspace(f_lo, f_hi, n)


def _sample_log_jitter(prep, rng, n):
    """Draw ln s from the modified-Jeffreys prior by its inverse CDF, ln(s + knee) uniform."""
    lo = np.log(np.exp(prep.jit_log_range[:, 0]) + prep.jit_knee)
    hi = np.log(np.exp(prep.jit_log_range[:, 1]) + prep.jit_knee)
    u = rng.uniform(lo, hi, size=(n, lo.size))
    return np.log(np.maximum(np.exp(u) - prep.jit_knee, np.exp(prep.jit_log_range[:, 0])))


def _jitter_levels(prep):
    """Three trial ln jitters per instrument: the median error, the data's rms, between."""
    rms = np.array(
        [np.sqrt(np.mean(prep.resid[prep.inst == i] ** 2)) for i in range(prep.jit_knee.size)]
    )
    lo, hi = np.log(prep.jit_knee), np.log(np.maximum(rms, prep.jit_knee))
    hi = np.minimum(hi, prep.jit_log_range[:, 1])
    return [lo, 0.5 * (lo + hi), hi]


def _harmonic_scores(prep, base, k, freqs, n_h, level):
    """Marginal likelihood of planet k as an n_h-harmonic Fourier series at each frequency."""
    npl = prep.n_planets
    others = [j for j in range(npl) if j != k]
    n_fixed = prep.fixed.shape[1]
    amp_prec = prep.prior_prec[0]
    prec = np.concatenate(
        [np.full(2 * n_h + 2 * len(others), amp_prec), prep.prior_prec[2 * npl :]]
    )
    w_row = 1.0 / (prep.var + np.exp(2.0 * level)[prep.inst])
    ll = np.empty(freqs.size)
    step = max(1, _CHUNK // (4 * n_h))
    for lo in range(0, freqs.size, step):
        f = freqs[lo : lo + step]
        x = np.empty((f.size, prep.t.size, 2 * n_h + 2 * len(others) + n_fixed))
        arg = (2.0 * np.pi) * f[:, None] * prep.t
        for h in range(n_h):
            x[:, :, 2 * h] = np.cos((h + 1) * arg)
            x[:, :, 2 * h + 1] = np.sin((h + 1) * arg)
        for i, j in enumerate(others):
            arg_j = (2.0 * np.pi) * np.exp(-base[3 * j]) * prep.t
            x[:, :, 2 * n_h + 2 * i] = np.cos(arg_j)
            x[:, :, 2 * n_h + 2 * i + 1] = np.sin(arg_j)
        x[:, :, 2 * n_h + 2 * len(others) :] = prep.fixed
        w = np.broadcast_to(w_row, (f.size, prep.t.size))
        ll[lo : lo + f.size] = log_marginal_design(x, w, prep.resid, prec)
    return ll


def _top_peaks(ll, settings):
    """Return the indices of the highest local maxima of a score array, best first."""
    left = np.concatenate([[-np.inf], ll[:-1]])
    right = np.concatenate([ll[1:], [-np.inf]])
    peaks = np.flatnonzero((ll >= left) & (ll >= right))
    peaks = peaks[ll[peaks] >= ll.max() - settings.mode_window]
    return peaks[np.argsort(ll[peaks])[::-1]][: settings.max_modes]


def _periodogram_peaks(prep, settings, base, k, freqs):
    """Candidate frequencies of planet k, from several periodograms; return indices, count.

    Each periodogram holds the other planets at `base` (circular) and scores planet k at
    every grid frequency with the exact marginal likelihood of a linear model: a circular
    orbit, and a Fourier series with ``settings.harmonics`` harmonics (so an eccentric orbit
    scores at its own period rather than a harmonic), each at three trial jitters (a cheap
    stand-in for profiling over the jitter; high jitters give smooth, low-contrast scores).
    Sampling patterns make aliases compete with the true period in every one of them, so the
    top peaks of all are kept and the importance step decides between them.
    """
    order = []
    n_eval = 0
    for n_h in dict.fromkeys((1, settings.harmonics)):
        for level in _jitter_levels(prep):
            order.append(_top_peaks(_harmonic_scores(prep, base, k, freqs, n_h, level), settings))
            n_eval += freqs.size
    # Interleave by rank so the best of every periodogram comes first.
    merged = []
    for rank in range(settings.max_modes):
        for peaks in order:
            if rank < peaks.size and int(peaks[rank]) not in merged:
                merged.append(int(peaks[rank]))
    return np.array(merged[: settings.max_candidates]), n_eval


def _prior_in_cell(prep, rng, n, cells):
    """Draw from the prior with each planet's frequency uniform in its cell (lo, hi)."""
    npl = prep.n_planets
    theta = np.empty((n, 3 * npl + prep.jit_knee.size))
    for k, (lo, hi) in enumerate(cells):
        theta[:, 3 * k] = -np.log(rng.uniform(lo, hi, n))
        r = np.sqrt(prep.e_max * rng.uniform(0.0, 1.0, n))  # e uniform -> sqrt(e) radius
        phi = rng.uniform(-np.pi, np.pi, n)
        theta[:, 3 * k + 1] = r * np.cos(phi)
        theta[:, 3 * k + 2] = r * np.sin(phi)
    theta[:, 3 * npl :] = _sample_log_jitter(prep, rng, n)
    return theta


def _log_q_cell(theta, prep, cells):
    """Log density of the prior-in-cell proposal (frequencies uniform in their cells)."""
    out = log_prior(theta, prep) - prep.log_period_density
    for k, (lo, hi) in enumerate(cells):
        log_f = -theta[:, 3 * k]
        inside = (log_f >= np.log(lo)) & (log_f <= np.log(hi))
        # q(ln P) = f / (hi - lo) inside the cell (f uniform there, |df / d ln P| = f).
        out += np.where(inside, log_f - np.log(hi - lo), -np.inf)
    return out


def _weights(log_target, log_q):
    """Log importance weights, -inf wherever the target vanishes."""
    out = np.full(log_target.shape, -np.inf)
    ok = np.isfinite(log_target)
    out[ok] = log_target[ok] - log_q[ok]
    return out


def _importance(prep, settings, rng, cells):
    """Adaptive importance sampling in one mode; returns draws, log weights, log evidence."""
    n = settings.start_draws
    theta = _prior_in_cell(prep, rng, n, cells)
    log_w = _weights(_log_target(theta, prep), _log_q_cell(theta, prep, cells))
    n_eval = n
    for _ in range(settings.start_rounds - 1):
        if not np.any(np.isfinite(log_w)):
            break
        # Cross-entropy step (Rubinstein 1999): fit a Gaussian to the elite draws.
        elite = theta[np.argsort(log_w)[::-1][: max(2 * theta.shape[1], n // 10)]]
        mean = elite.mean(axis=0)
        cov = np.atleast_2d(np.cov(elite.T)) * 2.0 + np.diag(np.full(theta.shape[1], 1e-12))
        n_def = int(round(_DEFENSIVE * n))
        gauss = rng.multivariate_normal(mean, cov, size=n - n_def, method="cholesky")
        theta = np.concatenate([_prior_in_cell(prep, rng, n_def, cells), gauss])
        diff = theta - mean
        sol = np.linalg.solve(cov, diff.T).T
        log_g = -0.5 * np.sum(diff * sol, axis=1) - 0.5 * np.linalg.slogdet(2 * np.pi * cov)[1]
        log_cell = _log_q_cell(theta, prep, cells)
        log_q = np.logaddexp(np.log(_DEFENSIVE) + log_cell, np.log(1 - _DEFENSIVE) + log_g)
        inside = np.isfinite(log_cell)
        log_t = np.full(n, -np.inf)
        log_t[inside] = _log_target(theta[inside], prep)
        log_w = _weights(log_t, log_q)
        n_eval += int(inside.sum())
    finite = np.isfinite(log_w)
    log_z = -np.inf
    if np.any(finite):
        top = np.max(log_w[finite])
        log_z = top + np.log(np.sum(np.exp(log_w[finite] - top)) / n)
    return theta, log_w, log_z, n_eval


def _seed_walkers(theta, log_w, count, prep, rng):
    """Pick `count` draws by weight; move repeated picks slightly, staying in the prior."""
    w = np.exp(log_w - np.max(log_w))
    w /= w.sum()
    pick = rng.choice(theta.shape[0], size=count, replace=True, p=w)
    chosen = theta[pick]
    sd = np.sqrt(np.maximum(np.cov(theta.T, aweights=w + 1e-300).diagonal(), 1e-12))
    out = chosen.copy()
    repeated = np.ones(count, dtype=bool)
    repeated[np.unique(pick, return_index=True)[1]] = False
    for _ in range(50):
        idx = np.flatnonzero(repeated)
        if idx.size == 0:
            break
        trial = chosen[idx] + 0.1 * sd * rng.standard_normal((idx.size, theta.shape[1]))
        ok = np.isfinite(log_prior(trial, prep))
        out[idx[ok]] = trial[ok]
        repeated[idx[ok]] = False
    return out


def _allocate(weights, n_walkers):
    """Largest-remainder split of n_walkers in proportion to weights."""
    raw = weights * n_walkers
    counts = np.floor(raw).astype(int)
    rest = n_walkers - counts.sum()
    counts[np.argsort(raw - counts)[::-1][:rest]] += 1
    return counts


def multimodal_start(prep, settings, rng):
    """Find the period modes and seed walkers across them in proportion to their evidence.

    Parameters
    ----------
    prep : Prepared
        The data and model arrays (:func:`inference.likelihood.prepare`).
    settings : SamplerSettings
        Uses ``n_walkers``, ``grid_oversample``, ``max_grid``, ``mode_window``,
        ``max_modes``, ``start_draws`` and ``start_rounds``.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    StartResult
    """
    npl = prep.n_planets
    base = np.concatenate([np.zeros(3 * npl), np.log(prep.jit_knee)])
    n_eval = 0
    candidates = []
    if npl:
        freqs = _frequency_grid(prep, settings)
        half = 0.5 * (freqs[1] - freqs[0]) if freqs.size > 1 else 0.5 * freqs[0]
        best_cells = []
        for k in range(npl):
            peaks, n = _periodogram_peaks(prep, settings, base, k, freqs)
            n_eval += n
            base[3 * k] = -np.log(freqs[peaks[0]])
            cells_k = [(max(freqs[p] - 3 * half, 1e-300), freqs[p] + 3 * half) for p in peaks]
            best_cells.append(cells_k[0])
            candidates.append(cells_k)
        modes = [tuple(best_cells)]
        for k, cells_k in enumerate(candidates):
            for cell in cells_k[1:]:
                mode = list(best_cells)
                mode[k] = cell
                modes.append(tuple(mode))
        # Order the planets of each mode by period (the prior requires P_1 < P_2 < ...).
        modes = list(dict.fromkeys(tuple(sorted(m, key=lambda c: -c[0])) for m in modes))
    else:
        modes = [()]
    results = []
    for cells in modes:
        theta, log_w, log_z, n = _importance(prep, settings, rng, cells)
        n_eval += n
        if np.isfinite(log_z):
            results.append((cells, theta, log_w, log_z))
    log_z = np.array([r[3] for r in results])
    weights = np.exp(log_z - log_z.max())
    weights /= weights.sum()
    counts = _allocate(weights, settings.n_walkers)
    positions = [
        _seed_walkers(theta, log_w, int(c), prep, rng)
        for (_, theta, log_w, _), c in zip(results, counts, strict=True)
        if c > 0
    ]
    positions = np.concatenate(positions, axis=0)
    positions = positions[rng.permutation(positions.shape[0])]
    periods = tuple(tuple(float(2.0 / (lo + hi)) for lo, hi in r[0]) for r in results)
    return StartResult(
        positions=positions,
        mode_periods=periods,
        mode_weights=tuple(float(w) for w in weights),
        walkers_per_mode=tuple(int(c) for c in counts),
        n_evaluations=int(n_eval),
    )
