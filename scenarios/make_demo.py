"""Generate the invented demo run in ``scenarios/demo/`` (deterministic: same files every run).

Everything here is made up: the site (Pilquen Ridge Observatory, an invented place in the
southern Andes), the forty stars (names built from invented syllables, coordinates drawn at
random), their true orbits, and their past velocities, which are computed from those orbits with
:func:`inference.keplerian.radial_velocity` plus Gaussian measurement noise and stellar jitter
from one seeded generator. The true orbits are written beside the data (``truth/*.json``) for the
simulator. Nothing is copied from a real catalogue.

Usage::

    python scenarios/make_demo.py            # rewrite scenarios/demo/
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from inference.keplerian import radial_velocity  # noqa: E402
from planner.workflow.outputs import atomic_write_text  # noqa: E402

OUT = ROOT / "scenarios" / "demo"
SEED = 20271004
INSTRUMENT = "ridge-echelle"
LONGITUDE_DEG = -69.95
FIRST_NIGHT = "2027-10-04"
#: BJD_TDB of 2027-09-26 00:00 UTC: the last past velocity is taken before this.
LAST_PAST_BJD = 2461674.5

SYLLABLES = ("ver", "kal", "ost", "mi", "dra", "lun", "sef", "ta", "bor", "qui", "nel", "ra",
             "zho", "pe", "ank", "il", "mur", "so", "fen", "ga")

# (kind, how many): the mix of difficulty in the run.
KINDS = (("well constrained", 12), ("sparsely sampled", 10), ("aliased period", 3),
         ("highly eccentric", 3), ("two planets", 4), ("no planet", 3), ("moderate", 5))


def _names(rng: np.random.Generator, n: int) -> list[str]:
    names: set[str] = set()
    while len(names) < n:
        word = "".join(rng.choice(SYLLABLES, size=2, replace=False)).capitalize()
        names.add(f"{word}-{rng.integers(1, 60)}")
    return sorted(names)


def _transit_bjd(ra_deg: float, near_bjd: float) -> float:
    """BJD of the upper transit of right ascension ``ra_deg`` at the site nearest ``near_bjd``.

    Uses the IAU 1982 mean sidereal time series to first order (GMST = 18.697374558 h +
    24.06570982441908 h per day since J2000; Meeus 1998, Astronomical Algorithms, ch. 12),
    ample for spreading invented epochs over the nights when a star is up.
    """
    lst_h = (18.697374558 + 24.06570982441908 * (near_bjd - 2451545.0) + LONGITUDE_DEG / 15.0)
    dh = ((ra_deg / 15.0 - lst_h + 12.0) % 24.0) - 12.0
    return near_bjd + dh / 24.0 / 1.00273790935


def _epochs(rng, ra_deg, n, mode):
    """Invented past observing epochs when the star is up at night (BJD_TDB, days)."""
    # Day of the year when the star transits at local solar midnight (Sun 12 h away in RA).
    opposition_doy = (ra_deg / 15.0 - 12.0) % 24.0 / 24.0 * 365.25 + 79.0
    times = []
    if mode == "aliased period":
        # One season, one velocity a night at nearly the same sidereal time: daily aliases.
        start = np.floor(2461040.5 + opposition_doy - 20.0) + 0.5  # 0 h UTC, 2026 season
        for night in range(n):
            midnight = start + night - LONGITUDE_DEG / 360.0
            times.append(_transit_bjd(ra_deg, midnight) + rng.normal(0.0, 0.01))
        return np.sort(np.array(times))
    years = (2460310.5, 2460675.5, 2461040.5, 2461405.5)  # 1 January 2024-2027 (UTC, approx.)
    while len(times) < n:
        year = years[rng.integers(0, len(years))]
        day = np.floor(year + opposition_doy + rng.uniform(-60.0, 60.0)) + 0.5  # 0 h UTC
        midnight = day - LONGITUDE_DEG / 360.0
        transit = _transit_bjd(ra_deg, midnight)
        t = transit + rng.uniform(-2.5, 2.5) / 24.0
        if abs(t - midnight) < 5.0 / 24.0 and t < LAST_PAST_BJD:
            times.append(t)
    return np.sort(np.array(times))


def _planet(rng, period_range, k_range, e_max, t0):
    period = float(np.exp(rng.uniform(*np.log(period_range))))
    return {
        "period_d": round(period, 5),
        "semi_amplitude_ms": round(float(rng.uniform(*k_range)), 3),
        "eccentricity": round(float(rng.uniform(0.0, e_max)), 4),
        "omega_rad": round(float(rng.uniform(0.0, 2.0 * np.pi)), 4),
        "time_periastron_bjd": round(t0 + float(rng.uniform(0.0, period)), 5),
    }


def _orbit(rng, kind, t0):
    if kind == "no planet":
        return []
    if kind == "aliased period":
        return [_planet(rng, (2.5, 4.5), (15.0, 35.0), 0.05, t0)]
    if kind == "highly eccentric":
        planet = _planet(rng, (60.0, 300.0), (20.0, 60.0), 0.0, t0)
        planet["eccentricity"] = round(float(rng.uniform(0.75, 0.88)), 4)
        return [planet]
    if kind == "two planets":
        inner = _planet(rng, (5.0, 30.0), (6.0, 20.0), 0.15, t0)
        outer = _planet(rng, (150.0, 900.0), (12.0, 40.0), 0.3, t0)
        return [inner, outer]
    if kind == "sparsely sampled":
        return [_planet(rng, (8.0, 400.0), (8.0, 40.0), 0.4, t0)]
    return [_planet(rng, (3.0, 600.0), (5.0, 50.0), 0.4, t0)]


def _n_obs(rng, kind):
    return {"well constrained": (28, 45), "sparsely sampled": (6, 9), "aliased period": (9, 12),
            "highly eccentric": (14, 20), "two planets": (30, 42), "no planet": (10, 18),
            "moderate": (12, 18)}[kind]


def main() -> None:
    """Write demo.yaml, rv/*.csv and truth/*.json into scenarios/demo/."""
    rng = np.random.default_rng(SEED)
    kinds = [kind for kind, count in KINDS for _ in range(count)]
    names = _names(rng, len(kinds))
    order = rng.permutation(len(kinds))
    (OUT / "rv").mkdir(parents=True, exist_ok=True)
    (OUT / "truth").mkdir(parents=True, exist_ok=True)
    targets = []
    for name, kind in zip(names, [kinds[i] for i in order], strict=True):
        # Right ascension 20 h - 7 h (through 0 h) and declination -75 to +20 deg: up at night
        # in early October from latitude -27.5 deg.
        ra = float((rng.uniform(300.0, 465.0)) % 360.0)
        dec = float(np.degrees(np.arcsin(rng.uniform(np.sin(np.radians(-75.0)),
                                                     np.sin(np.radians(20.0))))))
        v_mag = float(rng.uniform(5.5, 10.5))
        n_obs = int(rng.integers(*_n_obs(rng, kind)))
        times = _epochs(rng, ra, n_obs, kind)
        planets = _orbit(rng, kind, float(times[0]))
        err = np.round(0.9 * 10 ** (0.2 * (v_mag - 8.0)) * rng.uniform(0.9, 1.3, n_obs) + 0.4, 2)
        jitter = round(float(rng.uniform(0.5, 3.0)), 3)
        offset = round(float(rng.uniform(-15.0, 15.0)), 3)
        model = np.full(n_obs, offset)
        for p in planets:
            model += radial_velocity(times, p["period_d"], p["semi_amplitude_ms"],
                                     p["eccentricity"], p["omega_rad"], p["time_periastron_bjd"])
        rv = model + rng.normal(0.0, np.sqrt(err**2 + jitter**2))
        slug = name.lower()
        lines = ["time,rv,rv_err,instrument"]
        lines += [f"{t:.6f},{v:.3f},{e:.2f},{INSTRUMENT}" for t, v, e in zip(times, rv, err,
                                                                              strict=True)]
        atomic_write_text(OUT / "rv" / f"{slug}.csv", "\n".join(lines) + "\n")
        truth = {"target": name, "kind": kind, "instrument": INSTRUMENT, "offset_ms": offset,
                 "jitter_ms": jitter, "planets": planets}
        atomic_write_text(OUT / "truth" / f"{slug}.json", json.dumps(truth, indent=2) + "\n")
        # Stars with no planet: whether there is one is itself the question (docs/priors.md);
        # they compare no planet with one (max_planets 1).
        n_fit = {"two planets": 2, "no planet": "auto"}.get(kind, 1)
        targets.append((name, ra, dec, v_mag, slug, n_fit, kind))
    atomic_write_text(OUT / "demo.yaml", _yaml(targets))


def _yaml(targets) -> str:
    head = f"""\
# The nightbits demo run. Everything in it is invented: the site, the stars and their
# velocities (made by scenarios/make_demo.py from invented orbits). See README.md here.
name: Pilquen Ridge demo run
site:
  name: Pilquen Ridge Observatory (invented)
  latitude_deg: -27.45
  longitude_deg: {LONGITUDE_DEG}
  elevation_m: 2410
  timezone: America/Santiago
  min_altitude_deg: 20
run:
  first_night: {FIRST_NIGHT}
  nights: 5
  twilight: nautical
constraints:
  max_airmass: 2.0
  moon_table: [[0.25, 15], [0.6, 25], [1.0, 35]]
telescope:
  azimuth_rate_deg_s: 2.0
  altitude_rate_deg_s: 1.5
  settle_s: 20
  acquisition_s: 60
instrument:
  name: {INSTRUMENT}
  reference_sigma_ms: 0.9
  reference_v_mag: 8.0
  reference_exposure_s: 900
  floor_ms: 0.4
  extinction_mag_per_airmass: 0.15
  readout_s: 30
exposures:
  options_s: [600, 1200]
sky:
  step_s: 300
sampler:
  samples: 200
  seed: 7
  min_period_d: 1.0
  max_period_d: 3000
solver:
  seed: 0
  workers: 2
targets:
"""
    rows = []
    for name, ra, dec, v_mag, slug, n_fit, kind in targets:
        row = (f"  - id: {name}   # {kind}\n    ra_deg: {ra:.4f}\n    dec_deg: {dec:.4f}\n"
               f"    v_mag: {v_mag:.2f}\n    rv_file: rv/{slug}.csv\n    planets: {n_fit}\n"
               f"    max_visits: 8\n    max_visits_per_night: 2\n    min_gap_h: 2\n")
        if n_fit == "auto":
            row += "    max_planets: 1\n"
        if v_mag < 7.0:
            row += "    exposures_s: [300, 600]\n"
        rows.append(row)
    return head + "".join(rows)


if __name__ == "__main__":
    main()
