"""Observing-run planning by expected information gain."""

__all__ = ["VERSION", "__version__"]

#: The release, the one place it is written (pyproject.toml reads it from here).
VERSION = "0.1.0"
__version__ = VERSION
