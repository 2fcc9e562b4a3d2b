"""Seeded allocation instances, kept in the repository so every change is measured on the same work.

Two kinds:

* :func:`grid_instance`: hand-made geometry and values on a small grid (no sky, no posterior),
  for exact tests of the strategies (enumeration, constructed cases);
* :func:`sky_instance`: an invented site and run with invented stars, real sky geometry from
  :mod:`planner.sky.tracks`, observability, noise and slews from the physical modules, and synthetic
  orbit-posterior clouds whose one-visit information comes from :mod:`planner.information.gain`.

Nothing here is real: the site, the stars and their orbits are drawn from the seed.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from planner.allocation.problem import Problem, build_problem, problem_from_sky
from planner.allocation.rules import TargetRules

__all__ = ["SkyInstance", "grid_instance", "shared_sky_instance", "sky_instance"]

#: Invented site (open ocean, no observatory there); nights in a northern spring run.
SITE_ARGS = dict(
    latitude_deg=27.5,
    longitude_deg=-61.0,
    elevation_m=2150.0,
    timezone="Etc/GMT+4",
    min_altitude_deg=20.0,
)
FIRST_NIGHT = "2027-03-10"


def grid_instance(
    n_targets: int,
    n_nights: int,
    *,
    rng: np.random.Generator,
    hours: float = 2.0,
    step_min: int = 10,
    exposure_s=(600.0,),
    rules: list[TargetRules] | None = None,
    slew=None,
    overhead_s: float = 0.0,
    keep_per_night: int = 100,
) -> Problem:
    """A small hand-made problem: targets at random azimuths, random smooth values.

    Each target is observable during a random sub-window of each night and its one-visit bits
    are a random bump over the night; alt/az move slowly so slews are well defined.
    """
    per = int(hours * 60 / step_min) + 1
    times = np.concatenate(
        [2461000.5 + n + np.arange(per) * step_min / 1440 for n in range(n_nights)]
    )
    night = np.repeat(np.arange(n_nights), per)
    dark = np.array([[times[n * per], times[n * per] + hours / 24] for n in range(n_nights)])
    frac = np.tile(np.arange(per) / (per - 1), n_nights)
    n_opt = len(exposure_s)
    lo = rng.uniform(0.0, 0.5, (n_targets, n_nights))
    width = rng.uniform(0.3, 0.8, (n_targets, n_nights))
    ok = (frac[None] >= lo[:, night]) & (frac[None] <= lo[:, night] + width[:, night])
    peak = rng.uniform(0.5, 3.0, (n_targets, n_nights))
    centre = lo + width * rng.uniform(0.2, 0.8, (n_targets, n_nights))
    bits = peak[:, night] * np.exp(-0.5 * ((frac[None] - centre[:, night]) / 0.25) ** 2)
    gain = 1.0 + 0.3 * np.arange(n_opt)[:, None, None]
    az0 = rng.uniform(0, 360, n_targets)
    alt = 40 + 30 * np.sin(np.pi * frac)[None] + rng.uniform(-10, 10, (n_targets, 1))
    az = (az0[:, None] + 20 * frac[None]) % 360
    rules = rules if rules is not None else [TargetRules(max_visits=2) for _ in range(n_targets)]
    return build_problem(
        times_jd=times,
        night_index=night,
        dark_jd=dark,
        night_dates=[f"2027-01-{n + 1:02d}" for n in range(n_nights)],
        target_names=[f"T{k:02d}" for k in range(n_targets)],
        rules=rules,
        exposure_s=exposure_s,
        observable=np.broadcast_to(ok, (n_opt, *ok.shape)),
        bits=gain * bits[None],
        sigma=np.ones((n_opt, n_targets, times.size)) / gain,
        airmass=1 / np.sin(np.radians(alt)),
        altitude_deg=alt,
        azimuth_deg=az,
        bjd_tdb=np.broadcast_to(times, (n_targets, times.size)),
        slew=slew,
        overhead_s=overhead_s,
        keep_per_night=keep_per_night,
        thin_spacing_min=1,
    )


@dataclass(frozen=True, eq=False)
class SkyInstance:
    """A realistic benchmark instance: the problem and everything needed to score plans.

    Attributes
    ----------
    problem : Problem
    predictors : tuple of planner.information.predict.Predictor
        One synthetic posterior per target (problem order).
    sky : planner.sky.tracks.Sky
    constraints : planner.sky.observability.Constraints
    mount : planner.sky.slew.Mount
    ra_deg, dec_deg : ndarray, shape (n_targets,)
    """

    problem: Problem
    predictors: tuple
    sky: object
    constraints: object
    mount: object
    ra_deg: np.ndarray
    dec_deg: np.ndarray


def _orbit_cloud(rng: np.random.Generator, n_samples: int, t0: float):
    """Samples of a partly known orbit: a true orbit plus spreads typical of a few dozen RVs."""
    period = np.exp(rng.uniform(np.log(3.0), np.log(300.0)))
    k = rng.uniform(3.0, 40.0)
    e = rng.uniform(0.0, 0.5)
    frac_p = np.exp(rng.uniform(np.log(3e-4), np.log(2e-2)))
    p = period * (1 + frac_p * rng.standard_normal(n_samples))
    if rng.uniform() < 0.2:  # an alias: a second period mode
        alias = 1.0 / abs(1.0 / period - 1.0 / 365.25)
        p = np.where(
            rng.uniform(size=n_samples) < 0.4,
            alias * (1 + frac_p * rng.standard_normal(n_samples)),
            p,
        )
    return dict(
        period=np.abs(p),
        semi_amplitude=np.abs(k * (1 + 0.15 * rng.standard_normal(n_samples))),
        eccentricity=np.clip(e + 0.05 * rng.standard_normal(n_samples), 0.0, 0.9),
        omega=rng.uniform(0, 2 * np.pi) + 0.3 * rng.standard_normal(n_samples),
        time_periastron=t0
        + rng.uniform(0, period)
        + 0.05 * period * rng.standard_normal(n_samples),
        offset=rng.normal(0.0, 1.5, n_samples),
        jitter=np.abs(rng.normal(2.0, 0.4, n_samples)),
    )


def sky_instance(
    n_targets: int,
    n_nights: int,
    *,
    seed: int,
    n_samples: int = 500,
    exposure_s=(600.0, 1200.0),
    max_visits: int = 4,
    keep_per_night: int = 8,
    step_s: float = 120.0,
    slews: bool = True,
) -> SkyInstance:
    """An invented run of ``n_targets`` stars over ``n_nights`` nights, fully seeded."""
    from planner.information.gain import one_visit_bits
    from planner.information.predict import Predictor
    from planner.sky.exposure import Instrument, rv_sigma
    from planner.sky.observability import Constraints, observable_starts
    from planner.sky.site import Site, dark_windows, run_dates
    from planner.sky.slew import Mount
    from planner.sky.tracks import compute_sky

    rng = np.random.default_rng(seed)
    site = Site(**SITE_ARGS)
    nights = dark_windows(site, run_dates(FIRST_NIGHT, n_nights), "nautical")
    mid = 0.5 * (nights[0].dark_start_jd + nights[0].dark_end_jd)
    # Greenwich mean sidereal time, Meeus (1998) eq. 12.4 (from memory), for the RA range up.
    lst = (280.46061837 + 360.98564736629 * (mid - 2451545.0) + SITE_ARGS["longitude_deg"]) % 360
    half = 0.5 * (nights[0].dark_end_jd - nights[0].dark_start_jd) * 360.0
    ra = (lst + rng.uniform(-half - 30, half + 30, n_targets)) % 360
    dec = np.degrees(
        np.arcsin(rng.uniform(np.sin(np.radians(-25)), np.sin(np.radians(70)), n_targets))
    )
    names = [f"NB-{k + 1:03d}" for k in range(n_targets)]
    sky = compute_sky(site, nights, ra, dec, step_s=step_s, names=names)
    constraints = Constraints(max_airmass=2.0)
    instrument = Instrument()
    v_mag = rng.uniform(6.0, 10.0, n_targets)
    n_times = sky.times_jd.size
    observable = np.stack([observable_starts(sky, constraints, e) for e in exposure_s])
    sigma = np.stack([rv_sigma(instrument, v_mag[:, None], e, sky.airmass) for e in exposure_s])
    bits = np.zeros((len(exposure_s), n_targets, n_times))
    predictors = []
    for s in range(n_targets):
        pred = Predictor.from_parameters(**_orbit_cloud(rng, n_samples, sky.bjd_tdb[s, 0]))
        predictors.append(pred)
        cols = np.flatnonzero(observable[:, s].any(axis=0))
        if cols.size == 0:
            continue
        v = pred.velocities(sky.bjd_tdb[s, cols])
        for o in range(len(exposure_s)):
            total = np.sqrt(sigma[o, s, cols][None, :] ** 2 + pred.jitter[:, None] ** 2)
            bits[o, s, cols] = one_visit_bits(v, total)
    weights = np.where(rng.uniform(size=n_targets) < 0.2, 2.0, 1.0)
    rules = [TargetRules(max_visits=max_visits, weight=float(w)) for w in weights]
    problem = problem_from_sky(
        sky,
        rules=rules,
        exposure_s=exposure_s,
        observable=observable,
        bits=bits,
        sigma=sigma,
        mount=Mount() if slews else None,
        keep_per_night=keep_per_night,
    )
    return SkyInstance(
        problem, tuple(predictors), sky, constraints, Mount() if slews else None, ra, dec
    )


@lru_cache(maxsize=4)
def shared_sky_instance(n_targets: int, n_nights: int, seed: int) -> SkyInstance:
    """:func:`sky_instance` built once per process (tests share it; it is read-only)."""
    return sky_instance(n_targets, n_nights, seed=seed, n_samples=400)
