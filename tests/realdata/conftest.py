"""Fixtures of the real-data set (``-m realdata``)."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))

from _lab import RealLab


@pytest.fixture
def real_lab(tmp_path: Path) -> RealLab:
    return RealLab(tmp_path)
