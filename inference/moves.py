"""Differential-evolution move that takes its difference vectors from walkers in the same mode.

With sparse data a star's period posterior has many narrow modes, and walkers spread over all
of them. The plain differential-evolution move (ter Braak 2006) builds its step from the
difference of two random walkers, and with 16 modes about 15 pairs in 16 join different modes:
the step leaps far outside the walker's own mode and is rejected, so each walker mixes inside
its mode at a small fraction of the rate it would alone.

This move partitions the sampled space into frequency cells (each planet's 1/P binned in steps
of ``1 / span``, the width of one periodogram peak) and, for a walker in a cell, draws the pair
from the complementary walkers in the same cell (from all of them when fewer than two share
it). A proposal that leaves the cell is rejected. The pair's distribution therefore depends only
on the cell, which the forward and the reverse move share, so the proposal stays symmetric
within a cell and the move keeps the posterior restricted to each cell invariant
(Metropolis-Hastings on a partition). Moves between cells are left to the stretch and snooker
moves mixed in with it.
"""

import numpy as np
from emcee.moves import RedBlueMove

__all__ = ["CellDEMove", "frequency_cells"]


def frequency_cells(theta, n_planets, span):
    """Cell label of each sampled vector (its planets' frequencies binned by 1 / span).

    Parameters
    ----------
    theta : ndarray, shape (n, n_sampled)
        Sampled vectors (per planet ln P first of its three).
    n_planets : int
        Planets in the model.
    span : float
        Time span of the data [d]; bins are 1 / span wide [1/d].

    Returns
    -------
    cells : ndarray of int64, shape (n, n_planets)
        floor(span / P_k) per planet.
    """
    idx = 3 * np.arange(n_planets)
    return np.floor(span * np.exp(-theta[:, idx])).astype(np.int64)


class CellDEMove(RedBlueMove):
    """Differential-evolution move with partners from the walker's own frequency cell.

    Parameters
    ----------
    n_planets : int
        Planets in the model (0 gives the plain move: one cell).
    span : float
        Time span of the data [d].
    sigma : float, optional
        Relative spread of the step factor gamma (as in the plain move).
    gamma0 : float, optional
        Mean step factor; default 2.38 / sqrt(2 n_dim) (ter Braak 2006).
    """

    def __init__(self, n_planets, span, sigma=1.0e-5, gamma0=None):
        self.n_planets = int(n_planets)
        self.span = float(span)
        self.sigma = sigma
        self.gamma0 = gamma0
        super().__init__()

    def setup(self, coords):
        """Set the mean step factor for this ensemble's dimension (called by emcee)."""
        self.g0 = self.gamma0 or 2.38 / np.sqrt(2 * coords.shape[1])

    def _labels(self, theta):
        """One integer per vector naming its cell (the planets' bins combined)."""
        cells = frequency_cells(theta, self.n_planets, self.span)
        label = np.zeros(theta.shape[0], dtype=np.int64)
        for k in range(self.n_planets):
            # Bins are below span / P_min + 1, so a mixed-radix code is unique.
            label = label * (int(cells[:, k].max()) + 1) + cells[:, k]
        return label

    def get_proposal(self, s, c, random):
        """Propose steps for the walkers `s` from pairs of the complementary sets `c`.

        Parameters
        ----------
        s : ndarray, shape (n_s, n_dim)
            Walkers being moved.
        c : list of ndarray, each shape (n_c, n_dim)
            The complementary walkers (held fixed during this half-step).
        random : numpy.random.RandomState
            The sampler's random state.

        Returns
        -------
        q : ndarray, shape (n_s, n_dim)
            Proposals.
        factors : ndarray, shape (n_s,)
            Log proposal-ratio terms: 0, or -inf for a proposal outside its walker's cell.
        """
        c = np.concatenate(c, axis=0)
        ns, nc = s.shape[0], c.shape[0]
        both = self._labels(np.concatenate([s, c]))
        lab_s, lab_c = both[:ns], both[ns:]
        order = np.argsort(lab_c, kind="stable")
        sorted_lab = lab_c[order]
        lo = np.searchsorted(sorted_lab, lab_s, side="left")
        count = np.searchsorted(sorted_lab, lab_s, side="right") - lo
        own = count >= 2
        # Within the chosen pool (the cell's walkers, else all), two distinct members.
        start = np.where(own, lo, 0)
        size = np.where(own, count, nc)
        a = np.floor(random.rand(ns) * size).astype(np.int64)
        b = np.floor(random.rand(ns) * (size - 1)).astype(np.int64)
        b += b >= a
        pairs = np.stack([a, b], axis=1)
        pool = np.where(own[:, None], order[start[:, None] + pairs], pairs)
        diffs = c[pool[:, 1]] - c[pool[:, 0]]
        gamma = self.g0 * (1.0 + self.sigma * random.randn(ns, 1))
        q = s + gamma * diffs
        factors = np.zeros(ns)
        if self.n_planets:
            moved = frequency_cells(q, self.n_planets, self.span)
            left = np.any(moved != frequency_cells(s, self.n_planets, self.span), axis=1)
            factors[left] = -np.inf
        return q, factors
