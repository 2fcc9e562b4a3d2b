"""The velocity noise model: photon-noise law, extinction, floor, Moon-brightened sky."""

import numpy as np
import pytest

from planner.errors import ScenarioError
from planner.sky.exposure import (
    DEFAULT_EXPOSURES_S,
    Instrument,
    grid_sigma,
    moon_sky_brightness,
    photon_sigma,
    rv_sigma,
)

INST = Instrument(
    sigma_ref_ms=1.2, v_ref_mag=8.0, t_ref_s=900.0, floor_ms=0.4, k_mag_per_airmass=0.15
)


def test_photon_noise_law():
    # Bouchy, Pepe and Queloz (2001): photon-limited sigma ~ 1/sqrt(photons). Doubling the
    # exposure divides it by sqrt(2); five magnitudes fainter (100 times fewer photons)
    # multiplies it by 10; the reference point returns the reference precision.
    v, t = np.array([6.0, 9.5, 12.0]), 600.0
    np.testing.assert_allclose(
        photon_sigma(INST, v, 2 * t) * np.sqrt(2), photon_sigma(INST, v, t), rtol=1e-12
    )
    np.testing.assert_allclose(
        photon_sigma(INST, v + 5, t), 10 * photon_sigma(INST, v, t), rtol=1e-12
    )
    assert photon_sigma(INST, 8.0, 900.0, 1.0) == pytest.approx(1.2, rel=1e-12)


def test_extinction_dims_by_k_per_airmass():
    # k X magnitudes of extinction: at airmass 2 with k = 0.15 the star is 0.15 mag fainter
    # than at the reference airmass 1, so sigma grows by 10**(0.2 * 0.15).
    ratio = photon_sigma(INST, 9.0, 600.0, 2.0) / photon_sigma(INST, 9.0, 600.0, 1.0)
    assert ratio == pytest.approx(10 ** (0.2 * 0.15), rel=1e-12)


def test_floor_in_quadrature_and_approached_for_bright_stars():
    s = rv_sigma(INST, np.array([-1.0, 8.0]), 900.0, 1.0)
    assert s[0] == pytest.approx(INST.floor_ms, rel=0.02)
    assert s[1] == pytest.approx(np.hypot(1.2, 0.4), rel=1e-12)
    assert np.all(s >= INST.floor_ms)
    grid = rv_sigma(
        INST, np.array([7.0, 10.0])[:, None], np.array(DEFAULT_EXPOSURES_S)[None, :], 1.3
    )
    assert grid.shape == (2, len(DEFAULT_EXPOSURES_S))


def test_moon_sky_brightness_behaves_like_the_model():
    # Krisciunas and Schaefer (1991) model (coefficients from memory): without the Moon above
    # the horizon the zenith sky is the dark-sky value exactly; the Moon brightens the sky
    # more when fuller and when closer (separations below 90 deg).
    assert moon_sky_brightness(1.0, 30.0, -5.0, 90.0, 0.15, 21.6) == pytest.approx(21.6, abs=1e-9)
    near_to_far = moon_sky_brightness(0.9, np.array([10.0, 30.0, 60.0, 90.0]), 40.0, 60.0)
    assert np.all(np.diff(near_to_far) > 0)
    phases = moon_sky_brightness(np.array([0.1, 0.5, 1.0]), 45.0, 40.0, 60.0)
    assert np.all(np.diff(phases) < 0)
    # Common practice (from memory): a full Moon 30 deg away makes a sky of roughly
    # 17 to 19 V mag/arcsec^2, several magnitudes above the dark sky.
    assert 16.5 < moon_sky_brightness(1.0, 30.0, 45.0, 60.0) < 19.5


def test_sky_term_matters_for_faint_stars_only():
    inst = Instrument(aperture_arcsec2=1.0)
    bright_sky = moon_sky_brightness(1.0, 20.0, 50.0, 50.0)
    faint = rv_sigma(inst, 15.0, 1800.0, 1.3, bright_sky) / rv_sigma(inst, 15.0, 1800.0, 1.3)
    bright = rv_sigma(inst, 7.0, 600.0, 1.3, bright_sky) / rv_sigma(inst, 7.0, 600.0, 1.3)
    assert faint > 1.05 and bright == pytest.approx(1.0, abs=1e-3)
    # Closed form: with B/S = 1 (sky as bright as the star in the aperture) photon noise grows
    # by sqrt(2).
    inst0 = Instrument(aperture_arcsec2=1.0, floor_ms=0.0)
    v, x = 12.0, 1.0
    sky_equal = v + inst0.k_mag_per_airmass * x
    ratio = rv_sigma(inst0, v, 900.0, x, sky_equal) / rv_sigma(inst0, v, 900.0, x)
    assert ratio == pytest.approx(np.sqrt(2.0), rel=1e-12)


def test_grid_sigma_per_target_option_and_time():
    # Built from the same closed forms: the grid equals rv_sigma at each grid airmass, and the
    # Moon-sky term only ever adds noise.
    from planner.sky.site import Site, dark_windows
    from planner.sky.tracks import compute_sky

    site = Site(-29.3, -70.7, 2400.0, "America/Santiago")  # invented
    sky = compute_sky(
        site, dark_windows(site, ["2027-09-16"], "nautical"), [20.0, 300.0], [-30.0, 5.0]
    )
    v = np.array([8.0, 13.0])
    s = grid_sigma(INST, sky, v, DEFAULT_EXPOSURES_S)
    # Axis order (option, target, time), as everywhere (docs/architecture.md, conventions).
    assert s.shape == (len(DEFAULT_EXPOSURES_S), 2, sky.times_jd.size)
    np.testing.assert_allclose(
        s[0, 1], rv_sigma(INST, 13.0, DEFAULT_EXPOSURES_S[0], sky.airmass[1])
    )
    np.testing.assert_allclose(
        s[-1, 0], rv_sigma(INST, 8.0, DEFAULT_EXPOSURES_S[-1], sky.airmass[0])
    )
    with_sky = grid_sigma(Instrument(aperture_arcsec2=1.0), sky, v, DEFAULT_EXPOSURES_S)
    assert np.all(with_sky >= grid_sigma(Instrument(), sky, v, DEFAULT_EXPOSURES_S))
    with pytest.raises(ScenarioError, match="one each"):
        grid_sigma(INST, sky, [8.0], DEFAULT_EXPOSURES_S)


def test_bad_instrument_and_exposure():
    with pytest.raises(ScenarioError, match="sigma_ref_ms"):
        Instrument(sigma_ref_ms=0.0)
    with pytest.raises(ScenarioError, match="floor_ms"):
        Instrument(floor_ms=-1.0)
    with pytest.raises(ScenarioError, match="exposure_s"):
        rv_sigma(INST, 8.0, 0.0)
