"""Shared pytest fixtures."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

# The tests import helpers from tests/_testing.py as ``from _testing import ...``.
sys.path.insert(0, str(Path(__file__).parent))


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator; every stochastic test starts from the same state."""
    return np.random.default_rng(20261201)
