"""Optional plots (the ``plot`` extra): night altitude charts, information curves, comparisons.

matplotlib is imported inside each function, with the non-interactive Agg backend, so the rest
of nightbits never needs it. Every figure is written atomically (a temporary file in the same
folder, then renamed); the format follows the file's suffix (``.png``, ``.pdf``, ``.svg``).
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from planner.errors import PlanError
from planner.workflow.outputs import atomic_write_bytes

__all__ = [
    "check_plot_path",
    "plot_comparison",
    "plot_curves",
    "plot_nights",
    "require_matplotlib",
]

#: Figure formats by file suffix.
PLOT_FORMATS = ("png", "pdf", "svg")


def _pyplot():
    try:
        import matplotlib
    except ImportError:
        raise PlanError("plots need matplotlib; install it with `pip install "
                        "nightbits[plot]` or leave out --plot.") from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _format(path: Path) -> str:
    suffix = path.suffix.lower().lstrip(".") or "png"
    if suffix not in PLOT_FORMATS:
        raise PlanError(f"--plot {path}: use a .png, .pdf or .svg file name.")
    return suffix


def require_matplotlib(option: str = "--plot") -> None:
    """Fail at once, before any work, if matplotlib cannot be imported."""
    import importlib.util

    if importlib.util.find_spec("matplotlib") is None:
        raise PlanError("plots need matplotlib; install it with `pip install "
                        f"nightbits[plot]` or leave out {option}.")


def check_plot_path(path: str | Path, option: str = "--plot") -> None:
    """Fail at once, before any work, if a figure could not be written to ``path``.

    Raises
    ------
    PlanError
        If matplotlib is missing, the suffix is not .png, .pdf or .svg, ``path`` is a folder,
        or its folder does not exist.
    """
    path = Path(path)
    require_matplotlib(option)
    _format(path)
    if path.is_dir():
        raise PlanError(f"{option} {path}: that is a folder; give a file name such as "
                        f"{path / 'plot.png'}.")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise PlanError(f"{option} {path}: the folder {parent} does not exist; create it or "
                        "choose another file.")


def _save(fig, path: str | Path) -> Path:
    path = Path(path)
    suffix = _format(path)
    buffer = io.BytesIO()
    try:
        fig.savefig(buffer, format=suffix, dpi=110)
        atomic_write_bytes(path, buffer.getvalue())
    finally:
        import matplotlib.pyplot as plt

        plt.close(fig)
    return path


def _hours(times_jd, zone, ref_jd):
    """Local clock hours after the local midnight before ``ref_jd`` (may pass 24)."""
    import datetime as dt

    from planner.workflow.outputs import format_utc

    ref = dt.datetime.fromisoformat(format_utc(ref_jd).replace("Z", "+00:00")).astimezone(zone)
    midnight_jd = ref_jd - (ref.hour + ref.minute / 60.0 + ref.second / 3600.0) / 24.0
    return (np.asarray(times_jd) - midnight_jd) * 24.0


def plot_nights(run, plan_file, path) -> Path:
    """Altitude against local time for the scheduled targets, one panel per night.

    Parameters
    ----------
    run : planner.workflow.pipeline.PreparedRun
    plan_file : planner.workflow.outputs.PlanFile
    path : str or pathlib.Path
        Output image.
    """
    from zoneinfo import ZoneInfo

    from planner.workflow.outputs import parse_utc

    plt = _pyplot()
    zone = ZoneInfo(run.site.timezone)
    ids = [t.id for t in run.scenario.targets]
    nights = run.nights
    fig, axes = plt.subplots(len(nights), 1, figsize=(10, 2.6 * len(nights)), squeeze=False)
    colours = plt.get_cmap("tab20")
    for k, (night, ax) in enumerate(zip(nights, axes[:, 0], strict=True)):
        cols = np.flatnonzero(run.sky.night_index == k)
        hours = _hours(run.sky.times_jd[cols], zone, night.sunset_jd)
        visits = [v for v in plan_file.visits if v.night == night.date]
        for j, target in enumerate(sorted({v.target for v in visits})):
            s = ids.index(target)
            colour = colours(j % 20)
            ax.plot(hours, run.sky.altitude_deg[s, cols], color=colour, lw=0.8)
            for v in (v for v in visits if v.target == target):
                t = np.linspace(parse_utc(v.start_utc), parse_utc(v.end_utc), 8)
                alt = np.interp(t, run.sky.times_jd[cols], run.sky.altitude_deg[s, cols])
                ax.plot(_hours(t, zone, night.sunset_jd), alt, color=colour, lw=4,
                        solid_capstyle="butt")
            ax.text(hours[np.argmax(run.sky.altitude_deg[s, cols])],
                    run.sky.altitude_deg[s, cols].max() + 1, target, fontsize=6, color=colour,
                    ha="center")
        for a, b in night.moon_up:
            ax.axvspan(*_hours([a, b], zone, night.sunset_jd), color="0.9", zorder=0)
        ax.axhline(run.site.min_altitude_deg, color="0.5", lw=0.6, ls="--")
        ax.set_xlim(hours[0], hours[-1])
        ax.set_ylim(0, 90)
        ax.set_ylabel("altitude [deg]")
        ax.set_title(f"night of {night.date} (shaded: Moon up)", fontsize=9)
        ticks = np.arange(np.ceil(hours[0]), np.floor(hours[-1]) + 1)
        ax.set_xticks(ticks, [f"{int(h) % 24:02d}" for h in ticks])
    axes[-1, 0].set_xlabel(f"local time ({run.site.timezone}) [h]")
    fig.suptitle(f"{plan_file.run_name}: {plan_file.strategy} plan, thick lines are exposures",
                 fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def plot_curves(run, path, targets=None) -> Path:
    """One-visit expected bits against local time, best exposure option, per target."""
    from zoneinfo import ZoneInfo

    plt = _pyplot()
    zone = ZoneInfo(run.site.timezone)
    ids = [t.id for t in run.scenario.targets]
    chosen = list(targets or ids)
    fig, ax = plt.subplots(figsize=(10, 4))
    ref = run.nights[0].sunset_jd
    colours = plt.get_cmap("tab20")
    for j, name in enumerate(chosen):
        s = ids.index(name)
        best = run.bits[:, s].max(axis=0)
        best = np.where(run.observable[:, s].any(axis=0), best, np.nan)
        for k in range(len(run.nights)):
            cols = np.flatnonzero(run.sky.night_index == k)
            ax.plot(_hours(run.sky.times_jd[cols], zone, ref), best[cols], lw=0.9,
                    color=colours(j % 20), label=name if k == 0 else None)
    ax.set_xlabel(f"hours from local midnight before the first night ({run.site.timezone})")
    ax.set_ylabel("expected bits of one velocity")
    if len(chosen) <= 12:
        ax.legend(fontsize=7, ncol=2)
    fig.tight_layout()
    return _save(fig, path)


def plot_comparison(comparison, path) -> Path:
    """Bar chart of the strategies' exact joint scores, with the solver bound if any."""
    plt = _pyplot()
    rows = comparison.comparison.rows
    names = [r.strategy for r in rows]
    bits = [r.total_bits for r in rows]
    fig, ax = plt.subplots(figsize=(5, 3.5))
    bars = ax.bar(names, bits, yerr=[r.stderr for r in rows], capsize=3,
                  color=["0.6", "0.4", "0.15"][: len(names)])
    for bar, value in zip(bars, bits, strict=True):
        ax.text(bar.get_x() + bar.get_width() / 2, value, f"{value:.1f}", ha="center",
                va="bottom", fontsize=8)
    ax.set_ylabel("exact expected information [bits]")
    ax.set_title("strategies on the same exact score", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)
