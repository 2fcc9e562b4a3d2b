"""Strategy experiments: fixed and adaptive execution, the cost to reach, and the volume shrink.

The posteriors here are invented sample sets around the invented demo truths (drawn directly,
no sampler) so the tests stay fast; the planning callables are small stand-ins that return
fixed visit lists, because these tests check the experiment's bookkeeping, not the planner.
"""

import dataclasses
import importlib.util
from pathlib import Path

import numpy as np
import pytest

from planner.allocation.plan import Plan, Visit
from planner.errors import PlanError
from planner.simulation.experiment import STRATEGIES, Setup, run_experiment, run_strategy
from planner.simulation.realised import cost_to_reach, measure_execution, support_curve
from planner.simulation.scoreboard import summarise
from planner.simulation.simulate import execute, visit_conditions
from planner.simulation.truth import read_truths
from planner.simulation.weather import Weather

INSTRUMENT = "ridge-echelle"


def _posterior_around(truth, rng, n=384):
    """Invented posterior samples scattered around a one-planet truth (period spread 0.5%)."""
    from inference.data import RVData
    from inference.model import ModelSpec
    from inference.posterior import Posterior

    p = truth.planets[0]
    data = RVData.from_arrays([2461000.0, 2461050.0], [0.0, 1.0], [1.0, 1.0], [INSTRUMENT] * 2)
    model = ModelSpec.for_data(data, n_planets=1)
    cols = {
        "period_1": p.period_d * (1 + 0.005 * rng.standard_normal(n)),
        "semi_amplitude_1": np.abs(p.semi_amplitude_ms * (1 + 0.2 * rng.standard_normal(n))),
        "eccentricity_1": np.clip(p.eccentricity + 0.05 * rng.standard_normal(n), 0, 0.9),
        "omega_1": p.omega_rad + 0.3 * rng.standard_normal(n),
        "time_periastron_1": p.time_periastron_bjd + 0.05 * p.period_d * rng.standard_normal(n),
        f"offset_{INSTRUMENT}": truth.offset_ms + rng.standard_normal(n),
        f"jitter_{INSTRUMENT}": rng.uniform(0.5, 3.0, n),
    }
    names = model.parameter_names()
    return Posterior(target=truth.target, model=model, names=names,
                     samples=np.column_stack([cols[k] for k in names]), log_likelihood=np.zeros(n),
                     data_digest="", seed=0, diagnostics=None), data


@pytest.fixture(scope="module")
def world():
    """Two demo nights, three one-planet demo stars, their truths and invented posteriors."""
    from planner.simulation.truth import read_truths as _read
    from planner.sky.tracks import compute_sky
    from planner.workflow import pipeline

    scenario = pipeline.load(None)
    truths = _read(scenario.path.parent / "truth")
    chosen = [t for t in scenario.targets if len(truths[t.id].planets) == 1][:3]
    site, _, aligned, _, instrument, _ = pipeline.physical_setup(scenario)
    nights = aligned[:2]
    sky = compute_sky(site, nights, [t.ra_deg for t in chosen], [t.dec_deg for t in chosen],
                      step_s=scenario.sky.step_s, names=[t.id for t in chosen])
    rng = np.random.default_rng(11)
    made = {t.id: _posterior_around(truths[t.id], rng) for t in chosen}
    return dict(site=site, nights=nights, sky=sky, instrument=instrument,
                stars={t.id: t for t in chosen}, truths={t.id: truths[t.id] for t in chosen},
                posteriors={k: v[0] for k, v in made.items()},
                past={k: v[1] for k, v in made.items()})


def _visit(target, night, start, k, exposure_s=600.0):
    return Visit(target=target, night=night.date, start_jd=start,
                 end_jd=start + exposure_s / 86400.0, exposure_s=exposure_s, slew_s=120.0,
                 option=0, bits=0.0, candidate=k)


def _night_visits(world, night_index, per_star, offset=0.0):
    night = world["nights"][night_index]
    span = night.dark_end_jd - night.dark_start_jd - 0.01
    out = []
    for j, target in enumerate(world["stars"]):
        for k in range(per_star):
            start = night.dark_start_jd + span * ((k + (j + offset) / 3.0) / per_star)
            out.append(_visit(target, night, start, len(out)))
    return out


def _plan(name, visits):
    return Plan(strategy=name, visits=tuple(sorted(visits, key=lambda v: v.start_jd)),
                objective=0.0, bound=None, gap=None, status="COMPLETE", runtime_s=0.0, seed=None)


def _setup(world, calls):
    """A Setup whose fixed plans are fixed lists and whose re-plans record their posteriors."""
    fixed = {
        "joint": _night_visits(world, 0, 3) + _night_visits(world, 1, 3),
        "greedy": _night_visits(world, 0, 2, 0.5) + _night_visits(world, 1, 2, 0.5),
        "cadence": _night_visits(world, 0, 1) + _night_visits(world, 1, 1),
    }

    def plan_rest(posteriors, first):
        calls.append((first, {k: p.samples.copy() for k, p in posteriors.items()}))
        rest = [v for v in fixed["joint"] if v.night >= world["nights"][first].date]
        return _plan("joint", rest)

    windows = np.array([(n.dark_start_jd, n.dark_end_jd) for n in world["nights"]])
    return Setup(posteriors=world["posteriors"], past=world["past"], truths=world["truths"],
                 stars=world["stars"], site=world["site"], sky=world["sky"],
                 instrument=world["instrument"], instrument_name=INSTRUMENT,
                 night_dates=tuple(n.date for n in world["nights"]), windows_jd=windows,
                 plan_fixed=lambda name: _plan(name, fixed[name]), plan_rest=plan_rest)


def test_cost_to_reach_closed_cases():
    bits = np.array([0.5, 1.0, 0.9, 2.0, 3.0])
    hours = np.array([0.2, 0.4, 0.6, 0.8, 1.0])
    assert cost_to_reach(bits, hours, 0.95) == (2, 0.4)
    assert cost_to_reach(bits, hours, 2.0) == (4, 0.8)
    assert cost_to_reach(bits, hours, 3.5) == (None, None)
    assert cost_to_reach(bits, hours, 0.0) == (1, 0.2)


def test_support_curve_ends_at_the_measured_total(world):
    # Identity: the prefix curve after the last exposure is the whole run's on-support total.
    visits = _night_visits(world, 0, 3) + _night_visits(world, 1, 2)
    cond = visit_conditions(visits, world["stars"], world["site"], world["sky"],
                            world["instrument"])
    run = execute(cond, world["truths"], INSTRUMENT, np.random.default_rng(4))
    stars = measure_execution(world["posteriors"], run, np.random.default_rng(5))
    curve = support_curve(world["posteriors"], run, {t: 2.0 for t in world["stars"]})
    assert curve.shape == (len(run.visits),)
    assert curve[-1] == pytest.approx(2.0 * sum(s.bits for s in stars), rel=1e-9)
    assert all(s.method == "reweight" for s in stars)


def test_more_visits_do_not_enlarge_the_volume_on_average(world):
    # Law of total variance (closed-form property): the posterior variance is on average no
    # larger than the prior's, and more data shrink it further. With the truth fixed and 1, 3
    # and 9 visits of the same star (nested sets, same noise), the mean log2 volume must not
    # grow; tolerance 3 standard errors of the paired mean difference (budget 1e-3 per check).
    from planner.information.update import new_data_log_likelihood
    from planner.simulation.realised import measure_reweighted

    target = next(iter(world["stars"]))
    post = world["posteriors"][target]
    visits = [v for v in _night_visits(world, 0, 5) + _night_visits(world, 1, 4)
              if v.target == target]
    cond = visit_conditions(visits, world["stars"], world["site"], world["sky"],
                            world["instrument"])
    rng = np.random.default_rng(21)
    sizes = (0, 1, 3, 9)
    vols = np.empty((60, len(sizes)))
    before = measure_reweighted(post, np.zeros(post.n_samples), 0).log2_volume_before
    for r in range(vols.shape[0]):
        run = execute(cond, world["truths"], INSTRUMENT, rng)
        data = run.data(target)
        for j, n in enumerate(sizes):
            if n == 0:
                vols[r, j] = before
                continue
            sub = dataclasses.replace(data, time=data.time[:n], rv=data.rv[:n],
                                      rv_err=data.rv_err[:n], instrument=data.instrument[:n])
            vols[r, j] = measure_reweighted(post, new_data_log_likelihood(post, sub),
                                            n).log2_volume_after
    diffs = np.diff(vols, axis=1)
    se = diffs.std(axis=0, ddof=1) / np.sqrt(diffs.shape[0])
    assert np.all(diffs.mean(axis=0) <= 3.0 * se)
    assert vols[:, -1].mean() < vols[:, 0].mean() - 1.0  # nine velocities do shrink it


def test_fixed_and_adaptive_strategies(world):
    calls = []
    setup = _setup(world, calls)
    weather = Weather(hour_loss=0.3)
    fixed = {}
    runs = {name: run_strategy(setup, name, 3, weather, fixed_plans=fixed) for name in STRATEGIES}
    # The adaptive strategy re-plans once per night, and the second plan sees posteriors
    # updated with the first night's velocities.
    assert [c[0] for c in calls] == [0, 1]
    moved = [not np.array_equal(calls[0][1][t], calls[1][1][t]) for t in world["stars"]]
    assert any(moved)
    # Adaptive executes the same visit list as joint here, so with common random numbers the
    # weather removes the same visits from both.
    assert runs["adaptive"].planned == runs["joint"].planned
    assert runs["adaptive"].exposures == runs["joint"].exposures
    for run in runs.values():
        assert run.exposures <= run.planned
        assert run.curve_bits.shape == (run.exposures,)
        assert run.realised_bits == pytest.approx(sum(s.bits for s in run.stars))
        assert run.expected_bits > 0
    # Same seed, same result; fixed plans are made once.
    again = run_strategy(setup, "greedy", 3, weather, fixed_plans=fixed)
    assert again.realised_bits == runs["greedy"].realised_bits
    assert set(fixed) == {"joint", "greedy", "cadence"}


def test_summary_and_cost_to_reach(world):
    setup = _setup(world, [])
    exp = run_experiment(setup, strategies=("joint", "cadence"), seeds=(1, 2, 3))
    cadence, joint = exp.summary("cadence"), exp.summary("joint")
    # Cadence reaches its own whole-run total in every seed, no later than its last exposure.
    assert cadence.reach_fraction == 1.0
    assert cadence.reach_exposures <= cadence.exposures
    assert joint.exposures == 18 and cadence.exposures == 6
    assert joint.realised_bits_std >= 0
    assert len(joint.per_star) == 3
    # Summaries are reproducible from the runs.
    again = summarise(exp.runs, ("joint", "cadence"), tuple(world["stars"]))
    assert again == exp.summaries
    with pytest.raises(PlanError, match="was not run"):
        exp.summary("greedy")


def test_unknown_strategy_is_refused(world):
    setup = _setup(world, [])
    with pytest.raises(PlanError, match="unknown strategy 'best'"):
        run_experiment(setup, strategies=("best",), seeds=(0,))
    with pytest.raises(PlanError, match="no seeds"):
        run_experiment(setup, strategies=("joint",), seeds=())


def test_demo_truth_folder_is_complete():
    # Every demo target has a true orbit for the simulator.
    from planner.workflow import pipeline

    scenario = pipeline.load(None)
    truths = read_truths(scenario.path.parent / "truth")
    assert {t.id for t in scenario.targets} <= set(truths)


def test_strategy_choices_match_the_experiment():
    from planner.cli.simulate import STRATEGY_CHOICES

    assert STRATEGY_CHOICES == STRATEGIES


TINY = Path(__file__).resolve().parent / "data" / "tiny" / "tiny.yaml"
DEMO_TRUTH = Path(__file__).resolve().parents[1] / "scenarios" / "demo" / "truth"


@pytest.fixture
def invented_fits(monkeypatch):
    """Replace the sampler by invented posteriors around the truths (keeps the test fast)."""
    from planner.workflow import pipeline

    truths = read_truths(DEMO_TRUTH)

    def fake_fit(scenario, cache=None, jobs=None, progress=None, scheduler=None):
        rng = np.random.default_rng(2)
        out = {}
        for t in scenario.targets:
            truth = truths[t.id]
            if not truth.planets:
                pytest.skip("the tiny run's stars all have one planet in the demo truths")
            out[t.id] = _posterior_around(truth, rng)[0]
        return out

    monkeypatch.setattr(pipeline, "fit_posteriors", fake_fit)


def test_simulate_command_end_to_end(tmp_path, capsys, invented_fits):
    import json

    from planner.cli.main import main

    out = tmp_path / "sim"
    argv = [str(TINY), "--truth", str(DEMO_TRUTH), "--seeds", "2", "--strategies", "joint",
            "cadence", "adaptive", "--out", str(out), "--no-cache", "--time-limit", "2"]
    plot = tmp_path / "bits.png"
    # Plots need the optional matplotlib; without it the rest of the command is still checked.
    plots = importlib.util.find_spec("matplotlib") is not None
    extra = ["--plot", str(plot), "--plot-star", "Gamur-7"] if plots else []
    assert main(["simulate", *argv, *extra]) == 0
    for path in (plot, out / "posterior_Gamur-7.png") if plots else ():
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # the PNG signature
    printed = capsys.readouterr().out
    assert "to reach cadence" in printed and "observatory's own rules" in printed
    doc = json.loads((out / "simulate.json").read_text())
    rows = {r["strategy"]: r for r in doc["strategies"]}
    assert set(rows) == {"joint", "cadence", "adaptive"}
    for r in rows.values():
        for key in ("strategy", "expected_bits", "realised_bits_mean", "realised_bits_std",
                    "exposures"):
            assert key in r
        assert len(r["seeds"]) == 2
        assert r["realised_bits_mean"] == pytest.approx(
            np.mean([s["realised_bits"] for s in r["seeds"]]))
    # A second run refuses to replace the file without --force, and leaves it as it was.
    before = (out / "simulate.json").read_bytes()
    assert main(["simulate", *argv]) == 2
    assert "already exists" in capsys.readouterr().err
    assert (out / "simulate.json").read_bytes() == before


def test_simulate_command_bad_input_writes_nothing(tmp_path, capsys, invented_fits):
    from planner.cli.main import main

    out = tmp_path / "sim"
    base = [str(TINY), "--truth", str(DEMO_TRUTH), "--out", str(out), "--no-cache"]
    assert main(["simulate", *base, "--seeds", "0"]) == 2
    assert "at least 1 seed" in capsys.readouterr().err
    assert main(["simulate", *base, "--hour-loss", "1.5"]) == 2
    assert "between 0 and 1" in capsys.readouterr().err
    assert main(["simulate", *base, "--plot-star", "Nobody-1"]) == 2
    assert "no target 'Nobody-1'" in capsys.readouterr().err
    assert main(["simulate", str(TINY), "--truth", str(tmp_path), "--out", str(out)]) == 2
    assert "no true-orbit files" in capsys.readouterr().err
    assert not out.exists()


def test_calibration_through_the_simulator(world):
    # Lindley (1956): with truths drawn from the posteriors, the mean realised KL of a set of
    # visits equals its expected information. Here end to end: real mid-exposure conditions
    # from the sky, the simulator, the experiment's expected_bits and measure_execution.
    # Tolerance 4 combined standard errors (false-failure budget 6e-5).
    from planner.simulation.experiment import expected_bits
    from planner.simulation.truth import truth_from_sample

    setup = _setup(world, [])
    visits = _night_visits(world, 0, 2) + _night_visits(world, 1, 1)
    cond = visit_conditions(visits, world["stars"], world["site"], world["sky"],
                            world["instrument"])
    expected, expected_se = expected_bits(setup, cond, return_stderr=True)
    rng = np.random.default_rng(17)
    totals = []
    for _ in range(300):
        truths = {t: truth_from_sample(p, int(rng.integers(p.n_samples)))
                  for t, p in world["posteriors"].items()}
        run = execute(cond, truths, INSTRUMENT, rng)
        totals.append(sum(s.bits for s in measure_execution(world["posteriors"], run, rng)))
    se = np.std(totals, ddof=1) / np.sqrt(len(totals))
    assert expected > 1.0
    assert abs(np.mean(totals) - expected) < 4.0 * np.hypot(se, expected_se)
