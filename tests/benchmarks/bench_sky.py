"""Benchmark: visibility of 200 targets over 10 nights on a 2-minute grid, Moon included.

Run as ``python tests/benchmarks/bench_sky.py [--quick]``. Prints medians over repeats of
(1) the nights (twilight, Moon summary; this step evaluates astropy at the hourly
nodes, which the sky grid then reuses), (2) the sky grid, (3) the observable-start mask
for one exposure, and, for scale, astropy's full AltAz transform of the same targets over
one night of the grid (extrapolated to all nights), plus the worst altitude difference
between the two on that night. Threads are limited to one core.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

from planner.sky.ephemeris import _cached_nodes  # noqa: E402
from planner.sky.observability import Constraints, observable_starts  # noqa: E402
from planner.sky.offline import quiet_astropy  # noqa: E402
from planner.sky.site import Site, dark_windows, run_dates  # noqa: E402
from planner.sky.tracks import compute_sky  # noqa: E402

SITE = Site(-29.3, -70.7, 2400.0, "America/Santiago", min_altitude_deg=20.0)  # invented


def _timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats")
    args = parser.parse_args()
    repeats = 2 if args.quick else 5
    gen = np.random.default_rng(2027)
    ra, dec = gen.uniform(0, 360, 200), gen.uniform(-85, 50, 200)
    dates = run_dates("2027-10-04", 10)
    t_cold, _ = _timed(lambda: dark_windows(SITE, dates[:1], "nautical"))  # loads the tables

    rows = {"nights": [], "sky": [], "mask": []}
    for _ in range(repeats):
        _cached_nodes.cache_clear()  # every repeat pays for the astropy nodes once, as a run does
        t_n, nights = _timed(lambda: dark_windows(SITE, dates, "nautical"))
        t_s, sky = _timed(lambda: compute_sky(SITE, nights, ra, dec, step_s=120.0))  # noqa: B023
        t_m, _ = _timed(lambda: observable_starts(sky, Constraints(), 900.0))  # noqa: B023
        rows["nights"].append(t_n)
        rows["sky"].append(t_s)
        rows["mask"].append(t_m)
    med = {k: statistics.median(v) for k, v in rows.items()}
    total = sum(med.values())
    n_t = sky.times_jd.size
    print(f"grid: {sky.n_targets} targets x {n_t} times ({len(nights)} nights, 120 s step)")
    for k, v in med.items():
        print(f"  {k:<7} median {v:6.3f} s over {repeats} repeats")
    print(f"  total   median {total:6.3f} s  (goal < 3 s)")
    print(f"  first call of a process (loads ephemeris and IERS tables): {t_cold:.2f} s, once")

    import astropy.units as u
    from astropy.coordinates import AltAz, SkyCoord
    from astropy.time import Time

    first = sky.night_index == 0
    with quiet_astropy():
        t = Time(sky.times_jd[first], format="jd", scale="utc")
        stars = SkyCoord(ra[:, None] * u.deg, dec[:, None] * u.deg)
        frame = AltAz(obstime=t[None, :], location=SITE.location(), pressure=0 * u.hPa)
        t_full, horiz = _timed(lambda: stars.transform_to(frame))
    per_night = t_full * len(nights)
    worst = np.max(np.abs(horiz.alt.deg - sky.altitude_deg[:, first])) * 3600
    print(f"astropy full AltAz, one night: {t_full:.3f} s, x{len(nights)} = {per_night:.2f} s")
    print(f"  speed-up of the grid path (sky only): {per_night / med['sky']:.1f}x")
    print(f"  worst altitude difference on that night: {worst:.2f} arcsec")


if __name__ == "__main__":
    main()
