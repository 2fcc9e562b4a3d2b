"""Differential entropy of one-dimensional Gaussian mixtures, deterministic and batched.

The mixture of a column is ``sum_i w_i Normal(x_i, v_i + a)``: centres ``x_i`` (one per
posterior sample), a component variance ``v_i`` (e.g. the sample's jitter squared) and an
extra variance ``a`` common to all components (e.g. the measurement noise of one exposure
option). Many columns (grid times) and several extra variances per column (exposure options)
are done at once, and the binned centres of a column are shared between its extra variances.

Method (documented with measured errors in ``docs/information.md``):

1. Centres are spread onto a regular grid of width ``h = bin_fraction * sigma_min`` by
   cloud-in-cell assignment. Cloud-in-cell keeps each component's mean and adds the known
   variance ``h^2 u (1 - u)`` (``u`` the fractional grid position), which is taken off the
   component's own variance, so every component keeps its exact mean and variance on the grid.
2. Component variances that differ between samples are spread onto a few variance nodes by
   linear interpolation in variance (again keeping each component's variance exactly).
3. Each node's histogram is convolved with its Gaussian by FFT, using the Gaussian's exact
   Fourier transform; the extra variance is one more Gaussian factor in Fourier space.
4. The entropy is the Riemann sum ``-sum p log p + log h`` of the gridded density.
5. Voids (empty stretches) between sorted centres wider than ``VOID_SIGMAS`` total standard
   deviations are shrunk to that width before gridding: components that far apart do not
   overlap, and the entropy of non-overlapping parts depends only on their weights and shapes
   (H = sum_c w_c H_c - sum_c w_c log w_c), not on the distance between them. Widely
   separated modes need no huge grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from planner.errors import PlannerError

__all__ = ["LN2", "VOID_SIGMAS", "InformationError", "mixture_entropy_bits"]

#: Gaps between sorted centres wider than this many standard deviations are shrunk to it.
VOID_SIGMAS = 14.0
#: Grid padding beyond the outermost centres, in the largest total standard deviation.
_PAD_SIGMAS = 7.0
#: Columns needing more bins than this are sorted and their voids shrunk first.
_COMPRESS_BINS = 3072
#: Largest ratio between neighbouring total-variance nodes.
_NODE_RATIO = 1.35
#: Up to this ratio of largest to smallest total variance one node (the weighted mean) is used.
_ONE_NODE_RATIO = 1.02
#: Ratio between rungs of the ladder onto which each column's smallest extra variance is
#: rounded down (a quarter octave): its bin width is at most 9 % finer than its own would be.
_LADDER = 2.0**0.25
#: Floats held by one batch of histograms or spectra (about 64 MB).
_CHUNK_FLOATS = 1 << 23
#: Centres handled per chunk, so that the per-sample temporaries stay in cache.
_CACHE_FLOATS = 1 << 16
#: ln 2: nats per bit.
LN2 = math.log(2.0)


class InformationError(PlannerError):
    """Inputs to an information computation are inconsistent or out of range."""


def _fft_sizes():
    sizes = set()
    p = 16
    while p <= 1 << 24:
        sizes.add(p)
        sizes.add(3 * p // 2)
        p *= 2
    return np.array(sorted(sizes))


_SIZES = _fft_sizes()


def _as_columns(name, value, shape):
    arr = np.asarray(value, dtype=float)
    try:
        return np.broadcast_to(arr, shape)
    except ValueError:
        raise InformationError(
            f"{name} of shape {arr.shape} does not broadcast to the centres' shape {shape}; "
            "pass one value per sample and column, or a shape that broadcasts to it."
        ) from None


def _shrink_voids(x, sd_max):
    """Return the columns of `x` sorted, with voids wider than VOID_SIGMAS sd shrunk, and order."""
    order = np.argsort(x, axis=0)
    xs = np.take_along_axis(x, order, axis=0)
    excess = np.maximum(np.diff(xs, axis=0) - VOID_SIGMAS * sd_max[None, :], 0.0)
    xs[1:] -= np.cumsum(excess, axis=0)
    return xs, order


def _nodes(v_lo, v_hi, floor):
    """Component-variance nodes, geometric in (v + floor), neighbours at most _NODE_RATIO apart."""
    ratio = (v_hi + floor) / (v_lo + floor)
    if ratio <= _ONE_NODE_RATIO:
        return None
    n = int(math.ceil(math.log(ratio) / math.log(_NODE_RATIO))) + 1
    return (v_lo + floor) * ratio ** (np.arange(n) / (n - 1)) - floor


def _node_split(comp, nodes, floor):
    """Lower variance node and its share for each component variance (same shape as `comp`)."""
    n_nodes = nodes.size
    s = np.log((comp + floor) / (nodes[0] + floor)) / math.log(
        (nodes[1] + floor) / (nodes[0] + floor))
    k = np.clip(np.floor(s + 1e-9).astype(np.int64), 0, n_nodes - 2)
    v0, v1 = nodes[k], nodes[k + 1]
    return k, np.clip((v1 - comp) / (v1 - v0), 0.0, 1.0)  # share of the lower node


def _chunk_entropy(x, comp, w, extra, h, lo, size, nodes, split):
    """Entropies [nats] of the columns of one chunk, all on grids of `size` bins of width `h`.

    Time-major layout: x : (n_c, n_s) centres; comp : (1, n_s) or (n_c, n_s) component
    variances, or None (zero); w : (1, n_s) or (n_c, n_s) normalised weights, or None (equal);
    extra : (n_q, n_c) with NaN where not wanted; h : the chunk's bin width; lo : (n_c,) the
    columns' centre of range; nodes : variance nodes, or None (one node); split : (k, lam) from
    `_node_split` for these components when there are nodes (lam may have more rows than the
    chunk: the first n_c are used).
    """
    n_c, n_s = x.shape
    n_nodes = 1 if nodes is None else nodes.size
    # Grid position; each column's (and each variance node's) block offset is added before the
    # floor as an exact integer-valued float, so one floor gives the flat histogram index.
    inv_h = 1.0 / h
    pos = x * inv_h
    pos += (np.arange(n_c) * (n_nodes * size) + 0.5 * size - lo * inv_h)[:, None]
    if nodes is not None:
        pos += split[0] * size
    cell = np.floor(pos)
    u = pos
    u -= cell  # fractional position in [0, 1)
    idx = cell.astype(np.int64).ravel()
    total = n_c * n_nodes * size
    # Weight q_i per component (equal weights: 1/n_s, applied at the end). With cloud-in-cell
    # a component puts q (1 - u) on its cell and q u on the next: hist = A - B + shift(B), with
    # A = sum of q per cell and B = sum of q u per cell.
    qu = u if w is None else w * u
    if w is None:
        a_tot = np.bincount(idx, minlength=total).astype(float)
    else:
        a_tot = np.bincount(idx, np.broadcast_to(w, x.shape).ravel(), total)
    b_tot = np.bincount(idx, qu.ravel(), total)
    # Variance cloud-in-cell adds, per column: sum_i q_i u_i (1 - u_i).
    cic = (qu.sum(axis=1) - np.einsum("ij,ij->i", qu, u)) * (h * h)
    if nodes is None:
        hist = a_tot - b_tot
        hist[1:] += b_tot[:-1]
    else:
        lam = split[1]
        lam = lam[:n_c] if lam.shape[0] >= n_c else np.broadcast_to(lam, x.shape)
        ql = lam if w is None else w * lam
        a_lo = np.bincount(idx, np.ascontiguousarray(ql).ravel(), total)
        b_lo = np.bincount(idx, (ql * u).ravel(), total)
        # Both nodes' cloud-in-cell histograms: the lower node's from its shares, the upper
        # node's as all minus lower, added one node block up.
        hist = a_lo - b_lo
        hist[1:] += b_lo[:-1]
        up = a_tot - b_tot
        up[1:] += b_tot[:-1]
        up -= hist
        hist[size:] += up[:-size]
    log_norm = 0.0
    if w is None:
        log_norm = -math.log(n_s)  # equal weights 1 / n_s, applied in the Gaussian factor
        cic /= n_s
    # Variance still to add to every component of a column, beyond its node's: the extra
    # variance, less what cloud-in-cell already spread (plus the mean component variance when
    # there is a single node).
    base = -cic
    if nodes is None and comp is not None:
        base += np.mean(comp, axis=1) if w is None else np.sum(w * comp, axis=1)
    n_f = size // 2 + 1
    scale = (-2.0 * math.pi**2 / (h * h)) * (np.arange(n_f) / size) ** 2  # (n_f,)
    if n_nodes > 1:
        # The chunk shares its bin width, so each node's Gaussian factor is shared by every
        # column; combined on the real view of the spectra (one float64 pass).
        spec = np.fft.rfft(hist.reshape(n_c, n_nodes, size), axis=-1)
        gauss = np.exp(np.maximum(nodes[:, None] * scale[None, :], -80.0))
        parts = spec.view(np.float64).reshape(n_c, n_nodes, n_f, 2)
        spec = np.einsum("cnfr,nf->cfr", parts, gauss).view(np.complex128)[..., 0]
    else:
        spec = np.fft.rfft(hist.reshape(n_c, size), axis=-1)
    out = np.full(extra.shape, np.nan)
    q_idx, c_idx = np.nonzero(np.isfinite(extra))
    step = max(1, _CHUNK_FLOATS // size)
    log_h = math.log(h)
    for a in range(0, q_idx.size, step):
        qi, ci = q_idx[a : a + step], c_idx[a : a + step]
        # The Gaussian factor in float64: float32 rounding would put noise of about 1e-8 of
        # the peak into every empty bin, and p log p of that noise adds up on wide grids.
        expo = np.maximum(scale[None, :] * (extra[qi, ci] + base[ci])[:, None], -80.0)
        expo += log_norm
        p = np.fft.irfft(spec[ci] * np.exp(expo), n=size, axis=-1)
        np.maximum(p, 1e-30, out=p)
        logp = np.log(p.astype(np.float32))
        out[qi, ci] = log_h - np.einsum("qf,qf->q", p, logp, dtype=np.float64)
    return out


def _prepare(name, value, n_s, n_c):
    """Classify a broadcastable (n_s, n_c) input: None, per column, per sample or full."""
    if value is None:
        return "none", None
    arr = np.asarray(value, dtype=float)
    try:
        np.broadcast_shapes(arr.shape, (n_s, n_c))
    except ValueError:
        raise InformationError(
            f"{name} of shape {arr.shape} does not broadcast to the centres' shape "
            f"({n_s}, {n_c}); pass one value per sample and column, or a broadcastable shape."
        ) from None
    if not np.all(np.isfinite(arr)) or np.any(arr < 0):
        raise InformationError(
            f"{name} must be finite and non-negative; check the noise, jitter or weight inputs."
        )
    arr = arr.reshape((1,) * (2 - arr.ndim) + arr.shape) if arr.ndim < 2 else arr
    if arr.shape[0] == 1:
        return "column", np.broadcast_to(arr, (1, n_c))[0]
    if arr.shape[1] == 1 or np.all(arr == arr[:, :1]):
        return "sample", np.ascontiguousarray(arr[:, :1])
    return "full", arr


def mixture_entropy_bits(centers, variance=0.0, extra_variance=None, weights=None, *,
                         bin_fraction=0.5):
    """Entropy of one-dimensional Gaussian mixtures, one per column, in bits.

    Parameters
    ----------
    centers : ndarray, shape (n_samples, n_cols)
        Component means [m/s] (the samples' predicted velocities at each column's time).
    variance : array_like, broadcastable to (n_samples, n_cols), optional
        Component variances [m^2/s^2], >= 0 (e.g. each sample's jitter squared).
    extra_variance : array_like, shape (n_extra, n_cols) or (n_cols,), optional
        Variances [m^2/s^2] added to every component, one mixture per row (e.g. per exposure
        option); NaN marks a (row, column) not wanted. Default: a single row of zeros.
    weights : array_like, broadcastable to (n_samples, n_cols), optional
        Non-negative component weights, normalised per column. Default: equal weights.
    bin_fraction : float, optional
        Grid width as a fraction of the smallest total standard deviation of the column.

    Returns
    -------
    entropy : ndarray, shape (n_extra, n_cols)
        Differential entropy [bits]; NaN where `extra_variance` is NaN.

    Raises
    ------
    InformationError
        If shapes do not match, a value is not finite or negative, or a total variance is zero.

    Notes
    -----
    Cloud-in-cell binning and FFT convolution with exact moment bookkeeping; see the module
    docstring. Errors against adaptive quadrature are measured in ``tests/test_entropy.py``
    and ``docs/information.md`` (below 1e-4 bit for equal component variances).
    """
    x, extra = _checked_inputs(centers, extra_variance)
    n_s, n_c = x.shape
    extra, comp = _fold_variance(variance, extra, n_s, n_c)
    w = _column_weights(weights, n_s, n_c)
    out = np.full(extra.shape, np.nan)
    wanted = np.any(np.isfinite(extra), axis=0)
    if not np.any(wanted):
        return out
    grid = _grid_layout(x, comp, extra, wanted, bin_fraction)
    xt, ct, wt = _column_major(grid.x, comp, w, grid.order, grid.wide)
    _fill_chunks(out, xt, ct, wt, extra, wanted, grid)
    return out / LN2


def _checked_inputs(centers, extra_variance):
    """Check the centres and extra variances; return them as 2-D float arrays."""
    x = np.asarray(centers, dtype=float)
    if x.ndim != 2 or x.shape[0] < 1 or x.shape[1] < 1:
        raise InformationError(
            f"centers has shape {x.shape}; pass a 2-D array (n_samples, n_cols) of velocities."
        )
    x_max, x_min = x.max(axis=0), x.min(axis=0)  # NaN propagates: one finiteness check
    if not (np.all(np.isfinite(x_max)) and np.all(np.isfinite(x_min))):
        raise InformationError(
            "centers must be finite; remove NaN or infinite predicted velocities first."
        )
    n_c = x.shape[1]
    extra = np.zeros((1, n_c)) if extra_variance is None else np.array(
        extra_variance, dtype=float, ndmin=2)
    if extra.shape[1] != n_c or extra.ndim != 2:
        raise InformationError(
            f"extra_variance has shape {extra.shape}; pass (n_extra, {n_c}) values, one row "
            "per mixture and one column per centre column (NaN where not wanted)."
        )
    if np.any(extra[np.isfinite(extra)] < 0) or np.any(np.isinf(extra)):
        raise InformationError("extra_variance must be non-negative; check the noise inputs.")
    return x, extra


def _fold_variance(variance, extra, n_s, n_c):
    """Move what the components share into the extra variance: (extra, per-component or None)."""
    kind, comp = _prepare("variance", variance, n_s, n_c)
    if kind == "column":
        extra = extra + comp[None, :]
        comp = None
    elif kind == "full":
        # Fold what is common to a column into the extra variance; when what is left is the
        # same in every column (jitter^2 + sigma_t^2), it is a per-sample variance.
        col = comp.min(axis=0)
        comp = comp - col[None, :]
        extra = extra + col[None, :]
        if np.allclose(comp, comp[:, :1], rtol=0.0, atol=1e-9 * float(extra.max(initial=1.0))):
            comp = np.ascontiguousarray(comp[:, :1])
    elif kind == "sample":
        low = float(comp.min())
        comp = comp - low
        extra = extra + low
    if comp is not None and not np.any(comp > 0):
        comp = None
    return extra, comp


def _column_weights(weights, n_s, n_c):
    """Component weights normalised per column, or None for equal weights."""
    wkind, w = _prepare("weights", weights, n_s, n_c)
    if wkind == "column" or w is None:
        return None
    w_sum = w.sum(axis=0)
    if np.any(w_sum <= 0):
        raise InformationError(
            "every column needs a positive total weight; check the weights passed in."
        )
    return w / w_sum


@dataclass(frozen=True)
class _Grid:
    """Where each column's density grid lies: bins, rungs, compression and chunk size."""

    x: np.ndarray  # centres, sorted and void-shrunk in the `wide` columns
    level: np.ndarray  # (n_cols,) ladder rung of each column's smallest extra variance
    h: np.ndarray  # (n_cols,) bin width [m/s]
    n_bins: np.ndarray  # (n_cols,) bins needed
    mid: np.ndarray  # (n_cols,) grid centre [m/s]
    wide: np.ndarray  # indices of the void-shrunk columns
    order: np.ndarray | None  # the sort order of the wide columns' centres
    c_top: float  # largest per-component variance left (0 when none)
    per_chunk: int  # columns per chunk
    has_comp: bool


def _grid_layout(x, comp, extra, wanted, bin_fraction) -> _Grid:
    """Each column's bin width, bin count and centre, shrinking wide voids."""
    n_s = x.shape[0]
    x_max, x_min = x.max(axis=0), x.min(axis=0)
    e_min = np.where(wanted, np.nanmin(np.where(np.isfinite(extra), extra, np.inf), axis=0), 0.0)
    e_max = np.where(wanted, np.nanmax(np.where(np.isfinite(extra), extra, -np.inf), axis=0), 0.0)
    if np.any(e_min[wanted] <= 0):
        raise InformationError(
            "a total noise variance is zero; every velocity needs a positive noise (measurement "
            "error or jitter), so give the exposure's sigma or a jitter above zero."
        )
    e_min = np.where(wanted, e_min, 1.0)  # columns not wanted: any positive placeholder
    # Each column's smallest extra variance, rounded down onto a geometric ladder, sets its bin
    # width and variance nodes. Both then depend on the column alone (not on which columns
    # share the call), and neighbouring columns on one rung share their Gaussian factors.
    # (A variance on a rung, up to rounding, stays on it.)
    level = np.floor(np.log(e_min) / math.log(_LADDER) + 1e-9).astype(np.int64)
    e_rung = _LADDER ** level.astype(float)
    c_max = 0.0 if comp is None else comp.max(axis=0)
    sd_max = np.sqrt(c_max + e_max)
    h = bin_fraction * np.sqrt(e_rung)
    span = x_max - x_min
    n_bins = (span + 2 * _PAD_SIGMAS * sd_max) / h + 2
    wide = np.flatnonzero(wanted & (n_bins > _COMPRESS_BINS))
    order = None
    if wide.size:
        x = np.array(x)
        x[:, wide], order = _shrink_voids(x[:, wide], sd_max[wide])
        span[wide] = x[:, wide].max(axis=0) - x[:, wide].min(axis=0)
        n_bins[wide] = (span[wide] + 2 * _PAD_SIGMAS * sd_max[wide]) / h[wide] + 2
    c_top = 0.0 if comp is None else float(comp.max())
    # The most variance nodes any rung needs (the lowest rung's), for sizing the chunks.
    nodes = None if comp is None else _nodes(0.0, c_top, float(e_rung[wanted].min()))
    n_nodes = 1 if nodes is None else nodes.size
    mid = 0.5 * (x_max + x_min)
    if wide.size:
        mid[wide] = 0.5 * (x[-1, wide] + x[0, wide])  # sorted: last and first
    per_chunk = max(1, min(_CACHE_FLOATS // n_s, _CHUNK_FLOATS // (n_nodes * 4096)))
    return _Grid(x, level, h, n_bins, mid, wide, order, c_top, per_chunk, comp is not None)


def _column_major(x, comp, w, order, wide):
    """Centres, component variances and weights time-major, in the wide columns' sort order."""
    xt = np.ascontiguousarray(x.T)  # time-major: each column's centres contiguous
    ct = None if comp is None else np.ascontiguousarray(comp.T)
    wt = None if w is None else np.ascontiguousarray(w.T)
    if order is not None:
        ot = order.T
        if ct is not None and ct.shape[0] > 1:
            ct[wide] = np.take_along_axis(ct[wide], ot, axis=1)
        elif ct is not None:
            ct = np.array(np.broadcast_to(ct, xt.shape))
            ct[wide] = np.take_along_axis(ct[wide], ot, axis=1)
        if wt is not None and wt.shape[0] > 1:
            wt[wide] = np.take_along_axis(wt[wide], ot, axis=1)
        elif wt is not None:
            wt = np.array(np.broadcast_to(wt, xt.shape))
            wt[wide] = np.take_along_axis(wt[wide], ot, axis=1)
    return xt, ct, wt


def _fill_chunks(out, xt, ct, wt, extra, wanted, grid: _Grid) -> None:
    """Entropy [nats] of every wanted column into `out`, by chunks of one rung."""
    n_c = xt.shape[0]
    per_chunk, c_top = grid.per_chunk, grid.c_top
    rungs = {}  # per rung: its variance nodes and, when shared by every column, node shares

    def rung_nodes(lv):
        if lv not in rungs:
            floor = float(_LADDER**lv)
            nd = _nodes(0.0, c_top, floor)
            shared = None
            if nd is not None and ct.shape[0] == 1:
                # The same for every column: the node shares are tiled once for a chunk.
                k_low, lam = _node_split(ct, nd, floor)
                shared = (k_low, np.repeat(lam, min(per_chunk, n_c), axis=0))
            rungs[lv] = (nd, floor, shared)
        return rungs[lv]

    # Chunks: runs of consecutive wanted columns on one rung, at most per_chunk long.
    key = np.where(wanted, grid.level, np.iinfo(np.int64).min)
    edges = np.concatenate([[0], np.flatnonzero(np.diff(key)) + 1, [n_c]])
    for lo_run, hi_run in zip(edges[:-1], edges[1:], strict=True):
        if not wanted[lo_run]:
            continue
        nd, floor, shared = rung_nodes(int(grid.level[lo_run])) if grid.has_comp else (
            None, None, None)
        h_c = float(grid.h[lo_run])
        for a in range(int(lo_run), int(hi_run), per_chunk):
            c = slice(a, min(a + per_chunk, int(hi_run)))
            size = int(_SIZES[np.searchsorted(_SIZES, grid.n_bins[c].max())])
            cc = None if ct is None else (ct[c] if ct.shape[0] > 1 else ct)
            wc = None if wt is None else (wt[c] if wt.shape[0] > 1 else wt)
            sp = shared
            if nd is not None and sp is None:
                # Shares shared by every column need variances shared by every column; a
                # chunk of per-column variances needs its own.
                sp = _node_split(cc, nd, floor)
            out[:, c] = _chunk_entropy(xt[c], cc, wc, extra[:, c], h_c, grid.mid[c], size, nd,
                                       sp)
