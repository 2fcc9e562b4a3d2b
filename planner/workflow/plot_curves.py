"""Plot a star's information curve with its predicted velocity band (needs matplotlib)."""

from __future__ import annotations

import numpy as np

from planner.information.entropy import InformationError

__all__ = ["barycentric_shift_days", "plot_information_curve"]


def barycentric_shift_days(curve):
    """Median offset from the curve's grid times to barycentric times [d].

    Parameters
    ----------
    curve : planner.information.curves.InformationCurve
        A curve; its `prediction_bjd` is mid-exposure (snapped to the grid within half a step).

    Returns
    -------
    float
        Median of ``prediction_bjd - times_jd - exposure / 2`` over observable starts (within a
        minute of the barycentric correction), 0 if nothing is observable.
    """
    off = curve.prediction_bjd - curve.times_jd[None, :] - curve.exposures_s[:, None] / 172800.0
    finite = np.isfinite(off)
    return float(np.median(off[finite])) if np.any(finite) else 0.0


def plot_information_curve(curve, predictor, dark_windows=(), *, option=None, n_band=600,
                           figure=None):
    """Draw one star's bits over the run above its predicted velocity band.

    Parameters
    ----------
    curve : planner.information.curves.InformationCurve
        The star's curve.
    predictor : planner.information.predict.Predictor
        The same star's samples, for the velocity band.
    dark_windows : sequence of (float, float), optional
        (start, end) of each night's dark time, in the curve's `times_jd` scale [d]; shaded.
    option : int, optional
        Exposure option to draw; default all, one line each.
    n_band : int, optional
        Times at which the velocity band is drawn across the run.
    figure : matplotlib.figure.Figure, optional
        Figure to draw into; default a new one.

    Returns
    -------
    figure : matplotlib.figure.Figure
        Two panels sharing the time axis: bits per exposure option (top) and the median with
        68 % and 95 % bands of the predicted velocity (bottom), dark time shaded in both.

    Notes
    -----
    The velocity band is drawn at each grid time converted to BJD_TDB by the curve's own
    offset (:func:`barycentric_shift_days`), so the two panels share one time axis; the bits are
    drawn at the exposure starts. A time is informative where the band is wide compared with
    the exposure's noise: that is where one velocity best separates the samples.
    """
    try:
        import matplotlib.figure as mfigure
    except ImportError:  # pragma: no cover - depends on the optional extra
        raise InformationError(
            "plotting needs matplotlib; install the plot extra (pip install nightbits[plot])."
        ) from None
    times = np.asarray(curve.times_jd)
    opts = range(curve.bits.shape[0]) if option is None else [int(option)]
    fig = figure if figure is not None else mfigure.Figure(figsize=(9, 5.5))
    ax_bits, ax_v = fig.subplots(2, 1, sharex=True)
    for ax in (ax_bits, ax_v):
        for lo, hi in dark_windows:
            ax.axvspan(lo, hi, color="0.9", zorder=0, lw=0)
    for o in opts:
        ax_bits.plot(times, curve.bits[o], lw=1.2, label=f"{curve.exposures_s[o]:.0f} s")
    ax_bits.set_ylabel("expected information [bits]")
    ax_bits.legend(loc="upper right", fontsize="small", title="exposure")
    ax_bits.set_title(f"{curve.target}: one more velocity")
    shift = barycentric_shift_days(curve)
    grid = np.linspace(times.min(), times.max(), int(n_band))
    v = predictor.velocities(grid + shift)
    q = np.percentile(v, [2.5, 16, 50, 84, 97.5], axis=0)
    ax_v.fill_between(grid, q[0], q[4], color="C0", alpha=0.2, lw=0, label="95 %")
    ax_v.fill_between(grid, q[1], q[3], color="C0", alpha=0.4, lw=0, label="68 %")
    ax_v.plot(grid, q[2], color="C0", lw=1.0, label="median")
    ax_v.set_ylabel("predicted velocity [m/s]")
    ax_v.set_xlabel("time [JD]")
    ax_v.legend(loc="upper right", fontsize="small")
    return fig
