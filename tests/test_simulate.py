"""The simulator: true orbits, truth files, weather loss and the execution of plans."""

import json
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from planner.errors import ScenarioError
from planner.simulate import (
    LostTime,
    Planet,
    TrueOrbit,
    Weather,
    draw_weather,
    lost_mask,
    read_truths,
)

DEMO_TRUTH = Path(__file__).resolve().parents[1] / "scenarios" / "demo" / "truth"


def test_circular_truth_is_a_pure_sine():
    # Closed form: for e = 0 the true anomaly equals the mean anomaly, so
    # v(t) = K cos(2 pi (t - tp) / P + omega) + offset.
    p = Planet(period_d=7.3, semi_amplitude_ms=12.5, eccentricity=0.0, omega_rad=0.8,
               time_periastron_bjd=2461000.2)
    truth = TrueOrbit(target="x", instrument="a", offset_ms=-3.0, jitter_ms=1.0, planets=(p,),
                      trend_ms_per_d=0.1, t_ref=2461001.0)
    t = np.linspace(2461000.0, 2461020.0, 57)
    expected = (12.5 * np.cos(2 * np.pi * (t - 2461000.2) / 7.3 + 0.8) - 3.0
                + 0.1 * (t - 2461001.0))
    np.testing.assert_allclose(truth.velocity(t), expected, atol=1e-9)


def test_star_without_planet_is_constant():
    truth = TrueOrbit(target="x", instrument="a", offset_ms=4.5, jitter_ms=1.0)
    np.testing.assert_array_equal(truth.velocity(np.arange(3.0)), [4.5, 4.5, 4.5])


def test_read_demo_truths_matches_the_files():
    truths = read_truths(DEMO_TRUTH)
    files = sorted(DEMO_TRUTH.glob("*.json"))
    assert len(truths) == len(files) > 0
    doc = json.loads(files[0].read_text())
    truth = truths[doc["target"]]
    assert truth.jitter_ms == doc["jitter_ms"]
    assert len(truth.planets) == len(doc["planets"])


def test_malformed_truth_file_names_file_and_key(tmp_path):
    (tmp_path / "a.json").write_text(json.dumps({"target": "A", "instrument": "i",
                                                 "offset_ms": 0.0, "planets": []}))
    with pytest.raises(ScenarioError, match=r"a\.json.*jitter_ms"):
        read_truths(tmp_path)
    (tmp_path / "a.json").write_text("{not json")
    with pytest.raises(ScenarioError, match="line 1"):
        read_truths(tmp_path)
    with pytest.raises(ScenarioError, match="no true-orbit files"):
        read_truths(tmp_path / "empty")


def test_weather_probability_is_checked():
    with pytest.raises(ScenarioError, match="between 0 and 1"):
        Weather(night_loss=1.5)


WINDOWS = np.array([[2461318.50, 2461318.90], [2461319.50, 2461319.90], [2461320.5, 2461320.9]])


def test_weather_extremes():
    rng = np.random.default_rng(1)
    none = draw_weather(WINDOWS, Weather(), rng)
    assert none.intervals_jd.shape == (0, 2)
    all_nights = draw_weather(WINDOWS, Weather(night_loss=1.0), rng)
    assert all_nights.nights_lost == (0, 1, 2)
    starts = WINDOWS[:, 0] + 0.1
    assert lost_mask(starts, starts + 0.01, all_nights).all()
    assert not lost_mask(starts, starts + 0.01, none).any()


def test_hour_loss_rate_is_binomial():
    # Each clock hour is lost independently with probability q: the lost-hour count over many
    # nights is binomial; check within the central 99.99% of scipy.stats.binom.
    q = 0.3
    windows = np.column_stack([np.arange(200) + 2461318.5, np.arange(200) + 2461318.5 + 0.375])
    lost = draw_weather(windows, Weather(hour_loss=q), np.random.default_rng(5))
    widths = lost.intervals_jd[:, 1] - lost.intervals_jd[:, 0]
    n_hours = 200 * 9  # 0.375 d from 00:00 UTC (JD .5) is exactly 9 clock hours
    lo, hi = stats.binom.interval(0.9999, n_hours, q)
    assert lo <= widths.size <= hi
    # JD near 2.46e6 carries about 5e-10 d of rounding.
    assert np.all((widths > 1.0 / 24.0 - 1e-8) & (widths <= 1.0 / 24.0 + 1e-8))


def test_weather_depends_on_windows_and_seed_only():
    a = draw_weather(WINDOWS, Weather(0.3, 0.2), np.random.default_rng(9))
    b = draw_weather(WINDOWS, Weather(0.3, 0.2), np.random.default_rng(9))
    np.testing.assert_array_equal(a.intervals_jd, b.intervals_jd)


def test_lost_mask_overlap_rules():
    lost = LostTime(intervals_jd=np.array([[10.0, 10.5]]))
    starts = np.array([9.0, 9.9, 10.2, 10.5, 10.6])
    ends = np.array([9.5, 10.1, 10.3, 10.7, 10.8])
    # Touching the end of a lost span at 10.5 is not an overlap; partial overlaps are lost.
    np.testing.assert_array_equal(lost_mask(starts, ends, lost),
                                  [False, True, True, False, False])
