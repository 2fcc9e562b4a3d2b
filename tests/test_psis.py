"""Pareto k-hat and effective sample size against outside references.

References: scipy.stats.genpareto draws of a known shape (the quantity k-hat estimates), and
closed forms for a Gaussian target N(0, 1) weighted against a Gaussian proposal N(0, s^2):
- the weights' tail index is 1 / (1 - s^2), so k = 1 - s^2 for s < 1 (derived here: with
  w ~ exp(x^2 (1/s^2 - 1) / 2) and x ~ N(0, s^2), P(w > t) falls as t^(-1 / (1 - s^2)));
- Kish's ESS / n tends to 1 / E_q[w^2] = sqrt(2 - 1/s^2) / s for s^2 > 1/2 (the Gaussian
  integral of p^2 / q, derived here).
"""

import numpy as np
import pytest
from scipy import stats

from inference.psis import effective_sample_size, pareto_k_hat


@pytest.mark.parametrize("shape", [0.2, 0.5, 0.8, 1.2])
def test_k_hat_recovers_the_generalised_pareto_shape(shape):
    rng = np.random.default_rng(int(shape * 10))
    draws = stats.genpareto.rvs(shape, size=20000, random_state=rng)
    # The tail is the largest M = 3 sqrt(n) = 424 draws; the shape's asymptotic standard error
    # is (1 + k) / sqrt(M) (Smith 1985, Biometrika 72, 67; from memory): three of them.
    tol = 3 * (1 + shape) / np.sqrt(3 * np.sqrt(draws.size))
    assert pareto_k_hat(np.log(draws)) == pytest.approx(shape, abs=tol)


def test_k_hat_of_gaussian_weights_follows_the_closed_form_and_orders_proposals():
    rng = np.random.default_rng(4)
    got = []
    for s in (0.9, np.sqrt(0.5), 0.5):
        x = rng.normal(0.0, s, 100000)
        log_w = stats.norm.logpdf(x) - stats.norm.logpdf(x, 0.0, s)
        got.append(pareto_k_hat(log_w))
    # k = 1 - s^2: 0.19, 0.5, 0.75. The tail converges slowly (a log factor), so 0.12.
    np.testing.assert_allclose(got, [0.19, 0.5, 0.75], atol=0.12)
    assert got[0] < got[1] < got[2]


def test_effective_sample_size_matches_the_closed_form():
    rng = np.random.default_rng(5)
    s, n = 2.0, 200000
    x = rng.normal(0.0, s, n)
    log_w = stats.norm.logpdf(x) - stats.norm.logpdf(x, 0.0, s)
    assert effective_sample_size(log_w) / n == pytest.approx(np.sqrt(2 - 1 / s**2) / s, abs=0.01)
    assert effective_sample_size(np.zeros(50)) == pytest.approx(50.0)
    assert effective_sample_size(np.full(5, -np.inf)) == 0.0
    assert pareto_k_hat(np.zeros(5)) == np.inf  # too few weights to fit a tail
