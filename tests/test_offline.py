"""nightbits never touches the network and stays quiet past the bundled tables."""

import subprocess
import sys
import textwrap
import warnings
from pathlib import Path

import pytest
from astropy.utils.exceptions import AstropyWarning
from erfa import ErfaWarning

from planner.sky.offline import configure, quiet_astropy

REPO = Path(__file__).resolve().parents[1]

# A fresh interpreter with every way out blocked: any socket connection, DNS look-up or
# urllib request raises and is recorded. Warnings are errors, as in the test suite.
_SCRIPT = textwrap.dedent(
    """
    import datetime as dt, socket, sys, urllib.request, warnings
    warnings.simplefilter("error")
    attempts = []
    def refuse(*args, **kwargs):
        attempts.append(args[:1])
        raise OSError("network disabled for this test")
    socket.socket.connect = refuse
    socket.socket.connect_ex = refuse
    socket.create_connection = refuse
    socket.getaddrinfo = refuse
    urllib.request.urlopen = refuse
    from planner.sky.site import Site, dark_windows, run_dates
    from planner.sky.tracks import compute_sky, pointing_at
    site = Site(28.3, -16.5, 2300.0, "Atlantic/Canary")
    for years in (1, 4):
        first = (dt.date.today() + dt.timedelta(days=365 * years)).isoformat()
        nights = dark_windows(site, run_dates(first, 2), "astronomical")
        sky = compute_sky(site, nights, [10.0, 250.0], [20.0, -10.0])
        p = pointing_at(site, [10.0], [20.0], sky.times_jd[:3])
        assert abs(p.altitude_deg - sky.altitude_deg[0, :3]).max() < 0.01
    print("attempts", len(attempts))
    """
)


def test_sky_a_year_ahead_with_the_network_blocked():
    # A year (and four years) ahead of today the bundled Earth-orientation predictions are out
    # of date; astropy's defaults would try to download and then refuse. Nothing may be tried.
    run = subprocess.run(
        [sys.executable, "-c", _SCRIPT], cwd=REPO, capture_output=True, text=True, timeout=120
    )
    assert run.returncode == 0, run.stderr[-2000:]
    assert run.stdout.strip().endswith("attempts 0")
    assert run.stderr == ""


def test_configure_sets_the_offline_switches():
    from astropy.utils import data, iers

    configure()
    assert iers.conf.auto_download is False
    assert iers.conf.auto_max_age is None
    assert data.conf.allow_internet is False


def test_quiet_silences_only_the_expected_warnings():
    # pytest turns warnings into errors here, so an unsilenced warning fails the test.
    with quiet_astropy():
        warnings.warn(
            "Tried to get polar motions for times after IERS data is valid. x",
            AstropyWarning,
            stacklevel=1,
        )
        warnings.warn(
            'ERFA function "utctai" yielded 1 of "dubious year (Note 3)"', ErfaWarning, stacklevel=1
        )
    with pytest.raises(AstropyWarning, match="something else"), quiet_astropy():
        warnings.warn("something else", AstropyWarning, stacklevel=1)
    with pytest.raises(ErfaWarning, match="other"), quiet_astropy():
        warnings.warn("ERFA function yielded other trouble", ErfaWarning, stacklevel=1)
    # Outside the block the expected warnings are not hidden either.
    with pytest.raises(AstropyWarning, match="polar motions"):
        warnings.warn(
            "Tried to get polar motions for times after IERS data is valid.",
            AstropyWarning,
            stacklevel=1,
        )
