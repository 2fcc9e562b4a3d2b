"""The Gaussian-mixture entropy core against quadrature and closed forms."""

import math

import numpy as np
import pytest
from scipy import integrate
from scipy.special import logsumexp

from planner.information.entropy import InformationError, mixture_entropy_bits


def quad_entropy_bits(x, var, w=None):
    """Brute-force reference: scipy.integrate.quad of -f log f over the mixture's support."""
    x = np.asarray(x, float)
    var = np.broadcast_to(np.asarray(var, float), x.shape)
    w = np.ones_like(x) if w is None else np.asarray(w, float)
    logw = np.log(w / w.sum())
    lognorm = -0.5 * np.log(2 * np.pi * var)

    def integrand(y):
        lf = logsumexp(logw + lognorm - 0.5 * (y - x) ** 2 / var)
        return -math.exp(lf) * lf

    sd = np.sqrt(var)
    # Integrate piecewise over the union of +-10 sd intervals around the components.
    order = np.argsort(x)
    lo, hi = (x - 10 * sd)[order], (x + 10 * sd)[order]
    pieces, start, end = [], lo[0], hi[0]
    for s, e in zip(lo, hi, strict=True):
        if s > end:
            pieces.append((start, end))
            start = s
        end = max(end, e)
    pieces.append((start, end))
    total = 0.0
    for s, e in pieces:
        grid = np.linspace(s, e, max(2, int((e - s) / sd.min()) // 2 + 2))
        for g0, g1 in zip(grid[:-1], grid[1:], strict=True):
            total += integrate.quad(integrand, g0, g1, epsabs=1e-12, epsrel=1e-10)[0]
    return total / math.log(2)


CASES = {
    # name: (centres, component variances) -- generated from a fixed seed
    "narrow": lambda r, n: (r.normal(0, 0.3, n), 1.0),
    "wide": lambda r, n: (r.normal(0, 5, n), 1.0),
    "two modes": lambda r, n: (np.r_[r.normal(-200, 2, n // 2), r.normal(250, 1, n // 2)], 1.0),
    "per-sample variance": lambda r, n: (r.normal(0, 3, n), r.uniform(0.5, 9, n)),
    "pure scale mixture": lambda r, n: (r.normal(0, 0.01, n), r.uniform(1, 4, n)),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_matches_quadrature(name):
    # Reference: adaptive quadrature (scipy.integrate.quad) of the exact mixture density.
    # Goal in the issue: 0.01 bit; the estimator is held to 1e-3 bit here (measured <= 3e-4).
    rng = np.random.default_rng(11)
    x, var = CASES[name](rng, 120)
    v = np.asarray(var, float)
    got = mixture_entropy_bits(x[:, None], v[:, None] if v.ndim else v)[0, 0]
    assert got == pytest.approx(quad_entropy_bits(x, var), abs=1e-3)


def test_weighted_matches_quadrature():
    # Reference: scipy.integrate.quad on the weighted mixture.
    rng = np.random.default_rng(12)
    x = rng.normal(0, 4, 150)
    w = rng.gamma(0.5, 1.0, 150)
    got = mixture_entropy_bits(x[:, None], 2.0, weights=w[:, None])[0, 0]
    assert got == pytest.approx(quad_entropy_bits(x, 2.0, w), abs=1e-3)


def test_single_gaussian_closed_form():
    # Closed form: a Gaussian's entropy is 0.5 log2(2 pi e sigma^2) (Cover and Thomas 2006,
    # Elements of Information Theory, eq. 8.9; from memory).
    x = np.zeros((50, 3))
    sig2 = np.array([0.01, 1.0, 900.0])
    got = mixture_entropy_bits(x, 0.0, sig2[None, :])[0]
    np.testing.assert_allclose(got, 0.5 * np.log2(2 * np.pi * np.e * sig2), atol=1e-6)


def test_separated_modes_are_additive_without_a_huge_grid():
    # Closed form for non-overlapping components: H = sum_c w_c H_c - sum_c w_c log2 w_c
    # (grouping property of entropy, Cover and Thomas 2006, ch. 2; from memory). Modes 20 km/s
    # apart with sigma 0.5 m/s would need 160,000 bins without gap compression.
    n = np.array([300, 100, 600])
    centres = np.repeat([-12000.0, 0.0, 8000.0], n)
    w = n / n.sum()
    expect = 0.5 * np.log2(2 * np.pi * np.e * 0.25) - np.sum(w * np.log2(w))
    got = mixture_entropy_bits(centres[:, None], 0.25)[0, 0]
    assert got == pytest.approx(expect, abs=1e-6)


def test_extra_variance_rows_equal_folded_variance():
    # Consistency of the sharing route: a row of extra variance equals that variance added to
    # every component (the Gaussian convolution identity N(a) * N(b) = N(a + b)).
    rng = np.random.default_rng(3)
    x = rng.normal(0, 3, (400, 5))
    jit2 = rng.uniform(0.5, 3.0, (400, 1))
    extra = np.array([[1.0] * 5, [4.0] * 5])
    shared = mixture_entropy_bits(x, jit2, extra)
    for row in range(2):
        alone = mixture_entropy_bits(x, jit2 + extra[row, 0])[0]
        np.testing.assert_allclose(shared[row], alone, atol=2e-4)


def test_nan_marks_unwanted():
    x = np.zeros((10, 3))
    extra = np.array([[1.0, np.nan, 2.0]])
    got = mixture_entropy_bits(x, 0.0, extra)
    assert np.isnan(got[0, 1]) and np.all(np.isfinite(got[0, [0, 2]]))


@pytest.mark.parametrize(
    "kwargs",
    [
        {"centers": np.zeros(5)},
        {"centers": np.full((4, 2), np.nan)},
        {"centers": np.zeros((4, 2)), "variance": np.zeros((3, 2))},
        {"centers": np.zeros((4, 2)), "variance": 0.0},
        {"centers": np.zeros((4, 2)), "variance": -1.0},
    ],
)
def test_bad_input_is_one_clear_error(kwargs):
    with pytest.raises(InformationError):
        mixture_entropy_bits(**kwargs)


def test_per_element_variance_matches_quadrature():
    # Reference: scipy.integrate.quad; every (sample, column) has its own width, the general
    # route (no per-sample or per-column structure to exploit).
    rng = np.random.default_rng(21)
    x = rng.normal(0, 3, (120, 2))
    var = rng.uniform(0.5, 6.0, (120, 2))
    got = mixture_entropy_bits(x, var)[0]
    for j in range(2):
        assert got[j] == pytest.approx(quad_entropy_bits(x[:, j], var[:, j]), abs=1e-3)


def test_separated_modes_with_per_sample_widths_and_weights():
    # Grouping property again (Cover and Thomas 2006; from memory): far-apart clusters with
    # their own widths and weights; each cluster's entropy from the estimator on its own.
    rng = np.random.default_rng(31)
    parts = [rng.normal(c, 2.0, n) for c, n in ((-9000.0, 200), (0.0, 300), (15000.0, 100))]
    var = [rng.uniform(0.3, 4.0, p.size) for p in parts]
    w = [rng.uniform(0.5, 1.5, p.size) for p in parts]
    mass = np.array([x.sum() for x in w]) / sum(x.sum() for x in w)
    alone = [mixture_entropy_bits(p[:, None], v[:, None], weights=q[:, None])[0, 0]
             for p, v, q in zip(parts, var, w, strict=True)]
    expect = np.sum(mass * alone) - np.sum(mass * np.log2(mass))
    x, v, q = (np.concatenate(a)[:, None] for a in (parts, var, w))
    order = rng.permutation(x.shape[0])
    got = mixture_entropy_bits(x[order], v[order], weights=q[order])[0, 0]
    assert got == pytest.approx(expect, abs=1e-4)


def test_last_chunk_of_one_column_with_per_column_variances():
    # Regression: with per-(sample, column) component variances, a chunk holding a single
    # column must get its own variance-node split. Reference: each column computed on its
    # own, which takes the single-column path (the mixture entropy of a column does not
    # depend on the other columns).
    from planner.information.entropy import mixture_entropy_bits

    gen = np.random.default_rng(5)
    n_s, n_c = 2000, 33  # 2000 centres -> 32 columns per chunk, so the last chunk holds one
    centers = gen.normal(0.0, 5.0, (n_s, n_c))
    variance = gen.uniform(0.5, 9.0, (n_s, n_c))
    together = mixture_entropy_bits(centers, variance, np.ones(n_c))
    alone = [mixture_entropy_bits(centers[:, [c]], variance[:, [c]], np.ones(1))[..., 0]
             for c in (0, n_c - 1)]
    np.testing.assert_allclose(np.ravel(together)[[0, n_c - 1]], np.ravel(alone), atol=1e-9)
