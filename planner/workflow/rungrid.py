"""The run grid: the site and nights of a scenario on one evenly spaced grid of whole minutes.

The solver clock counts whole minutes from one epoch and needs one evenly spaced grid over the
whole run, while the sky is computed night by night from each dark start. The dark window of
every night is therefore shrunk inward to the nearest grid instants (by less than one grid step
at each end) before the sky is computed, so each night's sky grid lies exactly on the run grid
and no value is interpolated; instants between nights belong to no night.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from planner.errors import PlanError, ScenarioError
from planner.workflow.scenario import Scenario

__all__ = ["RunGrid", "fill_bjd", "physical_setup", "run_grid"]

_MINUTE_D = 1.0 / 1440.0


@dataclass(frozen=True)
class RunGrid:
    """The run's evenly spaced grid of whole minutes, and every night's part of it.

    Attributes
    ----------
    times_jd : ndarray, shape (n_times,)
        Grid instants, JD UTC [d], from the first aligned dark start to the last dark end.
    night_index : ndarray of int, shape (n_times,)
        Night of each instant, -1 between nights.
    sky_index : ndarray of int, shape (n_times,)
        Column of the sky grid at each instant, -1 between nights.
    step_min : int
        Grid step [min].
    """

    times_jd: np.ndarray
    night_index: np.ndarray
    sky_index: np.ndarray
    step_min: int

    def scatter(self, values: np.ndarray, fill: float) -> np.ndarray:
        """Spread sky-grid values ``(..., n_sky)`` onto the run grid ``(..., n_times)``."""
        values = np.asarray(values)
        out = np.full(values.shape[:-1] + self.times_jd.shape, fill, dtype=values.dtype)
        inside = self.sky_index >= 0
        out[..., inside] = values[..., self.sky_index[inside]]
        return out


def _part_of_night(night, part):
    """Return the night's first or second half (dark window split at its middle), or all."""
    if part is None:
        return night
    middle = 0.5 * (night.dark_start_jd + night.dark_end_jd)
    lo, hi = ((night.dark_start_jd, middle) if part == "first_half"
              else (middle, night.dark_end_jd))
    moon = tuple((max(a, lo), min(b, hi)) for a, b in night.moon_up if min(b, hi) > max(a, lo))
    return dataclasses.replace(night, dark_start_jd=lo, dark_end_jd=hi, moon_up=moon)


def physical_setup(scenario: Scenario):
    """Site, true nights, nights shrunk to the whole-minute grid, limits, instrument, mount."""
    from planner.sky.exposure import Instrument
    from planner.sky.observability import DEFAULT_MOON_TABLE
    from planner.sky.site import Site, dark_windows
    from planner.sky.slew import Mount

    s = scenario.site
    site = Site(latitude_deg=s.latitude_deg, longitude_deg=s.longitude_deg,
                elevation_m=s.elevation_m, timezone=s.timezone,
                min_altitude_deg=s.min_altitude_deg, max_altitude_deg=s.max_altitude_deg)
    nights = tuple(_part_of_night(night, part) for night, part in zip(
        dark_windows(site, scenario.night_dates(), scenario.run.twilight),
        scenario.night_parts(), strict=True))
    step_d = scenario.sky.step_s / 86400.0
    epoch = math.floor(nights[0].dark_start_jd / _MINUTE_D) * _MINUTE_D
    aligned = []
    for night in nights:
        start = epoch + math.ceil((night.dark_start_jd - epoch) / step_d - 1e-9) * step_d
        end = epoch + math.floor((night.dark_end_jd - epoch) / step_d + 1e-9) * step_d
        if end - start < step_d:
            raise ScenarioError(f"{scenario.path.name}: the night of {night.date} has less "
                                "than one grid step of dark time; use a lighter twilight.")
        aligned.append(dataclasses.replace(night, dark_start_jd=start, dark_end_jd=end))
    c = scenario.constraints
    if c.min_moon_separation_deg is not None:
        moon_table = ((1.0, c.min_moon_separation_deg),)
    else:
        moon_table = c.moon_table or DEFAULT_MOON_TABLE
    i, t = scenario.instrument, scenario.telescope
    instrument = Instrument(sigma_ref_ms=i.reference_sigma_ms, v_ref_mag=i.reference_v_mag,
                            t_ref_s=i.reference_exposure_s, floor_ms=i.floor_ms,
                            k_mag_per_airmass=i.extinction_mag_per_airmass,
                            aperture_arcsec2=i.aperture_arcsec2)
    mount = Mount(kind="altaz", rate1_deg_s=t.azimuth_rate_deg_s, rate2_deg_s=t.altitude_rate_deg_s,
                  accel_deg_s2=t.acceleration_deg_s2, settle_s=t.settle_s,
                  acquisition_s=t.acquisition_s, readout_s=i.readout_s,
                  az_wrap_deg=tuple(t.azimuth_range_deg) or None)
    return site, nights, tuple(aligned), moon_table, instrument, mount


def run_grid(sky, aligned) -> RunGrid:
    """Build the whole-minute run grid under a sky computed on aligned nights (module notes).

    Sky instants past a night's aligned dark end (the sky grid may overshoot by one step) are
    left out; every other sky instant must fall on the run grid to within a second.
    """
    step_min = int(round(sky.step_s / 60.0))
    step_d = step_min * _MINUTE_D
    epoch = aligned[0].dark_start_jd
    ends = np.array([n.dark_end_jd for n in aligned])[sky.night_index]
    keep = sky.times_jd <= ends + 1.0 / 86400.0
    position = np.rint((sky.times_jd - epoch) / step_d).astype(np.int64)
    if np.max(np.abs(sky.times_jd[keep] - epoch - position[keep] * step_d)) > 1.0 / 86400.0:
        raise PlanError("the sky grid does not fall on the run's whole-minute grid; use a sky "
                        "step_s that is a whole number of minutes.")
    n_times = int(position[keep].max()) + 1
    night_index = np.full(n_times, -1, dtype=np.int64)
    sky_index = np.full(n_times, -1, dtype=np.int64)
    night_index[position[keep]] = sky.night_index[keep]
    sky_index[position[keep]] = np.flatnonzero(keep)
    return RunGrid(times_jd=epoch + step_d * np.arange(n_times), night_index=night_index,
                   sky_index=sky_index, step_min=step_min)


def fill_bjd(grid: RunGrid, sky) -> np.ndarray:
    """Barycentric times on the run grid; between nights, the UTC instant plus the mean offset."""
    offset = np.mean(sky.bjd_tdb - sky.times_jd[None, :], axis=1, keepdims=True)
    out = grid.times_jd[None, :] + offset
    inside = grid.sky_index >= 0
    out[:, inside] = sky.bjd_tdb[:, grid.sky_index[inside]]
    return out
