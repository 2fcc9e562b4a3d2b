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
