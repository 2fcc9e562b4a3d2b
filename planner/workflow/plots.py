"""Optional plots (the ``plot`` extra): night altitude charts, information curves, comparisons.

matplotlib is imported inside each function, and figures are built with its object interface
(:class:`matplotlib.figure.Figure`), never through pyplot's global state, so no backend is
chosen or forced here and the rest of nightbits never needs matplotlib. Every figure is written
atomically (a temporary file in the same folder, then renamed); the format follows the file's
suffix (``.png``, ``.pdf``, ``.svg``). Time axes are clock times in the site's time zone.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from planner.clock import datetime64_from_jd
from planner.errors import PlanError
from planner.workflow.outputs import atomic_write_bytes

__all__ = [
    "airmass_altitude_deg",
    "check_plot_path",
    "comparison_figure",
    "curves_figure",
    "figure_bytes",
    "new_figure",
    "night_figure",
    "plot_comparison",
    "plot_curves",
    "plot_nights",
    "require_matplotlib",
]

#: Figure formats by file suffix.
PLOT_FORMATS = ("png", "pdf", "svg")


def new_figure(**kwargs):
    """Return a matplotlib ``Figure`` (object interface: no pyplot state, no backend forced).

    Raises
    ------
    PlanError
        If matplotlib is not installed.
    """
    try:
        from matplotlib.figure import Figure
    except ImportError:
        raise PlanError("plots need matplotlib; install it with `pip install "
                        "nightbits[plot]` or leave out --plot.") from None
    return Figure(**kwargs)


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


def figure_bytes(fig, path: str | Path) -> bytes:
    """Return the file content of ``fig`` drawn in the format of ``path``'s suffix."""
    buffer = io.BytesIO()
    fig.savefig(buffer, format=_format(Path(path)), dpi=110)
    return buffer.getvalue()


def _save(fig, path: str | Path) -> Path:
    path = Path(path)
    atomic_write_bytes(path, figure_bytes(fig, path))
    return path


def airmass_altitude_deg(airmass: float) -> float:
    """Altitude at which the Kasten and Young airmass equals ``airmass`` [deg].

    Notes
    -----
    Inverts :func:`planner.sky.airmass.airmass_kasten_young` (Kasten and Young 1989), which
    falls monotonically with altitude, by root finding.
    """
    from scipy.optimize import brentq

    from planner.sky.airmass import airmass_kasten_young

    if airmass <= 1.0:
        return 90.0
    return float(brentq(lambda alt: float(airmass_kasten_young(alt)) - airmass, 0.0, 90.0,
                        xtol=1e-6))


def _clock_axis(ax, zone, dates: bool = False) -> None:
    """Ticks at local clock times (``HH:MM``), with the dates too when ``dates``."""
    import matplotlib.dates as mdates

    locator = mdates.AutoDateLocator(tz=zone, minticks=4, maxticks=12)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator, tz=zone) if dates
                                 else mdates.DateFormatter("%H:%M", tz=zone))


def plot_nights(run, plan_file, path) -> Path:
    """Draw :func:`night_figure` to ``path`` (png, pdf or svg)."""
    return _save(night_figure(run, plan_file), path)


def night_figure(run, plan_file):
    """Altitude against local clock time for the stars scheduled each night, one panel a night.

    Only the stars with an exposure that night are drawn, each in its own colour with its
    exposures as thick segments; the dashed lines are the site's lowest altitude and the
    altitude of each airmass limit in force for those stars; grey: Moon up.

    Parameters
    ----------
    run : planner.workflow.pipeline.PreparedRun
    plan_file : planner.workflow.outputs.PlanFile

    Returns
    -------
    matplotlib.figure.Figure
    """
    from zoneinfo import ZoneInfo

    import matplotlib

    from planner.workflow.outputs import parse_utc

    zone = ZoneInfo(run.site.timezone)
    ids = [t.id for t in run.scenario.targets]
    limits = run.constraints.airmass_limits(len(ids))
    nights = run.nights
    most = max((len({v.target for v in plan_file.visits if v.night == n.date}) for n in nights),
               default=0)
    columns = max(1, -(-most // 16))  # legend columns: at most 16 names in one
    fig = new_figure(figsize=(10 + 1.6 * columns, max(3.4, 0.16 * min(most, 16) + 1.2)
                              * len(nights)), layout="constrained")
    axes = np.atleast_1d(fig.subplots(len(nights), 1, squeeze=False)[:, 0])
    colours = matplotlib.colormaps["tab20"]
    for k, (night, ax) in enumerate(zip(nights, axes, strict=True)):
        cols = np.flatnonzero(run.sky.night_index == k)
        times = run.sky.times_jd[cols]
        clock = datetime64_from_jd(times)
        visits = [v for v in plan_file.visits if v.night == night.date]
        scheduled = sorted({v.target for v in visits}, key=ids.index)
        for j, target in enumerate(scheduled):
            s = ids.index(target)
            colour = colours(j % 20)
            ax.plot(clock, run.sky.altitude_deg[s, cols], color=colour, lw=0.7, alpha=0.55,
                    label=target)
            for v in (v for v in visits if v.target == target):
                t = np.linspace(parse_utc(v.start_utc), parse_utc(v.end_utc), 8)
                alt = np.interp(t, times, run.sky.altitude_deg[s, cols])
                ax.plot(datetime64_from_jd(t), alt, color=colour, lw=4, solid_capstyle="butt")
        for a, b in night.moon_up:
            ax.axvspan(*datetime64_from_jd([a, b]), color="0.9", zorder=0)
        ax.axhline(run.site.min_altitude_deg, color="0.4", lw=0.7, ls=":",
                   label=f"lowest altitude {run.site.min_altitude_deg:g} deg")
        for limit in sorted({float(limits[ids.index(t)]) for t in scheduled}):
            alt = airmass_altitude_deg(limit)
            ax.axhline(alt, color="0.2", lw=0.8, ls="--",
                       label=f"airmass {limit:g} (altitude {alt:.1f} deg)")
        ax.set_xlim(clock[0], clock[-1])
        ax.set_ylim(0, 90)
        ax.set_ylabel("altitude [deg]")
        ax.set_title(f"night of {night.date}: {len(visits)} exposures of {len(scheduled)} stars"
                     " (grey: Moon up)", fontsize=9)
        _clock_axis(ax, zone)
        ax.legend(fontsize=6, loc="upper left", bbox_to_anchor=(1.005, 1.0), frameon=False,
                  ncol=columns, handlelength=1.2, columnspacing=0.8, labelspacing=0.25)
    axes[-1].set_xlabel(f"local time ({run.site.timezone})")
    fig.suptitle(f"{plan_file.run_name}: {plan_file.strategy} plan, thick lines are exposures",
                 fontsize=10)
    return fig


def plot_curves(run, path, targets=None) -> Path:
    """Draw :func:`curves_figure` to ``path`` (png, pdf or svg)."""
    return _save(curves_figure(run, targets), path)


def curves_figure(run, targets=None):
    """One-visit expected bits against local date and time, best exposure option, per target."""
    from zoneinfo import ZoneInfo

    import matplotlib

    zone = ZoneInfo(run.site.timezone)
    ids = [t.id for t in run.scenario.targets]
    chosen = list(targets or ids)
    fig = new_figure(figsize=(11, 4.2), layout="constrained")
    ax = fig.subplots()
    colours = matplotlib.colormaps["tab20"]
    for j, name in enumerate(chosen):
        s = ids.index(name)
        best = run.bits[:, s].max(axis=0)
        best = np.where(run.observable[:, s].any(axis=0), best, np.nan)
        for k in range(len(run.nights)):
            cols = np.flatnonzero(run.sky.night_index == k)
            ax.plot(datetime64_from_jd(run.sky.times_jd[cols]), best[cols], lw=0.9,
                    color=colours(j % 20), label=name if k == 0 else None)
    _clock_axis(ax, zone, dates=True)
    ax.set_xlabel(f"local date and time ({run.site.timezone})")
    ax.set_ylabel("expected bits of one velocity")
    ax.set_title("best one-visit information per star (breaks: not observable)", fontsize=10)
    if len(chosen) <= 20:
        ax.legend(fontsize=7, ncol=1 + len(chosen) // 10, loc="upper left",
                  bbox_to_anchor=(1.005, 1.0), frameon=False)
    return fig


def plot_comparison(comparison, path) -> Path:
    """Draw :func:`comparison_figure` to ``path`` (png, pdf or svg)."""
    return _save(comparison_figure(comparison), path)


def comparison_figure(comparison):
    """Bar chart of the strategies' exact joint scores with their Monte Carlo error bars.

    Each value is written above the top of its error bar, so labels and bars never overlap.
    """
    rows = comparison.comparison.rows
    names = [r.strategy for r in rows]
    bits = np.array([r.total_bits for r in rows])
    err = np.array([r.stderr for r in rows])
    fig = new_figure(figsize=(5.5, 4.0), layout="constrained")
    ax = fig.subplots()
    x = np.arange(len(names))
    ax.bar(x, bits, width=0.6, yerr=err, capsize=4,
           color=["0.65", "0.45", "0.2"][: len(names)], error_kw={"lw": 1.0})
    for xi, value, e in zip(x, bits, err, strict=True):
        ax.annotate(f"{value:.1f} \u00b1 {e:.1f}", (xi, value + e), xytext=(0, 4),
                    textcoords="offset points", ha="center", va="bottom", fontsize=9)
    ax.set_xticks(x, [f"{n}\n{r.visits} exposures" for n, r in zip(names, rows, strict=True)])
    top = float(np.max(bits + err)) if len(bits) else 1.0
    ax.set_ylim(0, top * 1.18 if top > 0 else 1.0)
    ax.set_ylabel("exact expected information [bits]")
    ax.set_title("strategies on the same exact score", fontsize=10)
    ax.grid(axis="y", color="0.9", lw=0.6)
    ax.set_axisbelow(True)
    return fig
