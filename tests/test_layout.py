"""The installed project exposes its two import packages."""

import importlib


def test_packages_import():
    for name in ("inference", "planner", "planner.allocation"):
        assert importlib.import_module(name).__doc__
