"""Shared pytest configuration for the nightbits test suite."""

from pathlib import Path

import numpy as np
import pytest

#: Folder of published RV datasets used as outside references (read-only, beside the repo).
SHARED_RV = Path(__file__).resolve().parents[2] / "shared" / "data" / "rv"


@pytest.fixture
def rng():
    """A fresh, seeded generator per test (explicit randomness, no global seeding)."""
    return np.random.default_rng(20261201)


@pytest.fixture(scope="session")
def cache_dir(tmp_path_factory):
    """One posterior cache for the whole session: the tiny scenario's stars are fitted once and
    every end-to-end test module reads them from here."""
    return tmp_path_factory.getbasetemp() / "nightbits-cache"
