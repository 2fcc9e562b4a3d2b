"""Plan files: the record of a planned run, and its atomic plan.json / plan.csv writers and reader.

A :class:`PlanFile` holds everything needed to read, print, check or re-plan a run without the
scenario: per visit the target, its night (local evening date), UTC start and end, exposure,
slew before it, airmass at start and end, Moon separation, marginal expected bits and the
target's coordinates; per night the Sun and Moon summary; per run the strategy, the exact
total score, the solver's bound, the site and the limits.

Every file is written atomically: a temporary file in the same folder, flushed and synced, then
``os.replace``. :func:`write_plan` writes the plan's files as one set through a rename journal
(:mod:`planner.workflow.file_set`), so a crash at any step leaves the previous set or the new
one, and plan.json names the digests of the others so a mixed folder is refused on read; it
refuses to replace an existing plan unless ``force`` is given.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import json
import math
import os
from dataclasses import MISSING, asdict, dataclass, fields
from enum import StrEnum
from pathlib import Path
from typing import Any

from planner.clock import datetime_from_jd, jd_from_datetime
from planner.errors import PlanError
from planner.workflow.accounting import LeftOut, TargetAccount
from planner.workflow.file_set import (
    JOURNAL_NAME,
    OutLock,
    clean_stale,
    commit_files,
    digest,
    settle_folder,
    write_temporary,
)

__all__ = [
    "VisitStatus",
    "FORMAT_VERSION",
    "NightSummary",
    "PlanFile",
    "ScheduledVisit",
    "atomic_write_bytes",
    "atomic_write_text",
    "check_out_folder",
    "check_plan_set",
    "format_utc",
    "nearest_existing",
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
    idle : tuple of (str, str, str)
        Idle stretches of the planned part of the dark window longer than a minute: start, end
        and why the telescope waits (``window``, ``waiting for a better moment`` or ``nothing
        observable``; :mod:`planner.allocation.idle`).
    past : tuple of (str, str)
        The part of the dark window already past when a re-plan was made (``--now``): what
        happened there is executed or idle, never re-planned.
    """

    date: str
    sunset_utc: str
    dark_start_utc: str
    dark_end_utc: str
    sunrise_utc: str
    moon_illumination: float
    moon_up: tuple[tuple[str, str], ...] = ()
    lost: tuple[tuple[str, str], ...] = ()
    idle: tuple[tuple[str, str, str], ...] = ()
    past: tuple[tuple[str, str], ...] = ()


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
    left_out : tuple of planner.workflow.accounting.LeftOut
        Targets that can never be observed in the run, with the limit that keeps each out
        (plan.json key ``left_out``; empty in files written before it existed).
    target_summary : tuple of planner.workflow.accounting.TargetAccount
        Every target's visits, nights, expected bits and what bound it, in scenario order
        (plan.json key ``target_summary``).
    provenance : dict or None
        What reproduces the plan: solver settings and limit, seeds, posterior cache keys, the
        nightbits version and the input files' digests
        (:func:`planner.workflow.provenance.plan_provenance`); None in plans written before it
        was recorded.
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
    left_out: tuple = ()
    target_summary: tuple = ()
    provenance: dict | None = None
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
    return datetime_from_jd(jd).strftime("%Y-%m-%dT%H:%M:%SZ")


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
    return jd_from_datetime(moment)


def atomic_write_bytes(path: str | Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (temporary file in the same folder, then rename)."""
    path = Path(path)
    tmp = write_temporary(path, data)
    os.replace(tmp, path)


def atomic_write_text(path: str | Path, text: str) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    atomic_write_bytes(path, text.encode("utf-8"))


def write_compare_json(comparison, path: str | Path, provenance: dict | None = None) -> Path:
    """Write ``compare.json`` (one record per strategy, plus per-target figures) atomically.

    Parameters
    ----------
    comparison : planner.allocation.compare.Comparison or planner.workflow.pipeline.ComparisonReport
        Anything with a ``document()`` (the report's adds the targets left out).
    path : str or Path
        Output file; written to a temporary file in the same folder, then renamed over it.
    provenance : dict, optional
        What reproduces it (:func:`planner.workflow.provenance.plan_provenance`), stored under
        ``provenance``.

    Returns
    -------
    Path
        The written file.
    """
    path = Path(path)
    document = comparison.document()
    if provenance is not None:
        document["provenance"] = provenance
    atomic_write_text(path, json.dumps(document, indent=2, allow_nan=False) + "\n")
    return path


def nearest_existing(path: str | Path) -> Path:
    """Return ``path`` if it exists, else its nearest existing parent (a file or a folder)."""
    path = Path(path)
    while not path.exists() and path != path.parent:
        path = path.parent
    return path


def check_out_folder(out: str | Path, force: bool,
                     names: tuple[str, ...] = ("plan.json", "plan.csv", "plan.ecsv")) -> None:
    """Fail at once, before any work, if the outputs ``names`` could not be written into ``out``.

    Raises
    ------
    PlanError
        If ``out`` or one of its parents is a file, the nearest existing folder cannot be
        written, one of ``names`` is a folder, or one of them exists and ``force`` is off.
    """
    out = Path(out)
    existing_parent = nearest_existing(out)
    if existing_parent.exists() and not existing_parent.is_dir():
        raise PlanError(f"--out {out}: {existing_parent} is a file, not a folder; choose a "
                        "folder with --out.")
    if existing_parent.is_dir() and not os.access(existing_parent, os.W_OK | os.X_OK):
        raise PlanError(f"--out {out}: the folder {existing_parent} cannot be written; choose "
                        "another folder with --out.")
    for name in names:
        if (out / name).is_dir():
            raise PlanError(f"{out / name} is a folder, so it cannot be written; choose another "
                            "folder with --out.")
    existing = [out / name for name in names if (out / name).exists()]
    if existing and not force:
        raise PlanError(f"{existing[0]} already exists; pass --force to replace it or choose "
                        "another folder with --out.")


#: The names of the files a plan folder holds (plan.json last: it names the others' digests).
PLAN_FILES = ("plan.csv", "plan.ecsv", "curves.npz", "plan.json")


def write_plan(out_dir: str | Path, plan: PlanFile, force: bool = False, *,
               extra: dict | None = None, plot: tuple[str | Path, bytes] | None = None,
               lock: OutLock | None = None, on_commit=None) -> tuple[Path, Path]:
    """Write ``plan.json``, ``plan.csv``, any extra files and a plot as one set, all or nothing.

    The set is committed through a rename journal (:func:`planner.workflow.file_set.commit_files`),
    so a crash at any step, even SIGKILL, leaves the old set or the new one once the folder is
    next read or written (:func:`read_plan` finishes a half-renamed set). plan.json carries a
    manifest, ``files``: the SHA-256 of every other file of the set (and ``plot``: the plot's
    path and digest), so a mixed folder is detected on read. The folder is locked
    (:class:`OutLock`) while it is written, and temporaries left by a killed writer are removed.

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Output folder, created if missing.
    plan : PlanFile
    force : bool
        Replace an existing plan in that folder.
    extra : dict of str to bytes or str, optional
        More files of the set by name (``plan.ecsv``, ``curves.npz``); text is written as
        UTF-8.
    plot : (str or Path, bytes), optional
        A figure of the plan and its path (anywhere): written in the same commit.
    lock : OutLock, optional
        The folder's lock if the command took it already; else it is taken here.
    on_commit : callable, optional
        Called with no argument once the new set exists, before a held-back interrupt is acted
        on (so the caller knows the new set was written).

    Returns
    -------
    (pathlib.Path, pathlib.Path)
        The JSON and CSV paths.

    Raises
    ------
    PlanError
        If a plan already exists there and ``force`` is false, another command is writing
        there, or the folder cannot be written.
    """
    out = Path(out_dir)
    json_path, csv_path = out / "plan.json", out / "plan.csv"
    check_out_folder(out, force)
    payload = {csv_path: plan.to_csv().encode("utf-8")}
    payload.update({out / name: data.encode("utf-8") if isinstance(data, str) else data
                    for name, data in (extra or {}).items()})
    document = json.loads(plan.to_json())
    document["files"] = {path.name: digest(data) for path, data in payload.items()}
    if plot is not None:
        plot_path = Path(plot[0]).resolve()
        payload[plot_path] = plot[1]
        document["plot"] = {"path": str(plot_path), "sha256": digest(plot[1])}
    payload[json_path] = (json.dumps(document, indent=1, allow_nan=False) + "\n").encode("utf-8")
    own_lock = None
    try:
        if lock is None:
            lock = own_lock = OutLock(out)
        lock.acquire()
        settle_folder(out, lock)  # a set a killed writer left half-renamed is finished first
        check_out_folder(out, force)  # again under the lock: another run may have written
        clean_stale(out, {JOURNAL_NAME, *PLAN_FILES, *(p.name for p in payload if p.parent == out)})
        if plot is not None:
            clean_stale(plot_path.parent, [plot_path.name])
        commit_files(out, payload, on_commit=on_commit)
    except OSError as exc:
        raise PlanError(f"cannot write the plan into {out} ({exc.strerror or exc}); choose "
                        "another folder with --out.") from None
    finally:
        if own_lock is not None:
            own_lock.release()
    return json_path, csv_path


def check_plan_set(path: str | Path, raw: dict) -> None:
    """Refuse a plan folder whose files are not the set ``raw`` (its plan.json) names.

    Files of the manifest that are missing pass (a reader may have moved plan.json alone);
    files present with another digest mean a mixed set.

    Raises
    ------
    PlanError
        Naming the first file that does not belong.
    """
    files = raw.get("files")
    if files is None:
        return  # written before the manifest existed
    folder = Path(path).parent
    if not isinstance(files, dict) or not all(isinstance(v, str) for v in files.values()):
        raise PlanError(f"{Path(path).name}: files must map file names to digests; write the "
                        "plan again.")
    for name, expected in files.items():
        member = folder / Path(str(name)).name
        try:
            data = member.read_bytes()
        except FileNotFoundError:
            continue
        except OSError as exc:
            raise PlanError(f"{member} cannot be read ({exc.strerror or exc}).") from None
        if digest(data) != expected:
            raise PlanError(f"{member} is not the {name} written with {Path(path).name} (its "
                            "digest differs): the folder holds a mixed set of plan files; "
                            "make the plan again with --force.")


def read_plan(path: str | Path) -> PlanFile:
    """Read a plan.json written by :func:`write_plan`.

    Raises
    ------
    PlanError
        If the file is missing, not JSON, or lacks a field (named with its path).
    """
    path = Path(path)
    if (path.parent / JOURNAL_NAME).exists():
        settle_folder(path.parent)  # finish a set a killed writer left half-renamed
    try:
        raw = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise PlanError(f"plan file {path} does not exist; give the plan.json that "
                        "`nightbits plan` wrote.") from None
    except IsADirectoryError:
        raise PlanError(f"plan file {path} is a folder; give the plan.json in it "
                        f"({path / 'plan.json'}).") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise PlanError(f"plan file {path} is not readable JSON ({exc}).") from None
    where = path.name
    if not isinstance(raw, dict) or raw.get("format_version") != FORMAT_VERSION:
        raise PlanError(f"{where}: not a nightbits plan file of format version {FORMAT_VERSION}; "
                        "write it again with `nightbits plan`.")
    check_plan_set(path, raw)
    top = _record(PlanFile, raw, where, skip=("nights", "visits", "left_out", "target_summary"),
                  pairs=("moon_table",))
    for key, cls in (("left_out", LeftOut), ("target_summary", TargetAccount)):
        if key in raw:
            top[key] = tuple(_record(cls, r, f"{where}: {key}[{i}]")
                             for i, r in enumerate(_list(raw, key, where)))
    nights = tuple(_record(NightSummary, n, f"{where}: nights[{i}]",
                           pairs=("moon_up", "lost", "idle", "past"))
                   for i, n in enumerate(_list(raw, "nights", where)))
    visits = tuple(_record(ScheduledVisit, v, f"{where}: visits[{i}]")
                   for i, v in enumerate(_list(raw, "visits", where)))
    if not isinstance(top["target_bits"], dict):
        raise PlanError(f"{where}: target_bits must be an object; write the plan again.")
    if top.get("provenance") is not None and not isinstance(top["provenance"], dict):
        raise PlanError(f"{where}: provenance must be an object; write the plan again.")
    for i, visit in enumerate(visits):
        _check_visit(visit, f"{where}: visits[{i}]", top["target_bits"])
    return PlanFile(**top, nights=nights, visits=visits)


class VisitStatus(StrEnum):
    """What a scheduled visit in plan.json is; a ``StrEnum``, stored as its lower-case value."""

    #: Still to be observed.
    PLANNED = "planned"
    #: Executed, its velocity not yet folded into the posterior.
    DONE = "done"
    #: Executed, with its velocity folded in (a re-plan with ``--rvs``).
    MEASURED = "measured"


#: The statuses a visit may have, in their order of life.
VISIT_STATUSES = tuple(VisitStatus)


def _check_visit(visit: ScheduledVisit, where: str, targets: dict) -> None:
    """Refuse a visit a plan writer could not have written (a hand-edited plan file)."""
    start = parse_utc(visit.start_utc, f"{where}.start_utc")
    end = parse_utc(visit.end_utc, f"{where}.end_utc")
    if visit.target not in targets:
        raise PlanError(f"{where}.target: {visit.target!r} is not one of the plan's targets "
                        f"({', '.join(map(str, targets))}); write the plan again.")
    if visit.status not in VISIT_STATUSES:
        raise PlanError(f"{where}.status: {visit.status!r} is not one of "
                        f"{', '.join(VISIT_STATUSES)}; write the plan again.")
    checks = (("ra_deg", visit.ra_deg, 0.0, 360.0), ("dec_deg", visit.dec_deg, -90.0, 90.0),
              ("exposure_s", visit.exposure_s, 1e-9, 86400.0), ("slew_s", visit.slew_s, 0.0,
                                                                   86400.0))
    for name, value, lo, hi in checks:
        if not lo <= value <= hi:
            raise PlanError(f"{where}.{name}: {value!r} is outside {lo:g} to {hi:g}; write the "
                            "plan again.")
    if end <= start:
        raise PlanError(f"{where}: it ends ({visit.end_utc}) before it starts "
                        f"({visit.start_utc}); write the plan again.")


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
            if value is not None and not isinstance(value, list):
                raise PlanError(f"{where}: {f.name} must be a list, got {value!r}; write the "
                                "plan again.")
            item_ok = ((lambda v: isinstance(v, str)) if f.name == "notes" else
                       (lambda v: isinstance(v, list) and all(
                           isinstance(x, str | int | float) and not isinstance(x, bool)
                           for x in v)))
            if not all(item_ok(v) for v in value or ()):
                raise PlanError(f"{where}: {f.name} holds an entry of the wrong kind; write the "
                                "plan again.")
            value = tuple(tuple(v) if isinstance(v, list) else v for v in value or ())
        number = isinstance(value, int | float) and not isinstance(value, bool)
        if f.type == "float" and not (number and math.isfinite(value)):
            raise PlanError(f"{where}: {f.name} must be a finite number, got {value!r}.")
        if f.type == "str" and not isinstance(value, str):
            raise PlanError(f"{where}: {f.name} must be text, got {value!r}; write the plan "
                            "again.")
        values[f.name] = value
    return cls(**values) if cls is not PlanFile else values
