"""Plan files: the record of a planned run, and its atomic plan.json / plan.csv writers and reader.

A :class:`PlanFile` holds everything needed to read, print, check or re-plan a run without the
scenario: per visit the target, its night (local evening date), UTC start and end, exposure,
slew before it, airmass at start and end, Moon separation, marginal expected bits and the
target's coordinates; per night the Sun and Moon summary; per run the strategy, the exact
total score, the solver's bound, the site and the limits.

Every file is written atomically: a temporary file in the same folder, flushed and synced, then
``os.replace``. :func:`write_plan` writes both files to temporaries first and only then renames
them, so a crash leaves the previous plan intact; it refuses to replace an existing plan unless
``force`` is given.
"""

from __future__ import annotations

import contextlib
import csv
import datetime as _dt
import io
import json
import math
import os
import tempfile
from dataclasses import MISSING, asdict, dataclass, fields
from pathlib import Path
from typing import Any

from planner.errors import PlanError

__all__ = [
    "FORMAT_VERSION",
    "NightSummary",
    "PlanFile",
    "ScheduledVisit",
    "atomic_write_bytes",
    "atomic_write_text",
    "check_out_folder",
    "format_utc",
    "parse_utc",
    "read_plan",
    "write_compare_json",
    "write_plan",
]

#: Version of the plan.json layout; bump it when a field changes meaning.
FORMAT_VERSION = 1


@dataclass(frozen=True)
class ScheduledVisit:
    """One exposure of the plan, as printed and as stored.

    Attributes
    ----------
    target : str
        Target id.
    night : str
        Local evening date of its night, ``YYYY-MM-DD``.
    start_utc, end_utc : str
        Shutter open and close, ISO 8601 UTC (``2027-10-05T02:14:00Z``).
    exposure_s : float
        Exposure time [s].
    slew_s : float
        Telescope time spent before it on the slew, settling and acquisition [s].
    airmass_start, airmass_end : float
        Airmass at shutter open and close.
    moon_separation_deg : float
        Angle from the Moon at shutter open [deg].
    expected_bits : float
        Marginal expected information [bits]: the target's joint gain with this visit minus its
        joint gain without it, counting the target's earlier visits only (so a target's visits
        sum to its joint bits), times the target's weight.
    ra_deg, dec_deg : float
        Target position, ICRS [deg].
    status : str
        ``"planned"``, or ``"done"`` for a visit kept as executed by a re-plan.
    """

    target: str
    night: str
    start_utc: str
    end_utc: str
    exposure_s: float
    slew_s: float
    airmass_start: float
    airmass_end: float
    moon_separation_deg: float
    expected_bits: float
    ra_deg: float
    dec_deg: float
    status: str = "planned"


@dataclass(frozen=True)
class NightSummary:
    """The Sun and Moon over one night (times ISO 8601 UTC).

    Attributes
    ----------
    date : str
        Local evening date ``YYYY-MM-DD``.
    sunset_utc, dark_start_utc, dark_end_utc, sunrise_utc : str
        Sunset, start and end of the dark window (Sun below the twilight altitude), sunrise.
    moon_illumination : float
        Illuminated fraction of the Moon at the middle of the dark window, 0 to 1.
    moon_up : tuple of (str, str)
        Intervals of the dark window with the Moon above the horizon.
    lost : tuple of (str, str)
        Intervals of the dark window given up (weather, engineering) in a re-plan.
    """

    date: str
    sunset_utc: str
    dark_start_utc: str
    dark_end_utc: str
    sunrise_utc: str
    moon_illumination: float
    moon_up: tuple[tuple[str, str], ...] = ()
    lost: tuple[tuple[str, str], ...] = ()


@dataclass(frozen=True)
class PlanFile:
    """A planned run as written to plan.json.

    Attributes
    ----------
    strategy : str
        ``joint``, ``greedy`` or ``cadence``.
    total_bits : float
        The exact joint score of the plan: per target the joint expected information of all its
        visits (not the sum of singles), times its weight, summed over targets [bits].
    bound_bits : float or None
        Solver's proven upper bound on its own objective, or None where there is none.
    scenario : str
        Path of the scenario file the plan was made from.
    run_name : str
        Title of the run.
    site : dict
        ``name``, ``latitude_deg``, ``longitude_deg``, ``elevation_m``, ``timezone``.
    twilight_sun_altitude_deg : float
        Sun altitude that bounds the dark window [deg].
    max_airmass : float
        Largest airmass allowed by the scenario.
    moon_table : tuple of (float, float)
        Moon rule: rows ``(max_illumination, min_separation_deg)``; the first row whose
        illumination is not exceeded gives the separation required while the Moon is up.
    target_bits : dict of str to float
        Weighted joint expected bits per target (planned and done visits together).
    nights : tuple of NightSummary
    visits : tuple of ScheduledVisit
        In time order.
    notes : tuple of str
        Lines the re-plan or the solver left for the reader (what changed, solver status).
    objective_bits : float or None
        The strategy's own objective (the solver's redundancy-aware surrogate of the bits), the
        quantity ``bound_bits`` bounds.
    now_utc : str or None
        The present of a re-plan (ISO 8601 UTC): nights before it are past and their visits
        executed; None for a plan made before the run.
    """

    strategy: str
    total_bits: float
    bound_bits: float | None
    scenario: str
    run_name: str
    site: dict
    twilight_sun_altitude_deg: float
    max_airmass: float
    moon_table: tuple[tuple[float, float], ...]
    target_bits: dict
    nights: tuple[NightSummary, ...]
    visits: tuple[ScheduledVisit, ...]
    notes: tuple[str, ...] = ()
    objective_bits: float | None = None
    now_utc: str | None = None

    def to_json(self) -> str:
        """Return the plan.json text (UTF-8, indented, with a format version)."""
        data = {"format_version": FORMAT_VERSION, **asdict(self)}
        return json.dumps(data, indent=1, allow_nan=False) + "\n"

    def to_csv(self) -> str:
        """Return the plan.csv text: one row per visit, the visit fields as columns."""
        buffer = io.StringIO()
        names = [f.name for f in fields(ScheduledVisit)]
        writer = csv.DictWriter(buffer, fieldnames=names, lineterminator="\n")
        writer.writeheader()
        for visit in self.visits:
            writer.writerow(asdict(visit))
        return buffer.getvalue()


def format_utc(jd: float) -> str:
    """ISO 8601 UTC text of a JD (UTC scale), rounded to the second."""
    seconds = round((jd - 2451545.0) * 86400.0)
    moment = _dt.datetime(2000, 1, 1, 12) + _dt.timedelta(seconds=seconds)
    return moment.strftime("%Y-%m-%dT%H:%M:%SZ")


def parse_utc(text: str, where: str = "time") -> float:
    """JD (UTC scale) of an ISO 8601 date-time; naive times are UTC.

    Raises
    ------
    PlanError
        If the text is not an ISO date-time.
    """
    try:
        moment = _dt.datetime.fromisoformat(str(text).strip().replace("Z", "+00:00"))
    except ValueError:
        raise PlanError(f"{where}: {text!r} is not an ISO date-time such as "
                        "2027-10-05T02:00:00Z.") from None
    if moment.tzinfo is not None:
        moment = moment.astimezone(_dt.timezone.utc).replace(tzinfo=None)
    return 2451545.0 + (moment - _dt.datetime(2000, 1, 1, 12)).total_seconds() / 86400.0


def atomic_write_bytes(path: str | Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (temporary file in the same folder, then rename)."""
    path = Path(path)
    tmp = _write_temporary(path, data)
    os.replace(tmp, path)


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    atomic_write_bytes(path, text.encode("utf-8"))


def write_compare_json(comparison, path: str | Path) -> Path:
    """Write ``compare.json`` (one record per strategy, plus per-target figures) atomically.

    Parameters
    ----------
    comparison : planner.allocation.compare.Comparison
    path : str or Path
        Output file; written to a temporary file in the same folder, then renamed over it.

    Returns
    -------
    Path
        The written file.
    """
    path = Path(path)
    atomic_write_text(path, json.dumps(comparison.document(), indent=2) + "\n")
    return path


def _write_temporary(path: Path, data: bytes) -> Path:
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(name)
        raise
    return Path(name)


def check_out_folder(out: str | Path, force: bool,
                     names: tuple[str, ...] = ("plan.json", "plan.csv")) -> None:
    """Fail at once, before any work, if ``out`` holds one of ``names`` and ``force`` is off."""
    existing = [Path(out) / name for name in names if (Path(out) / name).exists()]
    if existing and not force:
        raise PlanError(f"{existing[0]} already exists; pass --force to replace it or choose "
                        "another folder with --out.")


def write_plan(out_dir: str | Path, plan: PlanFile, force: bool = False) -> tuple[Path, Path]:
    """Write ``plan.json`` and ``plan.csv`` into ``out_dir`` atomically.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Output folder, created if missing.
    plan : PlanFile
    force : bool
        Replace an existing plan in that folder.

    Returns
    -------
    (pathlib.Path, pathlib.Path)
        The JSON and CSV paths.

    Raises
    ------
    PlanError
        If a plan already exists there and ``force`` is false, or the folder cannot be written.
    """
    out = Path(out_dir)
    json_path, csv_path = out / "plan.json", out / "plan.csv"
    check_out_folder(out, force)
    payload = {json_path: plan.to_json().encode("utf-8"), csv_path: plan.to_csv().encode("utf-8")}
    try:
        out.mkdir(parents=True, exist_ok=True)
        temporaries = {}
        try:
            for final, data in payload.items():
                temporaries[final] = _write_temporary(final, data)
        except BaseException:
            for tmp in temporaries.values():
                with contextlib.suppress(OSError):
                    os.unlink(tmp)
            raise
        for final, tmp in temporaries.items():
            os.replace(tmp, final)
    except OSError as exc:
        raise PlanError(f"cannot write the plan into {out} ({exc.strerror or exc}); choose "
                        "another folder with --out.") from None
    return json_path, csv_path


def read_plan(path: str | Path) -> PlanFile:
    """Read a plan.json written by :func:`write_plan`.

    Raises
    ------
    PlanError
        If the file is missing, not JSON, or lacks a field (named with its path).
    """
    path = Path(path)
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise PlanError(f"plan file {path} does not exist; give the plan.json that "
                        "`nightbits plan` wrote.") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise PlanError(f"plan file {path} is not readable JSON ({exc}).") from None
    where = path.name
    if not isinstance(raw, dict) or raw.get("format_version") != FORMAT_VERSION:
        raise PlanError(f"{where}: not a nightbits plan file of format version {FORMAT_VERSION}; "
                        "write it again with `nightbits plan`.")
    top = _record(PlanFile, raw, where, skip=("nights", "visits"), pairs=("moon_table",))
    nights = tuple(_record(NightSummary, n, f"{where}: nights[{i}]", pairs=("moon_up", "lost"))
                   for i, n in enumerate(_list(raw, "nights", where)))
    visits = tuple(_record(ScheduledVisit, v, f"{where}: visits[{i}]")
                   for i, v in enumerate(_list(raw, "visits", where)))
    for i, visit in enumerate(visits):
        for key in ("start_utc", "end_utc"):
            parse_utc(getattr(visit, key), f"{where}: visits[{i}].{key}")
    return PlanFile(**top, nights=nights, visits=visits)


def _list(raw: dict, key: str, where: str) -> list:
    value = raw.get(key)
    if not isinstance(value, list):
        raise PlanError(f"{where}: {key} must be a list; write the plan again.")
    return value


def _record(cls, raw: Any, where: str, skip=(), pairs=()) -> Any:
    if not isinstance(raw, dict):
        raise PlanError(f"{where}: expected an object; write the plan again.")
    values = {}
    for f in fields(cls):
        if f.name in skip:
            continue
        if f.name not in raw:
            if f.default is not MISSING or f.default_factory is not MISSING:
                continue
            raise PlanError(f"{where}: the field {f.name!r} is missing; write the plan again.")
        value = raw[f.name]
        if f.name in pairs or f.name == "notes":
            value = tuple(tuple(v) if isinstance(v, list) else v for v in value or ())
        number = isinstance(value, int | float) and not isinstance(value, bool)
        if f.type == "float" and not (number and math.isfinite(value)):
            raise PlanError(f"{where}: {f.name} must be a finite number, got {value!r}.")
        values[f.name] = value
    return cls(**values) if cls is not PlanFile else values
