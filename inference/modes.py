"""The period modes of a weighted posterior sample: where each planet's period mass lies.

Per planet, the mixture components whose periods differ by less than one frequency resolution
element, 1 / span, form one mode (periods that close cannot be told apart by these data), and
each draw belongs to the mode whose nearest component is within two resolution elements of its
frequency; draws near no component belong to no mode (their mass is what the listed shares
leave over). A mode's share is the sum of its draws'
normalised importance weights, with the standard error of a self-normalised importance
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


def _groups(freqs, span):
    """Indices of components grouped by frequency: neighbours closer than 1 / span merge."""
    order = np.argsort(freqs)
    groups = [[order[0]]]
    for a, b in zip(order[:-1], order[1:], strict=True):
        if freqs[b] - freqs[a] < 1.0 / span:
            groups[-1].append(b)
        else:
            groups.append([b])
    return groups


def period_modes(theta, weights, mixture, prep, span, min_share=0.01):
    """Period modes of every planet, largest first, each holding at least `min_share`.

    Parameters
    ----------
    theta : ndarray, shape (n, n_sampled)
        Weighted draws in the sampled coordinates.
    weights : ndarray, shape (n,)
        Their normalised importance weights.
    mixture : Mixture
        The proposal the draws came from.
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
    means = mixture.means if mixture.n_components else theta[np.argmax(weights)][None, :]
    out = []
    for k in range(npl):
        comp_freq = np.exp(-means[:, 3 * k])
        groups = _groups(comp_freq, span)
        freq = np.exp(-theta[:, 3 * k])
        order = np.argsort(comp_freq)
        label = np.empty(comp_freq.size, dtype=int)
        for g, members in enumerate(groups):
            label[members] = g
        # Nearest component in frequency, then its group, if within 2 / span.
        pos = np.clip(np.searchsorted(comp_freq[order], freq), 1, max(order.size - 1, 1))
        left, right = order[pos - 1], order[np.minimum(pos, order.size - 1)]
        near = np.where(np.abs(freq - comp_freq[left]) <= np.abs(freq - comp_freq[right]),
                        left, right)
        mode_of = np.where(np.abs(freq - comp_freq[near]) <= 2.0 / span, label[near], -1)
        period = 1.0 / freq
        for g in range(len(groups)):
            inside = mode_of == g
            share = float(weights[inside].sum())
            if share < min_share:
                continue
            se = float(np.sqrt(np.sum(weights**2 * (inside - share) ** 2)))
            lo, mid, hi = _weighted_percentiles(period[inside], weights[inside], (5, 50, 95))
            out.append(PeriodMode(k + 1, share, se, lo, mid, hi))
    return tuple(sorted(out, key=lambda m: (m.planet, -m.share)))
