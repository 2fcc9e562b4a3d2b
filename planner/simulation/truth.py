"""True orbits of simulated stars: the record, the truth files, and truths drawn from posteriors.

A truth file is one JSON object per star (``scenarios/demo/truth/*.json``, written by
``scenarios/make_demo.py``): ``target``, ``instrument``, ``offset_ms``, ``jitter_ms`` and
``planets``, a list of objects with ``period_d``, ``semi_amplitude_ms``, ``eccentricity``,
``omega_rad`` and ``time_periastron_bjd``; optional ``trend_ms_per_d`` and ``t_ref``.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from inference.keplerian import radial_velocity
from planner.errors import ScenarioError

__all__ = ["Planet", "TrueOrbit", "read_truths", "truth_from_sample"]


@dataclass(frozen=True)
class Planet:
    """One true Keplerian orbit.

    Attributes
    ----------
    period_d : float
        Period [d].
    semi_amplitude_ms : float
        Semi-amplitude K [m/s].
    eccentricity : float
        Eccentricity, in [0, 1).
    omega_rad : float
        Star's argument of periastron [rad].
    time_periastron_bjd : float
        A time of periastron, BJD_TDB [d].
    """

    period_d: float
    semi_amplitude_ms: float
    eccentricity: float
    omega_rad: float
    time_periastron_bjd: float


@dataclass(frozen=True)
class TrueOrbit:
    """A star's true velocity curve: planets, offset, jitter and an optional linear trend.

    Attributes
    ----------
    target : str
        Target id.
    instrument : str
        Instrument the offset refers to.
    offset_ms : float
        Systemic offset of that instrument [m/s].
    jitter_ms : float
        True stellar jitter, added in quadrature to the measurement noise [m/s].
    planets : tuple of Planet
        The planets (empty for a star without one).
    trend_ms_per_d : float
        Linear trend [m/s/d], zero at ``t_ref``.
    t_ref : float
        Reference epoch of the trend, BJD_TDB [d].
    """

    target: str
    instrument: str
    offset_ms: float
    jitter_ms: float
    planets: tuple[Planet, ...] = ()
    trend_ms_per_d: float = 0.0
    t_ref: float = 0.0

    def velocity(self, bjd):
        """Return the true velocity without noise.

        Parameters
        ----------
        bjd : ndarray, shape (n,)
            Times, BJD_TDB [d].

        Returns
        -------
        ndarray, shape (n,)
            Velocity [m/s], offset and trend included.
        """
        t = np.asarray(bjd, dtype=float)
        v = self.offset_ms + self.trend_ms_per_d * (t - self.t_ref)
        for p in self.planets:
            v = v + radial_velocity(t, p.period_d, p.semi_amplitude_ms, p.eccentricity,
                                    p.omega_rad, p.time_periastron_bjd)
        return np.broadcast_to(v, t.shape).astype(float)


_PLANET_KEYS = ("period_d", "semi_amplitude_ms", "eccentricity", "omega_rad",
                "time_periastron_bjd")


def _truth_from_dict(doc, where):
    def fail(what):
        raise ScenarioError(f"{where}: {what}; rewrite the file with scenarios/make_demo.py or "
                            "follow docs/simulation.md for the truth format.")

    if not isinstance(doc, dict):
        fail("expected a JSON object")
    for key in ("target", "instrument", "offset_ms", "jitter_ms", "planets"):
        if key not in doc:
            fail(f"missing key '{key}'")
    if not isinstance(doc["planets"], list):
        fail("'planets' must be a list")
    planets = []
    for k, p in enumerate(doc["planets"]):
        if not isinstance(p, dict) or any(key not in p for key in _PLANET_KEYS):
            fail(f"planets[{k}] needs the keys {', '.join(_PLANET_KEYS)}")
        values = {key: float(p[key]) for key in _PLANET_KEYS}
        if not (values["period_d"] > 0 and 0 <= values["eccentricity"] < 1
                and values["semi_amplitude_ms"] >= 0):
            fail(f"planets[{k}] needs period_d > 0, 0 <= eccentricity < 1 and "
                 "semi_amplitude_ms >= 0")
        planets.append(Planet(**values))
    jitter = float(doc["jitter_ms"])
    if not (math.isfinite(jitter) and jitter >= 0):
        fail("'jitter_ms' must be a finite number >= 0")
    return TrueOrbit(target=str(doc["target"]), instrument=str(doc["instrument"]),
                     offset_ms=float(doc["offset_ms"]), jitter_ms=jitter,
                     planets=tuple(planets),
                     trend_ms_per_d=float(doc.get("trend_ms_per_d", 0.0)),
                     t_ref=float(doc.get("t_ref", 0.0)))


def read_truths(folder):
    """Read every ``*.json`` true orbit in a folder.

    Parameters
    ----------
    folder : str or Path
        Folder of truth files (``scenarios/demo/truth``).

    Returns
    -------
    dict of str to TrueOrbit
        Keyed by target id.

    Raises
    ------
    ScenarioError
        When the folder has no truth file or a file is malformed (one sentence naming it).
    """
    folder = Path(folder)
    files = sorted(folder.glob("*.json"))
    if not files:
        raise ScenarioError(f"{folder}: no true-orbit files (*.json) found; pass the folder "
                            "written beside the scenario, such as scenarios/demo/truth.")
    truths = {}
    for path in files:
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
        except json.JSONDecodeError as exc:
            raise ScenarioError(f"{path}: not valid JSON at line {exc.lineno} ({exc.msg}); "
                                "fix or regenerate the file.") from None
        truth = _truth_from_dict(doc, str(path))
        truths[truth.target] = truth
    return truths


def truth_from_sample(posterior, index, instrument=None):
    """Make a true orbit equal to one complete posterior sample (for calibration runs).

    Parameters
    ----------
    posterior : inference.posterior.Posterior
        Posterior with complete samples.
    index : int
        Sample row.
    instrument : str, optional
        Instrument whose offset and jitter are used; default the model's first.

    Returns
    -------
    TrueOrbit
    """
    names = posterior.names
    row = posterior.samples[index]
    value = dict(zip(names, row, strict=True))
    inst = instrument if instrument is not None else posterior.model.instruments[0]
    planets = tuple(
        Planet(period_d=float(value[f"period_{k}"]),
               semi_amplitude_ms=float(value[f"semi_amplitude_{k}"]),
               eccentricity=float(value[f"eccentricity_{k}"]),
               omega_rad=float(value[f"omega_{k}"]),
               time_periastron_bjd=float(value[f"time_periastron_{k}"]))
        for k in range(1, posterior.model.n_planets + 1)
    )
    return TrueOrbit(target=posterior.target, instrument=inst,
                     offset_ms=float(value[f"offset_{inst}"]),
                     jitter_ms=float(value[f"jitter_{inst}"]), planets=planets,
                     trend_ms_per_d=float(value.get("trend", 0.0)),
                     t_ref=float(posterior.model.t_ref))
