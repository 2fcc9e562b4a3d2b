"""The ``nightbits simulate`` command: execute the strategies against known true orbits.

Prints a table of expected and realised bits and volume shrink per strategy with their spread
over seeds, the cost for each strategy to reach the cadence plan's realised information, and a
per-star table; writes ``DIR/simulate.json`` atomically; optional plots. Heavy imports happen
inside the functions so ``nightbits --help`` stays instant.
"""

from __future__ import annotations

import sys
from pathlib import Path

__all__ = ["STRATEGY_CHOICES", "add_simulate", "render_tables", "simulate_document"]

#: ``planner.simulation.experiment.STRATEGIES``, repeated here so ``--help`` needs no heavy import
#: (a test keeps the two equal).
STRATEGY_CHOICES = ("joint", "greedy", "cadence", "adaptive")

CAUTION = ("A simulation on invented stars: it tests the method, not a night's safety. Every "
           "schedule defers to the observatory's own rules on weather, wind, humidity and dome "
           "operation.")


def add_simulate(sub) -> None:
    """Register the ``simulate`` subcommand on an argparse subparsers object."""
    from planner.cli.support import add_common_options, add_output_options, add_strict

    p = sub.add_parser(
        "simulate", help="execute the strategies against true orbits and measure realised bits",
        description="Plan the run with each strategy, execute the plans against the stars' "
                    "true orbits with the planner's noise model, fold the synthetic velocities "
                    "into the posteriors and measure what was really learnt, over several "
                    "seeds. " + CAUTION)
    add_common_options(p)
    p.add_argument("--strategies", nargs="+", choices=STRATEGY_CHOICES,
                   default=list(STRATEGY_CHOICES), metavar="NAME",
                   help=f"strategies to run (default: {' '.join(STRATEGY_CHOICES)})")
    p.add_argument("--seeds", type=int, default=3, metavar="N",
                   help="number of seeds of noise and weather (default: %(default)s)")
    p.add_argument("--first-seed", type=int, default=0, metavar="S",
                   help="first seed; seeds are S .. S+N-1 (default: %(default)s)")
    p.add_argument("--truth", metavar="DIR", default=None,
                   help="folder of true-orbit files (default: 'truth' beside the scenario)")
    p.add_argument("--night-loss", type=float, default=0.0, metavar="P",
                   help="probability that a night is lost to the weather (default: 0)")
    p.add_argument("--hour-loss", type=float, default=0.0, metavar="P",
                   help="probability that a clock hour of a night is lost (default: 0)")
    p.add_argument("--refit", action="store_true",
                   help="refit a star whose importance weights degenerate (slow) instead of "
                        "measuring on the old samples")
    p.add_argument("--time-limit", type=float, default=None, metavar="S",
                   help="solver limit of every joint plan and re-plan (default: the scenario's)")
    add_output_options(p, out_default="nightbits-simulate",
                       out_help="folder for simulate.json (default: %(default)s)",
                       written="DIR/simulate.json",
                       plot_help="draw realised against expected bits to FILE")
    p.add_argument("--plot-star", metavar="ID",
                   help="draw this star's period and semi-amplitude before and after (first "
                        "seed, each strategy) to DIR/posterior_<ID>.png")
    add_strict(p)
    p.set_defaults(func=run_simulate)


def _check(args, scenario):
    from planner.errors import PlanError

    if args.seeds < 1:
        raise PlanError(f"--seeds {args.seeds}: give at least 1 seed.")
    for flag, value in (("--night-loss", args.night_loss), ("--hour-loss", args.hour_loss)):
        if not 0.0 <= value <= 1.0:
            raise PlanError(f"{flag} {value}: give a probability between 0 and 1.")
    if args.plot_star is not None:
        scenario.target(args.plot_star)
    from planner.workflow.outputs import check_out_folder

    check_out_folder(args.out, args.force, ("simulate.json",))
    from planner.workflow.plots import check_plot_path, require_matplotlib

    if args.plot:
        check_plot_path(args.plot)
    if args.plot_star:
        require_matplotlib("--plot-star")
    return Path(args.out) / "simulate.json"


def run_simulate(args) -> int:
    """Run the ``simulate`` subcommand (called by :func:`planner.cli.main.main`)."""
    from planner.cli.support import EXIT_OK, ProgressBar, fit_with_progress, open_session
    from planner.simulation.experiment import build_setup, run_experiment
    from planner.simulation.truth import read_truths
    from planner.simulation.weather import Weather
    from planner.workflow.accounting import left_out
    from planner.workflow.outputs import atomic_write_text
    from planner.workflow.report import left_out_lines

    pipeline, scenario, cache = open_session(args)
    out = _check(args, scenario)
    truths = read_truths(args.truth or scenario.path.parent / "truth")
    posteriors = fit_with_progress(args, pipeline, scenario, cache)
    setup = build_setup(scenario, posteriors, truths, time_limit_s=args.time_limit,
                        strict=args.strict)
    seeds = tuple(range(args.first_seed, args.first_seed + args.seeds))
    weather = Weather(night_loss=args.night_loss, hour_loss=args.hour_loss)
    experiment = run_experiment(setup, strategies=args.strategies, seeds=seeds, weather=weather,
                                refit=args.refit, progress=ProgressBar(sys.stderr, "simulating"))
    excluded = left_out(setup.prepared)
    doc = simulate_document(scenario, experiment, weather, args.refit, excluded)
    sys.stdout.write("\n".join(left_out_lines(excluded) + [""]) if excluded else "")
    sys.stdout.write(render_tables(experiment))
    out.parent.mkdir(parents=True, exist_ok=True)
    import json

    atomic_write_text(out, json.dumps(doc, indent=2) + "\n")
    sys.stderr.write(f"wrote {out}\n")
    if args.plot:
        _plot_bits(experiment, args.plot)
        sys.stderr.write(f"wrote {args.plot}\n")
    if args.plot_star:
        path = out.parent / f"posterior_{args.plot_star}.png"
        _plot_star(setup, experiment, args.plot_star, path)
        sys.stderr.write(f"wrote {path}\n")
    return EXIT_OK


def _saving(summary, cadence):
    """Percent fewer exposures than cadence's whole run to reach cadence's realised bits."""
    if cadence is None or summary.reach_exposures is None or cadence.exposures <= 0:
        return None
    return 100.0 * (1.0 - summary.reach_exposures / cadence.exposures)


def simulate_document(scenario, experiment, weather, refit, excluded=()):
    """Return the JSON document of ``simulate.json`` (plain dicts and lists).

    Parameters
    ----------
    scenario : planner.workflow.scenario.Scenario
        The run.
    experiment : planner.simulation.experiment.Experiment
        Its result.
    weather : planner.simulation.weather.Weather
        The loss probabilities used.
    refit : bool
        Whether degenerate weights were refitted.
    excluded : sequence of planner.workflow.accounting.LeftOut
        Targets left out of the run as never observable (key ``left_out``).

    Returns
    -------
    dict
        Per strategy at least ``strategy``, ``expected_bits``, ``realised_bits_mean``,
        ``realised_bits_std``, ``exposures``; plus shrink, hours, cost to reach, per star and
        per seed.
    """
    cadence = next((s for s in experiment.summaries if s.strategy == "cadence"), None)
    strategies = []
    for s in experiment.summaries:
        runs = [r for r in experiment.runs if r.strategy == s.strategy]
        strategies.append({
            "strategy": s.strategy, "expected_bits": s.expected_bits,
            "realised_bits_mean": s.realised_bits_mean, "realised_bits_std": s.realised_bits_std,
            "shrink_bits_mean": s.shrink_bits_mean, "shrink_bits_std": s.shrink_bits_std,
            "exposures": s.exposures, "hours": s.hours,
            "reach_cadence_exposures": s.reach_exposures, "reach_cadence_hours": s.reach_hours,
            "reach_cadence_fraction": s.reach_fraction,
            "exposure_saving_vs_cadence_percent": _saving(s, cadence),
            "per_star": [{"target": t, "realised_bits": b, "shrink_bits": v}
                         for t, b, v in s.per_star],
            "seeds": [{"seed": r.seed, "expected_bits": r.expected_bits,
                       "realised_bits": r.realised_bits, "shrink_bits": r.shrink_bits,
                       "exposures": r.exposures, "planned": r.planned, "hours": r.hours,
                       "methods": sorted({st.method for st in r.stars})} for r in runs],
        })
    return {
        "format": "nightbits-simulate", "format_version": 1, "scenario": str(scenario.path),
        "seeds": list(experiment.seeds),
        "weather": {"night_loss": weather.night_loss, "hour_loss": weather.hour_loss},
        "refit": bool(refit),
        "realised_estimator": ("KL(new || old) in bits on the old samples (importance "
                               "reweighting)" + ("; bridge or kNN estimate after a refit"
                                                 if refit else "")),
        "strategies": strategies, "caution": CAUTION,
        "left_out": [{"target": e.target, "limit": e.limit, "reason": e.reason}
                     for e in excluded],
    }


def render_tables(experiment):
    """Return the printed comparison: strategies, cost to reach, and per star."""
    cadence = next((s for s in experiment.summaries if s.strategy == "cadence"), None)
    seeds = experiment.seeds
    lines = [f"Simulated run over {len(seeds)} seed(s) ({seeds[0]}..{seeds[-1]}); realised bits "
             "are KL(new || old) per star, summed; shrink is log2 of the fall in the product "
             "of the standard deviations of period, K and e.", "",
             f"{'strategy':<9} {'expected':>8} {'realised':>15} {'shrink':>15} {'exposures':>9} "
             f"{'hours':>6} {'to reach cadence':>17} {'saving':>7}"]
    for s in experiment.summaries:
        reach = "-" if s.reach_exposures is None else (
            f"{s.reach_exposures:.1f} ({100 * s.reach_fraction:.0f}%)")
        saving = _saving(s, cadence)
        saving_text = "-" if saving is None else f"{saving:+.0f}%"
        lines.append(
            f"{s.strategy:<9} {s.expected_bits:>8.2f} "
            f"{s.realised_bits_mean:>7.2f} +- {s.realised_bits_std:<4.2f} "
            f"{s.shrink_bits_mean:>7.2f} +- {s.shrink_bits_std:<4.2f} {s.exposures:>9.1f} "
            f"{s.hours:>6.1f} {reach:>17} {saving_text:>7}")
    lines += ["", "to reach cadence: exposures, in time order, until the strategy's realised "
              "bits reach cadence's whole-run realised bits in the same seed (mean over the "
              "seeds that reach it; their share in brackets); saving: fewer exposures than "
              "cadence's whole run.", "", "Per star, mean realised bits (shrink bits):"]
    names = [s.strategy for s in experiment.summaries]
    lines.append(f"{'target':<14}" + "".join(f"{n:>17}" for n in names))
    for k, (target, _, _) in enumerate(experiment.summaries[0].per_star):
        row = "".join(f"{s.per_star[k][1]:>8.2f} ({s.per_star[k][2]:>5.2f}) "
                      for s in experiment.summaries)
        lines.append(f"{target:<14}{row}")
    lines += ["", CAUTION]
    return "\n".join(lines) + "\n"


def _plot_bits(experiment, path):
    """Realised against expected bits, one point per strategy and seed (matplotlib)."""
    fig = _figure(figsize=(6, 5))
    ax = fig.subplots()
    top = 0.0
    for s in experiment.summaries:
        runs = [r for r in experiment.runs if r.strategy == s.strategy]
        x = [r.expected_bits for r in runs]
        y = [r.realised_bits for r in runs]
        ax.scatter(x, y, label=s.strategy, alpha=0.7)
        top = max(top, *x, *y)
    ax.plot([0, top * 1.05], [0, top * 1.05], color="grey", lw=1, ls="--", label="realised = "
            "expected")
    ax.set_xlabel("expected bits of the plan")
    ax.set_ylabel("realised bits (KL new || old)")
    ax.legend()
    fig.tight_layout()
    _save(fig, path)


def _plot_star(setup, experiment, target, path):
    """One star's period and semi-amplitude before and after, first seed, each strategy."""
    import numpy as np

    from planner.information.update import importance_weights, new_data_log_likelihood

    post = setup.posteriors[target]
    first = [r for r in experiment.runs if r.seed == experiment.seeds[0]]
    fig = _figure(figsize=(10, 4))
    axes = fig.subplots(1, 2)
    names = ("period_1", "semi_amplitude_1")
    if post.model.n_planets == 0:
        names = (f"offset_{setup.instrument_name}", f"jitter_{setup.instrument_name}")
    for ax, name in zip(axes, names, strict=True):
        values = post.param(name)
        bins = np.histogram_bin_edges(values, bins=40)
        ax.hist(values, bins=bins, histtype="step", color="black", label="before", density=True)
        for r in first:
            data = r.execution.data(target) if r.execution is not None else None
            if data is None:
                continue
            w, _ = importance_weights(new_data_log_likelihood(post, data))
            ax.hist(values, bins=bins, weights=w, histtype="step", density=True,
                    label=f"after, {r.strategy}")
        ax.set_xlabel(name)
        ax.legend(fontsize="small")
    truth = setup.truths[target]
    if truth.planets and post.model.n_planets:
        inner = min(truth.planets, key=lambda p: p.period_d)  # period_1 is the shortest
        axes[0].axvline(inner.period_d, color="grey", ls=":")
        axes[1].axvline(inner.semi_amplitude_ms, color="grey", ls=":")
    fig.suptitle(f"{target}: posterior before and after the simulated run (true value dotted)")
    fig.tight_layout()
    _save(fig, path)


def _figure(**kwargs):
    from planner.workflow.plots import new_figure

    return new_figure(**kwargs)


def _save(fig, path):
    """Save a figure atomically (temporary file in the same folder, then rename)."""
    import io

    from planner.workflow.outputs import atomic_write_bytes

    buf = io.BytesIO()
    fig.savefig(buf, format=Path(path).suffix.lstrip(".") or "png", dpi=110)
    atomic_write_bytes(path, buf.getvalue())
