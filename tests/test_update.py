"""New data: importance reweighting against the conjugate Gaussian update, and the refit route."""

import math
from dataclasses import dataclass

import numpy as np
import pytest

from inference.data import RVData
from planner.information.entropy import InformationError
from planner.information.update import (
    importance_weights,
    new_data_log_likelihood,
    systematic_resample,
    update_posterior,
)


def test_reweighting_matches_conjugate_gaussian_update(rng):
    # Closed form (conjugate normal model, e.g. Gelman et al. 2013, Bayesian Data Analysis,
    # eq. 2.12; from memory): prior N(mu0, tau0^2), n data with noise sigma give posterior
    # precision 1/tau0^2 + n/sigma^2 and mean (mu0/tau0^2 + sum y / sigma^2) / precision.
    mu0, tau0, sigma = 3.0, 2.0, 1.5
    theta = rng.normal(mu0, tau0, 40000)
    y = np.array([4.1, 3.2, 5.0])
    ll = np.sum(-0.5 * (y[None, :] - theta[:, None]) ** 2 / sigma**2, axis=1)
    w, ess = importance_weights(ll)
    prec = 1 / tau0**2 + y.size / sigma**2
    mean = (mu0 / tau0**2 + y.sum() / sigma**2) / prec
    got_mean = np.sum(w * theta)
    got_var = np.sum(w * (theta - got_mean) ** 2)
    # Statistical check, 5 standard errors of a weighted mean with this ESS.
    assert abs(got_mean - mean) < 5 * math.sqrt(1 / prec / ess)
    assert got_var == pytest.approx(1 / prec, rel=5 * math.sqrt(2 / ess))


def test_effective_sample_size_limits():
    # Kish (1965) effective sample size 1 / sum w^2: N for equal weights, 1 for one sample.
    assert importance_weights(np.zeros(100))[1] == pytest.approx(100.0)
    assert importance_weights(np.r_[0.0, np.full(99, -800.0)])[1] == pytest.approx(1.0)


def test_systematic_resample_counts(rng):
    # Kitagawa (1996): each index appears floor(N w) or ceil(N w) times.
    w = rng.dirichlet(np.ones(50))
    counts = np.bincount(systematic_resample(w, rng), minlength=50)
    assert np.all(counts >= np.floor(50 * w)) and np.all(counts <= np.ceil(50 * w))


@dataclass(frozen=True)
class ToyPosterior:
    """The part of inference.posterior.Posterior the update uses: a constant-velocity star."""

    target: str
    model: object
    names: tuple
    samples: np.ndarray
    log_likelihood: np.ndarray
    data_digest: str

    def predict(self, t, instrument):
        if instrument != "spec":
            raise ValueError("no such instrument")
        return np.repeat(self.samples[:, :1], np.size(t), axis=1)

    def jitter(self, instrument):
        return np.zeros(self.samples.shape[0])


def toy(rng, n=4000):
    theta = rng.normal(0.0, 5.0, (n, 1))
    return ToyPosterior("toy", None, ("offset_spec",), theta, np.zeros(n), "")


def data(values, err, start=2460000.0):
    v = np.asarray(values, float)
    return RVData.from_arrays(start + np.arange(v.size), v, np.full(v.size, err),
                              ["spec"] * v.size)


def test_weak_data_reweight_and_strong_data_refit(rng):
    old = data([1.0], 5.0)
    post = toy(rng)
    calls = []

    def fake_fit(d, model, settings, rng, target=""):
        calls.append(d)
        return "refitted"

    weak = update_posterior(post, old, data([2.0], 10.0, 2460010.0), rng, fit=fake_fit)
    assert weak.method == "reweight" and not calls and weak.ess_fraction > 0.25
    assert weak.posterior.samples.shape == post.samples.shape
    assert weak.posterior.data_digest == old.concat(data([2.0], 10.0, 2460010.0)).digest
    strong = update_posterior(post, old, data([2.0, 2.1, 1.9], 0.05, 2460010.0), rng,
                              fit=fake_fit)
    assert strong.method == "refit" and strong.posterior == "refitted" and len(calls) == 1
    assert calls[0].time.size == 4 and strong.ess_fraction < 0.25


def test_likelihood_of_new_data_closed_form(rng):
    # Closed form: sum_n log N(rv_n; v_i, err_n^2) for a constant-velocity model.
    post = toy(rng, 5)
    d = data([1.0, -2.0], 1.5)
    ll = new_data_log_likelihood(post, d)
    v = post.samples[:, 0]
    expect = sum(-0.5 * (x - v) ** 2 / 2.25 - 0.5 * math.log(2 * math.pi * 2.25) for x in (1, -2))
    np.testing.assert_allclose(ll, expect)


def test_unknown_instrument_and_bad_threshold(rng):
    post = toy(rng, 10)
    other = RVData.from_arrays([2460000.0], [1.0], [1.0], ["other"])
    with pytest.raises(InformationError):
        new_data_log_likelihood(post, other)
    with pytest.raises(InformationError):
        update_posterior(post, data([1.0], 1.0), data([1.0], 1.0), rng, min_ess_fraction=0.0)
