"""The simulator: true orbits, truth files, weather loss and the execution of plans."""

import json
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from planner.errors import ScenarioError
from planner.simulation.truth import Planet, TrueOrbit, read_truths
from planner.simulation.weather import LostTime, Weather, draw_weather, lost_mask

DEMO_TRUTH = Path(__file__).resolve().parents[1] / "scenarios" / "demo" / "truth"


def test_circular_truth_is_a_pure_sine():
    # Closed form: for e = 0 the true anomaly equals the mean anomaly, so
    # v(t) = K cos(2 pi (t - tp) / P + omega) + offset.
    p = Planet(
        period_d=7.3,
        semi_amplitude_ms=12.5,
        eccentricity=0.0,
        omega_rad=0.8,
        time_periastron_bjd=2461000.2,
    )
    truth = TrueOrbit(
        target="x",
        instrument="a",
        offset_ms=-3.0,
        jitter_ms=1.0,
        planets=(p,),
        trend_ms_per_d=0.1,
        t_ref=2461001.0,
    )
    t = np.linspace(2461000.0, 2461020.0, 57)
    expected = 12.5 * np.cos(2 * np.pi * (t - 2461000.2) / 7.3 + 0.8) - 3.0 + 0.1 * (t - 2461001.0)
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
    (tmp_path / "a.json").write_text(
        json.dumps({"target": "A", "instrument": "i", "offset_ms": 0.0, "planets": []})
    )
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
    np.testing.assert_array_equal(lost_mask(starts, ends, lost), [False, True, True, False, False])


# ----------------------------------------------------------------------------- execution

@pytest.fixture(scope="module")
def demo_night():
    """Site, first demo night, its sky for three demo stars, the instrument and their truths."""
    from planner.sky.tracks import compute_sky
    from planner.workflow import pipeline

    scenario = pipeline.load(None)
    site, _, aligned, _, instrument, _ = pipeline.physical_setup(scenario)
    stars = {t.id: t for t in scenario.targets[:3]}
    sky = compute_sky(site, aligned[:1], [t.ra_deg for t in stars.values()],
                      [t.dec_deg for t in stars.values()], step_s=scenario.sky.step_s,
                      names=list(stars))
    truths = read_truths(DEMO_TRUTH)
    return site, aligned[0], sky, instrument, stars, {k: truths[k] for k in stars}


def _visits(night, stars, per_star, exposure_s=600.0):
    from planner.allocation.plan import Visit

    span = night.dark_end_jd - night.dark_start_jd - exposure_s / 86400.0
    out = []
    for j, target in enumerate(stars):
        for k in range(per_star):
            start = night.dark_start_jd + span * (k + j / len(stars)) / per_star
            out.append(Visit(target=target, night=night.date, start_jd=start,
                             end_jd=start + exposure_s / 86400.0, exposure_s=exposure_s,
                             slew_s=0.0, option=0, bits=0.0, candidate=len(out)))
    return out


def test_simulator_uses_the_planner_noise_model(demo_night, monkeypatch):
    # One implementation: replacing planner.sky.exposure.rv_sigma changes the simulator's noise.
    from planner.simulation.simulate import visit_conditions
    from planner.sky import exposure

    site, night, sky, instrument, stars, _ = demo_night
    visits = _visits(night, stars, 2)
    before = visit_conditions(visits, stars, site, sky, instrument)
    # Unpatched, rv_sigma adds the instrument floor in quadrature, so no noise is below it.
    assert np.all(before.sigma_ms >= instrument.floor_ms)
    monkeypatch.setattr(exposure, "rv_sigma", lambda *a, **k: np.full(len(visits), 123.0))
    after = visit_conditions(visits, stars, site, sky, instrument)
    np.testing.assert_array_equal(after.sigma_ms, 123.0)
    np.testing.assert_array_equal(after.airmass, before.airmass)


def test_conditions_match_astropy(demo_night):
    # Outside reference: astropy's barycentric light-travel time and AltAz transform at the
    # exact mid-exposure instants (the simulator interpolates the planner's sky grid for the
    # former). Tolerances: 0.05 s of barycentric time; airmass to 1% of astropy's secant of the
    # zenith distance above 40 deg altitude (Kasten-Young differs from sec z there by < 0.3%,
    # from memory of Kasten and Young 1989).
    import astropy.units as u
    from astropy.coordinates import AltAz, SkyCoord
    from astropy.time import Time

    from planner.simulation.simulate import visit_conditions
    from planner.sky import offline

    site, night, sky, instrument, stars, _ = demo_night
    visits = _visits(night, stars, 3)
    c = visit_conditions(visits, stars, site, sky, instrument)
    mid = np.array([0.5 * (v.start_jd + v.end_jd) for v in c.visits])
    ra = np.array([stars[v.target].ra_deg for v in c.visits])
    dec = np.array([stars[v.target].dec_deg for v in c.visits])
    with offline.quiet_astropy():
        t = Time(mid, format="jd", scale="utc", location=site.location())
        star = SkyCoord(ra * u.deg, dec * u.deg)
        bjd = (t.tdb + t.light_travel_time(star)).jd
        alt = star.transform_to(AltAz(obstime=t, location=site.location())).alt.deg
    np.testing.assert_allclose((c.bjd_tdb - bjd) * 86400.0, 0.0, atol=0.05)
    high = alt > 40
    secz = 1.0 / np.sin(np.radians(alt[high]))
    np.testing.assert_allclose(c.airmass[high], secz, rtol=0.01)


def test_simulated_residuals_are_standard_normal(demo_night):
    # The velocity minus the true orbit, over sqrt(sigma^2 + jitter^2), must be N(0, 1):
    # Kolmogorov-Smirnov test from scipy.stats, false-failure budget 1e-4.
    from planner.simulation.simulate import execute, visit_conditions

    site, night, sky, instrument, stars, truths = demo_night
    c = visit_conditions(_visits(night, stars, 150), stars, site, sky, instrument)
    run = execute(c, truths, "ridge-echelle", np.random.default_rng(3))
    assert len(run.visits) == len(c.visits)
    truth_v = np.array([truths[v.target].velocity(np.array([t]))[0]
                        for v, t in zip(run.visits, run.bjd_tdb, strict=True)])
    jit = np.array([truths[v.target].jitter_ms for v in run.visits])
    z = (run.rv - truth_v) / np.sqrt(run.rv_err**2 + jit**2)
    assert stats.kstest(z, "norm").pvalue > 1e-4
    # The reported error is the measurement noise alone (jitter left for the fit).
    np.testing.assert_array_equal(run.rv_err, c.sigma_ms)


def test_weather_removes_visits_and_keeps_the_rest_unchanged(demo_night):
    from planner.simulation.simulate import execute, visit_conditions

    site, night, sky, instrument, stars, truths = demo_night
    c = visit_conditions(_visits(night, stars, 6), stars, site, sky, instrument)
    clear = execute(c, truths, "ridge-echelle", np.random.default_rng(8))
    mid = night.dark_start_jd + 0.5 * (night.dark_end_jd - night.dark_start_jd)
    lost = LostTime(intervals_jd=np.array([[mid - 0.05, mid + 0.05]]))
    cloudy = execute(c, truths, "ridge-echelle", np.random.default_rng(8), lost=lost)
    assert 0 < len(cloudy.lost) < len(c.visits)
    assert len(cloudy.visits) + len(cloudy.lost) == len(c.visits)
    assert all(v.end_jd <= mid - 0.05 or v.start_jd >= mid + 0.05 for v in cloudy.visits)
    keep = [k for k, v in enumerate(clear.visits) if v in cloudy.visits]
    np.testing.assert_array_equal(cloudy.rv, clear.rv[keep])
    data = cloudy.data(cloudy.visits[0].target)
    assert data.instruments == ("ridge-echelle",)


def test_visit_without_truth_is_refused(demo_night):
    from planner.errors import PlanError
    from planner.simulation.simulate import execute, visit_conditions

    site, night, sky, instrument, stars, truths = demo_night
    c = visit_conditions(_visits(night, stars, 1), stars, site, sky, instrument)
    with pytest.raises(PlanError, match="no true orbit"):
        execute(c, {}, "ridge-echelle", np.random.default_rng(0))
