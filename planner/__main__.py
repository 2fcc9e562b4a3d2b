"""Run the ``nightbits`` command as ``python -m planner``."""

import sys

from planner.cli.main import main

if __name__ == "__main__":
    sys.exit(main())
