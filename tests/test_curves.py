"""Information curves: the one-visit bits at mid-exposure, shared between exposure options."""

import numpy as np
import pytest

from planner.information.curves import InformationCurve, _mean_noise_entropy_bits, build_curve
from planner.information.entropy import InformationError
from planner.information.gain import one_visit_bits
from planner.information.predict import Predictor

STEP = 120.0 / 86400.0


def star(rng, n=800, jitter=None):
    return Predictor.from_parameters(
        rng.normal(6.0, 0.2, n), rng.normal(15, 2, n), np.abs(rng.normal(0.15, 0.05, n)),
        rng.normal(2.0, 0.3, n), 2460000 + rng.normal(0, 0.3, n), offset=rng.normal(0, 0.5, n),
        jitter=np.abs(rng.normal(2.0, 0.5, n)) if jitter is None else jitter)


def grid(n_nights=2):
    t = np.concatenate([2460010.0 + night + np.arange(0, 0.3, STEP) for night in range(n_nights)])
    obs = np.zeros((2, t.size), bool)
    for night in range(n_nights):
        obs[:, (t > 2460010.02 + night) & (t < 2460010.25 + night)] = True
    obs[1, :5] = True  # a start whose mid-exposure time is off the observable part
    return t, obs


def test_curve_is_one_visit_bits_at_its_prediction_times(rng):
    # Consistency with one_visit_bits (checked against closed forms in test_information.py):
    # each observable start's bits are the one-visit gain at its recorded prediction time with
    # noise sqrt(sigma_meas^2 + jitter^2).
    pred = star(rng)
    t, obs = grid()
    sig = np.stack([np.full(t.size, 2.5), np.linspace(1.0, 1.6, t.size)])
    curve = build_curve(pred, t, sig, obs, [300.0, 900.0], target="star 7", weight=2.0)
    assert isinstance(curve, InformationCurve)
    assert curve.bits.shape == (2, t.size) and np.all(np.isnan(curve.bits[~obs]))
    for o in range(2):
        j = np.flatnonzero(obs[o])
        v = pred.velocities(curve.prediction_bjd[o, j])
        total = np.sqrt(sig[o, j][None, :] ** 2 + pred.jitter[:, None] ** 2)
        np.testing.assert_allclose(curve.bits[o, j], one_visit_bits(v, total), atol=5e-4)
    np.testing.assert_allclose(curve.weighted_bits, 2.0 * curve.bits, equal_nan=True)


def test_prediction_time_is_mid_exposure_within_half_a_step(rng):
    # Documented choice: mid-exposure, snapped to the grid when within half a grid step.
    pred = star(rng, 200)
    t, obs = grid()
    curve = build_curve(pred, t, np.full((2, t.size), 2.0), obs, [300.0, 900.0])
    for o, exp_s in enumerate((300.0, 900.0)):
        j = np.flatnonzero(obs[o])
        off = curve.prediction_bjd[o, j] - (t[j] + 0.5 * exp_s / 86400.0)
        assert np.all(np.abs(off) <= 0.5 * STEP + 1e-9)
    # Starts whose snapped column is shared by both options use one prediction time.
    shared = np.intersect1d(curve.prediction_bjd[0][obs[0]], curve.prediction_bjd[1][obs[1]])
    assert shared.size > 0.5 * obs[0].sum()


def test_mean_noise_entropy_spline_matches_direct(rng):
    # Reference: the direct mean over samples of 0.5 log2(2 pi e (s_i^2 + x)).
    jit2 = rng.uniform(0.1, 16.0, 2000)
    x = rng.uniform(0.3, 30.0, 5000)
    direct = np.mean(0.5 * np.log2(2 * np.pi * np.e * (jit2[:, None] + x[None, :])), axis=0)
    np.testing.assert_allclose(_mean_noise_entropy_bits(jit2, x), direct, atol=1e-9)


def test_more_noise_gives_fewer_bits(rng):
    # Fact of the method: information falls as the noise grows (data-processing inequality).
    pred = star(rng, 500, jitter=1.0)
    t, obs = grid(1)
    obs[:] = True
    curve = build_curve(pred, t, np.stack([np.full(t.size, 1.0), np.full(t.size, 3.0)]), obs,
                        [600.0, 600.0])
    assert np.all(curve.bits[1] < curve.bits[0])


@pytest.mark.parametrize(
    "change",
    [
        {"sigma_meas": np.zeros((2, 3))},
        {"observable": np.ones((1, 3), bool)},
        {"exposures_s": [300.0]},
        {"bjd": np.array([3.0, 2.0, 1.0])},
        {"weight": -1.0},
    ],
)
def test_bad_input_is_one_clear_error(change, rng):
    args = {"bjd": np.array([1.0, 1.1, 1.2]) + 2460000, "sigma_meas": np.ones((2, 3)),
            "observable": np.ones((2, 3), bool), "exposures_s": [300.0, 600.0]}
    weight = change.pop("weight", 1.0)
    args.update(change)
    with pytest.raises(InformationError):
        build_curve(star(rng, 50), args["bjd"], args["sigma_meas"], args["observable"],
                    args["exposures_s"], weight=weight)


def test_plot_shows_bits_band_and_dark_time(rng):
    # What an observer needs to see (issue item 7): one line per exposure option, the predicted
    # velocity band from the samples, and the dark windows shaded in both panels.
    pytest.importorskip("matplotlib")
    from planner.workflow.plot_curves import barycentric_shift_days, plot_information_curve

    pred = star(rng, 300)
    t, obs = grid()
    curve = build_curve(pred, t, np.full((2, t.size), 2.0), obs, [300.0, 900.0], target="A")
    dark = [(2460010.02, 2460010.25), (2460011.02, 2460011.25)]
    fig = plot_information_curve(curve, pred, dark)
    ax_bits, ax_v = fig.axes
    assert len(ax_bits.lines) == 2 and len(ax_v.collections) >= 2
    assert sum(p.get_width() > 0.2 for p in ax_bits.patches) == 2  # the two dark windows
    band = ax_v.collections[0].get_paths()[0].vertices[:, 1]
    # Here times_jd is the BJD grid itself, so the shift is only the snapping (under a minute).
    shift = barycentric_shift_days(curve)
    assert abs(shift) <= 60.0 / 86400.0
    v = pred.velocities(np.linspace(t.min(), t.max(), 600) + shift)
    assert band.max() == pytest.approx(np.percentile(v, 97.5, axis=0).max(), rel=1e-6)


def _counting(monkeypatch):
    """Count the columns whose entropy build_curve evaluates (not fills in)."""
    import planner.information.curves as curves

    seen = []
    real = curves.mixture_entropy_bits

    def counted(centers, *args, **kwargs):
        seen.append(centers.shape[1])
        return real(centers, *args, **kwargs)

    monkeypatch.setattr(curves, "mixture_entropy_bits", counted)
    return seen


def _night_grid(n_nights=3):
    t = np.concatenate([2460010.0 + n + np.arange(0, 0.35, STEP) for n in range(n_nights)])
    obs = np.ones((2, t.size), bool)
    sig = np.stack([np.full(t.size, 2.0), np.full(t.size, 1.4)])
    sig *= 1.0 + 0.2 * np.sin(np.linspace(0, 6 * np.pi, t.size))[None, :] ** 2
    return t, obs, sig


def _every_and_filled(pred, monkeypatch):
    """The curve of `pred` on the test grid evaluated at every start and filled in, with the
    column counts of the entropy evaluations behind each."""
    t, obs, sig = _night_grid()
    seen = _counting(monkeypatch)
    every = build_curve(pred, t, sig, obs, [300.0, 900.0], interpolate=False)
    n_every = list(seen)
    seen.clear()
    filled = build_curve(pred, t, sig, obs, [300.0, 900.0])
    return every, filled, n_every, list(seen)


def test_filled_in_curve_matches_every_time_on_a_smooth_star(rng, monkeypatch):
    # Reference: the same curve with the entropy evaluated at every start (interpolate=False,
    # itself checked against one_visit_bits above). The cubic midpoint rule's error bound is
    # 1e-4 bit; the estimator's own spread between groupings of columns is ~1e-4 bit (node and
    # bin choices), so the two agree within 3e-4 bit, with about half the columns evaluated.
    every, filled, n_every, seen = _every_and_filled(star(rng, 1000), monkeypatch)
    assert sum(seen) < 0.6 * sum(n_every)
    np.testing.assert_array_equal(np.isnan(filled.bits), np.isnan(every.bits))
    np.testing.assert_allclose(filled.bits, every.bits, atol=3e-4)


def test_sharp_periastron_is_evaluated_not_filled(rng, monkeypatch):
    # An eccentric short-period orbit changes on the scale of the grid step near periastron
    # (e = 0.9, P = 1.3 d: the velocity moves several m/s per 2-minute step for a few minutes),
    # where the midpoint rule's error check must refuse to fill in: a second evaluation covers
    # those columns. Reference: interpolate=False.
    n = 1000
    pred = Predictor.from_parameters(
        rng.normal(1.3, 0.003, n), np.abs(rng.normal(60.0, 6.0, n)),
        np.clip(rng.normal(0.9, 0.02, n), 0.0, 0.97), rng.normal(1.0, 0.2, n),
        2460010.3 + rng.normal(0.0, 0.013, n), offset=0.0, jitter=np.abs(rng.normal(2, 0.3, n)))
    every, filled, n_every, seen = _every_and_filled(pred, monkeypatch)
    assert len(seen) == 2 and seen[1] >= 20 and sum(seen) < sum(n_every)
    np.testing.assert_allclose(filled.bits, every.bits, atol=3e-4)


def test_midpoint_rule_and_its_error_bound():
    # Closed forms: the cubic midpoint rule (-f(-3) + 9 f(-1) + 9 f(1) - f(3)) / 16 is exact for
    # cubics, and its error is -(3/128) d^4 f''''(xi) for spacing d (Lagrange interpolation
    # remainder, numerical-analysis textbook; from memory); the fourth difference estimates
    # d^4 f''''. Checked on a cubic and on cos(w x), whose error must sit within the estimate.
    from planner.information.curves import _midpoint

    x = np.arange(40.0)
    first = (x % 2 == 0)
    j = np.flatnonzero(~first)[3:-3]
    cubic = 0.3 * x**3 - 2 * x**2 + x - 7
    value, err = _midpoint(np.where(first, cubic, np.nan)[None, :], j, first)
    np.testing.assert_allclose(value[0], cubic[j], rtol=1e-12)
    assert np.all(err[0] < 1e-9)
    wave = np.cos(0.2 * x)
    value, err = _midpoint(np.where(first, wave, np.nan)[None, :], j, first)
    actual = np.abs(value[0] - wave[j])
    expect = (3 / 128) * 2.0**4 * 0.2**4  # |-(3/128) d^4 f''''| at its largest, d = 2
    assert np.all(actual <= 1.05 * expect)
    assert np.all(actual <= 1.3 * err[0])
