"""The ``nightbits`` command: fit, curves, plan, compare and replan an observing run.

Every command takes an optional SCENARIO (the bundled demo run when omitted; for ``replan``, the
scenario recorded in the plan file, which a given SCENARIO must match). Exit codes: 0 on
success, 2 on a user error (one sentence on stderr; ``--debug`` adds the traceback), 1 on an
internal error. This module only parses arguments, wires logging and the progress bar, and calls
:mod:`planner.workflow.pipeline`; heavy imports happen inside the command functions so ``--help`` is
instant.

Adding a command: write ``_add_<name>(sub)`` that registers its parser and sets
``func=_run_<name>``, and list it in :data:`COMMANDS`.
"""

from __future__ import annotations

import argparse
import logging
import signal
import sys
from pathlib import Path

from planner.cli.simulate import add_simulate
from planner.cli.support import (
    EXIT_INTERNAL,
    EXIT_OK,
    EXIT_USER,
    SCENARIO_HELP,
    ProgressBar,
    add_common_options,
    add_output_options,
    add_strict,
    fit_with_progress,
    open_session,
)

__all__ = ["COMMANDS", "build_parser", "main"]

log = logging.getLogger(__name__)

def _command(sub, name: str, summary: str, description: str, func,
             scenario_help: str = SCENARIO_HELP):
    """Register one subcommand with the options every command shares."""
    p = sub.add_parser(name, help=summary, description=description)
    add_common_options(p, scenario_help)
    p.set_defaults(func=func)
    return p


def _add_fit(sub) -> None:
    p = _command(sub, "fit", "sample every target's orbit posterior (cached)",
                 "Sample the orbit posterior of every target from its past velocities and keep "
                 "the samples in the cache. A target with planets: auto is fitted with 0 to "
                 "max_planets planets and its model probabilities P(0), P(1), ... are printed.",
                 _run_fit)
    p.add_argument("--json", metavar="FILE", default=None,
                   help="also write every target's model probabilities and evidences to FILE")


def _add_curves(sub) -> None:
    p = _command(sub, "curves", "information curves: bits of one more velocity over the run",
                 "Print, per target, the expected information of one more velocity over the "
                 "run (best time and value per night).", _run_curves)
    p.add_argument("--target", metavar="ID", action="append", help="only this target (repeat)")
    p.add_argument("--plot", metavar="FILE", help="also draw the curves to FILE (needs matplotlib)")
    p.add_argument("--about", choices=("period", "alias"), default=None,
                   help="also print the bits about part of the orbit: 'period' (a lower bound "
                        "from equal-count period intervals) or 'alias' (which period mode)")


def _limit_options(p, default: str) -> None:
    p.add_argument("--work-limit", type=float, default=None, metavar="W",
                   help="search work in CP-SAT deterministic time units; the same input gives "
                        f"the same plan (default: {default})")
    p.add_argument("--time-limit", type=float, default=None, metavar="S",
                   help="search for S seconds of wall clock instead (at the telescope); the "
                        "plan may then differ between runs")


def _plan_options(p, out_default: str | None) -> None:
    p.add_argument("--strategy", choices=("joint", "greedy", "cadence"), default=None,
                   help="allocation strategy (default: the scenario's solver.strategy, joint)")
    _limit_options(p, "solver.work_limit, for replan solver.replan_work_limit")
    add_output_options(p, out_default=out_default,
                       out_help="folder for plan.json, plan.csv and the queue table plan.ecsv "
                                "(default: %(default)s)",
                       written="plan in DIR", plot_help="also draw the night altitude charts "
                                                        "to FILE")


def _add_plan(sub) -> None:
    p = _command(sub, "plan", "plan the run and print the hour-by-hour schedule",
                 "Plan every night of the run at once, print the hour-by-hour schedule and "
                 "a per-target summary, and write DIR/plan.json, DIR/plan.csv and the queue "
                 "table DIR/plan.ecsv.", _run_plan)
    _plan_options(p, "nightbits-plan")
    add_strict(p)


def _add_compare(sub) -> None:
    p = _command(sub, "compare", "joint, greedy and cadence plans on one exact score",
                 "Plan the run with every strategy and compare them on the exact joint "
                 "information score.", _run_compare)
    _limit_options(p, "solver.work_limit")
    add_output_options(p, out_default=None,
                       out_help="also write DIR/compare.json (one record per strategy)",
                       written="DIR/compare.json",
                       plot_help="also draw the comparison bar chart to FILE")
    add_strict(p)


def _add_replan(sub) -> None:
    p = _command(sub, "replan", "re-plan after lost time, executed visits or new velocities",
                 "Drop lost nights or hours, keep what was executed, fold in new velocities and "
                 "plan the rest of the run. SCENARIO defaults to the scenario file recorded in "
                 "the plan; a scenario whose targets or site differ from the plan's is "
                 "refused.", _run_replan,
                 scenario_help="scenario YAML file (default: the one recorded in the plan "
                               "file; it must have the plan's targets and site)")
    p.add_argument("--plan", required=True, metavar="FILE", help="the plan.json to start from")
    p.add_argument("--lost", action="append", default=[], metavar="NIGHT|START/END",
                   help="a lost night (its local evening date YYYY-MM-DD) or a lost interval "
                        "START/END, each time UTC (2027-10-06T02:00Z), with an offset "
                        "(2027-10-05T23:00-03:00) or local to the site ('2027-10-05 23:00 "
                        "local'); repeat for more")
    p.add_argument("--done", metavar="FILE",
                   help="CSV of executed visits (plan.csv rows: target, start_utc at least)")
    p.add_argument("--rvs", metavar="FILE", action="append", default=[],
                   help="CSV of new velocities: target, rv, rv_err [m/s] and time (BJD_TDB) or "
                        "mid_utc (UTC mid-exposure); rows without rv are skipped, so the "
                        "observing log given to --done serves here too; repeatable")
    p.add_argument("--now", metavar="TIME",
                   help="the present, UTC (2027-10-06T02:00Z), with an offset or local to the "
                        "site ('2027-10-05 23:00 local'); planned visits before it count as "
                        "executed unless lost (default: the system clock, once the run has "
                        "begun)")
    _plan_options(p, "nightbits-replan")


#: The subcommands, in the order ``--help`` lists them.
COMMANDS = (_add_fit, _add_curves, _add_plan, _add_compare, _add_replan, add_simulate)


def build_parser() -> argparse.ArgumentParser:
    """Return the argument parser of the ``nightbits`` command."""
    parser = argparse.ArgumentParser(
        prog="nightbits",
        description="Plan precision radial-velocity observing runs by expected information "
                    "gain. Schedules never replace the observatory's own safety rules.")
    from planner import VERSION

    parser.add_argument("--version", action="version", version=f"nightbits {VERSION}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks and debug logs")
    parser.add_argument("-v", "--verbose", action="store_true", help="log progress on stderr")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for add in COMMANDS:
        add(sub)
    return parser


def _run_fit(args) -> int:
    pipeline, scenario, cache = open_session(args)
    from planner.workflow.model_file import check_models_file, write_models_json
    from planner.workflow.report import fit_summary, model_summary

    if args.json:
        check_models_file(args.json)
    fits = fit_with_progress(args, pipeline, scenario, cache, models=True)
    sys.stdout.write(fit_summary(scenario, {name: f.chosen for name, f in fits.items()}))
    table = model_summary(scenario, fits)
    if table:
        sys.stdout.write("\n" + table)
    if args.json:
        write_models_json(scenario, fits, args.json)
    return EXIT_OK


def _run_curves(args) -> int:
    pipeline, scenario, cache = open_session(args)
    for target in args.target or ():
        scenario.target(target)
    _check_plot(args)
    posteriors = fit_with_progress(args, pipeline, scenario, cache)
    run = pipeline.prepare(scenario, posteriors)
    from planner.workflow.report import curves_summary

    sys.stdout.write(curves_summary(run, args.target))
    if args.about:
        from dataclasses import replace

        from planner.information.partial import run_label_bits

        what = {"period": "the period alone (a lower bound: equal-count period intervals)",
                "alias": "which period mode (alias) is right (0 for a single mode)"}[args.about]
        sys.stdout.write(f"\nabout {what}, first signal:\n")
        part = replace(run, bits=run_label_bits(run, args.about, args.target, jobs=args.jobs))
        sys.stdout.write(curves_summary(part, args.target))
    if args.plot:
        from planner.workflow.plots import plot_curves

        plot_curves(run, args.plot, targets=args.target)
        sys.stderr.write(f"wrote {args.plot}\n")
    return EXIT_OK


def _run_plan(args) -> int:
    from planner.workflow.file_set import OutLock
    from planner.workflow.outputs import write_plan
    from planner.workflow.report import render_schedule

    pipeline, scenario, cache = open_session(args)
    pipeline.check_out_folder(args.out, args.force)
    lock = OutLock(args.out)
    args.locks.append(lock)
    _check_plot(args)
    limit = pipeline.search_limit(scenario, args.time_limit, args.work_limit)
    posteriors = fit_with_progress(args, pipeline, scenario, cache)
    run = pipeline.prepare(scenario, posteriors, strict=args.strict)
    result = pipeline.make_plan(run, strategy=args.strategy, time_limit_s=limit)
    sys.stdout.write(render_schedule(result.plan_file))
    _write_plan_set(args, pipeline, write_plan, result, run, lock, scenario)
    return EXIT_OK


def _queue(scenario, plan_file) -> dict:
    """Return the queue table ``plan.ecsv`` of a plan, by file name."""
    from planner.workflow.queue_table import queue_text

    return {"plan.ecsv": queue_text(plan_file, {t.id: t.v_mag for t in scenario.targets})}


def _write_plan_set(args, pipeline, write_plan, result, run, lock, scenario) -> None:
    """Write plan.json, plan.csv, plan.ecsv, curves.npz and the --plot as one set; say so."""
    extra = {**_queue(scenario, result.plan_file), "curves.npz": pipeline.curves_bytes(run)}
    plot = None
    if args.plot:
        from planner.workflow.plots import figure_bytes, night_figure

        plot = (args.plot, figure_bytes(night_figure(run, result.plan_file), args.plot))
    what = f"the new plan in {args.out}" + (f" and {args.plot}" if plot else "")
    paths = write_plan(args.out, result.plan_file, force=args.force, extra=extra, plot=plot,
                       lock=lock, on_commit=lambda: args.written.append(what))
    sys.stderr.write(f"wrote {paths[0]}, {paths[1]} and {paths[0].parent / 'plan.ecsv'}\n")
    if plot:
        sys.stderr.write(f"wrote {args.plot}\n")


def _check_plot(args) -> None:
    """Check ``--plot`` (its folder, suffix and matplotlib) before any work."""
    if getattr(args, "plot", None):
        from planner.workflow.plots import check_plot_path

        check_plot_path(args.plot)


def _run_compare(args) -> int:
    pipeline, scenario, cache = open_session(args)
    target = None
    if args.out is not None:
        target = Path(args.out) / "compare.json"
        pipeline.check_out_folder(args.out, args.force, names=(target.name,))
    _check_plot(args)
    limit = pipeline.search_limit(scenario, args.time_limit, args.work_limit)
    posteriors = fit_with_progress(args, pipeline, scenario, cache)
    run = pipeline.prepare(scenario, posteriors, strict=args.strict)
    comparison = pipeline.compare(run, time_limit_s=limit)
    sys.stdout.write(comparison.text)
    if target is not None:
        from planner.workflow.outputs import write_compare_json

        _earlier_settings(target.parent, comparison.provenance)
        target.parent.mkdir(parents=True, exist_ok=True)
        write_compare_json(comparison, target, comparison.provenance)
        args.written.append(str(target))
        sys.stderr.write(f"wrote {target}\n")
    if args.plot:
        from planner.workflow.plots import plot_comparison

        plot_comparison(comparison, args.plot)
        args.written.append(args.plot)
        sys.stderr.write(f"wrote {args.plot}\n")
    return EXIT_OK


def _earlier_settings(folder: Path, current: dict) -> None:
    """Say on stderr when a plan or comparison in ``folder`` was made under other settings."""
    import json

    from planner.workflow.provenance import other_settings_note

    for name in ("plan.json", "compare.json"):
        try:
            recorded = json.loads((folder / name).read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, ValueError):
            continue  # nothing readable there: nothing to say
        if not isinstance(recorded, dict):
            continue
        skip = ("solver strategy",) if name == "plan.json" else ()
        sys.stderr.write(other_settings_note(str(folder / name), recorded.get("provenance"),
                                             current, skip=skip))


def _run_replan(args) -> int:
    from planner.workflow import pipeline, replan
    from planner.workflow.file_set import OutLock
    from planner.workflow.outputs import read_plan, write_plan
    from planner.workflow.report import render_schedule

    old = read_plan(args.plan)  # first: it may settle the plan's own folder, under its lock
    pipeline.check_out_folder(args.out, args.force)
    lock = OutLock(args.out)
    args.locks.append(lock)
    _check_plot(args)
    path = args.scenario if args.scenario is not None else replan.recorded_scenario(old, args.plan)
    scenario = pipeline.load(path)
    replan.check_scenario_matches(old, scenario, args.plan)
    cache = pipeline.cache_folder(scenario, args.cache, args.no_cache)
    request = replan.parse_request(old, scenario, lost=args.lost, done_file=args.done,
                                   rv_files=args.rvs, now=args.now, clock_jd=_clock_jd())
    limit = pipeline.search_limit(scenario, args.time_limit, args.work_limit, replan=True)
    posteriors = fit_with_progress(args, pipeline, scenario, cache)
    saved = pipeline.load_curves(Path(args.plan).parent / "curves.npz")
    result = replan.replan(scenario, posteriors, old, request, strategy=args.strategy,
                           time_limit_s=limit, reuse=saved,
                           progress=ProgressBar(sys.stderr, "re-planning"))
    sys.stdout.write(render_schedule(result.plan_file))
    sys.stdout.write(result.changes)
    _write_plan_set(args, pipeline, write_plan, result, result.run, lock, scenario)
    return EXIT_OK


def _clock_jd() -> float:
    """Return the time from the system clock, JD (UTC scale): what "now" is without --now."""
    from planner.clock import jd_now

    return jd_now()


def _configure_logging(args) -> None:
    level = logging.DEBUG if args.debug else logging.INFO if args.verbose else logging.WARNING
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("nightbits: %(levelname)s: %(message)s"))
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(level)
    for noisy in ("matplotlib", "PIL"):
        logging.getLogger(noisy).setLevel(max(level, logging.WARNING))


def main(argv: list[str] | None = None) -> int:
    """Run the ``nightbits`` command line.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit code: 0 success, 2 user error, 1 internal error.
    """
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse has printed its own message or the help
        return int(exc.code or 0) and EXIT_USER
    _configure_logging(args)
    from inference.errors import InferenceError
    from planner.errors import PlannerError
    from planner.sky import offline

    offline.configure()  # astropy offline, once, for the whole command (planner.sky.offline)

    args.written, args.locks = [], []
    import threading

    main_thread = threading.current_thread() is threading.main_thread()
    previous = signal.signal(signal.SIGTERM, _terminated) if main_thread else None
    try:
        return args.func(args)
    except (PlannerError, InferenceError) as exc:  # user errors: one sentence each
        if args.debug:  # the traceback too, but still the exit code of a user error
            import traceback

            traceback.print_exc(file=sys.stderr)
        sys.stderr.write(f"nightbits {args.command}: {exc}\n")
        return EXIT_USER
    except KeyboardInterrupt:
        done = (f"only {', '.join(args.written)} had been written" if args.written
                else "nothing was written and earlier outputs are as they were")
        sys.stderr.write(f"nightbits {args.command}: interrupted; {done}.\n")
        return EXIT_INTERRUPTED
    except Exception as exc:
        if args.debug:
            raise
        sys.stderr.write(f"nightbits {args.command}: internal error ({type(exc).__name__}: "
                         f"{exc}); rerun with --debug for the traceback and report it.\n")
        return EXIT_INTERNAL
    finally:
        for lock in args.locks:
            lock.release()
        if main_thread:
            signal.signal(signal.SIGTERM, previous)


#: Exit code after SIGINT or SIGTERM (the shell's 128 + SIGINT).
EXIT_INTERRUPTED = 130


def _terminated(number, frame):
    """SIGTERM handler: end like Ctrl-C (temporaries removed, the old outputs kept)."""
    raise KeyboardInterrupt
