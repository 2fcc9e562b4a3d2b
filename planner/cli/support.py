"""What every nightbits command shares: exit codes, common options, the session, progress.

Public so that each command module (``planner.cli.main``, ``planner.cli.simulate``) imports it
instead of another command module's private names.
"""

from __future__ import annotations

import argparse
import logging
import sys
import time

__all__ = [
    "EXIT_INTERNAL",
    "EXIT_OK",
    "EXIT_USER",
    "ProgressBar",
    "SCENARIO_HELP",
    "add_common_options",
    "add_output_options",
    "add_strict",
    "fit_with_progress",
    "open_session",
]

log = logging.getLogger(__name__)

#: Exit codes: success, internal error (a bug), bad input (one sentence on stderr).
EXIT_OK, EXIT_INTERNAL, EXIT_USER = 0, 1, 2


class ProgressBar:
    """A one-line progress bar on stderr (only when stderr is a terminal)."""

    def __init__(self, stream, label: str) -> None:
        self.stream, self.label, self.start = stream, label, time.monotonic()
        self.live = bool(getattr(stream, "isatty", lambda: False)())

    def __call__(self, done: int, total: int, label: str = "") -> None:
        """Show that ``done`` of ``total`` steps are finished, the current one named ``label``."""
        if not self.live:
            log.info("%s %d/%d %s", self.label, done, total, label)
            return
        width = 30
        filled = int(width * done / max(total, 1))
        elapsed = time.monotonic() - self.start
        line = (f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total} "
                f"{elapsed:5.0f}s {label[:24]:<24}")
        self.stream.write(line)
        if done >= total:
            self.stream.write("\n")
        self.stream.flush()


#: Help text of the SCENARIO argument for commands whose default is the bundled demo.
SCENARIO_HELP = "scenario YAML file (default: the bundled invented demo run)"


def _positive_int(text: str) -> int:
    """Argparse type: a whole number of at least 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{value} is not at least 1")
    return value


def add_common_options(parser: argparse.ArgumentParser,
                       scenario_help: str = SCENARIO_HELP) -> None:
    """Add the options every command shares: SCENARIO, --cache, --no-cache, --jobs, --scheduler."""
    parser.add_argument("scenario", nargs="?", default=None, metavar="SCENARIO",
                        help=scenario_help)
    parser.add_argument("--cache", metavar="DIR", default=None,
                        help="posterior cache folder (default: the scenario's 'cache:', else "
                             "$NIGHTBITS_CACHE or ~/.cache/nightbits)")
    parser.add_argument("--no-cache", action="store_true", help="fit again, keep nothing")
    parser.add_argument("--jobs", type=_positive_int, default=None, metavar="N",
                        help="processes for fitting (default: all cores)")
    parser.add_argument("--scheduler", metavar="ADDRESS", default=None,
                        help="run the fits on a Dask distributed cluster, e.g. "
                             "tcp://host:8786 (default: $NIGHTBITS_SCHEDULER, else local "
                             "processes; needs the dask extra)")


def add_strict(parser: argparse.ArgumentParser) -> None:
    """Add ``--strict``: a never-observable target is an error instead of being left out."""
    parser.add_argument("--strict", action="store_true",
                        help="stop with an error if a target can never be observed, instead "
                             "of leaving it out and listing it with the limit that excludes it")


def add_output_options(parser: argparse.ArgumentParser, *, out_default: str | None,
                       out_help: str, written: str, plot_help: str) -> None:
    """Add ``--out DIR``, ``--force`` (replace ``written`` in DIR) and ``--plot FILE``."""
    parser.add_argument("--out", metavar="DIR", default=out_default, help=out_help)
    parser.add_argument("--force", action="store_true", help=f"replace an existing {written}")
    parser.add_argument("--plot", metavar="FILE", help=plot_help)


def open_session(args):
    """Load the scenario named on the command line; return (pipeline, scenario, cache folder)."""
    from planner.workflow import pipeline

    scenario = pipeline.load(args.scenario)
    cache = pipeline.cache_folder(scenario, args.cache, args.no_cache)
    return pipeline, scenario, cache


def fit_with_progress(args, pipeline, scenario, cache, models=False):
    """Fit (or load from the cache) every target's posterior, with a progress bar on stderr.

    With ``models`` the result is every target's :class:`~planner.workflow.fitting.ModelFits`
    (all numbers of planets compared) instead of the one posterior the later stages use.
    """
    bar = ProgressBar(sys.stderr, "fitting")
    fit = pipeline.fit_models if models else pipeline.fit_posteriors
    return fit(scenario, cache=cache, jobs=args.jobs, progress=bar,
               scheduler=pipeline.scheduler_address(args.scheduler))
