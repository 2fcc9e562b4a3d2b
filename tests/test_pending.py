"""One-visit bits given executed visits whose velocities are not known yet."""

import numpy as np
import pytest

from planner.information.entropy import InformationError
from planner.information.pending import gaussian_share, pending_bits


def _linear_gaussian(rng, n_samples, times, prior_sd):
    """Velocities of a sinusoid of known period, v = a sin + b cos, (a, b) ~ N(0, prior_sd^2)."""
    theta = rng.normal(0.0, prior_sd, size=(n_samples, 2))
    design = np.stack([np.sin(2 * np.pi * times / 3.1), np.cos(2 * np.pi * times / 3.1)], 1)
    return theta @ design.T, design


def test_share_matches_the_linear_gaussian_closed_form():
    # Closed form (Lindley 1956; the linear-Gaussian measurement): with prior covariance P and
    # design rows x, the predictive variance given noisy visits S is
    # x (P^-1 + X_S^T N_S^-1 X_S)^-1 x^T, and I(t | S) = 0.5 log2(1 + var(t | S) / N_t).
    rng = np.random.default_rng(1)
    done_t, new_t = np.array([0.2, 0.9, 1.4]), np.linspace(0.0, 6.0, 25)
    prior_sd, noise = 5.0, 2.0**2
    v_all, design = _linear_gaussian(rng, 200_000, np.r_[done_t, new_t], prior_sd)
    v_set, v_new = v_all[:, :3], v_all[:, 3:]
    share = gaussian_share(v_set, np.full(3, noise), v_new, np.full(new_t.size, noise))
    prior = np.eye(2) * prior_sd**2
    xs, xn = design[:3], design[3:]
    post = np.linalg.inv(np.linalg.inv(prior) + xs.T @ xs / noise)
    before = 0.5 * np.log2(1 + np.einsum("ij,jk,ik->i", xn, prior, xn) / noise)
    after = 0.5 * np.log2(1 + np.einsum("ij,jk,ik->i", xn, post, xn) / noise)
    # Sample covariance of 200 000 draws: relative error of order 1/sqrt(n), 0.3 %.
    assert np.allclose(share, after / before, rtol=0.02, atol=1e-3)
    bits = np.full(new_t.size, 1.7)
    assert np.allclose(pending_bits(bits, v_set, np.full(3, noise), v_new,
                                    np.full(new_t.size, noise)), 1.7 * share)


def test_share_limits():
    rng = np.random.default_rng(2)
    v, _ = _linear_gaussian(rng, 4000, np.array([0.5, 0.5, 2.0]), 3.0)
    noise = np.ones(1)
    # Nothing executed: nothing is taken off.
    assert np.all(gaussian_share(v[:, :0], np.ones(0), v[:, 2:], noise) == 1.0)
    # The same time observed already with tiny noise leaves almost nothing.
    assert gaussian_share(v[:, :1], np.full(1, 1e-6), v[:, 1:2], noise)[0] < 1e-3
    # A constant prediction carries no information to share: the share stays 1.
    flat = np.zeros((4000, 1))
    assert gaussian_share(v[:, :1], noise, flat, noise)[0] == 1.0
    with pytest.raises(InformationError, match="positive"):
        gaussian_share(v[:, :1], np.zeros(1), v[:, 2:], noise)


def test_calibration_scales_the_lost_share():
    from planner.information.pending import calibrate_share

    share = np.array([0.9, 0.7, 0.5, 1.0])
    # The exact loss at the calibration times is twice the Gaussian one: every loss doubles.
    out = calibrate_share(share, share_at=np.array([0.9, 0.7]), exact_at=np.array([0.8, 0.4]))
    assert np.allclose(out, [0.8, 0.4, 0.0, 1.0])
    # Where the Gaussian loses nothing there is nothing to scale.
    assert np.array_equal(calibrate_share(share, np.ones(2), np.array([0.5, 0.5])), share)
    # The result stays a share, whatever the Monte Carlo values.
    wild = calibrate_share(share, np.array([0.99]), np.array([-0.5]))
    assert np.all((wild >= 0.0) & (wild <= 1.0))
