"""Scenario files: one YAML document describing an observing run, validated into frozen records.

A scenario names the site, the telescope and instrument, the run's nights, the observing limits,
the targets with their past-velocity files, and the settings of the sampler and the solver.
Every section has defaults except ``site``, ``run`` and ``targets``. The file is read with
the safe YAML loader only (a key named twice in one mapping is refused); every value is checked
against the schema below, and a problem is reported as one
:class:`~planner.errors.ScenarioError` sentence naming the file, the key path (for example
``targets[3].v_mag``), what was expected, and a did-you-mean for misspelt keys.
Relative paths (RV files, the cache folder) are taken relative to the scenario file.

The complete reference, with a commented example, is ``docs/scenario.md``.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import difflib
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import yaml

from planner.clock import jd_from_datetime
from planner.errors import ScenarioError

__all__ = [
    "ConstraintsConfig",
    "ExposureConfig",
    "InstrumentConfig",
    "RunConfig",
    "SamplerConfig",
    "Scenario",
    "SiteConfig",
    "SkyConfig",
    "SolverConfig",
    "TargetConfig",
    "TelescopeConfig",
    "MAX_SCENARIO_BYTES",
    "MAX_TARGETS",
    "TWILIGHT_NAMES",
    "load_scenario",
    "parse_scenario",
]

#: Named twilights accepted by ``run.twilight`` (Sun altitudes -6, -12 and -18 degrees).
TWILIGHT_NAMES = ("civil", "nautical", "astronomical")

_ID_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9 _.+-]{0,63}$")


def _spec(kind: str, default: Any = dataclasses.MISSING, *, lo=None, hi=None, what="") -> Any:
    """Declare a scenario field: its kind, default, allowed range and a short description."""
    meta = {"kind": kind, "lo": lo, "hi": hi, "what": what}
    if isinstance(default, tuple | list):
        return field(default_factory=lambda d=tuple(default): d, metadata=meta)
    return field(default=default, metadata=meta)


@dataclass(frozen=True)
class SiteConfig:
    """The observatory: geodetic position, local time zone and the mount's altitude limits."""

    latitude_deg: float = _spec("float", lo=-90.0, hi=90.0, what="geodetic latitude [deg]")
    longitude_deg: float = _spec("float", lo=-180.0, hi=180.0, what="east longitude [deg]")
    elevation_m: float = _spec("float", lo=-500.0, hi=6000.0, what="height above sea level [m]")
    timezone: str = _spec("timezone", what="IANA time zone name such as 'America/Santiago'")
    name: str = _spec("str", "unnamed site", what="site name for the schedule header")
    min_altitude_deg: float = _spec("float", 15.0, lo=0.0, hi=89.0, what="lowest pointing [deg]")
    max_altitude_deg: float = _spec("float", 89.0, lo=1.0, hi=90.0, what="highest pointing [deg]")


@dataclass(frozen=True)
class RunConfig:
    """The allocated nights and the twilight.

    Either ``first_night`` and a number of consecutive ``nights``, or ``nights`` as a list of
    local evening dates, each optionally followed by ``first_half`` or ``second_half`` (the
    dark window split at its middle); stored as ``((date, part), ...)``, part None for a
    whole night.
    """

    nights: int | tuple = _spec("nights", lo=1, hi=60, what="number of consecutive nights")
    first_night: str | None = _spec("date", None,
                                    what="local evening date of the first night, YYYY-MM-DD")
    twilight: str | float = _spec("twilight", "nautical", what="twilight name or Sun altitude")


@dataclass(frozen=True)
class ConstraintsConfig:
    """Observing limits applied to every exposure (targets may tighten them)."""

    max_airmass: float = _spec("float", 2.0, lo=1.0, hi=10.0, what="largest airmass")
    min_moon_separation_deg: float | None = _spec("optfloat", None, lo=0.0, hi=180.0,
                                                  what="one separation whatever the phase [deg]")
    moon_table: tuple[tuple[float, float], ...] = _spec("pairs", (), lo=0.0, hi=180.0,
                                                        what="[max illumination, min sep deg]")
    blackouts: tuple[tuple[float, float], ...] = _spec("windows", (), what="closed UTC windows")


@dataclass(frozen=True)
class TelescopeConfig:
    """The alt-azimuth mount: slew rates, settling, acquisition and its azimuth range."""

    azimuth_rate_deg_s: float = _spec("float", 2.0, lo=0.01, hi=90.0, what="[deg/s]")
    altitude_rate_deg_s: float = _spec("float", 1.5, lo=0.01, hi=90.0, what="[deg/s]")
    acceleration_deg_s2: float | None = _spec("optfloat", None, lo=0.001, hi=100.0,
                                              what="[deg/s^2], null for instant top rate")
    azimuth_range_deg: tuple[float, ...] = _spec("floats", (), lo=-720.0, hi=720.0,
                                                 what="cable-wrap limits [deg]")
    settle_s: float = _spec("float", 20.0, lo=0.0, hi=3600.0, what="settling after a slew [s]")
    acquisition_s: float = _spec("float", 60.0, lo=0.0, hi=3600.0, what="target acquisition [s]")


@dataclass(frozen=True)
class InstrumentConfig:
    """The spectrograph's noise model, anchored at one reference point.

    The photon-limited error scales as ``sigma_ref * 10**(0.2 (m - m_ref)) * sqrt(t_ref / t)``
    at the reference airmass 1, with extinction dimming the star by ``k (X - 1)`` magnitudes;
    the instrumental floor adds in quadrature.
    """

    name: str = _spec("str", "default", what="instrument name matching the RV files")
    reference_sigma_ms: float = _spec("float", 1.0, lo=0.001, hi=1000.0, what="[m/s]")
    reference_v_mag: float = _spec("float", 8.0, lo=-2.0, hi=20.0, what="V magnitude")
    reference_exposure_s: float = _spec("float", 900.0, lo=1.0, hi=36000.0, what="[s]")
    floor_ms: float = _spec("float", 0.5, lo=0.0, hi=100.0, what="noise floor [m/s]")
    extinction_mag_per_airmass: float = _spec("float", 0.15, lo=0.0, hi=2.0, what="[mag]")
    readout_s: float = _spec("float", 30.0, lo=0.0, hi=3600.0, what="detector readout [s]")
    aperture_arcsec2: float | None = _spec("optfloat", None, lo=0.01, hi=10000.0,
                                           what="sky area in the fibre [arcsec^2]")


@dataclass(frozen=True)
class ExposureConfig:
    """The exposure times on offer to every target that does not name its own."""

    options_s: tuple[float, ...] = _spec("floats", (600.0, 1200.0), lo=10.0, hi=14400.0,
                                         what="exposure times [s]")


@dataclass(frozen=True)
class SkyConfig:
    """The time grid on which the sky and the information curves are computed."""

    step_s: float = _spec("minutes", 120.0, lo=60.0, hi=1800.0, what="grid step [s]")


@dataclass(frozen=True)
class SamplerConfig:
    """Settings of the orbit-posterior sampler (the same for every target)."""

    samples: int = _spec("int", 1000, lo=50, hi=10**6, what="posterior samples kept")
    max_draws: int = _spec("int", 200000, lo=8000, hi=10**8,
                           what="importance draws at most, per star")
    seed: int = _spec("int", 1, lo=0, hi=2**63 - 1, what="seed of the sampler")
    min_period_d: float = _spec("float", 0.5, lo=0.01, hi=1e6, what="shortest period [d]")
    max_period_d: float = _spec("float", 5000.0, lo=0.02, hi=1e7, what="longest period [d]")


#: Default search work of a plan and of a re-plan, in CP-SAT deterministic time units,
#: calibrated on the demo so that a quiet 2-core machine takes about the former wall-clock
#: limits (25 s and 8 s of search; docs/decisions.md).
WORK_LIMIT, REPLAN_WORK_LIMIT = 24.0, 8.0


@dataclass(frozen=True)
class SolverConfig:
    """Settings of the allocation (CP-SAT) solver."""

    work_limit: float = _spec("float", WORK_LIMIT, lo=0.01, hi=1e6,
                              what="search work, CP-SAT deterministic time (reproducible)")
    replan_work_limit: float = _spec("float", REPLAN_WORK_LIMIT, lo=0.01, hi=1e6,
                                     what="search work when re-planning at the telescope")
    time_limit_s: float | None = _spec("optfloat", None, lo=0.1, hi=86400.0,
                                       what="wall-clock limit [s] instead of the work limit")
    replan_time_limit_s: float | None = _spec("optfloat", None, lo=0.1, hi=86400.0,
                                              what="wall-clock limit when re-planning [s]")
    seed: int = _spec("int", 0, lo=0, hi=2**31 - 1, what="solver seed")
    workers: int = _spec("int", 2, lo=1, hi=64, what="search workers")
    strategy: str = _spec("choice:joint,greedy,cadence", "joint", what="default strategy")


@dataclass(frozen=True)
class TargetConfig:
    """One star: position, brightness, its past velocities, and its rules for this run."""

    id: str = _spec("id", what="target name (letters, digits, space, _ . + -)")
    ra_deg: float = _spec("float", lo=0.0, hi=360.0, what="right ascension ICRS [deg]")
    dec_deg: float = _spec("float", lo=-90.0, hi=90.0, what="declination ICRS [deg]")
    v_mag: float = _spec("float", lo=-2.0, hi=20.0, what="V magnitude")
    rv_file: Path = _spec("path", what="CSV file of past velocities")
    planets: int | str = _spec("planets", 1, lo=0, hi=4,
                               what="number of Keplerian signals, or auto")
    max_planets: int = _spec("int", 2, lo=1, hi=4, what="most planets compared under auto")
    model_prior: tuple[float, ...] = _spec("weights", (), lo=0.0, hi=1e6,
                                           what="prior weight of 0, 1, ... planets under auto")
    weight: float = _spec("float", 1.0, lo=0.0, hi=1000.0, what="weight of its bits")
    exposures_s: tuple[float, ...] = _spec("floats", (), lo=10.0, hi=14400.0,
                                           what="its own exposure times [s]")
    min_visits: int = _spec("int", 0, lo=0, hi=1000, what="visits the run must hold")
    max_visits: int | None = _spec("optint", None, lo=0, hi=1000, what="visits at most")
    max_visits_per_night: int = _spec("int", 1, lo=1, hi=100, what="visits per night")
    min_gap_h: float = _spec("float", 0.0, lo=0.0, hi=240.0, what="hours between its visits")
    windows: tuple[tuple[float, float], ...] = _spec("windows", (), what="allowed UTC windows")
    must_windows: tuple[tuple[float, float], ...] = _spec("windows", (), what="must-do windows")
    max_airmass: float | None = _spec("optfloat", None, lo=1.0, hi=10.0, what="its own limit")
    trend: bool = _spec("bool", False, what="fit a linear velocity trend")


@dataclass(frozen=True)
class Scenario:
    """A validated observing-run scenario.

    Attributes
    ----------
    path : pathlib.Path
        The scenario file (absolute); relative paths in it are resolved against its folder.
    name : str
        Title of the run, printed in the schedule header.
    site, run, constraints, telescope, instrument, exposures, sky, sampler, solver
        The sections, each a frozen record with its defaults filled in.
    targets : tuple of TargetConfig
        At least one target, ids unique.
    cache_dir : pathlib.Path or None
        Posterior cache folder from the file (``cache:``), or None for the user cache default.
    """

    path: Path
    name: str
    site: SiteConfig
    run: RunConfig
    targets: tuple[TargetConfig, ...]
    constraints: ConstraintsConfig = ConstraintsConfig()
    telescope: TelescopeConfig = TelescopeConfig()
    instrument: InstrumentConfig = InstrumentConfig()
    exposures: ExposureConfig = ExposureConfig()
    sky: SkyConfig = SkyConfig()
    sampler: SamplerConfig = SamplerConfig()
    solver: SolverConfig = SolverConfig()
    cache_dir: Path | None = None

    def night_dates(self) -> tuple[str, ...]:
        """Local evening dates of every night of the run, ``YYYY-MM-DD``."""
        if not isinstance(self.run.nights, int):
            return tuple(date for date, _ in self.run.nights)
        first = _dt.date.fromisoformat(self.run.first_night)
        return tuple((first + _dt.timedelta(days=i)).isoformat() for i in range(self.run.nights))

    def night_parts(self) -> tuple[str | None, ...]:
        """Per night, ``first_half``, ``second_half`` or None (the whole dark window)."""
        if isinstance(self.run.nights, int):
            return (None,) * self.run.nights
        return tuple(part for _, part in self.run.nights)

    def target_exposures(self, target: TargetConfig) -> tuple[float, ...]:
        """Exposure options of one target: its own, or the scenario's."""
        return target.exposures_s or self.exposures.options_s

    def target(self, target_id: str) -> TargetConfig:
        """Return the target with this id (ScenarioError with a did-you-mean if none)."""
        ids = [t.id for t in self.targets]
        if target_id in ids:
            return self.targets[ids.index(target_id)]
        raise ScenarioError(f"{self.path.name}: there is no target {target_id!r}"
                            f"{_did_you_mean(target_id, ids)}; use one of the ids under targets.")


_SECTIONS = {
    "site": SiteConfig, "run": RunConfig, "constraints": ConstraintsConfig,
    "telescope": TelescopeConfig, "instrument": InstrumentConfig, "exposures": ExposureConfig,
    "sky": SkyConfig, "sampler": SamplerConfig, "solver": SolverConfig,
}
_TOP_KEYS = ("name", "cache", "targets", *_SECTIONS)
_REQUIRED_TOP = ("site", "run", "targets")


#: Largest scenario file read [bytes] and most targets in one: a run holds tens to a few
#: hundred targets of a few hundred bytes each, so these are far above real use and keep a
#: mistaken file from taking minutes and gigabytes to refuse.
MAX_SCENARIO_BYTES = 2_000_000
MAX_TARGETS = 2_000


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file.

    Parameters
    ----------
    path : str or pathlib.Path
        The YAML scenario file.

    Returns
    -------
    Scenario

    Raises
    ------
    planner.errors.ScenarioError
        If the file cannot be read, is not YAML, or any value breaks the schema.
    """
    path = Path(path).expanduser().resolve()
    try:
        size = path.stat().st_size
    except OSError:
        size = 0  # missing or unreadable: said below
    if size > MAX_SCENARIO_BYTES:
        raise ScenarioError(f"scenario file {path} is {size / 1e6:.1f} MB, more than the "
                            f"{MAX_SCENARIO_BYTES / 1e6:g} MB a scenario may be; keep the "
                            "velocities in the targets' rv_file CSVs and split a larger run.")
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ScenarioError(f"scenario file {path} does not exist; check the path.") from None
    except IsADirectoryError:
        raise ScenarioError(f"scenario file {path} is a folder; give the scenario's YAML file "
                            "itself.") from None
    except UnicodeDecodeError as exc:
        raise ScenarioError(f"scenario file {path} is not UTF-8 text (byte "
                            f"{exc.object[exc.start]:#04x} at offset {exc.start}); save it as "
                            "UTF-8.") from None
    except OSError as exc:
        raise ScenarioError(f"scenario file {path} cannot be read "
                            f"({exc.strerror or exc}).") from None
    return parse_scenario(text, path)


def parse_scenario(text: str, path: str | Path) -> Scenario:
    """Validate scenario YAML text as if it were the file ``path``.

    Parameters
    ----------
    text : str
        The YAML document.
    path : str or pathlib.Path
        Where it lives: names the file in messages and anchors relative paths.

    Returns
    -------
    Scenario
    """
    path = Path(path).expanduser().resolve()
    if len(text) > MAX_SCENARIO_BYTES:
        raise ScenarioError(f"{path.name}: the scenario is {len(text) / 1e6:.1f} MB of text, "
                            f"more than the {MAX_SCENARIO_BYTES / 1e6:g} MB a scenario may be; "
                            "split the run.")
    try:
        return _parse(text, path)
    except ScenarioError as exc:  # one line, whatever the file held
        raise ScenarioError(" ".join(str(exc).split())) from None


class _UniqueKeyLoader(yaml.SafeLoader):
    """The safe loader, refusing a mapping that names one key twice (YAML 1.2 forbids it)."""

    def construct_mapping(self, node, deep=False):
        seen = {}
        for key_node, _ in node.value:
            key = self.construct_object(key_node, deep=True)
            try:
                first = seen.setdefault(key, key_node.start_mark.line + 1)
            except TypeError:  # an unhashable key: the safe loader's own error follows
                continue
            if first != key_node.start_mark.line + 1:
                raise ScenarioError(
                    f"the key {key!r} appears twice, at lines {first} and "
                    f"{key_node.start_mark.line + 1}; keep one of them (YAML keeps only the "
                    "last, silently).")
        return super().construct_mapping(node, deep=deep)


#: Largest difference allowed between a site's UTC offset and its longitude / 15 deg per hour [h].
#: Civil time zones stray from solar time by up to about 3.5 h (common practice: western
#: China on UTC+8); a larger difference is a zone from the other side of the world.
ZONE_SLACK_H = 5.0


def _check_zone_fits_longitude(site, first_night: str, where: str) -> None:
    """Refuse a time zone whose UTC offset is hours away from the site's solar time."""
    moment = _dt.datetime.fromisoformat(first_night).replace(hour=21)
    offset = moment.replace(tzinfo=ZoneInfo(site.timezone)).utcoffset().total_seconds() / 3600
    solar = site.longitude_deg / 15.0
    off = (offset - solar + 12.0) % 24.0 - 12.0  # across the date line, the short way round
    if abs(off) > ZONE_SLACK_H:
        raise ScenarioError(
            f"{where}: site.timezone: {site.timezone!r} is UTC{offset:+g} h on the first night, "
            f"{abs(off):.1f} h from the solar time of longitude {site.longitude_deg:g} deg "
            f"(UTC{solar:+.1f} h); give the site's own IANA zone, or check the sign of "
            "longitude_deg (east is positive).")


def _parse(text: str, path: Path) -> Scenario:
    where = path.name
    try:
        raw = yaml.load(text, Loader=_UniqueKeyLoader)  # noqa: S506 - a SafeLoader subclass
    except ScenarioError as exc:
        raise ScenarioError(f"{where}: {exc}") from None
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or "invalid YAML"
        raise ScenarioError(f"{where}: the file is not valid YAML{line} ({problem}); "
                            "fix the indentation or quoting there.") from None
    except (ValueError, OverflowError) as exc:
        # The safe loader's own constructors reject values such as the date 2027-02-30.
        raise ScenarioError(f"{where}: the file holds a value YAML cannot read ({exc}); "
                            "check dates (YYYY-MM-DD) and numbers.") from None
    except RecursionError:
        raise ScenarioError(f"{where}: the YAML nests too deeply to be a scenario.") from None
    if not isinstance(raw, dict):
        raise ScenarioError(f"{where}: expected a mapping with the keys site, run and targets "
                            f"at the top level, got {_describe(raw)}.")
    _check_keys(raw, _TOP_KEYS, where, "")
    for key in _REQUIRED_TOP:
        if key not in raw:
            raise ScenarioError(f"{where}: the required section {key!r} is missing; "
                                "see docs/scenario.md for an example.")
    base = path.parent
    sections = {key: _build(cls, raw.get(key), where, key, base) for key, cls in _SECTIONS.items()}
    name = _coerce("str", raw.get("name", path.stem), where, "name", {}, base)
    cache = raw.get("cache")
    cache_dir = None if cache is None else _coerce("path_any", cache, where, "cache", {}, base)
    targets = _targets(raw["targets"], where, base)
    site, sampler = sections["site"], sections["sampler"]
    limits, telescope = sections["constraints"], sections["telescope"]
    if limits.min_moon_separation_deg is not None and limits.moon_table:
        raise ScenarioError(f"{where}: constraints: give min_moon_separation_deg or moon_table, "
                            "not both.")
    if not sections["exposures"].options_s:
        raise ScenarioError(f"{where}: exposures.options_s: expected at least one exposure "
                            "time such as [600, 1200].")
    wrap = telescope.azimuth_range_deg
    if wrap and (len(wrap) != 2 or wrap[1] - wrap[0] < 360.0):
        raise ScenarioError(f"{where}: telescope.azimuth_range_deg: expected two limits at least "
                            f"360 deg apart such as [-270, 270], got {list(wrap)}.")
    if site.min_altitude_deg >= site.max_altitude_deg:
        raise ScenarioError(f"{where}: site.min_altitude_deg ({site.min_altitude_deg}) must be "
                            f"below site.max_altitude_deg ({site.max_altitude_deg}).")
    run = sections["run"]
    if isinstance(run.nights, int) and run.first_night is None:
        raise ScenarioError(f"{where}: run.first_night is missing; give the local evening date "
                            "of the first night (YYYY-MM-DD), or run.nights as a list of dates.")
    if not isinstance(run.nights, int) and run.first_night is not None:
        raise ScenarioError(f"{where}: run.first_night is given with run.nights as a list of "
                            "dates; drop first_night, the list names every night.")
    first = run.first_night if isinstance(run.nights, int) else run.nights[0][0]
    _check_zone_fits_longitude(site, first, where)
    if sampler.min_period_d >= sampler.max_period_d:
        raise ScenarioError(f"{where}: sampler.min_period_d ({sampler.min_period_d}) must be "
                            f"below sampler.max_period_d ({sampler.max_period_d}).")
    return Scenario(path=path, name=name, targets=targets, cache_dir=cache_dir, **sections)


def _targets(raw: Any, where: str, base: Path) -> tuple[TargetConfig, ...]:
    if not isinstance(raw, list):
        raise ScenarioError(f"{where}: targets: expected a list of targets, got {_describe(raw)}.")
    if not raw:
        raise ScenarioError(f"{where}: targets: the target list is empty; "
                            "add at least one target with id, ra_deg, dec_deg, v_mag, rv_file.")
    if len(raw) > MAX_TARGETS:
        raise ScenarioError(f"{where}: targets: {len(raw)} targets, more than the {MAX_TARGETS} "
                            "one scenario may hold; split the run into several scenarios.")
    targets, seen = [], {}
    for i, item in enumerate(raw):
        target = _build(TargetConfig, item, where, f"targets[{i}]", base, required=True)
        if target.id in seen:
            raise ScenarioError(f"{where}: targets[{i}].id: the id {target.id!r} is already used "
                                f"by targets[{seen[target.id]}]; give every target its own id.")
        seen[target.id] = i
        if target.model_prior and target.planets != "auto":
            raise ScenarioError(f"{where}: targets[{i}].model_prior applies to planets: auto "
                                "only; remove it or set planets: auto.")
        if target.model_prior and len(target.model_prior) != target.max_planets + 1:
            raise ScenarioError(f"{where}: targets[{i}].model_prior: expected "
                                f"{target.max_planets + 1} weights (0 to max_planets = "
                                f"{target.max_planets} planets), got {len(target.model_prior)}.")
        if target.model_prior and sum(target.model_prior) <= 0.0:
            raise ScenarioError(f"{where}: targets[{i}].model_prior: the weights are all zero; "
                                "give at least one model a positive weight.")
        if target.max_visits is not None and target.max_visits < target.min_visits:
            raise ScenarioError(f"{where}: targets[{i}].max_visits ({target.max_visits}) is "
                                f"below min_visits ({target.min_visits}); raise max_visits.")
        targets.append(target)
    return tuple(targets)


def _build(cls, raw: Any, where: str, key_path: str, base: Path, required: bool = False):
    """Validate a mapping against the fields of a config dataclass."""
    if raw is None and not required:
        raw = {}
    if not isinstance(raw, dict):
        raise ScenarioError(f"{where}: {key_path}: expected a mapping of keys, "
                            f"got {_describe(raw)}.")
    fields_ = {f.name: f for f in dataclasses.fields(cls)}
    _check_keys(raw, tuple(fields_), where, key_path)
    values = {}
    for name, f in fields_.items():
        sub = f"{key_path}.{name}"
        if name in raw:
            values[name] = _coerce(f.metadata["kind"], raw[name], where, sub, f.metadata, base)
        elif f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:
            raise ScenarioError(f"{where}: {sub} is missing; expected {_expected(f.metadata)}.")
    return cls(**values)


#: Keys of earlier versions, refused with what to do instead.
_RETIRED = {
    "sampler.walkers": "stars are now sampled by adaptive importance sampling, without walkers",
    "sampler.max_steps": "stars are now sampled by adaptive importance sampling, without a "
                         "chain length",
}


def _check_keys(raw: dict, allowed: tuple[str, ...], where: str, key_path: str) -> None:
    for key in raw:
        retired = _RETIRED.get(f"{key_path}.{key}")
        if retired:
            raise ScenarioError(f"{where}: {key_path}.{key}: this key is no longer used "
                                f"({retired}); remove it (sampler.max_draws sets how many "
                                "draws a star may take).")
        if not isinstance(key, str) or key not in allowed:
            at = f"{key_path}." if key_path else ""
            hint = _did_you_mean(str(key), allowed)
            shown = key if isinstance(key, str) and key.isidentifier() else repr(key)
            raise ScenarioError(f"{where}: {at}{shown}: unknown key{hint}; "
                                f"allowed here: {', '.join(allowed)}.")


def _coerce(kind: str, value: Any, where: str, key_path: str, meta: dict, base: Path) -> Any:
    """Check one value against its kind and range, returning it in its stored form."""
    def bad(note: str = "") -> ScenarioError:
        return ScenarioError(f"{where}: {key_path}: expected {_expected(meta, kind)}, "
                             f"got {_describe(value)}{note}.")

    if value is None and kind in ("optfloat", "optint"):
        return None
    if kind in ("float", "optfloat", "int", "optint"):
        return _number(value, meta, bad, integer=kind.endswith("int"))
    if kind == "planets":
        if value == "auto":
            return value
        return _number(value, meta, bad, integer=True)
    if kind == "weights":
        if not isinstance(value, list):
            raise bad()
        return tuple(_number(item, meta, bad, integer=False) for item in value)  # [] = default
    if kind == "minutes":
        number = _number(value, meta, bad, integer=False)
        if not float(number / 60.0).is_integer():
            raise bad(" (the solver clock counts whole minutes)")
        return number
    if kind == "pairs":
        if not isinstance(value, list) or not all(isinstance(v, list) and len(v) == 2
                                                  for v in value):
            raise bad()
        rows = tuple((_number(a, {"lo": 0.0, "hi": 1.0}, bad, integer=False),
                      _number(b, meta, bad, integer=False)) for a, b in value)
        if [r[0] for r in rows] != sorted(r[0] for r in rows) or (rows and rows[-1][0] != 1.0):
            raise bad(" (illuminations must increase and end at 1)")
        return rows
    if kind == "windows":
        if not isinstance(value, list):
            raise bad()
        return tuple(_window(item, bad) for item in value)
    if kind == "bool":
        if not isinstance(value, bool):
            raise bad()
        return value
    if kind == "floats":
        return _floats(value, where, key_path, meta, bad)
    if kind.startswith("choice:"):
        choices = kind.split(":", 1)[1].split(",")
        if not isinstance(value, str) or value not in choices:
            raise bad(_did_you_mean(str(value), choices))
        return value
    if kind == "twilight":
        if isinstance(value, str):
            if value not in TWILIGHT_NAMES:
                raise bad(_did_you_mean(value, TWILIGHT_NAMES))
            return value
        return _number(value, {"lo": -30.0, "hi": 0.0}, bad, integer=False)
    if kind == "nights":
        if not isinstance(value, list):
            return _number(value, meta, bad, integer=True)
        return _night_list(value, where, key_path, meta, base)
    if kind == "date":
        if isinstance(value, _dt.datetime) or not isinstance(value, _dt.date | str):
            raise bad()
        try:
            date = value if isinstance(value, _dt.date) else _dt.date.fromisoformat(value.strip())
        except ValueError:
            raise bad(" (not a calendar date)") from None
        if not 1900 <= date.year <= 2200:
            raise bad(" (outside the years 1900-2200)")
        return date.isoformat()
    return _text(kind, value, where, key_path, base, bad)


def _floats(value, where, key_path, meta, bad) -> tuple:
    """Check a number or list of numbers; return them sorted, a bad item named by index."""
    items = [value] if isinstance(value, int | float) and not isinstance(value, bool) else value
    if not isinstance(items, list):
        raise bad()
    numbers = set()
    for i, item in enumerate(items):
        def bad_item(note: str = "", i=i, item=item) -> ScenarioError:
            return ScenarioError(f"{where}: {key_path}[{i}]: expected "
                                 f"{_expected(meta, 'float')}, got {_describe(item)}{note}.")

        numbers.add(_number(item, meta, bad_item, integer=False))
    return tuple(sorted(numbers))


def _text(kind, value, where, key_path, base, bad):
    """Check a non-empty text: an id, a time zone, a path (resolved) or plain text."""
    if not isinstance(value, str) or not value.strip():
        raise bad()
    if kind == "id":
        if not _ID_PATTERN.match(value):
            raise bad()
        return value
    if kind == "timezone":
        try:
            ZoneInfo(value)
        except (ZoneInfoNotFoundError, ValueError):
            raise bad(" (unknown time zone)") from None
        return value
    if kind in ("path", "path_any"):
        if "\x00" in value:
            raise bad()
        resolved = (base / Path(value).expanduser()).resolve()
        if kind == "path" and resolved.is_dir():
            raise ScenarioError(f"{where}: {key_path}: {resolved} is a folder; give the file "
                                "itself (paths are relative to the scenario file's folder).")
        if kind == "path" and not resolved.is_file():
            raise ScenarioError(f"{where}: {key_path}: the file {resolved} does not exist; "
                                "paths are relative to the scenario file's folder.")
        return resolved
    return value.strip()


def _window(item: Any, bad) -> tuple[float, float]:
    """Convert a ``[start, end]`` pair of UTC date-times to JD (UTC), start before end."""
    if not isinstance(item, list) or len(item) != 2:
        raise bad()
    jd = []
    for value in item:
        if isinstance(value, str):
            try:
                value = _dt.datetime.fromisoformat(value.strip().replace("Z", "+00:00"))
            except ValueError:
                raise bad(" (not an ISO date-time)") from None
        if not isinstance(value, _dt.datetime):
            raise bad()
        jd.append(jd_from_datetime(value))
    if jd[1] <= jd[0]:
        raise bad(" (the window ends before it starts)")
    return jd[0], jd[1]


#: Parts of a night a ``run.nights`` entry may name after its date.
NIGHT_PARTS = ("first_half", "second_half")


def _night_list(value: list, where: str, key_path: str, meta: dict, base: Path) -> tuple:
    """``run.nights`` as a list: ``((date, part), ...)`` in increasing date order."""
    if not 1 <= len(value) <= meta["hi"]:
        raise ScenarioError(f"{where}: {key_path}: expected from 1 to {meta['hi']:g} nights, "
                            f"got a list of {len(value)}.")
    out = []
    for i, item in enumerate(value):
        sub = f"{key_path}[{i}]"
        words = item.split() if isinstance(item, str) else [item]
        if len(words) > 2 or (len(words) == 2 and words[1] not in NIGHT_PARTS):
            raise ScenarioError(f"{where}: {sub}: expected a date YYYY-MM-DD, optionally "
                                f"followed by first_half or second_half, got {_describe(item)}.")
        date = _coerce("date", words[0], where, sub, {}, base)
        out.append((date, words[1] if len(words) == 2 else None))
        if i and date <= out[i - 1][0]:
            raise ScenarioError(f"{where}: {sub}: the night of {date} does not come after the "
                                f"night of {out[i - 1][0]}; list each night once, in date "
                                "order.")
    return tuple(out)


def _number(value: Any, meta: dict, bad, integer: bool) -> float | int:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise bad()
    if integer and not isinstance(value, int):
        if not (math.isfinite(value) and float(value).is_integer()):
            raise bad()
    try:
        number = int(value) if integer else float(value)
    except OverflowError:
        raise bad() from None
    if not math.isfinite(number):
        raise bad()
    lo, hi = meta.get("lo"), meta.get("hi")
    if (lo is not None and number < lo) or (hi is not None and number > hi):
        raise bad()
    return number


def _expected(meta: dict, kind: str | None = None) -> str:
    kind = kind or meta["kind"]
    lo, hi, what = meta.get("lo"), meta.get("hi"), meta.get("what", "")
    span = f" from {lo:g} to {hi:g}" if lo is not None and hi is not None else ""
    text = {
        "float": f"a number{span}", "optfloat": f"a number{span} or null",
        "optint": f"a whole number{span} or null",
        "minutes": f"a whole number of minutes in seconds{span}",
        "pairs": "a list of [max illumination 0-1, separation 0-180 deg] rows",
        "windows": "a list of [start, end] UTC date-times such as 2027-10-05T02:00:00Z",
        "int": f"a whole number{span}", "bool": "true or false",
        "planets": f"a whole number{span} or auto",
        "weights": f"a list of numbers{span}",
        "nights": f"a whole number{span} or a list of dates YYYY-MM-DD",
        "floats": f"a list of numbers{span}", "date": "a date YYYY-MM-DD",
        "twilight": "civil, nautical, astronomical or a Sun altitude from -30 to 0",
        "path": "a file path", "path_any": "a folder path", "id": "a name", "str": "a text",
        "timezone": "an IANA time zone name",
    }.get(kind)
    if text is None and kind.startswith("choice:"):
        text = "one of " + ", ".join(kind.split(":", 1)[1].split(","))
    plain = ("twilight", "date", "windows", "pairs")
    return f"{text} ({what})" if what and kind not in plain else text


def _describe(value: Any) -> str:
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if value is None:
        return "nothing"
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _did_you_mean(word: str, options) -> str:
    close = difflib.get_close_matches(word, list(options), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""
