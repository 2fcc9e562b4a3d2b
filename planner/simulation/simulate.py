"""Executing a plan against known true orbits: synthetic velocities for every visit.

For each visit the simulator takes the true orbit's velocity at the mid-exposure time
(barycentric, BJD_TDB), adds Gaussian noise with the standard deviation the planner's own noise
model predicts for that exposure at that airmass (:func:`planner.sky.exposure.rv_sigma`, looked up
at
call time so there is one implementation only) and the star's true jitter in quadrature, and
reports the measurement error without the jitter, as a real reduction would. Weather loss
(:mod:`planner.simulation.weather`) removes visits that overlap lost time. True orbits:
:mod:`planner.simulation.truth`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from inference.data import RVData
from planner.errors import PlanError
from planner.simulation.weather import lost_mask
from planner.sky import exposure
from planner.sky.tracks import pointing_at

__all__ = ["Conditions", "Execution", "execute", "visit_conditions"]


@dataclass(frozen=True)
class Execution:
    """The outcome of executing visits: one synthetic velocity per visit the weather allowed.

    Attributes
    ----------
    visits : tuple of planner.allocation.plan.Visit
        Executed visits, in time order.
    lost : tuple of planner.allocation.plan.Visit
        Visits lost to the weather.
    bjd_tdb : ndarray, shape (n_executed,)
        Mid-exposure times, BJD_TDB [d].
    rv : ndarray, shape (n_executed,)
        Synthetic velocities [m/s].
    rv_err : ndarray, shape (n_executed,)
        Reported measurement errors: the noise model's sigma, without jitter [m/s].
    airmass : ndarray, shape (n_executed,)
        Airmass at mid-exposure.
    instrument : str
        Instrument name of every velocity.
    """

    visits: tuple
    lost: tuple
    bjd_tdb: np.ndarray
    rv: np.ndarray
    rv_err: np.ndarray
    airmass: np.ndarray
    instrument: str

    def targets(self):
        """Return the targets with at least one new velocity, in order of first visit."""
        return tuple(dict.fromkeys(v.target for v in self.visits))

    def rows(self, target):
        """Return the indices of one target's new velocities, ndarray of int (n,)."""
        return np.array([k for k, v in enumerate(self.visits) if v.target == target], dtype=int)

    def data(self, target, row=None):
        """Return one target's new velocities as an RVData record (None if it has none).

        Parameters
        ----------
        target : str
            Target id.
        row : int, optional
            Only the velocity of this execution row (which must belong to `target`).
        """
        rows = self.rows(target)
        if row is not None:
            rows = rows[rows == row]
        if rows.size == 0:
            return None
        return RVData.from_arrays(self.bjd_tdb[rows], self.rv[rows], self.rv_err[rows],
                                  [self.instrument] * rows.size, source=f"simulated {target}")


@dataclass(frozen=True)
class Conditions:
    """What the sky and the instrument give each visit, fixed once the visits are fixed.

    Attributes
    ----------
    visits : tuple of planner.allocation.plan.Visit
        The visits, in time order.
    bjd_tdb : ndarray, shape (n_visits,)
        Mid-exposure times, BJD_TDB [d].
    airmass : ndarray, shape (n_visits,)
        Exact airmass at mid-exposure.
    sigma_ms : ndarray, shape (n_visits,)
        Measurement noise from the planner's noise model, without jitter [m/s].
    """

    visits: tuple
    bjd_tdb: np.ndarray
    airmass: np.ndarray
    sigma_ms: np.ndarray


def visit_conditions(visits, stars, site, sky, instrument):
    """Mid-exposure barycentric time, exact airmass and measurement noise of every visit.

    Parameters
    ----------
    visits : sequence of planner.allocation.plan.Visit
        The visits (any order; returned in time order).
    stars : mapping of str to object with ``ra_deg``, ``dec_deg``, ``v_mag``
        Position [deg] and V magnitude of every visited target (scenario target records).
    site : planner.sky.site.Site
        The observatory.
    sky : planner.sky.tracks.Sky
        The planner's sky of the run: barycentric correction, Moon altitude and illumination
        are interpolated from it at mid-exposure.
    instrument : planner.sky.exposure.Instrument
        The noise model's instrument.

    Returns
    -------
    Conditions

    Notes
    -----
    The noise is ``planner.sky.exposure.rv_sigma`` looked up at call time (one implementation),
    evaluated at the exact mid-exposure airmass from astropy
    (:func:`planner.sky.tracks.pointing_at`)
    and the Moon's sky brightness (:func:`planner.sky.exposure.moon_sky_brightness`).
    """
    ordered = tuple(sorted(visits, key=lambda v: (v.start_jd, v.target)))
    n = len(ordered)
    if n == 0:
        empty = np.zeros(0)
        return Conditions(visits=(), bjd_tdb=empty, airmass=empty, sigma_ms=empty)
    unknown = sorted({v.target for v in ordered} - set(stars))
    if unknown:
        raise PlanError(f"visit of target {unknown[0]!r} is not a target of the scenario; plan "
                        "with the same scenario.")
    mid = np.array([0.5 * (v.start_jd + v.end_jd) for v in ordered])
    ra = np.array([stars[v.target].ra_deg for v in ordered], dtype=float)
    dec = np.array([stars[v.target].dec_deg for v in ordered], dtype=float)
    v_mag = np.array([stars[v.target].v_mag for v in ordered], dtype=float)
    exp_s = np.array([v.exposure_s for v in ordered], dtype=float)
    column = {name: k for k, name in enumerate(sky.names)}
    bary = sky.bjd_tdb - sky.times_jd[None, :]
    bjd = mid + np.array([np.interp(m, sky.times_jd, bary[column[v.target]])
                          for m, v in zip(mid, ordered, strict=True)])
    point = pointing_at(site, ra, dec, mid)
    sky_mag = None
    if instrument.aperture_arcsec2 is not None:  # as planner.sky.exposure.grid_sigma does
        sky_mag = exposure.moon_sky_brightness(
            np.interp(mid, sky.times_jd, sky.moon_illumination), point.moon_separation_deg,
            np.interp(mid, sky.times_jd, sky.moon_altitude_deg), point.altitude_deg,
            instrument.k_mag_per_airmass)
    sigma = exposure.rv_sigma(instrument, v_mag, exp_s, point.airmass, sky_mag)
    return Conditions(visits=ordered, bjd_tdb=bjd, airmass=np.asarray(point.airmass, float),
                      sigma_ms=np.asarray(sigma, float))


def execute(conditions, truths, instrument_name, rng, lost=None):
    """Execute visits against true orbits: one noisy velocity per visit not lost.

    Parameters
    ----------
    conditions : Conditions
        The visits with their times and noise (:func:`visit_conditions`).
    truths : mapping of str to TrueOrbit
        True orbit of every visited target.
    instrument_name : str
        Name the velocities are reported under (the posteriors' instrument).
    rng : numpy.random.Generator
        Generator of the measurement noise.
    lost : LostTime, optional
        Weather of the run; None loses nothing.

    Returns
    -------
    Execution

    Notes
    -----
    One standard normal is drawn per visit in time order, lost visits included, so a visit's
    noise does not depend on which other visits the weather removed.
    """
    c = conditions
    missing = sorted({v.target for v in c.visits} - set(truths))
    if missing:
        raise PlanError(f"visit of target {missing[0]!r} has no true orbit; add its truth file "
                        "or drop the target from the plan.")
    z = rng.standard_normal(len(c.visits))
    starts = np.array([v.start_jd for v in c.visits], dtype=float)
    ends = np.array([v.end_jd for v in c.visits], dtype=float)
    gone = lost_mask(starts, ends, lost) if lost is not None else np.zeros(starts.size, bool)
    rv = np.empty(starts.size)
    for target in dict.fromkeys(v.target for v in c.visits):
        rows = np.array([k for k, v in enumerate(c.visits) if v.target == target], dtype=int)
        truth = truths[target]
        total = np.sqrt(c.sigma_ms[rows] ** 2 + truth.jitter_ms**2)
        rv[rows] = truth.velocity(c.bjd_tdb[rows]) + total * z[rows]
    keep = ~gone
    return Execution(visits=tuple(v for v, k in zip(c.visits, keep, strict=True) if k),
                     lost=tuple(v for v, k in zip(c.visits, keep, strict=True) if not k),
                     bjd_tdb=c.bjd_tdb[keep], rv=rv[keep], rv_err=c.sigma_ms[keep],
                     airmass=c.airmass[keep], instrument=instrument_name)
