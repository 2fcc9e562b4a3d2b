"""Seeded weather loss: whole nights or clock hours, drawn independently of any plan."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from planner.errors import ScenarioError

__all__ = ["LostTime", "Weather", "draw_weather", "lost_mask"]


@dataclass(frozen=True)
class Weather:
    """Seeded weather loss.

    Attributes
    ----------
    night_loss : float
        Probability that a whole night is lost, independently per night.
    hour_loss : float
        Probability that a clock hour (UTC) of a surviving night is lost, independently.
    """

    night_loss: float = 0.0
    hour_loss: float = 0.0

    def __post_init__(self):
        for name in ("night_loss", "hour_loss"):
            value = getattr(self, name)
            if not (0.0 <= value <= 1.0):
                raise ScenarioError(f"weather {name} is {value}; give a probability between "
                                    "0 and 1.")


@dataclass(frozen=True)
class LostTime:
    """Time lost to the weather in one simulated run.

    Attributes
    ----------
    intervals_jd : ndarray, shape (n_lost, 2)
        Lost spans, start and end, JD (UTC) [d], sorted.
    nights_lost : tuple of int
        Indices of the nights lost whole.
    """

    intervals_jd: np.ndarray
    nights_lost: tuple[int, ...] = ()


def draw_weather(windows_jd, weather, rng):
    """Draw the weather of a run.

    Parameters
    ----------
    windows_jd : ndarray, shape (n_nights, 2)
        Each night's observing window, start and end, JD (UTC) [d].
    weather : Weather
        Loss probabilities.
    rng : numpy.random.Generator
        Generator for the draws.

    Returns
    -------
    LostTime

    Notes
    -----
    The draws depend only on the windows and the generator, never on a plan, so every strategy
    run with the same seed meets the same weather (common random numbers).
    """
    windows = np.atleast_2d(np.asarray(windows_jd, dtype=float))
    spans, whole = [], []
    for k, (start, end) in enumerate(windows):
        # Clock hours overlapping the window with positive length.
        first, last = math.floor(start * 24.0), math.ceil(end * 24.0) - 1
        night_lost = rng.random() < weather.night_loss
        hours_lost = rng.random(last - first + 1) < weather.hour_loss
        if night_lost:
            whole.append(k)
            spans.append((start, end))
            continue
        for h in np.flatnonzero(hours_lost):
            spans.append((max(start, (first + h) / 24.0), min(end, (first + h + 1) / 24.0)))
    arr = np.array(sorted(spans), dtype=float).reshape(-1, 2)
    return LostTime(intervals_jd=arr, nights_lost=tuple(whole))


def lost_mask(starts_jd, ends_jd, lost):
    """Which visits overlap lost time.

    Parameters
    ----------
    starts_jd, ends_jd : ndarray, shape (n_visits,)
        Shutter open and close, JD (UTC) [d].
    lost : LostTime
        The weather of the run.

    Returns
    -------
    ndarray of bool, shape (n_visits,)
        True where the exposure overlaps a lost span (a partial exposure yields nothing).
    """
    starts = np.asarray(starts_jd, dtype=float)[:, None]
    ends = np.asarray(ends_jd, dtype=float)[:, None]
    iv = lost.intervals_jd
    if iv.shape[0] == 0:
        return np.zeros(starts.shape[0], dtype=bool)
    return np.any((starts < iv[None, :, 1]) & (ends > iv[None, :, 0]), axis=1)
