"""The queue export: a plan's visits as an astropy ECSV table with units (``DIR/plan.ecsv``).

One row per planned visit, in time order, for a telescope queue or a spreadsheet:

========================  ======  ==========================================================
column                    unit    meaning
========================  ======  ==========================================================
``priority``                      1 = the highest marginal bits per telescope minute
                                  (exposure plus the slew before it); ties by start time
``target``, ``night``             target id, local evening date of its night
``ra``, ``dec``           deg     ICRS position as the scenario gives it (table meta
                                  ``frame``, ``epoch``; no proper motion is applied)
``v_mag``                 mag     V magnitude
``exposure``              s       shutter open to shutter close
``slew``                  s       slew, settling and acquisition before it
``slew_start_utc``                UTC, astropy ``Time`` (ISO) when the slew to it starts
``shutter_open_utc``              UTC, astropy ``Time``
``shutter_close_utc``             UTC, astropy ``Time``
``*_local``                       the same three in local time, ISO 8601 with the UTC offset
                                  (table meta ``timezone``)
``airmass_start/end``             airmass at shutter open and close
``expected_bits``         bit     marginal expected information of the visit
========================  ======  ==========================================================

Executed visits kept by a re-plan are not in the queue. The table reads back with
``astropy.table.Table.read(path)`` (format guessed from the ``.ecsv`` suffix), units and
``Time`` columns restored.
"""

from __future__ import annotations

import io
from zoneinfo import ZoneInfo

import numpy as np

from planner.clock import J2000_JD, datetime_from_jd
from planner.workflow.outputs import VisitStatus

__all__ = ["COORDINATE_EPOCH", "queue_table", "queue_text"]

#: Epoch of the scenario's ICRS positions, written into the table meta. The planner applies no
#: proper motion, so positions are used as given; give them for this epoch (or near the run).
COORDINATE_EPOCH = "J2000.0"


def _local(jd: float, zone: ZoneInfo) -> str:
    return datetime_from_jd(jd).astimezone(zone).isoformat()


def queue_table(plan_file, v_mag: dict):
    """Build the queue table of a plan's planned visits.

    Parameters
    ----------
    plan_file : planner.workflow.outputs.PlanFile
    v_mag : dict of str to float
        V magnitude of each target.

    Returns
    -------
    astropy.table.Table
        The columns of the module docstring, one row per planned visit in time order.
    """
    import astropy.units as u
    from astropy.table import Table
    from astropy.time import Time

    from planner.workflow.outputs import parse_utc

    zone = ZoneInfo(plan_file.site["timezone"])
    visits = sorted((v for v in plan_file.visits if v.status == VisitStatus.PLANNED),
                    key=lambda v: parse_utc(v.start_utc))
    opened = np.array([parse_utc(v.start_utc) for v in visits], dtype=float)
    closed = np.array([parse_utc(v.end_utc) for v in visits], dtype=float)
    slew = np.array([v.slew_s for v in visits], dtype=float)
    exposure = np.array([v.exposure_s for v in visits], dtype=float)
    bits = np.array([v.expected_bits for v in visits], dtype=float)
    slewing = opened - slew / 86400.0
    minutes = np.maximum((exposure + slew) / 60.0, 1e-9)
    order = np.lexsort((opened, -bits / minutes))
    priority = np.empty(len(visits), dtype=np.int64)
    priority[order] = np.arange(1, len(visits) + 1)

    table = Table()
    table["priority"] = priority
    table["target"] = np.array([v.target for v in visits], dtype=str)
    table["night"] = np.array([v.night for v in visits], dtype=str)
    table["ra"] = np.array([v.ra_deg for v in visits], dtype=float) * u.deg
    table["dec"] = np.array([v.dec_deg for v in visits], dtype=float) * u.deg
    table["v_mag"] = np.array([v_mag[v.target] for v in visits], dtype=float) * u.mag
    table["exposure"] = exposure * u.s
    table["slew"] = slew * u.s
    for name, jd in (("slew_start", slewing), ("shutter_open", opened),
                     ("shutter_close", closed)):
        column = Time(np.round((jd - J2000_JD) * 86400.0) / 86400.0, J2000_JD, format="jd",
                      scale="utc", precision=0)
        column.format = "isot"
        table[f"{name}_utc"] = column
        table[f"{name}_local"] = np.array([_local(t, zone) for t in jd], dtype=str)
    table["airmass_start"] = np.array([v.airmass_start for v in visits], dtype=float)
    table["airmass_end"] = np.array([v.airmass_end for v in visits], dtype=float)
    table["expected_bits"] = bits * u.bit
    table["ra"].description = f"ICRS right ascension, epoch {COORDINATE_EPOCH}"
    table["dec"].description = f"ICRS declination, epoch {COORDINATE_EPOCH}"
    table["priority"].description = "1 = highest expected bits per telescope minute"
    table.meta.update({
        "run_name": plan_file.run_name, "strategy": plan_file.strategy,
        "frame": "icrs", "epoch": COORDINATE_EPOCH, "timezone": plan_file.site["timezone"],
        "total_bits": float(plan_file.total_bits),
        "caution": ("this queue does not replace the observatory's own safety rules; they "
                    "always take precedence"),
    })
    return table


def queue_text(plan_file, v_mag: dict) -> str:
    """Return the ECSV text of :func:`queue_table` (what ``plan`` writes to ``DIR/plan.ecsv``)."""
    buffer = io.StringIO()
    queue_table(plan_file, v_mag).write(buffer, format="ascii.ecsv")
    return buffer.getvalue()
