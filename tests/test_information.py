"""Expected information of one visit, of sets and of one more visit, against closed forms."""

import math

import numpy as np
import pytest
from scipy.stats import norm

from planner.information.gain import (
    InformationError,
    JointEstimate,
    conditional_bits,
    joint_bits,
    noise_entropy_bits,
    one_visit_bits,
)
from planner.information.predict import Predictor
from planner.information.update import importance_weights
from tests.test_entropy import quad_entropy_bits


def gaussian_quantile_samples(n, tau):
    """Deterministic samples whose empirical law is very close to Normal(0, tau^2)."""
    return tau * norm.ppf((np.arange(n) + 0.5) / n)


def whitened_normal(rng, n, dim):
    """Samples of a standard normal whitened to sample mean 0 and sample covariance I exactly."""
    z = rng.standard_normal((n, dim))
    z -= z.mean(axis=0)
    chol = np.linalg.cholesky(np.cov(z, rowvar=False, bias=True))
    return z @ np.linalg.inv(chol).T


@pytest.mark.parametrize("tau,sigma", [(0.3, 1.0), (3.0, 1.0), (20.0, 2.0), (1.0, 5.0)])
def test_one_visit_linear_gaussian_closed_form(tau, sigma):
    # Closed form (Lindley 1956; textbook Bayesian design): a Gaussian predictive of variance
    # tau^2 with noise sigma gives 0.5 log2(1 + tau^2 / sigma^2) bits. Goal: within 0.01 bit.
    v = gaussian_quantile_samples(2000, tau)[:, None]
    assert one_visit_bits(v, sigma)[0] == pytest.approx(
        0.5 * math.log2(1 + tau**2 / sigma**2), abs=0.01)


def test_joint_linear_gaussian_closed_form(rng):
    # Closed form: I(S) = 0.5 log2 det(I + Sigma / sigma^2) for a linear-Gaussian model
    # (Lindley 1956; textbook Bayesian design). Held to 4 standard errors plus 0.01 bit (the
    # residual lumpiness of a 10,000-sample posterior).
    theta = whitened_normal(rng, 10000, 2)
    t = np.array([0.0, 0.13, 0.4, 0.41, 0.77, 0.9])
    design = 4.0 * np.column_stack([np.cos(2 * np.pi * t), 0.6 * np.sin(2 * np.pi * t)])
    v = theta @ design.T
    sigma = 1.5
    for k in (1, 3, 6):
        cov = design[:k] @ design[:k].T
        exact = 0.5 * math.log2(np.linalg.det(np.eye(k) + cov / sigma**2))
        est = joint_bits(v[:, :k], sigma, rng, n_outcomes=1024)
        assert isinstance(est, JointEstimate) and est.stderr > 0
        assert abs(est.bits - exact) <= 4 * est.stderr + 0.01


def test_conditional_linear_gaussian_closed_form(rng):
    # Closed form: I(t | S) = 0.5 log2 [det(I + Sigma_{S+t}/s^2) / det(I + Sigma_S/s^2)]
    # (chain rule of mutual information, Cover and Thomas 2006, eq. 2.62; from memory).
    theta = whitened_normal(rng, 6000, 2)
    t = np.array([0.0, 0.05, 0.3, 0.1, 0.55, 0.8])
    design = 3.0 * np.column_stack([np.cos(2 * np.pi * t), np.sin(2 * np.pi * t)])
    v = theta @ design.T
    sigma = 1.0
    got, err = conditional_bits(v[:, :2], sigma, v[:, 2:], sigma, rng, n_outcomes=96,
                                return_stderr=True)
    base = np.linalg.det(np.eye(2) + design[:2] @ design[:2].T)
    for j in range(4):
        rows = [0, 1, 2 + j]
        exact = 0.5 * math.log2(np.linalg.det(np.eye(3) + design[rows] @ design[rows].T) / base)
        assert abs(got[j] - exact) <= 4 * err[j] + 0.01


def test_identical_predictions_give_zero(rng):
    # Closed form: if every sample predicts the same velocity, a measurement tells nothing.
    v = np.full((500, 4), 17.3)
    np.testing.assert_allclose(one_visit_bits(v, 1.0), 0.0, atol=1e-6)
    assert joint_bits(v, 1.0, rng).bits == pytest.approx(0.0, abs=1e-6)


def test_never_negative_and_falls_with_sigma(rng):
    # Facts of the method (mutual information is non-negative and, for added independent
    # noise, decreasing in the noise level: data-processing inequality, Cover and Thomas 2006).
    v = np.column_stack([rng.normal(0, s, 800) for s in (0.01, 0.5, 3.0)]
                        + [np.r_[rng.normal(-40, 1, 400), rng.normal(40, 1, 400)]])
    last = None
    for sigma in (0.3, 0.6, 1.2, 2.5, 5.0, 10.0):
        bits = one_visit_bits(v, sigma)
        assert np.all(bits >= 0)
        if last is not None:
            assert np.all(bits <= last + 1e-6)
        last = bits


def test_bimodal_period_predictive_against_quadrature():
    # Reference: scipy.integrate.quad of the mixture entropy, minus the closed-form noise
    # entropy. Two period modes (aliases) make the predictive bimodal over ~2K with sigma 1.
    n = 400
    rng = np.random.default_rng(5)
    period = np.r_[rng.normal(3.0, 1e-4, n // 2), rng.normal(1.5, 1e-4, n // 2)]
    pred = Predictor.from_parameters(period, 60.0, 0.1, 0.4, 2460000.0 + rng.normal(0, 1e-3, n),
                                     offset=0.0, jitter=0.0)
    t = np.array([2460000.3, 2460000.9, 2460001.6])
    v = pred.velocities(t)
    got = one_visit_bits(v, 1.0)
    for j in range(t.size):
        exact = quad_entropy_bits(v[:, j], 1.0) - 0.5 * math.log2(2 * math.pi * math.e)
        assert got[j] == pytest.approx(exact, abs=2e-3)


def test_per_sample_sigma_against_quadrature():
    # Reference: scipy.integrate.quad; per-sample jitter makes every component's width differ.
    rng = np.random.default_rng(8)
    v = rng.normal(0, 4, (150, 1))
    sig = np.sqrt(1.0 + rng.uniform(0, 3, (150, 1)) ** 2)
    exact = quad_entropy_bits(v[:, 0], sig[:, 0] ** 2) - np.mean(
        0.5 * np.log2(2 * np.pi * np.e * sig[:, 0] ** 2))
    assert one_visit_bits(v, sig)[0] == pytest.approx(exact, abs=2e-3)


def keplerian_samples(rng, n=1500):
    period = rng.normal(9.0, 0.3, n)
    return Predictor.from_parameters(period, rng.normal(12, 2, n), np.abs(rng.normal(0.2, 0.08, n)),
                                     rng.normal(1.0, 0.4, n), 2460000 + rng.normal(0, 0.5, n),
                                     offset=rng.normal(0, 0.5, n), jitter=1.0)


def test_joint_single_visit_agrees_with_one_visit(rng):
    # Cross-check of the two estimators on the same quantity (both checked against closed forms
    # above): within 4 standard errors of the Monte Carlo estimate.
    pred = keplerian_samples(rng)
    v = pred.velocities(np.array([2460003.2, 2460010.1]))
    sig = np.sqrt(1.5**2 + pred.jitter**2)[:, None]
    one = one_visit_bits(v, sig)
    for j in range(2):
        est = joint_bits(v[:, [j]], sig, rng, n_outcomes=2048)
        assert abs(est.bits - one[j]) <= 4 * est.stderr + 1e-3


def test_submodular_within_mc_error(rng):
    # Krause and Guestrin (2005): mutual information with conditionally independent noise is
    # submodular, so I(S + t) - I(S) <= I(t). Checked on random sets within 4 standard errors.
    pred = keplerian_samples(rng, 1200)
    times = 2460000 + np.sort(rng.uniform(0, 30, 12))
    v = pred.velocities(times)
    sig = 2.0
    single = one_visit_bits(v, sig)
    for _ in range(4):
        pick = rng.choice(times.size, size=4, replace=False)
        s, t = pick[:3], pick[3]
        with_t = joint_bits(v[:, pick], sig, rng, n_outcomes=1024)
        without = joint_bits(v[:, s], sig, rng, n_outcomes=1024)
        gain = with_t.bits - without.bits
        assert gain <= single[t] + 4 * math.hypot(with_t.stderr, without.stderr)


def test_one_bit_halves_the_posterior_volume(rng):
    # Fact of the trade the method rests on: for a Gaussian prior and posterior,
    # I = 0.5 log2(det Sigma_prior / det Sigma_post); with uncorrelated parameters this is
    # log2 of the ratio of the standard-deviation products, so one bit halves the volume.
    # theta ~ N(0, diag(1, 4)) and d = theta_1 + noise with sigma^2 = 1/3 give exactly 1 bit
    # (conjugate Gaussian update: posterior variance of theta_1 = 1 / (1 + 3) = 1/4).
    theta = whitened_normal(rng, 4000, 2) * np.array([1.0, 2.0])
    sigma = math.sqrt(1.0 / 3.0)
    bits = one_visit_bits(theta[:, :1], sigma)[0]
    post_sd = np.array([math.sqrt(1 / (1 + 1 / sigma**2)), 2.0])
    assert math.log2(np.prod([1.0, 2.0]) / np.prod(post_sd)) == pytest.approx(1.0, abs=1e-12)
    assert bits == pytest.approx(1.0, abs=0.01)
    # The same from reweighted samples: mean over outcomes of 0.5 log2 det ratio (the posterior
    # covariance of a linear-Gaussian model does not depend on the outcome).
    ratios = []
    for _ in range(40):
        y = theta[rng.integers(theta.shape[0]), 0] + sigma * rng.standard_normal()
        w, _ = importance_weights(-0.5 * (y - theta[:, 0]) ** 2 / sigma**2)
        cov = np.cov(theta, rowvar=False, aweights=w, bias=True)
        ratios.append(0.5 * math.log2(np.linalg.det(np.cov(theta, rowvar=False, bias=True))
                                      / np.linalg.det(cov)))
    assert np.mean(ratios) == pytest.approx(1.0, abs=0.05)


@pytest.mark.slow
def test_expected_information_is_mean_realised_kl(rng):
    # Lindley (1956): the expected information equals the mean, over outcomes drawn from the
    # predictive, of KL(reweighted posterior || posterior). On the sample posterior the KL of
    # weights w is sum_i w_i log2(N w_i), exact.
    pred = keplerian_samples(rng, 2000)
    t = np.array([2460004.0, 2460011.5])
    v = pred.velocities(t)
    sig = 2.0
    expect = one_visit_bits(v, sig)
    for j in range(t.size):
        kls = []
        for _ in range(3000):
            i = rng.integers(v.shape[0])
            y = v[i, j] + sig * rng.standard_normal()
            w, _ = importance_weights(-0.5 * (y - v[:, j]) ** 2 / sig**2)
            kls.append(np.sum(w * np.log2(np.maximum(w * w.size, 1e-300))))
        kls = np.asarray(kls)
        assert abs(kls.mean() - expect[j]) <= 4 * kls.std(ddof=1) / math.sqrt(kls.size)


def test_noise_entropy_closed_form():
    # Closed form: mean over samples of 0.5 log2(2 pi e sigma_i^2).
    sig = np.array([[1.0], [2.0], [4.0]])
    got = noise_entropy_bits(sig, (3, 2))
    np.testing.assert_allclose(got, np.mean(0.5 * np.log2(2 * np.pi * np.e * sig[:, 0] ** 2)))


def test_deterministic_for_a_given_rng():
    v = np.random.default_rng(1).normal(0, 3, (300, 3))
    a = joint_bits(v, 1.0, np.random.default_rng(7))
    b = joint_bits(v, 1.0, np.random.default_rng(7))
    assert a == b


@pytest.mark.parametrize(
    "call",
    [
        lambda r: one_visit_bits(np.zeros(4), 1.0),
        lambda r: one_visit_bits(np.zeros((4, 2)), 0.0),
        lambda r: one_visit_bits(np.zeros((4, 2)), np.ones(3)),
        lambda r: joint_bits(np.zeros((4, 2)), 1.0, r, n_outcomes=1),
        lambda r: conditional_bits(np.zeros((4, 1)), 1.0, np.zeros((5, 2)), 1.0, r),
    ],
)
def test_bad_input_is_one_clear_error(call, rng):
    with pytest.raises(InformationError):
        call(rng)
