"""Measurement noise of one radial velocity: photon noise, extinction, Moon sky, floor.

Pure array functions; everything broadcasts. Stellar jitter is not included here:
the information code adds each sample's jitter in quadrature.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from planner.errors import ScenarioError

__all__ = [
    "DEFAULT_EXPOSURES_S",
    "Instrument",
    "grid_sigma",
    "moon_sky_brightness",
    "photon_sigma",
    "rv_sigma",
]

#: Exposure options offered to every target unless the scenario lists its own [s]
#: (the same pair as the scenario's default ``exposures.options_s``).
DEFAULT_EXPOSURES_S: tuple[float, ...] = (600.0, 1200.0)


@dataclass(frozen=True)
class Instrument:
    """A spectrograph's velocity precision, calibrated at one reference point.

    Attributes
    ----------
    sigma_ref_ms : float
        Photon-limited precision [m/s] for a star of ``v_ref_mag`` observed for
        ``t_ref_s`` at airmass ``airmass_ref``.
    v_ref_mag : float
        V magnitude of the reference point.
    t_ref_s : float
        Exposure of the reference point [s].
    floor_ms : float
        Instrumental noise floor added in quadrature [m/s].
    k_mag_per_airmass : float
        V-band extinction coefficient [mag per airmass].
    airmass_ref : float
        Airmass of the reference point.
    aperture_arcsec2 : float or None
        Sky area seen with the star (fibre or slit) [arcsec^2]; ``None`` leaves the
        sky background out of the noise.
    """

    sigma_ref_ms: float = 1.0
    v_ref_mag: float = 8.0
    t_ref_s: float = 900.0
    floor_ms: float = 0.5
    k_mag_per_airmass: float = 0.15
    airmass_ref: float = 1.0
    aperture_arcsec2: float | None = None

    def __post_init__(self) -> None:
        positive = {"sigma_ref_ms": self.sigma_ref_ms, "t_ref_s": self.t_ref_s}
        for key, value in positive.items():
            if not (np.isfinite(value) and value > 0):
                raise ScenarioError(f"Instrument: {key}={value!r} must be a positive number.")
        for key, value in {
            "floor_ms": self.floor_ms,
            "k_mag_per_airmass": self.k_mag_per_airmass,
        }.items():
            if not (np.isfinite(value) and value >= 0):
                raise ScenarioError(f"Instrument: {key}={value!r} must be zero or positive.")
        if self.aperture_arcsec2 is not None and not self.aperture_arcsec2 > 0:
            raise ScenarioError(
                f"Instrument: aperture_arcsec2={self.aperture_arcsec2!r} must be positive or None."
            )


def photon_sigma(
    instrument: Instrument, v_mag: ArrayLike, exposure_s: ArrayLike, airmass: ArrayLike = 1.0
) -> NDArray[np.float64]:
    """Photon-limited velocity precision [m/s], no floor, no sky.

    Parameters
    ----------
    instrument : Instrument
    v_mag : array_like
        V magnitude above the atmosphere.
    exposure_s : array_like
        Exposure [s], positive.
    airmass : array_like
        Airmass of the observation.

    Returns
    -------
    ndarray
        ``sigma_ref * 10**(0.2 (V + k (X - X_ref) - V_ref)) * sqrt(t_ref / t)``, broadcast.

    Notes
    -----
    Photon-noise scaling of the radial-velocity precision with flux and time
    (Bouchy, Pepe and Queloz 2001, A&A 374, 733): sigma is proportional to
    ``1 / sqrt(N_photons)``; extinction dims the star by ``k X`` magnitudes.
    """
    t = np.asarray(exposure_s, dtype=float)
    if np.any(~(t > 0)):
        raise ScenarioError(f"rv_sigma: exposure_s must be positive seconds, got {exposure_s!r}.")
    v_eff = np.asarray(v_mag, dtype=float) + instrument.k_mag_per_airmass * (
        np.asarray(airmass, dtype=float) - instrument.airmass_ref
    )
    return (
        instrument.sigma_ref_ms
        * 10.0 ** (0.2 * (v_eff - instrument.v_ref_mag))
        * np.sqrt(instrument.t_ref_s / t)
    )


def rv_sigma(
    instrument: Instrument,
    v_mag: ArrayLike,
    exposure_s: ArrayLike,
    airmass: ArrayLike = 1.0,
    sky_v_mag_arcsec2: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """Measurement noise of one velocity [m/s] (photon noise, sky, floor; no jitter).

    Parameters
    ----------
    instrument : Instrument
    v_mag, exposure_s, airmass : array_like
        As in :func:`photon_sigma`.
    sky_v_mag_arcsec2 : array_like, optional
        Sky surface brightness [V mag/arcsec^2] (e.g. :func:`moon_sky_brightness`);
        used only when the instrument has an ``aperture_arcsec2``.

    Returns
    -------
    ndarray
        ``sqrt(sigma_photon^2 (1 + B/S) + floor^2)``, broadcast, where ``B/S`` is
        the sky-to-star count ratio in the aperture (sky photons add noise but no
        velocity information).
    """
    photon = photon_sigma(instrument, v_mag, exposure_s, airmass)
    if sky_v_mag_arcsec2 is not None and instrument.aperture_arcsec2 is not None:
        v_eff = np.asarray(v_mag, dtype=float) + instrument.k_mag_per_airmass * np.asarray(
            airmass, dtype=float
        )
        sky_mag = np.asarray(sky_v_mag_arcsec2, dtype=float) - 2.5 * np.log10(
            instrument.aperture_arcsec2
        )
        photon = photon * np.sqrt(1.0 + 10.0 ** (-0.4 * (sky_mag - v_eff)))
    return np.hypot(photon, instrument.floor_ms)


def _nanolambert_from_mag(v: ArrayLike) -> NDArray[np.float64]:
    return 34.08 * np.exp(20.7233 - 0.92104 * np.asarray(v, dtype=float))


def _mag_from_nanolambert(b: ArrayLike) -> NDArray[np.float64]:
    return (20.7233 - np.log(np.asarray(b, dtype=float) / 34.08)) / 0.92104


def moon_sky_brightness(
    moon_illumination: ArrayLike,
    separation_deg: ArrayLike,
    moon_altitude_deg: ArrayLike,
    target_altitude_deg: ArrayLike,
    k_mag_per_airmass: float = 0.15,
    dark_sky_v_mag_arcsec2: float = 21.6,
) -> NDArray[np.float64]:
    """V-band sky surface brightness with the Moon's scattered light [mag/arcsec^2].

    Parameters
    ----------
    moon_illumination : array_like
        Illuminated fraction of the Moon, 0 to 1.
    separation_deg : array_like
        Angle between the target and the Moon [deg].
    moon_altitude_deg, target_altitude_deg : array_like
        Altitudes [deg]; the Moon contributes nothing while below the horizon.
    k_mag_per_airmass : float
        V extinction coefficient [mag per airmass].
    dark_sky_v_mag_arcsec2 : float
        Moonless sky brightness at the zenith [V mag/arcsec^2].

    Returns
    -------
    ndarray
        Total sky brightness (dark sky plus Moon), broadcast.

    Notes
    -----
    Krisciunas and Schaefer (1991), PASP 103, 1033: Moon illuminance
    ``I* = 10**(-0.4 (3.84 + 0.026 |a| + 4e-9 a**4))`` (phase angle ``a`` deg,
    here from ``k = (1 + cos a) / 2``), scattering function
    ``f(r) = 10**5.36 (1.06 + cos^2 r) + 10**(6.15 - r / 40)``, airmass
    ``X(Z) = (1 - 0.96 sin^2 Z)**-0.5`` and
    ``B_moon = f(r) I* 10**(-0.4 k X(Z_moon)) (1 - 10**(-0.4 k X(Z)))`` nanolamberts;
    the dark sky brightens with zenith distance as ``B0 X(Z) 10**(-0.4 k (X(Z) - 1))``.
    Coefficients quoted from memory of the paper; the paper reports model errors
    of 8 to 23 percent. The default dark sky (21.6) is a typical dark-site value
    (common practice), not a measurement of any site.
    """
    ill = np.clip(np.asarray(moon_illumination, dtype=float), 0.0, 1.0)
    phase = np.degrees(np.arccos(2.0 * ill - 1.0))
    rho = np.radians(np.asarray(separation_deg, dtype=float))
    z_moon = np.radians(90.0 - np.clip(np.asarray(moon_altitude_deg, dtype=float), 0.0, 90.0))
    z = np.radians(90.0 - np.clip(np.asarray(target_altitude_deg, dtype=float), 0.0, 90.0))

    def ks_airmass(zen):
        return 1.0 / np.sqrt(1.0 - 0.96 * np.sin(zen) ** 2)

    illuminance = 10.0 ** (-0.4 * (3.84 + 0.026 * phase + 4e-9 * phase**4))
    scatter = 10.0**5.36 * (1.06 + np.cos(rho) ** 2) + 10.0 ** (6.15 - np.degrees(rho) / 40.0)
    x = ks_airmass(z)
    b_moon = (
        scatter
        * illuminance
        * 10.0 ** (-0.4 * k_mag_per_airmass * ks_airmass(z_moon))
        * (1.0 - 10.0 ** (-0.4 * k_mag_per_airmass * x))
    )
    b_moon = np.where(np.asarray(moon_altitude_deg, dtype=float) > 0.0, b_moon, 0.0)
    b_dark = (
        _nanolambert_from_mag(dark_sky_v_mag_arcsec2)
        * x
        * 10.0 ** (-0.4 * k_mag_per_airmass * (x - 1.0))
    )
    return _mag_from_nanolambert(b_dark + b_moon)


def grid_sigma(
    instrument: Instrument, sky, v_mag: ArrayLike, exposures_s: ArrayLike
) -> NDArray[np.float64]:
    """Measurement noise of every target, exposure option and grid time [m/s].

    Parameters
    ----------
    instrument : Instrument
    sky : planner.sky.tracks.Sky
        The run's sky grid (airmass, Moon geometry).
    v_mag : array_like, shape (n_targets,)
        V magnitudes.
    exposures_s : array_like, shape (n_options,)
        Exposure options [s].

    Returns
    -------
    ndarray, shape (n_options, n_targets, n_times)
        :func:`rv_sigma` at each grid airmass (the project's axis order: option, target,
        time; see docs/architecture.md, conventions); the Moon-brightened sky of
        :func:`moon_sky_brightness` enters when the instrument gives an aperture.
    """
    v = np.asarray(v_mag, dtype=float)
    if v.shape != (sky.n_targets,):
        raise ScenarioError(
            f"grid_sigma: {v.size} magnitudes given for {sky.n_targets} targets; give one each."
        )
    exposures = np.asarray(exposures_s, dtype=float).ravel()
    sky_mag = None
    if instrument.aperture_arcsec2 is not None:
        sky_mag = moon_sky_brightness(
            sky.moon_illumination[None, :],
            sky.moon_separation_deg,
            sky.moon_altitude_deg[None, :],
            sky.altitude_deg,
            instrument.k_mag_per_airmass,
        )[None, :, :]
    return rv_sigma(
        instrument, v[None, :, None], exposures[:, None, None], sky.airmass[None, :, :], sky_mag
    )
