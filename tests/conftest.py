"""Shared pytest fixtures."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

# The tests import helpers from tests/_testing.py as ``from _testing import ...``.
sys.path.insert(0, str(Path(__file__).parent))

# One BLAS thread: on a shared 2-core machine a multithreaded OpenBLAS turns a
# 2 ms SVD into seconds of oversubscription, and results do not depend on it.
threadpool_limits(limits=1, user_api="blas")


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator; every stochastic test starts from the same state."""
    return np.random.default_rng(20261201)
