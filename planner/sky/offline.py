"""Offline, quiet configuration of astropy for every nightbits sky computation.

nightbits never downloads anything. astropy's defaults would try to fetch fresh
Earth-orientation (IERS) tables and, without a network, refuse to transform times
past the age limit of the bundled predictions. This module switches both off once,
inside nightbits, and gives a context manager that silences exactly the warnings
expected for dates past the bundled tables.

Settings applied by :func:`configure` (idempotent). Nothing is configured on import: the
command line calls :func:`configure` once at start, and every astropy computation in nightbits
runs inside :func:`quiet_astropy`, which calls it first, so library use is offline too:

* ``astropy.utils.iers.conf.auto_download = False``: use only the tables shipped
  with the installed packages;
* ``astropy.utils.iers.conf.auto_max_age = None``: accept those tables however old
  they are (also accepts an expired leap-second table);
* ``astropy.utils.data.conf.allow_internet = False``: any remaining attempt to
  fetch a remote file fails at once instead of waiting on a network.

Warnings silenced inside :func:`quiet_astropy` (and nowhere else):

* ``AstropyWarning`` starting "Tried to get polar motions for times after IERS
  data is valid": polar motion falls back to the 50-year mean, an error of about
  0.3 arcsec in altitude;
* ``ErfaWarning`` containing "dubious year": UTC past the end of the bundled
  leap-second table is treated as if no further leap second occurs, an error of at
  most one second per unannounced leap second.

See ``docs/sky.md`` for the resulting accuracy statement.
"""

from __future__ import annotations

import contextlib
import warnings
from collections.abc import Iterator

__all__ = ["configure", "quiet_astropy"]

_POLAR_MOTION_MESSAGE = r"Tried to get polar motions for times after IERS data is valid"
_DUBIOUS_YEAR_MESSAGE = r".*dubious year"


def configure() -> None:
    """Switch astropy to offline use of its bundled tables (idempotent).

    Notes
    -----
    Changes three process-wide astropy settings (listed in the module docstring);
    they only forbid downloads and lift the table age limit, so they cannot make
    another library's results worse than the bundled tables allow.
    """
    from astropy.utils import data, iers

    iers.conf.auto_download = False
    iers.conf.auto_max_age = None
    data.conf.allow_internet = False


@contextlib.contextmanager
def quiet_astropy() -> Iterator[None]:
    """Run a block offline, with the two warnings expected past the bundled tables silenced.

    Calls :func:`configure` first. Any other warning still reaches the caller. Like
    :class:`warnings.catch_warnings` this is not thread-safe; nightbits runs sky computations
    in one thread.
    """
    from astropy.utils.exceptions import AstropyWarning
    from erfa import ErfaWarning

    configure()
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=_POLAR_MOTION_MESSAGE, category=AstropyWarning)
        warnings.filterwarnings("ignore", message=_DUBIOUS_YEAR_MESSAGE, category=ErfaWarning)
        yield

