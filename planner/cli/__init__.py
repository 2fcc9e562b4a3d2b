"""Stage 6, the command line: the ``nightbits`` command over the workflow and simulation.

Takes command-line arguments; gives terminal output, files and exit codes (0 success, 2 bad
input). Only this stage prints.
"""

from planner.cli.main import main

__all__ = [
    "main",
]
