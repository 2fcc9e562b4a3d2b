"""Fast predicted velocities of every posterior sample at many times.

A curve needs thousands of times for each of thousands of samples, and one Kepler solve per
sample per time is too slow. Each sample's planet curve is therefore tabulated once over
orbital phase, on a uniform grid of mean anomaly, with the velocity and its analytic derivative
at every node, and evaluated by cubic Hermite interpolation. The node count of each sample is
chosen from its eccentricity and semi-amplitude so that the interpolation error stays below
``tolerance`` (1 mm/s by default; measured in ``tests/test_predict.py``). Samples whose orbit
would need more than ``MAX_NODES`` nodes (eccentricities above about 0.97) are solved exactly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from inference.kepler import eccentric_anomaly
from inference.keplerian import radial_velocity
from planner.information.entropy import InformationError

__all__ = ["MAX_NODES", "Predictor", "nodes_for"]

#: Largest phase table per sample and planet; orbits needing more are solved exactly.
MAX_NODES = 16384
_MIN_NODES = 32
#: Nodes per unit of peak true-anomaly rate for 1 mm/s at K = 100 m/s (measured worst 7e-4 m/s).
_NODE_SCALE = 40.0
_CACHE_FLOATS = 1 << 15


def nodes_for(eccentricity, semi_amplitude, tolerance=1e-3):
    """Phase-table nodes needed for a Hermite interpolation error below `tolerance`.

    Parameters
    ----------
    eccentricity : ndarray, shape (n,)
        Eccentricities, 0 <= e < 1.
    semi_amplitude : ndarray, shape (n,)
        Semi-amplitudes K [m/s].
    tolerance : float, optional
        Largest interpolation error wanted [m/s].

    Returns
    -------
    nodes : ndarray of int, shape (n,)
        Node count per orbit (a multiple of 8 on quarter-octave steps), or 0 where more than
        MAX_NODES would be needed.

    Notes
    -----
    Cubic Hermite error scales as h^4 max|v''''| (textbook bound h^4/384 max|f''''|); near
    periastron the curve's time scale is set by the peak rate of the true anomaly,
    d nu / d M = sqrt(1 + e) / (1 - e)^(3/2), so the node count scales as that rate times
    (K / tolerance)^(1/4). The constant was measured on e = 0 to 0.9 at K = 100 m/s.
    """
    e = np.asarray(eccentricity, dtype=float)
    k = np.abs(np.asarray(semi_amplitude, dtype=float))
    rate = np.sqrt(1.0 + e) / (1.0 - e) ** 1.5
    need = _NODE_SCALE * rate * np.maximum(k / (100.0 * tolerance / 1e-3), 1e-12) ** 0.25
    need = np.maximum(need, _MIN_NODES)
    # Quarter-octave steps (multiples of 8) keep few distinct table sizes without doubling.
    nodes = 8 * np.ceil(2 ** (np.ceil(4 * np.log2(need)) / 4) / 8).astype(np.int64)
    return np.where(nodes > MAX_NODES, 0, nodes)


def _planet_table(period, k, e, omega, n):
    """Hermite coefficients (n_s, n + 1, 4) of v over one orbit on n uniform mean-anomaly nodes."""
    m = np.linspace(0.0, 2.0 * math.pi, n + 1)[None, :]
    e_ = e[:, None]
    big_e = eccentric_anomaly(m, e_)
    c, s = np.cos(big_e), np.sin(big_e)
    beta = np.sqrt(1.0 - e_ * e_)
    cw, sw = np.cos(omega)[:, None], np.sin(omega)[:, None]
    den = 1.0 - e_ * c
    num = cw * (c - e_) - sw * beta * s
    kk = k[:, None]
    y = kk * (num / den + e_ * cw)
    dnum = -cw * s - sw * beta * c
    dy = kk * (dnum * den - num * e_ * s) / den**3  # dv/dM = (dv/dE) / (1 - e cos E)
    dy *= 2.0 * math.pi / n  # derivative per node step
    y0, y1, d0, d1 = y[:, :-1], y[:, 1:], dy[:, :-1], dy[:, 1:]
    coef = np.stack([y0, d0, 3 * (y1 - y0) - 2 * d0 - d1, 2 * (y0 - y1) + d0 + d1], axis=-1)
    # One spare interval (a copy of the first) for a phase that rounds up to a full turn.
    return np.concatenate([coef, coef[:, :1]], axis=1)


@dataclass(frozen=True, eq=False)
class _Table:
    """One planet's phase tables of all tabulated samples, flattened into one coefficient set."""

    planet: int
    rows: np.ndarray | None  # sample indices with a table, or None for every sample
    nodes: np.ndarray  # (n_rows,) float node count of each row's table
    start: np.ndarray  # (n_rows,) float index of each row's first interval in the flat arrays
    coef: np.ndarray  # (n_intervals, 4) Hermite coefficients of every row's intervals
    exact_rows: np.ndarray  # sample indices solved exactly (orbits needing > MAX_NODES nodes)
    with_offset: bool  # the constant terms include each sample's offset (every row tabulated)


def _build_table(p, k, e, w, planet, tolerance, offset=None):
    """Tabulate every sample of one planet that can be tabulated; see :class:`_Table`.

    When `offset` (n_samples,) is given and every sample is tabulated, it is folded into the
    constant Hermite terms, so that evaluating the table gives planet plus offset in one pass.
    """
    need = nodes_for(e, k, tolerance)
    rows = np.flatnonzero(need > 0)
    exact_rows = np.flatnonzero(need == 0)
    n_rows = need[rows]
    start = np.zeros(rows.size, dtype=np.int64)
    start[1:] = np.cumsum(n_rows + 1)[:-1]  # each table has n + 1 intervals (one spare)
    flat = np.empty((int(np.sum(n_rows + 1)), 4))
    for n in np.unique(n_rows):
        sel = np.flatnonzero(n_rows == n)
        r = rows[sel]
        tab = _planet_table(p[r], k[r], e[r], w[r], int(n))  # (n_sel, n + 1, 4)
        flat[(start[sel, None] + np.arange(n + 1)[None, :]).ravel()] = tab.reshape(-1, 4)
    fold = offset is not None and rows.size == need.size
    if fold:
        flat[:, 0] += np.repeat(offset, n_rows + 1)
    return _Table(planet, None if rows.size == need.size else rows, n_rows.astype(float),
                  start.astype(float), flat, exact_rows, fold)


@dataclass(frozen=True, eq=False)
class Predictor:
    """Predicted radial velocities of a star's posterior samples for one instrument.

    Attributes
    ----------
    period, semi_amplitude, eccentricity, omega, time_periastron : ndarray
        Shape (n_samples, n_planets). Orbit of every sample: period [d], K [m/s], e,
        omega [rad], periastron BJD_TDB [d].
    offset : ndarray, shape (n_samples,)
        The instrument's velocity offset [m/s].
    jitter : ndarray, shape (n_samples,)
        The instrument's jitter [m/s], added in quadrature to the measurement noise.
    trend : ndarray, shape (n_samples,)
        Linear trend [m/s/d] about `t_ref` (zeros when the model has none).
    t_ref : float
        Reference epoch of the trend, BJD_TDB [d].
    tolerance : float
        Interpolation error bound of the fast route [m/s].
    """

    period: np.ndarray
    semi_amplitude: np.ndarray
    eccentricity: np.ndarray
    omega: np.ndarray
    time_periastron: np.ndarray
    offset: np.ndarray
    jitter: np.ndarray
    trend: np.ndarray
    t_ref: float
    tolerance: float
    _tables: tuple = field(repr=False)

    @property
    def n_samples(self):
        """Number of posterior samples."""
        return self.offset.size

    @property
    def n_planets(self):
        """Number of Keplerian signals."""
        return self.period.shape[1]

    @classmethod
    def from_parameters(cls, period, semi_amplitude, eccentricity, omega, time_periastron,
                        offset, jitter, trend=None, t_ref=0.0, tolerance=1e-3):
        """Build from parameter arrays.

        Parameters
        ----------
        period, semi_amplitude, eccentricity, omega, time_periastron : array_like
            Shape (n_samples,) or (n_samples, n_planets). Orbits: period [d], K [m/s],
            e in [0, 1), omega [rad], periastron BJD_TDB [d].
        offset, jitter : array_like, shape (n_samples,) or scalar
            Instrument offset [m/s] and jitter [m/s] (>= 0).
        trend : array_like, shape (n_samples,) or scalar, optional
            Linear trend [m/s/d] about `t_ref`.
        t_ref : float, optional
            Reference epoch of the trend, BJD_TDB [d].
        tolerance : float, optional
            Interpolation error bound [m/s] of the fast route.

        Returns
        -------
        Predictor
        """
        orbit = [np.array(a, dtype=float, ndmin=1) for a in
                 (period, semi_amplitude, eccentricity, omega, time_periastron)]
        orbit = [a[:, None] if a.ndim == 1 else a for a in orbit]
        try:
            shape = np.broadcast_shapes(*(a.shape for a in orbit))
        except ValueError:
            raise InformationError(
                "orbit parameter arrays do not share a shape; pass each as (n_samples,) or "
                "(n_samples, n_planets)."
            ) from None
        orbit = [np.ascontiguousarray(np.broadcast_to(a, shape)) for a in orbit]
        p, k, e, w, tp = orbit
        n_s = shape[0]
        if not all(np.all(np.isfinite(a)) for a in orbit) or np.any(p <= 0):
            raise InformationError(
                "orbit parameters must be finite with positive periods; check the samples."
            )
        if np.any((e < 0) | (e >= 1)):
            raise InformationError(
                "an eccentricity lies outside [0, 1); bound orbits need 0 <= e < 1."
            )

        def per_sample(name, value):
            try:
                arr = np.array(np.broadcast_to(np.asarray(value, dtype=float), (n_s,)))
            except ValueError:
                raise InformationError(
                    f"{name} has {np.size(value)} values but the orbits have {n_s} samples; "
                    "pass one value per sample or a single value."
                ) from None
            if not np.all(np.isfinite(arr)):
                raise InformationError(f"{name} must be finite for every sample.")
            return arr

        off = per_sample("offset", offset)
        jit = per_sample("jitter", jitter)
        if np.any(jit < 0):
            raise InformationError("jitter must be non-negative; pass its absolute value.")
        tr = per_sample("trend", 0.0 if trend is None else trend)
        tables = tuple(_build_table(p[:, j], k[:, j], e[:, j], w[:, j], j, tolerance,
                                    off if j == 0 else None) for j in range(shape[1]))
        return cls(p, k, e, w, tp, off, jit, tr, float(t_ref), float(tolerance), tables)

    @classmethod
    def from_posterior(cls, posterior, instrument, tolerance=1e-3):
        """Build from a posterior's complete samples for one instrument.

        Parameters
        ----------
        posterior : inference.posterior.Posterior
            Equal-weight complete samples (parameter names as in docs/architecture.md).
        instrument : str
            Instrument whose offset and jitter apply.
        tolerance : float, optional
            Interpolation error bound [m/s].

        Returns
        -------
        Predictor
        """
        names = tuple(posterior.names)
        for name in (f"offset_{instrument}", f"jitter_{instrument}"):
            if name not in names:
                raise InformationError(
                    f"the posterior of {posterior.target!r} has no {name!r}; pick one of its "
                    f"instruments {tuple(posterior.model.instruments)}."
                )
        n_pl = int(posterior.model.n_planets)
        n_s = posterior.samples.shape[0]
        cols = {  # (n_samples, 0) for a model with no planet: offset and jitter alone
            q: np.column_stack([posterior.param(f"{q}_{i}") for i in range(1, n_pl + 1)])
            if n_pl else np.zeros((n_s, 0))
            for q in ("period", "semi_amplitude", "eccentricity", "omega", "time_periastron")
        }
        trend = posterior.param("trend") if "trend" in names else None
        return cls.from_parameters(
            cols["period"], cols["semi_amplitude"], cols["eccentricity"], cols["omega"],
            cols["time_periastron"], posterior.param(f"offset_{instrument}"),
            posterior.param(f"jitter_{instrument}"), trend=trend,
            t_ref=float(posterior.model.t_ref), tolerance=tolerance)

    def velocities(self, bjd, exact=False):
        """Predicted velocity of every sample at every time.

        Parameters
        ----------
        bjd : array_like, shape (n_times,)
            Times, BJD_TDB [d].
        exact : bool, optional
            Solve Kepler's equation for every sample and time instead of interpolating.

        Returns
        -------
        v : ndarray, shape (n_samples, n_times)
            Velocities [m/s], offset and trend included. Stored time-major (the transpose is
            C-contiguous), the layout the entropy core reads fastest.
        """
        t = np.array(bjd, dtype=float, ndmin=1)
        if t.ndim != 1 or not np.all(np.isfinite(t)):
            raise InformationError("bjd must be a finite 1-D array of BJD_TDB times.")
        out = np.empty((t.size, self.n_samples))  # time-major; the transpose is returned
        has_trend = bool(np.any(self.trend != 0))
        step = max(1, _CACHE_FLOATS // max(self.n_samples, 1))
        for a in range(0, t.size, step):
            tb = t[a : a + step]
            block = out[a : a + step]
            tables = self._tables
            if not exact and tables and tables[0].with_offset:
                first = tables[0]
                # The first planet's table carries the offset: its values fill the block.
                _hermite(tb, self.period[:, 0], self.time_periastron[:, 0], first, out=block)
                tables = tables[1:]
            else:
                block[:] = self.offset
            if has_trend:
                block += (tb - self.t_ref)[:, None] * self.trend
            for tab in tables:
                self._add_planet(block, tb, tab, exact)
        return out.T

    def _add_planet(self, block, tb, tab, exact):
        """Add one planet's velocities at times `tb` to `block` (n_times, n_samples)."""
        pl = tab.planet
        if exact:
            block += radial_velocity(
                tb[:, None], self.period[:, pl], self.semi_amplitude[:, pl],
                self.eccentricity[:, pl], self.omega[:, pl], self.time_periastron[:, pl])
            return
        rows = tab.rows
        sel = slice(None) if rows is None else rows
        v = _hermite(tb, self.period[sel, pl], self.time_periastron[sel, pl], tab)
        if rows is None:
            block += v
        else:
            block[:, rows] += v
        r = tab.exact_rows
        if r.size:
            block[:, r] += radial_velocity(
                tb[:, None], self.period[r, pl], self.semi_amplitude[r, pl],
                self.eccentricity[r, pl], self.omega[r, pl], self.time_periastron[r, pl])


def _hermite(t, period, tp, tab, out=None):
    """Evaluate a planet's tables at times t -> (n_t, n_rows), time-major (into `out`)."""
    x = t[:, None] - tp
    x *= 1.0 / period  # orbital phase, any revolution
    x -= np.floor(x)
    x *= tab.nodes  # node units within one revolution
    k = np.floor(x)
    x -= k  # position inside the interval, [0, 1)
    k += tab.start  # each row's table begins at its own offset in the flat arrays
    idx = k.astype(np.intp)
    # One gather of each interval's four coefficients (adjacent in memory); take is far
    # faster than fancy indexing, and one row gather far faster than four separate ones.
    c = np.take(tab.coef, idx, axis=0)
    v = c[..., 3] * x
    v += c[..., 2]
    v *= x
    v += c[..., 1]
    v *= x
    return np.add(v, c[..., 0], out=out)
