"""Where the period modes are: frequency scans of the marginal likelihood, and starting components.

1. For each planet in turn, a dense frequency grid (uniform in 1/P, spacing 1/(oversample x
   span)) is scored by several periodograms, the other planets held circular at their best
   grid period so far: the exact marginal likelihood of a circular orbit and of a short
   Fourier series, each at three trial jitters, and the Keplerian periodogram of
   :mod:`inference.scan` (eccentric orbits on a coarse grid of e and phase). Local maxima
   within `mode_window` (ln units) of each periodogram's best are candidate modes.
2. Each candidate gives starting Student-t components for the population Monte Carlo of
   :mod:`inference.importance`: one circular, one at the Keplerian scan's best eccentricity
   and phase there, each moved to its nearest posterior maximum with a Laplace scale
   (:mod:`inference.laplace`).
3. The best score of every grid cell, over all periodograms, becomes the frequency proposal
   of the mixture's defensive share, so that its draws reach every period the data allow.
"""

import itertools
from dataclasses import dataclass

import numpy as np

from .laplace import refine_seeds
from .likelihood import log_joint, log_marginal_design
from .mixture import FrequencyProposal
from .scan import ECC_GRID, ZOOM_GRID, keplerian_scores

__all__ = ["StartResult", "find_modes"]

_CHUNK = 2048
# The frequency proposal: scan scores to the power 0.5 (a peak 6 ln units down still gets
# e^-3 of the best cell's draws, so modes on a peak's flank are reached), mixed with 20% of
# the plain prior.
_TEMPER = 0.5
_FLOOR = 0.2
_MAX_SEED_MODES = 24  # candidate modes seeded (best first); the defensive share covers the rest
_ZOOM_POINTS = 2  # eccentric seeds per candidate, from the zoom's best points


@dataclass(frozen=True)
class StartResult:
    """The candidate modes the period scan found, each with starting mixture components.

    Attributes
    ----------
    frequencies : FrequencyProposal or None
        Where the importance mixture's defensive share draws periods: the scan's best score
        per grid cell, tempered, times the prior, mixed with the prior (None without planets).
    seeds : tuple of (float, ndarray, ndarray)
        Starting Student-t components in the sampled coordinates: relative weight, mean and
        scale matrix of each.
    mode_periods : tuple of tuple of float
        Grid periods [d] of each candidate mode (one per planet).
    n_evaluations : int
        Marginal-likelihood evaluations spent by the scans (one per frequency and grid point).
    """

    frequencies: FrequencyProposal | None
    seeds: tuple
    mode_periods: tuple
    n_evaluations: int


def _frequency_grid(prep, settings):
    span = max(float(np.ptp(prep.t)), 1.0)
    f_lo, f_hi = np.exp(-prep.log_p[1]), np.exp(-prep.log_p[0])
    step = 1.0 / (settings.grid_oversample * span)
    n = int(np.ceil((f_hi - f_lo) / step)) + 1
    if n > settings.max_grid:
        n = settings.max_grid
    return np.linspace(f_lo, f_hi, n)


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


def _others(prep, base, k):
    """Columns and prior precisions of everything but planet k: other planets circular, fixed."""
    npl = prep.n_planets
    cols, prec = [], []
    for j in range(npl):
        if j != k:
            arg = (2.0 * np.pi) * np.exp(-base[3 * j]) * prep.t
            cols += [np.cos(arg), np.sin(arg)]
            prec += [prep.prior_prec[0]] * 2
    cols = np.column_stack(cols + [prep.fixed]) if cols else prep.fixed
    return cols, np.concatenate([prec, prep.prior_prec[2 * npl :]])


def _periodogram_peaks(prep, settings, base, k, freqs, harmonics=True):
    """Candidate frequencies of planet k, from several periodograms.

    Each periodogram holds the other planets at `base` (circular) and scores planet k at
    every grid frequency: a circular orbit and a Fourier series with ``settings.harmonics``
    harmonics, each at three trial jitters (a cheap stand-in for profiling over the jitter;
    high jitters give smooth, low-contrast scores), and the Keplerian periodogram at the
    middle jitter (the Fourier series only when `harmonics`: the rescans of several planets
    skip it). Sampling patterns make aliases compete with the true period in every one
    of them, so the top peaks of all are kept and the importance sampling decides.

    Returns the candidates' grid indices, the best relative score of every grid frequency
    over the periodograms (each less its own maximum), the Keplerian scan's best
    (e, M0) per frequency, and the evaluations spent.
    """
    order = []
    n_eval = 0
    score = np.full(freqs.size, -np.inf)
    levels = _jitter_levels(prep)
    for n_h in dict.fromkeys((1, settings.harmonics) if harmonics else (1,)):
        for level in levels:
            ll = _harmonic_scores(prep, base, k, freqs, n_h, level)
            score = np.maximum(score, ll - ll.max())
            order.append(_top_peaks(ll, settings))
            n_eval += freqs.size
    cols, prec = _others(prep, base, k)
    w = 1.0 / (prep.var + np.exp(2.0 * levels[1])[prep.inst])
    # Every other grid frequency (a peak spans several), interpolated back to the grid.
    half = freqs[::2]
    ll, best, _ = keplerian_scores(prep.t, w, prep.resid, cols, prec, prep.prior_prec[0], half)
    nearest = np.minimum(np.rint(np.arange(freqs.size) / 2).astype(int), half.size - 1)
    ll, best = np.interp(freqs, half, ll), best[nearest]
    score = np.maximum(score, ll - ll.max())
    order.insert(0, _top_peaks(ll, settings))
    n_eval += half.size * sum(n_phase for _, n_phase in ECC_GRID)
    # Interleave by rank so the best of every periodogram comes first.
    merged = []
    for rank in range(settings.max_modes):
        for peaks in order:
            if rank < peaks.size and int(peaks[rank]) not in merged:
                merged.append(int(peaks[rank]))
    return np.array(merged[: settings.max_candidates]), score, best, n_eval


def _zoom(prep, base, k, freq, step, level, top=4):
    """Return the best (frequency, e, M0) points near a candidate of planet k, finer gridded.

    Five frequencies across the candidate's grid cell and its neighbours, ten eccentricities
    and 48 phases each: eccentric modes are narrow in (e, M0), and the coarse scan only says
    roughly where. Returns up to `top` points, best first, no two at one grid point.
    """
    cols, prec = _others(prep, base, k)
    w = 1.0 / (prep.var + np.exp(2.0 * level)[prep.inst])
    freqs = freq + step * np.array([-1.0, -0.5, 0.0, 0.5, 1.0])
    freqs = freqs[(freqs >= np.exp(-prep.log_p[1])) & (freqs <= np.exp(-prep.log_p[0]))]
    _, best, best_ll = keplerian_scores(prep.t, w, prep.resid, cols, prec, prep.prior_prec[0],
                                        freqs, top=top, grid=ZOOM_GRID)
    flat = [(float(best_ll[i, j]), float(freqs[i]), float(best[i, j, 0]), float(best[i, j, 1]))
            for i in range(freqs.size) for j in range(best.shape[1])]
    out = []
    for _, f, e, m0 in sorted(flat, reverse=True):
        if all(abs(e - e2) > 0.06 or abs(np.angle(np.exp(1j * (m0 - m2)))) > 0.2
               for _, e2, m2 in out):
            out.append((f, e, m0))
        if len(out) >= top:
            break
    return out


def _seed_components(prep, mode, level, span):
    """Return the starting components of a candidate mode: circular and the zoom's best.

    `mode` holds, per planet, (frequency [1/d], points) of the candidate, the points being
    the zoom's best (frequency, e, M0) there, best first.
    """
    npl = prep.n_planets
    out = []
    n_grid = min(len(points) for _, points in mode)
    for g in range(-1, n_grid):  # -1: circular
        mean = np.concatenate([np.zeros(3 * npl), level])
        sd = np.concatenate([np.zeros(3 * npl), np.full(level.size, 0.5)])
        for k, (freq, points) in enumerate(mode):
            mean[3 * k] = -np.log(freq)
            sd[3 * k] = min(0.3 / (freq * span), 0.3)  # a third of a peak width, in ln P
            if g >= 0:
                f, e, m0 = points[g]
                mean[3 * k] = -np.log(f)
                mean[3 * k + 1 : 3 * k + 3] = np.sqrt(e) * np.cos(m0), np.sqrt(e) * np.sin(m0)
            sd[3 * k + 1] = sd[3 * k + 2] = 0.12 if g >= 0 else 0.25
        out.append((mean, np.diag(sd * sd)))
    return out


def find_modes(prep, settings):
    """Find the candidate period modes and starting mixture components for them.

    Parameters
    ----------
    prep : Prepared
        The data and model arrays (:func:`inference.likelihood.prepare`).
    settings : SamplerSettings
        Uses ``grid_oversample``, ``max_grid``, ``mode_window``, ``max_modes``,
        ``max_candidates`` and ``harmonics``.

    Returns
    -------
    StartResult
    """
    npl = prep.n_planets
    if not npl:
        return StartResult(frequencies=None, seeds=(), mode_periods=(), n_evaluations=0)
    span = max(float(np.ptp(prep.t)), 1.0)
    base = np.concatenate([np.zeros(3 * npl), np.log(prep.jit_knee)])
    freqs = _frequency_grid(prep, settings)
    n_eval = 0
    score = np.full(freqs.size, -np.inf)
    level = _jitter_levels(prep)[1]
    step = float(freqs[1] - freqs[0]) if freqs.size > 1 else float(freqs[0])
    candidates = [{} for _ in range(npl)]
    best_modes = [None] * npl
    # With several planets a second pass rescans each one given the others' best periods
    # (backfitting), so a planet first scanned beside an unmodelled signal is found again.
    for rescan in range(1 if npl == 1 else 2):
        for k in range(npl):
            peaks, score_k, ecc_k, n = _periodogram_peaks(prep, settings, base, k, freqs,
                                                          harmonics=not rescan)
            score = np.maximum(score, score_k)
            n_eval += n
            base[3 * k] = -np.log(freqs[peaks[0]])
            for p in peaks:
                if int(p) not in candidates[k]:
                    points = _zoom(prep, base, k, float(freqs[p]), step, level, _ZOOM_POINTS)
                    n_eval += 5 * sum(n_phase for _, n_phase in ZOOM_GRID)
                    candidates[k][int(p)] = (float(freqs[p]), tuple(points), float(score_k[p]))
            best_modes[k] = candidates[k][int(peaks[0])]
    candidates = [list(c.values()) for c in candidates]
    modes = [tuple(best_modes)]
    for k, cands in enumerate(candidates):
        for cand in cands:
            mode = list(best_modes)
            mode[k] = cand
            modes.append(tuple(mode))
    if npl > 1:
        # Every combination of each planet's three best candidates, too.
        tops = [sorted(c, key=lambda x: -x[2])[:3] for c in candidates]
        modes += [tuple(m) for m in itertools.product(*tops)]
    # Order the planets of each mode by period (the prior requires P_1 < P_2 < ...).
    modes = list(dict.fromkeys(tuple(sorted(m, key=lambda c: -c[0])) for m in modes))
    seeds, periods = [], []
    ranked = []
    for mode in modes:
        if len({round(c[0], 12) for c in mode}) < len(mode):
            continue  # two planets at one frequency: not a mode of the ordered prior
        # Weight: the worst planet's relative score times the periods (wider cells in ln P).
        weight = float(np.exp(min(c[2] for c in mode)) * np.prod([1.0 / c[0] for c in mode]))
        ranked.append((weight, mode))
    ranked.sort(key=lambda x: -x[0])
    for weight, mode in ranked[:_MAX_SEED_MODES]:
        for mean, cov in _seed_components(prep, [c[:2] for c in mode], level, span):
            seeds.append((weight, mean, cov))
        periods.append(tuple(1.0 / c[0] for c in mode))
    if seeds:
        means, covs = refine_seeds(prep, [m for _, m, _ in seeds], [c for _, _, c in seeds])
        # Weights: the Laplace estimate of each seed's evidence, p(y, theta*) |2 pi S|^(1/2)
        # (the scan scores only rank periods, not the eccentricities the seeds climbed to).
        log_z = log_joint(means, prep) + 0.5 * np.linalg.slogdet(2.0 * np.pi * covs)[1]
        top = np.max(log_z[np.isfinite(log_z)]) if np.any(np.isfinite(log_z)) else 0.0
        weight = np.where(np.isfinite(log_z), np.exp(np.minimum(log_z - top, 0.0)), 0.0)
        # Seeds that climbed to the same maximum are one component.
        kept = {}
        for w, m, c in zip(weight, means, covs, strict=True):
            kept.setdefault(tuple(np.round(m, 2)), (max(float(w), 1e-6), m, c))
        seeds = list(kept.values())
    edges = np.concatenate([[freqs[0]], 0.5 * (freqs[1:] + freqs[:-1]), [freqs[-1]]])
    proposal = FrequencyProposal.from_scores(edges, score, _TEMPER, _FLOOR)
    return StartResult(frequencies=proposal, seeds=tuple(seeds), mode_periods=tuple(periods),
                       n_evaluations=int(n_eval))
