"""Stage 1, the sky: where the targets, the Sun and the Moon are over the run.

Takes a site, run dates, target coordinates, limits, an instrument and a mount; gives the dark
windows, a Sky record (altitude, airmass, Moon per target and grid time), the observable-start
mask, the velocity noise of each exposure option and slew times. Imports nothing above it.
"""

from planner.sky.airmass import airmass_kasten_young
from planner.sky.exposure import Instrument, grid_sigma, rv_sigma
from planner.sky.observability import Constraints, binding_constraints, observable_starts
from planner.sky.site import Night, Site, dark_windows, run_dates
from planner.sky.slew import Mount, slew_seconds
from planner.sky.tracks import Sky, compute_sky, pointing_at

__all__ = [
    "airmass_kasten_young",
    "binding_constraints",
    "compute_sky",
    "Constraints",
    "dark_windows",
    "grid_sigma",
    "Instrument",
    "Mount",
    "Night",
    "observable_starts",
    "pointing_at",
    "run_dates",
    "rv_sigma",
    "Site",
    "Sky",
    "slew_seconds",
]
