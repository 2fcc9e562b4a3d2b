"""Benchmark the re-plan at the telescope against a cached `nightbits plan`, on the demo.

Each figure is the wall time of the command as an observer runs it (a new process: astropy,
solver start-up and the cached posteriors included), median over repeats, with the cached
`nightbits plan` measured in the same loop so the ratio holds under the same machine load.
Cases: a lost night, lost hours, `--now` at three times of the first night, and `--now` with
new velocities (an observing log of three stars' executed exposures, velocities from their
invented true orbits with seeded noise). Exact bits before and after are the plan files'
`total_bits`. Goal (issue 14): every `--now` case at most half the cached plan.

Usage::

    python tests/benchmarks/bench_replan.py              # the demo, 3 repeats
    python tests/benchmarks/bench_replan.py --repeats 1
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "scenarios" / "demo" / "demo.yaml"
TRUTH = ROOT / "scenarios" / "demo" / "truth"


def _run(args, cache: Path) -> float:
    env = dict(os.environ, NIGHTBITS_CACHE=str(cache), PYTHONPATH=str(ROOT))
    start = time.perf_counter()
    result = subprocess.run([sys.executable, "-m", "planner", *args], env=env,
                            capture_output=True, text=True)
    elapsed = time.perf_counter() - start
    if result.returncode != 0:
        raise SystemExit(f"nightbits {' '.join(args)} failed:\n{result.stderr}")
    return elapsed


def _log(plan: dict, now_utc: str, path: Path) -> None:
    """An observing log: three stars' exposures before now, with velocities from the truths."""
    import numpy as np

    sys.path.insert(0, str(ROOT))
    import astropy.units as u
    from astropy.coordinates import EarthLocation

    from planner.simulation.truth import read_truths
    from planner.sky.barycentric import bjd_tdb_from_utc
    from planner.workflow.outputs import format_utc, parse_utc

    truths = read_truths(TRUTH)
    site = plan["site"]
    location = EarthLocation.from_geodetic(site["longitude_deg"] * u.deg,
                                           site["latitude_deg"] * u.deg,
                                           site["elevation_m"] * u.m)
    past = [v for v in plan["visits"] if v["start_utc"] < now_utc and v["target"] in truths]
    chosen = sorted({v["target"] for v in past})[:3]
    rng = np.random.default_rng(14)
    lines = ["target,start_utc,mid_utc,rv,rv_err,instrument"]
    for v in past:
        if v["target"] not in chosen:
            continue
        truth = truths[v["target"]]
        mid = 0.5 * (parse_utc(v["start_utc"]) + parse_utc(v["end_utc"]))
        bjd = bjd_tdb_from_utc(location, v["ra_deg"], v["dec_deg"], [mid])
        err = 1.0
        rv = float(truth.velocity(bjd)[0] + rng.normal(0.0, np.hypot(err, truth.jitter_ms)))
        lines.append(f"{v['target']},{v['start_utc']},{format_utc(mid)},{rv:.3f},{err},"
                     f"{truth.instrument}")
    path.write_text("\n".join(lines) + "\n")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--cache", default=None, help="posterior cache (default: a new one)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp_text:
        tmp = Path(tmp_text)
        cache = Path(args.cache) if args.cache else tmp / "cache"
        base = tmp / "base"
        _run(["plan", str(DEMO), "--out", str(base)], cache)  # fills the cache
        plan = json.loads((base / "plan.json").read_text())
        first = plan["nights"][0]
        dark_a, dark_b = first["dark_start_utc"], first["dark_end_utc"]
        sys.path.insert(0, str(ROOT))
        from planner.workflow.outputs import format_utc, parse_utc

        a, b = parse_utc(dark_a), parse_utc(dark_b)
        times = [format_utc(a + f * (b - a)) for f in (0.2, 0.5, 0.8)]
        _log(plan, times[1], tmp / "log.csv")
        second = plan["nights"][1]
        s2 = parse_utc(second["dark_start_utc"])
        hours = f"{format_utc(s2 + 1 / 24)}/{format_utc(s2 + 4 / 24)}"
        cases = {
            "lost night 2": ["--lost", second["date"]],
            "lost 3 h of night 2": ["--lost", hours],
            "--now 20% into night 1": ["--now", times[0]],
            "--now 50% into night 1": ["--now", times[1]],
            "--now 80% into night 1": ["--now", times[2]],
            "--now 50% + log (3 stars)": ["--now", times[1], "--done", str(tmp / "log.csv"),
                                          "--rvs", str(tmp / "log.csv")],
        }
        plan_times, case_times, bits = [], {k: [] for k in cases}, {}
        for _ in range(args.repeats):
            plan_times.append(_run(["plan", str(DEMO), "--out", str(tmp / "p"), "--force"],
                                   cache))
            for name, extra in cases.items():
                out = tmp / "r"
                case_times[name].append(_run(["replan", "--plan", str(base / "plan.json"),
                                              "--out", str(out), "--force", *extra], cache))
                bits[name] = json.loads((out / "plan.json").read_text())["total_bits"]
        reference = statistics.median(plan_times)
        load = os.getloadavg()
        print(f"machine: {os.cpu_count()} cores, load average {load[0]:.1f} {load[1]:.1f} "
              f"{load[2]:.1f} at the end; {args.repeats} repeats, medians")
        print(f"cached plan: {reference:.1f} s (runs {', '.join(f'{t:.1f}' for t in plan_times)})"
              f"; {plan['total_bits']:.2f} exact bits")
        print(f"{'case':<28} {'time s':>7} {'ratio':>6} {'bits before':>11} {'bits after':>10}")
        for name in cases:
            t = statistics.median(case_times[name])
            print(f"{name:<28} {t:>7.1f} {t / reference:>6.2f} {plan['total_bits']:>11.2f} "
                  f"{bits[name]:>10.2f}")


if __name__ == "__main__":
    start = time.perf_counter()
    main()
    print(f"benchmark wall time {time.perf_counter() - start:.0f} s")
