"""The period modes of a weighted posterior sample: where each planet's period mass lies.

Per planet, the weighted draws' frequencies 1 / P are binned at a quarter of the frequency
resolution 1 / span and smoothed over one resolution element. Each local maximum of that
density is a mode, and every bin belongs to the maximum it climbs to (a watershed). Two
neighbouring modes are one when the density between them never falls below half of the lower
peak: periods that close cannot be told apart by these data. A mode's share is the sum of its
draws' normalised importance weights, with the standard error of a self-normalised importance
estimate, sqrt(sum w_i^2 (1_i - share)^2) (e.g. Owen 2013, *Monte Carlo theory, methods and
examples*, eq. 9.8).
"""

from dataclasses import asdict, dataclass

import numpy as np

__all__ = ["PeriodMode", "period_modes"]


@dataclass(frozen=True)
class PeriodMode:
    """One period mode of one planet.

    Attributes
    ----------
    planet : int
        Planet number, 1-based.
    share : float
        Posterior probability that the planet's period lies in this mode.
    share_se : float
        Its Monte Carlo standard error.
    period_lo, period_mid, period_hi : float
        5th, 50th and 95th weighted percentiles of the period inside the mode [d].
    """

    planet: int
    share: float
    share_se: float
    period_lo: float
    period_mid: float
    period_hi: float

    def to_dict(self):
        """Return the mode as a JSON-ready dict."""
        return asdict(self)


def _weighted_percentiles(x, w, q):
    order = np.argsort(x)
    cw = np.cumsum(w[order])
    cw /= cw[-1]
    return [float(x[order][min(np.searchsorted(cw, p / 100.0), x.size - 1)]) for p in q]


def _watershed(freq, weights, span):
    """Mode label of each draw from the smoothed weighted histogram of its frequency."""
    width = 0.25 / span
    lo = freq.min()
    bins = np.floor((freq - lo) / width).astype(np.int64)
    hist = np.bincount(bins, weights=weights)
    kernel = np.array([1.0, 2.0, 3.0, 2.0, 1.0])
    dens = np.convolve(hist, kernel / kernel.sum())[2:-2]
    n = dens.size
    # Climb: each bin points to its higher neighbour until a local maximum.
    left = np.concatenate([[-1.0], dens[:-1]])
    right = np.concatenate([dens[1:], [-1.0]])
    up = np.where(right > np.maximum(left, dens), 1, np.where(left > dens, -1, 0))
    top = np.arange(n)
    for _ in range(n):
        nxt = top + up[top]
        if np.array_equal(nxt, top):
            break
        top = nxt
    peaks = np.unique(top)
    # Merge neighbouring peaks whose valley stays above half the lower peak.
    label = {int(p): i for i, p in enumerate(peaks)}
    for a, b in zip(peaks[:-1], peaks[1:], strict=True):
        valley = dens[a : b + 1].min()
        if valley >= 0.5 * min(dens[a], dens[b]):
            label[int(b)] = label[int(a)]
    return np.array([label[int(t)] for t in top])[bins]


def period_modes(theta, weights, prep, span, min_share=0.01):
    """Period modes of every planet, largest first, each holding at least `min_share`.

    Parameters
    ----------
    theta : ndarray, shape (n, n_sampled)
        Weighted draws in the sampled coordinates.
    weights : ndarray, shape (n,)
        Their normalised importance weights.
    prep : Prepared
        Used for the number of planets.
    span : float
        Time span of the data [d].
    min_share : float, optional
        Smallest share reported.

    Returns
    -------
    tuple of PeriodMode
    """
    npl = prep.n_planets
    keep = weights > 0
    theta, weights = theta[keep], weights[keep]
    if npl == 0 or theta.shape[0] == 0:
        return ()
    out = []
    for k in range(npl):
        freq = np.exp(-theta[:, 3 * k])
        mode_of = _watershed(freq, weights, span)
        period = 1.0 / freq
        for g in np.unique(mode_of):
            inside = mode_of == g
            share = float(weights[inside].sum())
            if share < min_share:
                continue
            se = float(np.sqrt(np.sum(weights**2 * (inside - share) ** 2)))
            lo, mid, hi = _weighted_percentiles(period[inside], weights[inside], (5, 50, 95))
            out.append(PeriodMode(k + 1, share, se, lo, mid, hi))
    return tuple(sorted(out, key=lambda m: (m.planet, -m.share)))
