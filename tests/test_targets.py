"""A real target list: stars out of season left out and named, every star accounted for, the
queue export, --version and the plots.

The season scenario is the tiny run plus three of the demo's invented stars, two of them moved
to positions near the Sun in October (a third of the six stars out of season).
"""

import contextlib
import datetime as dt
import io
import json
import re
import shutil
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pytest
import yaml

from planner.cli.main import main
from planner.workflow import pipeline
from planner.workflow.outputs import format_utc, parse_utc, read_plan

ROOT = Path(__file__).resolve().parents[1]
TINY = ROOT / "tests" / "data" / "tiny" / "tiny.yaml"
DEMO = ROOT / "scenarios" / "demo"
#: Out of season in early October at latitude -27: RA 195 deg is a few degrees from the Sun,
#: RA 165 deg / Dec -62 deg stays low in the south-west after dusk.
EXTRA = [
    {"id": "Fenso-26", "ra_deg": 195.0, "dec_deg": -8.0, "v_mag": 7.32,
     "rv_file": "rv/fenso-26.csv"},
    {"id": "Borra-57", "ra_deg": 358.8138, "dec_deg": 10.3498, "v_mag": 8.17,
     "rv_file": "rv/borra-57.csv"},
    {"id": "Ganel-23", "ra_deg": 165.0, "dec_deg": -62.0, "v_mag": 10.25,
     "rv_file": "rv/ganel-23.csv"},
]
OUT_OF_SEASON = {"Fenso-26": "altitude", "Ganel-23": "airmass"}


def _scenario(folder: Path, change=None) -> Path:
    """Write the season scenario (tiny + EXTRA) into ``folder``, edited by ``change(doc)``."""
    (folder / "rv").mkdir(parents=True, exist_ok=True)
    doc = yaml.safe_load(TINY.read_text())
    doc["targets"] += [dict(t) for t in EXTRA]
    for t in doc["targets"]:
        source = TINY.parent / t["rv_file"]
        shutil.copy(source if source.exists() else DEMO / t["rv_file"], folder / t["rv_file"])
    if change is not None:
        change(doc)
    path = folder / "season.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    return path


def _run(argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="session")
def season(tmp_path_factory):
    return _scenario(tmp_path_factory.mktemp("season"))


@pytest.fixture(scope="session")
def season_plan(season, cache_dir, tmp_path_factory):
    """`nightbits plan` on the season scenario: (out folder, stdout, stderr)."""
    out = tmp_path_factory.mktemp("season-plan")
    code, stdout, stderr = _run(["plan", str(season), "--cache", str(cache_dir), "--out",
                                 str(out), "--force"])
    assert code == 0, stderr
    return out, stdout, stderr


@pytest.fixture(scope="session")
def season_run(season, cache_dir):
    scenario = pipeline.load(season)
    return pipeline.prepare(scenario, pipeline.fit_posteriors(scenario, cache_dir), jobs=1)


def _left_out_block(text: str) -> str:
    match = re.search(r"^left out: .*?\n\n", text, re.S | re.M)
    assert match, text[:2000]
    return match.group(0)


# ---- left out, not fatal --------------------------------------------------------------------


def test_plan_goes_on_and_names_the_stars_left_out(season_plan):
    out, stdout, stderr = season_plan
    block = _left_out_block(stdout)
    assert block.startswith("left out: 2 targets can never be observed")
    for name, limit in OUT_OF_SEASON.items():
        line = next(x for x in block.splitlines() if x.strip().startswith(name))
        assert line.split()[1] == limit
    # Listed once at the top of the schedule (before the first night), never logged again.
    assert stdout.index("left out:") < stdout.index("== night 1")
    assert stdout.count("left out:") == 1
    assert "never observable" not in stderr and "WARNING" not in stderr
    plan = read_plan(out / "plan.json")
    assert {e.target: e.limit for e in plan.left_out} == OUT_OF_SEASON
    assert not {v.target for v in plan.visits} & set(OUT_OF_SEASON)
    raw = json.loads((out / "plan.json").read_text())
    assert [e["target"] for e in raw["left_out"]] == list(OUT_OF_SEASON)


def test_the_limits_named_agree_with_astropy(season_run):
    # Outside reference: astropy's own AltAz of each left-out star every 5 minutes through the
    # true dark windows. Fenso-26 must stay below the site's 20 deg lower limit; Ganel-23 must
    # stay below 29.9 deg, where the Kasten and Young (1989) airmass reaches the limit 2.0.
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord
    from astropy.time import Time

    site = season_run.site
    where = EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg,
                                        site.elevation_m * u.m)
    jd = np.concatenate([np.arange(n.dark_start_jd, n.dark_end_jd, 5 / 1440)
                         for n in season_run.nights])
    frame = AltAz(obstime=Time(jd, format="jd", scale="utc"), location=where)
    for target, top in (("Fenso-26", 20.0), ("Ganel-23", 29.9)):
        spec = next(t for t in EXTRA if t["id"] == target)
        star = SkyCoord(spec["ra_deg"] * u.deg, spec["dec_deg"] * u.deg, frame="icrs")
        assert star.transform_to(frame).alt.deg.max() < top
    assert [e.target for e in season_run.excluded] == list(OUT_OF_SEASON)


def test_strict_restores_the_error_in_one_sentence(season, cache_dir, tmp_path):
    code, stdout, stderr = _run(["plan", str(season), "--cache", str(cache_dir), "--out",
                                 str(tmp_path / "out"), "--strict"])
    assert code == 2
    lines = stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in stderr
    assert "season.yaml: targets[3]: Target 'Fenso-26' is never observable" in lines[0]
    assert lines[0].count("never observable") == 1 and "(1 more targets likewise)" in lines[0]
    assert not (tmp_path / "out").exists()


def test_compare_names_the_stars_left_out(season, cache_dir, tmp_path):
    code, stdout, stderr = _run(["compare", str(season), "--cache", str(cache_dir),
                                 "--time-limit", "2", "--out", str(tmp_path)])
    assert code == 0, stderr
    block = _left_out_block(stdout)
    assert all(name in block for name in OUT_OF_SEASON)
    assert "strategy  exposures" in stdout
    doc = json.loads((tmp_path / "compare.json").read_text())
    assert {e["target"]: e["limit"] for e in doc["left_out"]} == OUT_OF_SEASON


def test_simulate_names_the_stars_left_out(season, cache_dir, tmp_path):
    code, stdout, stderr = _run(["simulate", str(season), "--cache", str(cache_dir), "--truth",
                                 str(DEMO / "truth"), "--seeds", "1", "--strategies", "greedy",
                                 "--out", str(tmp_path)])
    assert code == 0, stderr
    block = _left_out_block(stdout)
    assert all(name in block for name in OUT_OF_SEASON)
    doc = json.loads((tmp_path / "simulate.json").read_text())
    assert {e["target"]: e["limit"] for e in doc["left_out"]} == OUT_OF_SEASON


# ---- every star in the summary ----------------------------------------------------------------


def test_summary_accounts_for_every_star(season_plan, season_run):
    out, stdout, _ = season_plan
    plan = read_plan(out / "plan.json")
    ids = [t.id for t in season_run.scenario.targets]
    assert [row.target for row in plan.target_summary] == ids
    summary = stdout[stdout.index("per-target summary"):]
    for row in plan.target_summary:
        mine = [v for v in plan.visits if v.target == row.target]
        assert row.visits == len(mine)
        assert row.nights == len({v.night for v in mine})
        assert row.expected_bits == pytest.approx(plan.target_bits[row.target], abs=1e-4)
        assert re.search(rf"^{re.escape(row.target)}\s+{row.visits}\s+{row.nights}\s", summary,
                         re.M)
        spec = season_run.scenario.target(row.target)
        if row.target in OUT_OF_SEASON:
            assert row.bound == OUT_OF_SEASON[row.target] and row.visits == 0
            assert row.reason.startswith("never observable")
        elif row.bound == "max_visits":
            assert row.visits == spec.max_visits
        elif row.bound == "max_visits_per_night":
            s = ids.index(row.target)
            nights = [k for k in range(len(season_run.nights))
                      if season_run.observable[:, s, season_run.sky.night_index == k].any()]
            per_night = [sum(v.night == season_run.nights[k].date for v in mine) for k in nights]
            assert per_night == [spec.max_visits_per_night] * len(nights)
    assert {row.bound for row in plan.target_summary} >= {"max_visits", "altitude", "airmass"}


def test_summary_of_stars_bound_by_telescope_time(season, cache_dir, tmp_path):
    # Loosen every rule, so telescope time binds: each such row carries the rate of the last
    # visit taken, which must be the plan's lowest marginal bits per minute of exposure and
    # slew, recomputed here from plan.json.
    def loosen(doc):
        for t in doc["targets"]:
            t.pop("max_visits", None)
            t.pop("min_gap_h", None)
            t["max_visits_per_night"] = 40
        doc["run"]["nights"] = 1

    path = _scenario(tmp_path / "loose", loosen)
    code, stdout, stderr = _run(["plan", str(path), "--cache", str(cache_dir), "--strategy",
                                 "greedy", "--out", str(tmp_path / "out")])
    assert code == 0, stderr
    plan = read_plan(tmp_path / "out" / "plan.json")
    rates = [v.expected_bits / ((v.exposure_s + v.slew_s) / 60.0) for v in plan.visits]
    timed = [row for row in plan.target_summary if row.bound == "telescope_time"]
    assert timed
    for row in timed:
        assert row.last_bits_per_min == pytest.approx(min(rates), abs=1e-5)
        assert row.best_bits_per_min > 0
        assert "outvalued" in row.reason
    assert "bits per telescope minute" in stdout


# ---- the queue export -------------------------------------------------------------------------


def test_plan_ecsv_reads_back_through_astropy_with_units(season_plan):
    import astropy.units as u
    from astropy.table import Table
    from astropy.time import Time

    out, _, _ = season_plan
    plan = read_plan(out / "plan.json")
    table = Table.read(out / "plan.ecsv")  # format from the suffix, as a user would read it
    visits = sorted(plan.visits, key=lambda v: parse_utc(v.start_utc))
    assert len(table) == len(visits) > 0
    assert table["ra"].unit == u.deg and table["dec"].unit == u.deg
    assert table["v_mag"].unit == u.mag
    assert table["exposure"].unit == u.s and table["slew"].unit == u.s
    assert table["expected_bits"].unit == u.bit
    assert table.meta["frame"] == "icrs" and table.meta["epoch"] == "J2000.0"
    assert isinstance(table["shutter_open_utc"], Time)
    zone = ZoneInfo(plan.site["timezone"])
    for row, v in zip(table, visits, strict=True):
        assert row["target"] == v.target
        assert (row["ra"], row["dec"]) == (v.ra_deg, v.dec_deg)
        assert row["shutter_open_utc"].isot == v.start_utc.rstrip("Z")
        assert row["shutter_close_utc"].isot == v.end_utc.rstrip("Z")
        slew = (row["shutter_open_utc"] - row["slew_start_utc"]).to_value(u.s)
        assert slew == pytest.approx(v.slew_s, abs=1.0)
        opened = dt.datetime.fromisoformat(v.start_utc.replace("Z", "+00:00"))
        assert row["shutter_open_local"] == opened.astimezone(zone).isoformat()
    spec = {t["id"]: t["v_mag"] for t in EXTRA}
    for row in table:
        if row["target"] in spec:
            assert row["v_mag"] == spec[row["target"]]
    # Priority: a permutation of 1..n, falling with bits per telescope minute.
    assert sorted(table["priority"]) == list(range(1, len(table) + 1))
    rate = table["expected_bits"] / (table["exposure"] + table["slew"])
    ranked = np.asarray(rate)[np.argsort(table["priority"])]
    assert np.all(np.diff(ranked) <= 1e-12)


# ---- correct reasons in curves ----------------------------------------------------------------


def test_curves_says_moon_when_the_moon_is_the_cause(cache_dir, tmp_path):
    # Put Quidra-7 where astropy sees the Moon from the site halfway through the Moon's time
    # up in the first night's dark window: then on that night the Moon, not the horizon,
    # keeps it out (the separation stays under the smallest rule of the table, 15 deg, while
    # both are up; checked with astropy).
    import astropy.units as u
    from astropy.coordinates import AltAz, EarthLocation, SkyCoord, get_body
    from astropy.time import Time

    scenario = pipeline.load(TINY)
    night = pipeline.physical_setup(scenario)[1][0]
    assert night.moon_up, "the first tiny night has the Moon up"
    middle = Time(0.5 * sum(night.moon_up[0]), format="jd", scale="utc")
    site = scenario.site
    where = EarthLocation.from_geodetic(site.longitude_deg * u.deg, site.latitude_deg * u.deg,
                                        site.elevation_m * u.m)
    # The topocentric apparent direction (GCRS axes, the observer's own position), not the
    # barycentric one: for the Moon the two differ by far more than the rule.
    moon = get_body("moon", middle, where)
    folder = tmp_path / "run"
    shutil.copytree(TINY.parent, folder)
    doc = yaml.safe_load(TINY.read_text())
    quidra = doc["targets"][2]
    quidra["ra_deg"], quidra["dec_deg"] = float(moon.ra.deg), float(moon.dec.deg)
    path = folder / "moon.yaml"
    path.write_text(yaml.safe_dump(doc, sort_keys=False))
    code, stdout, stderr = _run(["curves", str(path), "--cache", str(cache_dir)])
    assert code == 0, stderr
    row = next(x for x in stdout.splitlines() if x.startswith("Quidra-7"))
    first_night = row[16:30]  # the first 14-character cell after the 16-character name
    assert first_night.strip() == "no: Moon", row
    jd = np.arange(night.dark_start_jd, night.dark_end_jd, 10 / 1440)
    frame = AltAz(obstime=Time(jd, format="jd", scale="utc"), location=where)
    star = SkyCoord(moon.ra, moon.dec, frame="icrs").transform_to(frame)
    moon_now = get_body("moon", frame.obstime, where).transform_to(frame)
    up = star.alt.deg > site.min_altitude_deg
    assert up.any()  # the star is up that night, so the horizon is not the reason
    sep = star[up].separation(moon_now[up]).deg
    assert np.all((sep < 15.0) | (moon_now.alt.deg[up] <= 0.0))
    assert np.any(moon_now.alt.deg[up] > 0.0)


# ---- version and plots ------------------------------------------------------------------------


def test_version(capsys):
    from importlib.metadata import version

    import planner

    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"nightbits {planner.VERSION}"
    assert version("nightbits") == planner.VERSION  # the installed metadata reads the same


def _kasten_young(alt_deg):
    """Kasten and Young (1989), Applied Optics 28, 4735, eq. 3 (written here from the paper)."""
    h = np.asarray(alt_deg, float)
    return 1.0 / (np.sin(np.radians(h)) + 0.50572 * (h + 6.07995) ** -1.6364)


def test_night_chart_shows_scheduled_stars_on_local_clock_time(season_plan, season_run,
                                                               tmp_path):
    import matplotlib

    matplotlib.use("Agg")  # chosen by the test: the library forces no backend
    import matplotlib.dates as mdates

    from planner.workflow.plots import night_figure, plot_nights

    out, _, _ = season_plan
    plan = read_plan(out / "plan.json")
    fig = night_figure(season_run, plan)
    zone = ZoneInfo(season_run.site.timezone)
    axes = [ax for ax in fig.axes if ax.get_ylabel() == "altitude [deg]"]
    assert len(axes) == len(plan.nights)
    for ax, night in zip(axes, season_run.nights, strict=True):
        labels = {h.get_label() for h in ax.get_legend().legend_handles}
        scheduled = {v.target for v in plan.visits if v.night == night.date}
        stars = {x for x in labels if not x.startswith(("airmass", "lowest"))}
        assert stars == scheduled and not stars & set(OUT_OF_SEASON)
        limit = [line for line in ax.get_lines() if line.get_label().startswith("airmass 2")]
        (y,) = set(limit[0].get_ydata())
        assert _kasten_young(y) == pytest.approx(2.0, abs=1e-4)
        start = mdates.num2date(ax.get_xlim()[0], tz=zone)
        dark = dt.datetime.fromisoformat(
            plan.nights[axes.index(ax)].dark_start_utc.replace("Z", "+00:00")).astimezone(zone)
        assert abs((start - dark).total_seconds()) <= season_run.sky.step_s
        tick = ax.xaxis.get_major_formatter()(ax.get_xticks()[1])
        assert re.fullmatch(r"\d\d:\d\d", tick)
    path = plot_nights(season_run, plan, tmp_path / "nights.png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_curve_plot_is_on_date_time_and_compare_labels_clear_the_bars(season_run, tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.dates as mdates

    from planner.workflow.plots import comparison_figure, curves_figure, plot_comparison

    fig = curves_figure(season_run)
    (ax,) = fig.axes
    first = mdates.num2date(ax.get_lines()[0].get_xdata(orig=False)[0])
    expected = dt.datetime.fromisoformat(format_utc(season_run.sky.times_jd[0])
                                         .replace("Z", "+00:00"))
    assert abs((first - expected).total_seconds()) < 1.0
    assert isinstance(ax.xaxis.get_major_formatter(), mdates.ConciseDateFormatter)

    comparison = pipeline.compare(season_run, time_limit_s=1)
    fig = comparison_figure(comparison)
    (ax,) = fig.axes
    rows = comparison.comparison.rows
    texts = list(ax.texts)
    assert len(texts) == len(rows)
    for text, row in zip(texts, rows, strict=True):
        assert text.xy[1] == pytest.approx(row.total_bits + row.stderr)
        assert text.get_position()[1] > 0 and text.get_va() == "bottom"
    assert ax.get_ylim()[1] > max(r.total_bits + r.stderr for r in rows)
    path = plot_comparison(comparison, tmp_path / "compare.svg")
    assert path.read_text().lstrip().startswith("<?xml")


def test_library_never_chooses_a_matplotlib_backend():
    offenders = [str(p.relative_to(ROOT)) for p in (ROOT / "planner").rglob("*.py")
                 if "matplotlib.use(" in p.read_text() or "import matplotlib.pyplot" in
                 p.read_text()]
    assert offenders == []
