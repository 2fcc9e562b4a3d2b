"""Time between two exposures: telescope motion plus fixed overheads (pure array core).

``slew_seconds`` returns the whole time the telescope is not exposing between the
end of one exposure and the start of the next: the longer of the two axis moves
(the axes move together), plus readout, settle and acquisition. The fixed part is
:meth:`Mount.overhead_s`; ask for the motion alone with ``include_overhead=False``.
Readout, settle and acquisition are charged even between two exposures of the same
target, so a target "slewing to itself" costs exactly the fixed overhead.

Axis profile: with an acceleration ``a`` and top rate ``v``, a move of ``d`` degrees
takes ``d / v + v / a`` when it reaches top rate (``d >= v^2 / a``) and
``2 sqrt(d / a)`` otherwise; without an acceleration it takes ``d / v``.

Cable wrap (alt-azimuth mounts with ``az_wrap_deg = (low, high)``): the mount's
azimuth must stay inside ``[low, high]``, a range of at least 360 deg. We assume
the mount reaches every target at its *canonical* turn, the mount azimuth
nearest the middle of the range (sky azimuth mapped into ``[mid - 180, mid + 180)``),
and moves between canonical turns. A move whose short way would cross the
wrap limit at ``mid + 180`` therefore goes the long way round. Where the range is
wider than 360 deg a real mount could sometimes take a shorter path from its
actual turn, so the estimate never falls short of the truth for a mount that
starts each move from a canonical turn. Without a wrap the short way is taken.

Equatorial mounts move in hour angle (short way, no wrap) and declination.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from planner.errors import ScenarioError
from planner.sky.airmass import wrap_degrees

__all__ = ["Mount", "MountSlew", "axis_seconds", "max_slew_seconds", "slew_seconds"]


@dataclass(frozen=True)
class Mount:
    """A telescope mount and the fixed overheads between exposures.

    Attributes
    ----------
    kind : {'altaz', 'equatorial'}
        Axis layout: (azimuth, altitude) or (hour angle, declination).
    rate1_deg_s, rate2_deg_s : float
        Top rates of the first (azimuth or hour angle) and second (altitude or
        declination) axis [deg/s].
    accel_deg_s2 : float or None
        Acceleration of both axes [deg/s^2]; ``None`` for instant top rate.
    settle_s : float
        Settling after a move [s].
    acquisition_s : float
        Target acquisition and guiding start [s].
    readout_s : float
        Detector readout of the previous exposure [s].
    az_wrap_deg : (float, float) or None
        Allowed mount azimuth range (north = 0, east = 90) of an alt-azimuth
        mount, at least 360 deg wide; ``None`` for no cable wrap.
    """

    kind: str = "altaz"
    rate1_deg_s: float = 2.0
    rate2_deg_s: float = 1.5
    accel_deg_s2: float | None = None
    settle_s: float = 20.0
    acquisition_s: float = 60.0
    readout_s: float = 30.0
    az_wrap_deg: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        if self.kind not in ("altaz", "equatorial"):
            raise ScenarioError(
                f"Mount: kind {self.kind!r} is unknown; use 'altaz' or 'equatorial'."
            )
        for key in ("rate1_deg_s", "rate2_deg_s"):
            if not getattr(self, key) > 0:
                raise ScenarioError(
                    f"Mount: {key}={getattr(self, key)!r} must be positive [deg/s]."
                )
        if self.accel_deg_s2 is not None and not self.accel_deg_s2 > 0:
            raise ScenarioError(
                f"Mount: accel_deg_s2={self.accel_deg_s2!r} must be positive or None."
            )
        for key in ("settle_s", "acquisition_s", "readout_s"):
            if not getattr(self, key) >= 0:
                raise ScenarioError(
                    f"Mount: {key}={getattr(self, key)!r} must be zero or positive [s]."
                )
        if self.az_wrap_deg is not None:
            if self.kind != "altaz":
                raise ScenarioError("Mount: az_wrap_deg applies to 'altaz' mounts only; remove it.")
            low, high = self.az_wrap_deg
            if not high - low >= 360.0:
                raise ScenarioError(
                    f"Mount: az_wrap_deg {self.az_wrap_deg!r} spans less than 360 deg; give the "
                    "mount's full azimuth range, e.g. (-270, 270)."
                )

    def overhead_s(self) -> float:
        """Return the fixed time between exposures: readout + settle + acquisition [s]."""
        return self.readout_s + self.settle_s + self.acquisition_s


def axis_seconds(
    distance_deg: ArrayLike, rate_deg_s: float, accel_deg_s2: float | None
) -> NDArray[np.float64]:
    """Time for one axis to move ``distance_deg`` (trapezoidal or triangular profile) [s]."""
    d = np.abs(np.asarray(distance_deg, dtype=float))
    if accel_deg_s2 is None:
        return d / rate_deg_s
    ramp = rate_deg_s**2 / accel_deg_s2
    return np.where(
        d >= ramp, d / rate_deg_s + rate_deg_s / accel_deg_s2, 2.0 * np.sqrt(d / accel_deg_s2)
    )


def _azimuth_travel(mount: Mount, az1, az2):
    if mount.az_wrap_deg is None:
        return np.abs(wrap_degrees(np.asarray(az2, float) - np.asarray(az1, float)))
    mid = 0.5 * (mount.az_wrap_deg[0] + mount.az_wrap_deg[1])
    return np.abs(wrap_degrees(az2, mid - 180.0) - wrap_degrees(az1, mid - 180.0))


def slew_seconds(
    mount: Mount,
    alt1_deg: ArrayLike,
    az1_deg: ArrayLike,
    alt2_deg: ArrayLike,
    az2_deg: ArrayLike,
    *,
    ha1_deg: ArrayLike | None = None,
    dec1_deg: ArrayLike | None = None,
    ha2_deg: ArrayLike | None = None,
    dec2_deg: ArrayLike | None = None,
    include_overhead: bool = True,
) -> NDArray[np.float64]:
    """Time from the end of one exposure to the start of the next [s], for all pairs given.

    Parameters
    ----------
    mount : Mount
    alt1_deg, az1_deg : array_like
        Where the previous exposure ended: altitude and azimuth [deg].
    alt2_deg, az2_deg : array_like
        Where the next exposure starts [deg]. All inputs broadcast, so
        ``(n, 1)`` against ``(1, n)`` gives the full pair matrix.
    ha1_deg, dec1_deg, ha2_deg, dec2_deg : array_like, optional
        Hour angles and declinations [deg]; required for an equatorial mount.
    include_overhead : bool
        Add :meth:`Mount.overhead_s` (default) or return the motion alone.

    Returns
    -------
    ndarray
        Seconds, broadcast shape.
    """
    if mount.kind == "altaz":
        d1 = _azimuth_travel(mount, az1_deg, az2_deg)
        d2 = np.asarray(alt2_deg, dtype=float) - np.asarray(alt1_deg, dtype=float)
    else:
        if any(x is None for x in (ha1_deg, dec1_deg, ha2_deg, dec2_deg)):
            raise ScenarioError(
                "slew_seconds: an equatorial mount needs ha1_deg, dec1_deg, ha2_deg and dec2_deg."
            )
        d1 = wrap_degrees(np.asarray(ha2_deg, dtype=float) - np.asarray(ha1_deg, dtype=float))
        d2 = np.asarray(dec2_deg, dtype=float) - np.asarray(dec1_deg, dtype=float)
        d1, d2 = np.broadcast_arrays(
            d1, d2, np.asarray(alt1_deg, float), np.asarray(alt2_deg, float)
        )[:2]
    motion = np.maximum(
        axis_seconds(d1, mount.rate1_deg_s, mount.accel_deg_s2),
        axis_seconds(d2, mount.rate2_deg_s, mount.accel_deg_s2),
    )
    return motion + mount.overhead_s() if include_overhead else motion


def _farthest_circular(a_deg, b_deg) -> float:
    """Largest short-way angle [deg] between any angle of `a_deg` and any of `b_deg`."""
    a = wrap_degrees(np.asarray(a_deg, dtype=float).ravel(), 0.0)
    b = np.sort(wrap_degrees(np.asarray(b_deg, dtype=float).ravel(), 0.0))
    # The farthest b from a is the one nearest a's antipode: its neighbours in sorted order.
    target = wrap_degrees(a + 180.0, 0.0)
    k = np.searchsorted(b, target)
    best = 0.0
    for cand in (b[k % b.size], b[(k - 1) % b.size]):
        best = max(best, float(np.max(np.abs(wrap_degrees(cand - a)))))
    return best


def max_slew_seconds(mount: Mount, alt1_deg: ArrayLike, az1_deg: ArrayLike,
                     alt2_deg: ArrayLike, az2_deg: ArrayLike, *,
                     include_overhead: bool = True) -> float:
    """Largest :func:`slew_seconds` over every pair (one end from set 1, one start from set 2).

    Parameters
    ----------
    mount : Mount
        An alt-azimuth mount.
    alt1_deg, az1_deg : array_like, shape (n1,)
        Where exposures end [deg].
    alt2_deg, az2_deg : array_like, shape (n2,)
        Where exposures start [deg].
    include_overhead : bool
        Add :meth:`Mount.overhead_s` (default) or return the motion alone.

    Returns
    -------
    float
        Seconds; equal to ``slew_seconds(mount, alt1[:, None], az1[:, None], alt2[None, :],
        az2[None, :]).max()`` in O(n log n) instead of O(n1 n2).

    Notes
    -----
    The motion is the longer of two axis moves and each axis time grows with its distance, so
    the largest motion over pairs is the longer of the two largest axis moves, each found on its
    own: the largest altitude change from the extremes, the largest mount-azimuth change from
    the extremes of the canonical turns (with a cable wrap) or from each end's nearest start to
    its antipode (without one).
    """
    if mount.kind != "altaz":
        raise ScenarioError("max_slew_seconds: only alt-azimuth mounts are supported.")
    alt1, az1 = np.asarray(alt1_deg, dtype=float), np.asarray(az1_deg, dtype=float)
    alt2, az2 = np.asarray(alt2_deg, dtype=float), np.asarray(az2_deg, dtype=float)
    if alt1.size == 0 or alt2.size == 0:
        return 0.0
    d_alt = max(alt2.max() - alt1.min(), alt1.max() - alt2.min())
    if mount.az_wrap_deg is None:
        d_az = _farthest_circular(az1, az2)
    else:
        mid = 0.5 * (mount.az_wrap_deg[0] + mount.az_wrap_deg[1])
        turn1, turn2 = wrap_degrees(az1, mid - 180.0), wrap_degrees(az2, mid - 180.0)
        d_az = max(turn2.max() - turn1.min(), turn1.max() - turn2.min())
    motion = max(float(axis_seconds(d_az, mount.rate1_deg_s, mount.accel_deg_s2)),
                 float(axis_seconds(d_alt, mount.rate2_deg_s, mount.accel_deg_s2)))
    return motion + mount.overhead_s() if include_overhead else motion


@dataclass(frozen=True)
class MountSlew:
    """A mount's slew model, motion only: ``(alt1, az1, alt2, az2) -> seconds`` (broadcasting).

    Attributes
    ----------
    mount : Mount
    """

    mount: Mount

    def __call__(self, alt1, az1, alt2, az2):
        """Motion time [s] from (alt1, az1) to (alt2, az2) [deg], broadcasting."""
        return slew_seconds(self.mount, alt1, az1, alt2, az2, include_overhead=False)

    @property
    def has_pair_max(self) -> bool:
        """Whether :meth:`pair_max` is available (alt-azimuth mounts)."""
        return self.mount.kind == "altaz"

    def pair_max(self, alt1, az1, alt2, az2) -> float:
        """Largest motion [s] over every pair of an end in set 1 and a start in set 2."""
        return max_slew_seconds(self.mount, alt1, az1, alt2, az2, include_overhead=False)
