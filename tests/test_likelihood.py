"""Marginal likelihood, conditional Gaussian and priors against closed forms and scipy."""

import numpy as np
import pytest
from scipy import integrate, stats

from inference.data import RVData
from inference.errors import ModelError, RVDataError
from inference.keplerian import keplerian_basis
from inference.likelihood import linear_conditional, log_marginal, log_prior, prepare
from inference.model import (
    EccentricityPrior,
    GaussianPrior,
    JitterPrior,
    ModelSpec,
    PeriodPrior,
    check_enough_points,
)


def _two_instrument_data(rng, n=24):
    t = np.sort(2460000.0 + rng.uniform(0, 200, n))
    inst = np.where(np.arange(n) % 3 == 0, "north", "south")
    rv = 20 * np.sin(2 * np.pi * t / 17.0) + np.where(inst == "north", 5.0, -3.0)
    rv = rv + rng.normal(0, 2.0, n)
    return RVData.from_arrays(t, rv, rng.uniform(1, 3, n), inst, source="invented")


def _theta(rng, model, b):
    cols = []
    for _ in range(model.n_planets):
        r = np.sqrt(rng.uniform(0, 0.8, b))
        phi = rng.uniform(-np.pi, np.pi, b)
        cols += [np.log(rng.uniform(5, 50, b)), r * np.cos(phi), r * np.sin(phi)]
    cols += [np.log(rng.uniform(0.1, 4, b)) for _ in model.instruments]
    return np.column_stack(cols)


def _dense_design(theta_row, data, model):
    """Independent construction of X, C, mu, Lambda for one parameter vector."""
    t = data.time
    cols, mu, var = [], [], []
    for k in range(model.n_planets):
        p = np.exp(theta_row[3 * k])
        x, y = theta_row[3 * k + 1], theta_row[3 * k + 2]
        e, m0 = x * x + y * y, np.arctan2(y, x)
        tp = model.t_ref - m0 * p / (2 * np.pi)
        c, s = keplerian_basis(t, p, e, tp)
        cols += [c, -s]
        mu += [0.0, 0.0]
        var += [model.amplitude**2] * 2
    for i, name in enumerate(model.instruments):
        cols.append((data.instrument == name).astype(float))
        mu.append(model.offsets[i].mean)
        var.append(model.offsets[i].sigma ** 2)
    if model.trend:
        cols.append(t - model.t_ref)
        mu.append(model.trend_prior.mean)
        var.append(model.trend_prior.sigma**2)
    jit = np.exp(theta_row[3 * model.n_planets :])
    idx = np.array([model.instruments.index(n) for n in data.instrument])
    cov_noise = np.diag(data.rv_err**2 + jit[idx] ** 2)
    return np.column_stack(cols), cov_noise, np.array(mu), np.diag(var)


@pytest.mark.parametrize(("n_planets", "trend"), [(0, False), (1, False), (2, True)])
def test_marginal_matches_scipy_multivariate_normal(rng, n_planets, trend):
    # Reference: y ~ N(X mu, C + X Lambda X^T) evaluated by scipy.stats.multivariate_normal
    # (the marginal of a linear-Gaussian model, e.g. Bishop 2006, eq. 2.115).
    data = _two_instrument_data(rng)
    model = ModelSpec.for_data(data, n_planets=n_planets, trend=trend)
    theta = _theta(rng, model, 7)
    got = log_marginal(theta, prepare(data, model))
    for row, value in zip(theta, got, strict=True):
        x, c, mu, lam = _dense_design(row, data, model)
        ref = stats.multivariate_normal(x @ mu, c + x @ lam @ x.T).logpdf(data.rv)
        assert value == pytest.approx(ref, abs=1e-7)


def test_conditional_matches_textbook_posterior(rng):
    # Reference: Bayesian linear regression posterior, covariance (Lambda^-1 + X^T C^-1 X)^-1
    # and mean S (X^T C^-1 y + Lambda^-1 mu) (Bishop 2006, eq. 3.50-3.51, with noise C).
    data = _two_instrument_data(rng)
    model = ModelSpec.for_data(data, n_planets=1, trend=True)
    theta = _theta(rng, model, 4)
    cond = linear_conditional(theta, prepare(data, model))
    for i, row in enumerate(theta):
        x, c, mu, lam = _dense_design(row, data, model)
        ci = np.linalg.inv(c)
        s = np.linalg.inv(np.linalg.inv(lam) + x.T @ ci @ x)
        m = s @ (x.T @ ci @ data.rv + np.linalg.inv(lam) @ mu)
        np.testing.assert_allclose(cond.mean[i], m, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(cond.covariance()[i], s, rtol=1e-8, atol=1e-12)
    # Draws follow it: sample mean within 5 standard errors (false-failure rate ~1e-6 each).
    many = linear_conditional(np.repeat(theta[:1], 20000, axis=0), prepare(data, model))
    draws = many.draw(np.random.default_rng(3))
    se = np.sqrt(np.diag(many.covariance()[0]) / 20000)
    assert np.all(np.abs(draws.mean(axis=0) - many.mean[0]) < 5 * se)


def test_prior_is_normalised():
    # The prior density of the sampled coordinates integrates to one: the jitter part by
    # scipy.integrate.quad, the period and (x, y) parts by their closed-form volumes.
    jit = JitterPrior(1.3, 50.0)
    model = ModelSpec(
        n_planets=1,
        instruments=("a",),
        trend=False,
        t_ref=0.0,
        period=PeriodPrior(2.0, 200.0),
        eccentricity=EccentricityPrior("beta", 0.9),
        amplitude=10.0,
        offsets=(GaussianPrior(0.0, 10.0),),
        jitters=(jit,),
    )
    data = RVData.from_arrays(np.arange(10.0), np.zeros(10), np.ones(10), ["a"] * 10)
    prep = prepare(data, model)

    def density_ln_s(ln_s):
        return np.exp(log_prior(np.array([[np.log(20.0), 0.3, 0.2, ln_s]]), prep))[0]

    part_jit, _ = integrate.quad(density_ln_s, jit.log_minimum, np.log(jit.maximum), limit=200)
    # Remaining factor at this point: p(ln P) p(x, y), so divide it out with the closed forms.
    e = 0.3**2 + 0.2**2
    p_e = stats.beta(0.867, 3.03).pdf(e) / stats.beta(0.867, 3.03).cdf(0.9)
    other = (1.0 / np.log(100.0)) * p_e / np.pi
    assert part_jit / other == pytest.approx(1.0, rel=1e-6)
    assert log_prior(np.array([[np.log(300.0), 0.0, 0.0, 0.0]]), prep)[0] == -np.inf
    assert log_prior(np.array([[np.log(20.0), 0.96, 0.0, 0.0]]), prep)[0] == -np.inf


def test_period_order_is_required(rng):
    data = _two_instrument_data(rng)
    prep = prepare(data, ModelSpec.for_data(data, n_planets=2))
    ok = np.array([[np.log(5.0), 0, 0, np.log(20.0), 0, 0, 0.0, 0.0]])
    swapped = ok[:, [3, 4, 5, 0, 1, 2, 6, 7]]
    assert np.isfinite(log_prior(ok, prep)[0]) and log_prior(swapped, prep)[0] == -np.inf


def test_not_enough_points_and_bad_model():
    data = RVData.from_arrays([1.0, 2.0, 3.0, 4.0, 5.0], [1, 2, 3, 4, 5], [1] * 5, ["a"] * 5)
    model = ModelSpec.for_data(data, n_planets=1)
    with pytest.raises(RVDataError, match="has 5 measurements but the model has 7 free"):
        check_enough_points(data, model)
    other = RVData.from_arrays([1.0, 2.0], [1, 2], [1, 1], ["b", "b"], source="x.csv")
    with pytest.raises(ModelError, match="instrument 'b'"):
        check_enough_points(other, model)
    with pytest.raises(ModelError, match="period range"):
        PeriodPrior(10.0, 5.0)
    with pytest.raises(ModelError, match="unknown"):
        EccentricityPrior("flat")


def test_model_round_trip_and_names(rng):
    data = _two_instrument_data(rng)
    model = ModelSpec.for_data(data, n_planets=2, trend=True)
    assert ModelSpec.from_dict(model.to_dict()) == model
    assert model.parameter_names()[:5] == (
        "period_1",
        "semi_amplitude_1",
        "eccentricity_1",
        "omega_1",
        "time_periastron_1",
    )
    # Instruments in order of first appearance (row 0 is "north").
    assert model.parameter_names()[-5:] == (
        "offset_north",
        "offset_south",
        "jitter_north",
        "jitter_south",
        "trend",
    )
    assert model.n_free == 2 * 5 + 2 * 2 + 1
